"""``archivist diff OLD NEW``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from .audit import limit_options, make_limits
from .errors import handle_errors


def _inside_of(path: Path) -> Path | None:
    p = Path(path)
    if p.is_dir():
        return p
    if p.suffix.lower() == ".toml":
        return p.parent
    return None


@click.command("diff", short_help="List what changed between two versions of a map.")
@click.argument("old", type=click.Path(path_type=Path))
@click.argument("new", type=click.Path(path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text", show_default=True, help="Output format.")
@click.option("--output", "-o", type=click.Path(path_type=Path), help="Write the changes to FILE instead of stdout.")
@click.option("--gpkg", "gpkg", type=click.Path(path_type=Path), metavar="FILE", help="Also write the changed areas, lines and points to a GeoPackage.")
@click.option("--force", is_flag=True, help="Replace existing output files.")
@limit_options
@handle_errors
def diff_command(old: Path, new: Path, fmt: str, output: Path | None, gpkg: Path | None, force: bool,
                 max_members: int | None, max_size: str | None, max_ratio: float | None) -> None:
    """List what changed from OLD to NEW (projects or packages, folders or zips).

    Features are matched by geometry and attributes, not by feature id: a
    moved contact or a reshaped polygon is one change, with the area gained
    and lost per unit.

    Exit 0: no changes. 1: changes found. 2: could not run.
    """
    from ..diff import diff
    from ..fsutil import atomic_write_text, guard_outputs
    from ..report.diff import render_diff_json, render_diff_text, write_diff_gpkg, write_diff_text

    guard_outputs([(output, "--output"), (gpkg, "--gpkg")], force=force, project_roots=[_inside_of(old), _inside_of(new)])
    report = diff(old, new, limits=make_limits(max_members, max_size, max_ratio))
    if gpkg is not None:
        write_diff_gpkg(report, Path(gpkg), report.crs_object)
    if output is not None:
        atomic_write_text(output, render_diff_json(report) if fmt == "json" else render_diff_text(report))
    elif fmt == "json":
        sys.stdout.write(render_diff_json(report))
    else:
        write_diff_text(report, sys.stdout)
    sys.exit(1 if report.changes else 0)
