"""Pairs within a distance (``dwithin_pairs``) are exactly those GEOS's STRtree query gives, in its order; what of
a line lies farther than a distance from other lines (``far_parts``) and the length of a line near another are
what GEOS's distance, sampled along the line, brackets, in the pieces GEOS's buffer and difference leave."""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from archivist.analysis.nearness import BIG, dwithin_pairs, far_parts, length_near, near_parts, off_unit_boundaries, uncovered
from archivist.analysis.polygons import Units


def test_dwithin_pairs_equal_the_strtree_query_with_a_frame_line_of_many_vertices():
    rng = np.random.default_rng(7)
    starts = rng.uniform(0, 1000, size=(400, 2))
    lines = [shapely.linestrings([p, p + rng.uniform(-20, 20, 2)]) for p in starts]
    frame = shapely.segmentize(shapely.boundary(shapely.box(0, 0, 1000, 1000)), 1.0)  # 4 000 vertices around the map
    wiggle = shapely.linestrings(np.c_[np.linspace(0, 1000, 3 * BIG), 500 + 5 * np.sin(np.arange(3 * BIG))])
    refs = np.array(lines + [frame, wiggle], dtype=object)
    assert shapely.get_num_coordinates(frame) > BIG
    tree = shapely.STRtree(refs)
    pts = shapely.points(np.r_[rng.uniform(-2, 1002, size=(300, 2)), [[0.5, 300.0], [999.7, 10.0], [40.0, 502.0]]])
    for d in (0.0, 0.5, 3.0):
        expected = tree.query(pts, predicate="dwithin", distance=d)
        got = dwithin_pairs(tree, refs, pts, d)
        assert np.array_equal(np.stack(got), expected)
    got = dwithin_pairs(tree, refs, pts, 3.0)
    assert len(refs) - 2 in got[1] and len(refs) - 1 in got[1]  # the frame and the wiggle were met
    assert not shapely.is_prepared(refs[-2])  # the caller's geometry is left as it was
    stretches = np.array(lines[:50], dtype=object)
    assert np.array_equal(np.stack(dwithin_pairs(tree, refs, stretches, 2.0)), tree.query(stretches, predicate="dwithin", distance=2.0))


def test_dwithin_pairs_equal_the_strtree_query_when_the_large_geometry_is_among_those_asked():
    # a partition's frame line asked against the lines near it (GEOS's STRtree query as the reference): every
    # pair it meets, and pairs of two large geometries, the same as GEOS tests them pair by pair
    rng = np.random.default_rng(11)
    starts = rng.uniform(0, 1000, size=(300, 2))
    lines = [shapely.linestrings([p, p + rng.uniform(-20, 20, 2)]) for p in starts]
    frame = shapely.segmentize(shapely.boundary(shapely.box(0, 0, 1000, 1000)), 1.0)
    wiggle = shapely.linestrings(np.c_[np.linspace(0, 1000, 3 * BIG), 500 + 5 * np.sin(np.arange(3 * BIG))])
    edge = shapely.linestrings([[0.0, 0.4], [1000.0, 2.0]])  # small, along the frame's lower side
    refs = np.array(lines + [edge, wiggle], dtype=object)
    tree = shapely.STRtree(refs)
    asked = np.array([lines[3], frame, lines[9], wiggle, frame], dtype=object)
    for d in (0.0, 0.5, 3.0):
        expected = tree.query(asked, predicate="dwithin", distance=d)
        got = dwithin_pairs(tree, refs, asked, d)
        assert np.array_equal(np.stack(got), expected)
    got = dwithin_pairs(tree, refs, asked, 3.0)
    assert len(refs) - 2 in got[1][got[0] == 1]  # the frame meets the edge beside it
    assert not shapely.is_prepared(frame) and not shapely.is_prepared(wiggle)


def test_one_reference_within_and_distances_equal_geos_pair_by_pair():
    from archivist.analysis.nearness import point_distances, within_of

    rng = np.random.default_rng(8)
    frame = shapely.segmentize(shapely.boundary(shapely.box(0, 0, 1000, 1000)), 1.0)
    parts = shapely.multilinestrings([shapely.segmentize(shapely.linestrings([[0, 10], [1000, 30]]), 2.0),
                                      shapely.linestrings([[5, 5], [6, 900]])])
    pts = shapely.points(np.r_[rng.uniform(-5, 1005, size=(500, 2)), [[0.0, 0.0], [1000.0, 500.0], [0.3, 0.3]]])
    for ref in (frame, parts, shapely.linestrings([[0, 0], [3, 4]])):
        for d in (0.0, 0.5, 4.0):
            assert np.array_equal(within_of(ref, pts, d), shapely.dwithin(pts, ref, d))
        refs = np.full(len(pts), ref, dtype=object)
        assert np.array_equal(point_distances(pts, refs), shapely.distance(pts, refs))
    mixed = np.array([frame, parts] * (len(pts) // 2) + [frame], dtype=object)
    assert np.array_equal(point_distances(pts, mixed), shapely.distance(pts, mixed))
    assert not shapely.is_prepared(frame)


def test_far_parts_by_hand():
    # a 10 m segment, a reference 4 m long 0.3 m beside it (within 0.5 from 1.6 to 6.4: its rectangle covers 2 to 6,
    # the discs at its ends reach sqrt(0.5^2 - 0.3^2) = 0.4 m further each way; by hand): 0 to 1.6 and 6.4 to 10 left
    line = shapely.LineString([(0, 0), (10, 0)])
    got = uncovered(np.array([line]), np.array([shapely.LineString([(2, 0.3), (6, 0.3)])]), 0.5)[0]
    assert got.geom_type == "MultiLineString"
    xy = [shapely.get_coordinates(p) for p in shapely.get_parts(got)]
    assert np.allclose(xy[0], [[0, 0], [1.6, 0]], atol=1e-12) and np.allclose(xy[1], [[6.4, 0], [10, 0]], atol=1e-12)
    # a bent line whose middle vertex lies under a reference (a ring of 0.1 m around it: within 1 m of the ring is
    # within 1.1 m of the vertex): one piece on each side, 3.9 m each
    bent = shapely.LineString([(0, 0), (5, 0), (5, 5)])
    got = uncovered(np.array([bent, line]), np.array([shapely.Point(5, 0).buffer(0.1).exterior]), 1.0)
    assert [round(float(shapely.length(p)), 9) for p in shapely.get_parts(got[0])] == pytest.approx([3.9, 3.9])
    assert got[1].geom_type == "MultiLineString" and shapely.length(got[1]) == pytest.approx(10 - 2.2, abs=1e-9)
    # a point as the reference (a segment of no length), in a collection with a line: within 0.5 of (5, 0.3) is
    # 5 -/+ 0.4 (by hand), within 0.5 of the line from (9, 0.3) on is 8.6 onwards
    refs = np.array([shapely.GeometryCollection([shapely.Point(5, 0.3), shapely.LineString([(9, 0.3), (12, 0.3)])])])
    got = far_parts(np.array([line]), np.array([0]), refs, np.array([0]), 0.5)[0]
    assert np.allclose(shapely.get_coordinates(got), [[0, 0], [4.6, 0], [5.4, 0], [8.6, 0]], atol=1e-12)
    # what near_parts keeps is the rest: 4.6 to 5.4 and 8.6 to 10
    kept = near_parts(np.array([line]), refs, 0.5)[0]
    assert np.allclose(shapely.get_coordinates(kept), [[4.6, 0], [5.4, 0], [8.6, 0], [10, 0]], atol=1e-12)
    # nothing near: the target as it was; all of it near: an empty line
    far = shapely.LineString([(0, 50), (10, 50)])
    got = uncovered(np.array([far, line]), np.array([line]), 0.5)
    assert got[0] is far and got[1].is_empty and got[1].geom_type == "LineString"


def _far_bounds(line, ref, dist: float, step: float) -> tuple[float, float]:
    """The length of ``line`` farther than ``dist`` from ``ref`` by GEOS's distance sampled ``step`` apart along each
    of its parts: steps with both ends farther (a lower bound) and with either end farther (an upper bound)."""
    lo = hi = 0.0
    for part in shapely.get_parts(line):
        xy = shapely.get_coordinates(shapely.segmentize(part, step))
        d = shapely.distance(shapely.points(xy), ref) > dist
        seg = np.hypot(*np.diff(xy, axis=0).T)
        lo, hi = lo + float(seg[d[:-1] & d[1:]].sum()), hi + float(seg[d[:-1] | d[1:]].sum())
    return lo, hi


def test_far_parts_against_geos_distance_and_geos_pieces_on_random_lines():
    # random polylines (simple ones, some multi-part, some closed) and references near them: what is left is what
    # GEOS's distance, sampled every millimetre, brackets, every point of it is farther than the distance, and it
    # comes in the pieces GEOS's difference with a fine buffer (64 segments a quarter circle) leaves
    rng = np.random.default_rng(2)
    checked = 0
    for trial in range(200):
        lines = []
        for _ in range(int(rng.integers(1, 3))):
            xy = np.cumsum(rng.normal(0, 1, (int(rng.integers(2, 8)), 2)) * rng.choice([0.3, 2.0, 10.0]), axis=0)
            if rng.random() < 0.2:
                xy = np.r_[xy, xy[:1]]
            lines.append(shapely.linestrings(xy))
        target = shapely.multilinestrings(lines) if len(lines) > 1 else lines[0]
        if not shapely.is_simple(target):
            continue
        xy = shapely.get_coordinates(target)
        refs = np.array([shapely.linestrings(xy[rng.integers(0, len(xy))]
                                             + np.cumsum(rng.normal(0, 1, (int(rng.integers(2, 6)), 2)) * rng.choice([0.3, 2.0]), axis=0))
                         for _ in range(int(rng.integers(1, 4)))], dtype=object)
        tol = float(rng.choice([0.2, 1.0, 2.0]))
        got = uncovered(np.array([target]), refs, tol)[0]
        every = shapely.union_all(refs)
        shapely.prepare(every)
        lo, hi = _far_bounds(target, every, tol, 0.002)
        assert lo - 1e-9 <= shapely.length(got) <= hi + 1e-9, trial
        if not got.is_empty:
            pts = shapely.points(shapely.get_coordinates(shapely.segmentize(got, 0.01)))
            assert shapely.distance(pts, every).min() >= tol * (1 - 1e-9), trial
        fine = shapely.difference(target, shapely.buffer(every, tol, quad_segs=64))
        longer = [p for p in shapely.get_parts(got) if shapely.length(p) > 0.05 * tol]
        assert len(longer) == len([p for p in shapely.get_parts(fine) if shapely.length(p) > 0.05 * tol]), trial
        checked += 1
    assert checked > 100


def test_a_point_where_polygons_overlap_lies_in_the_first_of_them_in_the_layer():
    # which polygon a point "lies inside" must not depend on the spatial index's order, which changes with the
    # polygons the index holds (a part of the map against the whole): the first in the layer, whatever the order
    from archivist.analysis.nearness import unit_at
    from archivist.analysis.polygons import Units

    squares = [shapely.box(i, 0, i + 10, 10) for i in range(8)]  # all eight hold x 7.5
    for geoms in (squares, squares[::-1]):
        units = Units(rows=np.arange(8), geoms=np.array(geoms, dtype=object), ids=np.array([str(i) for i in range(8)]),
                      codes=None, source="units")
        assert unit_at(shapely.points([[7.5, 5.0], [0.5, 5.0], [20.0, 5.0]]), units).tolist() == [0, 0 if geoms is squares else 7, -1]


def _voronoi_units(seed: int, n: int = 60):
    """Unit polygons of a Voronoi tiling of a 1 km square (a clean coverage built by GEOS)."""
    rng = np.random.default_rng(seed)
    box = shapely.box(0, 0, 1000, 1000)
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(rng.uniform(0, 1000, (n, 2))), extend_to=box))
    cells = shapely.intersection(cells, box)
    return Units(np.arange(len(cells)), cells, np.array([str(i) for i in range(len(cells))], dtype=object), None, "units")


def _lines_and_references(rng, n: int, most: int, scales: tuple, jitter: float, dists: tuple) -> tuple[list, list, list]:
    """``n`` random polylines (2 to ``most`` - 1 vertices, steps of one of ``scales``), each with a reference that
    runs near it in places (its vertices jittered by ``jitter`` and some dropped) and a distance (one of ``dists``)."""
    lines, refs, chosen = [], [], []
    for _ in range(n):
        xy = np.cumsum(rng.normal(0, 1, (int(rng.integers(2, most)), 2)) * rng.choice(list(scales)), axis=0)
        lines.append(shapely.linestrings(xy))
        keep = rng.random(len(xy)) < 0.8
        keep[:2] = True
        refs.append(shapely.linestrings(xy[keep] + rng.normal(0, jitter, (int(keep.sum()), 2))))
        chosen.append(float(rng.choice(list(dists))))
    return lines, refs, chosen


def test_near_parts_against_geos_distance_and_geos_pieces_on_random_lines():
    # pair by pair, what near_parts keeps is what GEOS's distance sampled along the line brackets (the line's length
    # less what lies farther), every point of it within the distance, in the pieces GEOS's intersection with a fine
    # buffer keeps; with far_parts it makes up the whole line
    targets, refs, tols = _lines_and_references(np.random.default_rng(4), 150, 8, (0.3, 2.0), 0.3, (0.2, 0.5))
    checked = 0
    for tol in (0.2, 0.5):
        pick = np.flatnonzero(np.array(tols) == tol)
        t, r = np.array(targets, dtype=object)[pick], np.array(refs, dtype=object)[pick]
        near = near_parts(t, r, tol)
        far = far_parts(t, np.arange(len(t)), r, np.arange(len(t)), tol)
        assert np.allclose(shapely.length(near) + shapely.length(far), shapely.length(t), rtol=0, atol=1e-9)
        for k in range(len(t)):
            ref = r[k]
            lo, hi = _far_bounds(t[k], ref, tol, 0.002)
            total = float(shapely.length(t[k]))
            assert total - hi - 1e-9 <= shapely.length(near[k]) <= total - lo + 1e-9, k
            if not near[k].is_empty:
                pts = shapely.points(shapely.get_coordinates(shapely.segmentize(near[k], 0.01)))
                assert shapely.distance(pts, ref).max() <= tol * (1 + 1e-9), k
            if shapely.is_simple(t[k]):
                fine = shapely.intersection(t[k], shapely.buffer(ref, tol, quad_segs=64))
                n = [sum(shapely.length(p) > 0.05 * tol for p in shapely.get_parts(x)) for x in (near[k], fine)]
                assert n[0] == n[1], k
                checked += 1
    assert checked > 50


def test_off_boundary_parts_against_geos_distance_and_geos_pieces():
    # lines along the unit boundaries (their edges, snapped, nudged within and beyond the tolerance, cut across):
    # what lies farther than the tolerance is what GEOS's distance to the boundaries, sampled along the line,
    # brackets, in the pieces GEOS's fine buffer of the boundaries and difference leave
    rng = np.random.default_rng(5)
    tol = 1.0
    for seed in range(4):
        units = _voronoi_units(seed)
        edges = shapely.get_parts(shapely.line_merge(shapely.boundary(units.geoms)))
        lines = []
        for e in edges[:40]:
            xy = shapely.get_coordinates(shapely.segmentize(e, 15.0))
            kind = rng.integers(4)
            if kind == 1:  # every vertex nudged well within the tolerance
                xy = xy + rng.uniform(-0.3, 0.3, xy.shape)
            elif kind == 2:  # nudged across the tolerance
                xy = xy + rng.uniform(-1.4, 1.4, xy.shape)
            elif kind == 3:  # a chord across a bend
                xy = xy[[0, max(len(xy) // 2, 1)]]
            lines.append(shapely.linestrings(xy))
        lines.append(shapely.linestrings([[10.0, 10.0], [990.0, 980.0]]))  # across the units
        lines = np.array(lines, dtype=object)
        got = off_unit_boundaries(lines, units, tol)
        walls = shapely.union_all(shapely.boundary(units.geoms))
        shapely.prepare(walls)
        fine = shapely.difference(lines, shapely.buffer(walls, tol, quad_segs=64))
        for k, (line, g) in enumerate(zip(lines, got)):
            lo, hi = _far_bounds(line, walls, tol, 0.05)
            assert lo - 1e-9 <= shapely.length(g) <= hi + 1e-9, (seed, k)
            if shapely.is_simple(line):
                n = [sum(shapely.length(p) > 0.05 * tol for p in shapely.get_parts(x)) for x in (g, fine[k])]
                assert n[0] == n[1], (seed, k)
        assert shapely.is_empty(got).sum() >= 10 and (~shapely.is_empty(got)).sum() >= 3, seed  # both ways taken


def _densified_bounds(line, ref, dist: float, step: float) -> tuple[float, float]:
    """The length of ``line`` within ``dist`` of ``ref`` by GEOS's distance at points ``step`` apart along it: the
    steps with both ends within (a lower bound) and with either end within (an upper bound, as the stretch
    within is one piece per segment pair)."""
    xy = shapely.get_coordinates(shapely.segmentize(line, step))
    d = shapely.distance(shapely.points(xy), ref) <= dist
    seg = np.hypot(*np.diff(xy, axis=0).T)
    return float(seg[d[:-1] & d[1:]].sum()), float(seg[d[:-1] | d[1:]].sum())


def test_length_near_by_hand():
    # a 10 m segment and one 4 m long 0.3 m beside it, within 0.5: its rectangle covers 2 to 6 and the discs at
    # its ends reach sqrt(0.5^2 - 0.3^2) = 0.4 m further each way: 1.6 to 6.4, 4.8 m (by hand)
    line = shapely.LineString([(0, 0), (10, 0)])
    ref = shapely.LineString([(2, 0.3), (6, 0.3)])
    got = length_near(np.array([line, line, line]), np.array([ref, shapely.LineString([(2, 0.6), (6, 0.6)]),
                                                              shapely.LineString([(0, 0), (3, 0), (3, 0.2), (5, 0)])]), 0.5)
    assert got[0] == pytest.approx(4.8, abs=1e-12)
    assert got[1] == 0.0  # 0.6 m off: nothing within 0.5
    # a reference lying on the line from 0 to 3 and bending back to it at 5: all of 0 to 5.5 once (not twice)
    assert got[2] == pytest.approx(5.5, abs=1e-12)


def test_length_near_equals_geos_distance_sampled_along_random_lines():
    # against GEOS: random polylines and references, each point's distance to the reference (GEOS) sampled every
    # millimetre brackets the length within the distance
    lines, refs, dists = _lines_and_references(np.random.default_rng(11), 60, 9, (0.5, 3.0), 0.2, (0.1, 0.3))
    for d in (0.1, 0.3):
        pick = np.flatnonzero(np.array(dists) == d)
        got = length_near(np.array(lines, dtype=object)[pick], np.array(refs, dtype=object)[pick], d)
        for g, k in zip(got, pick.tolist()):
            lo, hi = _densified_bounds(lines[k], refs[k], d, 0.001)
            assert lo - 1e-9 <= g <= hi + 1e-9, (k, g, lo, hi)


def test_length_near_at_a_rounding_distance_on_large_coordinates():
    # a gap along a unit polygon on a generated map of 10^5 polygons (UTM coordinates), measured at 10^-12 of the
    # coordinates: GEOS 3.14's buffer of the polygon's boundary at that distance, intersected with the gap's
    # boundary, gave 1.2e-5 m for a border 69 m long; sampled with GEOS's distance it is 69.21 m
    unit = shapely.from_wkt(
        "POLYGON ((405013.4845411425 6514837.450870028, 405013.4978220659 6514837.425724404, "
        "405024.5028151807 6514847.606833614, 405030.84180037037 6514869.271567013, 405091.0866721012 6514890.395737025, "
        "405092.1166668477 6514891.274860866, 405126.3433054799 6514883.1624334175, 405122.7855967765 6514845.820666167, "
        "405146.3225303169 6514811.2501196135, 405110.2340374823 6514772.936201833, 405104.6515024426 6514773.321917142, "
        "405085.99975709786 6514785.609062727, 405045.8221809943 6514776.223942349, 405013.4845411425 6514837.450870028))")
    gap = shapely.from_wkt("POLYGON ((405012.9845411425 6514836.950870028, 405013.4978220659 6514837.425724404, "
                           "405045.8221809943 6514776.223942349, 405012.9845411425 6514836.950870028))")
    eps = 1e-12 * 6514891.274860866
    got = length_near(np.array([gap.boundary]), np.array([unit.boundary]), eps)[0]
    lo, hi = _densified_bounds(gap.boundary, unit.boundary, eps, 0.001)
    assert lo - 1e-9 <= got <= hi + 1e-9
    assert got == pytest.approx(69.214, abs=0.001)
