"""``archivist repair PROJECT --out DIR``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from ..printable import printable
from .errors import handle_errors
from .options import progress_for, progress_options


@click.command("repair", short_help="Write a repaired copy of PROJECT, every change logged.")
@click.argument("project", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), metavar="DIR", help="Folder to write the repaired copy into (never inside PROJECT).")
@click.option("--only", "only", multiple=True, metavar="REPAIR", help="Apply only this repair (repeatable).")
@click.option("--skip", "skip", multiple=True, metavar="REPAIR", help="Do not apply this repair (repeatable).")
@click.option("--dry-run", is_flag=True, help="Print the change log; write nothing.")
@click.option("--force", is_flag=True, help="Replace an existing DIR that an earlier repair wrote, unchanged since (or an empty one).")
@click.option("--build-polygons", is_flag=True, help="Build the unit polygons from contacts, faults and frame, coded by label points.")
@click.option("--jobs", "-j", "jobs", type=click.IntRange(min=0), default=None, show_default="every core",
              help="Threads the checks before and after run their rule families on side by side (0: every core; 1: "
                   "everything in one thread, one process). The repairs run in one thread; the copy and the log are "
                   "the same whatever the number.")
@progress_options
@handle_errors
def repair_command(project: Path, out: Path | None, only: tuple[str, ...], skip: tuple[str, ...], dry_run: bool, force: bool,
                   build_polygons: bool, jobs: int | None, quiet: bool, verbose: bool) -> None:
    """Repair a copy of the map PROJECT into DIR, then check the copy.

    PROJECT itself is never changed. The repairs (see --only/--skip) snap
    near-coincident edges, give thin gaps and small overlaps to a neighbour,
    merge slivers and dissolve same-unit neighbours with no fault between
    them, each bounded by the thresholds of [checks] and [repair]. DIR gets
    the repaired files, their manifest, repair-log.json (one entry per
    change) and repair-changes.gpkg (the changed areas before and after).
    Defects that need a geologist are left and listed.

    Exit 0: repaired (or nothing to repair). 2: could not run.
    """
    from ..repair.api import repair
    from ..repair.log import CAUTION, LOG_NAME, render_log_text

    if out is None and not dry_run:
        raise click.UsageError("--out DIR is required (or --dry-run)")
    with progress_for(quiet, verbose) as progress:
        result = repair(project, out, only=only, skip=skip, dry_run=dry_run, force=force,
                        build_polygons=build_polygons, progress=progress, jobs=0 if jobs is None else jobs)
    if dry_run:
        sys.stdout.write(render_log_text(result.log))
    rules = sorted(set(result.before) | set(result.after))
    click.echo("Findings by rule, before -> after:")
    for rule in rules:
        click.echo(f"  {rule:<28} {result.before.get(rule, 0):>6} -> {result.after.get(rule, 0):>6}")
    click.echo(f"  {'total':<28} {sum(result.before.values()):>6} -> {sum(result.after.values()):>6}")
    click.echo("Changes by repair:")
    for name, n in result.per_repair().items():
        click.echo(f"  {name:<28} {n:>6}")
    if result.left:
        where = "above" if dry_run else f"in {printable(Path(result.out or '') / LOG_NAME)}"
        click.echo(f"Left for the geologist: {len(result.left)} (listed {where}).")
    for w in result.log.get("layers_written") or []:
        if w["how"] != "edited":  # GDAL made the table anew from the values: widths, constraints, defaults not kept
            click.echo(f"Layer {w['layer']} written anew in {w['path']} (field definitions as GDAL makes them): {w['reason']}.")
    if dry_run:
        click.echo("Dry run: nothing written.")
    else:
        click.echo(f"Repaired copy: {printable(result.out)}")
    click.echo(CAUTION)
