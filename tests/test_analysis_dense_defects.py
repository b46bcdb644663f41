"""Whole-array versions of the per-defect steps agree with plain per-item loops, on a map full of defects.

The map is the synthetic coverage of ``coverage_builders`` (about 2 000
polygons at 1:5 000, tolerance 0.5 m) with 5 % of its features carrying each
kind of editing defect (``with_defect_density``: contacts 1 m off, lines and
polygons deleted, polygons grown 2 m, vertices moved 1 cm, faults across
contacts), and 2 % of the polygons with extra vertices along their edges. Each whole-array step is compared with the loop it stands for,
written out plainly here: one GEOS call per pair, per free line end, per
stretch. The reference loops use GEOS (through shapely) for every
geometric answer, so both sides rest on the same outside library; the test
is that the bulk formulation changes nothing, not how fast it is.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
import shapely
from hypothesis import given
from hypothesis import strategies as st

from archivist.analysis.arrays import linear_parts
from archivist.analysis.context import CheckContext
from archivist.analysis.coverage import _collinear
from archivist.analysis.nearness import off_unit_boundaries, unit_at
from archivist.project import load_project
from archivist.rules.linework import _nearest_other_line, _off_boundaries
from coverage_builders import synthetic_map, with_defect_density, with_units, write_map


@pytest.fixture(scope="module")
def dense(tmp_path_factory):
    smap, made = with_defect_density(synthetic_map(2000, seed=3, scale=5000), 0.05, seed=3)
    # and 2 % of the polygons with extra vertices on their edges, which their neighbours lack (misaligned edges)
    geoms = smap.units.geometry.values.copy()
    extra = np.random.default_rng(3).choice(len(geoms), len(geoms) // 50, replace=False)
    geoms[extra] = shapely.segmentize(geoms[extra], 15.0)
    smap = with_units(smap, geoms)
    folder = write_map(smap, tmp_path_factory.mktemp("dense") / "map")
    kinds = {d["kind"] for d in made}
    assert kinds == {"buffered", "vertex-moved", "polygon-deleted", "contact-shifted", "fault-crossing", "line-deleted"}
    return CheckContext(load_project(folder))


# ---------------------------------------------------------------- nearest other line (line-dangle)

def nearest_by_loop(geoms, tree, pt, own, tol):
    """One point at a time: widening circles, the smallest distance, ties to the first line in the layer."""
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
    size = max(xmax - xmin, ymax - ymin, 1.0)
    radius = max(10.0 * tol, 1e-3 * size)
    while radius <= 4.0 * size:
        cand = tree.query(shapely.buffer(pt, radius))
        cand = np.sort(cand[cand != own])
        if len(cand):
            d = shapely.distance(pt, geoms[cand])
            j = int(np.argmin(d))
            if d[j] <= radius:
                return int(cand[j]), float(d[j])
        radius *= 4.0
    return -1, np.inf


def assert_nearest_agrees(geoms, pts, own, tol):
    net = SimpleNamespace(geoms=geoms, tree=shapely.STRtree(geoms))
    got_j, got_d = _nearest_other_line(net, pts, own, tol)
    for k, pt in enumerate(pts):
        j, d = nearest_by_loop(geoms, net.tree, pt, own[k], tol)
        assert (int(got_j[k]), float(got_d[k])) == (j, d), k


def test_nearest_other_line_matches_the_loop_at_every_line_end(dense):
    net = dense.line_network()
    ends = np.r_[net.part_off[:-1], net.part_off[1:] - 1]
    own = np.r_[net.part_feat, net.part_feat]
    pick = np.random.default_rng(0).choice(len(ends), 600, replace=False)
    assert_nearest_agrees(net.geoms, shapely.points(net.coords[ends[pick]]), own[pick], dense.tolerance)


coordinate = st.integers(0, 40).map(float)  # whole numbers: many lines at exactly the same distance
segment = st.tuples(coordinate, coordinate, coordinate, coordinate).filter(lambda s: s[:2] != s[2:])


@given(st.lists(segment, min_size=1, max_size=8), st.lists(st.tuples(coordinate, coordinate, st.integers(0, 7)), min_size=1, max_size=6),
       st.sampled_from([0.0, 0.5, 3.0]))
def test_nearest_other_line_matches_the_loop_on_small_maps(segments, points, tol):
    geoms = shapely.linestrings(np.array(segments).reshape(-1, 2, 2))
    pts = shapely.points([(x, y) for x, y, _ in points])
    own = np.array([f % len(geoms) for _, _, f in points], dtype=np.int64)
    assert_nearest_agrees(geoms, pts, own, tol)


# ---------------------------------------------------------------- misaligned common edges (unit-edge-mismatch)

def collinear_by_loop(tree, geoms, implicated, invalid, pair_pieces, unexplained):
    """One pair at a time: common invalid edges, merged, less the pair's overlap pieces."""
    a, b = tree.query(geoms[implicated], predicate="intersects")
    a = implicated[a]
    keep = (a < b) & np.isin(b, implicated)
    out = []
    for p, q in zip(a[keep], b[keep]):
        if (int(p), int(q)) in unexplained:
            continue
        common = shapely.intersection(invalid[int(p)], invalid[int(q)])
        lines, _ = linear_parts(np.array([common], dtype=object))
        if not len(lines):
            continue
        merged = shapely.line_merge(shapely.multilinestrings(lines))
        explained = pair_pieces.get((int(p), int(q)))
        if explained:
            merged = shapely.difference(merged, shapely.union_all(explained))
        length = float(shapely.length(merged))
        if length > 0:
            out.append(((int(p), int(q)), merged, length))
    return out


def test_collinear_edges_match_the_pairwise_loop(dense):
    units, edges, cov = dense.units(), dense.edges(), dense.coverage()
    geoms = units.geoms
    region = edges.suspects
    region = np.union1d(region, units.tree.query(geoms[region], predicate="intersects")[1])
    inv = shapely.coverage_invalid_edges(geoms[region], gap_width=dense.tolerance)
    bad = ~shapely.is_missing(inv) & ~shapely.is_empty(inv)
    implicated = region[bad]
    invalid = dict(zip(implicated.tolist(), inv[bad]))
    pair_pieces: dict[tuple[int, int], list] = {}
    for piece in cov.overlaps:
        pair_pieces.setdefault(piece.units, []).append(piece.geom)
    assert len(implicated) > 100 and len(pair_pieces) > 100
    for unexplained in (set(), set(list(pair_pieces)[:5])):
        got, failures = _collinear(units.tree, geoms, implicated, invalid, pair_pieces, unexplained)
        want = collinear_by_loop(units.tree, geoms, implicated, invalid, pair_pieces, unexplained)
        assert not failures
        assert [(p, shapely.to_wkt(g), n) for p, g, n in got] == [(p, shapely.to_wkt(g), n) for p, g, n in want]
    # and the analysis itself found exactly these
    got, _ = _collinear(units.tree, geoms, implicated, invalid, pair_pieces, set())
    assert [(p, shapely.to_wkt(g)) for p, g, _ in cov.collinear] == [(p, shapely.to_wkt(g)) for p, g, _ in got]
    assert len(cov.collinear) > 10
    assert any(p in pair_pieces for p, _, _ in got)  # some with an overlap of the same pair taken out


# ---------------------------------------------------------------- stretches off the unit boundaries, computed once

def test_off_boundaries_shared_by_two_rules_equal_their_own_computation(dense):
    net, units = dense.line_network(), dense.units()
    se = dense.segment_edges()
    runs, part = net.runs((se < 0) & np.isin(net.seg_roles, ("contact", "fault")))
    own = off_unit_boundaries(runs, units, dense.tolerance)
    shared_runs, shared_part, shared_off = _off_boundaries(dense)
    poly = np.isin(net.part_roles[shared_part], ("contact", "fault"))
    assert len(runs) > 100
    assert shapely.to_wkt(shared_runs[poly]).tolist() == shapely.to_wkt(runs).tolist()
    assert shared_part[poly].tolist() == part.tolist()
    done = ~shapely.is_missing(shared_off[poly])
    assert shapely.to_wkt(shared_off[poly][done]).tolist() == shapely.to_wkt(own[done]).tolist()
    # left out: runs of faults lying wholly inside the units, whose every stretch off the boundaries lies inside a
    # unit (where line-off-boundary lets a fault run), as the full computation shows
    skipped = ~done
    assert skipped.sum() > 10
    assert (net.part_roles[part[skipped]] == "fault").all()
    pieces, _ = linear_parts(own[skipped], dense.tolerance)
    assert len(pieces) > 10
    assert (unit_at(shapely.line_interpolate_point(pieces, 0.5, normalized=True), units) >= 0).all()


# ---------------------------------------------------------------- where a stretch off the boundaries lies (line-off-boundary)

def far_point_by_loop(piece, target):
    """One stretch at a time: its vertices and midpoint, the first farthest from ``target``."""
    pts = shapely.points(np.vstack([shapely.get_coordinates(piece),
                                    shapely.get_coordinates(shapely.line_interpolate_point(piece, 0.5, normalized=True))]))
    return pts[int(np.argmax(shapely.distance(pts, target)))]


def across_by_loop(units, u, foot, tol):
    """One foot at a time: the nearest other polygon within ``tol`` (the first of the layer among equals), or None."""
    near = np.sort(units.tree.query(foot, predicate="dwithin", distance=tol))
    near = near[near != u]
    if not len(near):
        return None
    return int(near[np.argmin(shapely.distance(foot, units.geoms[near]))])


def test_off_boundary_places_match_the_stretch_by_stretch_loop(dense):
    from archivist.rules.linework import _across, _far_points, _first_nearest

    units, tol = dense.units(), dense.tolerance
    off = _off_boundaries(dense)[2]
    pieces, _ = linear_parts(off, tol)
    mid = shapely.line_interpolate_point(pieces, 0.5, normalized=True)
    inside = unit_at(mid, units)
    assert len(pieces) > 100 and (inside >= 0).sum() > 50
    nearest = _first_nearest(units, mid)
    # ties (a point as near two polygons) go to the first of the layer, as the rules' ties do
    assert nearest.tolist() == [int(units.tree.query_nearest(p).min()) for p in mid]
    targets = shapely.boundary(units.geoms[np.where(inside >= 0, inside, nearest)])
    far = _far_points(pieces, targets)
    assert shapely.to_wkt(far).tolist() == [shapely.to_wkt(far_point_by_loop(p, t)) for p, t in zip(pieces, targets)]
    feet = shapely.get_point(shapely.shortest_line(targets, far), 0)
    words = _across(units, inside, feet, tol)
    for u, foot, said in zip(inside.tolist(), feet, words):
        if u < 0:
            assert said == ""
            continue
        v = across_by_loop(units, u, foot, tol)
        assert said == (f"between {units.code(u)} and {units.code(v)}" if v is not None else f"of {units.label(u)} along the map edge")
    assert any(w.startswith("between") for w in words)


# ---------------------------------------------------------------- stretches two lines share (line-duplicate)

def near_shared_bounds(run, line, own_ends, tol, step):
    """One pair at a time, by GEOS's distance sampled ``step`` apart along the run: the length of it within ``tol``
    of the line and farther than ``5 tol`` from where they meet or end, as steps with both ends in (a lower bound)
    and with either end in (an upper bound)."""
    junctions = shapely.union_all([shapely.intersection(run, line), shapely.boundary(line), shapely.multipoints(own_ends)])
    line = shapely.from_wkb(shapely.to_wkb(line))  # a copy, prepared here
    shapely.prepare(line)
    shapely.prepare(junctions)
    lo = hi = 0.0
    for part in shapely.get_parts(run):
        xy = shapely.get_coordinates(shapely.segmentize(part, step))
        pts = shapely.points(xy)
        ok = (shapely.distance(pts, line) <= tol) & (shapely.distance(pts, junctions) > 5.0 * tol)
        seg = np.hypot(*np.diff(xy, axis=0).T)
        lo, hi = lo + float(seg[ok[:-1] & ok[1:]].sum()), hi + float(seg[ok[:-1] | ok[1:]].sum())
    return lo, hi


def test_near_shared_agrees_with_geos_distance_along_every_pair(dense):
    from archivist.analysis.messages import ABOVE
    from archivist.rules.linework import _near_shared

    net, tol = dense.line_network(), dense.tolerance
    runs, rpart = net.runs(dense.segment_edges() < 0)
    ri, fj = net.tree.query(runs, predicate="dwithin", distance=tol)
    keep = fj != net.part_feat[rpart[ri]]
    ri, fj = ri[keep], fj[keep]
    # and every run against a copy of its own line moved a quarter of the tolerance east: a trace drawn twice
    copies = shapely.transform(net.geoms, lambda xy: xy + [tol / 4, 0.0])
    lines = np.concatenate([net.geoms, copies])
    r_all = np.arange(len(runs))
    ri, fj = np.r_[ri, r_all], np.r_[fj, len(net.geoms) + net.part_feat[rpart[r_all]]]
    assert len(ri) > 100
    got = shapely.length(_near_shared(runs[ri], lines, fj, net.part_ends(rpart[ri]), tol))
    step = tol / 25
    bounds = np.array([near_shared_bounds(runs[r], lines[f], net.part_ends(rpart[[r]])[0], tol, step) for r, f in zip(ri, fj)])
    long = got > tol * ABOVE
    # where the run's part within tol is itself no longer than tol, it is returned whole (too short either way)
    assert (bounds[long, 0] - 1e-9 <= got[long]).all() and (got[long] <= bounds[long, 1] + 1e-9).all()
    assert (bounds[~long, 0] <= tol * ABOVE + 2 * step).all()
    assert long.any() and (~long).any()


# ---------------------------------------------------------------- a free end near its own line (line-dangle)

def near_own_by_loop(net, p, at_start, away, pt, tol):
    """One end at a time: the other parts of its line and its own part cut by ``shapely.ops.substring``."""
    from shapely.ops import substring

    part = net.part(p)
    length = part.length
    f = net.part_feat[p]
    first, last = np.searchsorted(net.part_feat, [f, f + 1])
    rest = [net.part(q) for q in range(first, last) if q != p]
    if length > away:
        rest.append(substring(part, away, length) if at_start else substring(part, 0, length - away))
    return bool(rest) and bool(shapely.dwithin(pt, shapely.geometrycollections(rest), tol))


def assert_near_own_agrees(net, tol):
    from archivist.analysis.lines import loose_ends
    from archivist.rules.linework import _near_own_line

    found = loose_ends(net, ("contact", "boundary", "fault", "other", "unknown"), tol)
    away = 2.0 * tol + 1e-9 * np.maximum(np.abs(net.coords[found.coord]).max(axis=1), 1.0)
    got = _near_own_line(net, found.part, found.at_start, away, found.points, tol)
    expected = [near_own_by_loop(net, int(p), bool(s), float(a), pt, tol)
                for p, s, a, pt in zip(found.part, found.at_start, away, found.points)]
    assert got.tolist() == expected
    return got


def test_ends_near_their_own_line_match_the_substring_loop(dense):
    got = assert_near_own_agrees(dense.line_network(), dense.tolerance)
    assert len(got) > 50


def test_ends_near_their_own_line_on_hooks_loops_and_parts(tmp_path):
    from coverage_builders import square_map

    from archivist.analysis.lines import build_line_network

    lines = [
        shapely.linestrings([[0, 0], [10, 0], [10, 10], [0.3, 0.2]]),  # ends 0.36 from its own start: a near-closed loop
        shapely.linestrings([[20, 0], [30, 0], [30, 5], [20.2, 0.6], [25, 8]]),  # passes its own start, then leaves
        shapely.multilinestrings([[[40, 0], [50, 0]], [[50.3, 0.1], [60, 0]]]),  # two parts, a gap of 0.32
        shapely.linestrings([[70, 0], [70.5, 0], [71, 0]]),  # shorter than the cut
        shapely.segmentize(shapely.linestrings([[80, 0], [90, 0], [90, 10], [80, 0.4]]), 0.7),  # many vertices
    ]
    rows = [("contact", g) for g in lines]
    net = build_line_network(load_project(square_map(tmp_path, "own", line_rows=rows)))
    got = assert_near_own_agrees(net, 0.5)
    assert got.any() and not got.all()
