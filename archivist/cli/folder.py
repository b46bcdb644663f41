"""``archivist check FOLDER`` on a folder of map projects: each checked on its own, one summary table."""

from __future__ import annotations

from pathlib import Path

import click


def check_folder_run(path: Path, fmt: str, output: Path | None, strict: bool, only: tuple[str, ...], rules: tuple[str, ...],
                     force: bool, html_out: Path | None, gpkg_out: Path | None, quiet: bool, verbose: bool,
                     jobs: int = 0) -> int:
    """Check every project below ``path``, print (or write to ``output``) their reports and the summary; the exit code."""
    from ..batch import check_folder, project_folders, render_folder_json, render_folder_text
    from ..errors import ArchivistError
    from ..fsutil import atomic_write_text, guard_outputs
    from .options import progress_for

    for flag, value in (("--html", html_out), ("--findings-gpkg", gpkg_out)):
        if value is not None:
            raise ArchivistError(f"{path}: a folder of map projects; {flag} draws one project's map: give it one project folder")
    guard_outputs([(output, "--output")], force=force, project_roots=[*project_folders(path)])
    with progress_for(quiet, verbose) as progress:
        result = check_folder(path, only=only, rules=rules, strict=strict, progress=progress, jobs=jobs)
    text = render_folder_json(result) if fmt == "json" else render_folder_text(result)
    if output is not None:
        atomic_write_text(output, text)
    else:
        click.echo(text, nl=False)
    return result.exit_code
