"""Point layers against the map: the map's extent, points outside it, and a point's recorded unit against its polygon.

Shared by the families that judge point layers (samples, stations): each
function takes a point role and returns frozen values; the rules word them.
Every layer is read from the check context (in the map CRS, swapped axes put
right), so a CRS fault is reported once, by the crs family.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import pandas as pd
import shapely

from ..model import Hit, Severity
from .arrays import present
from .messages import layer_feature, offset

if TYPE_CHECKING:
    from ..project import Layer, MapProject
    from .context import CheckContext


@dataclass(frozen=True)
class MapExtent:
    """The map's extent: the extent layer's polygons, else the union of the unit polygons (``role`` says which)."""

    geometry: Any
    role: str


def map_extent(ctx: CheckContext) -> MapExtent | None:
    """The map's extent (prepared for repeated tests); None when there is neither an extent layer nor unit polygons."""

    def compute() -> MapExtent | None:
        for role in ("extent", "units"):
            layer = ctx.layer(role)  # in the map CRS, as the points are read for these checks
            if layer is None:
                continue
            geoms = layer.geometry
            ok = present(geoms) & shapely.is_valid(geoms)
            if ok.any():
                geom = shapely.union_all(geoms[ok])
                shapely.prepare(geom)
                return MapExtent(geom, role)
        return None

    return ctx.shared("analysis.points.extent", compute)


@dataclass(frozen=True)
class Outside:
    """A point farther than the tolerance outside the extent: its row, distance (m) and compass direction from the extent."""

    index: int
    distance: float
    towards: str


def points_outside(project: MapProject, ctx: CheckContext, role: str) -> tuple[Outside, ...]:
    """The points of layer ``role`` outside the map's extent by more than the tolerance.

    Points without a location, and points whose coordinates cannot be on
    Earth (``coordinates-implausible`` reports those), are skipped.
    """
    layer = ctx.layer(role)
    extent = map_extent(ctx)
    if extent is None or layer is None:
        return ()
    geoms = layer.geometry
    ok = present(geoms) & ~layer.far[0]
    idx = np.flatnonzero(ok)
    dist = shapely.distance(extent.geometry, geoms[idx])
    crs = project.crs or layer.crs
    out = []
    for k in np.flatnonzero(dist > ctx.tolerance):
        i = idx[k]
        (x0, y0), (x1, y1) = shapely.get_coordinates(shapely.shortest_line(extent.geometry, geoms[i]))
        out.append(Outside(int(i), float(dist[k]), offset(crs, x0, y0, x1, y1)[1]))
    return tuple(out)


@dataclass(frozen=True)
class UnitMismatch:
    """A point whose recorded unit is not the unit of any polygon it falls in.

    ``polygon`` is the first polygon containing it (row in the units
    layer), ``edge`` its distance to that polygon's edge; ``nearest`` and
    ``nearest_polygon`` the nearest polygon of the recorded unit (NaN and -1
    when no polygon has that unit), ``towards`` its compass direction.
    ``superficial`` marks a superficial polygon over a bedrock record.
    """

    index: int
    recorded: str
    polygon: int
    code: str
    edge: float
    nearest: float
    nearest_polygon: int
    towards: str
    superficial: bool


def outside_hits(project: MapProject, ctx: CheckContext, role: str, noun: str) -> Iterator[Hit]:
    """One hit per point of ``role`` outside the map: how far, which way, and from what (the extent or the units)."""
    layer = ctx.layer(role)
    extent = map_extent(ctx)
    if extent is None or layer is None:
        return
    what = "the map extent" if extent.role == "extent" else "the unit polygons (no extent layer)"
    geoms = layer.geometry
    for out in points_outside(project, ctx, role):
        i = out.index
        yield Hit(f"{layer_feature(layer, i, noun)} lies {out.distance:.1f} m {out.towards} of {what}.",
                  layer=role, features=(str(layer.ids[i]),), measure=out.distance, geometry=geoms[i])


def unit_mismatches(project: MapProject, ctx: CheckContext, role: str) -> tuple[UnitMismatch, ...]:
    """The points of layer ``role`` whose ``unit_field`` is not the unit of the polygon they fall in (one STRtree query).

    Points with no recorded unit, or outside every polygon, are skipped.
    """
    points, units = ctx.layer(role), ctx.layer("units")
    if points is None or units is None:
        return ()
    recorded = points.text("unit_field")
    codes = units.text("unit_field")
    if recorded is None or codes is None:
        return ()
    recorded = np.array([r.strip() for r in recorded], dtype=object)
    codes = np.array([c.strip() for c in codes], dtype=object)
    pts, polys = points.geometry, units.geometry
    usable = present(pts) & (recorded != "")
    poly_ok = present(polys)
    nothing = np.array(None, dtype=object)
    tree = shapely.STRtree(np.where(poly_ok, polys, nothing))
    pi, ui = tree.query(np.where(usable, pts, nothing), predicate="intersects")
    if len(pi) == 0:
        return ()
    pairs = pd.DataFrame({"p": pi, "u": ui, "code": codes[ui]})
    pairs["match"] = pairs.code.to_numpy() == recorded[pairs.p.to_numpy()]
    has_match = pairs.groupby("p").match.any()
    bad = has_match[~has_match].index.to_numpy()
    if len(bad) == 0:
        return ()
    first = pairs[pairs.p.isin(bad)].drop_duplicates("p").set_index("p").loc[bad]
    poly_idx = first.u.to_numpy()
    edge = shapely.distance(pts[bad], shapely.boundary(polys[poly_idx]))
    superficial = superficial_units(project)
    nearest = np.full(len(bad), np.nan)
    nearest_poly = np.full(len(bad), -1)
    for code in np.unique(recorded[bad]):  # one query per recorded unit code: a handful
        mask = recorded[bad] == code
        same = np.flatnonzero((codes == code) & poly_ok)
        if len(same):
            t = shapely.STRtree(polys[same])
            (src, hit), d = t.query_nearest(pts[bad[mask]], return_distance=True, all_matches=False)
            nearest[np.flatnonzero(mask)[src]] = d
            nearest_poly[np.flatnonzero(mask)[src]] = same[hit]
    crs = project.crs or points.crs
    out = []
    for k, i in enumerate(bad):
        towards = ""
        if np.isfinite(nearest[k]) and nearest_poly[k] >= 0:
            (x0, y0), (x1, y1) = shapely.get_coordinates(shapely.shortest_line(pts[i], polys[nearest_poly[k]]))
            towards = offset(crs, x0, y0, x1, y1)[1]
        u = int(poly_idx[k])
        out.append(UnitMismatch(int(i), str(recorded[i]), u, str(codes[u]), float(edge[k]), float(nearest[k]),
                                int(nearest_poly[k]), towards, codes[u] in superficial and recorded[i] not in superficial))
    return tuple(out)


def unit_mismatch_hit(points: Layer, units: Layer, m: UnitMismatch, tolerance: float, noun: str, role: str, point: Any) -> Hit:
    """The finding of a point recorded as another unit than its polygon's (``m``), in the words of sample-unit-mismatch."""
    i, u = m.index, m.polygon
    if np.isfinite(m.nearest) and m.nearest_polygon >= 0:
        near = (f"; the nearest {m.recorded} polygon, {layer_feature(units, m.nearest_polygon, 'polygon')}, "
                f"is {m.nearest:.1f} m {m.towards}")
    else:
        near = f"; no polygon on the map is {m.recorded}"
    case = " (the codes differ only in case)" if m.recorded.casefold() == m.code.casefold() else ""
    severity = None
    if m.edge <= tolerance:
        severity, note = Severity.NOTICE, f", within the tolerance ({tolerance:g}) of its edge: the {noun} sits on the contact"
    elif m.superficial:
        severity, note = Severity.NOTICE, f" ({m.code} is superficial: the {noun} may come from an exposure beneath it), {m.edge:.1f} m inside its edge"
    else:
        note = f", {m.edge:.1f} m inside its edge"
    return Hit(
        f"{layer_feature(points, i, noun)} is recorded as {m.recorded} but lies in "
        f"{layer_feature(units, u, 'polygon', m.code)}{note}{near}{case}.",
        layer=role,
        features=(points.ids[i], str(units.ids[u])),
        measure=m.edge,
        geometry=point,
        severity=severity,
    )


def superficial_units(project: MapProject) -> set[str]:
    """Unit codes whose legend kind is superficial (drift, alluvium...)."""
    from ..vocab.legend import cells as legend_cells

    legend = project.tables.get("legend")
    if legend is None:
        return set()
    codes, kinds = legend_cells(legend, "unit"), legend_cells(legend, "kind")
    if codes is None or kinds is None:
        return set()
    return {c for c, k in zip(codes, kinds) if c and k.casefold().startswith("superficial")}
