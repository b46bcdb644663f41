"""archivist.analysis.arrays: hashing, grouping and parts of geometries on whole arrays.

Outside reference: GEOS through shapely (the parts and areas of geometries)
and numpy's own float bit patterns.
"""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString, Point, box

from archivist.analysis.arrays import (
    canonical,
    coord_hash,
    group_sorted,
    linear_parts,
    merge_by_group,
    polygonal_parts,
    spans,
    union_by_group,
)


def test_coordinate_hash_equal_rows_equal_hashes():
    a = np.array([1.0, -0.0, 3.5])
    b = np.array([2.0, 0.0, 3.5])
    h1 = coord_hash(a, b)
    h2 = coord_hash(a.copy(), np.array([2.0, -0.0, 3.5]))
    assert (h1 == h2).all()
    assert len(set(coord_hash(np.arange(1000.0), np.zeros(1000)).tolist())) == 1000


def test_canonical_segments_run_west_to_east():
    px, py, qx, qy, fwd = canonical(np.array([5.0, 0.0]), np.array([0.0, 0.0]), np.array([0.0, 5.0]), np.array([0.0, 0.0]))
    assert px.tolist() == [0.0, 0.0] and qx.tolist() == [5.0, 5.0]
    assert fwd.tolist() == [False, True]


def test_group_sorted_groups_identical_rows():
    x = np.array([1.0, 2.0, 1.0, 3.0, 2.0])
    order, gid, starts = group_sorted(coord_hash(x), x)
    assert len(starts) == 3
    groups = {}
    for row, g in zip(order, gid):
        groups.setdefault(int(g), []).append(float(x[row]))
    assert sorted(sorted(v) for v in groups.values()) == [[1.0, 1.0], [2.0, 2.0], [3.0]]


def test_spans_list_each_range_in_order_and_skip_empty_ones():
    # by hand: 5..6, nothing, 0, 10..12; numpy's own concatenation of the ranges is the reference
    starts, counts = np.array([5, 7, 0, 10]), np.array([2, 0, 1, 3])
    which, at = spans(starts, counts)
    assert which.tolist() == [0, 0, 2, 3, 3, 3]
    assert at.tolist() == [5, 6, 0, 10, 11, 12]
    assert at.tolist() == np.concatenate([np.arange(s, s + c) for s, c in zip(starts, counts)]).tolist()
    assert [len(x) for x in spans(np.zeros(0), np.zeros(0))] == [0, 0]


def test_parts_of_an_overlay_collection():
    # GEOS returns a collection for the intersection of two boxes meeting in an area and a line
    a = shapely.union(box(0, 0, 2, 2), box(3, 0, 4, 2))
    b = box(1, 1, 3, 3)
    overlay = shapely.intersection(a, b)
    parts, idx = polygonal_parts(np.array([overlay, Point(0, 0)], dtype=object))
    assert len(parts) == 1 and idx.tolist() == [0] and shapely.area(parts[0]) == 1.0
    lines, k = linear_parts(np.array([overlay], dtype=object))
    assert [round(float(shapely.length(g)), 9) for g in lines] == [1.0] and k.tolist() == [0]


def test_merge_by_group_joins_pieces_of_each_group():
    pieces = np.array([LineString([(0, 0), (1, 0)]), LineString([(1, 0), (2, 0)]), LineString([(5, 5), (6, 5)])], dtype=object)
    merged = merge_by_group(pieces, np.array([0, 0, 1]), 3)
    assert merged[0].equals(LineString([(0, 0), (2, 0)]))
    assert merged[1].equals(pieces[2]) and merged[2] is None


# ---------------------------------------------------------------- widths (largest inscribed circle)

def _fine_width(piece, r_guess: float) -> float:
    """GEOS's MaximumInscribedCircle (via shapely) at a precision of 1e-5 of the radius: the reference."""
    return 2.0 * float(shapely.length(shapely.maximum_inscribed_circle(piece, max(r_guess * 1e-5, 1e-9))))


def _assert_within_precision(pieces, tol: float) -> np.ndarray:
    """widths() against GEOS at fine precision: never wider, and at most 2 x min(tol/20, 2 % of r) narrower."""
    from archivist.analysis.arrays import widths

    got = widths(np.array(pieces, dtype=object), tol)
    for piece, w in zip(pieces, got.tolist()):
        ref = _fine_width(piece, w / 2.0)
        slack = 2.0 * max(ref * 1e-5, 1e-9) + 1e-9 * ref  # the reference's own precision
        assert w <= ref + slack, (w, ref)
        allowed = 2.0 * min(tol / 20.0, 0.02 * ref / 2.0)
        assert w >= ref - allowed - slack, (w, ref, allowed)
    return got


def _count_grid_searches(monkeypatch) -> list:
    """The number of polygons each call of GEOS's grid search (maximum_inscribed_circle) in widths() was given."""
    import archivist.analysis.arrays as arrays

    calls: list = []
    real = arrays.shapely.maximum_inscribed_circle

    def counting(geoms, tolerance):
        calls.append(len(np.atleast_1d(geoms)))
        return real(geoms, tolerance)

    monkeypatch.setattr(arrays.shapely, "maximum_inscribed_circle", counting)
    return calls


def test_widths_of_strips_match_geos_without_its_grid_search(monkeypatch):
    # strips with parallel edges, as left by a polygon shifted into its neighbour: straight, bent,
    # zigzag, far from the origin (UTM-sized coordinates) and on a slant
    import archivist.analysis.arrays as arrays

    x0, y0 = 419_000.0, 6_501_000.0
    path = LineString([(x0, y0), (x0 + 80, y0 + 5), (x0 + 120, y0 + 60), (x0 + 200, y0 + 62)])
    zigzag = LineString([(x0 + 10 * i, y0 + (7 if i % 2 else 0)) for i in range(25)])
    strips = [
        box(x0, y0, x0 + 300, y0 + 2),  # width exactly 2 (geometry)
        shapely.buffer(path, 1.0, cap_style="flat", join_style="mitre"),
        shapely.buffer(path, 1.0, cap_style="round"),
        shapely.buffer(zigzag, 0.8, cap_style="flat", join_style="round"),
        shapely.affinity.rotate(box(0, 0, 250, 2.4), 33.0, origin=(0, 0)),
    ]
    calls = _count_grid_searches(monkeypatch)
    got = arrays.widths(np.array(strips, dtype=object), 0.5)
    monkeypatch.undo()
    assert sum(calls) == 0  # all settled by erosion
    assert abs(got[0] - 2.0) <= 2 * 0.02  # exact width 2 within 2 % of the radius
    _assert_within_precision(strips, 0.5)


def test_widths_of_assorted_polygons_within_the_stated_precision():
    rng = np.random.default_rng(7)
    pieces = []
    for _ in range(40):  # star-shaped polygons: reflex corners, thin spikes
        n = int(rng.integers(5, 14))
        ang = np.sort(rng.uniform(0, 2 * np.pi, n))
        rad = rng.uniform(2.0, 30.0, n)
        pieces.append(shapely.Polygon(np.c_[500_000 + rad * np.cos(ang), 6_000_000 + rad * np.sin(ang)]))
    for _ in range(20):  # thin slivers, a few mm to a few cm wide
        w = float(rng.uniform(0.003, 0.05))
        pieces.append(shapely.affinity.rotate(box(0, 0, float(rng.uniform(20, 200)), w), float(rng.uniform(0, 180))))
    pieces.append(Point(0, 0).buffer(10.0))  # a disk: radius 10 (less the chords of its 32-gon)
    pieces.append(box(0, 0, 10, 10).difference(box(4, 4, 6, 6)))  # a square with a hole
    pieces = [p for p in pieces if p.is_valid and p.area > 0]
    for tol in (0.5, 0.01, 0.0):
        if tol == 0.0:  # no tolerance: 1e-4 of sqrt(area), the precision of a measure in a geographic map
            from archivist.analysis.arrays import widths

            got = widths(np.array(pieces, dtype=object), 0.0)
            ref = np.array([_fine_width(p, w / 2) for p, w in zip(pieces, got)])
            size = np.sqrt(shapely.area(np.array(pieces, dtype=object)))
            assert (got <= ref * (1 + 1e-5) + 1e-9).all()
            assert (got >= ref - 2 * np.minimum(size * 1e-4, 0.02 * ref / 2) - 1e-6 * ref).all()
        else:
            _assert_within_precision(pieces, tol)


def test_widths_of_nothing_and_of_a_multipolygon():
    from archivist.analysis.arrays import widths

    assert widths(np.empty(0, dtype=object), 0.5).shape == (0,)
    two = shapely.MultiPolygon([box(0, 0, 10, 1), box(20, 0, 30, 4)])
    assert abs(widths(np.array([two], dtype=object), 0.5)[0] - 4.0) <= 2 * 0.02 * 2.0


def test_widths_of_one_part_multipolygons_are_settled_as_their_polygons(monkeypatch):
    # a GeoPackage layer of MULTIPOLYGON holds every unit as a multipolygon of one part; GEOS's grid search on a
    # long strip costs its length over the precision, so such a strip must be settled by erosion like its polygon
    import archivist.analysis.arrays as arrays

    x0, y0 = 419_000.0, 6_501_000.0
    path = LineString([(x0, y0), (x0 + 300, y0 + 20), (x0 + 420, y0 + 250), (x0 + 800, y0 + 260)])
    strip = shapely.buffer(path, 1.0, cap_style="flat", join_style="mitre")  # 2 m wide, wider at its mitred bends
    calls = _count_grid_searches(monkeypatch)
    one = arrays.widths(np.array([shapely.MultiPolygon([strip])], dtype=object), 0.5)
    alone = arrays.widths(np.array([strip], dtype=object), 0.5)
    monkeypatch.undo()
    assert sum(calls) == 0
    assert one[0] == alone[0]
    _assert_within_precision([strip], 0.5)  # against GEOS's grid search at a finer precision


def test_union_by_group_is_geos_union_of_each_group_in_batches():
    # against GEOS's union_all of each group's values alone (shapely), with groups of very different sizes split
    # over several tables (a batch of 64 cells) and an empty group
    rng = np.random.default_rng(3)
    values = shapely.buffer(shapely.points(rng.uniform(0, 100, (300, 2))), rng.uniform(0.5, 6.0, 300), quad_segs=4)
    groups = np.r_[np.zeros(150, dtype=np.int64), rng.integers(1, 9, 150)]  # group 0 large; group 9 empty
    from archivist.analysis import arrays

    whole = union_by_group(values, groups, 10)
    for g in range(10):
        assert shapely.equals(whole[g], shapely.union_all(values[groups == g])), g
    assert shapely.is_empty(whole[9])
    small = arrays.TABLE_CELLS
    try:
        arrays.TABLE_CELLS = 64
        batched = union_by_group(values, groups, 10)
    finally:
        arrays.TABLE_CELLS = small
    assert all(shapely.equals_exact(a, b, tolerance=0.0) for a, b in zip(whole, batched))
