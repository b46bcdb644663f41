"""Whole-array helpers: coordinate hashing, grouping equal rows, parts of geometries, widths.

Everything here works on numpy arrays of coordinates or of shapely
geometries at once; nothing loops over features in Python.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable, Iterator, Sequence

import numpy as np
import pandas as pd
import shapely

from ..readers import as_text

if TYPE_CHECKING:
    from ..model import Hit
    from ..project import Layer

POLYGON = shapely.GeometryType.POLYGON.value
MULTIPOLYGON = shapely.GeometryType.MULTIPOLYGON.value
LINESTRING = shapely.GeometryType.LINESTRING.value
MULTILINESTRING = shapely.GeometryType.MULTILINESTRING.value
COLLECTION = shapely.GeometryType.GEOMETRYCOLLECTION.value

_SEEDS = [np.uint64(s) for s in (0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F, 0x165667B19E3779F9, 0x27D4EB2F165667C5)]
_M1 = np.uint64(0xFF51AFD7ED558CCD)
_M2 = np.uint64(0xC4CEB9FE1A85EC53)
_S33 = np.uint64(33)


def present(geoms: np.ndarray) -> np.ndarray:
    """Mask of the geometries that are there (not missing) and not empty."""
    return ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))


def _fmix(h: np.ndarray) -> np.ndarray:
    h ^= h >> _S33
    h *= _M1
    h ^= h >> _S33
    h *= _M2
    h ^= h >> _S33
    return h


def same_objects(old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Per element of ``new``: the position in ``old`` of the very same object (identity), else -1."""
    if not len(old):
        return np.full(len(new), -1, dtype=np.int64)
    a = np.fromiter(map(id, old), dtype=np.int64, count=len(old))
    b = np.fromiter(map(id, new), dtype=np.int64, count=len(new))
    order = np.argsort(a, kind="stable")
    at = np.minimum(np.searchsorted(a[order], b), len(a) - 1)
    return np.where(a[order][at] == b, order[at], -1)


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


def canonical(
    x0: np.ndarray, y0: np.ndarray, x1: np.ndarray, y1: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Undirected segment keys: endpoints in (x, y) order, and whether the segment ran that way."""
    fwd = (x0 < x1) | ((x0 == x1) & (y0 <= y1))
    px = np.where(fwd, x0, x1)
    py = np.where(fwd, y0, y1)
    qx = np.where(fwd, x1, x0)
    qy = np.where(fwd, y1, y0)
    return px, py, qx, qy, fwd


def spans(starts: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every position of the spans ``starts[i]`` .. ``starts[i] + counts[i] - 1``, span by span, in order: the
    span ``i`` of each and the position (a ragged range, on arrays)."""
    counts = np.asarray(counts, dtype=np.int64)
    which = np.repeat(np.arange(len(counts)), counts)
    begin = np.repeat(np.asarray(starts, dtype=np.int64), counts)
    return which, begin + np.arange(len(which)) - np.repeat(np.cumsum(counts) - counts, counts)


def group_sorted(h: np.ndarray, *cols: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
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


def segment_lines(x0: np.ndarray, y0: np.ndarray, x1: np.ndarray, y1: np.ndarray) -> np.ndarray:
    """Two-point LineStrings from segment coordinate arrays."""
    pts = np.empty((len(x0), 2, 2))
    pts[:, 0, 0], pts[:, 0, 1], pts[:, 1, 0], pts[:, 1, 1] = x0, y0, x1, y1
    return shapely.linestrings(pts) if len(x0) else np.empty(0, dtype=object)


def segments(parts: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every segment of single-part lines or rings: (start xy, end xy, index of its part in ``parts``)."""
    xy, part = shapely.get_coordinates(parts, return_index=True)
    same = part[1:] == part[:-1]  # consecutive coordinates of one part make a segment
    return xy[:-1][same], xy[1:][same], part[:-1][same]


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


TABLE_CELLS = 1 << 20  # geometries per batch of group tables (8 MB of references)


def group_tables(values: np.ndarray, groups: np.ndarray, n: int,
                 cells: int | None = None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """``values`` by group (``groups[i]`` in 0..n-1), as tables for a call along their rows (``func(table, axis=1)``:
    GEOS's union or polygonize of each group in one call): per batch, the groups (rows) and their table, each row
    its group's values in their order, padded with None (an empty group is a row of None).

    Groups of like size go together, in batches of about ``cells`` cells (default :data:`TABLE_CELLS`): a few
    large groups do not widen the table of all the others. Every group is in one batch.
    """
    cells = TABLE_CELLS if cells is None else cells
    order = np.argsort(groups, kind="stable")
    count = np.bincount(groups, minlength=n)[:n] if len(groups) else np.zeros(n, dtype=np.int64)
    first = np.cumsum(count) - count
    by_size = np.argsort(count, kind="stable")
    start = 0
    while start < n:
        wide = np.maximum(count[by_size[start:]], 1) * np.arange(1, n - start + 1)  # non-decreasing
        stop = start + max(1, int(np.searchsorted(wide, max(cells, int(wide[0])), side="right")))
        rows = by_size[start:stop]
        length = count[rows]
        offset = np.cumsum(length) - length
        at = np.arange(int(length.sum())) - np.repeat(offset, length)
        table = np.full((len(rows), max(int(length.max()), 1)), None, dtype=object)
        table[np.repeat(np.arange(len(rows)), length), at] = values[order[np.repeat(first[rows], length) + at]]
        yield rows, table
        start = stop


def union_by_group(values: np.ndarray, groups: np.ndarray, n: int) -> np.ndarray:
    """Per group 0..n-1, GEOS's union of its ``values`` in their order (``shapely.union_all`` of them; an empty
    group gives an empty collection), tables of groups at a time (:func:`group_tables`)."""
    out = np.empty(n, dtype=object)
    for rows, table in group_tables(values, groups, n):
        out[rows] = shapely.union_all(table, axis=1)
    return out


def _parts_of_type(
    geoms: np.ndarray, single: int, multi: int, measure: Callable[[np.ndarray], np.ndarray], minimum: float
) -> tuple[np.ndarray, np.ndarray]:
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


def polygonal_parts(geoms: np.ndarray, min_area: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Polygon parts with area above ``min_area`` of each geometry: (parts, index of the source geometry)."""
    return _parts_of_type(geoms, POLYGON, MULTIPOLYGON, shapely.area, min_area)


def linear_parts(geoms: np.ndarray, min_length: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """LineString parts longer than ``min_length``: (parts, index of the source geometry)."""
    return _parts_of_type(geoms, LINESTRING, MULTILINESTRING, shapely.length, min_length)


# GEOS simplifies the line it offsets by 1 % of the buffer distance ("The default simplify
# factor provides an accuracy of about 1%", GEOS/JTS BufferParameters), so an erosion by t
# that comes out empty shows the largest inscribed radius is under t x (1 + BUFFER_ACCURACY).
BUFFER_ACCURACY = 0.01
WIDTH_RELATIVE = 0.02  # widths by erosion are settled to 2 % of the radius (or tol/20, if finer)


def widths(pieces: np.ndarray, tol: float) -> np.ndarray:
    """Width of each polygon: the diameter of its largest inscribed circle, to tol/20 of the radius or finer.

    The width returned is that of a circle which fits in the polygon (twice
    the distance from a point inside it to its boundary), at most ``p``
    below the largest one in radius: ``p`` is tol/20 (1e-4 of sqrt(area)
    when tol is 0), and 2 % of the radius where that is smaller and the
    polygon is settled by erosion (below).

    GEOS's grid search (``shapely.maximum_inscribed_circle``) costs about the
    piece's length over ``p`` when the piece is a strip with parallel edges
    (a polygon shifted into its neighbour), since every stretch of it is as
    wide as the widest; on a map with many such strips it was the slowest
    part of a check. So the radius is first bracketed by erosion, for all
    pieces at once (:func:`_eroded_radius`), at a cost that grows with the
    log of size over precision; pieces the bracket does not settle within
    ``p`` (wide ones, where 1 % of the radius is more than tol/20;
    multipolygons) are measured by GEOS at tol/20 as before.
    """
    if len(pieces) == 0:
        return np.empty(0)
    # a multipolygon of one part (as a GeoPackage layer of MULTIPOLYGON holds every polygon) is measured as its polygon
    kind = shapely.get_type_id(pieces)
    one = np.flatnonzero((kind == MULTIPOLYGON) & (shapely.get_num_geometries(pieces) == 1))
    if len(one):
        pieces = np.array(pieces, dtype=object, copy=True)
        pieces[one] = shapely.get_geometry(pieces[one], 0)
        kind[one] = POLYGON
    area = shapely.area(pieces)
    size = np.sqrt(area)
    coarse = np.maximum(tol / 20.0, size * 1e-6) if tol > 0 else np.maximum(size * 1e-4, 1e-9)
    radius = np.full(len(pieces), np.nan)
    perimeter = shapely.length(pieces)
    guess = np.where(perimeter > 0, area / np.where(perimeter > 0, perimeter, 1.0), 0.0)  # about the radius of a strip
    single = kind == POLYGON  # multipolygons (a unit in parts) go to GEOS
    tried = np.flatnonzero(single & (guess > 0) & (BUFFER_ACCURACY * guess < coarse))
    if len(tried):
        lo, settled = _eroded_radius(pieces[tried], guess[tried], coarse[tried])
        radius[tried[settled]] = lo[settled]
    rest = np.flatnonzero(np.isnan(radius))
    if len(rest):
        radius[rest] = shapely.length(shapely.maximum_inscribed_circle(pieces[rest], coarse[rest]))
    return 2.0 * radius


def _eroded_radius(pieces: np.ndarray, guess: np.ndarray, coarse: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The radius of a circle inside each polygon, and whether it is within the precision of the largest.

    Bounds on the largest radius r, for all polygons at once. Upper: r <=
    sqrt(area / pi); r <= 2 x area / perimeter of the convex hull (for a
    convex polygon, area = 1/2 x sum of side x distance from the centre of
    the circle to that side's line >= 1/2 x r x perimeter, and the hull
    holds every circle the polygon holds); r <= half the hull's least width
    (``shapely.minimum_width``: a disc inside the hull is no wider than it
    in any direction; tight for a straight strip); and where
    ``shapely.buffer(piece, -t)`` is empty, r <= t x (1 + BUFFER_ACCURACY)
    (the offsets are exact along edges, the arcs at reflex corners are
    chords that leave more standing, and GEOS simplifies its input by 1 %
    of t). Where it is not empty, what is left holds the true erosion by
    t x (1 + BUFFER_ACCURACY) (the same reading), so r <= t x (1 +
    BUFFER_ACCURACY) + half the least width of what is left: tight where
    that is a straight strip, as it is further along a bent one. Lower: the
    true distance to the boundary (``shapely.distance``) of a point inside
    the polygon (``point_on_surface``), of the middle of the hull's least
    width (the centre of the widest circle in a straight strip or a thin
    wedge) and of a point of each non-empty erosion and the middle of its
    least width. The first round tries t just above the lower bound (to
    settle it) and at area / perimeter (a little under a strip's half-width:
    the erosion leaves its spine); each later round tries t just above the
    lower bound, halfway across the bracket, and about where the deepest
    erosion so far says r is (its area over its perimeter, once for a strip,
    twice for a blob). Which tries are made changes only how many rounds the
    bracket takes, never a bound.
    Rings are cut to nine vertices at least: GEOS drops the erosion of a
    smaller ring whose offset lies within 0.99 t of it as an inverted curve
    (from memory: BufferCurveSetBuilder::isRingCurveInverted; seen here as a
    hexagon 2 m across emptied by 0.95 of its inscribed radius).
    """
    n = len(pieces)
    area = shapely.area(pieces)
    scale = np.max(np.abs(np.nan_to_num(shapely.bounds(pieces))), axis=1)
    noise = 1e-14 * np.maximum(scale, 1.0)  # some 50 units in the last place of the coordinates
    # outer rings of fewer than nine points cut into eight segments or more (holes only grow when eroded)
    outer = shapely.get_exterior_ring(pieces)
    few = np.flatnonzero(shapely.get_num_coordinates(outer) < 9)
    rings = np.array(pieces, dtype=object, copy=True)
    rings[few] = shapely.segmentize(pieces[few], np.maximum(shapely.length(outer[few]) / 8.5, noise[few]))
    shapely.prepare(pieces)
    edge = shapely.boundary(pieces)
    lo = _inside_distance(pieces, edge, np.arange(n), shapely.point_on_surface(pieces))
    hull = shapely.convex_hull(pieces)
    hull_length = shapely.length(hull)
    hi = np.minimum(np.sqrt(area / np.pi),
                    np.where(hull_length > 0, 2.0 * shapely.area(hull) / np.where(hull_length > 0, hull_length, 1.0), np.inf))
    # the hull's least width: no disc inside is wider (an upper bound), and the middle of it, where the polygon is a
    # straight strip or a thin wedge, is the centre of the widest (a lower bound, measured)
    least = shapely.minimum_width(pieces)
    hi = np.minimum(hi, shapely.length(least) / 2.0)
    lo = np.maximum(lo, _inside_distance(pieces, edge, np.arange(n), shapely.centroid(least)))

    def precision(rows: np.ndarray) -> np.ndarray:
        return np.maximum(np.minimum(coarse[rows], WIDTH_RELATIVE * lo[rows]), noise[rows])

    def open_rows() -> np.ndarray:
        rows = np.arange(n)
        return rows[(hi * (1.0 + BUFFER_ACCURACY) - lo > precision(rows)) & (lo <= hi)]

    # the next tries: r is about t + area(E) / perimeter(E) when the erosion E by t is a strip,
    # t + 2 x area(E) / perimeter(E) when it is a convex blob
    estimate = np.c_[guess * 1.07, guess * 1.07]
    for round_ in range(8):
        todo = open_rows()
        if len(todo) == 0:
            break
        span = (hi - lo)[todo, None]
        step = precision(todo)[:, None]
        if round_ == 0:
            # just above the lower bound (settles it), and at the guess: a strip's area over its perimeter is
            # a little under its half-width, so this erosion leaves its spine, whose own measure says the rest
            t = np.concatenate([lo[todo, None] + step * 0.6, guess[todo, None]], axis=1)
        else:
            # just above the lower bound, halfway across the bracket, just under where the deepest erosion says
            # r is for a strip and just over where it says for a blob (one of them empty, one not, most often)
            t = np.concatenate([lo[todo, None] + step * 0.6, lo[todo, None] + span * 0.5,
                                estimate[todo] * np.array([0.998, 1.01])], axis=1)
        k = np.repeat(todo, t.shape[1])
        t = t.ravel()
        useful = (t > lo[k]) & (t < hi[k])
        k, t = k[useful], t[useful]
        try:
            eroded = shapely.buffer(rings[k], -t)
        except shapely.errors.GEOSException:
            break
        empty = shapely.is_missing(eroded)
        empty[~empty] = shapely.is_empty(eroded[~empty])
        np.minimum.at(hi, k[empty], t[empty])
        full = np.flatnonzero(~empty)
        np.maximum.at(lo, k[full], _inside_distance(pieces, edge, k[full], shapely.point_on_surface(eroded[full])))
        # r <= t (1 + BUFFER_ACCURACY) + half the least width of what is left, kept as hi (r <= hi (1 + BUFFER_ACCURACY));
        # the middle of that width is a point inside to measure
        left = shapely.minimum_width(eroded[full])
        np.minimum.at(hi, k[full], t[full] + shapely.length(left) / (2.0 * (1.0 + BUFFER_ACCURACY)))
        np.maximum.at(lo, k[full], _inside_distance(pieces, edge, k[full], shapely.centroid(left)))
        if len(full):
            # per piece, the deepest erosion that left something
            order = np.lexsort((t[full], k[full]))
            last = order[np.r_[k[full][order][1:] != k[full][order][:-1], True]]
            deep = eroded[full][last]
            rest = shapely.area(deep) / np.maximum(shapely.length(deep), noise[k[full][last]])
            estimate[k[full][last]] = t[full][last, None] + rest[:, None] * np.array([1.0, 2.0])
    settled = np.ones(n, dtype=bool)
    settled[open_rows()] = False
    settled &= lo <= hi * (1.0 + BUFFER_ACCURACY)
    return lo, settled


def _inside_distance(pieces: np.ndarray, edge: np.ndarray, k: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Distance from each point to the boundary of polygon ``pieces[k]``; 0 for a point not inside it."""
    out = np.zeros(len(k))
    if len(k) == 0:
        return out
    have = ~shapely.is_missing(points)
    have[have] = ~shapely.is_empty(points[have])
    at = np.flatnonzero(have)
    if len(at):
        xy = shapely.get_coordinates(points[at])
        inside = shapely.contains_xy(pieces[k[at]], xy[:, 0], xy[:, 1])
        d = shapely.distance(edge[k[at]], points[at])
        out[at] = np.where(inside & np.isfinite(d), d, 0.0)
    return out


def collections_as(
    g: np.ndarray,
    parts_of: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]],
    build: Callable[..., np.ndarray],
) -> np.ndarray:
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


def text_values(layer: Layer, key: str) -> tuple[np.ndarray, np.ndarray] | None:
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


def hit_points(hits: Sequence[Hit]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Each hit's geometry, whether it shows one (neither missing nor empty), and the x and y of its finding's place.

    The place is the hit's own x and y where it has both, else its geometry
    itself where that is a point, else GEOS's point on the geometry's
    surface; NaN where the hit has neither. All hits at once: the findings
    (:func:`archivist.engine.to_findings`) and the partitions that own them
    (:func:`archivist.parallel.places_of`) take the same place.
    """
    geoms = np.empty(len(hits), dtype=object)
    geoms[:] = [h.geometry for h in hits]
    given = np.array([h.x is not None and h.y is not None for h in hits], dtype=bool)
    xs = np.array([float(h.x) if h.x is not None and h.y is not None else np.nan for h in hits], dtype=float)
    ys = np.array([float(h.y) if h.x is not None and h.y is not None else np.nan for h in hits], dtype=float)
    shown = ~shapely.is_missing(geoms)
    shown[shown] = ~shapely.is_empty(geoms[shown])
    need = np.flatnonzero(shown & ~given)
    if len(need):
        g = geoms[need]
        points = np.where(shapely.get_type_id(g) == 0, g, shapely.point_on_surface(g))
        xs[need], ys[need] = shapely.get_x(points), shapely.get_y(points)
    return geoms, shown, xs, ys
