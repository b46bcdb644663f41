"""Family `topology`: the unit polygons tile the map.

Outside references: GEOS through shapely (``coverage_invalid_edges`` for which
polygons are implicated, ``intersection``/``difference``/``area`` for the
expected pieces), and worked examples small enough to do by hand. The maps
are built in code (``builders.py``, ``coverage_builders.py``).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyproj
import re
import pytest
import shapely
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st
from shapely.geometry import LineString, Polygon, box

import archivist
from archivist.project import load_project
from builders import copy_bundle, edit_layer, read_layer
from coverage_builders import FRAME, enlarge, remove, shrink, square_map, synthetic_map, write_map

TOPOLOGY = ["topology"]

def found(root, rule, families=TOPOLOGY):
    return [f for f in archivist.check(root, only=families).findings if f.rule == rule]


# ---------------------------------------------------------------- CASES: one failing and one passing map per rule

def clean(tmp_path):
    return square_map(tmp_path, "clean")


def overlap_1m2(tmp_path):
    # A reaches 0.1 m into B along the whole 10 m edge: 0.1 m x 10 m = 1 m².
    return square_map(tmp_path, "overlap", a=box(0, 0, 5.1, 10), tolerance=0.01)


def gap_2_by_half(tmp_path):
    # a slot 0.5 m deep and 2 m long cut out of A along its edge with B: 0.5 m x 2 m = 1 m².
    a = Polygon([(0, 0), (5, 0), (5, 4), (4.5, 4), (4.5, 6), (5, 6), (5, 10), (0, 10)])
    return square_map(tmp_path, "gap", a=a, tolerance=0.01)


def thin_strip(tmp_path):
    # a 0.4 m strip of unit C between A and B: thinner than 0.5 mm at 1:1 000
    return square_map(
        tmp_path, "strip", a=box(0, 0, 5, 10), b=box(5.4, 0, 10, 10), extra=[box(5, 0, 5.4, 10)], codes=["A", "B", "C"],
        line_rows=[("contact", LineString([(5, 0), (5, 10)])), ("contact", LineString([(5.4, 0), (5.4, 10)])), ("map-boundary", FRAME)],
    )


def wide_strip(tmp_path):
    return square_map(
        tmp_path, "widestrip", a=box(0, 0, 5, 10), b=box(5.6, 0, 10, 10), extra=[box(5, 0, 5.6, 10)], codes=["A", "B", "C"],
        line_rows=[("contact", LineString([(5, 0), (5, 10)])), ("contact", LineString([(5.6, 0), (5.6, 10)])), ("map-boundary", FRAME)],
    )


def nudged_vertex(tmp_path):
    # B's edge along x = 5 gets a vertex at (5.02, 5): a 0.02 m wedge, under the 0.1 m tolerance
    return square_map(tmp_path, "nudged", b=Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5.02, 5)]))


def same_units(tmp_path):
    return square_map(tmp_path, "same", codes=["A", "A"])


def same_units_faulted(tmp_path):
    return square_map(tmp_path, "samefault", codes=["A", "A"], line_rows=[("fault", LineString([(5, 0), (5, 10)])), ("map-boundary", FRAME)])


def beyond_extent(tmp_path):
    # B runs 0.5 m past the 10 m east side of the declared extent: 0.5 m x 10 m = 5 m²
    return square_map(tmp_path, "beyond", b=box(5, 0, 10.5, 10), extent=box(0, 0, 10, 10))


def within_extent(tmp_path):
    return square_map(tmp_path, "within", extent=box(0, 0, 10, 10))


def blank_code(tmp_path):
    return square_map(tmp_path, "blank", codes=["A", " "])


CASES = {
    "unit-overlap": (overlap_1m2, clean),
    "unit-gap": (gap_2_by_half, clean),
    "unit-sliver": (thin_strip, wide_strip),
    "unit-edge-mismatch": (nudged_vertex, clean),
    "unit-same-neighbour": (same_units, same_units_faulted),
    "unit-outside-extent": (beyond_extent, within_extent),
    "unit-code-missing": (blank_code, clean),
}


def test_clean_square_map_has_no_findings(tmp_path):
    assert archivist.check(clean(tmp_path), only=["topology", "linework"]).findings == ()


# ---------------------------------------------------------------- worked examples, arithmetic by hand

def test_square_split_in_two_with_1m2_overlap(tmp_path):
    (f,) = found(overlap_1m2(tmp_path), "unit-overlap")
    assert f.measure == 1.0  # 0.1 m x 10 m
    assert f.features == ("1", "2")
    assert "1.00 m²" in f.message and "(A)" in f.message and "(B)" in f.message and "0.10 m wide" in f.message
    assert shapely.equals(shapely.from_wkt(f.wkt), box(5, 0, 5.1, 10))
    assert (f.x, f.y) == (5.05, 5.0)  # the middle of the 0.1 m x 10 m strip


def test_same_overlap_under_the_tolerance_is_an_edge_mismatch_not_an_overlap(tmp_path):
    # with the default tolerance of 0.1 m at 1:1 000 a 0.1 m overlap is digitising misfit
    root = square_map(tmp_path, a=box(0, 0, 5.1, 10))
    assert found(root, "unit-overlap") == []
    (f,) = found(root, "unit-edge-mismatch")
    assert f.features == ("1", "2")
    assert f.measure == 10.0  # the whole 10 m edge
    assert "up to 0.10 m apart" in f.message


def test_2m_by_half_metre_gap(tmp_path):
    root = gap_2_by_half(tmp_path)
    report = archivist.check(root, only=TOPOLOGY)
    (f,) = [f for f in report.findings if f.rule == "unit-gap"]
    assert f.measure == 1.0  # 2 m x 0.5 m
    assert f.features == ("1", "2")
    assert shapely.equals(shapely.from_wkt(f.wkt), box(4.5, 4, 5, 6))
    assert (f.x, f.y) == (4.75, 5.0)
    assert "0.50 m wide" in f.message
    assert any("outer boundary of the unit polygons" in n for n in report.notes)
    # the slot's corners are vertices of A only: they belong to the gap, not to an edge mismatch
    assert [f.rule for f in report.findings] == ["unit-gap"]


def test_gap_with_declared_extent_and_note(tmp_path):
    a = Polygon([(0, 0), (5, 0), (5, 4), (4.5, 4), (4.5, 6), (5, 6), (5, 10), (0, 10)])
    root = square_map(tmp_path, a=a, extent=box(0, 0, 10, 10), tolerance=0.01)
    report = archivist.check(root, only=TOPOLOGY)
    assert [f.measure for f in report.findings if f.rule == "unit-gap"] == [1.0]
    assert any("the extent layer (map.gpkg:extent)" in n for n in report.notes)


def test_gap_open_to_the_map_edge_needs_the_extent(tmp_path):
    # B stops 1 m short of the north edge: 5 m x 1 m = 5 m² unmapped, open to the edge
    b = box(5, 0, 10, 9)
    assert found(square_map(tmp_path, "noext", b=b), "unit-gap") == []
    (f,) = found(square_map(tmp_path, "ext", b=b, extent=box(0, 0, 10, 10)), "unit-gap")
    assert f.measure == 5.0 and f.features == ("1", "2") and "at the map edge" in f.message  # A borders it along x = 5


def test_gap_around_an_island_is_found_though_the_island_lies_where_the_gap_face_has_its_centre(tmp_path):
    # A has a 2 m x 2 m hole at [1, 3] x [4, 6] that nothing fills but a 1 m x 1 m island C at its centre: the gap
    # is 4 - 1 = 3 m² (by hand). The hole's edges and the island's are traced apart (their boxes do not meet); the
    # face of the hole alone has its point on the surface at (2, 5), inside the island, so the point is taken from
    # the face less the island
    a = box(0, 0, 5, 10).difference(box(1, 4, 3, 6))
    (f,) = found(square_map(tmp_path, a=a, extra=[box(1.5, 4.5, 2.5, 5.5)], codes=["A", "B", "C"], tolerance=0.01),
                 "unit-gap")
    assert f.measure == 3.0 and f.features == ("1", "3")


def test_gap_closed_by_polygons_touching_at_points(tmp_path):
    # B's west edge bends 0.3 m east at (5.3, 5): the wedge between A and B is closed only by
    # two polygons meeting at points; its area is 10 m x 0.3 m / 2 = 1.5 m²
    b = Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5.3, 5)])
    (f,) = found(square_map(tmp_path, b=b, tolerance=0.01), "unit-gap")
    assert f.measure == 1.5
    assert f.features == ("1", "2")


def test_island_drawn_over_its_host_without_a_hole(tmp_path):
    # a 2 m x 2 m island of B inside A, but A was not cut: 4 m² of overlap
    root = square_map(tmp_path, extra=[box(1, 4, 3, 6)], codes=["A", "B", "B"])
    (f,) = found(root, "unit-overlap")
    assert f.measure == 4.0 and f.features == ("1", "3")


def test_duplicate_polygon_overlaps_fully(tmp_path):
    root = square_map(tmp_path, extra=[box(5, 0, 10, 10)], codes=["A", "B", "B"])
    (f,) = found(root, "unit-overlap")
    assert f.measure == 50.0 and f.features == ("2", "3")


def test_nudged_vertex_is_an_edge_mismatch_of_known_length(tmp_path):
    (f,) = found(nudged_vertex(tmp_path), "unit-edge-mismatch")
    assert f.features == ("1", "2")
    # the wedge runs the whole 10 m edge; its widest point is 0.02 m (the inscribed circle of a
    # 10 m x 0.02 m triangle is 0.02 m across to within 0.01 %)
    assert f.measure == pytest.approx(10.0, abs=0.005)
    assert "up to 0.02 m apart" in f.message


def test_collinear_edge_with_a_vertex_on_one_side_only(tmp_path):
    # B's edge along x = 5 has a vertex at (5, 5) that A lacks: no area defect, but not a coverage
    b = Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5, 5)])
    (f,) = found(square_map(tmp_path, b=b), "unit-edge-mismatch")
    assert f.features == ("1", "2") and f.measure == 10.0
    assert "vertices are not shared" in f.message
    inv = shapely.coverage_invalid_edges([box(0, 0, 5, 10), b])  # GEOS agrees: both edges invalid
    assert not shapely.is_empty(inv).any()


def test_edge_off_the_extent_by_less_than_the_tolerance(tmp_path):
    # B's east edge 0.05 m beyond the extent, A's west edge 0.05 m inside it (tolerance 0.1 m):
    # within the tolerance of the frame, as a line within the tolerance of a boundary lies on it
    root = square_map(tmp_path, a=box(0.05, 0, 5, 10), b=box(5, 0, 10.05, 10), extent=box(0, 0, 10, 10))
    assert archivist.check(root, only=TOPOLOGY).findings == ()
    root = square_map(tmp_path, "wider", a=box(0.5, 0, 5, 10), b=box(5, 0, 10.5, 10), extent=box(0, 0, 10, 10))
    assert sorted((f.rule, f.measure) for f in archivist.check(root, only=TOPOLOGY).findings) == [
        ("unit-gap", 5.0), ("unit-outside-extent", 5.0)]  # 0.5 m x 10 m each


def test_outside_extent_area(tmp_path):
    (f,) = found(beyond_extent(tmp_path), "unit-outside-extent")
    assert f.measure == 5.0 and f.features == ("2",)
    assert shapely.equals(shapely.from_wkt(f.wkt), box(10, 0, 10.5, 10))


def test_same_neighbour_length_and_fault_exemption(tmp_path):
    (f,) = found(same_units(tmp_path), "unit-same-neighbour")
    assert f.measure == 10.0 and f.features == ("1", "2") and "both A" in f.message
    assert found(same_units_faulted(tmp_path), "unit-same-neighbour") == []


def test_same_neighbour_partly_faulted(tmp_path):
    # the fault covers 6 m of the 10 m edge: 4 m of boundary have no fault, minus 0.1 m tolerance at its end
    rows = [("fault", LineString([(5, 0), (5, 6)])), ("contact", LineString([(5, 6), (5, 10)])), ("map-boundary", FRAME)]
    (f,) = found(square_map(tmp_path, codes=["A", "A"], line_rows=rows), "unit-same-neighbour")
    assert f.measure == pytest.approx(3.9)


def test_same_code_is_case_and_space_blind_only_for_spaces(tmp_path):
    assert found(square_map(tmp_path, "sp", codes=["A", " A "]), "unit-same-neighbour")


def test_thin_and_small_slivers(tmp_path):
    (f,) = found(thin_strip(tmp_path), "unit-sliver")
    assert f.features == ("3",) and f.measure == 4.0  # 0.4 m x 10 m
    assert "at most 0.40 m wide" in f.message
    # a 0.9 m x 0.9 m island is 0.81 m², under 1 m², though wider than 0.5 m
    root = square_map(tmp_path, "tiny", a=box(0, 0, 5, 10).difference(box(1, 1, 1.9, 1.9)), extra=[box(1, 1, 1.9, 1.9)], codes=["A", "B", "C"],
                      line_rows=[("contact", LineString([(5, 0), (5, 10)])), ("contact", box(1, 1, 1.9, 1.9).exterior), ("map-boundary", FRAME)])
    (f,) = found(root, "unit-sliver")
    assert f.features == ("3",) and f.measure == 0.81 and "smallest legible 1.00 m²" in f.message


def test_thin_screen_keeps_every_thin_polygon():
    # The screen skips polygons with area > perimeter*r + n*(pi/2)*r² for r = half the width.
    # For polygons whose inscribed circle (GEOS) is narrower than the width the bound must hold.
    rng = np.random.default_rng(3)
    for _ in range(200):
        pts = rng.uniform(0, 10, (rng.integers(3, 12), 2))
        poly = shapely.make_valid(Polygon(pts).buffer(0))
        for g in shapely.get_parts(poly):
            if g.geom_type != "Polygon" or g.area == 0:
                continue
            r = shapely.maximum_inscribed_circle(g, 1e-4).length
            assert g.area <= g.length * r + shapely.get_num_coordinates(g) * (np.pi / 2) * r * r + 1e-6


def test_code_missing(tmp_path):
    (f,) = found(blank_code(tmp_path), "unit-code-missing")
    assert f.features == ("2",) and "field 'unit'" in f.message and f.measure == 50.0


def test_invalid_polygon_is_repaired_for_the_coverage(tmp_path):
    # a bow-tie B is reported by geometry-invalid; the topology checks run on its repair
    bow = Polygon([(5, 0), (10, 10), (10, 0), (5, 10)])
    report = archivist.check(square_map(tmp_path, b=bow), only=["topology", "metadata"])
    assert any(f.rule == "geometry-invalid" for f in report.findings)
    assert any(f.rule == "unit-gap" for f in report.findings) is False  # the repair leaves the two wedges open to the edge


# ---------------------------------------------------------------- property tests against GEOS

def _check_map(smap, tmp, name="m", families=TOPOLOGY):
    root = write_map(smap, Path(tmp) / name)
    return archivist.check(root, only=families)


def _ids(smap) -> np.ndarray:
    return np.arange(1, len(smap.units) + 1).astype(str)  # write_map numbers features from 1


def _geos_implicated(smap) -> set[str]:
    inv = shapely.coverage_invalid_edges(smap.units.geometry.values)
    return set(_ids(smap)[~shapely.is_empty(inv)])


# no shrinking: each example writes and checks a map, and a failure prints its inputs as they are
SETTINGS = settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow],
                    phases=(Phase.explicit, Phase.reuse, Phase.generate))


@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000))
def test_clean_random_coverages_give_no_findings(n, seed):
    smap = synthetic_map(n, seed=seed, splay_fraction=0.05)
    with tempfile.TemporaryDirectory() as tmp:
        report = _check_map(smap, tmp, families=["topology", "linework"])
    assert report.findings == ()
    assert _geos_implicated(smap) == set()


def test_clean_synthetic_map_of_some_thousands_of_polygons(tmp_path):
    # the benchmark's generator at a size the default test run affords; the benchmark itself
    # checks 10^4 to 10^6 polygons the same way
    smap = synthetic_map(3000, seed=11)
    report = archivist.check(write_map(smap, tmp_path / "m"), only=["topology", "linework"])
    assert len(smap.units) > 2900 and report.findings == ()


@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000), factor=st.floats(3, 15))
# the grown polygon covers a wide piece (an overlap) and a 0.59 m wide one (an edge mismatch) of one neighbour
@example(n=13, seed=871, pick=4549, factor=10.149234128620673)
def test_injected_overlap_found_where_geos_says(n, seed, pick, factor):
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    k = pick % len(smap.units)
    d = factor * smap.tolerance
    bad = enlarge(smap, k, d)
    with tempfile.TemporaryDirectory() as tmp:
        report = _check_map(bad, tmp)
    ids = _ids(bad)
    overlaps = [f for f in report.findings if f.rule == "unit-overlap"]
    misfits = [f for f in report.findings if f.rule == "unit-edge-mismatch"]
    assert overlaps, "an overlap of several tolerances was not reported"
    grown = bad.units.geometry.values[k]
    for f in overlaps:
        assert ids[k] in f.features  # every overlap is the grown polygon's
        other = int(f.features[1] if f.features[0] == ids[k] else f.features[0]) - 1
        piece = shapely.from_wkt(f.wkt)
        expected = shapely.intersection(grown, smap.units.geometry.values[other])
        # at its place: the reported piece lies in the GEOS intersection (rounded to the mm)
        assert shapely.difference(piece, expected.buffer(0.002)).area == pytest.approx(0, abs=1e-6)
        assert f.measure <= expected.area + 0.01
    # each piece of a neighbour that the grown polygon covers (GEOS intersection, polygonal parts) is
    # reported as the unit-overlap docstring says: wider than the tolerance, an overlap of its area;
    # no wider, an edge mismatch of the pair. The rule's width is the diameter of GEOS's largest
    # inscribed circle found to tol/20 (topology.widths), so within 2 x (tol/20 + the reference's
    # tol/1000) of the tolerance a piece may go either way.
    by_other: dict[str, float] = {}
    for f in overlaps:
        other = f.features[1] if f.features[0] == ids[k] else f.features[0]
        by_other[other] = by_other.get(other, 0.0) + f.measure
    tol = smap.tolerance
    slack = 2 * (tol / 20 + tol / 1000)
    for j, g in enumerate(smap.units.geometry.values):
        if j == k:
            continue
        parts = [p for p in shapely.get_parts(shapely.intersection(grown, g)) if p.geom_type == "Polygon" and p.area > 0]
        if not parts:
            continue
        width = 2 * shapely.length(shapely.maximum_inscribed_circle(parts, tol / 1000))
        area = shapely.area(parts)
        wide, not_thin = area[width > tol + slack].sum(), area[width > tol - slack].sum()
        assert wide - 0.01 <= by_other.get(ids[j], 0.0) <= not_thin + 0.01
        if (width <= tol - slack).any():
            assert any({ids[k], ids[j]} <= set(f.features) for f in misfits)
    # every polygon GEOS implicates is named in an overlap or a misfit ...
    named = {fid for f in overlaps + misfits for fid in f.features}
    geos = _geos_implicated(bad)
    assert geos <= named
    # ... and a polygon GEOS leaves out on the whole layer (its edge inside the grown polygon is
    # matched exactly by a third polygon) is implicated by GEOS on the pair alone
    g = bad.units.geometry.values
    for extra in named - geos:
        e = int(extra) - 1
        assert not shapely.is_empty(shapely.coverage_invalid_edges([g[e], g[k]]))[0]


@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000))
def test_removed_polygon_is_one_gap_of_its_shape(n, seed, pick):
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    k = pick % len(smap.units)
    hole = smap.units.geometry.values[k]
    # the polygons that shared a stretch of edge with it (GEOS intersection of the boundaries)
    neighbours = {str(j + 1) for j, g in enumerate(smap.units.geometry.values)
                  if j != k and shapely.intersection(g.boundary, hole.boundary).length > 0}
    bad = remove(smap, k)
    with tempfile.TemporaryDirectory() as tmp:
        root = write_map(bad, Path(tmp) / "m")
        ids = load_project(root).layers["units"].ids
        report = archivist.check(root, only=TOPOLOGY)
    gaps = [f for f in report.findings if f.rule == "unit-gap"]
    assert {f.rule for f in report.findings} == {"unit-gap"}
    # one gap per part of the removed polygon (a polygon can have two parts), of its shape and area
    assert len(gaps) == shapely.get_num_geometries(hole)
    assert sum(f.measure for f in gaps) == pytest.approx(hole.area, abs=0.002 * len(gaps))
    holes = shapely.union_all([shapely.from_wkt(f.wkt) for f in gaps])
    assert shapely.symmetric_difference(holes, hole).area < hole.length * 0.001  # the WKT is rounded to the mm
    # the neighbours, renumbered: write_map numbers the remaining features from 1
    old_to_new = {str(j + 1): str(j + 1 - (j > k)) for j in range(len(smap.units)) if j != k}
    assert {u for f in gaps for u in f.features} == {old_to_new[j] for j in neighbours}
    assert set(ids) >= {u for f in gaps for u in f.features}
    assert _geos_implicated(bad) == set()  # GEOS sees no invalid edge either: a gap is not a misfit


@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000), factor=st.floats(3, 10))
def test_shrunk_polygon_leaves_a_gap_ring_of_its_lost_area(n, seed, pick, factor):
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    k = pick % len(smap.units)
    d = factor * smap.tolerance
    bad = shrink(smap, k, d)
    lost = smap.units.geometry.values[k].area - bad.units.geometry.values[k].area
    with tempfile.TemporaryDirectory() as tmp:
        report = _check_map(bad, tmp)
    gaps = [f for f in report.findings if f.rule == "unit-gap"]
    assert sum(f.measure for f in gaps) == pytest.approx(lost, rel=1e-4, abs=0.01)
    assert all(str(k + 1) in f.features for f in gaps)
    assert not [f for f in report.findings if f.rule in ("unit-overlap", "unit-edge-mismatch")]
    assert _geos_implicated(bad) == set()


# ---------------------------------------------------------------- the example bundle and its broken variants

def test_example_bundle_is_clean():
    report = archivist.check(copy_bundle(Path(tempfile.mkdtemp())), only=["topology", "linework"])
    assert report.findings == ()
    assert "Map extent: the extent layer (map.gpkg:extent)." in report.notes


def _bundle_units(tmp_path):
    root = copy_bundle(tmp_path)
    return root, read_layer(root, "map.gpkg", "units")


def _longest_contact_pair(frame: gpd.GeoDataFrame):
    """Two polygons with different units sharing the longest edge, and that edge."""
    best = None
    geoms = frame.geometry.values
    tree = shapely.STRtree(geoms)
    for i, j in zip(*tree.query(geoms, predicate="touches")):
        if i < j and frame.unit.iloc[i] != frame.unit.iloc[j]:
            shared = shapely.line_merge(shapely.intersection(geoms[i].boundary, geoms[j].boundary))
            if best is None or shared.length > best[2].length:
                best = (i, j, shared)
    return best


def test_bundle_overlap_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    i, j, shared = _longest_contact_pair(frame)
    mid = shared.interpolate(0.5, normalized=True)
    bite = shapely.intersection(frame.geometry.values[j], mid.buffer(20))  # a 20 m bite of j, added to i
    expected = bite.area

    def change(df):
        df.loc[df.index[i], "geometry"] = shapely.union(df.geometry.values[i], bite)

    edit_layer(root, "map.gpkg", "units", change)
    report = archivist.check(root, only=TOPOLOGY)
    (f,) = report.findings
    assert f.rule == "unit-overlap"
    assert f.features == (str(frame.index[i]), str(frame.index[j]))
    assert f.measure == pytest.approx(expected, abs=0.01)
    assert shapely.Point(f.x, f.y).distance(mid) < 20


def test_bundle_gap_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    inner = [k for k, g in enumerate(frame.geometry.values) if not g.intersects(box(*frame.total_bounds).exterior)]
    k = min(inner, key=lambda q: frame.geometry.values[q].area)  # the smallest polygon off the map edge
    hole = frame.geometry.values[k]
    edit_layer(root, "map.gpkg", "units", lambda df: df.drop(index=df.index[k]))
    report = archivist.check(root, only=TOPOLOGY)
    (f,) = report.findings
    assert f.rule == "unit-gap" and f.measure == pytest.approx(hole.area, abs=0.01)
    assert shapely.symmetric_difference(shapely.from_wkt(f.wkt), hole).area < 0.5


def test_bundle_sliver_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    i, j, shared = _longest_contact_pair(frame)
    # cut a 5 m wide strip from polygon j along the shared edge and give it the code of neither:
    # at 1:25 000 the narrowest legible width is 12.5 m
    strip = shapely.intersection(frame.geometry.values[j], shapely.buffer(shared, 5, cap_style="flat"))
    other = next(u for u in sorted(set(frame.unit)) if u not in (frame.unit.iloc[i], frame.unit.iloc[j]))

    def change(df):
        df.loc[df.index[j], "geometry"] = shapely.difference(df.geometry.values[j], strip)
        df.loc[99999] = {"unit": other, "geometry": strip}

    edit_layer(root, "map.gpkg", "units", change)
    report = archivist.check(root, only=TOPOLOGY)
    slivers = [f for f in report.findings if f.rule == "unit-sliver"]
    assert [f.features for f in slivers] == [("99999",)]
    assert slivers[0].measure == pytest.approx(strip.area, abs=0.01)
    assert {f.rule for f in report.findings} == {"unit-sliver"}


def test_bundle_edge_mismatch_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    i, j, shared = _longest_contact_pair(frame)
    xy = shapely.get_coordinates(shared)
    vx = xy[len(xy) // 2]  # a vertex in the middle of the shared edge, moved 0.3 m (tolerance 0.5 m) in i only

    def change(df):
        ring = shapely.get_coordinates(df.geometry.values[i].exterior)
        hit = np.all(ring == vx, axis=1)
        ring[hit] += [0.3, 0.0]
        df.loc[df.index[i], "geometry"] = Polygon(ring, [h.coords for h in df.geometry.values[i].interiors])

    edit_layer(root, "map.gpkg", "units", change)
    report = archivist.check(root, only=["topology", "linework"])
    assert report.findings and {f.rule for f in report.findings} == {"unit-edge-mismatch"}
    ids_i = str(frame.index[i])
    for f in report.findings:
        assert ids_i in f.features
        assert shapely.Point(f.x, f.y).distance(shapely.Point(vx)) < 200


def test_bundle_same_neighbour_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    i, j, shared = _longest_contact_pair(frame)
    code = frame.unit.iloc[j]
    edit_layer(root, "map.gpkg", "units", lambda df: df.__setitem__("unit", [code if k == i else u for k, u in enumerate(df.unit)]))
    report = archivist.check(root, only=["topology", "linework"])
    same = [f for f in report.findings if f.rule == "unit-same-neighbour"]
    assert (str(frame.index[i]), str(frame.index[j])) in [f.features for f in same]
    f = next(f for f in same if f.features == (str(frame.index[i]), str(frame.index[j])))
    # the shared edge less the ends within the 0.5 m tolerance of a fault, by GEOS
    faults = read_layer(root, "map.gpkg", "lines").query("kind == 'fault'").geometry.values
    free = shapely.difference(shared, shapely.buffer(shapely.union_all(faults), 0.5))
    assert f.measure == pytest.approx(free.length, abs=0.01)
    assert {f.rule for f in report.findings} <= {"unit-same-neighbour", "line-same-unit-contact"}


def test_bundle_outside_extent_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    x0, y0, x1, y1 = frame.total_bounds
    k = max(range(len(frame)), key=lambda q: frame.geometry.values[q].intersection(box(x0, y1 - 1, x1, y1)).length if False else
            shapely.length(shapely.intersection(frame.geometry.values[q].boundary, LineString([(x0, y1), (x1, y1)]))))
    top = shapely.intersection(frame.geometry.values[k].boundary, LineString([(x0, y1), (x1, y1)]))
    a, b = shapely.bounds(top)[[0, 2]]
    bulge = box(a + 10, y1, b - 10, y1 + 30)  # 30 m past the north edge of the sheet

    def change(df):
        df.loc[df.index[k], "geometry"] = shapely.union(df.geometry.values[k], bulge)

    edit_layer(root, "map.gpkg", "units", change)
    report = archivist.check(root, only=TOPOLOGY)
    (f,) = report.findings
    assert f.rule == "unit-outside-extent" and f.features == (str(frame.index[k]),)
    assert f.measure == pytest.approx(bulge.area, abs=0.01)


def test_bundle_code_missing_variant(tmp_path):
    root, frame = _bundle_units(tmp_path)
    edit_layer(root, "map.gpkg", "units", lambda df: df.__setitem__("unit", ["" if k == 3 else u for k, u in enumerate(df.unit)]))
    report = archivist.check(root, only=["topology", "linework"])
    (f,) = report.findings
    assert f.rule == "unit-code-missing" and f.features == (str(frame.index[3]),)
    assert f.measure == pytest.approx(frame.geometry.values[3].area, abs=0.01)


# ---------------------------------------------------------------- thin gaps, open or closed to the frame, against GEOS
# Reference: GEOS through shapely, ``coverage_invalid_edges(geoms, gap_width=tol)``: the polygons with
# an edge GEOS flags (a misfit, or a gap no wider than ``gap_width``) must each be named by a
# finding of unit-gap, unit-overlap or unit-edge-mismatch; a map GEOS finds valid gives nothing.

TOL = 0.1  # square_map: the default tolerance, 0.1 mm at 1:1 000


def thin_gap_units(kind: str, w: float, depth: float) -> tuple[Polygon, Polygon]:
    """A and B of the 10 m square with a gap ``w`` wide cut out of B along their contact at x = 5.

    ``strip``: the whole 10 m, frame to frame; ``bay``: ``depth`` m from the north frame down;
    ``slot``: ``depth`` m in the middle, closed; ``corner``: B stops ``w`` short of the north frame
    for ``depth`` m, a bay between B and the frame touching A at its corner.
    """
    a = box(0, 0, 5, 10)
    if kind == "strip":
        return a, box(5 + w, 0, 10, 10)
    if kind == "bay":
        return a, Polygon([(5, 0), (10, 0), (10, 10), (5 + w, 10), (5 + w, 10 - depth), (5, 10 - depth)])
    if kind == "slot":
        y0, y1 = 5 - depth / 2, 5 + depth / 2
        return a, Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5, y1), (5 + w, y1), (5 + w, y0), (5, y0)])
    assert kind == "corner"
    return a, Polygon([(5, 0), (10, 0), (10, 10), (5 + depth, 10), (5 + depth, 10 - w), (5, 10 - w)])


def _named_by_gap_rules(report) -> set[str]:
    return {u for f in report.findings if f.rule in ("unit-gap", "unit-overlap", "unit-edge-mismatch") for u in f.features}


GAP_KINDS = st.sampled_from(["strip", "bay", "slot", "corner"])
WIDTHS = st.floats(-3, 1).map(lambda e: TOL * 10 ** e)  # 0.001 to 10 times the tolerance


def _compare_thin_gap_with_geos(root_dir, kind, w, depth, framed):
    a, b = thin_gap_units(kind, w, depth)
    geos = {str(k + 1) for k, g in enumerate(shapely.coverage_invalid_edges([a, b], gap_width=TOL)) if not g.is_empty}
    root = square_map(root_dir, a=a, b=b, extent=box(0, 0, 10, 10) if framed else None)
    report = archivist.check(root, only=TOPOLOGY)
    assert geos <= _named_by_gap_rules(report)  # GEOS coverage_invalid_edges(gap_width=tol)
    kinds = [f.rule for f in report.findings]
    width = w if kind == "strip" else min(w, depth)  # the gap's width: the diameter of its largest inscribed circle
    if width <= TOL * 0.999:
        # a gap no wider than the tolerance between two units is a misfit of their common edge,
        # reported once, whatever it touches (the frame or nothing)
        assert kinds == ["unit-edge-mismatch"] and report.findings[0].features == ("1", "2")
    elif width > TOL * 1.001 and (framed or kind == "slot"):
        # a wider gap inside the extent is one gap of its area (GEOS difference), not also a misfit
        (f,) = report.findings
        assert f.rule == "unit-gap"
        assert f.measure == pytest.approx(shapely.difference(box(0, 0, 10, 10), shapely.union(a, b)).area, abs=0.01)
    elif width > TOL * 1.001:
        # wider than the tolerance and open to a map edge nobody declared: not a gap; where B leaves
        # the contact its vertex is not on A's edge, one misfit (GEOS flags it too, checked above)
        assert kinds == ([] if kind == "strip" else ["unit-edge-mismatch"])


GAP_SETTINGS = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])


@settings(max_examples=4, **GAP_SETTINGS)
@given(kind=GAP_KINDS, w=WIDTHS, depth=st.floats(0.05, 9), framed=st.booleans())
@example(kind="strip", w=0.05, depth=1.0, framed=True)  # the thin strip across the map, once dropped
@example(kind="bay", w=0.05, depth=3.0, framed=True)  # the thin bay open to the frame, once dropped
@example(kind="strip", w=0.0001, depth=1.0, framed=False)
@example(kind="corner", w=0.05, depth=2.0, framed=True)
@example(kind="bay", w=1.0, depth=0.0625, framed=True)  # wide but shallow: thin, at the frame
def test_every_gap_geos_flags_is_reported_open_or_closed(tmp_path_factory, kind, w, depth, framed):
    _compare_thin_gap_with_geos(tmp_path_factory.mktemp("gap"), kind, w, depth, framed)


@pytest.mark.slow
@settings(max_examples=60, **GAP_SETTINGS)
@given(kind=GAP_KINDS, w=WIDTHS, depth=st.floats(0.05, 9), framed=st.booleans())
def test_every_gap_geos_flags_is_reported_many_shapes(tmp_path_factory, kind, w, depth, framed):
    _compare_thin_gap_with_geos(tmp_path_factory.mktemp("gap"), kind, w, depth, framed)


def test_a_thin_hole_inside_one_unit_is_a_gap_not_a_misfit(tmp_path):
    # a 0.05 m x 4 m hole in A that no polygon fills: 0.2 m² of unmapped ground beside A alone
    a = box(0, 0, 5, 10).difference(box(1, 1, 1.05, 5))
    report = archivist.check(square_map(tmp_path, a=a), only=TOPOLOGY)
    (f,) = report.findings
    assert f.rule == "unit-gap" and f.features == ("1",) and f.measure == 0.2
    # GEOS flags no edge (a hole of one polygon is not a coverage defect): the check goes further
    assert shapely.is_empty(shapely.coverage_invalid_edges([a, box(5, 0, 10, 10)], gap_width=TOL)).all()


def test_units_on_the_frame_within_the_tolerance_are_no_gap(tmp_path):
    # A and C lie 0.05 m inside the west side of the extent and share their vertex at (0.05, 5):
    # a valid coverage (GEOS), lying on the frame within the tolerance
    a, c, b = box(0.05, 0, 5, 5), box(0.05, 5, 5, 10), Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5, 5)])
    assert shapely.is_empty(shapely.coverage_invalid_edges([a, b, c], gap_width=TOL)).all()
    assert archivist.check(square_map(tmp_path, a=a, b=b, extra=[c], extent=box(0, 0, 10, 10)), only=TOPOLOGY).findings == ()


def _no_double_reports(report) -> None:
    """No edge-mismatch finding lies within a gap or overlap reported as such (GEOS covers)."""
    pieces = [shapely.from_wkt(f.wkt) for f in report.findings if f.rule in ("unit-gap", "unit-overlap") and f.wkt]
    for f in report.findings:
        if f.rule == "unit-edge-mismatch" and f.wkt and pieces:
            assert not shapely.covered_by(shapely.from_wkt(f.wkt), shapely.buffer(shapely.union_all(pieces), 0.002)), f.message


@pytest.mark.slow
@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000), e=st.floats(-3, 1), framed=st.booleans())
def test_shrunk_polygon_of_any_gap_width_is_found_where_geos_says(n, seed, pick, e, framed):
    # a gap ring 0.001 to 10 tolerances wide around one polygon of a random map, on the frame or inside
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    k = pick % len(smap.units)
    bad = shrink(smap, k, smap.tolerance * 10 ** e)
    with tempfile.TemporaryDirectory() as tmp:
        root = write_map(bad, Path(tmp) / "m", extent=framed)
        report = archivist.check(root, only=TOPOLOGY)
    inv = shapely.coverage_invalid_edges(bad.units.geometry.values, gap_width=smap.tolerance)  # GEOS
    geos = set(_ids(bad)[~shapely.is_empty(inv)])
    assert geos <= _named_by_gap_rules(report)
    assert all(str(k + 1) in f.features for f in report.findings if f.rule in ("unit-gap", "unit-edge-mismatch"))
    assert not [f for f in report.findings if f.rule == "unit-overlap"]
    _no_double_reports(report)


def test_thin_strip_across_a_map_with_no_extent_layer(tmp_path):
    # A and B 0.05 m apart along their whole contact, no extent layer: GEOS (gap_width=0.1) flags both
    a, b = box(0, 0, 5, 10), box(5.05, 0, 10, 10)
    assert not shapely.is_empty(shapely.coverage_invalid_edges([a, b], gap_width=TOL)).any()
    (f,) = archivist.check(square_map(tmp_path, a=a, b=b), only=TOPOLOGY).findings
    assert f.rule == "unit-edge-mismatch" and f.features == ("1", "2") and f.measure == 10.0
    assert "up to 0.05 m apart" in f.message


@pytest.mark.slow
@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000), e=st.floats(-3, 1))
def test_grown_polygon_of_any_overlap_width_is_reported_once(n, seed, pick, e):
    # overlaps 0.001 to 10 tolerances wide: each is an overlap or an edge mismatch, never both
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    k = pick % len(smap.units)
    bad = enlarge(smap, k, smap.tolerance * 10 ** e)
    with tempfile.TemporaryDirectory() as tmp:
        report = _check_map(bad, tmp)
    inv = shapely.coverage_invalid_edges(bad.units.geometry.values, gap_width=smap.tolerance)  # GEOS
    assert set(_ids(bad)[~shapely.is_empty(inv)]) <= _named_by_gap_rules(report)
    _no_double_reports(report)


# ---------------------------------------------------------------- measures on the ground in a geographic CRS

WGS84 = pyproj.Geod(ellps="WGS84")  # reference: pyproj's Geod (geodesics on the WGS 84 ellipsoid, GeographicLib)


def geodesic_area(geom) -> float:
    return abs(WGS84.geometry_area_perimeter(geom)[0])


def geodesic_across(lon0: float, lon1: float, lat: float) -> float:
    return WGS84.inv(lon0, lat, lon1, lat)[2]


def metres_in(message: str, before: str) -> float:
    m = re.search(r"([0-9.e+-]+) m" + re.escape(before), message)
    assert m, message
    return float(m.group(1))


def map_at_60n(tmp_path, name, units, codes):
    from coverage_builders import line_frame
    from builders import tiny_project

    frame = gpd.GeoDataFrame({"unit": codes}, geometry=units, crs="EPSG:4326")
    outline = LineString(shapely.union_all(units).exterior.coords)
    lines = line_frame(("map-boundary", outline)).set_crs("EPSG:4326", allow_override=True)
    return tiny_project(tmp_path, name=name, units=frame, lines=lines, manifest={"map": {"scale": 25000, "crs": "EPSG:4326"}})


def test_areas_and_widths_at_60n_match_the_geodesic_values(tmp_path):
    # 1:25 000 in EPSG:4326 at 60°N: a degree of longitude is about half a degree of latitude on the
    # ground, so one metres-per-degree factor doubles east-west widths and areas.
    overlap = box(10.01, 60.0, 10.0102, 60.01)  # A reaches 0.0002° (about 11 m) into B
    hole = box(10.014, 60.004, 10.015, 60.0045)  # unmapped hole inside B
    sliver = box(10.02, 60.0, 10.02015, 60.01)  # C: about 8.4 m wide, under the 12.5 m legible at 1:25 000
    units = [
        box(10.0, 60.0, 10.0102, 60.01),
        box(10.01, 60.0, 10.02, 60.01).difference(hole),
        sliver,
        box(10.02015, 60.0, 10.03, 60.01),
    ]
    root = map_at_60n(tmp_path, "geo60", units, ["A", "B", "C", "D"])
    report = archivist.check(root, only=TOPOLOGY)
    by_rule = {}
    for f in report.findings:
        by_rule.setdefault(f.rule, []).append(f)
    assert sorted(by_rule) == ["unit-gap", "unit-overlap", "unit-sliver"], [f.message for f in report.findings]

    (ov,) = by_rule["unit-overlap"]
    expect_area = geodesic_area(overlap)  # reference: Geod.geometry_area_perimeter, WGS 84
    assert ov.measure == pytest.approx(expect_area, rel=0.01)
    assert metres_in(ov.message, "² (") == pytest.approx(expect_area, rel=0.01)
    expect_width = geodesic_across(10.01, 10.0102, 60.005)  # reference: Geod.inv, WGS 84
    assert metres_in(ov.message, " wide") == pytest.approx(expect_width, rel=0.01)

    (gap,) = by_rule["unit-gap"]
    assert gap.measure == pytest.approx(geodesic_area(hole), rel=0.01)  # reference: Geod.geometry_area_perimeter
    # the hole is 0.001° x 0.0005°: its inscribed circle spans the north-south 0.0005° (about 56 m)
    assert metres_in(gap.message, " wide") == pytest.approx(WGS84.inv(10.0145, 60.004, 10.0145, 60.0045)[2], rel=0.01)

    (sl,) = by_rule["unit-sliver"]
    assert sl.measure == pytest.approx(geodesic_area(sliver), rel=0.01)  # reference: Geod.geometry_area_perimeter
    assert metres_in(sl.message, " wide") == pytest.approx(geodesic_across(10.02, 10.02015, 60.005), rel=0.01)  # Geod.inv


def test_edge_misfit_at_60n_is_measured_on_the_ground(tmp_path):
    # A reaches 0.00001° of longitude (about 0.56 m at 60°N, under the 2.5 m tolerance) into B along 0.01° of latitude
    units = [box(10.0, 60.0, 10.01001, 60.01), box(10.01, 60.0, 10.02, 60.01)]
    root = map_at_60n(tmp_path, "geo60mis", units, ["A", "B"])
    (mm,) = found(root, "unit-edge-mismatch")
    along = WGS84.inv(10.01, 60.0, 10.01, 60.01)[2]  # reference: Geod.inv, WGS 84 (a meridian arc)
    assert mm.measure == pytest.approx(along, rel=0.01)
    assert metres_in(mm.message, " apart") == pytest.approx(geodesic_across(10.01, 10.01001, 60.005), rel=0.01)  # Geod.inv


def test_polygons_are_named_by_the_mappers_id_then_the_feature_number(tmp_path):
    """With `id_field` on the units layer, messages name a polygon by that id, then its feature number and code."""
    import archivist
    from builders import tiny_project
    from shapely.geometry import box

    units = gpd.GeoDataFrame({"unit": ["A", "B"], "poly_id": ["P-10", "P-20"]},
                             geometry=[box(0, 0, 102, 100), box(100, 0, 200, 100)], crs="EPSG:32633")
    root = tiny_project(tmp_path, units=units, manifest={"layers": {"units": {"id_field": "poly_id"}}})
    (f,) = [f for f in archivist.check(root, rules=["unit-overlap"]).findings]
    # the 2 m x 100 m strip both squares cover (GEOS intersection: 200 m², 2 m wide)
    assert f.message == "Polygons P-10 (feature 1, A) and P-20 (feature 2, B) overlap by 200.00 m² (up to 2.00 m wide)."
    assert f.features == ("P-10", "P-20")
    plain = tiny_project(tmp_path, units=units.drop(columns="poly_id"), name="plain")
    (g,) = [f for f in archivist.check(plain, rules=["unit-overlap"]).findings]
    assert g.message == "Polygons 1 (A) and 2 (B) overlap by 200.00 m² (up to 2.00 m wide)."


@pytest.mark.parametrize("top", [101.0, 102.0], ids=["gap-0.5m", "gap-1.5m"])
def test_a_gap_beyond_a_thin_strip_does_not_swallow_the_misfits_on_its_far_side(tmp_path, top):
    # tests/builders.py's squares at 1:10 000 (tolerance 1 m) under a strip C = [0, 200] x [100, 100.5] whose bottom edge
    # has no vertex at x = 100 (where A's top meets B's; the same line, other vertices) and into which B's top bends
    # 0.3 m; the extent reaches `top`, so bare ground lies above C. The gap runs along C alone and lies within the
    # tolerance of the misfits (across C itself), but it is another defect: a gap and two misfits, found by hand
    # (before, the misfits were taken for leftovers of the gap and not reported)
    from builders import tiny_project

    units = gpd.GeoDataFrame({"unit": ["A", "B", "C"]}, crs="EPSG:32633", geometry=[
        box(0, 0, 100, 100), Polygon([(100, 0), (200, 0), (200, 100), (150, 100.3), (100, 100)]), box(0, 100, 200, 100.5)])
    project = tiny_project(tmp_path, units=units, extent=box(0, 0, 200, top))
    found = [(f.rule, f.features) for f in archivist.check(project).findings if f.rule.startswith("unit-")]
    assert sorted(found) == [("unit-edge-mismatch", ("1", "3")), ("unit-edge-mismatch", ("2", "3")),
                             ("unit-gap", ("3",)), ("unit-sliver", ("3",))]
    gap = next(f for f in archivist.check(project).findings if f.rule == "unit-gap")
    assert gap.measure == pytest.approx(200 * (top - 100.5))  # by hand: 200 m x the bare strip's height
