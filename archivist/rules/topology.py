"""Family `topology`: the unit polygons tile the map, with no gaps, overlaps, slivers or misfits.

How the checks scale
--------------------
A clean coverage is one where every polygon edge inside the map is drawn
twice, once by each neighbour, with the same two vertices and in opposite
directions (interior on the left). The analysis first builds that table of
half-edges for the whole layer with numpy (coordinates from
``shapely.to_ragged_array``, one 64-bit hash per segment, one sort), which is
linear in the number of vertices. Every place where the coverage is not clean
leaves a trace in the table: a half-edge without its twin, or a segment drawn
twice on the same side. Only the polygons carrying such a trace (on a clean
map: those along the map edge) and their neighbours go on to GEOS's own
coverage validation (``shapely.coverage_invalid_edges``). When GEOS finds
nothing there and no segment is drawn twice on one side, no two polygons can
overlap; otherwise every pair of intersecting polygons in that region whose
interiors meet is intersected exactly (GEOS alone can miss a polygon whose
edge inside another one is matched exactly by a third). Gaps come from the
map extent minus the union of the units. On a valid coverage the union is
read off the table (the faces enclosed by the edges drawn once, covered when
the units lie on their left); otherwise it is GEOS's coverage union of the
polygons with no defect plus a plain union of the rest.

A region covered twice or not at all is bounded by half-edges without a twin:
crossing a twinned edge leaves one polygon and enters another, so the number of
polygons over a point only changes across untwinned edges. Every overlap, gap
or misfit therefore touches a polygon the table flags, which is why the
narrowing-down loses nothing.

Shared results (the half-edge table, the coverage analysis, the spatial index)
are computed once per check through ``ctx.shared`` and reused by the linework
family.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import shapely

from ..errors import ArchivistError
from ..farcoords import far_out
from ..model import Hit
from ..readers import as_text
from ..registry import rule

POLYGON = shapely.GeometryType.POLYGON.value
MULTIPOLYGON = shapely.GeometryType.MULTIPOLYGON.value
LINESTRING = shapely.GeometryType.LINESTRING.value
MULTILINESTRING = shapely.GeometryType.MULTILINESTRING.value
COLLECTION = shapely.GeometryType.GEOMETRYCOLLECTION.value


# ---------------------------------------------------------------- numbers and words

# "Longer (wider) than the tolerance" allows for floating-point noise: a stretch
# of exactly the tolerance, computed as 9.9 - 9.8, is not longer than 0.1.
ABOVE = 1.0 + 1e-6


def num(value: float) -> str:
    """A size as printed in messages: two decimals."""
    return f"{value:.2f}"


def metres_per_unit(project) -> float:
    """Ground metres per map unit of the project's CRS (1 for metres; near-equator degrees for geographic CRSs)."""
    crs = project.crs
    if crs is None and "units" in project.layers:
        crs = project.layers["units"].crs
    if crs is None:
        return 1.0
    if crs.is_geographic:
        return 111_320.0
    factor = crs.axis_info[0].unit_conversion_factor if crs.axis_info else None
    return float(factor) if factor else 1.0


def text_values(layer, key: str) -> tuple[np.ndarray, np.ndarray] | None:
    """The column named by manifest key ``key`` as (codes, distinct texts), texts[-1] being "" for nulls.

    Same text as ``Layer.text`` (identifiers stay text), but converted once per
    distinct value instead of once per feature.
    """
    name = layer.field(key)
    if name is None:
        return None
    codes, uniques = pd.factorize(layer.frame[name], use_na_sentinel=True)
    texts = np.array([as_text(u) for u in uniques] + [""], dtype=object)
    return codes, texts


def join_words(words: list[str]) -> str:
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


# ---------------------------------------------------------------- hashing coordinates

_SEEDS = [np.uint64(s) for s in (0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F, 0x165667B19E3779F9, 0x27D4EB2F165667C5)]
_M1 = np.uint64(0xFF51AFD7ED558CCD)
_M2 = np.uint64(0xC4CEB9FE1A85EC53)
_S33 = np.uint64(33)


def _fmix(h: np.ndarray) -> np.ndarray:
    h ^= h >> _S33
    h *= _M1
    h ^= h >> _S33
    h *= _M2
    h ^= h >> _S33
    return h


def coord_hash(*columns: np.ndarray) -> np.ndarray:
    """A 64-bit hash of rows of float coordinates (exact bit patterns; -0.0 counts as 0.0).

    Equal rows always hash equal; different rows collide with probability
    about 2^-64, and a collision only sends a segment down the slower exact
    path, never to a wrong result.
    """
    n = len(columns[0])
    h = np.zeros(n, dtype=np.uint64)
    for k, col in enumerate(columns):
        bits = (np.asarray(col, dtype=np.float64) + 0.0).view(np.uint64)
        h ^= bits
        h ^= _SEEDS[k % 4]
        h = _fmix(h)
    return h


def canonical(x0, y0, x1, y1):
    """Undirected segment keys: endpoints in (x, y) order, and whether the segment ran that way."""
    fwd = (x0 < x1) | ((x0 == x1) & (y0 <= y1))
    px = np.where(fwd, x0, x1)
    py = np.where(fwd, y0, y1)
    qx = np.where(fwd, x1, x0)
    qy = np.where(fwd, y1, y0)
    return px, py, qx, qy, fwd


def group_sorted(h: np.ndarray, *cols: np.ndarray):
    """Sort rows by hash and split them into groups of identical rows.

    Returns (order, group id of each sorted row, start of each group).
    """
    order = np.argsort(h)
    n = len(order)
    new = np.ones(n, dtype=bool)
    if n > 1:
        hs = h[order]
        same = hs[1:] == hs[:-1]
        for c in cols:
            cs = c[order]
            same &= cs[1:] == cs[:-1]
        new[1:] = ~same
    gid = np.cumsum(new) - 1
    starts = np.flatnonzero(new)
    return order, gid, starts


def segment_lines(x0, y0, x1, y1) -> np.ndarray:
    """Two-point LineStrings from segment coordinate arrays."""
    pts = np.empty((len(x0), 2, 2))
    pts[:, 0, 0], pts[:, 0, 1], pts[:, 1, 0], pts[:, 1, 1] = x0, y0, x1, y1
    return shapely.linestrings(pts) if len(x0) else np.empty(0, dtype=object)


def merge_by_group(lines: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
    """One merged (Multi)LineString per group from line pieces labelled by group."""
    out = np.full(n_groups, None, dtype=object)
    if len(lines) == 0:
        return out
    order = np.argsort(groups, kind="stable")
    shapely.multilinestrings(lines[order], indices=groups[order], out=out)
    have = ~shapely.is_missing(out)
    out[have] = shapely.line_merge(out[have])
    return out


def _parts_of_type(geoms: np.ndarray, single: int, multi: int, measure, minimum: float):
    """Parts of type ``single`` whose ``measure`` exceeds ``minimum``: (parts, index of the source geometry).

    Overlay results can nest a multi-geometry inside a collection; those are opened too.
    """
    if len(geoms) == 0:
        return np.empty(0, dtype=object), np.empty(0, dtype=np.int64)
    parts, idx = shapely.get_parts(geoms, return_index=True)
    nested = shapely.get_type_id(parts) == multi
    if nested.any():
        sub, k = shapely.get_parts(parts[nested], return_index=True)
        parts = np.concatenate([parts[~nested], sub])
        idx = np.concatenate([idx[~nested], idx[nested][k]])
    keep = (shapely.get_type_id(parts) == single) & (measure(parts) > minimum)
    return parts[keep], idx[keep]


def polygonal_parts(geoms: np.ndarray, min_area: float = 0.0):
    """Polygon parts with area above ``min_area`` of each geometry: (parts, index of the source geometry)."""
    return _parts_of_type(geoms, POLYGON, MULTIPOLYGON, shapely.area, min_area)


def linear_parts(geoms: np.ndarray, min_length: float = 0.0):
    """LineString parts longer than ``min_length``: (parts, index of the source geometry)."""
    return _parts_of_type(geoms, LINESTRING, MULTILINESTRING, shapely.length, min_length)


def widths(pieces: np.ndarray, tol: float) -> np.ndarray:
    """Width of each polygon: the diameter of its largest inscribed circle (GEOS), to about tol/20."""
    if len(pieces) == 0:
        return np.empty(0)
    size = np.sqrt(shapely.area(pieces))
    precision = np.maximum(tol / 20.0, size * 1e-6) if tol > 0 else np.maximum(size * 1e-4, 1e-9)
    return 2.0 * shapely.length(shapely.maximum_inscribed_circle(pieces, precision))


# ---------------------------------------------------------------- the unit polygons

def collections_as(g: np.ndarray, parts_of, build) -> np.ndarray:
    """Replace, in place, each GeometryCollection of ``g`` by one multi-geometry of its parts.

    ``parts_of`` is :func:`polygonal_parts` or :func:`linear_parts`, ``build``
    the matching shapely constructor (``multipolygons``, ``multilinestrings``);
    a collection without such parts becomes None.
    """
    coll = np.flatnonzero(shapely.get_type_id(g) == COLLECTION)
    if len(coll):
        parts, k = parts_of(g[coll])
        out = np.full(len(coll), None, dtype=object)
        if len(parts):
            build(parts, indices=k, out=out)
        g[coll] = out
    return g


def polygonal(geoms: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    """Polygonal geometries fit for coverage work; None where a feature has no area.

    Invalid polygons are repaired with GEOS ``make_valid`` (method
    'structure', which keeps the area the rings enclose) and non-polygonal
    parts are dropped: the metadata family reports those features themselves.
    ``valid`` is the layer's GEOS validity when already known (``Layer.valid``).
    """
    g = np.array(geoms, dtype=object, copy=True)
    t = shapely.get_type_id(g)
    g[~np.isin(t, (POLYGON, MULTIPOLYGON, COLLECTION))] = None
    g[shapely.is_empty(g)] = None
    t = shapely.get_type_id(g)
    poly = np.isin(t, (POLYGON, MULTIPOLYGON))
    bad = np.flatnonzero(poly & ~(shapely.is_valid(g) if valid is None else valid))
    if len(bad):
        g[bad] = shapely.make_valid(g[bad], method="structure", keep_collapsed=False)
    collections_as(g, polygonal_parts, shapely.multipolygons)
    g[shapely.is_empty(g)] = None
    return g


@dataclass
class Units:
    """The unit polygons as the topology checks see them."""

    rows: np.ndarray  # layer row of each polygon kept
    geoms: np.ndarray  # its polygonal geometry
    ids: np.ndarray  # feature ids as text
    codes: np.ndarray | None  # unit codes as text ('' when empty); None when the layer has no unit field
    source: str
    _tree: Any = None

    def __len__(self) -> int:
        return len(self.geoms)

    @property
    def tree(self) -> shapely.STRtree:
        if self._tree is None:
            self._tree = shapely.STRtree(self.geoms)
        return self._tree

    def code(self, k: int) -> str:
        if self.codes is None:
            return "?"
        return self.codes[k] or "no code"

    def label(self, k: int) -> str:
        return f"{self.ids[k]} ({self.code(k)})"

    def labels(self, ks) -> str:
        return join_words([self.label(k) for k in ks])


def get_units(project, ctx) -> Units:
    def compute():
        layer = project.layers["units"]
        geoms = polygonal(layer.geometry, layer.valid)
        # features with coordinates no map can have are reported by coordinates-implausible
        rows = np.flatnonzero(~shapely.is_missing(geoms) & ~far_out(layer.geometry, layer.crs)[0])
        codes = None
        values = text_values(layer, "unit_field")
        if values is not None:
            k, texts = values
            codes = np.array([t.strip() for t in texts], dtype=object)[k[rows]]
        return Units(rows, geoms[rows], np.asarray(layer.ids, dtype=object)[rows], codes, layer.source)

    return ctx.shared("topology.units", compute)


# ---------------------------------------------------------------- the half-edge table

def polygon_half_edges(geoms: np.ndarray):
    """Directed boundary segments of polygons with the interior on the left.

    Returns x0, y0, x1, y1 and the owner (index into ``geoms``) of every
    segment of every ring, zero-length segments dropped.
    """
    empty = (np.empty(0),) * 4 + (np.empty(0, dtype=np.int64),)
    if len(geoms) == 0:
        return empty
    gtype, coords, offsets = shapely.to_ragged_array(geoms, include_z=False)
    if gtype == shapely.GeometryType.POLYGON:
        ring_off, part_off = offsets
        geom_of_part = np.arange(len(part_off) - 1)
    else:
        ring_off, part_off, geom_off = offsets
        geom_of_part = np.repeat(np.arange(len(geom_off) - 1), np.diff(geom_off))
    ring_off = ring_off.astype(np.int64)
    n_rings = len(ring_off) - 1
    if n_rings == 0:
        return empty
    part_of_ring = np.repeat(np.arange(len(part_off) - 1), np.diff(part_off))
    is_ext = np.zeros(n_rings, dtype=bool)
    is_ext[part_off[:-1][np.diff(part_off) > 0]] = True
    owner_of_ring = geom_of_part[part_of_ring]
    starts = np.ones(len(coords), dtype=bool)
    starts[ring_off[1:] - 1] = False
    s = np.flatnonzero(starts)
    ring = np.repeat(np.arange(n_rings), np.diff(ring_off) - 1)
    x, y = coords[:, 0], coords[:, 1]
    ox, oy = x[ring_off[:-1]][ring], y[ring_off[:-1]][ring]
    ax, ay, bx, by = x[s] - ox, y[s] - oy, x[s + 1] - ox, y[s + 1] - oy
    twice_area = np.bincount(ring, ax * by - bx * ay, minlength=n_rings)
    flip = (is_ext != (twice_area > 0))[ring]
    del ax, ay, bx, by, ox, oy
    x0 = np.where(flip, x[s + 1], x[s])
    y0 = np.where(flip, y[s + 1], y[s])
    x1 = np.where(flip, x[s], x[s + 1])
    y1 = np.where(flip, y[s], y[s + 1])
    owner = owner_of_ring[ring]
    keep = (x0 != x1) | (y0 != y1)
    if not keep.all():
        x0, y0, x1, y1, owner = x0[keep], y0[keep], x1[keep], y1[keep], owner[keep]
    return x0, y0, x1, y1, owner


@dataclass
class Edges:
    """Every distinct boundary segment of the units, with who draws it on which side.

    ``left``/``right`` are the polygons with the segment's interior on their
    left going from (px, py) to (qx, qy) and the reverse (-1: none).
    ``twin`` marks the clean case: exactly one polygon on each side.
    ``suspects`` are polygons owning any half-edge without its twin.
    """

    h: np.ndarray
    px: np.ndarray
    py: np.ndarray
    qx: np.ndarray
    qy: np.ndarray
    count: np.ndarray
    left: np.ndarray
    right: np.ndarray
    twin: np.ndarray
    suspects: np.ndarray
    outline: np.ndarray | None = None  # set by the coverage analysis: single edges on the map's outer edge

    def __len__(self) -> int:
        return len(self.h)

    @property
    def length(self) -> np.ndarray:
        return np.hypot(self.qx - self.px, self.qy - self.py)

    def find(self, h, px, py, qx, qy) -> np.ndarray:
        """Index of the edge with exactly these (canonical) coordinates, or -1."""
        if len(self.h) == 0:
            return np.full(len(h), -1, dtype=np.int64)
        order = np.argsort(h)  # sorted needles keep the binary searches in cache
        pos = np.empty(len(h), dtype=np.int64)
        pos[order] = np.searchsorted(self.h, h[order])
        np.minimum(pos, len(self.h) - 1, out=pos)
        ok = (self.h[pos] == h) & (self.px[pos] == px) & (self.py[pos] == py) & (self.qx[pos] == qx) & (self.qy[pos] == qy)
        return np.where(ok, pos, -1)

    def lines(self, idx) -> np.ndarray:
        return segment_lines(self.px[idx], self.py[idx], self.qx[idx], self.qy[idx])


def build_edges(geoms: np.ndarray) -> Edges:
    x0, y0, x1, y1, owner = polygon_half_edges(geoms)
    px, py, qx, qy, fwd = canonical(x0, y0, x1, y1)
    del x0, y0, x1, y1
    h = coord_hash(px, py, qx, qy)
    order, gid, starts = group_sorted(h, px, py, qx, qy)
    n = len(order)
    counts = np.diff(np.r_[starts, n])
    fwd_s = fwd[order]
    own_s = owner[order]
    n_fwd = np.bincount(gid, weights=fwd_s, minlength=len(starts)).astype(np.int64) if n else np.zeros(0, np.int64)
    twin = (counts == 2) & (n_fwd == 1)
    first = own_s[starts] if n else np.zeros(0, np.int64)
    second = np.where(counts >= 2, own_s[np.minimum(starts + 1, max(n - 1, 0))], -1) if n else np.zeros(0, np.int64)
    first_fwd = fwd_s[starts] if n else np.zeros(0, bool)
    left = np.where(first_fwd, first, second)
    right = np.where(first_fwd, second, first)
    suspects = np.unique(own_s[~twin[gid]]) if n else np.zeros(0, np.int64)
    sel = order[starts]
    return Edges(h[sel], px[sel], py[sel], qx[sel], qy[sel], counts, left, right, twin, suspects)


def get_edges(project, ctx) -> Edges:
    return ctx.shared("topology.edges", lambda: build_edges(get_units(project, ctx).geoms))


# ---------------------------------------------------------------- the coverage analysis

@dataclass
class Piece:
    """A gap, an overlap or an outside part: where, how big, which polygons."""

    geom: Any
    area: float
    width: float
    units: tuple[int, ...]
    at_extent: bool = False


@dataclass
class Coverage:
    tol: float
    extent: Any  # polygonal
    extent_declared: bool
    union: Any
    implicated: np.ndarray
    overlaps: list[Piece] = field(default_factory=list)
    gaps: list[Piece] = field(default_factory=list)
    outside: list[Piece] = field(default_factory=list)
    collinear: list[tuple[tuple[int, int], Any, float]] = field(default_factory=list)

    @property
    def extent_boundary(self):
        return shapely.boundary(self.extent) if self.extent is not None else None


def extent_of(project, union) -> tuple[Any, bool]:
    """The map extent: the extent layer when it has area, else the outer boundary of the units."""
    layer = project.layers.get("extent")
    if layer is not None:
        geoms = polygonal(layer.geometry, layer.valid)
        geoms = geoms[~shapely.is_missing(geoms) & ~far_out(layer.geometry, layer.crs)[0]]
        if len(geoms):
            return shapely.union_all(geoms), True
    if union is None or shapely.is_empty(union):
        return None, False
    # everything the units' boundaries enclose, including holes closed by
    # polygons that only touch at points
    rings = shapely.union_all(shapely.boundary(shapely.get_parts(union)))
    faces = shapely.get_parts(shapely.polygonize(shapely.get_parts(rings)))
    return shapely.union_all(np.concatenate([faces, [union]])), False


def _note_extent(project, ctx, declared: bool) -> None:
    if declared:
        ctx.note(f"Map extent: the extent layer ({project.layers['extent'].source}).")
    elif "extent" in project.layers:
        ctx.note("Map extent: the extent layer has no polygon, so the outer boundary of the unit polygons was used; gaps open to the map edge cannot be found.")
    else:
        ctx.note("Map extent: no extent layer, so the outer boundary of the unit polygons was used; gaps open to the map edge cannot be found.")


def union_from_edges(edges: Edges, geoms: np.ndarray):
    """The union of a valid coverage, from its outer edges alone.

    In a valid coverage the boundary of the union is made of the edges drawn
    once; polygonizing them gives every face they enclose, and a face is
    covered by units exactly when the units lie on the left of the half-edges
    along its counter-clockwise outer ring (read from the half-edge table, no
    point-in-polygon test needed, so thin faces are classified as surely as
    wide ones). Equal to GEOS's coverage union, at the cost of the outline.
    """
    single = np.flatnonzero(edges.count == 1)
    if not len(single):
        return shapely.coverage_union_all(geoms)
    faces = shapely.get_parts(shapely.polygonize(edges.lines(single)))
    if not len(faces):
        return shapely.coverage_union_all(geoms)
    ring = shapely.get_exterior_ring(shapely.orient_polygons(faces, exterior_cw=False))
    a = shapely.get_coordinates(shapely.get_point(ring, 0))
    b = shapely.get_coordinates(shapely.get_point(ring, 1))
    px, py, qx, qy, fwd = canonical(a[:, 0], a[:, 1], b[:, 0], b[:, 1])
    e = edges.find(coord_hash(px, py, qx, qy), px, py, qx, qy)
    if (e < 0).any():  # a face ring not made of the input segments: let GEOS do it
        return shapely.coverage_union_all(geoms)
    covered = np.where(fwd, edges.left[e] >= 0, edges.right[e] >= 0)
    return shapely.multipolygons(faces[covered]) if covered.any() else shapely.Polygon()


def analyse_coverage(project, ctx) -> Coverage:
    units = get_units(project, ctx)
    edges = get_edges(project, ctx)
    tol = float(ctx.tolerance)
    geoms = units.geoms
    tree = units.tree
    # 1. polygons that may be part of a defect: those with an untwinned half-edge and their neighbours
    region = edges.suspects
    if len(region):
        _, nb = tree.query(geoms[region], predicate="intersects")
        region = np.union1d(region, nb)
    # 2. GEOS's own validation, on that region only
    implicated = np.zeros(0, dtype=np.int64)
    invalid: dict[int, Any] = {}
    if len(region):
        inv = shapely.coverage_invalid_edges(geoms[region])
        bad = ~shapely.is_empty(inv)
        implicated = region[bad]
        invalid = dict(zip(implicated.tolist(), inv[bad]))
    # 3. overlaps. When GEOS finds nothing invalid and no segment is drawn twice on one side,
    # the polygons cannot overlap. Otherwise every pair of intersecting polygons of the region
    # whose interiors meet (DE-9IM T********) is intersected: GEOS alone can miss a polygon
    # whose edge inside another one is matched exactly by a third.
    irregular = (edges.count >= 3) | ((edges.count == 2) & ~edges.twin)
    pieces: list[Piece] = []
    pair_pieces: dict[tuple[int, int], list] = {}
    if len(implicated) or irregular.any():
        a, b = tree.query(geoms[region], predicate="intersects")
        a = region[a]
        keep = (a < b) & np.isin(b, region)
        a, b = a[keep], b[keep]
        inner = shapely.relate_pattern(geoms[a], geoms[b], "T********")
        a, b = a[inner], b[inner]
        if len(a):
            parts, k = polygonal_parts(shapely.intersection(geoms[a], geoms[b]))
            w = widths(parts, tol)
            for part, kk, ww in zip(parts, k, w):
                pair = (int(a[kk]), int(b[kk]))
                pieces.append(Piece(part, float(shapely.area(part)), float(ww), pair))
                pair_pieces.setdefault(pair, []).append(part)
    # 4. the union of the units: GEOS coverage union on the part with no defect, plain union for the rest
    involved = np.union1d(implicated, np.array([u for pair in pair_pieces for u in pair], dtype=np.int64))
    if len(geoms) == 0:
        union = shapely.Polygon()
    elif len(involved) == 0:
        union = union_from_edges(edges, geoms)
    else:
        rest = np.ones(len(geoms), dtype=bool)
        rest[involved] = False
        union = shapely.union_all(np.concatenate([[shapely.coverage_union_all(geoms[rest])], geoms[involved]]))
    extent, declared = extent_of(project, union)
    _note_extent(project, ctx, declared)
    cov = Coverage(tol, extent, declared, union, implicated, overlaps=pieces)
    # 5. edges that run together exactly but with different vertices (GEOS "misaligned")
    if len(implicated) > 1:
        a, b = tree.query(geoms[implicated], predicate="intersects")
        a = implicated[a]
        keep = (a < b) & np.isin(b, implicated)
        for pp, qq in zip(a[keep], b[keep]):
            common = shapely.intersection(invalid[int(pp)], invalid[int(qq)])
            lines, _ = linear_parts(np.array([common], dtype=object))
            if not len(lines):
                continue
            merged = shapely.line_merge(shapely.multilinestrings(lines))
            explained = pair_pieces.get((int(pp), int(qq)))
            if explained:
                merged = shapely.difference(merged, shapely.union_all(explained))
            length = float(shapely.length(merged))
            if length > 0:
                cov.collinear.append(((int(pp), int(qq)), merged, length))
    # 6. gaps: the extent minus the union
    if extent is not None:
        gaps, _ = polygonal_parts(np.array([shapely.difference(extent, union)], dtype=object))
        if len(gaps):
            w = widths(gaps, tol)
            # the polygons along a gap: those sharing a stretch of edge with it, not just a point
            gi, ui = tree.query(gaps, predicate="intersects")
            along = shapely.length(shapely.intersection(shapely.boundary(gaps[gi]), shapely.boundary(geoms[ui]))) > 0
            gi, ui = gi[along], ui[along]
            eb = shapely.boundary(extent)
            at_edge = shapely.length(shapely.intersection(shapely.boundary(gaps), eb)) > 0
            for k, (g, ww) in enumerate(zip(gaps, w)):
                around = tuple(sorted(int(u) for u in ui[gi == k]))
                if around or at_edge[k] or not len(geoms):  # else a degenerate leftover of the overlay
                    cov.gaps.append(Piece(g, float(shapely.area(g)), float(ww), around, bool(at_edge[k])))
        # 7. unit area outside a declared extent
        if declared:
            out, _ = polygonal_parts(np.array([shapely.difference(union, extent)], dtype=object))
            if len(out):
                oi, ui = tree.query(out, predicate="intersects")
                inter = shapely.intersection(geoms[ui], out[oi])
                parts, k = polygonal_parts(inter)
                w = widths(parts, tol)
                for part, kk, ww in zip(parts, k, w):
                    cov.outside.append(Piece(part, float(shapely.area(part)), float(ww), (int(ui[kk]),), True))
    # the map's outer edge, for the linework family: single edges along the extent boundary
    single = np.flatnonzero(edges.count == 1)
    outline = np.zeros(len(edges), dtype=bool)
    if len(single) and extent is not None:
        _, xy, off = shapely.to_ragged_array(shapely.get_parts(shapely.boundary(extent)), include_z=False)
        ends = np.ones(len(xy), dtype=bool)
        ends[off[0][1:] - 1] = False
        k = np.flatnonzero(ends)
        border = shapely.STRtree(segment_lines(xy[k, 0], xy[k, 1], xy[k + 1, 0], xy[k + 1, 1]))
        near = max(tol, 0.0) + 1e-9 * _scale_of(extent)
        on = np.ones(len(single), dtype=bool)
        for t in (0.0, 0.25, 0.5, 0.75, 1.0):  # along the segment: both ends and three points between
            x = edges.px[single] + t * (edges.qx[single] - edges.px[single])
            y = edges.py[single] + t * (edges.qy[single] - edges.py[single])
            hit = np.zeros(len(single), dtype=bool)
            hit[border.query(shapely.points(x, y), predicate="dwithin", distance=near)[0]] = True
            on &= hit
        outline[single] = on
    edges.outline = outline
    return cov


def _scale_of(geom) -> float:
    x0, y0, x1, y1 = shapely.bounds(geom)
    return max(abs(x0), abs(y0), abs(x1), abs(y1), 1.0)


def get_coverage(project, ctx) -> Coverage:
    def compute():
        try:
            return analyse_coverage(project, ctx)
        except shapely.errors.GEOSException as exc:  # overlay robustness failure on degenerate input
            raise ArchivistError(
                f"{project.layers['units'].source}: GEOS could not analyse the unit polygons ({exc}); "
                "repair invalid or degenerate polygons (see geometry-invalid) and check again"
            ) from None

    return ctx.shared("topology.coverage", compute)


# ---------------------------------------------------------------- edge mismatches, grouped per pair

def stretch_length(piece) -> float:
    """How long a thin piece runs along the edges.

    The long side of the rectangle with the piece's area and perimeter (exact
    for a strip, even a curved one), or the long side of its minimum rotated
    rectangle (exact for a straight wedge), whichever is longer.
    """
    half = float(shapely.length(piece)) / 2.0
    disc = half * half - 4.0 * float(shapely.area(piece))
    strip = (half + math.sqrt(max(disc, 0.0))) / 2.0
    xy = shapely.get_coordinates(shapely.oriented_envelope(piece))
    sides = np.hypot(*np.diff(xy, axis=0).T) if len(xy) > 1 else np.zeros(1)
    return max(strip, float(sides.max()))


@dataclass
class Mismatch:
    units: tuple[int, ...]
    geometry: Any  # the misfitting linework
    length: float
    apart: float | None  # the largest separation; None when the edges coincide but their vertices differ


def mismatches(project, ctx) -> list[Mismatch]:
    def compute():
        cov = get_coverage(project, ctx)
        tol = cov.tol
        groups: dict[tuple[int, ...], dict] = {}

        def add(key, geom, length, apart):
            g = groups.setdefault(key, {"geoms": [], "length": 0.0, "apart": None})
            g["geoms"].append(geom)
            g["length"] += length
            if apart is not None:
                g["apart"] = max(g["apart"] or 0.0, apart)

        for piece in cov.overlaps:
            if piece.width <= tol * ABOVE:
                add(piece.units, shapely.boundary(piece.geom), stretch_length(piece.geom), piece.width)
        for piece in cov.gaps:
            # thin gaps along the extent edge mean the units lie on it within the tolerance
            if piece.width <= tol * ABOVE and piece.units and not piece.at_extent:
                add(piece.units, shapely.boundary(piece.geom), stretch_length(piece.geom), piece.width)
        pieces = [p for p in cov.overlaps + cov.gaps + cov.outside]
        for pair, geom, length in cov.collinear:
            # vertices missing from one side at the corners of a gap or overlap between the
            # same two polygons belong to that defect
            if any(pair[0] in p.units and pair[1] in p.units and shapely.intersects(geom, p.geom) for p in pieces):
                continue
            add(pair, geom, length, None)
        out = []
        for us, g in groups.items():
            parts, _ = linear_parts(np.array(g["geoms"], dtype=object))
            geom = shapely.line_merge(shapely.multilinestrings(parts)) if len(parts) else shapely.union_all(g["geoms"])
            out.append(Mismatch(us, geom, g["length"], g["apart"]))
        out.sort(key=lambda m: m.units)
        return out

    return ctx.shared("topology.mismatches", compute)


# ---------------------------------------------------------------- rules

@rule("unit-overlap", family="topology", severity="error", needs=("units",))
def unit_overlap(project, ctx):
    """Two unit polygons share area.

    Catches
    -------
    Every place where two unit polygons cover the same ground and the shared
    piece is wider than the tolerance (`[checks] tolerance`, by default 0.1 mm
    at map scale): one finding per overlap piece, with the piece itself, its
    area, both feature ids and both unit codes. A polygon lying inside another
    and exact duplicates are overlaps too. Thinner overlaps, left where two
    neighbours' shared edge was digitised twice, are reported by
    `unit-edge-mismatch` instead, so each defect is reported once. Which
    polygons take part is decided by GEOS's own coverage validation
    (`shapely.coverage_invalid_edges`); the overlap pieces are exact GEOS
    intersections.

    Why it matters
    --------------
    A point of the map belongs to two units at once: the map contradicts
    itself, areas per unit add up to more than the map, and a user querying
    the unit at a site gets whichever polygon their software finds first.

    Fix
    ---
    Decide which unit the overlap belongs to, cut it out of the other polygon
    (snap both to the contact line and rebuild the polygons from the lines if
    the project keeps lines as the master).

    Example
    -------
    Two 10 m x 10 m squares whose shared edge was drawn 0.1 m too far into the
    second one, on a map whose tolerance is 0.05 m: "Units 1 (A) and 2 (B)
    overlap by 1.00 m² (up to 0.10 m wide)."
    """
    units = get_units(project, ctx)
    cov = get_coverage(project, ctx)
    m = metres_per_unit(project)
    for piece in cov.overlaps:
        if piece.width <= cov.tol * ABOVE:
            continue
        a, b = piece.units
        area = piece.area * m * m
        yield Hit(
            f"Units {units.labels([a, b])} overlap by {num(area)} m² (up to {num(piece.width * m)} m wide).",
            layer="units",
            features=(units.ids[a], units.ids[b]),
            measure=area,
            geometry=piece.geom,
        )


@rule("unit-gap", family="topology", severity="error", needs=("units",))
def unit_gap(project, ctx):
    """An unmapped hole inside the map extent.

    Catches
    -------
    Every piece of the map extent that no unit polygon covers and that is
    wider than the tolerance: one finding per gap, with the gap polygon, its
    area and the ids of the polygons around it. The extent is the `extent`
    layer when the manifest names one; otherwise it is the outer boundary of
    all units, and the report says so; then only holes enclosed by units can
    be found, not bays open to the map edge. Gaps no wider than the tolerance
    between two neighbours (whose shared edge was digitised twice, apart) are
    reported once, by `unit-edge-mismatch`; gaps no wider than the tolerance
    between a unit and the extent edge count as the unit lying on the edge.
    The polygons named are those sharing a stretch of edge with the gap.

    Why it matters
    --------------
    A geological map claims to say what is under every point inside its
    frame. A hole is ground the map says nothing about, usually a polygon lost
    while editing; areas per unit no longer add up to the map.

    Fix
    ---
    Draw the missing polygon with its unit, or extend the neighbours to meet
    along their contact. If the hole is real (a lake, ground not visited),
    map it as a polygon with its own code in the legend.

    Example
    -------
    A 2 m x 0.5 m slot left between two units: "Gap of 1.00 m² (up to 0.50 m
    wide) inside the map extent, between units 1 (A) and 2 (B)."
    """
    units = get_units(project, ctx)
    cov = get_coverage(project, ctx)
    m = metres_per_unit(project)
    for piece in cov.gaps:
        if piece.width <= cov.tol * ABOVE and (piece.units or piece.at_extent):
            continue
        area = piece.area * m * m
        where = f"between units {units.labels(piece.units)}" if len(piece.units) > 1 else (
            f"next to unit {units.label(piece.units[0])}" if piece.units else "with no unit around it")
        edge = " at the map edge" if piece.at_extent else ""
        yield Hit(
            f"Gap of {num(area)} m² (up to {num(piece.width * m)} m wide) inside the map extent{edge}, {where}.",
            layer="units",
            features=tuple(units.ids[k] for k in piece.units),
            measure=area,
            geometry=piece.geom,
        )


def sliver_thresholds(project) -> tuple[float, float]:
    """(smallest area, smallest width) in map units, from ``[checks]`` at map scale."""
    cfg = project.config
    m = metres_per_unit(project)
    ground_mm = cfg.scale / 1000.0  # metres of ground per millimetre of map
    return cfg.sliver_area_mm2 * ground_mm * ground_mm / (m * m), cfg.sliver_width_mm * ground_mm / m


@rule("unit-sliver", family="topology", severity="warning", needs=("units",))
def unit_sliver(project, ctx):
    """A unit polygon is too small or too thin to be seen at publication scale.

    Catches
    -------
    Polygons whose area is under `[checks] sliver_area_mm2` (default 1 mm²)
    of printed map, or whose width is under `sliver_width_mm` (default
    0.5 mm) everywhere, both measured at the map scale of `[map] scale`
    (1 mm² at 1:25 000 is 625 m², 0.5 mm is 12.5 m). The defaults are a
    rule of thumb of the trade (common practice; values from memory, not from
    a published standard). The width is the diameter of the largest circle
    that fits inside the polygon (GEOS `maximum_inscribed_circle`); a polygon
    with a thin tail but a wide body is not a sliver. To stay fast on large
    maps, the inscribed circle is computed only for polygons that could be
    thin: every point of a polygon whose inscribed circle has radius r lies
    within r of an edge or a vertex, so its area is at most perimeter x r plus
    half a disc of radius r per vertex; a polygon with more area than that
    bound at r = half the width is wide enough and skipped.

    Why it matters
    --------------
    Nobody can see, colour or label such a polygon on the printed map, and
    most slivers are not geology but leftovers of editing: a contact drawn
    twice, a polygon cut by a line that should have snapped.

    Fix
    ---
    Merge a leftover into its neighbour; keep a real small body (a dyke, a
    thin bed) and exaggerate it on the printed map. If the map is published
    for use at a larger scale than `[map] scale`, set that scale, or lower
    the thresholds in `[checks]`.

    Example
    -------
    At 1:10 000 (100 m², 5 m) a 40 m x 2 m strip gives "Unit 3 (B) is a sliver
    at 1:10,000: 80.00 m² (smallest legible 100.00 m²), at most 2.00 m wide
    (narrowest legible 5.00 m)."
    """
    units = get_units(project, ctx)
    if not len(units):
        return
    amin, wmin = sliver_thresholds(project)
    m = metres_per_unit(project)
    geoms = units.geoms
    area = shapely.area(geoms)
    small = area < amin
    perim = shapely.length(geoms)
    nverts = shapely.get_num_coordinates(geoms)
    r = wmin / 2.0
    maybe_thin = area <= perim * r + nverts * (math.pi / 2.0) * r * r
    cand = np.flatnonzero(small | maybe_thin)
    wid = np.full(len(geoms), np.inf)
    if len(cand):
        wid[cand] = widths(geoms[cand], wmin / 10.0)
    thin = wid < wmin
    scale = f"1:{project.config.scale:,.0f}"
    for k in np.flatnonzero(small | thin):
        parts = []
        if small[k]:
            parts.append(f"{num(area[k] * m * m)} m² (smallest legible {num(amin * m * m)} m²)")
        if thin[k]:
            parts.append(f"at most {num(wid[k] * m)} m wide (narrowest legible {num(wmin * m)} m)")
        elif np.isfinite(wid[k]):
            parts.append(f"{num(wid[k] * m)} m wide")
        yield Hit(
            f"Unit {units.label(k)} is a sliver at {scale}: {', '.join(parts)}.",
            layer="units",
            features=(units.ids[k],),
            measure=float(area[k] * m * m),
            geometry=geoms[k],
        )


@rule("unit-edge-mismatch", family="topology", severity="error", needs=("units",))
def unit_edge_mismatch(project, ctx):
    """Neighbouring polygons whose common edge nearly, but not exactly, coincides.

    Catches
    -------
    Pairs of unit polygons whose boundaries run together but are not drawn
    with the same vertices: thin overlaps and thin gaps no wider than the
    tolerance (`[checks] tolerance`, default 0.1 mm at map scale), and edges
    that lie exactly on one another but where one polygon has vertices the
    other lacks (GEOS reports these as invalid coverage edges). One finding
    per pair (or per group of polygons around a thin gap), with the misfitting
    linework, the length of the stretch (for a thin piece: the long side of
    the rectangle with its area and perimeter, or of its minimum rotated
    rectangle, whichever is longer) and the largest separation (the width of
    the thin piece). Wider overlaps and gaps are reported by `unit-overlap`
    and `unit-gap`, so each defect is reported once. A unit edge within the
    tolerance of the declared extent counts as lying on it, as lines do.
    Even a misfit far below the tolerance (floating-point noise after
    clipping or reprojecting one polygon alone) is reported: the polygons are
    not a coverage until their shared vertices are the same.

    Why it matters
    --------------
    This is where slivers and micro-gaps come from after editing: invisible
    on screen, but the polygons no longer form a coverage, area sums are off,
    and dissolving, simplifying or rebuilding lines from the polygons fails or
    leaves debris.

    Fix
    ---
    Snap the two polygons' shared vertices together (a topological editing
    mode, or snapping with a tolerance a little above the separation reported),
    or rebuild both polygons from the contact line between them.

    Example
    -------
    Two squares sharing the edge x = 10, where the second one's edge has an
    extra vertex at (10.02, 5), on a 1:10 000 map (tolerance 1 m): "Units 1 (A)
    and 2 (B) do not share their common edge exactly: 10.00 m of it is
    misaligned, up to 0.02 m apart."
    """
    units = get_units(project, ctx)
    m = metres_per_unit(project)
    for mm in mismatches(project, ctx):
        if mm.apart is None:
            how = "the edges coincide but their vertices are not shared"
        elif mm.apart * m < 0.005:
            how = "less than 0.01 m apart"
        else:
            how = f"up to {num(mm.apart * m)} m apart"
        text = f"Units {units.labels(mm.units)} do not share their common edge exactly: {num(mm.length * m)} m of it is misaligned, {how}."
        yield Hit(text, layer="units", features=tuple(units.ids[k] for k in mm.units), measure=mm.length * m, geometry=mm.geometry)


@rule("unit-same-neighbour", family="topology", severity="warning", needs=("units",))
def unit_same_neighbour(project, ctx):
    """Two adjacent polygons carry the same unit code and no fault separates them.

    Catches
    -------
    Pairs of unit polygons with the same code (case and surrounding spaces
    ignored) that share a stretch of boundary longer than the tolerance along
    which no line of a fault kind runs (within the tolerance). Polygons that
    meet only at a point are not neighbours. A contact line along the shared
    edge does not excuse it (`line-same-unit-contact` reports that line as
    well). Without a lines layer no fault can be seen, so every such pair is
    reported. Polygons with an empty code are left to `unit-code-missing`.

    Why it matters
    --------------
    Either the two polygons are one body of rock split for no geological
    reason (an editing leftover that doubles the polygon count and hides the
    real outline), or one of them carries the wrong code.

    Fix
    ---
    Merge the two polygons, or correct the code of the mislabelled one; if a
    fault does separate them, draw it along the shared edge with a fault kind.

    Example
    -------
    Two adjacent polygons both coded `A` sharing a 100 m edge with no line on
    it: "Units 1 and 2 are both A and share 100.00 m of boundary with no
    fault along it."
    """
    units = get_units(project, ctx)
    if units.codes is None or not len(units):
        return
    edges = get_edges(project, ctx)
    m = metres_per_unit(project)
    tol = float(ctx.tolerance)
    codes = units.codes
    sel = np.flatnonzero(edges.twin)
    same = codes[edges.left[sel]] == codes[edges.right[sel]]
    sel = sel[same & (codes[edges.left[sel]] != "")]
    faults = None
    if "lines" in project.layers:
        from . import linework

        net = linework.get_lines(project, ctx)
        if sel.size:
            sel = sel[~net.edges_drawn_by(project, ctx, roles=("fault",))[sel]]
        faults = net.role_lines("fault")
    # stretches per pair: exact shared edges, and misaligned edges of same-code pairs
    pairs: dict[tuple[int, int], list] = {}
    if sel.size:
        a = np.minimum(edges.left[sel], edges.right[sel])
        b = np.maximum(edges.left[sel], edges.right[sel])
        key = a * len(units) + b
        uk, inv = np.unique(key, return_inverse=True)
        merged = merge_by_group(edges.lines(sel), inv, len(uk))
        for k, g in zip(uk, merged):
            pairs.setdefault((int(k // len(units)), int(k % len(units))), []).append(g)
    for mm in mismatches(project, ctx):
        if len(mm.units) == 2 and codes[mm.units[0]] == codes[mm.units[1]] and codes[mm.units[0]]:
            pairs.setdefault(tuple(mm.units), []).append(mm.geometry)
    if not pairs:
        return
    keys = list(pairs)
    geoms = np.array([shapely.union_all(v) if len(v) > 1 else v[0] for v in pairs.values()], dtype=object)
    if faults is not None and len(faults):
        from .linework import uncovered

        geoms = uncovered(geoms, faults, tol)
    lengths = shapely.length(geoms)
    for (a, b), g, length in zip(keys, geoms, lengths):
        if length <= tol * ABOVE:
            continue
        yield Hit(
            f"Units {units.ids[a]} and {units.ids[b]} are both {units.code(a)} and share {num(length * m)} m of boundary with no fault along it.",
            layer="units",
            features=(units.ids[a], units.ids[b]),
            measure=float(length * m),
            geometry=g,
        )


@rule("unit-outside-extent", family="topology", severity="error", needs=("units", "extent"))
def unit_outside_extent(project, ctx):
    """Unit area lies outside the declared map extent.

    Catches
    -------
    Each part of a unit polygon outside the polygon(s) of the `extent` layer
    and wider than the tolerance, with its area. Parts no wider than the
    tolerance (a unit edge digitised a hair beyond the frame, or clipped to it
    with rounding) count as lying on the extent, as lines within the
    tolerance of a boundary do. Without an `extent` layer the rule does not
    run: the extent is then the units' own outline, which nothing can lie
    outside.

    Why it matters
    --------------
    The map claims more ground than its stated extent; the area outside was
    often not surveyed, and overlaps with the neighbouring sheet follow.

    Fix
    ---
    Clip the units to the extent, or correct the extent if the map really
    covers more ground.

    Example
    -------
    A unit drawn 2 m past a 100 m side of the frame: "Unit 2 (B) has 200.00 m²
    outside the map extent (up to 2.00 m wide)."
    """
    units = get_units(project, ctx)
    cov = get_coverage(project, ctx)
    m = metres_per_unit(project)
    for piece in cov.outside:
        if piece.width <= cov.tol * ABOVE:
            continue
        (k,) = piece.units
        area = piece.area * m * m
        yield Hit(
            f"Unit {units.label(k)} has {num(area)} m² outside the map extent (up to {num(piece.width * m)} m wide).",
            layer="units",
            features=(units.ids[k],),
            measure=area,
            geometry=piece.geom,
        )


@rule("unit-code-missing", family="topology", severity="error", needs=("units",))
def unit_code_missing(project, ctx):
    """A unit polygon has an empty unit code.

    Catches
    -------
    Polygons whose unit field (`unit_field` in the manifest, default `unit`)
    is null, empty or only spaces. When the field itself is absent,
    `field-missing` reports that once instead.

    Why it matters
    --------------
    A polygon without a unit cannot be coloured, cannot be matched to the
    legend and says nothing about the ground it covers.

    Fix
    ---
    Give the polygon its unit code from the field data, or merge it into the
    neighbour it was split from.

    Example
    -------
    A polygon with `unit = ""` gives "Unit polygon 3 has no unit code
    (field 'unit')."
    """
    layer = project.layers["units"]
    values = text_values(layer, "unit_field")
    if values is None:
        return
    k, texts = values
    geoms = layer.geometry
    blank = np.array([not t.strip() for t in texts], dtype=bool)[k]
    name = layer.field("unit_field")
    m = metres_per_unit(project)
    for k in np.flatnonzero(blank):
        g = geoms[k]
        has = g is not None and not shapely.is_empty(g)
        yield Hit(
            f"Unit polygon {layer.ids[k]} has no unit code (field '{name}')"
            + (f"; it covers {num(shapely.area(g) * m * m)} m²." if has else "."),
            layer="units",
            features=(str(layer.ids[k]),),
            measure=float(shapely.area(g) * m * m) if has else None,
            geometry=g if has else None,
        )
