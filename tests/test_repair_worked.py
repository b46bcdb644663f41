"""Worked examples of the polygon repairs, with the values worked by hand beside them.

Every map is a 10 m x 10 m square at 1:1 000 (one map millimetre is 1 m of
ground): the default tolerance (0.1 mm) is 0.1 m, the sliver thresholds of
``[checks]`` are 1 m² and 0.5 m (1 mm², 0.5 mm), and the default largest
overlap a repair gives away is 1 mm² = 1 m². The legend of tests/builders.py
makes A Norian (younger) and B Carnian (older) (ICS chart).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from shapely.geometry import LineString, box

sys.path.insert(0, str(Path(__file__).resolve().parent))

from builders import edit_layer, edit_manifest, tiny_project, tree_digest  # noqa: E402
from coverage_builders import FRAME, line_frame  # noqa: E402

from archivist.engine import check  # noqa: E402
from archivist.repair.api import repair  # noqa: E402

TOPOLOGY = {"unit-overlap", "unit-gap", "unit-sliver", "unit-edge-mismatch", "unit-same-neighbour"}


def square(tmp_path: Path, geoms, codes, *, repair_keys=None, checks=None, name="square", lines=None) -> Path:
    manifest: dict = {"map": {"scale": 1000}}
    if repair_keys:
        manifest["repair"] = repair_keys
    if checks:
        manifest["checks"] = checks
    units = gpd.GeoDataFrame({"unit": codes}, geometry=list(geoms), crs="EPSG:32633")
    rows = lines if lines is not None else [("contact", LineString([(5, 0), (5, 10)])), ("map-boundary", FRAME)]
    return tiny_project(tmp_path, name=name, units=units, lines=line_frame(*rows), extent=box(0, 0, 10, 10), manifest=manifest)


def copy_units(out: Path) -> gpd.GeoDataFrame:
    return pyogrio.read_dataframe(out / "map.gpkg", layer="units", fid_as_index=True)


def topology_rules(project: Path) -> dict[str, int]:
    found: dict[str, int] = {}
    for f in check(project).findings:
        if f.rule in TOPOLOGY:
            found[f.rule] = found.get(f.rule, 0) + 1
    return found


def test_overlap_of_one_square_metre_goes_to_the_larger_polygon(tmp_path):
    # A = [0, 5.1] x [0, 10] (51 m²) overlaps B = [5, 10] x [0, 10] (50 m²) by 0.1 m x 10 m = 1.00 m² (by hand).
    # overlap = "larger": A keeps it; B becomes [5.1, 10] x [0, 10] = 49.00 m².
    # The limit is 1 mm² at 1:1 000 = 1 m², so an overlap of exactly 1 m² is given away.
    project = square(tmp_path, [box(0, 0, 5.1, 10), box(5, 0, 10, 10)], ["A", "B"], repair_keys={"overlap": "larger"})
    result = repair(project, tmp_path / "out")
    overlaps = [c for c in result.changes if c.repair == "resolve-overlaps"]
    assert len(overlaps) == 1
    c = overlaps[0]
    assert c.features_before == ("1", "2") and c.units == ("A", "B")
    assert c.area_moved == pytest.approx(1.0)
    assert c.max_shift == pytest.approx(0.1)
    units = copy_units(tmp_path / "out")
    assert units.geometry.area.tolist() == pytest.approx([51.0, 49.0])
    assert shapely.equals(units.geometry.iloc[1], box(5.1, 0, 10, 10))
    assert shapely.coverage_is_valid(units.geometry.values)  # GEOS
    assert topology_rules(tmp_path / "out") == {}


def test_overlap_by_age_goes_to_the_younger_unit(tmp_path):
    # the same overlap under overlap = "younger": B is Carnian (older), A Norian (younger), so A keeps it;
    # under "older" B keeps it and A becomes [0, 5] x [0, 10] = 50 m² (by hand).
    project = square(tmp_path, [box(0, 0, 5.1, 10), box(5, 0, 10, 10)], ["A", "B"], repair_keys={"overlap": "older"})
    result = repair(project, tmp_path / "out")
    c = [c for c in result.changes if c.repair == "resolve-overlaps"][0]
    assert c.features_before == ("2", "1") and "older" in c.note
    assert copy_units(tmp_path / "out").geometry.area.tolist() == pytest.approx([50.0, 50.0])


@pytest.mark.parametrize("x, by_lines, keeper, areas", [
    (5.0, True, "2", [50.0, 50.0]),  # the contact draws B's edge: B keeps the overlap, A is cut back to it
    (5.1, True, "1", [51.0, 49.0]),  # it draws A's edge: A keeps it
    (5.0, False, "1", [51.0, 49.0]),  # overlap_by_lines = false: the rule alone (larger: A)
])
def test_an_overlap_goes_to_the_polygon_whose_edge_a_contact_draws(tmp_path, x, by_lines, keeper, areas):
    # A = [0, 5.1] x [0, 10] overlaps B = [5, 10] x [0, 10] by 0.1 m x 10 m = 1.00 m², 0.1 m wide, at a 0.05 m
    # tolerance: a contact along one edge lies farther than the tolerance from the other. The line says where the
    # boundary is, before the declared rule (larger: A); the areas by hand
    project = square(tmp_path, [box(0, 0, 5.1, 10), box(5, 0, 10, 10)], ["A", "B"], checks={"tolerance": 0.05},
                     repair_keys={"overlap": "larger", "overlap_by_lines": by_lines},
                     lines=[("contact", LineString([(x, 0), (x, 10)])), ("map-boundary", FRAME)])
    result = repair(project, tmp_path / "out")
    (c,) = [c for c in result.changes if c.repair == "resolve-overlaps"]
    assert c.features_before[0] == keeper and c.area_moved == pytest.approx(1.0)
    assert ("a line drawn along its edge" in c.note) == by_lines
    assert copy_units(tmp_path / "out").geometry.area.tolist() == pytest.approx(areas)
    assert result.settings.overlap_by_lines is by_lines
    # with the line deciding, the contact lies on the copy's boundary; by the rule alone, B's edge moved 0.1 m from it
    linework = sorted(f.rule for f in check(tmp_path / "out").findings if f.family == "linework")
    assert linework == ([] if by_lines else ["boundary-without-line", "line-off-boundary"])


def test_overlap_above_the_limit_is_left(tmp_path):
    # A = [0, 5.3] x [0, 10] overlaps B by 0.3 m x 10 m = 3 m² > 1 m²: left and listed, both polygons unchanged.
    project = square(tmp_path, [box(0, 0, 5.3, 10), box(5, 0, 10, 10)], ["A", "B"])
    result = repair(project, tmp_path / "out")
    assert [c for c in result.changes if c.repair == "resolve-overlaps"] == []
    left = [x for x in result.left if x.repair == "resolve-overlaps"]
    assert len(left) == 1 and left[0].measure == pytest.approx(3.0) and left[0].features == ("1", "2")
    assert copy_units(tmp_path / "out").geometry.area.tolist() == pytest.approx([53.0, 50.0])
    assert result.after.get("unit-overlap") == 1



def test_thin_overlap_above_the_limit_is_left_by_every_repair(tmp_path):
    # A = [0, 5.05] x [0, 10] overlaps B by 0.05 m x 10 m = 0.5 m², above a limit of 0.4 mm² at 1:1 000 = 0.4 m²
    # (by hand), and thinner than the snapping distance (0.1 m): left and listed, so snapping must not give it
    # away either; both polygons unchanged (50.5 m² and 50 m²).
    project = square(tmp_path, [box(0, 0, 5.05, 10), box(5, 0, 10, 10)], ["A", "B"],
                     repair_keys={"overlap_max_area_mm2": 0.4})
    result = repair(project, tmp_path / "out")
    assert [c for c in result.changes if c.features_before[0] in ("1", "2")] == []
    left = [x for x in result.left if x.repair == "resolve-overlaps"]
    assert len(left) == 1 and left[0].measure == pytest.approx(0.5) and left[0].features == ("1", "2")
    assert copy_units(tmp_path / "out").geometry.area.tolist() == pytest.approx([50.5, 50.0])
    assert result.after.get("unit-overlap", 0) + result.after.get("unit-edge-mismatch", 0) >= 1
    assert repair(tmp_path / "out", tmp_path / "again").changes == ()

def test_gap_strip_of_20_cm_goes_to_a_neighbour(tmp_path):
    # A = [0, 4.8] x [0, 10], B = [5, 10] x [0, 10]: a strip 0.2 m x 10 m = 2.00 m² (by hand), 0.2 m wide.
    # gap_width_mm = 0.3 (0.3 m at 1:1 000) lets it be filled; it borders A and B along 10 m each,
    # so the first in the file (A) takes it: A = [0, 5] x [0, 10] = 50 m².
    project = square(tmp_path, [box(0, 0, 4.8, 10), box(5, 0, 10, 10)], ["A", "B"], repair_keys={"gap_width_mm": 0.3})
    result = repair(project, tmp_path / "out")
    gaps = [c for c in result.changes if c.repair == "fill-gaps"]
    assert len(gaps) == 1 and gaps[0].features_after == ("1",) and gaps[0].area_moved == pytest.approx(2.0)
    units = copy_units(tmp_path / "out")
    assert units.geometry.area.tolist() == pytest.approx([50.0, 50.0])
    assert shapely.coverage_is_valid(units.geometry.values)
    assert topology_rules(tmp_path / "out") == {}


def test_gap_wider_than_the_gap_width_is_left(tmp_path):
    # the same strip with the default gap width (the tolerance, 0.1 m): 0.2 m is wider, left and listed
    project = square(tmp_path, [box(0, 0, 4.8, 10), box(5, 0, 10, 10)], ["A", "B"])
    result = repair(project, tmp_path / "out")
    left = [x for x in result.left if x.repair == "fill-gaps"]
    assert len(left) == 1 and left[0].measure == pytest.approx(2.0)
    assert [c for c in result.changes if c.repair == "fill-gaps"] == []


def test_sliver_of_3_square_metres_merges_into_the_longest_neighbour(tmp_path):
    # C = [5, 5.3] x [0, 10]: 3.00 m² (by hand) but 0.3 m wide < 0.5 m: a sliver. It shares 10 m with A
    # and 5 m with each of B1 = [5.3, 10] x [0, 5] and B2 = [5.3, 10] x [5, 10], so A takes it: 50 + 3 = 53 m².
    geoms = [box(0, 0, 5, 10), box(5.3, 0, 10, 5), box(5.3, 5, 10, 10), box(5, 0, 5.3, 10)]
    project = square(tmp_path, geoms, ["A", "B", "C", "D"])
    # The contact x = 5 ran between A and C: inside A afterwards, it is taken out (before, the copy kept it, and its
    # check found it "9.80 m off the unit boundaries, up to 0.30 m west of the boundary between A and B");
    # draw-missing-lines gives A's new edge x = 5.3 its contact
    result = repair(project, tmp_path / "out")
    merged = [c for c in result.changes if c.repair == "merge-slivers"]
    assert [c.layer for c in merged] == ["units", "lines"]
    assert merged[0].features_before == ("1", "4") and merged[0].features_after == ("1",)
    assert merged[0].units == ("A", "D") and merged[0].area_moved == pytest.approx(3.0)
    assert merged[1].features_before == ("1",) and merged[1].features_after == () and merged[1].after is None
    assert shapely.equals(merged[1].before, LineString([(5, 0), (5, 10)]))
    assert merged[1].note == "contact along a sliver merged into its neighbour: removed (nothing of it lay elsewhere)"
    units = copy_units(tmp_path / "out")
    assert units.index.tolist() == [1, 2, 3]
    assert units.geometry.area.tolist() == pytest.approx([53.0, 23.5, 23.5])
    assert units.unit.tolist() == ["A", "B", "C"]
    assert [f.rule for f in check(tmp_path / "out").findings if f.family in ("topology", "linework")] == []


def test_a_contact_drawn_twice_around_a_sliver_keeps_the_trace_on_the_new_boundary(tmp_path):
    # the contact digitised twice, x = 5 and x = 5.3, and the polygons built from both: a sliver C = [5, 5.3] x [0, 10]
    # between A and B (3 m², 0.3 m wide). C shares 10 m with each; the tie goes to the first, A. The trace x = 5 lay
    # between A and C and is taken out; x = 5.3, now between A and B, stays as drawn. Before, the copy had both
    # traces 0.3 m apart inside the tolerance of each other, and its check found them sharing the boundary
    geoms = [box(0, 0, 5, 10), box(5.3, 0, 10, 10), box(5, 0, 5.3, 10)]
    lines = [("contact", LineString([(5, 0), (5, 10)])), ("contact", LineString([(5.3, 0), (5.3, 10)])),
             ("map-boundary", FRAME)]
    project = square(tmp_path, geoms, ["A", "B", "C"], lines=lines)
    result = repair(project, tmp_path / "out")
    assert [(c.repair, c.layer, c.features_before, c.features_after) for c in result.changes] == [
        ("merge-slivers", "units", ("1", "3"), ("1",)), ("merge-slivers", "lines", ("1",), ())]
    kept = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines", fid_as_index=True)
    assert kept.index.tolist() == [2, 3] and shapely.equals(kept.geometry.loc[2], LineString([(5.3, 0), (5.3, 10)]))
    assert [f.rule for f in check(tmp_path / "out").findings if f.family in ("topology", "linework")] == []
    assert repair(tmp_path / "out", None, dry_run=True).changes == ()


@pytest.mark.parametrize("nothing", [shapely.Polygon(), None], ids=["empty", "missing"])
def test_a_polygon_filed_without_geometry_is_left_as_filed_by_every_repair(tmp_path, nothing):
    # The overlap of A = [0, 5.1] x [0, 10] with C = [5, 5.3] x [0, 10] (1.00 m², by hand) and the sliver C, beside a
    # row E whose geometry is empty or missing (geometry-missing reports it). resolve-overlaps dropped an empty row
    # with the polygons it had cut away whole, with no entry in the log, and merge-slivers listed it as a sliver
    # with no neighbour: no repair touches it now, and every row gone from the copy is one a logged merge removed
    geoms = [box(0, 0, 5.1, 10), box(5.3, 0, 10, 5), box(5.3, 5, 10, 10), box(5, 0, 5.3, 10), nothing]
    project = square(tmp_path, geoms, ["A", "B", "C", "D", "E"])
    result = repair(project, tmp_path / "out")
    assert {c.repair for c in result.changes} >= {"resolve-overlaps", "merge-slivers"}
    assert not [c for c in result.changes if "5" in c.features_before] and not [x for x in result.left if "5" in x.features]
    units = copy_units(tmp_path / "out")
    assert units.loc[5, "unit"] == "E" and (units.geometry.loc[5] is None or units.geometry.loc[5].is_empty)
    removed = {f for c in result.changes if c.layer == "units" for f in c.features_before if f not in c.features_after}
    assert {"1", "2", "3", "4", "5"} - {str(i) for i in units.index} == removed == {"4"}
    found = {f.rule for f in check(tmp_path / "out").findings}
    assert "geometry-missing" in found and not found & TOPOLOGY


def test_sliver_merges_into_a_neighbour_of_its_own_unit(tmp_path):
    # the same sliver coded B: B1 (also B) touches it, so it goes there although A shares more: 23.5 + 3 = 26.5 m²
    geoms = [box(0, 0, 5, 10), box(5.3, 0, 10, 5), box(5.3, 5, 10, 10), box(5, 0, 5.3, 10)]
    project = square(tmp_path, geoms, ["A", "B", "C", "B"])
    result = repair(project, tmp_path / "out")
    merged = [c for c in result.changes if c.repair == "merge-slivers"]
    assert merged[0].features_before == ("2", "4")
    assert copy_units(tmp_path / "out").geometry.area.tolist() == pytest.approx([50.0, 26.5, 23.5])


def _strip_map(tmp_path: Path, name: str = "strip") -> Path:
    # tests/builders.py's squares at 1:10 000 (tolerance 1 m, slivers under 5 m wide): C = [0, 200] x [100, 100.5] along
    # their tops with one bottom edge, no vertex at x = 100 where A's top meets B's, and B's vertex 0.3 m into C;
    # D = [300, 300.3] x [0, 10], apart from all, an island
    units = gpd.GeoDataFrame({"unit": ["A", "B", "C", "D"]}, crs="EPSG:32633", geometry=[
        box(0, 0, 100, 100), shapely.Polygon([(100, 0), (200, 0), (200, 100), (150, 100.3), (100, 100)]),
        box(0, 100, 200, 100.5), box(300, 0, 300.3, 10)])
    return tiny_project(tmp_path, name=name, units=units)


def test_a_strip_along_the_map_edge_narrower_than_the_tolerance_is_noded_and_merged(tmp_path):
    # resolve-overlaps gives B's bump to C (by hand 100 x 0.3 / 2 = 15 m²); snapping at 1 m would fold C (0.5 m wide)
    # away, at half and a quarter of it C keeps its shape and gets a vertex at (100, 100): nothing moves. GEOS's
    # thin-gap test flags C's top edge all the same (0.5 m from A's and B's tops across C itself; no ground is
    # uncovered), which held C as filed before. Then C shares 100 m with A and 100 m with B: the tie goes to A,
    # 10 000 + 100 = 10 100 m²; B 10 015 - 15 = 10 000 m². D, an island, is left
    result = repair(_strip_map(tmp_path), tmp_path / "out")
    done = [(c.repair, c.features_before, c.features_after) for c in result.changes if c.repair != "draw-missing-lines"]
    assert done == [("resolve-overlaps", ("3", "2"), ("3", "2")), ("snap-edges", ("3",), ("3",)),
                    ("merge-slivers", ("1", "3"), ("1",))]
    snapped = next(c for c in result.changes if c.repair == "snap-edges")
    assert snapped.max_shift == 0.0 and shapely.equals(snapped.after, box(0, 100, 200, 100.5))
    assert [(x.repair, x.features, x.reason) for x in result.left] == [
        ("merge-slivers", ("4",), "a sliver sharing no edge with another polygon")]
    units = copy_units(tmp_path / "out")
    assert units.index.tolist() == [1, 2, 4]
    assert units.geometry.area.tolist() == pytest.approx([10100.0, 10000.0, 3.0])
    assert shapely.coverage_is_valid(units.geometry.values[:2])
    assert topology_rules(tmp_path / "out") == {"unit-sliver": 1}  # D
    assert repair(tmp_path / "out", None, dry_run=True).changes == ()


@pytest.mark.parametrize("extent, above", [
    (box(0, 0, 200, 100.5), False),  # the strip on the map frame
    (box(0, 0, 200, 101), False),  # 0.5 m of bare ground above it: fill-gaps gives that to the strip first
    (None, True),  # a polygon above the strip, without a vertex at x = 100
], ids=["on-frame", "gap-above", "between"])
def test_a_strip_narrower_than_the_tolerance_ends_in_a_clean_copy(tmp_path, extent, above):
    # the strip C of _strip_map (0.5 m wide at a 1 m tolerance) with a declared extent, or between the squares and a
    # polygon above it: each copy has no topology finding and a second run changes nothing. Before snap-edges
    # looked for uncovered ground behind GEOS's thin-gap flag, the first two kept two edge mismatches and the sliver
    units = gpd.GeoDataFrame({"unit": ["A", "B", "C"] + (["D"] if above else [])}, crs="EPSG:32633", geometry=[
        box(0, 0, 100, 100), shapely.Polygon([(100, 0), (200, 0), (200, 100), (150, 100.3), (100, 100)]),
        box(0, 100, 200, 100.5)] + ([box(0, 100.5, 200, 200)] if above else []))
    project = tiny_project(tmp_path, units=units, **({"extent": extent} if extent is not None else {}))
    assert topology_rules(project).get("unit-edge-mismatch", 0) >= 1
    result = repair(project, tmp_path / "out")
    assert result.left == () and "merge-slivers" in {c.repair for c in result.changes}
    assert topology_rules(tmp_path / "out") == {}
    assert repair(tmp_path / "out", None, dry_run=True).changes == ()


def test_a_sliver_left_says_whether_it_runs_along_a_neighbour_or_touches_none(tmp_path):
    # merge-slivers alone on the same map: C shares no twinned edge, yet its bottom runs 100 m along A's top (GEOS's
    # intersection of the boundaries; B's top still bends up into C): not "sharing no edge". D touches nothing
    result = repair(_strip_map(tmp_path), None, dry_run=True, only=["merge-slivers"])
    assert result.changes == ()
    assert {x.features: x.reason for x in result.left} == {
        ("3",): "a sliver whose edge runs along polygon 1's without sharing its vertices (snap-edges could not snap "
                "them): not merged, merge it by hand",
        ("4",): "a sliver sharing no edge with another polygon"}


def test_uncovered_ground_is_looked_for_where_geos_flags_a_thin_gap():
    from archivist.repair.polygons import _uncovered_along as uncovered

    def _uncovered_along(geoms, others, tol, extent=None):  # GEOS's own flags first, as snap-edges asks
        flagged = shapely.coverage_invalid_edges(geoms, gap_width=tol)
        return uncovered(flagged[~shapely.is_empty(flagged)], geoms, others, tol, extent)

    a, b = box(0, 0, 100, 100), box(100, 0, 200, 100)
    strip = shapely.Polygon([(0, 100), (0, 100.5), (200, 100.5), (200, 100), (100, 100), (0, 100)])
    geoms = np.array([a, b, strip], dtype=object)
    # GEOS (the reference): a valid coverage, yet its thin-gap test at 1 m flags the strip's top edge
    assert shapely.coverage_is_valid(geoms) and not shapely.coverage_is_valid(geoms, gap_width=1.0)
    assert shapely.equals(shapely.coverage_invalid_edges(geoms, gap_width=1.0)[2], LineString([(0, 100.5), (200, 100.5)]))
    assert not _uncovered_along(geoms, geoms, 1.0)  # nothing uncovered: the strip lies along the outside
    assert _uncovered_along(geoms, geoms, 1.0, extent=box(0, 0, 200, 101))  # 0.5 m of the extent above it is bare
    # a real thin gap: 0.3 m between two squares, flagged by GEOS and uncovered
    apart = np.array([box(0, 0, 10, 10), box(10.3, 0, 20, 10)], dtype=object)
    assert not shapely.coverage_is_valid(apart, gap_width=1.0) and _uncovered_along(apart, apart, 1.0, box(0, 0, 20, 10))
    # without an extent a gap counts where the polygons near it enclose it: a 0.3 m slot cut into a square's middle
    ring = np.array([box(0, 0, 10, 10).difference(box(4, 2, 4.3, 8)), box(4.05, 2, 4.25, 8)], dtype=object)
    assert _uncovered_along(ring, ring, 1.0)


def test_same_unit_neighbours_dissolve_unless_a_fault_runs_between(tmp_path):
    geoms = [box(0, 0, 5, 10), box(5, 0, 10, 10)]
    project = square(tmp_path, geoms, ["A", "A"])
    result = repair(project, tmp_path / "out")
    d = [c for c in result.changes if c.repair == "dissolve-same-unit"]
    # the polygons dissolved, and the contact drawn between them (x = 5, all of it along the dissolved edge) removed
    assert [(c.layer, c.features_before, c.features_after) for c in d] == [("units", ("1", "2"), ("1",)), ("lines", ("1",), ())]
    assert d[0].area_moved == pytest.approx(50.0) and d[1].after is None
    assert shapely.equals(d[1].before, LineString([(5, 0), (5, 10)]))
    units = copy_units(tmp_path / "out")
    assert len(units) == 1 and shapely.equals(units.geometry.iloc[0], box(0, 0, 10, 10))
    lines = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines")
    assert list(lines.kind) == ["map-boundary"]
    assert not [f for f in check(tmp_path / "out").findings if f.rule.startswith("line-")]
    faulted = square(tmp_path, geoms, ["A", "A"], name="faulted",
                     lines=[("fault", LineString([(5, 0), (5, 10)])), ("map-boundary", FRAME)])
    assert [c for c in repair(faulted, tmp_path / "out2").changes if c.repair == "dissolve-same-unit"] == []


def test_same_unit_neighbours_whose_other_attributes_differ_are_left_and_listed(tmp_path):
    # A = [0, 5] x [0, 5] observed, its neighbour [5, 10] x [0, 5] inferred, and a third A = [0, 10] x [5, 7.5]
    # above both with no value: dissolving kept the first polygon's fields and dropped the others' (the copy said
    # "observed" for ground mapped as inferred). The two B = [0, 5] and [5, 10] x [7.5, 10], both observed, still go
    geoms = [box(0, 0, 5, 5), box(5, 0, 10, 5), box(0, 5, 10, 7.5), box(0, 7.5, 5, 10), box(5, 7.5, 10, 10)]
    project = square(tmp_path, geoms, ["A", "A", "A", "B", "B"])
    edit_layer(project, "map.gpkg", "units", lambda f: f.assign(
        confidence=["observed", "inferred", None, "observed", "observed"], poly_id=["P1", "P2", "P3", "P4", "P5"]))
    edit_manifest(project, lambda d: d["layers"]["units"].update({"id_field": "poly_id"}))
    result = repair(project, tmp_path / "out", only=["dissolve-same-unit"])
    d = [c for c in result.changes if c.repair == "dissolve-same-unit" and c.layer == "units"]
    assert [(c.features_before, c.features_after) for c in d] == [(("P4", "P5"), ("P4",))]  # both observed: one body
    assert sorted((x.features, x.reason) for x in result.left) == [
        (("P1", "P2"), "same unit, no fault between them, but confidence differs ('observed' / 'inferred'): not "
                       "dissolved, the geologist decides whether they are one body"),
        (("P1", "P3"), "same unit, no fault between them, but confidence differs ('observed' / no value): not "
                       "dissolved, the geologist decides whether they are one body"),
        (("P2", "P3"), "same unit, no fault between them, but confidence differs ('inferred' / no value): not "
                       "dissolved, the geologist decides whether they are one body"),
    ]
    units = copy_units(tmp_path / "out")
    assert units.poly_id.tolist() == ["P1", "P2", "P3", "P4"]
    assert units.confidence.tolist()[:2] == ["observed", "inferred"] and units.confidence.isna().tolist()[2]
    assert shapely.equals(units.geometry.iloc[3], box(0, 7.5, 10, 10))


def test_a_contact_between_dissolved_polygons_is_taken_out_along_them_only(tmp_path):
    # A [0, 5] x [0, 10] and A [5, 10] x [0, 10] over B [0, 10] x [10, 15]: one contact runs up x = 5 from the frame
    # to (5, 10), then along y = 10 to the frame. After the dissolve its stretch x = 5 lies inside one polygon of A:
    # taken out (segment by segment, by hand: the first segment of the line), the stretch along y = 10, between A
    # and B, kept as drawn.
    geoms = [box(0, 0, 5, 10), box(5, 0, 10, 10), box(0, 10, 10, 15)]
    frame = LineString([(0, 0), (10, 0), (10, 15), (0, 15), (0, 0)])
    contact = LineString([(5, 0), (5, 10), (10, 10)])
    west = LineString([(0, 10), (5, 10)])
    lines = [("contact", contact), ("contact", west), ("map-boundary", frame)]
    project = tiny_project(tmp_path, name="bent", units=gpd.GeoDataFrame({"unit": ["A", "A", "B"]}, geometry=geoms,
                                                                           crs="EPSG:32633"),
                           lines=line_frame(*lines), extent=box(0, 0, 10, 15), manifest={"map": {"scale": 1000}})
    result = repair(project, tmp_path / "out")
    d = [c for c in result.changes if c.repair == "dissolve-same-unit"]
    assert [(c.layer, c.features_before, c.features_after) for c in d] == [("units", ("1", "2"), ("1",)), ("lines", ("1",), ("1",))]
    assert shapely.equals(d[1].after, LineString([(5, 10), (10, 10)]))
    assert d[1].max_shift == 0.0  # nothing of what is left moved
    copy = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines")
    assert shapely.equals(copy.geometry.iloc[0], LineString([(5, 10), (10, 10)]))
    assert shapely.equals(copy.geometry.iloc[1], west)  # not along the dissolved edge: untouched
    found = {f.rule for f in check(tmp_path / "out").findings}
    assert not {r for r in found if r.startswith("line-") or r.startswith("unit-")}, found


def test_misaligned_vertices_snap_within_the_tolerance(tmp_path):
    # B's west edge has an extra vertex 0.04 m off the shared edge x = 5: snapped (moves <= 0.1 m)
    b = shapely.Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5.04, 5)])
    project = square(tmp_path, [box(0, 0, 5, 10), b], ["A", "B"])
    assert topology_rules(project)
    result = repair(project, tmp_path / "out")
    assert {c.repair for c in result.changes} == {"resolve-overlaps", "snap-edges"} or {c.repair for c in result.changes} <= {
        "resolve-overlaps", "fill-gaps", "snap-edges"}
    assert all(c.max_shift <= 0.1 + 1e-9 for c in result.changes)
    units = copy_units(tmp_path / "out")
    assert shapely.coverage_is_valid(units.geometry.values)
    assert topology_rules(tmp_path / "out") == {}


def test_project_is_byte_identical_and_the_run_is_idempotent(tmp_path):
    project = square(tmp_path, [box(0, 0, 5.1, 10), box(5, 0, 10, 10)], ["A", "B"])
    digest = tree_digest(project)
    repair(project, tmp_path / "out")
    assert tree_digest(project) == digest
    again = repair(tmp_path / "out", tmp_path / "out2")
    assert again.changes == () and again.left == ()
    log = json.loads((tmp_path / "out" / "repair-log.json").read_text(encoding="utf-8"))
    assert len(log["changes"]) >= 1


def test_overlap_whose_cut_geos_cannot_make_on_one_side_goes_to_the_other(tmp_path, monkeypatch):
    # GEOS may stop on one polygon of an overlap ("TopologyException: found non-noded intersection", met on a
    # generated 10^5-polygon map). Simulated here: cutting anything out of A = [0, 5.1] x [0, 10] fails. The
    # overlap of 1.00 m² (by hand) must still be resolved from B's side, as "larger" says, and the run go on.
    from shapely.errors import GEOSException

    import archivist.repair.polygons as repair_polygons

    a_square = box(0, 0, 5.1, 10)
    real = shapely.difference

    def difference(a, b, **kwargs):
        if any(g is not None and shapely.equals(g, a_square) for g in np.atleast_1d(np.asarray(a, dtype=object)).ravel()):
            raise GEOSException("TopologyException: found non-noded intersection (simulated)")
        return real(a, b, **kwargs)

    class Shapely:
        def __getattr__(self, name):
            return difference if name == "difference" else getattr(shapely, name)

    project = square(tmp_path, [a_square, box(5, 0, 10, 10)], ["A", "B"], repair_keys={"overlap": "larger"})
    monkeypatch.setattr(repair_polygons, "shapely", Shapely())
    result = repair(project, tmp_path / "out")
    monkeypatch.undo()
    overlaps = [c for c in result.changes if c.repair == "resolve-overlaps"]
    assert len(overlaps) == 1 and overlaps[0].area_moved == pytest.approx(1.0)
    units = copy_units(tmp_path / "out")
    assert units.geometry.area.tolist() == pytest.approx([51.0, 49.0])
    assert shapely.coverage_is_valid(units.geometry.values)  # GEOS


def test_overlap_whose_cut_geos_cannot_make_on_either_side_is_left_and_said(tmp_path, monkeypatch):
    # cutting anything out of either square fails (simulated as above): the 1.00 m² overlap (by hand) is left as
    # filed, listed with GEOS's message and its area, and the polygons keep their areas (51 and 50 m²)
    from shapely.errors import GEOSException

    import archivist.repair.polygons as repair_polygons

    squares = [box(0, 0, 5.1, 10), box(5, 0, 10, 10)]
    real = shapely.difference

    def difference(a, b, **kwargs):
        if any(g is not None and any(shapely.equals(g, q) for q in squares) for g in np.atleast_1d(np.asarray(a, dtype=object)).ravel()):
            raise GEOSException("TopologyException: found non-noded intersection (simulated)")
        return real(a, b, **kwargs)

    class Shapely:
        def __getattr__(self, name):
            return difference if name == "difference" else getattr(shapely, name)

    project = square(tmp_path, squares, ["A", "B"], repair_keys={"overlap": "larger"})
    monkeypatch.setattr(repair_polygons, "shapely", Shapely())
    result = repair(project, None, dry_run=True, only=["resolve-overlaps"])
    monkeypatch.undo()
    assert [c for c in result.changes if c.repair == "resolve-overlaps"] == []
    (left,) = [x for x in result.left if x.repair == "resolve-overlaps"]
    assert "GEOS could not cut the overlap out of it" in left.reason and "(simulated)" in left.reason
    assert left.measure == pytest.approx(1.0) and shapely.area(left.geometry) == pytest.approx(1.0)
    assert left.features == ("2",)  # B, the smaller, loses the overlap under "larger"


def test_a_rounding_sliver_of_a_gap_is_never_listed_as_left():
    """What the differences that divide a gap leave below the noise floor of overlay rounding is no part left.

    At 10^5 polygons the repair listed "part of a gap farther than the gap width" for a 146 m sliver of
    2.4e-9 m², about 3e-11 m wide on average; the floor at these coordinates is 16 ulps, 2.3e-8 m
    (:func:`archivist.analysis.coverage.noise_floor`). A strip 1 mm wide is a real part and stays.
    """
    from archivist.analysis.coverage import noise_floor
    from archivist.repair.polygons import above_noise

    a, b = (428341.87, 6530800.78), (428326.76, 6530872.20)
    mid = ((a[0] + b[0]) / 2, (a[1] + b[1]) / 2)
    apex = (np.nextafter(mid[0], np.inf), mid[1])  # one unit in the last place off the line
    sliver = shapely.Polygon([a, apex, b])
    strip = box(428300.0, 6530800.0, 428310.0, 6530800.001)
    assert 0 < shapely.area(sliver) < 1e-8
    kept = above_noise(np.array([sliver, strip], dtype=object), noise_floor(6530872.20))
    assert list(kept) == [strip]


def test_snap_edges_starts_only_from_polygons_with_a_real_misfit():
    # a 2 x 2 grid of 5 m squares: every edge inside has its twin and the frame edges have no polygon beyond them,
    # so nothing is a misfit; one vertex of the lower-left square moved 0.05 m into its right neighbour (the
    # tolerance is 0.1 m) makes both of them misfits, and the other two stay out
    from archivist.analysis.halfedges import build_edges
    from archivist.analysis.polygons import Units
    from archivist.repair.polygons import _misfits

    grid = [box(0, 0, 5, 5), box(5, 0, 10, 5), box(0, 5, 5, 10), box(5, 5, 10, 10)]

    def misfits(geoms):
        g = np.array(geoms, dtype=object)
        units = Units(np.arange(len(g)), g, np.array(["1", "2", "3", "4"], dtype=object), None, "units")
        return _misfits(units, build_edges(g), 0.1).tolist()

    assert misfits(grid) == []
    nudged = list(grid)
    nudged[0] = shapely.Polygon([(0, 0), (5, 0), (5.05, 2.5), (5, 5), (0, 5)])
    assert misfits(nudged) == [0, 1]


def test_snap_edges_leaves_a_polygon_far_from_every_misfit_edge_as_drawn(tmp_path):
    # A = [0, 4] x [0, 10] with the vertex (4.05, 2.5) 0.05 m into B = [4, 7] x [0, 10] (tolerance 0.1 m): their edges
    # misfit. C = [7, 10] x [0, 5] and D = [7, 10] x [5, 10] touch B and share an edge with a bump 0.03 m high and
    # 0.04 m wide, drawn alike on both sides: no misfit, but its vertices lie within the snapping distance of each
    # other, and GEOS's cleaning folds the bump away wherever it cleans C and D (asked below). C and D lie 3 m from
    # the misfit edges: only A and B are cleaned, and C and D keep every vertex as drawn.
    bump = [(8.5, 5), (8.52, 5.03), (8.54, 5)]
    a = shapely.Polygon([(0, 0), (4, 0), (4.05, 2.5), (4, 10), (0, 10)])
    c = shapely.Polygon([(7, 0), (10, 0), (10, 5), *bump[::-1], (7, 5)])
    d = shapely.Polygon([(7, 5), *bump, (10, 5), (10, 10), (7, 10)])
    b = shapely.Polygon([(4, 0), (7, 0), (7, 5), (7, 10), (4, 10)])  # with C's and D's corner: no misfit there
    geoms = [a, b, c, d]
    cleaned = shapely.coverage_clean(np.array(geoms, dtype=object), snapping_distance=0.1)  # GEOS, all four at once
    assert not shapely.equals_exact(cleaned[2], c, tolerance=0.0) and not shapely.equals_exact(cleaned[3], d, tolerance=0.0)
    project = square(tmp_path, geoms, ["A", "B", "C", "D"])
    result = repair(project, tmp_path / "out", only=["snap-edges"])
    assert result.changes and {f for ch in result.changes for f in ch.features_before} <= {"1", "2"}
    units = copy_units(tmp_path / "out")
    for fid, drawn in ((3, c), (4, d)):
        assert shapely.equals_exact(shapely.get_geometry(units.geometry.loc[fid], 0), drawn, tolerance=0.0) or \
            shapely.equals_exact(units.geometry.loc[fid], drawn, tolerance=0.0)
    assert shapely.coverage_is_valid(units.geometry.values, gap_width=0.1)  # GEOS
    assert repair(tmp_path / "out", tmp_path / "again", only=["snap-edges"]).changes == ()


def _finger_map(width: float):
    # A = [0, 5] x [5, 10] less a finger of C, [4.9, 4.9 + width] x [5, 5.15]; B = [5, 10] x [5, 10] with the
    # vertex (7.5, 4.99) on its bottom edge, 0.01 m into C = [0, 10] x [0, 5] and the finger (tolerance 0.1 m)
    finger = box(4.9, 5, 4.9 + width, 5.15)
    a = shapely.difference(box(0, 5, 5, 10), finger)
    b = shapely.Polygon([(5, 5), (7.5, 4.99), (10, 5), (10, 10), (5, 10)])
    return [a, b, shapely.union(box(0, 0, 10, 5), finger)]


def test_snap_edges_cleans_again_at_a_finer_distance_where_the_full_one_folds_a_finger(tmp_path):
    # The finger of C is 0.04 m wide and 0.15 m long. GEOS's cleaning at the snapping distance (0.1 m) snaps its two
    # sides together and folds it away: C's boundary moves 0.15 m (Hausdorff distance), more than the distance; at
    # half the distance (0.05 m) too; at a quarter (0.025 m) the sides stay apart, B's nudged vertex and C's edge
    # are made one (C's edge takes B's vertex: B is unchanged), and no boundary moves more than 0.01 m (GEOS). So C
    # keeps its finger and gives B the 0.025 m² wedge under the nudged vertex (5 m x 0.01 m / 2, by hand):
    # 50 + 0.006 - 0.025 = 49.981 m².
    project = square(tmp_path, _finger_map(0.04), ["A", "B", "B"])
    result = repair(project, tmp_path / "out", only=["snap-edges"])
    assert result.left == ()
    assert [c.features_before for c in result.changes] == [("3",)]
    assert result.changes[0].max_shift == pytest.approx(0.01)
    units = copy_units(tmp_path / "out")
    assert shapely.coverage_is_valid(units.geometry.values, gap_width=0.1)  # GEOS
    assert units.geometry.loc[3].area == pytest.approx(49.981)
    assert "unit-edge-mismatch" not in topology_rules(tmp_path / "out")
    assert repair(tmp_path / "out", tmp_path / "again", only=["snap-edges"]).changes == ()


def test_snap_edges_holds_a_polygon_every_finer_distance_still_moves_too_far(tmp_path):
    # The finger 0.001 m wide folds at every distance tried (0.1 m, then halved six times down to 0.0015625 m: its
    # sides are nearer than each): C would move 0.15 m, so it keeps its input and is listed, and its misfit with B
    # stays for the geologist.
    project = square(tmp_path, _finger_map(0.001), ["A", "B", "B"])
    result = repair(project, tmp_path / "out", only=["snap-edges"])
    assert [(x.features, round(x.measure, 6)) for x in result.left] == [(("3",), 0.15)]
    units = copy_units(tmp_path / "out")
    assert shapely.equals(units.geometry.loc[3], _finger_map(0.001)[2])
    assert all(c.max_shift <= 0.1 for c in result.changes)
    assert topology_rules(tmp_path / "out").get("unit-edge-mismatch", 0) >= 1


def test_snap_edges_out_of_rounds_leaves_as_drawn_only_the_polygons_linked_to_the_one_still_too_far(tmp_path, monkeypatch):
    # The finger map (x 0 to 10: C's finger folds at every distance tried) beside a square D (x 10 to 20, its edges
    # drawn as its neighbours draw them) and two polygons E, F (x 20 to 30) where F's west edge has a vertex at
    # (25.05, 5), a gap 0.05 m wide (tolerance 0.1 m). With no round of holding allowed, the first cleaning is the
    # last, with no finer tries: C moves too far in it and keeps its input, listed as held, and A and B, which it
    # fitted to C as cleaned, not as kept, keep their input too and are listed. Before, snap-edges then kept every
    # polygon as drawn, E and F too, and listed none. D, which the cleaning left as it was, fits C as drawn; E,
    # linked to A and B by no chain of changed polygons within the snapping distance, stays snapped: its edge takes
    # F's vertex, 0.05 m. (With one round allowed, the cleaning after it fits A and B to C as drawn.)
    import archivist.repair.polygons as polygons

    monkeypatch.setattr(polygons, "MAX_CLEAN_ROUNDS", 0)
    a, b, c = _finger_map(0.001)
    d = shapely.Polygon([(10, 0), (20, 0), (20, 10), (10, 10), (10, 5)])
    e = box(20, 0, 25, 10)
    f = shapely.Polygon([(25, 0), (30, 0), (30, 10), (25, 10), (25.05, 5)])
    units = gpd.GeoDataFrame({"unit": ["A", "B", "B", "A", "B", "A"]}, geometry=[a, b, c, d, e, f], crs="EPSG:32633")
    frame = LineString([(0, 0), (0, 10), (30, 10), (30, 0), (0, 0)])
    project = tiny_project(tmp_path, name="rounds", units=units, extent=box(0, 0, 30, 10),
                           lines=line_frame(("map-boundary", frame)), manifest={"map": {"scale": 1000}})
    result = repair(project, tmp_path / "out", only=["snap-edges"])
    assert [(ch.features_before, round(ch.max_shift, 6)) for ch in result.changes] == [(("5",), 0.05)]
    said = {x.features: x.reason for x in result.left}
    assert said.pop(("3",)).startswith("snapping would move it by 0.150 m")
    assert sorted(said) == [("1",), ("2",)]
    assert all(reason.startswith("left as drawn: snapping still moved a polygon near it") for reason in said.values())
    units_out = copy_units(tmp_path / "out")
    for fid, drawn in ((1, a), (2, b), (3, c), (4, d), (6, f)):
        assert shapely.equals(units_out.geometry.loc[fid], drawn)
    assert shapely.coverage_is_valid(units_out.geometry.loc[[4, 5, 6]].values, gap_width=0.1)  # GEOS


def test_snap_edges_says_a_polygon_narrower_than_the_snapping_distance_is_held_as_it_would_collapse(tmp_path):
    # tests/builders.py's two squares at 1:10 000 (tolerance 1 m), with a strip C = [0, 200] x [100, 100.01] along
    # their top and a vertex of B 5 mm into it: GEOS's cleaning snaps C's two long sides (1 cm apart) together and
    # C comes out empty, at 1 m and at every finer distance tried (down to 1/64 m, 1.6 cm). It is held as filed; the
    # log said it would move "by 0.000 m, more than the snapping distance". (A strip 0.5 m wide keeps its shape at a
    # quarter of the distance: test_a_strip_along_the_map_edge_narrower_than_the_tolerance_is_noded_and_merged)
    units = gpd.GeoDataFrame({"unit": ["A", "B", "C"]}, crs="EPSG:32633", geometry=[
        box(0, 0, 100, 100), shapely.Polygon([(100, 0), (200, 0), (200, 100), (150, 100.005), (100, 100)]),
        box(0, 100, 200, 100.01)])
    result = repair(tiny_project(tmp_path, units=units), None, dry_run=True, only=["snap-edges"])
    assert result.changes == ()
    assert [(x.features, x.reason) for x in result.left] == [
        (("3",), "snapping would collapse it: narrower than the snapping distance")]


def test_a_few_misfits_found_invalid_with_their_neighbours_mean_the_region_is_invalid():
    # snap-edges skips GEOS's validation of its whole region when a few misfit polygons, validated with every
    # polygon within the snapping distance, already have an invalid edge. Held against GEOS's coverage_is_valid of
    # the whole map on Voronoi maps: a vertex moved by less than the distance (invalid), a gap as thin as it
    # between two cells (invalid), a cell shrunk away from the map edge only (valid: the strip is open to the
    # outside), a clean map (valid); whenever the few say invalid, GEOS says so of the whole
    from archivist.repair.polygons import _Near, _surely_invalid

    rng = np.random.default_rng(4)
    frame = box(0, 0, 100, 100)
    cells = shapely.intersection(shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(rng.uniform(0, 100, (40, 2))),
                                                                          extend_to=frame)), frame)
    tol = 0.5

    def nudged(g):
        g = g.copy()
        xy = shapely.get_coordinates(g[3])
        xy[1] += 0.2
        g[3] = shapely.set_coordinates(shapely.from_wkb(shapely.to_wkb(g[3])), xy)
        return g

    def thin_gap(g):
        g = g.copy()
        g[5] = shapely.buffer(g[5], -0.1, join_style="mitre")
        return g

    def edge_only(g):  # a cell on the frame cut back from the frame by a strip 0.2 m wide, nothing else moved
        g = g.copy()
        k = int(np.flatnonzero(shapely.intersects(shapely.boundary(frame), g))[0])
        g[k] = shapely.intersection(g[k], box(0.2, 0.2, 99.8, 99.8))
        return g

    seen = set()
    for make in (lambda g: g, nudged, thin_gap, edge_only):
        g = np.asarray(make(cells), dtype=object)
        near = _Near(g, np.ones(len(g), dtype=bool), tol)
        whole = bool(shapely.coverage_is_valid(g, gap_width=tol))  # GEOS
        for seed in range(len(g)):
            sure = _surely_invalid(near, g, np.array([seed]), tol)
            assert not (sure and whole), (make, seed)
            seen.add((whole, sure))
    assert (False, True) in seen and (True, False) in seen  # both answers met


def test_an_overlap_left_is_given_back_clipped_to_its_neighbour_as_cleaned():
    # polygon 1 keeps an overlap left with polygon 0: a 1 m x 0.05 m strip; polygon 0 as cleaned ends at x = 4.97,
    # 0.03 m short of the strip's far side, so the strip given back is what lies inside it (GEOS intersection):
    # 0.03 m x 1 m = 0.03 m² less, worked by hand
    from archivist.repair.polygons import _fitted_back

    piece = box(4.95, 0, 5.0, 1)
    cleaned = np.array([box(0, 0, 4.97, 10)], dtype=object)  # polygon 0 as cleaned
    names = np.array(["A", "B"], dtype=object)
    back, note, small = _fitted_back(1, [(0, piece)], piece, cleaned, {0: 0}, cleaned.copy(), names)
    assert shapely.equals_exact(shapely.normalize(back), shapely.normalize(box(4.95, 0, 4.97, 1)), 1e-12)
    assert "overlap left with A clipped" in note and "0.03 m² less" in note
    # what is left, 0.02 m x 1 m = 0.02 m², is no larger than a repair gives away when the limit is 0.025 m² (a second
    # run would give it away), and larger when it is 0.01 m²
    assert small is False
    assert _fitted_back(1, [(0, piece)], piece, cleaned, {0: 0}, cleaned.copy(), names, 0.025)[2] is True
    assert _fitted_back(1, [(0, piece)], piece, cleaned, {0: 0}, cleaned.copy(), names, 0.01)[2] is False
    # the neighbour unchanged: given back as it was, and nothing said
    back, note, small = _fitted_back(1, [(0, piece)], piece, np.array([box(0, 0, 5.0, 10)], dtype=object), {0: 0},
                                     cleaned.copy(), names, 1.0)
    assert shapely.equals(back, piece) and note == "" and small is False


def test_length_along_the_overlaps_left_is_measured_against_the_nearby_ones_as_against_them_all():
    # snap-edges measures how much of each invalid segment lies along the boundary of some overlap left for the
    # geologist; against the union of the overlaps that reach the segment's box it gives what the union of them all
    # gives (archivist.analysis.nearness.length_near on each), which cost 21 of 41 s with thousands left
    from archivist.analysis.arrays import segment_lines
    from archivist.analysis.nearness import length_near
    from archivist.repair.polygons import _along_any

    rng = np.random.default_rng(7)
    centres = rng.uniform(0, 100, (60, 2))
    pieces = shapely.buffer(shapely.points(centres), rng.uniform(0.5, 4.0, 60), quad_segs=3)  # some overlap
    rings = shapely.boundary(pieces)
    a, b = rng.uniform(0, 100, (400, 2)), rng.uniform(-5, 5, (400, 2))
    lines = segment_lines(a[:, 0], a[:, 1], a[:, 0] + b[:, 0], a[:, 1] + b[:, 1])
    lines = np.r_[lines, shapely.get_parts(shapely.segmentize(rings[:20], 1.0))]  # and stretches along the rings
    lines = np.concatenate([segment_lines(s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]) for s in
                            [np.stack([shapely.get_coordinates(g)[:-1], shapely.get_coordinates(g)[1:]], axis=1)
                             for g in lines]])
    for dist in (1e-9, 0.05, 0.5):
        whole = length_near(lines, np.full(len(lines), shapely.union_all(rings), dtype=object), dist)
        assert (whole > 0).sum() > 50
        assert np.allclose(_along_any(lines, rings, dist), whole, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("w", [0.45, 0.495, 0.499, 0.501, 0.505, 0.55])
def test_merge_slivers_decides_a_width_as_unit_sliver_does(tmp_path, w):
    # a strip [5, 5 + w] x [0, 10] between two polygons: 10 w m² (over the 1 m² area limit), so only its width
    # (w, by hand) against the 0.5 m sliver width decides; merge-slivers settles most widths by erosion and must
    # merge exactly the strips unit-sliver reports
    geoms = [box(0, 0, 5, 10), box(5 + w, 0, 10, 10), box(5, 0, 5 + w, 10)]
    project = square(tmp_path, geoms, ["A", "B", "C"], name=f"strip-{w}")
    reported = {f.features for f in check(project).findings if f.rule == "unit-sliver"}
    assert reported == ({("3",)} if w < 0.5 else set())
    result = repair(project, tmp_path / f"out-{w}", only=["merge-slivers"])
    assert {c.features_before[-1:] for c in result.changes if c.layer == "units"} == reported
    # the contact x = 5 between A and the strip it takes in goes with it (a line inside the merged polygon)
    assert [c.features_before for c in result.changes if c.layer == "lines"] == ([("1",)] if reported else [])


def test_ground_under_three_polygons_whose_choices_go_round_stays_with_one():
    # A = [0,6]x[0,6], B = [4,10]x[0,6], C = [2,8]x[4,10]; all three cover T = [4,6]x[4,6] (4 m², by hand).
    # Pieces: AB = [4,6]x[0,6] (12 m²) kept by A, BC = [4,8]x[4,6] (8 m²) kept by B, AC = [2,6]x[4,6] (8 m²)
    # kept by C: each polygon keeps one and loses one, so cut as chosen every one of them loses T (a gap of 4 m²
    # where the map had none). Each keeps one overlap: the tie goes to the first, A, which then loses only
    # AC less T = [2,4]x[4,6] (4 m²).
    from archivist.repair.polygons import _kept_once

    geoms = np.array([box(0, 0, 6, 6), box(4, 0, 10, 6), box(2, 4, 8, 10)], dtype=object)
    winner, loser = np.array([0, 1, 2]), np.array([1, 2, 0])
    pieces = np.array([box(4, 0, 6, 6), box(4, 4, 8, 6), box(2, 4, 6, 6)], dtype=object)
    cut = np.array([shapely.difference(g, shapely.union_all(pieces[loser == k])) for k, g in enumerate(geoms)], dtype=object)
    hole = box(4, 4, 6, 6)
    assert shapely.area(shapely.difference(shapely.union_all(geoms), shapely.union_all(cut))) == pytest.approx(4.0)
    kept, new = _kept_once(geoms, cut, winner, loser, pieces, 1e-9)
    assert shapely.area(kept).tolist() == pytest.approx([12.0, 8.0, 4.0])
    assert shapely.equals(kept[2], box(2, 4, 4, 6))
    assert shapely.area(shapely.intersection(new, hole)).tolist() == pytest.approx([4.0, 0.0, 0.0])
    assert shapely.equals(shapely.union_all(new), shapely.union_all(geoms))  # GEOS: no ground lost
    assert shapely.area(new).sum() == pytest.approx(shapely.area(shapely.union_all(geoms)))  # and none held twice
    # where the choices do not go round (A keeps both, B keeps BC), nothing changes
    winner, loser = np.array([0, 1, 0]), np.array([1, 2, 2])
    cut = np.array([shapely.difference(g, shapely.union_all(pieces[loser == k])) for k, g in enumerate(geoms)], dtype=object)
    same, again = _kept_once(geoms, cut, winner, loser, pieces, 1e-9)
    assert same is pieces and again is cut


def test_resolving_overlaps_never_opens_a_gap_on_a_generated_map(tmp_path):
    # A generated map (tests/test_repair_bounds.py) where one polygon grown over two neighbours and a moved vertex
    # make three polygons overlap at a corner with choices that go round: resolve-overlaps alone opened a
    # 0.38 m² gap there, which fill-gaps then filled as though the map had had one.
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from coverage_builders import write_map
    from test_repair_bounds import CORNER_GOING_ROUND, broken

    project = write_map(broken(**CORNER_GOING_ROUND), tmp_path / "map")
    result = repair(project, tmp_path / "out", only=["resolve-overlaps"])
    assert len(result.changes) == 6
    before = pyogrio.read_dataframe(project / "map.gpkg", layer="units").geometry.values
    after = copy_units(tmp_path / "out").geometry.values
    lost = shapely.area(shapely.difference(shapely.union_all(before), shapely.union_all(after)))
    assert lost < 1e-6  # GEOS: the ground the units cover is what it was
    for c in result.changes:  # each piece is out of the polygon that gave it up, and held by exactly one polygon
        loser = after[int(c.features_before[1 if c.note.startswith(f"overlap kept by {c.features_before[0]} ") else 0]) - 1]
        assert shapely.area(shapely.intersection(c.after, loser)) < 1e-6
        held = sum(float(shapely.area(shapely.intersection(c.after, g))) for g in after)
        assert held == pytest.approx(float(shapely.area(c.after)), abs=1e-6)


def _square_with_contact(tmp_path: Path, contact) -> Path:
    return square(tmp_path, [box(0, 0, 5, 10), box(5, 0, 10, 10)], ["A", "B"],
                  lines=[("contact", contact), ("map-boundary", FRAME)])


def test_a_contact_drawn_off_its_boundary_is_not_drawn_again_beside_it(tmp_path):
    # The boundary A|B is x = 5; its contact is drawn at x = 5.3, 0.3 m off at a 0.1 m tolerance: line-off-boundary
    # reports the contact and boundary-without-line the boundary, 9.8 m of it (0.1 m from the frame at each end).
    # A generated contact along x = 5 would draw the boundary twice and decide that the polygons are right. It is
    # left (the contact lies within BESIDE x 0.1 = 1 m), listed, and the copy's findings are the project's
    project = _square_with_contact(tmp_path, LineString([(5.3, 0), (5.3, 10)]))
    result = repair(project, tmp_path / "out")
    assert [c for c in result.changes if c.repair == "draw-missing-lines"] == []
    (left,) = [x for x in result.left if x.repair == "draw-missing-lines"]
    assert left.features == ("1",) and left.layer == "lines"
    assert left.measure == pytest.approx(9.8, abs=1e-9)
    assert shapely.equals(left.geometry, LineString([(5, 0.1), (5, 9.9)]))
    assert "Contact 1 runs beside 9.8 of it within 1" in left.reason

    def rules(p):
        return sorted(f.rule for f in check(p).findings if f.family == "linework")

    assert rules(tmp_path / "out") == rules(project) == ["boundary-without-line", "line-off-boundary"]
    assert repair(tmp_path / "out", None, dry_run=True).changes == ()


def test_a_boundary_a_contact_drawn_off_it_runs_beside_in_part_is_left_whole(tmp_path):
    # The contact drawn at x = 5.3 from y = 0 to y = 4 only. The points (5, y) of the boundary within 1 m of it are
    # y <= 4 + sqrt(1 - 0.3^2) = 4.95394 (by hand), 4.85394 m from the frame's tolerance at 0.1. A generated line
    # from there to the frame would end free 1 m from the contact's end (a line-dangle the map did not have), so
    # the whole 9.8 m is left and listed, with the 4.854 m the contact runs beside
    project = _square_with_contact(tmp_path, LineString([(5.3, 0), (5.3, 4)]))
    result = repair(project, tmp_path / "out")
    assert [c for c in result.changes if c.repair == "draw-missing-lines"] == []
    (left,) = [x for x in result.left if x.repair == "draw-missing-lines"]
    assert shapely.equals(left.geometry, LineString([(5, 0.1), (5, 9.9)]))
    assert "Contact 1 runs beside 4.85 of it within 1" in left.reason

    def dangles(p):
        return sum(f.rule == "line-dangle" for f in check(p).findings)

    assert dangles(tmp_path / "out") == dangles(project) == 1  # the contact's own free end, at y = 4


@pytest.mark.parametrize("x, beside", [(5.95, True), (6.05, False)])
def test_a_contact_counts_as_drawn_beside_a_boundary_within_ten_tolerances(tmp_path, x, beside):
    # BESIDE = 10 tolerances = 1 m here: a contact 0.95 m from the boundary keeps a second line off it; one 1.05 m
    # away is another line, and the boundary gets its own
    result = repair(_square_with_contact(tmp_path, LineString([(x, 0), (x, 10)])), tmp_path / "out")
    drawn = [c for c in result.changes if c.repair == "draw-missing-lines"]
    left = [x for x in result.left if x.repair == "draw-missing-lines"]
    assert (len(drawn), len(left)) == ((0, 1) if beside else (1, 0))


def test_a_boundary_whose_line_would_end_free_is_left_and_listed(tmp_path):
    # A = [0, 5] x [0, 5], B = [5, 10] x [0, 5] under C = [0, 10] x [5, 10]; the contact along y = 5 is drawn in two
    # pieces that stop 0.15 m short of the node (5, 5) on either side, at a 0.1 m tolerance (two dangles of the map).
    # The boundary A|B (x = 5) has no line: a line drawn along it, from the frame up to (5, 5), would end 0.15 m
    # from both pieces, farther than the tolerance: a third dangle, which the map did not have. It is left and
    # listed with where it would end free, and the copy's linework findings are the project's
    contacts = [("contact", LineString([(0, 5), (4.85, 5)])), ("contact", LineString([(5.15, 5), (10, 5)]))]
    project = square(tmp_path, [box(0, 0, 5, 5), box(5, 0, 10, 5), box(0, 5, 10, 10)], ["A", "B", "C"],
                     lines=contacts + [("map-boundary", FRAME)])

    def rules(p):
        return sorted(f.rule for f in check(p).findings if f.family == "linework")

    assert rules(project) == ["boundary-without-line", "line-dangle", "line-dangle"]
    result = repair(project, tmp_path / "out")
    assert [c for c in result.changes if c.repair == "draw-missing-lines"] == []
    (left,) = [x for x in result.left if x.repair == "draw-missing-lines"]
    assert set(left.features) == {"1", "2"}
    assert left.measure == pytest.approx(4.9, abs=1e-6)  # y = 0.1 (the frame's tolerance) to 5: no line within 0.1
    assert "would end free at (5.00, 5.00)" in left.reason
    assert rules(tmp_path / "out") == rules(project)
    assert repair(tmp_path / "out", None, dry_run=True).changes == ()


def test_a_boundary_stretch_along_an_overlap_is_told_from_one_running_on_past_it():
    # The overlap [5, 5.5] x [0, 5] at a 0.1 m tolerance: a stretch on its edge, or inside it, lies along it (within
    # the tolerance all along: GEOS covered_by its buffer); one running on past its corner, or 0.15 m beside it, does
    # not, and draw-missing-lines draws those
    from archivist.repair.lines import along_overlaps

    stretches = np.array([LineString([(5.5, 0.1), (5.5, 4.9)]), LineString([(5.25, 1), (5.25, 4)]),
                          LineString([(5, 5), (5, 10)]), LineString([(5.65, 0), (5.65, 5)]),
                          LineString([(5.55, 0), (5.55, 5)])], dtype=object)
    assert along_overlaps(stretches, [box(5, 0, 5.5, 5)], 0.1).tolist() == [True, True, False, False, True]
    assert along_overlaps(stretches, [], 0.1).tolist() == [False] * 5
    # two overlaps meeting end to end: a stretch along both lies along their union
    assert along_overlaps(np.array([LineString([(5.5, 0), (5.5, 9)])], dtype=object),
                          [box(5, 0, 5.5, 5), box(5, 5, 5.5, 9)], 0.1).tolist() == [True]
