"""Findings as a GeoPackage to open over the map in a desktop GIS.

One layer per geometry type, so that any GIS can style it:

* ``findings_points``: findings located by a point (a free line end, a
  self-intersection) and findings with only an x, y;
* ``findings_lines``: findings drawn as lines (a stretch off the boundary, a
  misaligned edge, a boundary without a line);
* ``findings_polygons``: findings drawn as areas (an overlap, a gap, a sliver);
* ``findings_unlocated``: a table (no geometry) of findings with no place at
  all (a manifest key, a licence); written only when there are some.

Each feature is one finding, with the attributes ``rule``, ``severity``,
``family``, ``message``, ``map_layer`` (the project layer or table it is
about), ``features`` (the feature ids, comma-joined), ``measure`` (m², m or a
distance, as the rule says), ``x`` and ``y``. Geometries are the findings'
own (rounded like the JSON report: 1e-3 in metres, 1e-8 in degrees), in the map's CRS. A
finding whose geometry mixes dimensions is written with its highest-dimension
parts. The three geometry layers are always written, empty when nothing was
found, so a GIS project can keep pointing at them.

The file is written to a temporary sibling and renamed at the end; this
module never decides where: the command refuses paths inside the project.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

from ..fsutil import atomic_dataset
from ..model import Report

LAYERS = {"points": "findings_points", "lines": "findings_lines", "polygons": "findings_polygons"}
TABLE = "findings_unlocated"
GEOMETRY_TYPES = {"points": "MultiPoint", "lines": "MultiLineString", "polygons": "MultiPolygon"}
FIELDS = ("rule", "severity", "family", "message", "map_layer", "features", "measure", "x", "y")
_DIM_KIND = {0: "points", 1: "lines", 2: "polygons"}
_MULTI = {"points": shapely.multipoints, "lines": shapely.multilinestrings, "polygons": shapely.multipolygons}
_TYPES = {"points": (0, 4), "lines": (1, 2, 5), "polygons": (3, 6)}


def _dimension(geom) -> int:
    return int(shapely.get_dimensions(geom))


def _as_multi(geom, kind: str):
    """The parts of ``geom`` of this kind's dimension, as one multi-geometry."""
    parts = shapely.get_parts(geom)
    # collections can nest multi-geometries
    while True:
        types = shapely.get_type_id(parts)
        nested = np.isin(types, (4, 5, 6, 7))
        if not nested.any():
            break
        parts = np.concatenate([parts[~nested], shapely.get_parts(parts[nested])])
    if kind == "lines":
        rings = np.flatnonzero(shapely.get_type_id(parts) == 2)
        if len(rings):
            parts = parts.copy()
            for i in rings:  # a LinearRing is written as the closed LineString it is
                parts[i] = shapely.linestrings(shapely.get_coordinates(parts[i]))
    keep = np.isin(shapely.get_type_id(parts), _TYPES[kind]) & ~shapely.is_empty(parts)
    return _MULTI[kind](parts[keep])


def findings_frames(report: Report, crs=None) -> tuple[dict[str, gpd.GeoDataFrame], pd.DataFrame]:
    """The findings split by geometry type, as frames ready to write."""
    rows: dict[str, list] = {k: [] for k in LAYERS}
    geoms: dict[str, list] = {k: [] for k in LAYERS}
    unlocated: list = []
    for f in report.findings:
        attrs = {
            "rule": f.rule,
            "severity": f.severity.value,
            "family": f.family,
            "message": f.message,
            "map_layer": f.layer or "",
            "features": ",".join(f.features),
            "measure": f.measure,
            "x": f.x,
            "y": f.y,
        }
        geom = shapely.from_wkt(f.wkt) if f.wkt else None
        if geom is not None and shapely.is_empty(geom):
            geom = None
        if geom is None and f.x is not None and f.y is not None:
            geom = shapely.Point(f.x, f.y)
        if geom is None:
            unlocated.append(attrs)
            continue
        kind = _DIM_KIND[_dimension(geom)]
        rows[kind].append(attrs)
        geoms[kind].append(_as_multi(geom, kind))
    frames = {}
    for kind, recs in rows.items():
        data = pd.DataFrame(recs, columns=list(FIELDS)).astype({"measure": float, "x": float, "y": float})
        frames[kind] = gpd.GeoDataFrame(data, geometry=gpd.GeoSeries(geoms[kind], crs=crs), crs=crs)
    table = pd.DataFrame(unlocated, columns=list(FIELDS)).astype({"measure": float, "x": float, "y": float})
    return frames, table


def write_findings_gpkg(report: Report, target: Path, crs=None) -> dict[str, int]:
    """Write the findings of ``report`` to the GeoPackage ``target`` and return the feature count per layer.

    ``crs`` is the map's CRS (a pyproj CRS or anything pyproj accepts); the
    caller has already made sure ``target`` may be written.
    """
    target = Path(target)
    frames, table = findings_frames(report, crs)
    counts = {}
    with atomic_dataset(target) as work:
        for kind, frame in frames.items():
            pyogrio.write_dataframe(frame, work, layer=LAYERS[kind], driver="GPKG", geometry_type=GEOMETRY_TYPES[kind])
            counts[LAYERS[kind]] = len(frame)
        if len(table):
            pyogrio.write_dataframe(table, work, layer=TABLE, driver="GPKG")
            counts[TABLE] = len(table)
    return counts
