"""``archivist diff OLD NEW``."""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
from pathlib import Path

import click

from ..errors import ArchivistError
from ..fsutil import atomic_write_text, guard_output, write_failed
from .audit import limit_options, make_limits


def _write_gpkg_atomically(target: Path, write) -> None:
    """Write a GeoPackage in a hidden sibling folder (keeping the .gpkg name GDAL expects), then move it into place.

    Failing to make, fill or rename it is one ``ArchivistError`` naming ``target``.
    """
    from pyogrio.errors import DataLayerError, DataSourceError

    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent))
    except OSError as exc:
        raise write_failed(target, exc) from None
    try:
        write(tmp / target.name)
        os.replace(tmp / target.name, target)
    except OSError as exc:
        raise write_failed(target, exc) from None
    except (DataSourceError, DataLayerError) as exc:
        raise ArchivistError(f"{target}: cannot write ({' '.join(str(exc).split())})") from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _inside_of(path: Path) -> Path | None:
    p = Path(path)
    if p.is_dir():
        return p
    if p.suffix.lower() == ".toml":
        return p.parent
    return None


@click.command("diff")
@click.argument("old", type=click.Path(path_type=Path))
@click.argument("new", type=click.Path(path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text", show_default=True, help="Output format.")
@click.option("--output", "-o", type=click.Path(path_type=Path), help="Write the changes to FILE instead of stdout.")
@click.option("--gpkg", "gpkg", type=click.Path(path_type=Path), metavar="FILE", help="Also write the changed areas, lines and points to a GeoPackage.")
@click.option("--force", is_flag=True, help="Replace existing output files.")
@limit_options
def diff_command(old, new, fmt, output, gpkg, force, max_members, max_size, max_ratio):
    """List what changed from OLD to NEW (projects or packages, folders or zips).

    Features are matched by geometry and attributes, not by feature id: a
    moved contact or a reshaped polygon is one change, with the area gained
    and lost per unit.

    Exit 0: no changes. 1: changes found. 2: could not run.
    """
    from ..diff import diff
    from ..report.diff import render_diff_json, render_diff_text, write_diff_gpkg, write_diff_text
    from . import handle_errors

    @handle_errors
    def run():
        for out in (output, gpkg):
            if out is None:
                continue
            for side in (old, new):
                guard_output(out, force=force, project_root=_inside_of(side))
        if output is not None and gpkg is not None and Path(output).resolve() == Path(gpkg).resolve():
            raise ArchivistError(f"{gpkg}: --gpkg and --output name the same file")
        report = diff(old, new, limits=make_limits(max_members, max_size, max_ratio))
        if gpkg is not None:
            _write_gpkg_atomically(Path(gpkg), lambda tmp: write_diff_gpkg(report, tmp, report.crs_object))
        if output is not None:
            atomic_write_text(output, render_diff_json(report) if fmt == "json" else render_diff_text(report))
        elif fmt == "json":
            sys.stdout.write(render_diff_json(report))
        else:
            write_diff_text(report, sys.stdout)
        sys.exit(1 if report.changes else 0)

    run()
