"""Repairs of the linework: lines snapped onto the unit boundaries, near-miss ends closed, undrawn boundaries drawn.

Each repair reads the working copy through the same analyses ``check`` uses
(:mod:`archivist.analysis.lines`, :mod:`archivist.analysis.nearness`) and is
bounded by the snapping distance, ``[checks] tolerance``: no vertex moves
farther, no line grows or shrinks by more, and whatever lies beyond it is
left for the geologist. The geometric work is done by the pure functions
:func:`snap_to_boundaries`, :func:`close_ends` and :func:`undrawn_lines` on
arrays of shapely geometries; the registered repairs wrap them around the
working state.

What the line repairs do not cover: a map whose CRS is geographic (the
tolerance is in metres there and the coordinates in degrees; the repairs
work in map units), lines of kinds the checks read as "other" (fold traces,
dykes: drawn freely, never moved), faults (they may cut through a unit, so
nothing says they belong on a boundary), and line ends the checks already
count as connected exactly (a shared vertex).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import pandas as pd
import shapely
from shapely.ops import substring

from ..analysis.arrays import canonical, coord_hash, group_sorted, linear_parts, merge_by_group, present, segments, spans, union_by_group
from ..analysis.coverage import analyse_coverage
from ..analysis.halfedges import build_edges
from ..analysis.lines import LineNetwork, LooseEnds, build_line_network, kind_for, kind_role, loose_ends, parse_kind
from ..analysis.messages import ABOVE
from ..analysis.nearness import Undrawn, dwithin_pairs, near_parts, off_unit_boundaries, uncovered, undrawn_boundaries, within_of
from ..analysis.polygons import read_units
from .model import FEATURE_ID, GENERATED_FIELD, SOURCE_LAYER, Change, Left
from .registry import repair

if TYPE_CHECKING:
    import geopandas as gpd

    from ..project import MapProject
    from .model import RepairSettings, RepairState


def noise(geoms: Any) -> float:
    """Floating-point noise of coordinates as large as those of ``geoms``: closer than this is "on" (our own choice)."""
    b = shapely.total_bounds(np.asarray(geoms, dtype=object)) if len(np.atleast_1d(geoms)) else np.zeros(4)
    b = np.nan_to_num(b)
    return 1e-9 * max(float(np.abs(b).max()), 1.0)


# ---------------------------------------------------------------- snapping onto the boundaries

@dataclass(frozen=True)
class Snapped:
    """What :func:`snap_to_boundaries` did: the lines after, how far each moved, which changed, which were held back."""

    geoms: np.ndarray
    shift: np.ndarray  # per line: Hausdorff distance between before and after (0 when unchanged)
    changed: np.ndarray  # per line: bool
    held: np.ndarray  # per line: the snap would have moved it farther than the tolerance (left as it was)
    tangled: np.ndarray  # per line: the snap would have made a simple line cross itself (left as it was)


def snap_to_boundaries(lines: np.ndarray, targets: np.ndarray, tol: float, pinned: np.ndarray | None = None,
                       cache: dict[str, Any] | None = None) -> Snapped:
    """Lines with every vertex within ``tol`` of the ``targets`` (lineal geometries) moved onto them.

    A vertex farther than ``tol`` from every target never moves. A vertex
    within ``tol`` of a target vertex goes to the nearest one (so the line
    shares it exactly, as GEOS ``snap`` does); another vertex within ``tol``
    of a target goes to the nearest point of the nearest target, unless that
    point lies within ``tol`` of a target vertex (then it stays: moving on to
    the vertex would take it farther than ``tol``, and stopping short would
    not be stable under a second run).
    No vertex is added: where the boundary bends between two vertices of
    the line, the line keeps its chord (``check`` counts it on the boundary
    while it stays within the tolerance). Adding the boundary's vertices
    within ``tol`` of the line was tried and left out: each one added can
    bring the next within reach, so a second run would change the line again,
    and a chain of them can walk away from the drawn line. A line whose result
    would lie farther than ``tol`` from where it was drawn (GEOS Hausdorff
    distance) is held back unchanged. The step is repeated until nothing
    moves, so the result snapped again is the same. A vertex within
    floating-point noise of a point of ``pinned`` (an (n, 2) array of
    coordinates) never moves. Works on whole arrays (STRtree queries), no
    loop per line. ``cache`` (a dict kept by the caller for the same
    ``targets``) keeps the targets' indexes from one call to the next.
    """
    lines = np.asarray(lines, dtype=object)
    n = len(lines)
    out = lines.copy()
    shift = np.zeros(n)
    changed = np.zeros(n, dtype=bool)
    held = np.zeros(n, dtype=bool)
    targets = np.asarray(targets, dtype=object)
    targets = _kept(targets)
    have = np.flatnonzero(present(lines))
    tangled = np.zeros(n, dtype=bool)
    if not len(have) or not len(targets) or tol <= 0:
        return Snapped(out, shift, changed, held, tangled)
    eps = noise(np.concatenate([lines[have], targets]))
    index = _targets(targets, cache)
    parts, owner, active, touched = _to_measure(lines, have, index)
    ptree = shapely.STRtree(shapely.points(np.asarray(pinned, dtype=float))) if pinned is not None and len(pinned) else None
    # repeated until nothing moves (a vertex inserted can bring another within tol), so a second run finds nothing
    moved = parts.copy()
    for _ in range(MAX_ROUNDS):
        if not len(active):
            break
        again = _snap_parts(moved[active], index, tol, eps, ptree)
        diff = ~shapely.equals_exact(moved[active], again, tolerance=eps)
        moved[active] = again
        active = active[diff]
    # 3. back to features; unchanged lines keep their own geometry (no rewrite within noise)
    mine = np.flatnonzero(np.isin(owner, touched))
    order = mine[np.argsort(owner[mine], kind="stable")]
    feats = touched
    single = shapely.get_type_id(lines[feats]) == shapely.GeometryType.LINESTRING.value
    rebuilt = np.full(len(feats), None, dtype=object)
    shapely.multilinestrings(moved[order], indices=np.searchsorted(feats, owner[order]), out=rebuilt)
    rebuilt[single] = shapely.get_geometry(rebuilt[single], 0)
    before = lines[feats]
    same = shapely.equals_exact(before, rebuilt, tolerance=eps)
    feats, rebuilt, before = feats[~same], rebuilt[~same], before[~same]
    if len(feats):
        h = shapely.hausdorff_distance(before, rebuilt)
        too_far = h > tol * ABOVE
        held[feats[too_far]] = True
        # a line drawn simple that the snap would make cross or touch itself (two of its vertices snapped onto
        # boundary vertices a few mm apart, in the other order: a loop of 7 mm on a generated map) stays as drawn
        knot = ~too_far & shapely.is_simple(before) & ~shapely.is_simple(rebuilt)
        tangled[feats[knot]] = True
        ok = ~too_far & ~knot
        ok_f = feats[ok]
        out[ok_f] = rebuilt[ok]
        shift[ok_f] = h[ok]
        changed[ok_f] = True
    return Snapped(out, shift, changed, held, tangled)


def _to_measure(lines: np.ndarray, have: np.ndarray, index: _Targets) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The LineString parts of ``lines[have]`` (none missing or empty), the line of each, the parts a snap onto the
    targets of ``index`` measures (not every vertex on a target vertex: :func:`_on_vertices`) and the lines it can
    change.

    Only a line with a part measured can come out changed: every part of the
    others stays as it is, so each would be rebuilt from its own parts and
    found equal (a LineString or MultiLineString; any other type is rebuilt
    and compared).
    """
    parts, owner = shapely.get_parts(lines[have], return_index=True)
    owner = have[owner]
    active = np.flatnonzero(~_on_vertices(parts, index))
    odd = ~np.isin(shapely.get_type_id(lines[have]), (shapely.GeometryType.LINESTRING.value,
                                                     shapely.GeometryType.MULTILINESTRING.value))
    touched = np.intersect1d(np.union1d(owner[active], have[odd]), owner)
    return parts, owner, active, touched


class _RowSet:
    """Rows of float coordinates (an (n, k) array): each looked up by a 64-bit hash of the row (:func:`coord_hash`,
    sorted: one binary search per row asked), then compared exactly.

    Where two different rows share a hash (about 2^-64 a pair) a row may be
    answered False though it is one of them: the callers use the answer only
    to skip work whose result it would not change.
    """

    def __init__(self, rows: np.ndarray) -> None:
        h = coord_hash(*rows.T) if len(rows) else np.zeros(0, dtype=np.uint64)
        # not a stable sort: rows of one hash are one row (or a collision, above), in whatever order; numpy's
        # default sort of 64-bit keys took a fifth of the time of its stable one (10^6 keys, measured)
        self._order = np.argsort(h)
        # the rows stay in their order: each asked row is compared with the one its hash found, rather than all
        # rows gathered into hash order once (with the stable sort, 0.165 s against 0.025 s for 1.4 million rows)
        self._hash, self._rows = h[self._order], rows

    def has(self, rows: np.ndarray) -> np.ndarray:
        """Per row of ``rows``: whether it is one of the set's."""
        if not len(self._hash) or not len(rows):
            return np.zeros(len(rows), dtype=bool)
        h = coord_hash(*rows.T)
        order = np.argsort(h)  # searched in order: about 2.5 times faster than in hash order (10^6 keys, measured)
        i = np.empty(len(h), dtype=np.int64)
        i[order] = np.minimum(np.searchsorted(self._hash, h[order]), len(self._hash) - 1)
        return (self._hash[i] == h) & (self._rows[self._order[i]] == rows).all(axis=1)


class _Targets:
    """The targets of a snap (lineal geometries, none missing or empty) and what the snap asks of them.

    ``tree``: their STRtree. :meth:`on`: whether points are exactly one of
    their vertices. :meth:`vertices`: an STRtree of the target vertices near
    the points asked, grown as points elsewhere are asked; a map's boundaries
    have over a million vertices, and the lines a repair moves lie near a few
    of them. Kept in a snap's ``cache`` (under "snap") for the next call on
    the same targets.
    """

    def __init__(self, targets: np.ndarray) -> None:
        self.targets = targets
        self.tree = shapely.STRtree(targets)
        self._vertices = _RowSet(shapely.get_coordinates(targets))
        self._have = np.zeros(len(targets), dtype=bool)  # the targets whose vertices the vertex index holds
        self._index: tuple[shapely.STRtree, np.ndarray] | None = None
        self._asked: tuple[np.ndarray, np.ndarray] | None = None  # see on_at

    def on(self, xy: np.ndarray) -> np.ndarray:
        """Per point ((n, 2) coordinates): whether it is exactly one of the target vertices (:class:`_RowSet`: a
        vertex answered False is measured by the snap, which finds its nearest vertex is itself, 0 away)."""
        return self._vertices.has(xy)

    def on_at(self, coords: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """:meth:`on` of ``coords[rows]``, each row's answer kept for the next call on the same array (the line
        network's coordinates: the contacts' vertices are asked by :func:`_following`, then by
        :func:`_on_targets`)."""
        if self._asked is None or self._asked[0] is not coords:
            self._asked = (coords, np.full(len(coords), -1, dtype=np.int8))
        known = self._asked[1]
        ask = rows[known[rows] < 0]
        if len(ask):
            known[ask] = self.on(coords[ask])
        return known[rows] == 1

    def vertices(self, pts: np.ndarray, distance: float) -> tuple[shapely.STRtree, np.ndarray]:
        """An STRtree of target vertices and their coordinates ((n, 2), in the tree's order), holding every vertex
        within ``distance`` of each of the points ``pts``.

        A vertex within ``distance`` of a point lies on a target within that
        distance of it (GEOS ``dwithin`` on the targets' index), so the tree
        holds the vertices of those targets (and of the targets asked
        before); a query for the nearest vertex within ``distance`` gets the
        one a tree of every vertex would (at equal distances, either one).
        """
        new = np.unique(self.tree.query(pts, predicate="dwithin", distance=distance)[1]) if len(pts) else np.zeros(0, dtype=np.int64)
        new = new[~self._have[new]]
        if self._index is None or len(new):
            self._have[new] = True
            xy = shapely.get_coordinates(self.targets[self._have])
            # each vertex once (shared vertices and ring closures repeat): grouped by hash and coordinates
            order, _, starts = group_sorted(coord_hash(xy[:, 0], xy[:, 1]), xy[:, 0], xy[:, 1])
            xy = xy[order[starts]]
            self._index = (shapely.STRtree(shapely.points(xy)), xy)
        return self._index


def _kept(targets: np.ndarray) -> np.ndarray:
    """The targets a snap keeps: those neither missing nor empty. Whatever reads a snap's cache of its targets
    (:func:`_targets`) filters them here, so that the cached index is of the same targets."""
    return targets[present(targets)]


def _targets(targets: np.ndarray, cache: dict[str, Any] | None = None) -> _Targets:
    """The :class:`_Targets` of ``targets`` (none missing or empty), kept in ``cache`` under "snap" for the next call."""
    if cache is not None and "snap" in cache:
        return cast(_Targets, cache["snap"])
    found = _Targets(targets)
    if cache is not None:
        cache["snap"] = found
    return found


MAX_ROUNDS = 4  # rounds of snapping per run; a round changes only what the one before left within reach


def _on_vertices(parts: np.ndarray, index: _Targets) -> np.ndarray:
    """Per LineString part: every vertex is exactly one of the target vertices and no two in a row are equal.

    Such a part comes out of :func:`_snap_parts` as it went in (each vertex's
    nearest target vertex is itself, at distance 0, and removing repeated
    points removes none), so it need not be measured at all.
    """
    xy, part = shapely.get_coordinates(parts, return_index=True)
    return _parts_on(xy, part, len(parts), index)


def _parts_on(xy: np.ndarray, part: np.ndarray, n: int, index: _Targets, on: np.ndarray | None = None) -> np.ndarray:
    """:func:`_on_vertices` of parts 0 .. n - 1 given by their vertices ``xy`` in order (``part``: the part of each,
    ascending; a part with none answers True). ``on``: :meth:`_Targets.on` of ``xy``, when already asked."""
    if not len(xy):
        return np.ones(n, dtype=bool)
    on = index.on(xy) if on is None else on
    repeat = np.zeros(len(xy), dtype=bool)
    repeat[1:] = (part[1:] == part[:-1]) & (xy[1:] == xy[:-1]).all(axis=1)
    bad = np.bincount(part, weights=(~on | repeat), minlength=n) > 0
    return ~bad


def _snap_parts(parts: np.ndarray, index: _Targets, tol: float, eps: float, ptree: shapely.STRtree | None = None) -> np.ndarray:
    """One round of :func:`snap_to_boundaries` on LineString parts onto the targets of ``index`` (vertices on a
    point of ``ptree`` stay).

    A vertex that is exactly one of the target vertices is not asked (its
    nearest target vertex is itself, at distance 0: it stays where it is).
    """
    coords, vpart = shapely.get_coordinates(parts, return_index=True)
    coords = coords.copy()
    # 1. vertices within tol of a target: onto its nearest vertex within tol, else onto its nearest point
    targets = index.targets
    ask = np.flatnonzero(~index.on(coords))
    pts = shapely.points(coords[ask])
    vi, ti = index.tree.query_nearest(pts, max_distance=tol, all_matches=False)
    if ptree is not None and len(vi):
        stay = np.unique(ptree.query(pts[vi], predicate="dwithin", distance=eps)[0])
        free = np.ones(len(vi), dtype=bool)
        free[stay] = False
        vi, ti = vi[free], ti[free]
    d = shapely.distance(pts[vi], targets[ti])
    ci = ask[vi]  # the coordinate of each vertex asked
    if len(vi):
        # onto the nearest target vertex within tol (even from a point already on a target: a junction) ...
        vtree, tv = index.vertices(pts[vi], tol)
        wi, kv = vtree.query_nearest(pts[vi], max_distance=tol, all_matches=False)
        at_vertex = np.zeros(len(vi), dtype=bool)
        at_vertex[wi] = True
        go = np.zeros(len(vi), dtype=bool)
        go[wi] = np.hypot(*(tv[kv] - coords[ci[wi]]).T) > eps
        feet = np.zeros((len(vi), 2))
        feet[wi] = tv[kv]
        # ... else onto the nearest point of the target, unless that point lies within tol of a target vertex (the
        # vertex is farther than tol from the original, and moving there later would break the bound): left as it is
        rest = np.flatnonzero(~at_vertex & (d > eps))
        if len(rest):
            foot = shapely.get_coordinates(shapely.get_point(shapely.shortest_line(pts[vi[rest]], targets[ti[rest]]), 1))
            near_v = np.zeros(len(rest), dtype=bool)
            on_target = shapely.points(foot)
            vtree, _ = index.vertices(on_target, tol)
            near_v[np.unique(vtree.query(on_target, predicate="dwithin", distance=tol)[0])] = True
            feet[rest] = foot
            go[rest[~near_v]] = True
        original = coords.copy()
        coords[ci[go]] = feet[go]
        # a part whose vertices would all fall on one point (shorter than tol) keeps its own
        first = np.r_[0, np.flatnonzero(np.diff(vpart)) + 1]
        same = (coords == coords[np.repeat(first, np.diff(np.r_[first, len(vpart)]))]).all(axis=1)
        collapsed = np.bincount(vpart, weights=~same, minlength=len(parts)) == 0
        if collapsed.any():
            back = collapsed[vpart]
            coords[back] = original[back]
    moved = shapely.linestrings(coords, indices=vpart) if len(coords) else parts
    return shapely.remove_repeated_points(moved, 0.0)


# ---------------------------------------------------------------- near-miss ends

@dataclass(frozen=True)
class EndFix:
    """One line end closed onto the line it nearly meets."""

    feat: int  # feature index in the network
    other: int  # the feature it now meets
    how: str  # "extended", "moved" or "trimmed"
    distance: float  # how far the end moved (extended or trimmed length, or the move)


def close_ends(net: LineNetwork, tol: float, roles: tuple[str, ...] = ("contact", "boundary"),
               ends: LooseEnds | None = None) -> tuple[np.ndarray, list[EndFix]]:
    """The network's features with the loose ends within ``tol`` of another line closed onto it.

    The ends are those ``line-dangle`` reads (:func:`archivist.analysis.lines.loose_ends`):
    ends of contacts and map-boundary lines that share no vertex with another
    line. An end within ``tol`` of another feature (and not already on it,
    within floating-point noise) is closed onto the nearest such feature:

    - overshoot: the line crosses or touches that feature no farther than
      ``tol`` from the end: it is trimmed back to the crossing point;
    - undershoot: its last segment, extended by at most ``tol``, meets that
      feature: the end is moved along the segment to the meeting point;
    - otherwise the end vertex is moved onto the nearest point of that
      feature (at most ``tol`` away).

    Returns the features' geometries (the network's ``geoms`` with the
    closed ones replaced) and one :class:`EndFix` per end closed. Ends
    farther than ``tol`` from every line are never touched. ``ends``: the
    :func:`~archivist.analysis.lines.loose_ends` of ``net`` for ``roles``
    and ``tol`` where the caller has them.
    """
    out = np.array(net.geoms, dtype=object, copy=True)
    ends = loose_ends(net, roles, tol) if ends is None else ends
    cand = np.flatnonzero(ends.near_line)
    if not len(cand) or tol <= 0:
        return out, []
    eps = noise(net.geoms)
    pts = ends.points[cand]
    pi, fj = dwithin_pairs(net.tree, net.geoms, pts, tol)
    keep = fj != ends.feat[cand][pi]
    pi, fj = pi[keep], fj[keep]
    d = shapely.distance(pts[pi], net.geoms[fj])
    o = np.lexsort((fj, d, pi))
    pi, fj, d = pi[o], fj[o], d[o]
    first = np.r_[True, pi[1:] != pi[:-1]]
    pi, fj, d = pi[first], fj[first], d[first]
    sel = d > eps
    pi, fj, d = pi[sel], fj[sel], d[sel]
    if not len(pi):
        return out, []
    e = cand[pi]
    coord, part, at_start = ends.coord[e], ends.part[e], ends.at_start[e]
    c = net.coords
    other = net.geoms[fj]
    # undershoot: the ray along the last segment, at most tol long
    inner = np.where(at_start, coord + 1, coord - 1)
    tip, back = c[coord], c[inner]
    v = tip - back
    vlen = np.hypot(v[:, 0], v[:, 1])
    unit = v / np.where(vlen > 0, vlen, 1.0)[:, None]
    reach = tip + unit * (tol * ABOVE)
    rays = shapely.linestrings(np.stack([tip, reach], axis=1))
    hit_geom = shapely.intersection(rays, other)
    hit_pts, hk = shapely.get_parts(shapely.extract_unique_points(hit_geom), return_index=True)
    hit_xy = np.full((len(pi), 2), np.nan)
    if len(hk):
        hd = shapely.distance(hit_pts, shapely.points(tip[hk]))
        o = np.lexsort((hd, hk))
        hk, hit_pts, hd = hk[o], hit_pts[o], hd[o]
        f1 = np.r_[True, hk[1:] != hk[:-1]]
        good = f1 & (hd > eps) & (vlen[hk] > 0)
        hit_xy[hk[good]] = shapely.get_coordinates(hit_pts[good])
    foot = shapely.get_coordinates(shapely.get_point(shapely.shortest_line(shapely.points(tip), other), 1))
    fixes: list[EndFix] = []
    parts: dict[int, Any] = {}
    # per end closed (defects, not features): trim, extend or move
    for k in range(len(pi)):
        p = int(part[k])
        line = parts.get(p) or net.part(p)
        length = float(line.length)
        crossing = shapely.intersection(line, other[k])
        how, dist, new = "", 0.0, None
        if not shapely.is_empty(crossing):
            cross_xy = shapely.get_coordinates(crossing)
            along = shapely.line_locate_point(line, shapely.points(cross_xy))
            j = int(np.argmin(along)) if at_start[k] else int(np.argmax(along))
            free = float(along[j]) if at_start[k] else float(length - along[j])
            if eps < free <= tol * ABOVE and free < length - eps:
                new = substring(line, free, length) if at_start[k] else substring(line, 0, length - free)
                xy = shapely.get_coordinates(new).copy()
                xy[0 if at_start[k] else -1] = cross_xy[j]  # exactly the crossing GEOS computed
                new = shapely.linestrings(xy)
                how, dist = "trimmed", free
        if new is None:
            xy = shapely.get_coordinates(line).copy()
            i = 0 if at_start[k] else len(xy) - 1
            target = hit_xy[k] if not np.isnan(hit_xy[k, 0]) else foot[k]
            how = "extended" if not np.isnan(hit_xy[k, 0]) else "moved"
            dist = float(np.hypot(*(target - xy[i])))
            if dist > tol * ABOVE:
                continue
            xy[i] = target
            new = shapely.linestrings(xy)
        parts[p] = new
        fixes.append(EndFix(int(net.part_feat[p]), int(fj[k]), how, dist))
    for f in sorted({fx.feat for fx in fixes}):
        first_p, last_p = np.searchsorted(net.part_feat, [f, f + 1])
        own = [parts.get(q) or net.part(q) for q in range(first_p, last_p)]
        multi = shapely.get_type_id(net.geoms[f]) == shapely.GeometryType.MULTILINESTRING.value
        out[f] = shapely.multilinestrings(own) if multi or len(own) > 1 else own[0]
    return out, fixes


# ---------------------------------------------------------------- boundaries with no line

def undrawn_lines(pieces: np.ndarray, lines: np.ndarray, tol: float) -> np.ndarray:
    """Stretches of boundary no line draws, as lines that meet the drawn lines exactly.

    ``pieces`` are the stretches ``boundary-without-line`` reports
    (:func:`archivist.analysis.nearness.undrawn_boundaries`): each stops
    about ``tol`` short of the line drawn next to it, where the tolerance
    buffer around that line begins. An end within ``tol`` of a drawn line is
    moved onto the nearest point of that line (at most ``tol``), so the new
    line and the old one meet; the other vertices are those of the boundary
    itself.
    """
    pieces = np.asarray(pieces, dtype=object)
    if not len(pieces):
        return pieces.copy()
    lines = np.asarray(lines, dtype=object)
    lines = lines[~shapely.is_missing(lines)]
    xy, idx = shapely.get_coordinates(pieces, return_index=True)
    if not len(lines):
        return pieces.copy()
    eps = noise(np.concatenate([pieces, lines]))
    tree = shapely.STRtree(lines)
    start = np.r_[0, np.flatnonzero(np.diff(idx)) + 1]
    stop = np.r_[start[1:], len(idx)] - 1
    ends = np.r_[start, stop]
    pts = shapely.points(xy[ends])
    ei, li = tree.query_nearest(pts, max_distance=tol * 1.01 + eps, all_matches=False)
    foot = shapely.get_coordinates(shapely.get_point(shapely.shortest_line(pts[ei], lines[li]), 1))
    xy = xy.copy()
    xy[ends[ei]] = foot
    return shapely.remove_repeated_points(shapely.linestrings(xy, indices=idx), 0.0)


def settled_lines(new: np.ndarray, inner: np.ndarray, polygons: np.ndarray, frame: Any, net: LineNetwork,
                  tol: float) -> np.ndarray:
    """The lines :func:`undrawn_lines` drew, as ``snap-lines`` would snap them on the next run.

    A line drawn between units follows the boundary through its own
    vertices, but an end joined to the line drawn next to it lies on that
    line, which may be short of a boundary vertex within the tolerance: the
    next run's ``snap-lines`` would move it there (:func:`snap_to_boundaries`:
    a vertex goes to the nearest target vertex within the tolerance). So
    each new line is snapped here, onto the unit boundaries near it (a line
    along the map edge onto the map edge: ``frame``). An end joined to a
    drawn line that the snap would part from it stays where it is (pinned,
    as :func:`snap_network` pins it); a line that would still come apart, or
    move farther than the tolerance, is left as drawn. Repairing the
    repaired copy then leaves the lines drawn here as they are.
    """
    out = np.asarray(new, dtype=object).copy()
    if not len(out):
        return out
    for mask, targets in ((inner, None), (~inner, frame)):
        rows = np.flatnonzero(mask & ~shapely.is_missing(out))
        if not len(rows):
            continue
        if targets is None:
            near = np.unique(shapely.STRtree(polygons).query(out[rows], predicate="dwithin", distance=tol)[1])
            goal = shapely.boundary(polygons[near])
        elif targets is not None and not shapely.is_empty(targets):
            goal = np.array([targets], dtype=object)
        else:
            continue
        # an end joined to a drawn line that the snap would part from it stays where it is (pinned), as snap-lines
        # pins it; a line still parted from one then is left as drawn
        pinned = np.zeros((0, 2))
        for _ in range(2):
            snapped = snap_to_boundaries(out[rows], goal, tol, pinned=pinned if len(pinned) else None)
            parted = _parted_ends(out[rows], snapped, net)
            if not len(parted) or not len(net.geoms):
                break
            pinned = np.r_[pinned, parted]
        ok = snapped.changed.copy()
        ok[_parted_ends(out[rows], snapped, net, which=True)] = False
        out[rows[ok]] = snapped.geoms[ok]
    return out


def _parted_ends(before: np.ndarray, snapped: Snapped, net: LineNetwork, which: bool = False) -> np.ndarray:
    """The ends of the changed lines that lay on a drawn line before the snap and on none after: their coordinates
    before ((n, 2)), or with ``which`` the positions of their lines."""
    moved = np.flatnonzero(snapped.changed)
    if not len(moved) or not len(net.geoms):
        return np.zeros(0, dtype=np.int64) if which else np.zeros((0, 2))
    eps = noise(np.concatenate([before[moved], snapped.geoms[moved]]))
    out_xy, out_k = [], []
    for end in (0, -1):
        was = shapely.get_point(before[moved], end)
        now = shapely.get_point(snapped.geoms[moved], end)
        joined = np.zeros(len(moved), dtype=bool)
        joined[np.unique(net.tree.query(was, predicate="dwithin", distance=eps)[0])] = True
        still = np.zeros(len(moved), dtype=bool)
        still[np.unique(net.tree.query(now, predicate="dwithin", distance=eps)[0])] = True
        bad = joined & ~still
        out_xy.append(shapely.get_coordinates(was[bad]))
        out_k.append(moved[bad])
    return np.concatenate(out_k) if which else np.concatenate(out_xy)


# ---------------------------------------------------------------- the working state as the analyses read it

def unit_analyses(state: RepairState, project: MapProject, tol: float) -> tuple[Any, Any, Any]:
    """The working units as the checks read them, their half-edges and coverage analysis (computed once while they stay)."""

    def compute() -> tuple[Any, Any, Any]:
        units = read_units(project)
        edges = build_edges(units.geoms, state.edge_basis)
        return units, edges, analyse_coverage(project, units, edges, tol)

    return state.analysis(f"units-edges-coverage:{tol!r}", compute)


def working_project(state: RepairState) -> MapProject:
    """The project with its units and lines replaced by the working copies (ids from ``FEATURE_ID``)."""
    project = state.project
    layers = dict(project.layers)
    if state.units is not None and "units" in layers:
        u = layers["units"]
        layers["units"] = state.carry("units", replace(u, frame=state.units, ids=state.units[FEATURE_ID].astype(str).to_numpy(dtype=object),
                                                       spec={**u.spec, "unit_field": state.unit_field, "id_field": None}))
    if state.lines is not None and "lines" in layers:
        ln = layers["lines"]
        spec = {"kind_field": state.kind_field}
        if state.certainty_field:
            spec["certainty_field"] = state.certainty_field
        layers["lines"] = state.carry("lines", replace(ln, frame=state.lines, ids=state.lines[FEATURE_ID].astype(str).to_numpy(dtype=object),
                                                       spec=spec, parts=(), origin={}))
    return replace(project, layers=layers)


def _line_change(repair_name: str, state: RepairState, rows: np.ndarray, before: np.ndarray, after: np.ndarray,
                 shifts: np.ndarray, notes: list[str]) -> list[Change]:
    ids = state.lines[FEATURE_ID].astype(str).to_numpy(dtype=object) if state.lines is not None else np.empty(0, dtype=object)
    layers = _source_layers(state)
    return [
        Change(repair_name, str(layers[r]), (str(ids[r]),), (str(ids[r]),), (), 0.0, float(s), b, a, note)
        for r, b, a, s, note in zip(rows.tolist(), before, after, shifts.tolist(), notes)
    ]


def _source_layers(state: RepairState) -> np.ndarray:
    frame = state.lines
    if frame is None:
        return np.empty(0, dtype=object)
    if SOURCE_LAYER in frame.columns:
        return frame[SOURCE_LAYER].astype(str).to_numpy(dtype=object)
    return np.full(len(frame), "lines", dtype=object)


LINE_NETWORK = "line-network"  # key of RepairState.analyses: (the working lines frame, its network)


def line_network(state: RepairState, project: MapProject) -> LineNetwork:
    """The network of the working lines (``project``: :func:`working_project` of ``state``), built once while the
    lines stay the same frame with the same geometries (:func:`_set_geoms` forgets it; every other change of the
    lines makes a new frame)."""
    hit = state.analyses.get(LINE_NETWORK)
    if hit is not None and hit[0] is state.lines:
        return cast(LineNetwork, hit[1])
    net = build_line_network(project)
    state.analyses[LINE_NETWORK] = (state.lines, net)
    return net


def _set_geoms(state: RepairState, rows: np.ndarray, geoms: np.ndarray) -> None:
    assert state.lines is not None
    state.analyses.pop(LINE_NETWORK, None)  # the frame keeps its identity: its network goes
    col = state.lines.geometry.name
    values = np.asarray(state.lines.geometry.array, dtype=object).copy()
    values[rows] = geoms
    state.lines[col] = values
    state.lines.set_geometry(col, inplace=True)


@repair("snap-lines", order=60, default=True, layer="lines")
def snap_lines(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Contacts snapped onto the unit boundaries, map-boundary lines onto the map edge.

    Every vertex of a contact within the snapping distance of a unit polygon
    boundary goes onto it: onto the boundary's nearest vertex within that
    distance (so line and polygon share it exactly), else onto the nearest
    point of the boundary (no vertex is added: see
    :func:`snap_to_boundaries`). Map-boundary
    lines are snapped the same way onto the map edge (the extent layer's
    outline, else the outer boundary of the units). The snapping distance is
    ``[checks] tolerance`` (our own choice: the distance ``check`` already
    counts as "on the boundary"). A vertex farther than that never moves; a
    line that would end up farther than that from where it was drawn is left
    and listed, as is one the snap would make cross itself. A contact drawn on a boundary (every vertex within the
    tolerance of the unit boundaries as read) that the polygon repairs moved
    further than the tolerance from it follows it, within twice the
    tolerance (``FOLLOW``: a polygon moves by no more than two repairs'
    bounds); without this, the copy's check reported such contacts as off
    the boundary (3 at 10^5 polygons with 1 % of each defect). Never moves
    faults or other kinds, never moves a polygon, and never decides which of
    line and polygon is right beyond the tolerance of the map as read:
    ``line-off-boundary`` still reports those.
    """
    if state.lines is None or state.units is None or not len(state.lines) or not len(state.units):
        return [], []
    tol = float(settings.tolerance)
    project = working_project(state)
    net = build_line_network(project)
    units, edges, cov = unit_analyses(state, project, tol)
    if not len(net.geoms) or not len(units):
        return [], []
    boundaries = shapely.boundary(units.geoms)
    changes: list[Change] = []
    left: list[Left] = []
    frame_edge = np.array([cov.extent_boundary], dtype=object) if cov.extent is not None else np.empty(0, dtype=object)
    plan = [(role, np.flatnonzero(net.roles == role), targets, tol) for role, targets in (("contact", boundaries), ("boundary", frame_edge))]
    plan = [(role, feats, targets, t) for role, feats, targets, t in plan if len(feats) and len(targets)]
    caches: dict[int, dict[str, Any]] = {id(boundaries): {SEGMENTS: edges}}  # the boundaries' segments: the units' edges
    if plan and plan[0][0] == "contact":
        follow = _following(state, net, plan[0][1], boundaries, tol, caches[id(boundaries)])
        if len(follow):
            plan[0] = ("contact", np.setdiff1d(plan[0][1], follow), boundaries, tol)
            plan.append(("follow", follow, boundaries, FOLLOW * tol))
    final, shift, changed, held, worse, tangled = snap_network(net, [(feats, targets, t) for _, feats, targets, t in plan], caches)
    ids = _ids(state)
    layers = _source_layers(state)
    for role, feats, _, t in plan:
        done = feats[changed[feats]]
        rows = net.rows[done]
        if len(done):
            _set_geoms(state, rows, final[done])
            note = {"contact": f"vertices within {tol:g} of the unit boundaries moved onto it",
                    "boundary": f"vertices within {tol:g} of the map edge moved onto it",
                    "follow": (f"drawn on a unit boundary that the polygon repairs moved more than {tol:g} from it: "
                               f"vertices within {t:g} of the boundary moved onto it")}[role]
            changes += _line_change("snap-lines", state, rows, net.geoms[done], final[done], shift[done], [note] * len(done))
        refused = ((held, f"snapping it onto the boundary would move it more than {t:g} from where it was drawn"),
                   (worse, "snapping its vertices would leave part of it farther from the unit boundaries than it was drawn"),
                   (tangled, "snapping its vertices onto the boundary would make it cross itself (line-self-intersection)"))
        for mask, reason in refused:
            for f in feats[mask[feats]]:
                r = int(net.rows[f])
                left.append(Left("snap-lines", str(layers[r]), (str(ids[r]),), reason, net.geoms[f], 0.0))
    return changes, left


# how far a contact drawn on a unit boundary follows it where the polygon repairs moved the boundary: a polygon
# moves by no more than the bounds of two repairs (a gap filled, then its vertices snapped; tests/test_repair_bounds.py)
FOLLOW = 2.0


def _following(state: RepairState, net: LineNetwork, contacts: np.ndarray, boundaries: np.ndarray, tol: float,
               cache: dict[str, Any]) -> np.ndarray:
    """The ``contacts`` (network features) drawn on the unit boundaries as read that the polygon repairs moved
    away from them: some vertex farther than ``tol`` from the working units' ``boundaries``, none farther than
    ``FOLLOW`` times it, and every vertex within ``tol`` of the boundaries of the units as read.

    snap-lines snaps them within ``FOLLOW x tol``: within ``tol`` only, a
    contact along a boundary that two repairs each moved within its bound
    (resolve-overlaps 0.5 m, then snap-edges 0.54 m at a 1 m tolerance) was
    left where it was drawn, and the check of the copy reported it as off the
    boundary, a finding the map did not have. A vertex that is one of the
    boundaries' own is 0 away; the others are measured (GEOS distance to the
    nearest boundary), and the units as read only near the few lines found.
    ``cache``: the snap's cache of ``boundaries`` (:func:`snap_to_boundaries`).
    """
    none = np.zeros(0, dtype=np.int64)
    layer = state.project.layers.get("units")
    valid = _kept(boundaries)
    if layer is None or not len(contacts) or not len(valid) or tol <= 0:
        return none
    index = _targets(valid, cache)
    parts = np.flatnonzero(np.isin(net.part_feat, contacts))
    starts, stops = net.part_off[parts], net.part_off[parts + 1]
    vertex, which = spans(starts, stops - starts)[1], np.repeat(net.part_feat[parts], stops - starts)
    off = ~index.on_at(net.coords, vertex)
    vertex, which = vertex[off], which[off]
    if not len(vertex):
        return none
    (who, _), d = index.tree.query_nearest(shapely.points(net.coords[vertex]), return_distance=True, all_matches=False)
    far = np.zeros(len(net.geoms))
    np.maximum.at(far, which[who], d)
    cand = np.intersect1d(contacts, np.flatnonzero((far > tol * ABOVE) & (far <= FOLLOW * tol * ABOVE)))
    if not len(cand):
        return none
    # each vertex within tol of the boundaries as read (the units the check read, near these lines only)
    before = np.asarray(layer.frame.geometry.values, dtype=object)
    before = before[present(before)]
    near = before[np.unique(shapely.STRtree(before).query(net.geoms[cand], predicate="dwithin", distance=tol)[1])]
    if not len(near):
        return none
    xy, line = shapely.get_coordinates(net.geoms[cand], return_index=True)
    (who, _), d = shapely.STRtree(shapely.boundary(near)).query_nearest(shapely.points(xy), return_distance=True,
                                                                        all_matches=False)
    drawn = np.zeros(len(cand))
    np.maximum.at(drawn, line[who], d)
    return cand[drawn <= tol * ABOVE]


MAX_JOIN_ROUNDS = 8  # rounds of holding line ends where lines meet; each round only adds to what is held


def snap_network(net: LineNetwork, plan: list[tuple[np.ndarray, np.ndarray, float]],
                 shared: dict[int, dict[str, Any]] | None = None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The network's features of each ``(features, targets, distance)`` of ``plan`` snapped, lines that meet kept
    meeting.

    Each group of features is snapped onto its targets within its distance by
    :func:`snap_to_boundaries`; a snap that would leave part of a line
    farther from its targets than drawn (:func:`_farther`) is not made. Where
    the end of a snapped line touches another line (within floating-point
    noise: a shared vertex, or an end closed onto it), the snapped end must
    still touch that line as snapped (or as drawn, when it does not move: a
    fault, a line held back): otherwise the end stays where it is (pinned),
    and if it still comes apart (the other line's segment moves under it)
    both lines keep their drawn geometry. Without this, snapping would open
    the junction and ``close-dangles`` would close it again, on every run.

    ``shared``: snap caches (:func:`snap_to_boundaries`) already made, by the
    id of the targets they index. Returns per network feature: its geometry after, the distance it moved,
    whether it changed, whether it was held back (too far), whether the
    snap was refused as farther from the targets, and whether it was refused
    as making the line cross itself.
    """
    n = len(net.geoms)
    final = np.array(net.geoms, dtype=object, copy=True)
    shift, changed = np.zeros(n), np.zeros(n, dtype=bool)
    held, worse, tangled = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)
    snapped = np.zeros(n, dtype=bool)
    for feats, _, _ in plan:
        snapped[feats] = True
    if not snapped.any():
        return final, shift, changed, held, worse, tangled
    eps = noise(net.geoms)
    # the ends of the snapped lines that touch another line: (end k, other feature g)
    parts = np.flatnonzero(snapped[net.part_feat])
    ends = np.r_[net.part_off[parts], net.part_off[parts + 1] - 1]
    owner = np.r_[net.part_feat[parts], net.part_feat[parts]]
    old = net.coords[ends]
    ki = g = np.empty(0, dtype=np.int64)  # found after each round for the lines it changed: see _touching
    seen = np.zeros(n, dtype=bool)  # the lines whose junctions are asked already
    pinned = np.zeros(len(ends), dtype=bool)
    frozen = np.zeros(n, dtype=bool)
    todo = snapped.copy()  # each line is snapped on its own: a round redoes only the lines a new pin or freeze touches
    # per group: its targets' indexes, built once for every round (groups with the same targets share them; ``shared``
    # holds those the caller built, by the targets' id)
    shared = {} if shared is None else shared
    caches: list[dict[str, Any]] = [shared.setdefault(id(targets), {}) for _, targets, _ in plan]
    # the lines whose every vertex is on a vertex of their targets already come out of every round as drawn: they
    # are never snapped (most contacts of a map; their ends still hold the lines they meet, below)
    settled = _on_targets(net, plan, caches)
    ends_index: dict[str, Any] = {}  # the index of the ends, built once for every round
    for round_ in range(MAX_JOIN_ROUNDS):
        final[todo] = net.geoms[todo]
        shift[todo], changed[todo], held[todo], worse[todo], tangled[todo] = 0.0, False, False, False, False
        for (feats, targets, dist), cache in zip(plan, caches):
            f = feats[todo[feats] & ~frozen[feats] & ~settled[feats]]
            if not len(f):
                continue
            found = snap_to_boundaries(net.geoms[f], targets, dist, old[pinned], cache)
            w = _farther(net.geoms[f], found.geoms, targets, dist, cache) & found.changed
            ok = found.changed & ~w
            final[f[ok]] = found.geoms[ok]
            shift[f[ok]] = found.shift[ok]
            changed[f[ok]] = True
            held[f[found.held]] = True
            worse[f[w]] = True
            tangled[f[found.tangled]] = True
        # the junctions of the lines that changed: a line can change first in a later round (its own snap refused
        # as farther in the first, made once one of its ends is held), and its junctions are then asked too
        fresh = changed & ~seen
        if fresh.any():
            k2, g2 = _touching(net, old, owner, fresh, eps, ends_index)
            pairs = np.unique(np.c_[np.r_[ki, k2], np.r_[g, g2]].astype(np.int64), axis=0)
            ki, g = pairs[:, 0], pairs[:, 1]
            seen |= fresh
        if not len(ki):
            break
        moved = changed[owner[ki]] | changed[g]
        if not moved.any():
            break
        sel = np.flatnonzero(moved)
        new_end = _nearest_ends(final, owner[ki[sel]], old[ki[sel]])
        apart = shapely.distance(shapely.points(new_end), final[g[sel]]) > eps
        if not apart.any():
            break
        bad_k, bad_g = ki[sel[apart]], g[sel[apart]]
        again = pinned[bad_k]
        frozen[owner[bad_k[again]]] = True  # pinned and still apart: the other line moves under it
        gone = bad_g[again]
        frozen[gone[snapped[gone]]] = True
        pinned[bad_k] = True
        todo = np.zeros(n, dtype=bool)
        todo[owner[bad_k]] = True
        todo[bad_g] = True
        # every line with a vertex on a newly pinned point is snapped again with it held
        hit = dwithin_pairs(net.tree, net.geoms, shapely.points(old[bad_k]), eps)[1]
        todo[hit] = True
        todo &= snapped
    return final, shift, changed, held, worse, tangled


def _on_targets(net: LineNetwork, plan: list[tuple[np.ndarray, np.ndarray, float]], caches: list[dict[str, Any]]) -> np.ndarray:
    """Per network feature: a feature of a group of ``plan`` whose every part has each vertex exactly on a vertex of
    the group's targets and no two in a row equal (:func:`_on_vertices`, read off the network's coordinates):
    :func:`snap_to_boundaries` returns it as it is, whatever the points pinned. ``caches``: per group, the cache
    of its snaps."""
    out = np.zeros(len(net.geoms), dtype=bool)
    vertex_part = np.repeat(np.arange(net.n_parts), np.diff(net.part_off))
    for (feats, targets, _), cache in zip(plan, caches):
        valid = _kept(targets)
        if not len(valid):
            continue
        mine = np.flatnonzero(np.isin(net.part_feat, feats)[vertex_part])  # the vertices of the group's parts
        index = _targets(valid, cache)
        on = _parts_on(net.coords[mine], vertex_part[mine], net.n_parts, index, index.on_at(net.coords, mine))
        ok = np.ones(len(net.geoms), dtype=bool)
        ok[net.part_feat[~on]] = False
        out[feats] = ok[feats]
    return out


def _touching(net: LineNetwork, old: np.ndarray, owner: np.ndarray, changed: np.ndarray, eps: float,
              cache: dict[str, Any] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The pairs (end k, feature g) where the end ``old[k]`` of line ``owner[k]`` touches another line g (within
    ``eps``) and one of the two is among the lines ``changed``.

    Only those pairs can come apart. :func:`snap_network` asks it after each
    round for the lines that changed first in that round: a line whose snap
    was refused in the first round (farther than drawn) can be snapped in a
    later one, with one of its ends held, and its other end could part from
    the line it meets (a generated map: the end of a contact moved 0.063 m
    off a fault onto a boundary vertex, and close-dangles closed it again on
    every run). The ends of the lines that changed are asked of the whole
    network's index. The other ends are found from the lines that changed
    (at 10^5 polygons some 15 000 of 300 000 lines): a line whose end lies
    within ``eps`` of one lies within ``eps`` of it, so the network's index
    names the lines to look at and only their ends are measured (GEOS
    ``dwithin``), not all 600 000 ends. ``cache`` (a dict kept by the caller
    for the same ``old`` and ``owner``) keeps the ends sorted by line from one
    call to the next.
    """
    none = (np.empty(0, dtype=np.int64),) * 2
    if not len(old) or not changed.any():
        return none
    mine = changed[owner]
    ka = np.flatnonzero(mine)
    ia, ga = dwithin_pairs(net.tree, net.geoms, shapely.points(old[ka]), eps) if len(ka) else none
    ka, ga = ka[ia], ga
    chg = np.flatnonzero(changed)
    if (~mine).any():  # the lines near the changed ones, then their ends not of a changed line
        cache = {} if cache is None else cache
        if "ends" not in cache:
            by_line = np.argsort(owner, kind="stable")
            cache["ends"] = (by_line, np.searchsorted(owner[by_line], np.arange(len(net.geoms) + 1)))
        by_line, first = cache["ends"]
        jc, near = dwithin_pairs(net.tree, net.geoms, net.geoms[chg], eps)
        pair, at = spans(first[near], first[near + 1] - first[near])
        kb = by_line[at]
        keep = ~mine[kb]
        kb, pair = kb[keep], pair[keep]
        hit = shapely.dwithin(shapely.points(old[kb]), net.geoms[chg[jc[pair]]], eps)
        kb, gb = kb[hit], chg[jc[pair[hit]]]
    else:
        kb, gb = none
    ki, g = np.r_[ka, kb].astype(np.int64), np.r_[ga, gb].astype(np.int64)
    other = g != owner[ki]
    return ki[other], g[other]


def _nearest_ends(geoms: np.ndarray, feat: np.ndarray, near: np.ndarray) -> np.ndarray:
    """For each i, the end point of a part of ``geoms[feat[i]]`` nearest to ``near[i]`` (coordinates); where two
    are as near, a start before an end, then the first part."""
    out = np.array(near, dtype=float, copy=True)
    lines, which = np.unique(feat, return_inverse=True)  # each line's parts read once (a line meets several others)
    parts, line = shapely.get_parts(geoms[lines], return_index=True)
    if not len(parts):
        return out
    # each line's part ends in order: per part its start then its end
    ends = np.stack([shapely.get_coordinates(shapely.get_point(parts, 0)),
                     shapely.get_coordinates(shapely.get_point(parts, -1))], axis=1).reshape(-1, 2)
    first = np.searchsorted(np.repeat(line, 2), np.arange(len(lines) + 1))
    pair, cand = spans(first[which], (first[1:] - first[:-1])[which])
    d = np.hypot(*(ends[cand] - near[pair]).T)
    o = np.lexsort((cand // 2, cand % 2, d, pair))  # ties: starts before ends, parts in order
    best = o[np.r_[True, pair[o][1:] != pair[o][:-1]]]
    out[pair[best]] = ends[cand[best]]
    return out


def _farther(before: np.ndarray, after: np.ndarray, targets: np.ndarray, tol: float, cache: dict[str, Any] | None = None) -> np.ndarray:
    """Per line: True when the snapped line strays farther from ``targets`` than the line as drawn.

    The farthest any point of a line lies from the targets, measured on the
    line densified to a quarter of the tolerance (the distance to the nearest
    target segment, as GEOS measures it, whole arrays); a snap that makes it
    larger would trade a line along the boundary for one that cuts across a
    bend, so it is not made. Lines equal before and after are not measured.

    Densifying works segment by segment, so a segment whose two ends did not
    move gives the same points before and after: the segments that moved are
    measured first, and the ones that did not only for a line whose moved
    segments reach farther after than before (the farthest point of the
    whole line is the larger of the two). A segment is densified only where
    the bound its ends give could raise what its line already reaches, and
    its points are measured only against the target segments within that
    bound (:func:`_nearest_within`). The answer is the one the whole lines
    would give.
    """
    out = np.zeros(len(before), dtype=bool)
    if not len(before) or not len(targets):
        return out
    moved = np.flatnonzero(~shapely.equals_exact(before, after, tolerance=0.0))
    # a snapped line whose every segment is one of the targets' own lies on them all along (0 away): never farther
    moved = moved[~_along_targets(after[moved], cache)]
    if not len(moved):
        return out
    # the targets as their segments: a nearest-segment query is a point-to-segment distance, not one to a whole ring
    sa, sb, segs, tree, keys = _near_segments(np.r_[before[moved], after[moved]], targets, cache)
    step = max(tol / 4.0, 1e-9)
    m = len(moved)
    # the ends of the target segments, sorted, each with a segment it ends: a point that is one of them lies 0 from
    # the targets and that segment is a nearest one, without asking the index
    vkeys = np.r_[sa[:, 0] + 1j * sa[:, 1], sb[:, 0] + 1j * sb[:, 1]]
    vorder = np.argsort(vkeys, kind="stable")
    vkeys, vseg = vkeys[vorder], np.r_[np.arange(len(sa)), np.arange(len(sa))][vorder]

    def at_vertex(xy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per point: whether it is an end of a target segment, and such a segment (else -1)."""
        if not len(vkeys) or not len(xy):
            return np.zeros(len(xy), dtype=bool), np.full(len(xy), -1, dtype=np.int64)
        keys = xy[:, 0] + 1j * xy[:, 1]
        i = np.minimum(np.searchsorted(vkeys, keys), len(vkeys) - 1)
        hit = vkeys[i] == keys
        return hit, np.where(hit, vseg[i], -1)

    def ends_far(start: np.ndarray, stop: np.ndarray, owner: np.ndarray) -> np.ndarray:
        """Per moved line, the farthest end of the segments it owns from the targets (as :func:`reach` measures it).

        An end that is an end of a target segment lies 0 from the targets: only the others are asked."""
        far = np.zeros(m)
        if len(owner):
            ends = np.r_[start, stop]
            off = np.flatnonzero(~at_vertex(ends)[0])
            if len(off):
                (who, _), d = tree.query_nearest(shapely.points(ends[off]), return_distance=True, all_matches=False)
                np.maximum.at(far, np.r_[owner, owner][off[who]], d)
        return far

    def reach(start: np.ndarray, stop: np.ndarray, owner: np.ndarray) -> np.ndarray:
        """Per moved line, the farthest densified point of the segments ``start -> stop`` it owns (0 with none)."""
        far = np.zeros(m)
        if not len(owner):
            return far
        # the ends first: the distance to one target segment is convex along a segment, so no point of a segment
        # lies farther from the targets than its two ends lie from the target nearest to either of them
        exy = np.r_[start, stop]
        ends = shapely.points(exy)
        k = len(owner)
        # an end that is an end of a target segment: 0 away, that segment a nearest one; the others asked
        hit, te = at_vertex(exy)
        de = np.zeros(2 * k)
        ask = np.flatnonzero(~hit)
        if len(ask):
            (who, near), d = tree.query_nearest(ends[ask], return_distance=True, all_matches=False)
            de[ask[who]] = d
            te[ask[who]] = near
        lo = np.maximum(de[:k], de[k:])
        ok = (te[:k] >= 0) & (te[k:] >= 0)
        up = np.full(k, np.inf)
        if ok.any():
            i = np.flatnonzero(ok)
            other_a = shapely.distance(ends[k + i], segs[te[i]])  # stop to the target nearest to start
            other_b = shapely.distance(ends[i], segs[te[k + i]])  # start to the target nearest to stop
            up[i] = np.minimum(np.maximum(de[i], other_a), np.maximum(de[k + i], other_b))
        # a segment that is a target segment (the same two vertices, either way round) lies on the targets: its
        # farthest point is 0 away, which the bound above misses where an end is a vertex shared by two target
        # segments and the index named the other one (most segments of a line snapped onto the boundary's vertices)
        up[keys.has(_segment_rows(start, stop))] = 0.0
        np.maximum.at(far, owner, lo)
        # a segment whose bound is no more than what its line already reaches (the farther end of any of its
        # segments) cannot raise the line's farthest point: only the others are densified
        rest = np.flatnonzero(~(up <= far[owner]))
        if len(rest):
            lines = shapely.linestrings(np.stack([start[rest], stop[rest]], axis=1))
            xy, idx = shapely.get_coordinates(shapely.segmentize(lines, step), return_index=True)
            bounded = np.isfinite(up[rest])
            if bounded.all() and len(sa):  # every point of a segment lies within its bound of a target: only those are measured
                d = _nearest_within(xy, idx, lines, up[rest], tree, sa, sb)
                np.maximum.at(far, owner[rest[idx]], d)
            else:
                (who, _), d = tree.query_nearest(shapely.points(xy), return_distance=True, all_matches=False)
                np.maximum.at(far, owner[rest[idx[who]]], d)
        return far

    b, a = _segments(before[moved]), _segments(after[moved])
    if np.array_equal(b[3], a[3]):  # the same parts and vertex counts (a snap adds no vertex): segment by segment
        same = (b[0] == a[0]).all(axis=1) & (b[1] == a[1]).all(axis=1)
        same_a = same
    else:  # whole lines
        same, same_a = np.zeros(len(b[2]), dtype=bool), np.zeros(len(a[2]), dtype=bool)
    after_far = reach(a[0][~same_a], a[1][~same_a], a[2][~same_a])
    # the line as drawn reaches at least as far as its farthest vertex (of the segments that moved): where the
    # snapped line reaches no farther than that, it is not farther, and the drawn line need not be densified
    least = ends_far(b[0][~same], b[1][~same], b[2][~same])
    need = after_far > least + 1e-9
    sel = ~same & need[b[2]]
    before_far = np.where(need, reach(b[0][sel], b[1][sel], b[2][sel]), least)
    maybe = after_far > before_far + 1e-9
    if (maybe & np.bincount(b[2][same], minlength=m).astype(bool)).any():
        keep = same & maybe[b[2]]
        unchanged = reach(b[0][keep], b[1][keep], b[2][keep])
        maybe &= after_far > np.maximum(unchanged, before_far) + 1e-9
    out[moved] = maybe
    return out


SEGMENTS = "segments"  # key of a snap's cache: the half-edge table of the polygons whose boundaries are the targets


def _along_targets(lines: np.ndarray, cache: dict[str, Any] | None) -> np.ndarray:
    """Per line: every segment of it is a segment of the targets (the same two vertices, either way round), read off
    the half-edge table the snap's ``cache`` holds under :data:`SEGMENTS` (the edges of the polygons whose
    boundaries are the targets: every segment of those boundaries, zero-length ones aside). False for every line
    where the cache holds none, and for a line with no segment."""
    out = np.zeros(len(lines), dtype=bool)
    edges = cache.get(SEGMENTS) if cache is not None else None
    if edges is None or not len(lines):
        return out
    a, b, line, _ = _segments(lines)
    if not len(line):
        return out
    px, py, qx, qy, _ = canonical(a[:, 0], a[:, 1], b[:, 0], b[:, 1])
    off = edges.find(coord_hash(px, py, qx, qy), px, py, qx, qy) < 0
    n = len(lines)
    return (np.bincount(line, weights=off, minlength=n) == 0) & (np.bincount(line, minlength=n) > 0)


def _near_segments(lines: np.ndarray, targets: np.ndarray, cache: dict[str, Any] | None = None
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, shapely.STRtree, _RowSet]:
    """The segments of the targets that can be the nearest target segment of a point of ``lines``: starts, ends,
    the segments as LineStrings, their STRtree and the set of them (:func:`_segment_rows`).

    Not every target's: a point of a line lies within ``R`` of the targets,
    ``R`` the farthest any vertex of its line lies from them plus half its
    longest segment (the distance to the targets grows no faster than along
    the line), so its nearest target segment belongs to a target within ``R`` of
    the line (GEOS ``dwithin``, a little slack over ``R``). The nearest
    segment found among these is the one among all, at the same distance
    (the same point-to-segment computation); at 10^5 polygons this indexes
    the boundaries near the lines a snap moved, not all 1.3 million segments.
    ``cache`` (of :func:`snap_to_boundaries`, for the same ``targets``) lends
    its index of the targets.
    """
    valid = _kept(targets)
    index = _targets(valid, cache)
    xy, li = shapely.get_coordinates(lines, return_index=True)
    reach = np.zeros(len(lines))
    # a vertex that is one of the targets' own lies 0 from them: only the others are asked
    off = np.flatnonzero(~index.on(xy)) if len(xy) else np.zeros(0, dtype=np.int64)
    if len(xy):  # how far a vertex lies from the targets (GEOS, the nearest target's distance)
        if len(off):
            (who, _), d = index.tree.query_nearest(shapely.points(xy[off]), return_distance=True, all_matches=False)
            np.maximum.at(reach, li[off[who]], d)
        a, b, line, _ = _segments(lines)
        half = np.zeros(len(lines))
        np.maximum.at(half, line, np.hypot(*(b - a).T) / 2.0)
        reach += half
    reach = reach * (1.0 + 1e-9) + noise(np.r_[lines, valid])
    # the targets whose boxes come within the reach of a line's box: a few more than those within the reach
    # (which GEOS would measure ring by ring), and the nearest segment among more is the same one
    b = shapely.bounds(lines)
    pick = np.unique(index.tree.query(shapely.box(b[:, 0] - reach, b[:, 1] - reach, b[:, 2] + reach, b[:, 3] + reach))[1])
    sa, sb, _ = segments(shapely.get_parts(valid[pick]))
    segs = shapely.linestrings(np.stack([sa, sb], axis=1)) if len(sa) else valid[pick]
    return sa, sb, segs, shapely.STRtree(segs), _RowSet(_segment_rows(sa, sb))


CHUNK = 4_000_000  # point-to-segment pairs measured at once (about 100 MB of temporaries)
BLOCK = 8  # densified points of a line that ask the index together


def _nearest_within(xy: np.ndarray, idx: np.ndarray, lines: np.ndarray, bound: np.ndarray, tree: shapely.STRtree,
                    sa: np.ndarray, sb: np.ndarray) -> np.ndarray:
    """Distance from each point ``xy`` to the nearest target segment (``sa`` -> ``sb``, indexed by ``tree``).

    Each point lies on ``lines[idx]`` and within ``bound[idx]`` of some target
    segment, so its nearest one has a box meeting the point's box widened by
    the bound (asked for blocks of points along a line, each block's box
    widened): only those candidates are measured, on arrays, by GEOS's own
    point-to-segment formula (``Distance::pointToSegment``), which gives the
    distance ``query_nearest`` would.
    """
    # the points in blocks of BLOCK along each line, each block asking the index with its own box
    new = np.ones(len(xy), dtype=bool)
    new[1:] = idx[1:] != idx[:-1]
    line_start = np.flatnonzero(new)
    pos = np.arange(len(xy)) - np.repeat(line_start, np.diff(np.r_[line_start, len(xy)]))
    new |= pos % BLOCK == 0
    bs = np.flatnonzero(new)
    blk = np.cumsum(new) - 1
    b = np.stack([np.minimum.reduceat(xy[:, 0], bs), np.minimum.reduceat(xy[:, 1], bs),
                  np.maximum.reduceat(xy[:, 0], bs), np.maximum.reduceat(xy[:, 1], bs)], axis=1)
    pad = bound[idx[bs]] * (1.0 + 1e-9) + 1e-9 * np.maximum(np.abs(b).max(axis=1), 1.0)
    li, tj = tree.query(shapely.box(b[:, 0] - pad, b[:, 1] - pad, b[:, 2] + pad, b[:, 3] + pad))
    order = np.argsort(li, kind="stable")
    li, tj = li[order], tj[order]
    count = np.bincount(li, minlength=len(bs))
    idx = blk
    first = np.r_[0, np.cumsum(count)[:-1]]
    out = np.full(len(xy), np.inf)
    per = count[idx]
    start = 0
    while start < len(xy):  # points in runs of at most CHUNK pairs
        total = np.cumsum(per[start:])
        stop = start + max(1, int(np.searchsorted(total, CHUNK, side="right")))
        p = np.arange(start, stop)
        n = per[p]
        which, at = spans(first[idx[p]], n)
        pp = p[which]
        t = tj[at]
        d = _point_segment(xy[pp], sa[t], sb[t])
        has = n > 0
        if has.any():
            out[p[has]] = np.minimum.reduceat(d, (np.cumsum(n) - n)[has])
        start = stop
    lost = np.flatnonzero(~np.isfinite(out))  # none found within the bound (rounding at its edge): the index's answer
    if len(lost):
        (who, _), d = tree.query_nearest(shapely.points(xy[lost]), return_distance=True, all_matches=False)
        out[lost[who]] = d
    return out


def _point_segment(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """GEOS ``Distance::pointToSegment`` on arrays (the same operations in the same order)."""
    dx, dy = b[:, 0] - a[:, 0], b[:, 1] - a[:, 1]
    len2 = dx * dx + dy * dy
    zero = len2 == 0
    safe = np.where(zero, 1.0, len2)
    r = ((p[:, 0] - a[:, 0]) * dx + (p[:, 1] - a[:, 1]) * dy) / safe
    s = ((a[:, 1] - p[:, 1]) * dx - (a[:, 0] - p[:, 0]) * dy) / safe
    da = np.sqrt((p[:, 0] - a[:, 0]) ** 2 + (p[:, 1] - a[:, 1]) ** 2)
    db = np.sqrt((p[:, 0] - b[:, 0]) ** 2 + (p[:, 1] - b[:, 1]) ** 2)
    return np.where(zero | (r <= 0.0), da, np.where(r >= 1.0, db, np.abs(s) * np.sqrt(safe)))


def _segment_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """One row per segment ``a -> b`` ((n, 2) coordinates), the same for ``b -> a``: its two ends in order, as an
    (n, 4) array (rows are equal exactly when the segments have the same two ends)."""
    swap = (a[:, 0] > b[:, 0]) | ((a[:, 0] == b[:, 0]) & (a[:, 1] > b[:, 1]))
    lo, hi = np.where(swap[:, None], b, a), np.where(swap[:, None], a, b)
    return np.concatenate([lo, hi], axis=1).astype(np.float64)


def _segments(lines: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Every segment of the lines (starts, ends, the position of its line) and the lines' shape: per part, its line and vertex count."""
    parts, line_of = shapely.get_parts(lines, return_index=True)
    a, b, part = segments(parts)
    shape = np.stack([line_of, shapely.get_num_coordinates(parts)], axis=1)
    return a, b, line_of[part], shape


def _ids(state: RepairState) -> np.ndarray:
    return state.lines[FEATURE_ID].astype(str).to_numpy(dtype=object) if state.lines is not None else np.empty(0, dtype=object)


@repair("close-dangles", order=70, default=True, layer="lines")
def close_dangles(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Ends of contacts and map-boundary lines that nearly meet another line closed onto it.

    An end that shares no vertex with another line but lies within the
    snapping distance (``[checks] tolerance``) of one is closed: an
    overshoot is trimmed back to the line it crosses, an undershoot is
    extended along its last segment to the line it nearly meets, or, when
    that segment points past it, its end vertex is moved onto the nearest
    point of that line. Ends are found as ``line-dangle`` finds them. The
    distance is our own choice: what ``check`` already counts as connected,
    now made exact, so that polygons can be built from the lines. Ends
    farther than that are left and listed (``line-dangle`` reports them):
    whether a line stops short, runs on, or is a fault dying out is the
    geologist's call. Faults and other kinds are never changed.
    """
    if state.lines is None or not len(state.lines):
        return [], []
    tol = float(settings.tolerance)
    project = working_project(state)
    net = line_network(state, project)
    if not len(net.geoms):
        return [], []
    found = loose_ends(net, ("contact", "boundary"), tol)
    geoms, fixes = close_ends(net, tol, ends=found)
    changes: list[Change] = []
    if fixes:
        feats = np.array(sorted({fx.feat for fx in fixes}), dtype=np.int64)
        rows = net.rows[feats]
        before = net.geoms[feats]
        after = geoms[feats]
        _set_geoms(state, rows, after)
        ids = _ids(state)
        notes = []
        shifts = np.zeros(len(feats))
        for k, f in enumerate(feats.tolist()):
            mine = [fx for fx in fixes if fx.feat == f]
            shifts[k] = max(fx.distance for fx in mine)
            notes.append("; ".join(f"end {fx.how} {fx.distance:.3g} to meet line {ids[net.rows[fx.other]]}" for fx in mine))
        changes = _line_change("close-dangles", state, rows, before, after, shifts, notes)
    # the free ends beyond the tolerance: listed, not guessed
    after_net = line_network(state, working_project(state)) if fixes else net  # no end closed: the same lines, ends
    rest = loose_ends(after_net, ("contact", "boundary"), tol) if fixes else found
    left: list[Left] = []
    far = ~rest.near_line
    if state.units is not None and len(state.units) and far.any():
        units, _, cov = unit_analyses(state, project, tol)
        if len(units) and cov.extent is not None:  # an end at the map edge is connected (line-dangle reads it so)
            far &= ~shapely.dwithin(rest.points, cov.extent_boundary, tol)
    if far.any():
        ids, layers = _ids(state), _source_layers(state)
        for k in np.flatnonzero(far).tolist():
            r = int(after_net.rows[int(rest.feat[k])])
            left.append(Left("close-dangles", str(layers[r]), (str(ids[r]),),
                             f"an end of it touches no line within the tolerance ({tol:g}); extending, trimming or leaving it is "
                             "the geologist's call", rest.points[k], 0.0))
    return changes, left


def _fill_ids(state: RepairState, frame: pd.DataFrame, add: pd.DataFrame) -> None:
    """Write each new line's feature id into its layer's id field (``id_field``), where the manifest names one:
    the copy then holds the ids the change log gives them (a number, stored as one in a numeric field)."""
    lines = state.project.layers.get("lines")
    if lines is None:
        return
    fields = {p.role: p.field("id_field") for p in lines.parts} if lines.parts else {"lines": lines.field("id_field")}
    sources = add[SOURCE_LAYER] if SOURCE_LAYER in add.columns else pd.Series("lines", index=add.index)
    for src, field in fields.items():
        mine = (sources == src).to_numpy()
        if not field or not mine.any():
            continue
        ids = [str(v).rpartition(":")[2] for v in add.loc[mine, FEATURE_ID]]
        numeric = field in frame.columns and pd.api.types.is_numeric_dtype(frame[field])
        if field not in add.columns:
            add[field] = None
        add.loc[mine, field] = [int(v) for v in ids] if numeric else ids


def _line_target(state: RepairState, role: str) -> str:
    """The mapper's own line layer a generated line of ``role`` is written to."""
    lines = state.project.layers.get("lines")
    if lines is None or not lines.parts:
        return "lines"
    fixed = [p.role for p in lines.parts if p.spec.get("kind") is not None and kind_role(str(p.spec["kind"])) == role]
    if fixed:
        return fixed[0]
    free = [p.role for p in lines.parts if p.spec.get("kind_field")]
    return free[0] if free else lines.parts[0].role


@repair("draw-missing-lines", order=80, default=True, layer="lines")
def draw_missing_lines(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Boundaries that no line draws given a line: a contact between units, the frame kind along the map edge.

    The stretches are those ``boundary-without-line`` reports (boundaries
    between polygons of different units, and the units' edge along the map
    edge, with no line within the tolerance), each drawn as a new line
    through the boundary's own vertices, joined to the lines drawn next to it
    (an extra vertex at most the tolerance away). A line between units gets
    the first contact kind of ``[checks] line_kinds``, one along the map edge
    the first map-boundary kind; its certainty is ``[repair]
    generated_certainty`` (default "inferred": nobody saw the contact, it was
    drawn from the polygons), written in the certainty field, or into the
    kind as "contact, inferred" when the lines have no certainty field; and
    the field ``generated`` is true on it (false on every other line). Never
    decides that a boundary is a fault rather than a contact: a mapper who
    knows it is changes the kind. Nor draws a boundary a line of its kind
    runs beside, off it (within :data:`BESIDE` tolerances: the line drawn a
    little off its boundary that ``line-off-boundary`` reports): that
    stretch is left and listed (:func:`drawn_beside`). Nor draws a line that
    would end free (:func:`ends_met`): a dangle the map did not have; that
    stretch is listed too.
    """
    if state.lines is None or state.units is None or not len(state.units):
        return [], []
    tol = float(settings.tolerance)
    project = working_project(state)
    net = line_network(state, project)
    units, edges, cov = unit_analyses(state, project, tol)
    if not len(units):
        return [], []
    drawn = net.edges_drawn(net.match(edges), len(edges))
    found = undrawn_boundaries(units, edges, cov.outline, drawn, net, tol)
    if found is None:
        return [], []
    edge = np.array([cov.extent_boundary], dtype=object) if cov.extent is not None else np.empty(0, dtype=object)
    found, beside = drawn_beside(found, net, units, edge, tol)
    left = _left_beside(state, units, net, beside, tol)
    contested = along_overlaps(found.pieces, [p.geom for p in cov.overlaps], tol)
    left += _left_along_overlaps(units, found, contested)
    if contested.any():
        found = found.take(~contested)
    if not len(found.pieces):
        return [], left
    inner = found.ub >= 0
    new = settled_lines(undrawn_lines(found.pieces, net.geoms, tol), inner, units.geoms, cov.extent_boundary, net, tol)
    keep, where_free = ends_met(new, net, edge, tol)
    left += _left_free(units, found, ~keep, where_free, tol)
    if not keep.all():
        found = found.take(keep)
        new, inner = new[keep], inner[keep]
    if not len(new):
        return [], left
    kinds = project.config.line_kinds
    kind = np.where(inner, kind_for(kinds, "contact", "contact"), kind_for(kinds, "boundary", "map-boundary")).astype(object)
    certainty = settings.generated_certainty
    known = {str(c).strip().lower() for c in project.config.certainties}
    frame = state.lines
    if GENERATED_FIELD not in frame.columns:
        frame[GENERATED_FIELD] = False
    rows: dict[str, Any] = {FEATURE_ID: [], SOURCE_LAYER: []}
    texts = kind.copy()
    if not state.certainty_field and certainty and certainty.strip().lower() in known:
        texts = np.array([f"{k}, {certainty}" if parse_kind(f"{k}, {certainty}", kinds, project.config.certainties) else k
                          for k in kind], dtype=object)
    changes: list[Change] = []
    for k in range(len(new)):
        role = "contact" if inner[k] else "boundary"
        src = _line_target(state, role)
        n = state.new_id("lines")
        fid = f"{src}:{n}" if state.project.layers.get("lines") is not None and state.project.layers["lines"].parts else n
        rows[FEATURE_ID].append(fid)
        rows[SOURCE_LAYER].append(src)
        u, v = int(found.ua[k]), int(found.ub[k])
        feats = (str(units.ids[u]),) + ((str(units.ids[v]),) if v >= 0 else ())
        codes = () if units.codes is None else (str(units.codes[u]),) + ((str(units.codes[v]),) if v >= 0 else ())
        where = f"between polygons {' and '.join(feats)}" if v >= 0 else f"along the map edge of polygon {feats[0]}"
        changes.append(Change("draw-missing-lines", src, (), (fid,), codes, 0.0, 0.0, None, new[k],
                              f"{texts[k]} drawn {where}, {float(shapely.length(new[k])):.3g} long, generated"))
    add = pd.DataFrame({FEATURE_ID: rows[FEATURE_ID], GENERATED_FIELD: True})
    if SOURCE_LAYER in frame.columns:
        add[SOURCE_LAYER] = rows[SOURCE_LAYER]
    if state.kind_field:
        add[state.kind_field] = texts
    if state.certainty_field:
        add[state.certainty_field] = certainty
    _fill_ids(state, frame, add)
    import geopandas as gpd

    add[frame.geometry.name] = new
    added = gpd.GeoDataFrame(add, geometry=frame.geometry.name, crs=frame.crs)
    state.lines = _append(frame, added)
    return changes, left


def along_overlaps(pieces: np.ndarray, overlaps: list[Any], tol: float) -> np.ndarray:
    """Per stretch of undrawn boundary: it lies within the tolerance of the overlaps still in the units (GEOS
    ``covered_by`` the overlaps buffered by the tolerance).

    Where two polygons overlap (an overlap left for the mapper: larger than a
    repair gives away), the boundary between them is the edge of one of them
    inside the other, and which edge is the contact is undecided until the
    mapper settles the overlap. A generated line along it would decide that,
    and lie off the boundaries of the copy wherever the other edge is the
    one kept (``line-off-boundary``: one such line on the topology benchmark's
    map of 10^5 polygons at 1 %).
    """
    out = np.zeros(len(pieces), dtype=bool)
    if not len(pieces) or not overlaps:
        return out
    zone = shapely.buffer(np.asarray(overlaps, dtype=object), tol * ABOVE)
    pi, oi = shapely.STRtree(zone).query(pieces, predicate="intersects")
    if not len(pi):
        return out
    near = np.unique(pi)
    # per stretch, the overlaps near it as one area (GEOS's union of each group, one call per table of groups)
    out[near] = shapely.covered_by(pieces[near], union_by_group(zone[oi], np.searchsorted(near, pi), len(near)))
    return out


def _stretch_name(units: Any, u: int, v: int) -> str:
    """How a left stretch of undrawn boundary is named: between polygons ``u`` and ``v``, or along the map edge (v -1)."""
    return (f"the boundary between polygons {units.ids[u]} and {units.ids[v]}" if v >= 0
            else f"the map edge along polygon {units.ids[u]}")


def _left_stretches(units: Any, found: Undrawn, rows: np.ndarray, why: list[str]) -> list[Left]:
    """One :class:`Left` of draw-missing-lines per stretch ``found.pieces[rows[i]]``, saying ``why[i]`` it is not drawn."""
    out = []
    for k, reason in zip(rows.tolist(), why):
        u, v = int(found.ua[k]), int(found.ub[k])
        length = float(shapely.length(found.pieces[k]))
        out.append(Left("draw-missing-lines", "units", tuple(str(units.ids[w]) for w in (u, v) if w >= 0),
                        f"no line draws {length:.3g} of {_stretch_name(units, u, v)}; {reason}", found.pieces[k], length))
    return out


def _left_along_overlaps(units: Any, found: Undrawn, contested: np.ndarray) -> list[Left]:
    """The stretches :func:`along_overlaps` finds along an overlap, left (:func:`_left_stretches`)."""
    rows = np.flatnonzero(contested)
    return _left_stretches(units, found, rows, ["it runs along an overlap of the polygons left for the mapper: which "
                                                "edge is the contact is decided with the overlap"] * len(rows))


def ends_met(new: np.ndarray, net: LineNetwork, edge: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Which of the generated lines ``new`` to draw: those whose two ends each meet a line, and where the others end
    free (an (n, 2) array of coordinates, NaN for the lines drawn).

    An end meets a line as ``line-dangle`` has it: another line of the
    network within the tolerance, the map edge ``edge`` within it, or the
    line's own other end (a closed line). A line drawn with an end that meets
    none would be a dangle the map did not have (a boundary stretch whose
    neighbouring contacts are drawn off it, around an overlap left for the
    mapper: 7 of 294 generated lines on the topology benchmark's map of 10^4
    polygons at 1 %), so it is not drawn; nor, in turn, is one whose end met
    only a line not drawn. Another generated line drawn counts as a line.
    """
    n = len(new)
    keep = np.ones(n, dtype=bool)
    free_at = np.full((n, 2), np.nan)
    if not n:
        return keep, free_at
    have = ~shapely.is_missing(new) & ~shapely.is_empty(new)
    keep &= have
    first, last = shapely.get_point(new, 0), shapely.get_point(new, -1)
    ends = np.r_[first, last]
    owner = np.r_[np.arange(n), np.arange(n)]
    met = np.zeros(2 * n, dtype=bool)
    ok = np.r_[have, have]
    closed = np.zeros(n, dtype=bool)
    closed[have] = shapely.equals_exact(first[have], last[have], tolerance=0.0)
    met |= np.r_[closed, closed]
    asked = np.flatnonzero(ok)
    if not len(asked):
        return keep, free_at
    if len(net.geoms):
        met[asked[dwithin_pairs(net.tree, net.geoms, ends[asked], tol)[0]]] = True
    if len(edge) and not shapely.is_empty(edge[0]):
        met[asked] |= within_of(edge[0], ends[asked], tol)
    # ends meeting another generated line (end a, line b): met while that line is drawn
    drawn = np.flatnonzero(have)
    a, b = dwithin_pairs(shapely.STRtree(new[drawn]), new[drawn], ends[asked], tol)
    a, b = asked[a], drawn[b]
    other = owner[a] != b
    a, b = a[other], b[other]
    while True:
        by_drawn = np.zeros(2 * n, dtype=bool)
        by_drawn[a[keep[b]]] = True
        free = ok & ~met & ~by_drawn & keep[owner]
        if not free.any():
            break
        at = owner[free]
        xy = shapely.get_coordinates(ends[free])
        order = np.argsort(at, kind="stable")  # per line, the first of its free ends
        firsts = np.r_[True, at[order][1:] != at[order][:-1]]
        free_at[at[order][firsts]] = xy[order][firsts]
        keep[at] = False
    return keep, free_at


def _left_free(units: Any, found: Undrawn, gone: np.ndarray, where: np.ndarray, tol: float) -> list[Left]:
    """The stretches of boundary :func:`ends_met` does not draw (``gone``), left with where their lines would end free
    (``where``) (:func:`_left_stretches`)."""
    rows = np.flatnonzero(gone)
    at = [f" at ({x:.2f}, {y:.2f})" if np.isfinite(x) else "" for x, y in where[rows].tolist()]
    return _left_stretches(units, found, rows, [
        f"a line drawn along it would end free{a}, with no other line or the map edge within the tolerance {tol:g} "
        "(a dangle the map did not have): how the linework meets it there is for the mapper" for a in at])


# how far from a line drawn off its boundary a stretch of that boundary counts as drawn, off, by it (in tolerances):
# our own choice, 1 mm on the map at the default tolerance of 0.1 mm (archivist.manifest), where a line is plainly
# the drawing of the boundary beside it
BESIDE = 10.0


@dataclass(frozen=True)
class Beside:
    """Stretches of undrawn boundary a line of their kind runs beside, off them: ``stretches[k]`` of the
    boundary between ``ua[k]`` and ``ub[k]`` (-1: the map edge), the lines (network features) ``lines[k]``, and
    the length of the stretch within reach of them, ``along[k]``."""

    stretches: np.ndarray
    ua: np.ndarray
    ub: np.ndarray
    lines: tuple[np.ndarray, ...]
    along: np.ndarray


def drawn_beside(found: Undrawn, net: LineNetwork, units: Any, edge: np.ndarray, tol: float) -> tuple[Undrawn, Beside]:
    """The undrawn boundary less what a line of its kind drawn off it runs beside, and that.

    A contact drawn a little off the boundary it draws leaves that boundary
    with no line within the tolerance: ``boundary-without-line`` reports the
    boundary and ``line-off-boundary`` the contact. A line drawn there
    would draw the boundary twice, the mapper's contact and a generated one
    beside it, and decide that the polygon is right and the line wrong,
    which only the mapper can. So the stretch of undrawn boundary within
    :data:`BESIDE` tolerances of what a line lies farther than the tolerance
    from every unit boundary and from the map edge ``edge`` (for longer than
    the tolerance), running along it for more than that distance, is not
    drawn (a line crossing the stretch or ending near it is not beside it):
    a stretch between units beside a contact,
    one along the map edge beside a map-boundary line (a line lying on
    another boundary draws that one). The whole stretch is left, not the
    rest of it drawn: a line drawn around the part beside would end free
    where the line beside it takes over, a dangle the map did not have; for
    the same reason so is a stretch that meets a stretch left where no line
    is drawn (:func:`_meeting_left`).
    """
    none = Beside(np.empty(0, dtype=object), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), (), np.zeros(0))
    pieces = np.asarray(found.pieces, dtype=object)
    reach = BESIDE * tol
    if not len(pieces) or not len(net.geoms) or tol <= 0:
        return found, none
    pi, li = net.tree.query(pieces, predicate="dwithin", distance=reach)
    keep = net.roles[li] == np.where(found.ub[pi] >= 0, "contact", "boundary")
    pi, li = pi[keep], li[keep]
    if not len(pi):
        return found, none
    cand, back = np.unique(li, return_inverse=True)
    # what lies off every unit boundary (and off the map edge): a line on some other boundary draws that one
    off = off_unit_boundaries(net.geoms[cand], units, tol)
    if len(edge):
        off = uncovered(off, edge, tol)
    parts, k = linear_parts(off, tol * ABOVE)
    offs = merge_by_group(parts, k, len(cand))
    ok = present(offs)[back]
    pi, lj = pi[ok], back[ok]
    if len(pi):
        # beside, not across: the line's part within reach of the piece spans more than the reach along it (a line
        # crossing the piece, or ending near it, spans little: all of it lies about one place of the piece)
        xy, j = shapely.get_coordinates(near_parts(offs[lj], pieces[pi], reach), return_index=True)
        at = shapely.line_locate_point(pieces[pi[j]], shapely.points(xy))
        lo, hi = np.full(len(pi), np.inf), np.full(len(pi), -np.inf)
        np.minimum.at(lo, j, at)
        np.maximum.at(hi, j, at)
        along = hi - lo > reach
        pi, lj = pi[along], lj[along]
    if not len(pi):
        return found, none
    order = np.argsort(pi, kind="stable")
    pi, lj = pi[order], lj[order]
    near = np.unique(pi)
    each, j = shapely.get_parts(offs[lj], return_index=True)
    refs = merge_by_group(each, np.searchsorted(near, pi)[j], len(near))  # the lines off beside each piece, as one
    along = shapely.length(near_parts(pieces[near], refs, reach))
    long = along > tol * ABOVE
    near, along = near[long], along[long]
    lo, hi = np.searchsorted(pi, near, "left"), np.searchsorted(pi, near, "right")
    lines = tuple(np.unique(cand[lj[a:b]]) for a, b in zip(lo.tolist(), hi.tolist()))
    drawn = np.ones(len(pieces), dtype=bool)
    drawn[near] = False
    after = _meeting_left(pieces, drawn, net, tol)
    cascade = np.flatnonzero(drawn & ~after)
    drawn = after
    out = found.take(drawn)
    left = np.r_[near, cascade]
    return out, Beside(pieces[left], found.ua[left], found.ub[left], lines + tuple(np.zeros(0, dtype=np.int64) for _ in cascade),
                       np.r_[along, np.zeros(len(cascade))])


def _meeting_left(pieces: np.ndarray, drawn: np.ndarray, net: LineNetwork, tol: float) -> np.ndarray:
    """``drawn`` less every piece that would end free where a piece not drawn ends, in turn until none does.

    Pieces of undrawn boundary meet end to end where no line is drawn (an
    end within the tolerance of a drawn line is joined to it by
    :func:`undrawn_lines`). A piece drawn up to one left undrawn would end
    free there, a dangle the map did not have; so it is left too, and so on
    along the boundaries it meets.
    """
    drawn = drawn.copy()
    if drawn.all() or not drawn.any():
        return drawn
    near = ABOVE * tol
    ends = np.r_[shapely.get_point(pieces, 0), shapely.get_point(pieces, -1)]
    owner = np.r_[np.arange(len(pieces)), np.arange(len(pieces))]
    free = np.ones(len(ends), dtype=bool)
    if len(net.geoms):
        free[np.unique(net.tree.query(ends, predicate="dwithin", distance=near)[0])] = False
    a, b = shapely.STRtree(ends).query(ends, predicate="dwithin", distance=near)
    keep = free[a] & free[b] & (owner[a] != owner[b])  # two pieces meeting where no line is drawn
    a, b = owner[a[keep]], owner[b[keep]]
    while True:
        meets = np.unique(a[drawn[a] & ~drawn[b]])
        if not len(meets):
            return drawn
        drawn[meets] = False


def _left_beside(state: RepairState, units: Any, net: LineNetwork, beside: Beside, tol: float) -> list[Left]:
    """One :class:`Left` per stretch of boundary :func:`drawn_beside` leaves undrawn, naming the lines beside it."""
    layers = _source_layers(state)
    out = []
    for stretch, u, v, lines, along in zip(beside.stretches, beside.ua.tolist(), beside.ub.tolist(), beside.lines,
                                           beside.along.tolist()):
        where = _stretch_name(units, u, v)
        length = float(shapely.length(stretch))
        if not len(lines):  # it meets one left for the mapper where no line is drawn
            out.append(Left("draw-missing-lines", "units", tuple(str(units.ids[w]) for w in (u, v) if w >= 0),
                            f"no line draws {length:.3g} of {where}; it meets a stretch of boundary left for the mapper "
                            "where no line is drawn, and a generated line would end free there", stretch, length))
            continue
        names = " and ".join(net.label(int(f)) for f in lines)
        out.append(Left("draw-missing-lines", str(layers[int(net.rows[int(lines[0])])]), tuple(str(net.ids[int(f)]) for f in lines),
                        f"no line draws {length:.3g} of {where}, but {names} runs beside {along:.3g} of it within "
                        f"{BESIDE * tol:g}, farther than the tolerance {tol:g}: a generated line would draw it twice; "
                        "which of the line and the polygons is right is for the mapper (line-off-boundary)", stretch, length))
    return out


def _append(frame: gpd.GeoDataFrame, added: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """``frame`` with the rows of ``added`` after its own (new index values past the largest)."""
    import geopandas as gpd

    start = int(pd.to_numeric(pd.Series(frame.index), errors="coerce").max()) + 1 if len(frame) else 0
    added.index = pd.RangeIndex(start, start + len(added), name=frame.index.name)
    out = pd.concat([frame, added], axis=0)
    return gpd.GeoDataFrame(out, geometry=frame.geometry.name, crs=frame.crs)
