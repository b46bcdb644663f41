"""``archivist unpack ARCHIVE DIR``."""

from __future__ import annotations

from pathlib import Path

import click

from .audit import limit_options, make_limits
from .errors import CommandFailed, handle_errors


@click.command("unpack", short_help="Turn a package ARCHIVE into an editable project in DIR.")
@click.argument("archive", type=click.Path(path_type=Path))
@click.argument("directory", metavar="DIR", type=click.Path(path_type=Path))
@click.option(
    "--force",
    is_flag=True,
    help="Replace DIR if an earlier unpack made it and it holds no changes (only once the new project is complete).",
)
@limit_options
@handle_errors
def unpack_command(archive: Path, directory: Path, force: bool, max_members: int | None, max_size: str | None,
                   max_ratio: float | None) -> None:
    """Turn the archivist package ARCHIVE (folder or zip) into an editable project in DIR.

    The package's checksums are verified first; a damaged package is refused.
    DIR gets the input files as the authors handed them in and their
    archivist.toml, with the version bumped (1.0.0 becomes 1.0.1-dev) and
    map.derived_from naming the package. DIR also gets a small record of
    what unpack wrote (.archivist-unpack.json); --force replaces only such a
    folder, and only while it holds nothing else and no changed file.

    Exit 0: unpacked. 2: could not (not a package, damaged, DIR exists
    without --force, or DIR holds other files, changes or the package).
    """
    from ..interrupt import Interrupted
    from ..package.unpack import unpack
    from ..printable import printable

    try:
        result = unpack(archive, directory, force=force, limits=make_limits(max_members, max_size, max_ratio))
    except (Interrupted, KeyboardInterrupt):
        raise CommandFailed(f"unpack interrupted; {directory} was not written or changed", 130) from None
    shown, arc = printable(result.path), printable(archive)
    click.echo(f"Unpacked {arc} into {shown}: {len(result.files)} files "
               f"({'the input files as handed in' if result.origin == 'source' else 'the package files'}).")
    click.echo(f"Version {printable(result.previous_version)} -> {printable(result.version)}; "
               f"map.derived_from = \"{printable(result.derived_from)}\".")
    click.echo(f"Next: edit the map, then 'archivist check {shown}' and 'archivist diff {arc} {shown}'.")
