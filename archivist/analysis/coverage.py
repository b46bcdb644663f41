"""The coverage analysis: gaps, overlaps, misfits and the map extent of the unit polygons.

How it scales
-------------
Only the polygons carrying a trace in the half-edge table (a half-edge
without its twin; on a clean map, those along the map edge) and their
neighbours go on to GEOS's own coverage validation
(``shapely.coverage_invalid_edges`` with ``gap_width`` the tolerance, so that
edges along a gap no wider than the tolerance are flagged whatever closes the
gap: units, the map extent or nothing). When GEOS finds nothing there and no
segment is drawn twice on one side, no two polygons can overlap; otherwise
every pair of intersecting polygons in that region with one of them
implicated (an edge GEOS finds invalid, a segment drawn by three polygons or
twice on one side, or left unchecked) whose interiors meet is intersected
exactly (GEOS alone can miss a polygon whose edge inside another one is
matched exactly by a third, but not the other one, whose edge inside it is
not matched). Gaps are found without joining the map:
the faces enclosed by the untwinned edges and the extent's edge that lie
under no polygon say where they are (:func:`gap_faces`), and each is then
measured from the polygons within a small margin of it, joined in index
order (:func:`local_gaps`), so a gap's result depends on its own
neighbourhood only. The unit area outside a declared extent is cut from each
polygon not within it. Only a map without an extent layer still joins its
units (its extent is their outline): on a valid coverage the union is read
off the table (the faces enclosed by the edges drawn once, covered when the
units lie on their left); otherwise it is GEOS's coverage union of the
polygons with no defect plus a plain union of the rest.

Pieces narrower on average than the noise floor (:func:`noise_floor`, 16
roundings of a double at the map's largest coordinate) are rounding left by
GEOS's overlay, not defects, and are not reported.

A region covered twice or not at all is bounded by half-edges without a twin:
crossing a twinned edge leaves one polygon and enters another, so the number of
polygons over a point only changes across untwinned edges. Every overlap, gap
or misfit therefore touches a polygon the table flags, which is why the
narrowing-down loses nothing.

When GEOS stops
---------------
A GEOS failure on some polygons (see :mod:`.guard`) is recorded as a
:class:`~.guard.Failure` naming them, and the analysis goes on with the rest
of the map; the rules report each failure on the polygons concerned.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely
from shapely.errors import GEOSException

from .arrays import (
    canonical,
    coord_hash,
    group_tables,
    linear_parts,
    polygonal_parts,
    present,
    segment_lines,
    segments,
    union_by_group,
    widths,
)
from .guard import Failure, by_cluster, clusters, elementwise, reason_of
from .halfedges import Edges
from .messages import ABOVE
from .nearness import length_near, prepared_copy
from .polygons import Units, polygonal

if TYPE_CHECKING:
    from ..project import MapProject

OVERLAPS, MISFITS, GAPS, OUTSIDE = "overlaps", "misfits", "gaps", "outside"


@dataclass(frozen=True)
class Piece:
    """A gap, an overlap or an outside part: where, how big, which polygons."""

    geom: Any
    area: float
    width: float
    units: tuple[int, ...]
    at_extent: bool = False
    on_frame: bool = False  # a thin gap lying within the tolerance of the extent edge, along no edge GEOS flags


@dataclass(frozen=True)
class Coverage:
    """What the coverage analysis found, for the topology and linework rules.

    ``overlaps``, ``gaps`` and ``outside`` are every piece found, of any width
    (the rules decide what the tolerance lets pass); ``collinear`` are pairs
    of polygons whose edges run together exactly but with different vertices;
    ``outline`` marks the edges of the half-edge table drawn once and lying on
    the map's outer edge; ``failures`` are the parts GEOS could not process.
    ``union`` is the union of the units when the map extent had to be read
    off it (no extent layer), else None: gaps and outside parts are found
    without joining the map (see :func:`gap_faces`), and :meth:`covers`
    answers what the union was asked. ``unvouched``: in a spatial partition
    of the map, a gap near the partition's core may run on past its region;
    reading ``gaps`` then raises :class:`CannotVouch` (the overlaps, the
    unit area outside the extent and the outline do not depend on the gaps).
    """

    tol: float
    extent: Any  # polygonal, or None when there is neither an extent layer nor a unit
    extent_declared: bool
    extent_note: str
    union: Any
    implicated: np.ndarray
    overlaps: tuple[Piece, ...]
    gap_pieces: tuple[Piece, ...]  # read through ``gaps``
    outside: tuple[Piece, ...]
    collinear: tuple[tuple[tuple[int, int], Any, float], ...]
    outline: np.ndarray
    failures: tuple[Failure, ...] = ()
    unvouched: bool = False  # a partition's gap near its core runs past its region (see analyse_coverage)
    floor: float = 0.0  # the noise floor of the whole map (noise_floor of its scale; in a partition, the whole map's)

    @property
    def gaps(self) -> tuple[Piece, ...]:
        """Every gap found; :class:`CannotVouch` in a spatial partition that cannot vouch for them (``unvouched``)."""
        if self.unvouched:
            raise CannotVouch("a gap near this partition's core runs past its region")
        return self.gap_pieces

    @property
    def extent_boundary(self) -> Any:
        return shapely.boundary(self.extent) if self.extent is not None else None

    def covers(self, lines: np.ndarray) -> np.ndarray:
        """For each line, whether the unit polygons cover it whole.

        From the union where one was made (no extent layer); else from what
        the analysis found, without joining the map: the units cover the
        extent less its gaps, and their own parts outside it. A line crossing
        a piece below the noise floor counts as covered.
        """
        if not len(lines) or self.extent is None:
            return np.zeros(len(lines), dtype=bool)
        if self.union is not None:
            return np.asarray(shapely.covers(prepared_copy(self.union), lines), dtype=bool)
        extent = prepared_copy(self.extent)
        # asked of the prepared geometry (GEOS uses its index only as the first operand): the extent's edge may
        # have thousands of vertices, measured against every line otherwise
        ok = np.asarray(shapely.covers(extent, lines), dtype=bool)
        out = np.flatnonzero(~ok)
        if len(out) and self.outside:
            beyond = shapely.difference(lines[out], extent)
            ok[out] = shapely.covers(prepared_copy(shapely.union_all([p.geom for p in self.outside])), beyond)
        if self.gaps:
            li, gi = shapely.STRtree([p.geom for p in self.gaps]).query(lines, predicate="intersects")
            gaps = np.array([p.geom for p in self.gaps], dtype=object)
            through = shapely.relate_pattern(lines[li], gaps[gi], "T********")
            ok[li[through]] = False
        return ok

    def failures_of(self, aspect: str) -> tuple[Failure, ...]:
        """The failures that leave ``aspect`` (overlaps, misfits, gaps, outside) incomplete."""
        return tuple(f for f in self.failures if aspect in f.aspects)


def extent_of(project: MapProject, union: Any, tol: float = 0.0) -> tuple[Any, bool]:
    """The map extent: the extent layer when it has area, else the outer boundary of the units.

    The outer boundary of the units encloses every hole they close, and every
    bay or strip open to the outside no wider than ``tol`` (a closing with
    mitred offsets of half the tolerance, exact along straight edges): two
    units a hair apart along their whole contact are a misfit, not two maps.
    """
    layer = project.layers.get("extent")
    if layer is not None:
        geoms = polygonal(layer.geometry, layer.valid)
        geoms = geoms[~shapely.is_missing(geoms) & ~layer.far[0]]
        if len(geoms):
            return shapely.union_all(geoms), True
    if union is None or shapely.is_empty(union):
        return None, False
    # everything the units' boundaries enclose, including holes closed by
    # polygons that only touch at points
    rings = shapely.union_all(shapely.boundary(shapely.get_parts(union)))
    faces = shapely.get_parts(shapely.polygonize(shapely.get_parts(rings)))
    enclosed = shapely.union_all(np.concatenate([faces, [union]]))
    if tol > 0:
        r = tol * ABOVE / 2.0
        closed = shapely.buffer(shapely.buffer(enclosed, r, join_style="mitre"), -r, join_style="mitre")
        # the offsets leave rounding noise (1e-17 m) beside the outline: vertices go back onto the units'
        closed = shapely.snap(closed, enclosed, 1e-9 * _scale_of(enclosed))
        if shapely.area(shapely.difference(closed, enclosed)) > 0:  # else keep the outline as drawn
            enclosed = shapely.union(enclosed, closed)
    return enclosed, False


def extent_is_declared(project: MapProject) -> bool:
    """Whether the map extent is an extent layer's polygons (else the outline of the units, a whole-map thing).

    The coverage rules run on spatial partitions of such a map only
    (:mod:`archivist.parallel`): a partition's units do not give the outline
    of the whole map's units.
    """
    if "extent" not in project.layers:
        return False
    try:
        return bool(extent_of(project, None)[1])
    except GEOSException:
        return False


def map_scale(project: MapProject) -> float:
    """The largest absolute coordinate of the unit polygons and the extent layer (at least 1): the scale of
    the noise floor (:func:`noise_floor`).

    The whole map's, whatever part of it an analysis sees: a partition of the
    map is given its whole map's scale (:class:`PartOfMap`), so that its
    thresholds are those of a check of the whole map. Features far outside
    any map (left to ``coordinates-implausible``) do not count.
    """
    scale = 1.0
    for role in ("units", "extent"):
        layer = project.layers.get(role)
        if layer is None or not len(layer.frame):
            continue
        far, largest = layer.far  # each geometry's largest |x|, |y|: the largest of its bounds, exactly
        keep = present(layer.geometry) & ~far
        if keep.any():
            scale = max(scale, float(largest[keep].max()))
    return scale


@dataclass(frozen=True)
class PartOfMap:
    """What an analysis of one spatial partition of the map needs to know of it (:mod:`archivist.parallel`).

    ``region``: the partition's marked cells as one polygon (every unit of
    the map over it is in the partition); ``edge``: the region's boundary
    less what lies on the outer edge of the partitions' grid (beyond which
    the map holds nothing): where a gap may go on beyond what the partition
    sees; ``core``: the cells it owns, grown by the rules' reach; ``scale``:
    the whole map's :func:`map_scale`.
    """

    region: Any
    edge: Any
    core: Any
    scale: float


class CannotVouch(Exception):
    """A partition cannot give the whole map's gaps near its core: a gap there runs past its region.

    Raised by :attr:`Coverage.gaps` in a partition; the partition reports
    the rule that read them as failed, and the merge runs that rule on the
    whole map (:func:`archivist.parallel.merge`).
    """


def extent_note(project: MapProject, declared: bool) -> str:
    """The report note saying what the map extent is."""
    if declared:
        return f"Map extent: the extent layer ({project.layers['extent'].source})."
    if "extent" in project.layers:
        return "Map extent: the extent layer has no polygon, so the outer boundary of the unit polygons was used; gaps open to the map edge are found only where no wider than the tolerance."
    return "Map extent: no extent layer, so the outer boundary of the unit polygons was used; gaps open to the map edge are found only where no wider than the tolerance."


def union_from_edges(edges: Edges, geoms: np.ndarray) -> Any:
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


# The noise floor of overlay rounding. GEOS computes each vertex it makes (a crossing of two
# segments, a point of a buffer's offset) in double precision and rounds it to the nearest
# double: at most half a unit in the last place per coordinate, so within eps * M of the exact
# point, eps = 2**-52 (IEEE 754 binary64 machine epsilon) and M the largest absolute coordinate.
# Two roundings of one line (one in each polygon an overlay compares) leave a strip between them
# at most 2 * eps * M wide. NOISE_ULPS = 16 allows for the vertices that went through a few
# operations before the check saw them (a buffer, a reprojection, a snap: each rounds again),
# eight roundings a side; our own choice on that reasoning, not a published figure. Measured on
# the synthetic 10^5-polygon maps (M = 6.5e6 m): the overlay leftovers between buffered polygons
# are 0.01-0.02 eps * M wide on average, a real gap of 1 cm is 7e6 eps * M.
NOISE_ULPS = 16


def noise_floor(scale: float) -> float:
    """The width below which a gap, overlap or outside piece is overlay rounding, at coordinates up to ``scale``."""
    return NOISE_ULPS * float(np.finfo(float).eps) * max(scale, 1.0)


def mean_width(pieces: np.ndarray) -> np.ndarray:
    """Twice the area over the perimeter of each polygon: the width of a strip, half the widest of a wedge.

    Never more than the largest width of the polygon (up to the ends of a
    strip), so a piece narrower than the noise floor everywhere always has a
    mean width below it.
    """
    if not len(pieces):
        return np.zeros(0)
    perimeter = shapely.length(pieces)
    return np.where(perimeter > 0, 2.0 * shapely.area(pieces) / np.where(perimeter > 0, perimeter, 1.0), 0.0)


def gap_faces(edges: Edges, extent: Any, tree: shapely.STRtree) -> tuple[np.ndarray, np.ndarray]:
    """Where the gaps are: (faces, a point inside each), found from the half-edge table alone.

    The edge of a gap is made of stretches of polygon edges without their twin
    and of the extent's edge (along a twinned edge the neighbour covers the
    other side). So the faces that the untwinned edges and the extent's edge
    enclose, once noded, include every gap; a face is a gap when a point
    inside it lies in the extent and in no polygon (the number of polygons
    over a point changes only across untwinned edges, so one point tells for
    the whole face). No polygon is joined to another here: the faces only say
    where to look, :func:`local_gaps` measures each gap.
    """
    lines = edges.lines(np.flatnonzero(~edges.twin))
    ring = shapely.get_parts(shapely.boundary(extent)) if extent is not None else np.empty(0, dtype=object)
    if not len(lines) and not len(ring):
        return np.empty(0, dtype=object), np.empty(0, dtype=object)
    faces, points = _faces_by_cluster(lines, ring)
    covered = np.zeros(len(faces), dtype=bool)
    covered[tree.query(points, predicate="intersects")[0]] = True
    inside = ~covered
    if extent is not None:
        inside &= shapely.intersects(prepared_copy(extent), points)
    else:
        inside[:] = False
    return faces[inside], points[inside]


def _faces_by_cluster(lines: np.ndarray, ring: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The faces the ``lines`` and the extent's edge (``ring``, its parts) enclose once noded, and a point inside each.

    What GEOS's union (which nodes them) and polygonize of them all give, a
    cluster at a time: lines whose boxes do not meet never cross, so the
    lines are cut into clusters of meeting boxes (the edge's parts together,
    with the lines they meet), each noded and polygonized on its own, the clusters
    in tables (:func:`~.arrays.group_tables`). Both GEOS calls grew faster
    than the map over all of them at once: 193 197 edges at 10^5 polygons and
    5 % defects, 2.4 s, 25 times the 19 616 at 10^4 (a face holding every
    cluster as a hole, 12 555 of them). A face of one cluster does not have
    the clusters inside it as holes; its point is GEOS's point on its surface
    unless that lies on a cluster inside it (in a face of it, or on a line),
    and then the point on the face less the faces inside it, as one
    polygonize of all would have it. The faces come in the order of their
    boxes.
    """
    n = len(lines)
    every = np.concatenate([lines, ring])
    # the parts of the extent's edge are one cluster (a hole of the extent may touch its shell at a point)
    a, b = np.full(len(ring), n, dtype=np.int64), n + np.arange(len(ring))
    if n:
        index = shapely.STRtree(lines)
        la, lb = index.query(lines)  # boxes that meet (the edge's parts span the map: they meet exactly, below)
        a, b = np.r_[a, la], np.r_[b, lb]
        if len(ring):
            ri, li = index.query(ring, predicate="intersects")
            a, b = np.r_[a, n + ri], np.r_[b, li]
    label = np.unique(clusters(len(every), a, b), return_inverse=True)[1].ravel()
    k = int(label.max()) + 1
    noded = union_by_group(every, label, k)  # every crossing becomes a node, drawn-twice stretches one
    pieces, of = shapely.get_parts(noded, return_index=True)
    found = np.empty(k, dtype=object)
    for rows, table in group_tables(pieces, of, k):
        found[rows] = shapely.polygonize(table, axis=1)
    faces, cluster = shapely.get_parts(found, return_index=True)
    if not len(faces):
        return faces, np.empty(0, dtype=object)
    points = shapely.point_on_surface(faces)
    # a face of one cluster holding another: its point must not lie on that one (in a face of it, or on a line)
    first = np.unique(label, return_index=True)[1]
    by_face = shapely.STRtree(faces)
    ci, fi = by_face.query(shapely.get_point(every[first], 0), predicate="within")
    hosts = np.unique(fi[cluster[fi] != ci])
    if len(hosts):
        pf, hit = by_face.query(points[hosts], predicate="intersects")
        on = np.zeros(len(hosts), dtype=bool)
        on[pf[hit != hosts[pf]]] = True
        if n:
            on[np.unique(index.query(points[hosts], predicate="intersects")[0])] = True
        bad = hosts[on]
        if len(bad):  # the point from the face less the faces inside it, as one polygonize of all would give it
            bi, fj = by_face.query(faces[bad], predicate="contains_properly")
            joined = union_by_group(faces[fj], bi, len(bad))
            points[bad] = shapely.point_on_surface(shapely.difference(faces[bad], joined))
    order = np.lexsort(shapely.bounds(faces).T[::-1])  # by their boxes: the same order however the lines came
    return faces[order], points[order]


def local_gaps(faces: np.ndarray, points: np.ndarray, extent: Any, geoms: np.ndarray, tree: shapely.STRtree,
               margin: float) -> tuple[np.ndarray, np.ndarray, list[tuple[np.ndarray, str]]]:
    """Each gap measured from the polygons around it only: (gaps, face of each, failures).

    For every face of :func:`gap_faces`, the window is the face grown by
    ``margin``; the polygons meeting the window are joined in index order and
    taken out of the window (within the extent), and the gap is the part left
    that holds the face's point. The result depends only on the polygons
    within ``margin`` of the gap, never on the rest of the map, so it is the
    same whatever else the map holds and wherever the map is cut. A failure
    is (the polygons of the window, GEOS's message).
    """
    n = len(faces)
    if not n:
        return np.empty(0, dtype=object), np.zeros(0, dtype=np.int64), []
    windows = shapely.buffer(faces, margin, quad_segs=2, join_style="mitre")
    wi, ui = tree.query(windows, predicate="intersects")
    order = np.lexsort((ui, wi))
    wi, ui = wi[order], ui[order]
    lost: list[tuple[np.ndarray, str]] = []
    cover = np.full(n, None, dtype=object)
    failed = np.zeros(n, dtype=bool)
    cuts = np.searchsorted(wi, np.arange(n + 1))
    if len(wi):
        # the polygons of each window joined, a table of windows at a time
        for rows, table in group_tables(geoms[ui], wi, n):
            cover[rows], failed[rows], reasons = elementwise(lambda t: shapely.union_all(t, axis=1), table)
            lost += [(ui[cuts[f]:cuts[f + 1]], why) for f, why in zip(rows[failed[rows]], reasons)]
    area = windows
    if extent is not None:
        # a window inside the extent is its own part of it; the others are cut (GEOS overlay, whose cost grows
        # with the extent's vertices: asked of every window, it grew faster than the map)
        cut = ~shapely.contains_properly(prepared_copy(extent), windows)
        area = windows.copy()
        area[cut] = shapely.intersection(windows[cut], extent)
    left, bad, reasons = elementwise(shapely.difference, area, cover)
    lost += [(ui[cuts[f]:cuts[f + 1]], why) for f, why in zip(np.flatnonzero(bad & ~failed), reasons)]
    left[bad | failed] = None
    parts, k = polygonal_parts(left)
    hold = shapely.intersects(parts, points[k])
    parts, k = parts[hold], k[hold]
    # a gap split into two faces by a degenerate edge inside it is one gap, kept once
    if len(parts):
        pi, fj = shapely.STRtree(points).query(parts, predicate="intersects")
        dup = np.zeros(len(parts), dtype=bool)
        dup[pi[fj < k[pi]]] = True
        parts, k = parts[~dup], k[~dup]
    return parts, k, lost


def _run_along(gaps: np.ndarray, polys: np.ndarray, floor: float) -> np.ndarray:
    """For each pair, how long the gap's edge runs within ``floor`` of the polygon's edge.

    A segment of the gap's rings counts whole when its ends and middle are
    all within ``floor`` of the polygon's boundary (the gap's segments are
    cut where the edges beside it change). Distances, not a buffer: GEOS
    cannot buffer by a few units in the last place of the coordinates.
    """
    n = len(gaps)
    if not n:
        return np.zeros(0)
    rings, pair = shapely.get_rings(gaps, return_index=True)
    a, b, r = segments(rings)
    k = pair[r]
    edge = shapely.boundary(polys)
    near = np.ones(len(k), dtype=bool)
    for t in (0.0, 0.5, 1.0):
        at = np.flatnonzero(near)  # a segment far at one point is not asked again
        near[at] = shapely.distance(shapely.points(a[at] + t * (b[at] - a[at])), edge[k[at]]) <= floor
    return np.bincount(k[near], weights=np.hypot(*(b - a)[near].T), minlength=n)


def outside_parts(extent: Any, geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:
    """The parts of each polygon outside ``extent``: (parts, polygon of each, polygons GEOS failed on, messages).

    Only the polygons not within the extent are cut, each on its own.
    """
    poking = np.flatnonzero(~shapely.covers(prepared_copy(extent), geoms))
    if not len(poking):
        return np.empty(0, dtype=object), np.zeros(0, dtype=np.int64), poking, []
    out, failed, reasons = elementwise(shapely.difference, geoms[poking], np.full(len(poking), extent, dtype=object))
    parts, k = polygonal_parts(_blank(out, failed))
    return parts, poking[k], poking[failed], reasons


def _scale_of(geom: Any) -> float:
    x0, y0, x1, y1 = shapely.bounds(geom)
    return max(abs(x0), abs(y0), abs(x1), abs(y1), 1.0)


def _pair_failures(a: np.ndarray, b: np.ndarray, failed: np.ndarray, reasons: list[str], doing: str,
                   aspects: frozenset[str]) -> list[Failure]:
    """One failure per pair of polygons GEOS could not process."""
    return [
        Failure((int(p), int(q)), doing, aspects, why)
        for p, q, why in zip(a[failed], b[failed], reasons)
    ]


def outline_of(edges: Edges, extent: Any, tol: float) -> np.ndarray:
    """A mask over the edges: drawn once and lying (within ``tol``) on the boundary of ``extent``."""
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
    return outline


def _blank(values: np.ndarray, failed: np.ndarray) -> np.ndarray:
    """The geometries with None where GEOS failed."""
    out = np.array(values, dtype=object, copy=True)
    out[failed] = None
    return out


def _collinear(tree: shapely.STRtree, geoms: np.ndarray, implicated: np.ndarray, invalid: dict[int, Any],
               pair_pieces: dict[tuple[int, int], list[Any]], unexplained: set[tuple[int, ...]],
               pairs: tuple[np.ndarray, np.ndarray] | None = None,
               ) -> tuple[list[tuple[tuple[int, int], Any, float]], list[Failure]]:
    """Edges of two polygons GEOS found invalid that run together, less what an overlap of the pair explains.

    For every pair of intersecting implicated polygons (one per defect): the
    common part of their invalid edges, merged, minus their overlap pieces;
    all pairs at once. A pair GEOS cannot process is one failure. ``pairs``:
    the intersecting pairs (polygon, other) of the implicated polygons as
    ``tree.query`` gives them, when already asked.
    """
    if pairs is None:
        a, b = tree.query(geoms[implicated], predicate="intersects")
        a = implicated[a]
    else:
        a, b = pairs
    keep = (a < b) & np.isin(b, implicated)
    a, b = a[keep], b[keep]
    if unexplained:
        known = np.array([(int(p), int(q)) not in unexplained for p, q in zip(a.tolist(), b.tolist())], dtype=bool)
        a, b = a[known], b[known]
    doing, aspects = "comparing their common edge", frozenset((MISFITS,))
    lost = np.zeros(len(a), dtype=bool)
    reason: dict[int, str] = {}

    def mark(rows: np.ndarray, failed: np.ndarray, reasons: list[str]) -> None:
        for r, why in zip(rows[failed].tolist(), reasons):
            lost[r] = True
            reason.setdefault(r, why)

    inv_a = np.array([invalid[int(u)] for u in a], dtype=object)
    inv_b = np.array([invalid[int(u)] for u in b], dtype=object)
    rows = np.arange(len(a))
    common, failed, reasons = elementwise(shapely.intersection, inv_a, inv_b)
    mark(rows, failed, reasons)
    lines, k = linear_parts(_blank(common, failed))
    merged = np.full(len(a), None, dtype=object)
    if len(lines):
        shapely.multilinestrings(lines, indices=k, out=merged)
        have = np.flatnonzero(~shapely.is_missing(merged))
        out, failed, reasons = elementwise(shapely.line_merge, merged[have])
        mark(have, failed, reasons)
        merged[have] = _blank(out, failed)
    # less the overlap pieces of the same pair
    pieces = [(r, piece) for r, (p, q) in enumerate(zip(a.tolist(), b.tolist())) if not shapely.is_missing(merged[r])
              for piece in pair_pieces.get((p, q), ())]
    if pieces:
        r_of = np.array([r for r, _ in pieces], dtype=np.int64)
        width = int(np.bincount(r_of).max())
        table = np.full((len(a), width), None, dtype=object)
        rank = np.arange(len(r_of)) - np.searchsorted(r_of, r_of)
        table[r_of, rank] = [piece for _, piece in pieces]
        ex = np.unique(r_of)
        union, failed, reasons = elementwise(lambda t: shapely.union_all(t, axis=1), table[ex])
        mark(ex, failed, reasons)
        ok = ex[~failed]
        out, failed, reasons = elementwise(shapely.difference, merged[ok], union[~failed])
        mark(ok, failed, reasons)
        merged[ok] = _blank(out, failed)
    length = shapely.length(merged)
    found = [((int(p), int(q)), g, float(n)) for p, q, g, n, x in zip(a, b, merged, length, lost) if not x and n > 0]
    failures = [Failure((int(a[r]), int(b[r])), doing, aspects, reason[r]) for r in sorted(reason)]
    return found, failures


def overlap_candidates(pairs: tuple[np.ndarray, np.ndarray], region: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (a < b, ordered by a then b) of intersecting polygons of ``region``, one of them implicated, from
    ``pairs`` (polygon, other): the intersecting pairs of the implicated polygons of the region; ``n`` polygons.

    Two polygons whose interiors meet bound their overlap with stretches of
    edge lying inside the other one. A stretch matched exactly by a third
    polygon's edge passes GEOS's validation, so the pair is asked of every
    polygon that GEOS, the half-edge table or a failure implicates, not only
    of pairs of implicated polygons: where one of the two has every such
    stretch matched, the other one's stretches inside it are not.
    """
    one, other = pairs
    a, b = np.minimum(one, other), np.maximum(one, other)
    keep = (a < b) & np.isin(other, region)
    key = np.unique(a[keep].astype(np.int64) * n + b[keep])
    return key // n, key % n


def analyse_coverage(project: MapProject, units: Units, edges: Edges, tol: float, within: PartOfMap | None = None) -> Coverage:
    """Overlaps, gaps, outside parts and misaligned edges of the unit polygons, and the map extent.

    ``within``: the project is one spatial partition of the map
    (:mod:`archivist.parallel`). The extent is the whole map's; with a
    declared extent, gaps are traced within the extent and the partition's
    region only (beyond it the units not in the partition would leave one
    vast false gap) and measured against the whole extent. A gap whose face
    reaches the region's edge (the gap may go on beyond it) is measured as
    far as the partition sees; when it also reaches the core, the coverage
    says the partition cannot vouch for its gaps (``unvouched``).
    """
    geoms = units.geoms
    tree = units.tree
    failures: list[Failure] = []
    # pieces narrower than this are rounding left by GEOS's overlay, not defects (the whole map's, in a partition)
    floor = noise_floor(within.scale if within is not None else map_scale(project))
    # 1. polygons that may be part of a defect: those with an untwinned half-edge and their neighbours
    suspects = region = edges.suspects
    near = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))
    if len(region):
        sa, nb = tree.query(geoms[region], predicate="intersects")
        near = (suspects[sa], nb)
        region = np.union1d(region, nb)
    # 2. GEOS's own validation, on that region only (cluster by cluster if GEOS stops)
    implicated = np.zeros(0, dtype=np.int64)
    invalid: dict[int, Any] = {}
    unchecked = np.zeros(0, dtype=np.int64)

    def intersecting(polys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(polygon, other) for the sorted polygons ``polys``, as ``tree.query(geoms[polys], predicate="intersects")``
        gives them: the suspects' pairs as asked in step 1, the others' asked now (each polygon's own pairs in the
        index's order, the polygons in order)."""
        known = np.isin(polys, suspects)
        rows = np.isin(near[0], polys[known])
        a, b = near[0][rows], near[1][rows]
        rest = polys[~known]
        if len(rest):
            ra, rb = tree.query(geoms[rest], predicate="intersects")
            a, b = np.concatenate([a, rest[ra]]), np.concatenate([b, rb])
            order = np.argsort(a, kind="stable")
            a, b = a[order], b[order]
        return a, b

    def region_pairs() -> tuple[np.ndarray, np.ndarray]:
        """Pairs (a < b) of intersecting polygons of the region."""
        a, b = intersecting(region)
        keep = (a < b) & np.isin(b, region)
        return a[keep], b[keep]

    def local_pairs() -> tuple[np.ndarray, np.ndarray]:
        a, b = region_pairs()
        return np.searchsorted(region, a), np.searchsorted(region, b)

    if len(region):
        # gap_width: edges along a gap no wider than the tolerance are invalid too, whatever closes the gap
        inv, lost_clusters = by_cluster(lambda g: shapely.coverage_invalid_edges(g, gap_width=max(tol, 0.0)),
                                        geoms[region], local_pairs)
        for members, why in lost_clusters:
            # their overlaps are still found: every intersecting pair of the region with one of them is intersected below
            failures.append(Failure(tuple(int(u) for u in region[members]), "validating them as a coverage",
                                    frozenset((MISFITS,)), why))
            unchecked = np.union1d(unchecked, region[members])
        bad = present(inv)
        implicated = region[bad]
        invalid = dict(zip(implicated.tolist(), inv[bad]))
    # 3. overlaps. When GEOS finds nothing invalid and no segment is drawn twice on one side,
    # the polygons cannot overlap. Otherwise every pair of intersecting polygons of the region
    # with one of them implicated (an edge GEOS finds invalid, a segment drawn by three polygons
    # or twice on one side, or left unchecked) whose interiors meet (DE-9IM T********) is
    # intersected: GEOS alone can miss a polygon whose edge inside another one is matched
    # exactly by a third (the other one's edge inside it is not matched, so GEOS flags that one).
    pieces: list[Piece] = []
    pair_pieces: dict[tuple[int, int], list[Any]] = {}
    asked = np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if len(implicated) or len(edges.crowded) or len(unchecked):
        cand = np.intersect1d(np.union1d(np.union1d(implicated, edges.crowded), unchecked), region)
        asked = intersecting(cand)
        a, b = overlap_candidates(asked, region, len(geoms))
        # the union below takes these polygons whole, so gaps are still found around them
        doing, aspects = "intersecting them", frozenset((OVERLAPS, MISFITS))
        inner, failed, reasons = elementwise(lambda x, y: shapely.relate_pattern(x, y, "T********"), geoms[a], geoms[b], fill=False)
        failures += _pair_failures(a, b, failed, reasons, doing, aspects)
        unchecked = np.union1d(unchecked, np.r_[a[failed], b[failed]])
        inner = inner.astype(bool)
        a, b = a[inner], b[inner]
        if len(a):
            overlay, failed, reasons = elementwise(shapely.intersection, geoms[a], geoms[b])
            failures += _pair_failures(a, b, failed, reasons, doing, aspects)
            unchecked = np.union1d(unchecked, np.r_[a[failed], b[failed]])
            a, b, overlay = a[~failed], b[~failed], overlay[~failed]
            parts, k = polygonal_parts(overlay)
            w, failed, reasons = elementwise(lambda p: widths(p, tol), parts, fill=np.nan)
            failures += _pair_failures(a[k], b[k], failed, reasons, "measuring their overlap", frozenset((OVERLAPS, MISFITS)))
            real = mean_width(parts) >= floor  # else overlay rounding: no overlap, though it still explains a misfit
            for part, kk, ww, lost, above in zip(parts, k, w.astype(float), failed, real):
                if lost:
                    continue
                pair = (int(a[kk]), int(b[kk]))
                pair_pieces.setdefault(pair, []).append(part)
                if not above:
                    continue
                pieces.append(Piece(part, float(shapely.area(part)), float(ww), pair))
    # 4. the map extent: the extent layer, or the outline of the units (which needs their union:
    # GEOS coverage union on the part with no defect, plain union for the rest)
    involved = np.union1d(implicated, np.array([u for pair in pair_pieces for u in pair], dtype=np.int64))
    involved = np.union1d(involved, unchecked).astype(np.int64)
    union: Any = None
    extent: Any = None
    declared = False
    try:
        extent, declared = extent_of(project, None, tol)
    except GEOSException as exc:
        failures.append(Failure((), "reading the map extent", frozenset((GAPS, OUTSIDE)), reason_of(exc)))
        extent, declared = None, "extent" in project.layers
    if not declared:
        try:
            if len(geoms) == 0:
                union = shapely.Polygon()
            elif len(involved) == 0:
                union = union_from_edges(edges, geoms)
            else:
                rest = np.ones(len(geoms), dtype=bool)
                rest[involved] = False
                union = shapely.union_all(np.concatenate([[shapely.coverage_union_all(geoms[rest])], geoms[involved]]))
            extent, declared = extent_of(project, union, tol)
        except GEOSException as exc:
            failures.append(Failure(tuple(int(u) for u in involved), "joining them into one area",
                                    frozenset((GAPS, OUTSIDE)), reason_of(exc)))
            extent = None
    # 5. edges that run together exactly but with different vertices (GEOS "misaligned")
    collinear: list[tuple[tuple[int, int], Any, float]] = []
    if len(implicated) > 1:
        mine = np.isin(asked[0], implicated)  # implicated polygons are in the region: their pairs were asked above
        collinear, lost = _collinear(tree, geoms, implicated, invalid, pair_pieces,
                                     {f.units for f in failures if OVERLAPS in f.aspects},  # their overlap is not known
                                     (asked[0][mine], asked[1][mine]))
        failures += lost
    # 6. gaps: found from the untwinned edges, each measured from the polygons around it
    gap_pieces: list[Piece] = []
    outside: list[Piece] = []
    unvouched = False
    if extent is not None:
        traced = extent
        if within is not None and declared and within.region is not None:
            traced = shapely.intersection(extent, within.region)
        try:
            faces, points = gap_faces(edges, traced, tree)
        except GEOSException as exc:
            failures.append(Failure(tuple(int(u) for u in edges.suspects), "tracing the gaps between them",
                                    frozenset((GAPS,)), reason_of(exc)))
            faces = points = np.empty(0, dtype=object)
        if traced is not extent and len(faces):
            # a face reaching the region's edge may be part of a gap going on beyond it
            cut = shapely.intersects(faces, within.edge)  # type: ignore[union-attr]
            unvouched = bool(cut.any() and shapely.intersects(faces[cut], within.core).any())  # type: ignore[union-attr]
        margin = 1e3 * floor  # how far around a gap its polygons are looked for; shorter stretches are points
        gaps, _, lost_windows = local_gaps(faces, points, extent, geoms, tree, margin)
        failures += [Failure(tuple(int(u) for u in us), "taking them out of the map extent", frozenset((GAPS,)), why)
                     for us, why in lost_windows]
        gaps = gaps[mean_width(gaps) >= floor]  # overlay rounding, not a gap
        if len(gaps):
            gaps = gaps[np.lexsort(shapely.get_coordinates(shapely.point_on_surface(gaps)).T[::-1])]
        if len(gaps):
            w, lost, reasons = elementwise(lambda g: widths(g, tol), gaps, fill=np.nan)
            # the polygons along a gap: those with a stretch of edge within the noise floor of the gap's
            # edge, longer than a point at the map's precision (the margin). The overlay rounds the
            # corners it makes, so a gap's edge may run a rounding off the polygon's own edge rather
            # than on it: compared exactly, a neighbour was found or not by rounding, and a gap with
            # none was lost as a leftover of the overlay.
            gi, ui = tree.query(gaps, predicate="dwithin", distance=floor)
            run, unshared, more = elementwise(lambda g, u: _run_along(g, u, floor), gaps[gi], geoms[ui], fill=np.nan)
            along = run.astype(float) > margin
            along[unshared] = True
            lost = lost.copy()
            lost[gi[unshared]] = True
            reasons = reasons + more
            gi, ui = gi[along], ui[along]
            eb = shapely.boundary(extent)
            at_edge = np.zeros(len(gaps), dtype=bool)
            touch = np.flatnonzero(shapely.intersects(prepared_copy(eb), gaps))  # the extent's edge indexed once
            at_edge[touch] = shapely.length(shapely.intersection(shapely.boundary(gaps[touch]), eb)) > 0
            w = w.astype(float)
            on_frame = np.zeros(len(gaps), dtype=bool)
            thin = np.flatnonzero(at_edge & (w <= tol * ABOVE) & ~lost)
            if len(thin):
                # a thin gap all within the tolerance of the extent edge is a unit lying on the frame,
                # unless GEOS flags an edge along it (a misfit between the units that meet there)
                try:
                    on_frame[thin] = shapely.covered_by(gaps[thin], shapely.buffer(eb, tol * ABOVE))
                    eps = 1e-9 * _scale_of(extent)
                    for gk in thin[on_frame[thin]]:  # few: thin gaps at the frame
                        flagged = [invalid[u] for u in ui[gi == gk].tolist() if u in invalid]
                        # the length of flagged edge along the gap's boundary, measured on arrays (GEOS's buffer at
                        # a rounding distance can miss stretches: archivist.analysis.nearness.length_near)
                        if flagged and float(length_near(np.array([shapely.union_all(flagged)]),
                                                         np.array([shapely.boundary(gaps[gk])]), eps)[0]) > 4 * eps:
                            on_frame[gk] = False
                except GEOSException as exc:
                    failures.append(Failure(tuple(int(u) for u in np.unique(ui[np.isin(gi, thin)])),
                                            "comparing a gap with the map edge", frozenset((GAPS, MISFITS)), reason_of(exc)))
            by_gap = np.argsort(gi, kind="stable")
            cuts = np.searchsorted(gi[by_gap], np.arange(len(gaps) + 1))
            for gk, (g, ww) in enumerate(zip(gaps, w)):
                around = tuple(sorted(int(u) for u in ui[by_gap[cuts[gk]:cuts[gk + 1]]]))
                if lost[gk]:
                    failures.append(Failure(around, "measuring the gap between them", frozenset((GAPS, MISFITS)),
                                            reasons[0] if reasons else "GEOS failed"))
                elif around or at_edge[gk] or not len(geoms):  # else a degenerate leftover of the overlay
                    gap_pieces.append(Piece(g, float(shapely.area(g)), float(ww), around, bool(at_edge[gk]), bool(on_frame[gk])))
        # 7. unit area outside a declared extent: each polygon not within it, cut on its own
        if declared:
            try:
                parts, owner, failed_units, reasons = outside_parts(extent, geoms)
            except GEOSException as exc:
                failures.append(Failure((), "comparing them with the map extent", frozenset((OUTSIDE,)), reason_of(exc)))
                parts, owner, failed_units, reasons = np.empty(0, dtype=object), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), []
            failures += [Failure((int(u),), "comparing it with the map extent", frozenset((OUTSIDE,)), why)
                         for u, why in zip(failed_units, reasons)]
            keep = mean_width(parts) >= floor
            parts, owner = parts[keep], owner[keep]
            w, failed, reasons = elementwise(lambda p: widths(p, tol), parts, fill=np.nan)
            failures += [Failure((int(u),), "measuring its area outside the map extent", frozenset((OUTSIDE,)), why)
                         for u, why in zip(owner[failed], reasons)]
            for part, u, ww, lost_part in zip(parts, owner, w.astype(float), failed):
                if not lost_part:
                    outside.append(Piece(part, float(shapely.area(part)), float(ww), (int(u),), True))
    # the map's outer edge, for the linework family: single edges along the extent boundary
    outline = outline_of(edges, extent, tol)
    return Coverage(
        tol=tol,
        extent=extent,
        extent_declared=declared,
        extent_note=extent_note(project, declared),
        union=union,
        implicated=implicated,
        overlaps=tuple(pieces),
        gap_pieces=tuple(gap_pieces),
        outside=tuple(outside),
        collinear=tuple(collinear),
        outline=outline,
        failures=tuple(failures),
        unvouched=unvouched,
        floor=floor,
    )


# ---------------------------------------------------------------- edge mismatches, grouped per pair

def stretch_length(piece: Any) -> float:
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


@dataclass(frozen=True)
class Mismatch:
    """Neighbours whose common edge nearly, but not exactly, coincides."""

    units: tuple[int, ...]
    geometry: Any  # the misfitting linework
    length: float
    apart: float | None  # the largest separation; None when the edges coincide but their vertices differ


def _reported_pieces(cov: Coverage) -> list[Piece]:
    """The gaps, overlaps and outside parts the topology rules report as such (wider than the tolerance, or a gap along one unit)."""
    tol = cov.tol * ABOVE
    return ([p for p in cov.overlaps if p.width > tol] + [p for p in cov.outside if p.width > tol]
            + [p for p in cov.gaps if not p.on_frame and (p.width > tol or len(p.units) <= 1)])


def _part_of_wide(wide: list[Piece], geoms: list[Any], units: list[tuple[int, ...]], tol: float,
                  floor: float) -> list[bool]:
    """For each thin misfit: does it lie within the tolerance of a reported gap or overlap of the same polygons?

    "The same polygons": the misfit's polygons are among the defect's, or the
    defect's among the misfit's where the two touch (a gap GEOS finds along
    one polygon only, whose far side is floating-point noise against the
    neighbour it was cut from: the misfit lies on that side, within 1000 x
    ``floor`` of it, the map's noise floor, :func:`noise_floor`). Such a
    misfit is left over from the same edit and belongs to that defect. A
    misfit merely within the tolerance of a defect along fewer polygons is a
    defect of its own and stays: a strip 0.5 m wide with a gap along its top
    and its bottom edge misaligned with the polygons below (at a 1 m
    tolerance) is a gap and two misfits. So does a thin misfit with another
    neighbour of a polygon that also has a wide overlap.
    """
    out = [False] * len(geoms)
    if not wide or not geoms:
        return out
    wide_geoms = np.array([p.geom for p in wide], dtype=object)
    misfits = np.array(geoms, dtype=object)
    tree = shapely.STRtree(wide_geoms)
    gi, wi = tree.query(misfits, predicate="dwithin", distance=max(tol, 0.0))
    touch = 1e3 * floor
    for g, w in zip(gi.tolist(), wi.tolist()):  # few: thin misfits next to a reported defect
        mine, theirs = set(units[g]), set(wide[w].units)
        if theirs and (mine <= theirs or (theirs <= mine and shapely.distance(misfits[g], wide_geoms[w]) <= touch)):
            out[g] = True
    return out


def find_mismatches(cov: Coverage) -> tuple[Mismatch, ...]:
    """Thin overlaps, thin gaps and misaligned edges, grouped per pair (or group) of polygons."""
    tol = cov.tol
    groups: dict[tuple[int, ...], dict[str, Any]] = {}

    def add(key: tuple[int, ...], geom: Any, length: float, apart: float | None) -> None:
        g = groups.setdefault(key, {"geoms": [], "length": 0.0, "apart": None})
        g["geoms"].append(geom)
        g["length"] += length
        if apart is not None:
            g["apart"] = max(g["apart"] or 0.0, apart)

    thin_overlaps = [p for p in cov.overlaps if p.width <= tol * ABOVE]
    # a thin gap between two or more polygons, whatever else it touches (the frame, a hole);
    # one along a single polygon is a gap (unit-gap), one lying on the frame is no defect
    thin_gaps = [p for p in cov.gaps if p.width <= tol * ABOVE and len(p.units) > 1 and not p.on_frame]
    wide = _reported_pieces(cov)
    part_of = _part_of_wide(wide, [p.geom for p in thin_overlaps + thin_gaps] + [c[1] for c in cov.collinear],
                            [p.units for p in thin_overlaps + thin_gaps] + [c[0] for c in cov.collinear], tol, cov.floor)
    for piece, inside in zip(thin_overlaps + thin_gaps, part_of):
        if not inside:
            add(piece.units, shapely.boundary(piece.geom), stretch_length(piece.geom), piece.width)
    pieces = cov.overlaps + tuple(p for p in cov.gaps if not p.on_frame) + cov.outside
    # vertices missing from one side at the corners of a gap or overlap between the
    # same two polygons belong to that defect
    at_corner = np.zeros(len(cov.collinear), dtype=bool)
    if pieces and cov.collinear:
        ci, pj = shapely.STRtree(np.array([p.geom for p in pieces], dtype=object)).query(
            np.array([c[1] for c in cov.collinear], dtype=object), predicate="intersects")
        for c, q in zip(ci.tolist(), pj.tolist()):  # few: misaligned edges touching a defect
            pair = cov.collinear[c][0]
            if pair[0] in pieces[q].units and pair[1] in pieces[q].units:
                at_corner[c] = True
    for (pair, geom, length), inside, corner in zip(cov.collinear, part_of[len(thin_overlaps) + len(thin_gaps):], at_corner):
        if inside or corner:
            continue
        add(pair, geom, length, None)
    out = []
    for us, g in groups.items():
        parts, _ = linear_parts(np.array(g["geoms"], dtype=object))
        geom = shapely.line_merge(shapely.multilinestrings(parts)) if len(parts) else shapely.union_all(g["geoms"])
        out.append(Mismatch(us, geom, g["length"], g["apart"]))
    out.sort(key=lambda m: m.units)
    return tuple(out)
