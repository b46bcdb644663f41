"""``--build-polygons``: unit polygons built from the linework and coded from label points.

For mappers who draw contacts, faults and the frame first and put a label
point (a point with a unit code, ``[layers.labels]``) inside each unit: the
lines are noded and polygonised by GEOS (``shapely.polygonize_full``), and
each polygon takes the unit of the label points inside it. A polygon with no
label point, or with label points of two different units, is built but left
uncoded and listed: which unit it is, is the geologist's call. What GEOS
could not close into polygons (dangles, cut edges, invalid rings) is listed
as well.

What it does not cover: a polygon whose label lies exactly on a line (the
label is listed, not placed), faults that end inside a unit (they are part
of the linework but bound nothing), and projects that already have unit
polygons (refused: the built polygons would replace them).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import shapely

from ..analysis.arrays import present
from ..errors import ArchivistError
from ..project import Layer
from .model import FEATURE_ID, Change, Left
from .registry import repair

if TYPE_CHECKING:
    from .model import RepairSettings, RepairState

LABELS = "labels"  # the [layers] key of the label points
BUILT_UNITS = "units-built.gpkg"  # the GeoPackage (layer "units") of the built polygons in the repaired copy
NO_CODE = ""  # unit code of a polygon left uncoded


@dataclass(frozen=True)
class Built:
    """What :func:`build_units` made of the linework.

    ``polygons`` are the faces GEOS closed, ``codes`` the unit of each (``""``
    where it is left uncoded), ``labels`` the label indices inside each
    polygon; ``dangles``, ``cuts`` and ``invalid`` are what
    ``polygonize_full`` could not use; ``stray`` the indices of labels inside no
    polygon.
    """

    polygons: np.ndarray
    codes: np.ndarray
    labels: tuple[tuple[int, ...], ...]
    dangles: np.ndarray
    cuts: np.ndarray
    invalid: np.ndarray
    stray: np.ndarray

    def unlabelled(self) -> np.ndarray:
        """Polygons with no label point inside."""
        return np.array([i for i, ls in enumerate(self.labels) if not ls], dtype=np.int64)

    def conflicting(self, label_codes: np.ndarray) -> np.ndarray:
        """Polygons whose label points name two or more different units."""
        return np.array([i for i, ls in enumerate(self.labels) if len({str(label_codes[k]) for k in ls}) > 1], dtype=np.int64)


def build_units(lines: np.ndarray, frame: Any, label_points: np.ndarray, label_codes: np.ndarray) -> Built:
    """Polygons from ``lines`` (and the boundary of ``frame``, a polygon or None), coded by the labels inside them.

    The lines are noded by a GEOS union and polygonised with
    ``shapely.polygonize_full``; the polygons are ordered by their
    representative point (y, then x), so the same linework always gives the
    same order. A polygon takes the code of its label points when they all
    name one unit (empty codes ignored); otherwise it gets ``""``.
    """
    geoms = np.asarray(lines, dtype=object)
    geoms = geoms[present(geoms)]
    if frame is not None and not shapely.is_empty(frame):
        geoms = np.append(geoms, shapely.boundary(frame))
    empty = np.empty(0, dtype=object)
    if not len(geoms):
        return Built(empty, empty, (), empty, empty, empty, np.arange(len(label_points)))
    noded = shapely.get_parts(shapely.union_all(shapely.get_parts(geoms)))
    polys, cuts, dangles, invalid = shapely.polygonize_full(noded)
    polys, cuts, dangles, invalid = (shapely.get_parts(g) for g in (polys, cuts, dangles, invalid))
    if len(polys):
        rep = shapely.get_coordinates(shapely.point_on_surface(polys))
        polys = polys[np.lexsort((rep[:, 0], rep[:, 1]))]
    points = np.asarray(label_points, dtype=object)
    label_codes = np.asarray(label_codes, dtype=object)
    have = np.flatnonzero(present(points))
    li, pi = shapely.STRtree(polys).query(points[have], predicate="within") if len(polys) and len(have) else (empty, empty)
    li = have[np.asarray(li, dtype=np.int64)]
    pi = np.asarray(pi, dtype=np.int64)
    stray = np.setdiff1d(np.arange(len(points)), li)
    o = np.lexsort((li, pi))
    li, pi = li[o], pi[o]
    groups = np.split(li, np.searchsorted(pi, np.arange(1, len(polys)))) if len(polys) else []
    labels = tuple(tuple(int(k) for k in g) for g in groups)
    codes = np.full(len(polys), NO_CODE, dtype=object)
    if len(li):
        text = pd.Series(label_codes[li], dtype=object).fillna("").astype(str).str.strip()
        table = pd.DataFrame({"poly": pi, "code": text.to_numpy()})
        table = table[table["code"] != ""]
        distinct = table.drop_duplicates().groupby("poly")["code"]
        n = distinct.nunique()
        one = n[n == 1].index.to_numpy()
        codes[one] = distinct.first().loc[one].to_numpy()
    return Built(polys, codes, labels, dangles, cuts, invalid, stray)


def _labels(state: RepairState) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """The label points (geometries, codes, ids) and where they come from; an ArchivistError when there are none."""
    from ..project import load_layer

    project = state.project
    spec = (project.manifest.get("layers") or {}).get(LABELS)
    where = project.manifest_path or project.root
    if not isinstance(spec, dict) or not isinstance(spec.get("path"), str):
        raise ArchivistError(f"{where}: --build-polygons needs label points: name them in [layers.labels] "
                             "(path, layer, unit_field)")
    frame = state.points.get(LABELS)
    source = str(spec["path"])
    if frame is None:
        problems: list[Any] = []
        layer = load_layer(project.root, LABELS, {"unit_field": "unit", **spec}, problems)
        if layer is None or problems:
            raise ArchivistError(problems[0].message if problems else f"{where}: layers.labels: cannot read '{source}'")
        frame, ids, source = layer.frame, np.asarray(layer.ids, dtype=object), layer.source
    else:
        ids = np.asarray(frame.index.astype(str), dtype=object)
    field = str(spec.get("unit_field", "unit"))
    if field not in frame.columns:
        raise ArchivistError(f"{where}: layers.labels: field '{field}' (unit_field) is not in '{source}'")
    if project.crs is not None and frame.crs is not None and not frame.crs.equals(project.crs, ignore_axis_order=True):
        frame = frame.to_crs(project.crs)
    return np.asarray(frame.geometry.array, dtype=object), frame[field].to_numpy(dtype=object), ids, source


@repair("build-polygons", order=5, default=False, layer="units")
def build_polygons(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Unit polygons built from the contacts, faults and frame, coded from the label points inside them.

    The linework (every line of the lines layers, with the extent's outline
    when there is an extent layer) has its near-miss ends closed within the
    tolerance first, as ``close-dangles`` closes them, then is noded and
    polygonised by GEOS (``shapely.polygonize_full``). Each polygon takes the
    unit of the label points (``[layers.labels]``, field ``unit_field``,
    default ``unit``) inside it. Never guesses: a polygon with no label point,
    or with label points of two different units, is kept uncoded and listed;
    so are label points inside no polygon, and the dangles, cut edges and
    invalid rings GEOS could not close (a fault ending inside a unit is not
    listed: faults may die out). Runs only when asked for
    (``--build-polygons``), and only on a project without unit polygons.
    """
    import geopandas as gpd

    from ..analysis.lines import build_line_network
    from .lines import close_ends, working_project

    if state.units is not None and len(state.units):
        raise ArchivistError(f"{state.project.layers['units'].source}: --build-polygons builds the unit polygons from the "
                             f"linework, but the project already has {len(state.units)}; remove [layers.units] to rebuild them")
    points, label_codes, label_ids, source = _labels(state)
    lines = np.empty(0, dtype=object)
    fault = np.empty(0, dtype=bool)
    if state.lines is not None and len(state.lines):
        net = build_line_network(working_project(state))
        lines, _ = close_ends(net, float(settings.tolerance))
        fault = net.roles == "fault"
    built = build_units(lines, state.extent, points, label_codes)
    unit_field = state.unit_field or "unit"
    ids = [str(i + 1) for i in range(len(built.polygons))]
    crs = state.project.crs
    frame = gpd.GeoDataFrame({FEATURE_ID: ids, unit_field: built.codes}, geometry=built.polygons, crs=crs)
    state.units = frame
    state.unit_field = unit_field
    # the later repairs read the built polygons as the project's units layer
    spec = {"path": BUILT_UNITS, "layer": "units", "unit_field": unit_field}
    layer = Layer("units", state.project.root / BUILT_UNITS, f"{BUILT_UNITS}:units", frame, np.array(ids, dtype=object), spec)
    state.project = replace(state.project, layers={**state.project.layers, "units": layer})
    changes = [
        Change("build-polygons", "units", (), (fid,), (str(code),) if code else (), float(shapely.area(g)), 0.0, None, g,
               f"built from the linework, coded by label{'s' if len(ls) > 1 else ''} {', '.join(str(label_ids[k]) for k in ls)}"
               if code else "built from the linework, left uncoded")
        for fid, code, g, ls in zip(ids, built.codes.tolist(), built.polygons, built.labels)
    ]
    left: list[Left] = []
    for i in built.unlabelled().tolist():
        left.append(Left("build-polygons", "units", (ids[i],), "no label point inside: its unit is the geologist's call",
                         built.polygons[i], float(shapely.area(built.polygons[i]))))
    for i in built.conflicting(label_codes).tolist():
        named = sorted({str(label_codes[k]) for k in built.labels[i]})
        left.append(Left("build-polygons", "units", (ids[i],) + tuple(str(label_ids[k]) for k in built.labels[i]),
                         f"label points of different units inside ({', '.join(named)}): one polygon, or a contact missing?",
                         built.polygons[i], float(shapely.area(built.polygons[i]))))
    for k in built.stray.tolist():
        left.append(Left("build-polygons", LABELS, (str(label_ids[k]),),
                         "label point inside no polygon (on a line, or outside the closed linework)", points[k], 0.0))
    if len(built.dangles):
        faults = lines[fault] if len(fault) else np.empty(0, dtype=object)
        ftree = shapely.STRtree(faults) if len(faults) else None
        for g in built.dangles:
            if ftree is not None and len(ftree.query(g, predicate="covered_by")):
                continue  # a fault dying out inside a unit
            left.append(Left("build-polygons", "lines", (), "dangle: a line that closes no polygon (an end touching no "
                             "other line)", g, float(shapely.length(g))))
    for g in built.cuts:
        left.append(Left("build-polygons", "lines", (), "cut edge: a line with the same polygon on both sides", g,
                         float(shapely.length(g))))
    for g in built.invalid:
        left.append(Left("build-polygons", "lines", (), "ring GEOS cannot make a valid polygon of (it crosses itself)", g,
                         float(shapely.length(g))))
    return changes, left
