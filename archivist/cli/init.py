"""``archivist init DIR``."""

from __future__ import annotations

from pathlib import Path

import click

from ..printable import printable
from .errors import handle_errors


@click.command("init", short_help="Write an archivist.toml guessed from the data in PATH.")
@click.argument("path", type=click.Path(path_type=Path))
@handle_errors
def init_command(path: Path) -> None:
    """Write a commented archivist.toml for the map project in PATH (a folder or a GeoPackage).

    The role of each layer and table (units, lines, extent, samples,
    structures, legend, analyses) is guessed from geometry types, field names
    and values, and the map CRS is read from the data. Confirm the lines
    marked CONFIRM, then run 'archivist check'. An existing archivist.toml is
    never replaced (exit 2).
    """
    from ..scaffold import write_manifest

    target, inf = write_manifest(path)
    click.echo(f"Wrote {printable(target)}")
    listed = tuple(r for r in inf.placed if r.startswith("lines["))
    order = ("units", "lines", "contacts", "faults", "frame", *listed, "extent", "samples", "structures", "legend", "analyses")
    for role in order:
        if role in inf.placed:
            click.echo(f"  {role:<10}  {printable(inf.placed[role].source.described)}")
    if "units" not in inf.placed:
        click.echo("  No unit polygons recognised: name them in [layers.units].")
    for label, why in inf.unplaced:
        click.echo(f"  not placed: {printable(label)} ({printable(why)})")
    n = sum(1 for line in target.read_text(encoding="utf-8").splitlines() if "CONFIRM" in line)
    click.echo(f"Confirm the {n} line{'s' if n != 1 else ''} marked CONFIRM in {printable(target)}, "
               f"then run: archivist check {printable(target.parent)}")
