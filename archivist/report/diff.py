"""Writers for a :class:`~archivist.diff.DiffReport`: text, JSON, and a GeoPackage of the changed areas.

They format what ``archivist.diff`` computed; they compute nothing. The text
writer shows every value from the data through :func:`archivist.printable.printable`;
the JSON writer keeps values exact, with terminal-unsafe characters as ``\\uXXXX``.
JSON shape: ``schemas/diff.schema.json``.
"""

from __future__ import annotations

import io
import json
from itertools import groupby
from pathlib import Path
from typing import IO, Any

import geopandas as gpd
import pyogrio
import shapely
from rich.console import Console
from rich.text import Text

from ..diff import LAYER_ORDER, DiffReport
from ..fsutil import atomic_dataset
from ..printable import json_printable, printable

DIFF_CAUTION = "archivist diff lists what differs between the two data sets; whether each change is geologically right is for the mappers to judge."
STYLE = {"added": "green", "removed": "red"}


def render_diff_json(report: DiffReport) -> str:
    """The report as JSON text (``schemas/diff.schema.json``), terminal-unsafe characters escaped."""
    return json_printable(json.dumps(report.to_dict(), indent=2, ensure_ascii=False)) + "\n"


def write_diff_text(report: DiffReport, stream: IO[str], *, color: bool | None = None) -> None:
    """The changes grouped by layer (legend, units, lines, extent, samples, structures, analyses), counts at the end."""
    console = Console(file=stream, force_terminal=color if color else None, no_color=(color is False) or None,
                      highlight=False, soft_wrap=True, emoji=False)
    for note in report.notes:
        console.print(Text(f"Note: {printable(note)}", style="italic"))
    console.print(Text(f"archivist {report.version} diff: {printable(report.old)} -> {printable(report.new)}", style="bold"))
    console.print(Text(f"Map CRS: {printable(report.crs) if report.crs else 'not declared'}"))
    order = {name: i for i, name in enumerate(LAYER_ORDER)}
    changes = sorted(report.changes, key=lambda c: order.get(c.layer, 99))
    for layer, group in groupby(changes, key=lambda c: c.layer):
        items = list(group)
        console.print()
        console.print(Text(f"{printable(layer)} ({len(items)})", style="bold underline"))
        for c in items:
            line = Text("  ")
            line.append(f"{printable(c.change):<22}", style=STYLE.get(c.change.rsplit("-", 1)[-1], "yellow"))
            line.append(f" {printable(c.message)}")
            if c.x is not None and c.y is not None:
                line.append(f"  [at {c.x:.1f}, {c.y:.1f}]", style="dim")
            console.print(line)
    console.print()
    if not report.changes:
        console.print(Text("No changes.", style="green"))
    else:
        counts = ", ".join(f"{n} {printable(kind)}" for kind, n in report.counts.items())
        console.print(Text(f"{len(report.changes)} change{'s' if len(report.changes) != 1 else ''}: {counts}."))
    console.print(Text(DIFF_CAUTION, style="dim"))


def render_diff_text(report: DiffReport) -> str:
    """The text of :func:`write_diff_text`, without colour."""
    buf = io.StringIO()
    write_diff_text(report, buf, color=False)
    return buf.getvalue()


def write_diff_gpkg(report: DiffReport, path: Path, crs: Any) -> None:
    """Write ``changed_areas`` (one row per piece of area that changed unit, or per changed polygon),
    ``changed_lines`` (old and new positions) and ``changed_points`` to a new GeoPackage at ``path``.

    Every row carries the index of its change in the report (``change_no``, from 1),
    the kind of change, the layer and the feature ids. ``crs`` is the map's
    CRS (anything pyproj accepts). The file is built in a hidden sibling
    and renamed onto ``path`` at the end (:func:`archivist.fsutil.atomic_dataset`);
    the caller has already made sure ``path`` may be written.
    """
    areas, lines, points = [], [], []
    for n, c in enumerate(report.changes, start=1):
        base = {"change_no": n, "change": c.change, "layer": c.layer, "features": ",".join(c.features), "message": c.message}
        for geom, old_unit, new_unit in c.pieces:
            if geom is not None and not shapely.is_empty(geom) and geom.geom_type in ("Polygon", "MultiPolygon"):
                areas.append({**base, "old_unit": old_unit, "new_unit": new_unit, "area": float(geom.area), "geometry": geom})
        if not c.pieces and c.geometry is not None and not shapely.is_empty(c.geometry) and c.geometry.geom_type in ("Polygon", "MultiPolygon"):
            areas.append({**base, "old_unit": "", "new_unit": "", "area": float(c.geometry.area), "geometry": c.geometry})
        for side, geom in (("old", c.old_geometry), ("new", c.new_geometry)):
            if geom is None or shapely.is_empty(geom):
                continue
            if geom.geom_type in ("LineString", "MultiLineString"):
                lines.append({**base, "side": side, "geometry": geom})
            elif geom.geom_type in ("Point", "MultiPoint"):
                points.append({**base, "side": side, "geometry": geom})
    columns = {
        "changed_areas": (areas, ["change_no", "change", "layer", "features", "message", "old_unit", "new_unit", "area"], "MultiPolygon"),
        "changed_lines": (lines, ["change_no", "change", "layer", "features", "message", "side"], "MultiLineString"),
        "changed_points": (points, ["change_no", "change", "layer", "features", "message", "side"], "Point"),
    }
    with atomic_dataset(Path(path)) as work:
        for name, (rows, cols, gtype) in columns.items():
            if rows:
                frame = gpd.GeoDataFrame(rows, geometry="geometry", crs=crs)
            else:
                frame = gpd.GeoDataFrame({c: [] for c in cols}, geometry=gpd.GeoSeries([], crs=crs), crs=crs)
            frame = frame[cols + ["geometry"]]
            pyogrio.write_dataframe(frame, work, layer=name, driver="GPKG", geometry_type=gtype,
                                    promote_to_multi=gtype.startswith("Multi"))
