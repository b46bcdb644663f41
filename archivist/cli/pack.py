"""``archivist pack PROJECT --out DIR``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from ..printable import printable
from .errors import CommandFailed, handle_errors
from .options import progress_for, progress_options


def interrupted_message(placed: tuple[Path, ...], make_zip: bool) -> str:
    """What an interrupted pack leaves, as it is: the paths moved into place whole, or nothing new."""
    if not placed:
        return "pack interrupted; no package was written (an earlier package of the same name, if any, is unchanged)"
    folder = placed[0]
    if make_zip and len(placed) < 2:
        return f"pack interrupted after the package was written: {folder} is in place and whole; the zip was not written"
    return f"pack interrupted after the package was written: {', '.join(map(str, placed))} in place and whole"


@click.command("pack", short_help="Check PROJECT and write it as an open data package.")
@click.argument("project", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path), metavar="DIR", help="Folder to write <name>-<version>/ into.")
@click.option("--zip", "make_zip", is_flag=True, help="Also write <name>-<version>.zip.")
@click.option("--allow-errors", is_flag=True, help="Pack even when the checks find errors; the package names them.")
@click.option("--force", is_flag=True, help="Replace an existing package of the same name and version.")
@progress_options
@handle_errors
def pack_command(project: Path, out: Path, make_zip: bool, allow_errors: bool, force: bool, quiet: bool, verbose: bool) -> None:
    """Check the map PROJECT and write it as an open data package in DIR.

    The package is a BagIt bag whose data/ folder is a Frictionless Data
    Package: the map as GeoPackage and GeoJSON, tables as CSV, DataCite and
    PROV metadata, a README, licence and citation. SOURCE_DATE_EPOCH fixes
    every recorded time, so the same project packs to the same bytes.

    Exit 0: packed. 1: the checks found errors (the report is printed; nothing
    written). 2: could not run (missing metadata, output exists without
    --force, ...).
    """
    from ..filebytes import human_size
    from ..interrupt import Interrupted
    from ..package import PackRefused, pack
    from ..report import write_text

    try:
        with progress_for(quiet, verbose) as progress:
            result = pack(project, out, zip=make_zip, allow_errors=allow_errors, force=force, progress=progress)
    except PackRefused as exc:
        write_text(exc.report, sys.stdout)
        raise  # one line, exit 1 (its exit_code)
    except (Interrupted, KeyboardInterrupt) as exc:
        raise CommandFailed(interrupted_message(getattr(exc, "placed", ()), make_zip), 130) from None
    s = result.report.summary
    click.echo(f"Packed {printable(result.path)} ({len(result.files)} files, {human_size(result.bytes)}).")
    if result.zip_path is not None:
        click.echo(f"Zip: {printable(result.zip_path)} ({human_size(result.zip_path.stat().st_size)}).")
    click.echo(f"Checks: {s.errors} errors, {s.warnings} warnings, {s.notices} notices.")
    if result.open_errors:
        click.echo(
            f"Warning: packed with {result.open_errors} open error{'s' if result.open_errors != 1 else ''}; "
            "they are listed in data/README.md, datapackage.json and the DataCite record.",
            err=True,
        )
