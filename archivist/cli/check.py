"""``archivist check PATH``."""

from __future__ import annotations

import sys
from contextlib import ExitStack
from pathlib import Path

import click

from .errors import handle_errors
from ..registry import FAMILIES
from .options import details_option, emit_report, jobs_option, only_help, progress_for, progress_options

# `archive` rules need an archive: they run under `archivist audit`.
CHECK_FAMILIES = tuple(f for f in FAMILIES if f != "archive")


@click.command("check", short_help="Check a map project, its archivist.toml or one map file.")
@click.argument("path", type=click.Path(path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text", show_default=True, help="Report format.")
@click.option("--output", "-o", type=click.Path(path_type=Path), help="Write the report to FILE instead of stdout.")
@click.option("--strict", is_flag=True, help="Warnings fail the run too (exit 1).")
@click.option("--only", "only", multiple=True, metavar="FAMILY", help=only_help(CHECK_FAMILIES))
@click.option("--rule", "rules", multiple=True, metavar="RULE", help="Run only this rule (repeatable).")
@click.option("--force", is_flag=True, help="Replace existing output files.")
@click.option("--html", "html_out", type=click.Path(path_type=Path), metavar="FILE", help="Also write the report as one self-contained HTML page with a map.")
@click.option(
    "--findings-gpkg",
    "gpkg_out",
    type=click.Path(path_type=Path),
    metavar="FILE",
    help="Also write the findings as a GeoPackage (.gpkg; one layer per geometry type) to open over the map in a GIS.",
)
@details_option
@click.option(
    "--scheduler",
    metavar="ADDRESS",
    help="Run the partitioned checks on a Dask cluster: 'local' starts one on this machine, or give a running "
    "scheduler's address (tcp://host:8786). Needs the dask extra: pip install 'archivist[dask]'.",
)
@click.option(
    "--worker-memory",
    metavar="SIZE",
    help="With --scheduler local: each worker's memory limit (4GB, 500MiB; default: the machine's memory shared out).",
)
@jobs_option
@progress_options
@handle_errors
def check_command(path: Path, fmt: str, output: Path | None, strict: bool, only: tuple[str, ...], rules: tuple[str, ...],
                  force: bool, html_out: Path | None, quiet: bool, verbose: bool, gpkg_out: Path | None = None,
                  details: bool = False, jobs: int | None = None, scheduler: str | None = None,
                  worker_memory: str | None = None) -> None:
    """Check the map project at PATH (a folder or its archivist.toml), one map file, or each project in a folder of projects.

    A GeoPackage or other vector file given alone is checked without a
    manifest: the role of each layer is guessed from the data, as
    'archivist init' guesses it, and the report says so; nothing is written
    next to the file. The text report is a summary that fits a terminal
    (counts per rule, the worst places first); --details lists every finding.

    Exit 0: no errors. 1: errors (or warnings with --strict). 2: could not run.
    A folder of projects exits with the worst of its projects' codes.
    """
    from ..batch import project_folders
    from ..errors import ArchivistError

    if scheduler is not None:
        from ..cluster import require_dask

        require_dask()  # before anything is read: without the extra, one line naming the install command
    elif worker_memory is not None:
        raise ArchivistError("--worker-memory sizes the workers of --scheduler local; give both")
    if project_folders(path):  # a folder of projects, each with its own archivist.toml
        if scheduler is not None:
            raise ArchivistError(f"{path}: a folder of map projects; --scheduler checks one project: give its folder")
        from .folder import check_folder_run

        sys.exit(check_folder_run(path, fmt, output, strict, only, rules, force, html_out, gpkg_out, quiet, verbose,
                                     0 if jobs is None else jobs))
    from .. import engine
    from ..fsutil import guard_outputs
    from ..manifest import find_manifest
    from ..project import load_project

    root, _ = find_manifest(path)
    if gpkg_out is not None and Path(gpkg_out).suffix.lower() != ".gpkg":
        raise ArchivistError(f"{gpkg_out}: a findings GeoPackage must end in .gpkg")
    guard_outputs([(output, "--output"), (html_out, "--html"), (gpkg_out, "--findings-gpkg")], force=force, project_roots=[root])
    with progress_for(quiet, verbose) as progress, ExitStack() as stack:
        executor = None
        if scheduler is not None:  # reached (or started) first: a wrong address fails before a long read
            from ..cluster import open_executor

            executor = stack.enter_context(open_executor(scheduler, progress, workers=jobs or None, memory_limit=worker_memory, root=root))
        project = load_project(path, progress=progress)
        if executor is None:
            report = engine.check(project, only=only, rules=rules, progress=progress, jobs=0 if jobs is None else jobs)
        else:
            executor.reading(project)  # the workers read their partitions' features from the project's files
            from ..cluster import partitions

            report = engine.check(project, only=only, rules=rules, progress=progress, executor=executor,
                                  parts=partitions(project, executor.workers))
        stack.close()  # the cluster is stopped before the outputs are written
        if html_out is not None:
            from ..report.html import write_html

            with progress.step(f"writing {html_out}"):
                write_html(report, project, html_out)
        if gpkg_out is not None:
            from ..report.gpkg import write_findings_gpkg

            with progress.step(f"writing {gpkg_out}"):
                write_findings_gpkg(report, gpkg_out, crs=project.crs)
    emit_report(report, fmt, output, details)
    sys.exit(1 if report.failed(strict) else 0)
