"""Which part of a line lies farther than the tolerance from other geometry.

Lines are compared segment by segment with the segments of the geometry
near them, in closed form on arrays (the points of a segment within a
distance of another segment are one stretch of it): what lies within the
tolerance is measured (:func:`length_near`) or cut away (:func:`far_parts`)
without building GEOS's buffers.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

import numpy as np
import shapely

from .arrays import LINESTRING, MULTILINESTRING, linear_parts, merge_by_group, segments
from .messages import ABOVE
from .polygons import Units

if TYPE_CHECKING:
    from .halfedges import Edges
    from .lines import LineNetwork


# Reference geometries with more vertices than this are tested through a prepared copy (GEOS's indexed facet
# distance) rather than segment by segment: a frame line of thousands of vertices spans the whole map, so
# every query meets it (our own choice; the answers are the same either way, only the time differs).
BIG = 256
LINEAR = (LINESTRING, MULTILINESTRING, shapely.GeometryType.LINEARRING.value)
MULTI = tuple(t.value for t in (shapely.GeometryType.MULTIPOINT, shapely.GeometryType.MULTILINESTRING,
                                shapely.GeometryType.GEOMETRYCOLLECTION))


def dwithin_pairs(tree: shapely.STRtree, refs: np.ndarray, geoms: np.ndarray, distance: float) -> tuple[np.ndarray, np.ndarray]:
    """The pairs (index into ``geoms``, index into ``refs``) within ``distance``, as ``tree.query(geoms,
    predicate="dwithin", distance=distance)`` gives them and in its order (``tree`` indexes ``refs``).

    The index is asked for the boxes of ``geoms`` widened by ``distance`` (the candidates that query
    tests, in its order); the candidates are then tested in bulk, each large reference (over :data:`BIG`
    vertices) once through a prepared copy against all its candidates.
    """
    geoms = np.asarray(geoms, dtype=object)
    d = max(distance, 0.0)
    if not len(geoms) or not len(refs):
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=np.int64)
    b = shapely.bounds(geoms)
    gi, rj = tree.query(shapely.box(b[:, 0] - d, b[:, 1] - d, b[:, 2] + d, b[:, 3] + d))
    ok = np.zeros(len(gi), dtype=bool)
    big = _sizes(refs, rj) > BIG
    # a large geometry asked about (a frame line among the lines asked) meets every reference near it: prepared
    # once too, against the small references it meets (a partition's frame line took 2.5 s pair by pair)
    big_geom = ~big & (_sizes(geoms, gi) > BIG)
    small = ~big & ~big_geom
    ok[small] = shapely.dwithin(geoms[gi[small]], refs[rj[small]], d)
    if big.any():
        for j in np.unique(rj[big]).tolist():
            sel = np.flatnonzero(big & (rj == j))
            ok[sel] = shapely.dwithin(prepared_copy(refs[j]), geoms[gi[sel]], d)
    if big_geom.any():
        for i in np.unique(gi[big_geom]).tolist():
            sel = np.flatnonzero(big_geom & (gi == i))
            ok[sel] = shapely.dwithin(prepared_copy(geoms[i]), refs[rj[sel]], d)
    return gi[ok], rj[ok]


def _sizes(geoms: np.ndarray, at: np.ndarray) -> np.ndarray:
    """``shapely.get_num_coordinates(geoms)[at]``, counting only the geometries named when they are fewer (a few
    polygons asked against a whole map)."""
    if len(at) < len(geoms):
        return np.asarray(shapely.get_num_coordinates(np.asarray(geoms, dtype=object)[at]))
    return np.asarray(shapely.get_num_coordinates(geoms))[at]


def prepared_copy(ref: object) -> object:
    """A private prepared copy of ``ref`` (the caller's geometry stays as it was)."""
    copy = shapely.from_wkb(shapely.to_wkb(ref))
    shapely.prepare(copy)
    return copy


def within_of(ref: object, geoms: np.ndarray, distance: float) -> np.ndarray:
    """``shapely.dwithin(geoms, ref, distance)`` for one reference; a large one (over :data:`BIG` vertices) is
    prepared once for all ``geoms``."""
    geoms = np.asarray(geoms, dtype=object)
    d = max(distance, 0.0)
    if len(geoms) and shapely.get_num_coordinates(ref) > BIG:
        return np.asarray(shapely.dwithin(prepared_copy(ref), geoms, d), dtype=bool)
    return np.asarray(shapely.dwithin(geoms, ref, d), dtype=bool)


def point_distances(points: np.ndarray, refs: np.ndarray) -> np.ndarray:
    """``shapely.distance(points, refs)``, pair by pair, for points and linear references.

    A reference of over :data:`BIG` vertices is measured through a spatial index of its segments: GEOS
    measures a point against a line segment by segment and keeps the smallest, and the index finds that
    smallest segment distance without measuring every segment; the value is the same.
    """
    points = np.asarray(points, dtype=object)
    refs = np.asarray(refs, dtype=object)
    out = np.empty(len(points))
    if not len(points):
        return out
    big = shapely.get_num_coordinates(refs) > BIG
    out[~big] = shapely.distance(points[~big], refs[~big])
    if big.any():
        at = np.flatnonzero(big)
        which = np.array([id(g) for g in refs[at]])
        for key in np.unique(which).tolist():
            sel = at[which == key]
            out[sel] = _segment_distances(refs[sel[0]], points[sel])
    return out


def _segment_distances(line: object, points: np.ndarray) -> np.ndarray:
    """Distance from each point to ``line`` (a LineString or MultiLineString) through an index of its segments."""
    a, b, _ = segments(shapely.get_parts(line))
    if not len(a):  # no segment at all: GEOS's own answer
        return np.asarray(shapely.distance(points, line), dtype=float)
    segs = shapely.linestrings(np.stack([a, b], axis=1))
    _, dist = shapely.STRtree(segs).query_nearest(points, return_distance=True, all_matches=False)
    return np.asarray(dist, dtype=float)


def clipped_near(targets: np.ndarray, ti: np.ndarray, refs: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """The parts of the reference geometries paired with each target (ti) that lie near it: clipped to the target's
    box widened by twice ``tol``, empty parts left out; returns the parts and their target."""
    if not len(ti):
        return np.empty(0, dtype=object), np.empty(0, dtype=np.int64)
    b = shapely.bounds(targets[ti])
    pad = 2.0 * tol + 1e-9
    boxes = shapely.box(b[:, 0] - pad, b[:, 1] - pad, b[:, 2] + pad, b[:, 3] + pad)
    clipped = shapely.intersection(refs, boxes)
    parts, k = shapely.get_parts(clipped, return_index=True)
    keep = ~shapely.is_empty(parts)
    return parts[keep], ti[k[keep]]


def length_near(lines: np.ndarray, refs: np.ndarray, dist: float) -> np.ndarray:
    """Per pair: the length of ``lines[k]`` lying within ``dist`` of ``refs[k]`` (linear geometries, pair by pair).

    Measured segment by segment, on arrays: the points of a segment within
    ``dist`` of a reference segment are one stretch of it (the region
    within ``dist`` of a segment is convex: a rectangle with a half disc at
    each end), found in closed form, and the stretches of a segment are
    joined before they are added up. The references are first clipped to
    the line's box (:func:`clipped_near`). This is what GEOS's buffer of
    the reference followed by an intersection measures, without the buffer:
    at a distance of 10^-12 of the coordinates (the rounding slack a repair
    measures shared borders with) GEOS 3.14's buffer of a polygon's
    boundary missed stretches of it. On a generated map of 10^5 polygons,
    12 of the 8 525 borders between a gap and a polygon along it came out
    more than 1 mm off (one 69 m long as 1.2e-5 m), and 9 gaps went to the
    neighbour with the shorter border.
    """
    out = np.zeros(len(lines))
    if not len(lines):
        return out
    parts, k = clipped_near(lines, np.arange(len(lines)), refs, dist)
    line_parts, line_of = shapely.get_parts(lines, return_index=True)
    sa, sb, si = segments(line_parts)
    ta, tb, tp = segments(parts)
    if not len(sa) or not len(ta):
        return out
    line_of = line_of[si]
    s, u0, u1, before = _near_stretches(sa, sb, ta, tb, dist, lambda s, t: line_of[s] == k[tp[t]])
    covered = np.maximum(u1 - np.maximum(u0, before), 0.0)
    np.add.at(out, line_of[s], covered * np.hypot(*(sb - sa)[s].T))
    return out


def _near_stretches(sa: np.ndarray, sb: np.ndarray, ta: np.ndarray, tb: np.ndarray, dist: float,
                    mine: Callable[[np.ndarray, np.ndarray], np.ndarray]
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The stretches of the segments sa -> sb lying within ``dist`` of the segments ta -> tb of the same pair
    (``mine(s, t)``: segment s may be measured against segment t).

    Returns, sorted by segment then start, each stretch's segment ``s`` and its ends ``u0`` < ``u1`` (shares of
    the segment), and ``before``: the farthest end of the stretches before it on its segment (-inf for the
    first). A stretch counts from max(u0, before): the stretches of a segment joined.
    """
    # candidate pairs: a reference segment whose box comes within dist of the segment's, of the same pair
    tree = shapely.STRtree(shapely.linestrings(np.stack([ta, tb], axis=1)))
    lo, hi = np.minimum(sa, sb) - dist, np.maximum(sa, sb) + dist
    s, t = tree.query(shapely.box(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1]))
    keep = mine(s, t)
    s, t = s[keep], t[keep]
    u0, u1 = _stretch_near(sa[s], sb[s], ta[t], tb[t], dist)
    some = u1 > u0
    s, u0, u1 = s[some], u0[some], u1[some]
    # each counts from the farthest end of the segment's stretches before it
    order = np.lexsort((u0, s))
    s, u0, u1 = s[order], u0[order], u1[order]
    reached = u1.copy()  # the farthest end so far within each segment: a prefix maximum in log2(stretches) steps
    step = 1
    while step < len(s):
        same = s[step:] == s[:-step]
        if not same.any():
            break
        reached[step:] = np.where(same, np.maximum(reached[step:], reached[:-step]), reached[step:])
        step *= 2
    first = np.r_[True, s[1:] != s[:-1]]
    before = np.where(first, -np.inf, np.r_[-np.inf, reached[:-1]])
    return s, u0, u1, before


def far_parts(targets: np.ndarray, ti: np.ndarray, refs: np.ndarray, rj: np.ndarray, dist: float) -> np.ndarray:
    """Each target line less every point within ``dist`` of the references paired with it (``targets[ti]`` with
    ``refs[rj]``), on arrays: what GEOS's buffer of the references and difference leave, without the buffer.

    Each target segment is measured against the reference segments near it
    (:func:`_stretch_near`, exact: a point at ``dist`` or nearer is near);
    what no stretch covers is left, and the pieces left of consecutive
    segments of one part that meet at their common vertex are one line, as
    GEOS's difference joins them (GEOS also cuts a line where it crosses
    itself; here it is not cut there). A target's vertices are kept bit for
    bit; the ends of a piece lie on its segment at the share found. A target
    with nothing near it is returned as it is; one with something near as
    the line, the multi-line or the empty line left. GEOS's buffer is a
    polygon inside the true one (8 segments a quarter circle, the line
    simplified by 1 % of the distance), so it left a little more of a line
    crossing it; the stretches here are the true distance, which the buffer
    approximated. Targets are linear (LineString, LinearRing,
    MultiLineString); references linear or points (a point is a segment of
    no length), also in collections.
    """
    return _cut(targets, ti, refs, rj, dist, near=False)


def near_parts(targets: np.ndarray, refs: np.ndarray, dist: float) -> np.ndarray:
    """Per pair, the part of ``targets[k]`` within ``dist`` of ``refs[k]``: what GEOS's buffer of the reference and
    intersection keep, on arrays as :func:`far_parts` (an empty line where nothing is near)."""
    n = len(targets)
    return _cut(targets, np.arange(n), refs, np.arange(n), dist, near=True)


def _ref_segments(refs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every segment of linear or point geometries (collections opened): start, end, index of its geometry; a point
    is a segment from itself to itself."""
    parts, owner = shapely.get_parts(refs, return_index=True)
    nested = np.isin(shapely.get_type_id(parts), MULTI)
    if nested.any():
        inner, k = shapely.get_parts(parts[nested], return_index=True)
        parts = np.concatenate([parts[~nested], inner])
        owner = np.concatenate([owner[~nested], owner[nested][k]])
    a, b, at = segments(parts)
    points = np.flatnonzero(shapely.get_num_coordinates(parts) == 1)
    xy = shapely.get_coordinates(parts[points])
    return np.concatenate([a, xy]), np.concatenate([b, xy]), owner[np.concatenate([at, points])]


def _cut(targets: np.ndarray, ti: np.ndarray, refs: np.ndarray, rj: np.ndarray, dist: float, near: bool) -> np.ndarray:
    """:func:`far_parts` (``near`` False) or the parts within ``dist`` (``near`` True) of each target asked."""
    out = np.asarray(targets, dtype=object).copy()
    if not len(ti):
        return out
    used, back = np.unique(rj, return_inverse=True)
    asked = np.unique(ti)
    if near:
        out[asked] = shapely.empty(len(asked), geom_type=shapely.GeometryType.LINESTRING)
    parts, owner = shapely.get_parts(np.asarray(targets, dtype=object)[asked], return_index=True)
    sa, sb, sp = segments(parts)
    ra, rb, ref_of = _ref_segments(refs[used])  # ref_of: index into used
    s = np.zeros(0, dtype=np.int64)
    if len(sa) and len(ra):
        seg_target = asked[owner[sp]]
        pairs = np.unique(ti.astype(np.int64) * len(used) + back)
        s, u0, u1, before = _near_stretches(
            sa, sb, ra, rb, dist, lambda s, t: np.isin(seg_target[s] * len(used) + ref_of[t], pairs))
    if not len(s):
        return out
    touched = np.unique(seg_target[s])
    reached = np.maximum(u1, before)  # the farthest end of the stretches so far on the segment
    last = np.r_[s[1:] != s[:-1], True]
    if near:
        # the stretches joined: one piece from each stretch that starts beyond all before it to the farthest end
        # reached before the next such one
        opens = u0 > before
        closes = np.r_[opens[1:], True] | last
        g_seg, g0, g1 = s[opens], u0[opens], reached[closes]
    else:
        # what is left of each segment: before each stretch (from the farthest end before it, or the start) and
        # after the last one; a segment with no stretch is left whole
        start = np.where(np.isneginf(before), 0.0, before)
        head = u0 > start
        tail = last & (reached < 1.0)
        bare = np.ones(len(sa), dtype=bool)
        bare[s] = False
        bare &= np.isin(seg_target, touched)
        g_seg = np.concatenate([s[head], s[tail], np.flatnonzero(bare)])
        g0 = np.concatenate([start[head], reached[tail], np.zeros(int(bare.sum()))])
        g1 = np.concatenate([u0[head], np.ones(int(tail.sum())), np.ones(int(bare.sum()))])
        order = np.lexsort((g0, g_seg))
        g_seg, g0, g1 = g_seg[order], g0[order], g1[order]
    pieces, piece_target = _chains(sa, sb, sp, seg_target, g_seg, g0, g1)
    # per target: nothing, one piece, or a multi-line of its pieces
    count = np.bincount(piece_target, minlength=len(out))
    if not near:
        none = touched[count[touched] == 0]
        if len(none):
            out[none] = shapely.empty(len(none), geom_type=shapely.GeometryType.LINESTRING)
    one = count[piece_target] == 1
    out[piece_target[one]] = pieces[one]
    many = np.flatnonzero(count > 1)
    if len(many):
        sel = ~one
        out[many] = shapely.multilinestrings(pieces[sel], indices=np.searchsorted(many, piece_target[sel]))
    return out


def _chains(sa: np.ndarray, sb: np.ndarray, sp: np.ndarray, seg_target: np.ndarray, g_seg: np.ndarray,
            g0: np.ndarray, g1: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lines from stretches [g0, g1] of segments ``g_seg`` (sorted along the lines): consecutive stretches of one
    part meeting at a vertex joined; pieces of no length left out. Returns the pieces and their target."""
    joined = np.r_[False, (g_seg[1:] == g_seg[:-1] + 1) & (sp[g_seg[1:]] == sp[g_seg[:-1]]) & (g1[:-1] >= 1.0) & (g0[1:] <= 0.0)]
    joined = joined[:len(g_seg)]
    chain = np.cumsum(~joined) - 1
    n_chain = int(chain[-1]) + 1 if len(chain) else 0
    ends = np.r_[~joined[1:], True][:len(g_seg)]

    def at(seg: np.ndarray, u: np.ndarray) -> np.ndarray:
        a, b = sa[seg], sb[seg]
        return np.where((u <= 0.0)[:, None], a, np.where((u >= 1.0)[:, None], b, a + u[:, None] * (b - a)))

    coords = np.empty((len(g_seg) + n_chain, 2))
    pos = np.arange(len(g_seg)) + chain
    coords[pos] = at(g_seg, g0)
    coords[pos[ends] + 1] = at(g_seg[ends], g1[ends])
    index = np.empty(len(coords), dtype=np.int64)
    index[pos] = chain
    index[pos[ends] + 1] = chain[ends]
    pieces = shapely.linestrings(coords, indices=index) if n_chain else np.empty(0, dtype=object)
    piece_target = seg_target[g_seg[ends]]
    real = shapely.length(pieces) > 0
    return pieces[real], piece_target[real]


def _stretch_near(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, r: float) -> tuple[np.ndarray, np.ndarray]:
    """Per pair, the stretch [u0, u1] (as a share of segment a -> b, within [0, 1]) lying within ``r`` of segment
    c -> d; u1 <= u0 where none does. The union of what lies in the rectangle along c -> d and in the discs around
    c and d, each measured from the segment's own offsets (no squared distance of far points is differenced)."""
    dv = b - a
    dd = np.einsum("ij,ij->i", dv, dv)
    lo = np.full(len(a), np.inf)
    hi = np.full(len(a), -np.inf)

    def disc(p: np.ndarray) -> None:
        # the points of the line a + u dv within r of p: around the foot of p, half-width sqrt(r^2 - h^2)
        w = p - a
        ok = dd > 0
        safe = np.where(ok, dd, 1.0)
        uc = np.einsum("ij,ij->i", w, dv) / safe
        h2 = (dv[:, 0] * w[:, 1] - dv[:, 1] * w[:, 0]) ** 2 / safe
        half = np.sqrt(np.maximum(r * r - h2, 0.0) / safe)
        hit = ok & (h2 <= r * r)
        # a segment of no length: all of it or nothing
        point = ~ok & (np.hypot(w[:, 0], w[:, 1]) <= r)
        lo[:] = np.where(hit, np.minimum(lo, uc - half), np.where(point, np.minimum(lo, 0.0), lo))
        hi[:] = np.where(hit, np.maximum(hi, uc + half), np.where(point, np.maximum(hi, 1.0), hi))

    disc(c)
    disc(d)
    e = d - c
    ee = np.einsum("ij,ij->i", e, e)
    length = np.sqrt(ee)
    w = a - c
    # along c -> d: 0 <= (p - c).e <= |e|^2; across: |e x (p - c)| <= r |e|; both linear in u
    f0, f1 = np.einsum("ij,ij->i", w, e), np.einsum("ij,ij->i", dv, e)
    g0 = e[:, 0] * w[:, 1] - e[:, 1] * w[:, 0]
    g1 = e[:, 0] * dv[:, 1] - e[:, 1] * dv[:, 0]
    r0, r1 = _linear_between(f0, f1, 0.0, ee)
    q0, q1 = _linear_between(g0, g1, -r * length, r * length)
    s0, s1 = np.maximum(r0, q0), np.minimum(r1, q1)
    band = (ee > 0) & (s1 >= s0)
    lo[band] = np.minimum(lo[band], s0[band])
    hi[band] = np.maximum(hi[band], s1[band])
    return np.clip(lo, 0.0, 1.0), np.clip(hi, 0.0, 1.0)


def _linear_between(v0: np.ndarray, v1: np.ndarray, low: float | np.ndarray, high: float | np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray]:
    """The u with low <= v0 + u v1 <= high, as an interval (empty: start > end; every u: -inf, inf)."""
    low = np.broadcast_to(low, v0.shape)
    high = np.broadcast_to(high, v0.shape)
    flat = v1 == 0
    safe = np.where(flat, 1.0, v1)
    x, y = (low - v0) / safe, (high - v0) / safe
    start, end = np.minimum(x, y), np.maximum(x, y)
    inside = (v0 >= low) & (v0 <= high)
    start = np.where(flat, np.where(inside, -np.inf, np.inf), start)
    end = np.where(flat, np.where(inside, np.inf, -np.inf), end)
    return start, end


def _buffer_distance(targets: np.ndarray, ti: np.ndarray, tol: float) -> float:
    """``tol``; with a zero tolerance, "on" means within floating-point noise of the reference (of the targets' size)."""
    if tol > 0 or not len(ti):
        return tol
    return 1e-9 * max(float(np.abs(shapely.bounds(targets[ti])).max()), 1.0)


def _buffers(targets: np.ndarray, parts: np.ndarray, k: np.ndarray, dist: float) -> np.ndarray:
    """Per target, one ``dist``-buffer of the reference parts ``k`` pairs with it (None for a target with none)."""
    out = np.full(len(targets), None, dtype=object)
    if not len(parts):
        return out
    order = np.argsort(k, kind="stable")
    shapely.geometrycollections(parts[order], indices=k[order], out=out)
    have = ~shapely.is_missing(out)
    out[have] = shapely.buffer(out[have], dist)
    return out


def uncovered(targets: np.ndarray, refs: np.ndarray, tol: float, tree: shapely.STRtree | None = None) -> np.ndarray:
    """The part of each target line farther than ``tol`` from every reference line (:func:`subtract_near`)."""
    targets = np.asarray(targets, dtype=object)
    if not len(targets) or not len(refs):
        return targets.copy()
    tree = tree if tree is not None else shapely.STRtree(refs)
    ti, ri = dwithin_pairs(tree, refs, targets, tol)
    return subtract_near(targets, ti, np.asarray(refs, dtype=object), ri, tol)


def off_unit_boundaries(targets: np.ndarray, units: Units, tol: float) -> np.ndarray:
    """The part of each target line farther than ``tol`` from every unit polygon boundary."""
    if not len(targets) or not len(units):
        return np.asarray(targets, dtype=object).copy()
    targets = np.asarray(targets, dtype=object)
    ti, ui = units.tree.query(targets, predicate="dwithin", distance=max(tol, 0.0))
    used, back = np.unique(ui, return_inverse=True)
    return subtract_near(targets, ti, shapely.boundary(units.geoms[used]), back, tol)


def subtract_near(targets: np.ndarray, ti: np.ndarray, refs: np.ndarray, rj: np.ndarray, tol: float) -> np.ndarray:
    """Each target less the points within ``tol`` of the references paired with it (``targets[ti]`` with
    ``refs[rj]``).

    Linear targets are cut on arrays (:func:`far_parts`); any other (a
    polygon, a collection) keeps GEOS's way: one ``tol``-buffer of the
    references near it, clipped near it (:func:`clipped_near`), taken out.
    """
    out = np.asarray(targets, dtype=object).copy()
    if not len(ti):
        return out
    dist = _buffer_distance(out, ti, tol)
    linear = np.isin(shapely.get_type_id(out[ti]), LINEAR)
    if linear.any():
        out = far_parts(out, ti[linear], refs, rj[linear], dist)
    if (~linear).any():
        tj = ti[~linear]
        parts, k = clipped_near(out, tj, refs[rj[~linear]], tol)
        buf = _buffers(out, parts, k, dist)
        have = ~shapely.is_missing(buf)
        out[have] = shapely.difference(out[have], buf[have])
    return out


def connected_pieces(pieces: np.ndarray, groups: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Join the pieces of each group that touch (a stretch split where the line crosses itself)."""
    out, out_groups = [], []
    for g in np.unique(groups):
        mine = list(pieces[groups == g])
        while mine:
            cluster = [mine.pop()]
            grown = True
            while grown:
                grown = False
                for other in list(mine):
                    if any(shapely.intersects(other, c) for c in cluster):
                        cluster.append(other)
                        mine.remove(other)
                        grown = True
            out.append(cluster[0] if len(cluster) == 1 else shapely.line_merge(shapely.multilinestrings(cluster)))
            out_groups.append(g)
    return np.array(out, dtype=object), np.array(out_groups, dtype=np.int64)


def unit_at(points: np.ndarray, units: Units) -> np.ndarray:
    """Index of the unit polygon each point lies inside, or -1; in two that overlap there, the first of the layer.

    The first in the layer's order, not the spatial index's (which depends on which polygons the index holds: a
    part of the map must name the same polygon as the whole map).
    """
    out = np.full(len(points), -1, dtype=np.int64)
    if len(points) and len(units):
        pi, ui = units.tree.query(points, predicate="within")
        first = np.full(len(points), len(units), dtype=np.int64)
        np.minimum.at(first, pi, ui)
        out[pi] = first[pi]
    return out


@dataclass(frozen=True)
class Undrawn:
    """Stretches of unit boundary that no line draws within the tolerance.

    ``pieces`` are the stretches (LineStrings longer than the tolerance),
    ``ua``/``ub`` the polygons (indices into the units) on either side
    (``ub`` -1 along the map edge), ``stretch`` the index of each piece's
    whole boundary in ``stretches`` (the boundary between one pair of polygons,
    or of one polygon along the map edge, merged, before the lines were taken
    out), and ``twin`` the mask over the edges counted as boundaries between
    units (edges between polygons of the same unit are not).
    """

    pieces: np.ndarray
    ua: np.ndarray
    ub: np.ndarray
    stretch: np.ndarray
    stretches: np.ndarray
    twin: np.ndarray

    def take(self, mask: np.ndarray) -> "Undrawn":
        """The stretches where ``mask`` is True (the whole boundaries and the edge mask as they are)."""
        return Undrawn(self.pieces[mask], self.ua[mask], self.ub[mask], self.stretch[mask], self.stretches, self.twin)


def between_units(units: Units, edges: Edges) -> np.ndarray:
    """A mask over the edges: the boundaries between two polygons of different units (or of units with no code)."""
    twin = edges.twin.copy()
    if units.codes is not None and len(units):
        cl, cr = units.codes[np.maximum(edges.left, 0)], units.codes[np.maximum(edges.right, 0)]
        twin &= ~((cl == cr) & (cl != ""))
    return twin


def undrawn_boundaries(units: Units, edges: Edges, outline: np.ndarray, drawn: np.ndarray, net: LineNetwork,
                       tol: float) -> Undrawn | None:
    """The boundaries between units of different codes, and the map edge, that no line covers within ``tol``; None if none.

    Edges drawn exactly by a line segment (``drawn``, from the network's
    hashed segments) are out at once; the rest are merged per pair of
    polygons and what lies within ``tol`` of a line taken out of them (:func:`uncovered`).
    """
    twin = between_units(units, edges)
    consider = (twin | outline) & ~drawn
    idx = np.flatnonzero(consider)
    if not len(idx):
        return None
    a = np.where(edges.twin[idx], np.minimum(edges.left[idx], edges.right[idx]), np.maximum(edges.left[idx], edges.right[idx]))
    b = np.where(edges.twin[idx], np.maximum(edges.left[idx], edges.right[idx]), -1)
    key = a * (len(units) + 1) + (b + 1)
    uk, inv = np.unique(key, return_inverse=True)
    whole = merge_by_group(edges.lines(idx), inv, len(uk))
    stretches = whole
    if len(net.geoms):
        stretches = uncovered(whole, net.geoms, tol, net.tree)
    pieces, k = linear_parts(stretches, tol * ABOVE)
    if not len(pieces):
        return None
    ua = (uk[k] // (len(units) + 1)).astype(np.int64)
    ub = (uk[k] % (len(units) + 1)).astype(np.int64) - 1
    return Undrawn(pieces, ua, ub, k, whole, twin)
