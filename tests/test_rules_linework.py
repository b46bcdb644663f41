"""Family `linework`: contacts, faults and the map boundary agree with the unit polygons.

Outside references: GEOS through shapely (``distance``, ``buffer``/``difference``
for the stretches beyond the tolerance, ``is_simple``), and worked examples on
a 10 m square at 1:1 000 (tolerance 0.1 m) whose arithmetic is done by hand.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
from shapely.geometry import LineString, box

import archivist
from builders import copy_bundle, edit_layer, read_layer
from coverage_builders import FRAME, extend_line, square_map, synthetic_map, write_map

LINEWORK = ["linework"]
CONTACT = LineString([(5, 0), (5, 10)])


def found(root, rule, families=LINEWORK):
    return [f for f in archivist.check(root, only=families).findings if f.rule == rule]


# ---------------------------------------------------------------- CASES

def clean(tmp_path):
    return square_map(tmp_path, "clean")


def contact_off(tmp_path):
    # the contact drawn 0.5 m east of the edge between A and B (tolerance 0.1 m)
    return square_map(tmp_path, "off", line_rows=[("contact", LineString([(5.5, 0), (5.5, 10)])), ("map-boundary", FRAME)])


def free_fault_inside(tmp_path):
    # a fault ending freely inside A, 1 m from any edge: allowed
    rows = [("contact", CONTACT), ("map-boundary", FRAME), ("fault", "inferred", LineString([(1, 2), (3, 5)]))]
    return square_map(tmp_path, "faultin", line_rows=rows)


def no_contact(tmp_path):
    return square_map(tmp_path, "nocontact", line_rows=[("map-boundary", FRAME)])


def overshoot(tmp_path):
    # the contact runs 0.5 m past the north frame line
    return square_map(tmp_path, "overshoot", line_rows=[("contact", LineString([(5, 0), (5, 10.5)])), ("map-boundary", FRAME)])


def contact_same_unit(tmp_path):
    return square_map(tmp_path, "sameunit", codes=["A", "A"])


def fault_same_unit(tmp_path):
    return square_map(tmp_path, "faultsame", codes=["A", "A"], line_rows=[("fault", CONTACT), ("map-boundary", FRAME)])


def looped_contact(tmp_path):
    # (5 0) up to (5 6), out to (7 8) and (7 6), back to (5 6)... the line crosses itself at (6 6)
    loop = LineString([(5, 0), (5, 5), (7, 7), (7, 6), (5, 6), (5, 10)])
    return square_map(tmp_path, "loop", line_rows=[("contact", loop), ("map-boundary", FRAME)])


def island_ring(tmp_path):
    # a closed contact around an island of C in A: a closed line is simple and has no free end
    island = box(1, 4, 3, 6)
    return square_map(tmp_path, "island", a=box(0, 0, 5, 10).difference(island), extra=[island], codes=["A", "B", "C"],
                      line_rows=[("contact", CONTACT), ("map-boundary", FRAME), ("contact", island.exterior)])


def doubled(tmp_path):
    # a fault digitised over the contact
    return square_map(tmp_path, "doubled", line_rows=[("contact", CONTACT), ("map-boundary", FRAME), ("fault", CONTACT)])


def misspelt_kind(tmp_path):
    return square_map(tmp_path, "kind", line_rows=[("contcat", CONTACT), ("map-boundary", FRAME)])


def qualified_kinds(tmp_path):
    rows = [("Contact, inferred", "approximate", CONTACT), ("Map boundary", "certain", FRAME),
            ("fault (concealed)", "", LineString([(1, 2), (3, 5)]))]
    return square_map(tmp_path, "qualified", line_rows=rows)


CASES = {
    "line-off-boundary": (contact_off, free_fault_inside),
    "boundary-without-line": (no_contact, clean),
    "line-dangle": (overshoot, free_fault_inside),
    "line-same-unit-contact": (contact_same_unit, fault_same_unit),
    "line-self-intersection": (looped_contact, island_ring),
    "line-duplicate": (doubled, clean),
    "line-kind-unknown": (misspelt_kind, qualified_kinds),
}


@pytest.mark.parametrize("make", [clean, free_fault_inside, island_ring, qualified_kinds, fault_same_unit])
def test_clean_variants_have_no_linework_findings(make, tmp_path):
    report = archivist.check(make(tmp_path), only=LINEWORK)
    assert report.findings == (), [f.message for f in report.findings]


# ---------------------------------------------------------------- worked examples

def test_overshoot_is_a_dangle_of_known_length(tmp_path):
    root = overshoot(tmp_path)
    (f,) = found(root, "line-dangle")
    assert f.features == ("1",) and f.measure == 0.5  # 10.5 - 10
    assert (f.x, f.y) == (5.0, 10.5)  # the free end
    assert f.message == "Contact 1 ends free 0.50 m past the line it crosses (map-boundary line 2); trim it back to that line."
    assert shapely.equals(shapely.from_wkt(f.wkt), LineString([(5, 10), (5, 10.5)]))  # the piece to trim
    # the part beyond the 0.1 m tolerance of the unit boundaries: from y = 10.1 to 10.5
    (g,) = found(root, "line-off-boundary")
    assert g.measure == 0.4
    assert g.message == "Contact 1 runs 0.40 m outside every unit polygon, up to 0.50 m north of the nearest, polygon 1 (A)."


def test_undershoot_is_a_dangle_of_known_gap(tmp_path):
    # the contact stops 0.3 m short of the north frame line
    root = square_map(tmp_path, line_rows=[("contact", LineString([(5, 0), (5, 9.7)])), ("map-boundary", FRAME)])
    (f,) = found(root, "line-dangle")
    assert f.measure == 0.3
    assert f.message == ("Contact 1 ends free, 0.30 m short of the nearest line (map-boundary line 2); "
                         "extend it 0.30 m north to meet it.")
    assert (f.x, f.y) == (5.0, 9.7)
    # the boundary left undrawn: y from 9.8 to 9.9, beyond 0.1 m of both lines, is 0.1 m: not more than the tolerance
    assert found(root, "boundary-without-line") == []
    root = square_map(tmp_path, "under2", line_rows=[("contact", LineString([(5, 0), (5, 9)])), ("map-boundary", FRAME)])
    (g,) = found(root, "boundary-without-line")
    assert g.measure == 0.8 and g.features == ("1", "2")  # y from 9.1 to 9.9


def test_dangle_within_the_tolerance_is_connected(tmp_path):
    root = square_map(tmp_path, line_rows=[("contact", LineString([(5, 0), (5, 9.95)])), ("map-boundary", FRAME)])
    assert found(root, "line-dangle") == []


def test_contact_ending_on_the_frame_without_a_frame_line(tmp_path):
    # no map-boundary line: the contact ends on the map's outer edge, which is not a dangle;
    # the undrawn frame is reported instead, 4 stretches along A and B
    root = square_map(tmp_path, line_rows=[("contact", CONTACT)])
    assert found(root, "line-dangle") == []
    stretches = found(root, "boundary-without-line")
    assert sum(f.measure for f in stretches) == pytest.approx(40.0 - 4 * 0.1, abs=0.01)  # frame less 0.1 m at each contact end


def test_contact_off_the_boundary_by_half_a_metre(tmp_path):
    (f,) = found(contact_off(tmp_path), "line-off-boundary")
    # the whole 10 m line is 0.5 m from the edge x = 5, but within 0.1 m of the frame at both ends
    assert f.measure == pytest.approx(9.8)
    assert f.features == ("1",)
    # the contact at x = 5.5 lies 0.5 m east of the edge x = 5 between A (west) and B (east)
    assert f.message == ("Contact 1 runs 9.80 m off the unit boundaries, up to 0.50 m east of the boundary between B and A, "
                         "inside polygon 2 (B).")
    (g,) = found(contact_off(tmp_path / "again"), "boundary-without-line")
    assert g.measure == pytest.approx(9.8) and g.features == ("1", "2")


def test_stretch_off_the_boundary_of_two_vertices_is_placed_at_its_first_vertex(tmp_path):
    # the piece from (5.5, 0.1) to (5.5, 9.9): GEOS's interior point of it is either end, as the last bit falls
    (f,) = found(contact_off(tmp_path), "line-off-boundary")
    assert f.wkt == "LINESTRING (5.5 0.1, 5.5 9.9)" and (f.x, f.y) == (5.5, 0.1)


def test_two_vertex_stretches_off_the_edge_are_placed_at_their_first_vertex_in_lon_lat(tmp_path):
    """The example bundle in longitude/latitude, checked in a local frame: GEOS's interior point of a two-vertex
    stretch, taken in the map's degrees, fell on its last vertex for some; each is placed at its first."""
    from test_rules_crs import geographic

    hits = found(geographic(tmp_path), "line-off-boundary")
    two = [f for f in hits if len(shapely.from_wkt(f.wkt).coords) == 2]
    assert two
    for f in two:
        x0, y0 = shapely.from_wkt(f.wkt).coords[0]
        assert (f.x, f.y) == (round(x0, 8), round(y0, 8)), f.wkt


def test_noise_within_the_tolerance_is_not_reported(tmp_path):
    wobbly = LineString([(5, 0), (5.05, 2), (4.95, 4), (5.08, 6), (4.93, 8), (5, 10)])  # at most 0.08 m off
    root = square_map(tmp_path, line_rows=[("contact", wobbly), ("map-boundary", FRAME)])
    assert archivist.check(root, only=LINEWORK).findings == ()


def test_map_boundary_line_held_to_the_outer_edge(tmp_path):
    # a map-boundary line drawn along the contact instead of the frame
    root = square_map(tmp_path, line_rows=[("contact", CONTACT), ("map-boundary", FRAME), ("map-boundary", LineString([(5, 2), (5, 8)]))])
    (f,) = found(root, "line-off-boundary")
    assert f.features == ("3",) and f.measure == 6.0
    # its middle (5, 5) is 5 m from all four sides of the 10 m square: the size is sure, the direction any of four
    assert f.message.startswith("Map-boundary line 3 runs 6.00 m off the map's outer edge, up to 5.00 m ")


def test_fault_leaving_the_map_is_reported_inside_a_unit_is_not(tmp_path):
    rows = [("contact", CONTACT), ("map-boundary", FRAME), ("fault", LineString([(2, 5), (2, 12)]))]
    (f,) = found(square_map(tmp_path, line_rows=rows), "line-off-boundary")
    assert f.features == ("3",) and f.measure == pytest.approx(1.9)  # y from 10.1 to 12
    assert f.message == "Fault 3 runs 1.90 m outside every unit polygon, up to 2.00 m north of the nearest, polygon 1 (A)."


def test_same_unit_contact_length(tmp_path):
    (f,) = found(contact_same_unit(tmp_path), "line-same-unit-contact")
    assert f.measure == 10.0 and f.message == "Contact 1 has unit A on both sides over 10.00 m (polygons 1 and 2)."


def test_same_unit_contact_not_on_the_exact_edge(tmp_path):
    # the contact drawn 0.05 m off the edge (within tolerance): sides are read just off each side of it
    root = square_map(tmp_path, codes=["A", "A"], line_rows=[("contact", LineString([(5.05, 0), (5.05, 10)])), ("map-boundary", FRAME)])
    (f,) = found(root, "line-same-unit-contact")
    assert f.measure == 10.0


def test_self_intersection_point_and_loop(tmp_path):
    (f,) = found(looped_contact(tmp_path), "line-self-intersection")
    assert f.features == ("1",)
    assert shapely.equals(shapely.from_wkt(f.wkt), shapely.MultiPoint([(6, 6)]))
    # the loop (6 6)-(7 7)-(7 6)-(6 6): sqrt(2) + 1 + 1 = 3.41 m
    assert f.measure == pytest.approx(2 + 2**0.5, abs=1e-3)
    assert not shapely.is_simple(LineString([(5, 0), (5, 5), (7, 7), (7, 6), (5, 6), (5, 10)]))  # GEOS agrees


def test_line_doubling_back(tmp_path):
    # up to y = 7, back down to 4, up again to 10: the stretch from 4 to 7 is drawn three times,
    # 16 m of line for a 10 m trace, so 6 m of it repeat the trace
    spike = LineString([(5, 0), (5, 7), (5, 4), (5, 10)])
    (f,) = found(square_map(tmp_path, line_rows=[("contact", spike), ("map-boundary", FRAME)]), "line-self-intersection")
    assert f.measure == 6.0 and "6.00 m of it repeats its own trace" in f.message


def test_duplicate_exact_and_near(tmp_path):
    (f,) = found(doubled(tmp_path), "line-duplicate")
    assert f.features == ("1", "3") and f.measure == 10.0 and "(contact)" in f.message and "(fault)" in f.message
    # a copy 0.05 m aside: within the tolerance, shared over 10 m less 5 tolerances at each end
    rows = [("contact", CONTACT), ("map-boundary", FRAME), ("fault", LineString([(5.05, 0), (5.05, 10)]))]
    (g,) = found(square_map(tmp_path, "near", line_rows=rows), "line-duplicate")
    assert g.features == ("1", "3") and g.measure == pytest.approx(9.0)


def test_junctions_are_not_duplicates(tmp_path):
    # a contact meeting another at 30 degrees shares nothing beyond the junction allowance
    rows = [("contact", CONTACT), ("map-boundary", FRAME), ("fault", LineString([(5, 5), (5 + 5 * np.cos(np.pi / 3), 5 + 5 * np.sin(np.pi / 3))]))]
    assert found(square_map(tmp_path, line_rows=rows), "line-duplicate") == []


def test_kind_and_certainty_messages(tmp_path):
    rows = [("contcat", CONTACT), ("map-boundary", "probable", FRAME), ("", LineString([(1, 2), (3, 5)]))]
    msgs = sorted(f.message for f in found(square_map(tmp_path, line_rows=rows), "line-kind-unknown"))
    assert msgs == [
        "Line 1 has kind 'contcat', which is not in the vocabulary (contact, fault, map-boundary).",
        "Line 2 has certainty 'probable', which is not in the vocabulary (certain, approximate, inferred, concealed).",
        "Line 3 has no kind (field 'kind'); the vocabulary is contact, fault, map-boundary.",
    ]


def test_kinds_added_to_the_vocabulary(tmp_path):
    from builders import edit_manifest

    rows = [("contact", CONTACT), ("map-boundary", FRAME), ("fold axis", LineString([(1, 2), (3, 5)]))]
    root = square_map(tmp_path, line_rows=rows)
    assert len(found(root, "line-kind-unknown")) == 1
    edit_manifest(root, lambda m: m.setdefault("checks", {}).update(line_kinds=["contact", "fault", "map-boundary", "fold axis"]))
    assert archivist.check(root, only=LINEWORK).findings == ()  # a fold axis is drawn freely


# ---------------------------------------------------------------- property test: dangles on random maps

SETTINGS = settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow],
                    phases=(Phase.explicit, Phase.reuse, Phase.generate))


@SETTINGS
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), pick=st.integers(0, 10_000), factor=st.floats(2, 6))
def test_extended_contact_is_a_dangle_at_its_end(n, seed, pick, factor):
    smap = synthetic_map(n, seed=seed, splay_fraction=0)
    contacts = np.flatnonzero((smap.lines.kind == "contact").to_numpy())
    open_ = [j for j in contacts if not smap.lines.geometry.values[j].is_closed]
    if not open_:
        return
    j = open_[pick % len(open_)]
    length = factor * smap.tolerance
    bad = extend_line(smap, j, length)
    end = shapely.get_point(bad.lines.geometry.values[j], -1)
    others = np.delete(bad.lines.geometry.values, j)
    gap = shapely.distance(end, others).min()  # GEOS: how far the new end is from every other line
    with tempfile.TemporaryDirectory() as tmp:
        report = archivist.check(write_map(bad, Path(tmp) / "m"), only=LINEWORK)
    dangles = [f for f in report.findings if f.rule == "line-dangle"]
    if gap <= smap.tolerance:
        assert dangles == []  # the end came within the tolerance of another line
        return
    (f,) = dangles
    assert f.features == (str(j + 1),)
    assert (f.x, f.y) == pytest.approx((end.x, end.y), abs=1e-3)
    if "past the line it crosses" in f.message:
        assert f.measure == pytest.approx(length, abs=1e-3)
    else:
        assert f.measure == pytest.approx(gap, abs=1e-3)


# ---------------------------------------------------------------- the example bundle and its broken variants

def test_example_bundle_is_clean_linework():
    report = archivist.check(copy_bundle(Path(tempfile.mkdtemp())), only=LINEWORK)
    assert report.findings == ()


def _bundle(tmp_path):
    root = copy_bundle(tmp_path)
    return root, read_layer(root, "map.gpkg", "lines")


def _longest(frame, kind="contact"):
    sel = frame[frame.kind == kind]
    return sel.index[int(np.argmax(sel.geometry.length.to_numpy()))]


def _rules(root):
    report = archivist.check(root, only=["topology", "linework"])
    return report, sorted({f.rule for f in report.findings})


def test_bundle_deleted_contact(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)
    gone = frame.geometry[fid]
    edit_layer(root, "map.gpkg", "lines", lambda df: df.drop(index=fid))
    report, rules = _rules(root)
    assert rules == ["boundary-without-line"]
    (f,) = report.findings
    # GEOS: the stretch of the deleted contact farther than the 0.5 m tolerance from every other line
    others = frame.drop(index=fid).geometry.values
    expected = shapely.difference(gone, shapely.buffer(shapely.union_all(others), 0.5)).length
    assert f.measure == pytest.approx(expected, abs=0.01)


def test_bundle_dragged_vertex(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)
    xy = shapely.get_coordinates(frame.geometry[fid]).copy()
    k = len(xy) // 2
    d = xy[k + 1] - xy[k - 1]
    xy[k] += np.array([-d[1], d[0]]) / np.hypot(*d) * 20.0  # 20 m sideways
    moved = LineString(xy)

    def change(df):
        df.loc[fid, "geometry"] = moved

    edit_layer(root, "map.gpkg", "lines", change)
    report, rules = _rules(root)
    assert rules == ["boundary-without-line", "line-off-boundary"]
    off = [f for f in report.findings if f.rule == "line-off-boundary"]
    (f,) = off
    units = read_layer(root, "map.gpkg", "units").geometry.values
    expected = shapely.difference(moved, shapely.buffer(shapely.union_all(shapely.boundary(units)), 0.5)).length
    assert f.features == (str(fid),) and f.measure == pytest.approx(expected, abs=0.01)


def test_bundle_shortened_contact(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)
    line = frame.geometry[fid]
    short = shapely.ops.substring(line, 0, line.length - 10.0)

    def change(df):
        df.loc[fid, "geometry"] = short

    edit_layer(root, "map.gpkg", "lines", change)
    report, rules = _rules(root)
    assert rules == ["boundary-without-line", "line-dangle"]
    (f,) = [f for f in report.findings if f.rule == "line-dangle"]
    end = shapely.get_point(short, -1)
    others = frame.drop(index=fid).geometry.values
    assert f.measure == pytest.approx(shapely.distance(end, others).min(), abs=1e-3)
    assert (f.x, f.y) == pytest.approx((end.x, end.y), abs=1e-3)


def test_bundle_fault_recorded_as_contact(tmp_path):
    root, frame = _bundle(tmp_path)
    units = read_layer(root, "map.gpkg", "units")
    # a fault stretch between two polygons of the same unit
    tree = shapely.STRtree(units.geometry.values)
    pick = None
    for fid in frame.index[frame.kind == "fault"]:
        g = frame.geometry[fid]
        for i, j in zip(*tree.query(units.geometry.values, predicate="touches")):
            if i < j and units.unit.iloc[i] == units.unit.iloc[j]:
                shared = shapely.intersection(units.geometry.values[i].boundary, units.geometry.values[j].boundary)
                if shared.length > 0 and shapely.covered_by(shared, g.buffer(0.01)):
                    pick = fid
                    break
        if pick is not None:
            break
    assert pick is not None, "the bundle has a fault between two polygons of one unit"
    edit_layer(root, "map.gpkg", "lines", lambda df: df.__setitem__("kind", ["contact" if i == pick else k for i, k in zip(df.index, df.kind)]))
    report, rules = _rules(root)
    assert "line-same-unit-contact" in rules and "unit-same-neighbour" in rules
    assert set(rules) <= {"line-same-unit-contact", "unit-same-neighbour", "line-dangle", "line-off-boundary"}
    assert [f.features for f in report.findings if f.rule == "line-same-unit-contact"] == [(str(pick),)]


def test_bundle_duplicated_contact(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)

    def change(df):
        df.loc[9999] = {"kind": "fault", "certainty": "inferred", "geometry": df.geometry[fid]}

    edit_layer(root, "map.gpkg", "lines", change)
    report, rules = _rules(root)
    assert rules == ["line-duplicate"]
    (f,) = report.findings
    assert f.features == (str(fid), "9999") and f.measure == pytest.approx(frame.geometry[fid].length, abs=0.01)


def test_bundle_looped_contact(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)
    xy = shapely.get_coordinates(frame.geometry[fid])
    k = len(xy) // 2
    a, b = xy[k], xy[k + 1]
    u = (b - a) / np.hypot(*(b - a))
    n = np.array([-u[1], u[0]])
    # after vertex k: a 6 m excursion that comes back across itself
    loop = [a + u * 2 + n * 3, a + u * 1 + n * 6, a - u * 1 + n * 3, a + u * 3 - n * 1]
    looped = LineString(np.vstack([xy[: k + 1], loop, xy[k + 1:]]))

    def change(df):
        df.loc[fid, "geometry"] = looped

    edit_layer(root, "map.gpkg", "lines", change)
    report, rules = _rules(root)
    assert "line-self-intersection" in rules
    # the excursion leaves the contact's own edge undrawn for a stretch, and runs inside a unit
    assert set(rules) <= {"line-self-intersection", "line-off-boundary", "boundary-without-line"}
    (f,) = [f for f in report.findings if f.rule == "line-self-intersection"]
    assert f.features == (str(fid),) and not shapely.is_simple(looped)


def test_bundle_misspelt_kind(tmp_path):
    root, frame = _bundle(tmp_path)
    fid = _longest(frame)
    edit_layer(root, "map.gpkg", "lines", lambda df: df.__setitem__("kind", ["contcat" if i == fid else k for i, k in zip(df.index, df.kind)]))
    report, rules = _rules(root)
    assert rules == ["line-kind-unknown"]
    assert [f.features for f in report.findings] == [(str(fid),)]


def test_zero_tolerance_means_exactly_on(tmp_path):
    assert archivist.check(square_map(tmp_path, "exact", tolerance=0), only=["topology", "linework"]).findings == ()
    rows = [("contact", LineString([(5.05, 0), (5.05, 10)])), ("map-boundary", FRAME)]
    (f,) = found(square_map(tmp_path, "off", line_rows=rows, tolerance=0), "line-off-boundary")
    assert f.measure == pytest.approx(10.0, abs=1e-6)  # the whole line is 0.05 m off the edge x = 5


def test_a_stretch_of_two_vertices_is_placed_at_its_first_vertex_whatever_its_last_bit():
    from archivist.rules.linework import _first_of_two

    # one undrawn stretch as two computations of its cut points gave it: the same to within 1e-9 m
    a = LineString([(402790.4440372875, 6507573.527513907), (402815.9202325141, 6507568.273714242)])
    b = LineString([(402790.4440372876, 6507573.527513907), (402815.920232514, 6507568.273714242)])
    # GEOS's interior point of a two-vertex line (the end nearer its midpoint) is a tie the last bit breaks
    assert shapely.equals(shapely.point_on_surface(a), shapely.Point(a.coords[0]))
    assert shapely.equals(shapely.point_on_surface(b), shapely.Point(b.coords[1]))
    longer = LineString([(0, 0), (1, 0), (2, 1)])
    x, y = _first_of_two(np.array([a, b, longer], dtype=object))
    assert (round(x[0], 3), round(y[0], 3)) == (round(x[1], 3), round(y[1], 3)) == (402790.444, 6507573.528)
    assert x[2] is None and y[2] is None  # a longer piece keeps the engine's place (an inner vertex)


def test_undrawn_stretch_of_two_vertices_is_placed_at_its_first_vertex(tmp_path):
    root = square_map(tmp_path, line_rows=[("contact", LineString([(5, 0), (5, 9)])), ("map-boundary", FRAME)])
    (g,) = found(root, "boundary-without-line")
    assert g.wkt == "LINESTRING (5 9.1, 5 9.9)" and (g.x, g.y) == (5.0, 9.1)


def test_the_summary_of_a_map_in_longitude_latitude_gives_its_box_in_degrees(tmp_path):
    # the checks run in a local metric frame; the box the missing contacts span is said in the map's own coordinates
    # (reference: the units' bounds as GDAL reads them in EPSG:4326, through pyogrio)
    import re

    import pyogrio
    from test_rules_crs import geographic

    root = geographic(tmp_path)
    edit_layer(root, "map.gpkg", "lines", lambda f: f[f.kind != "contact"])
    (f,) = found(root, "boundary-without-line")
    x0, x1, y0, y1 = map(float, re.search(r"spanning x (\S+) to (\S+), y (\S+) to (\S+);", f.message).groups())
    bx0, by0, bx1, by1 = pyogrio.read_dataframe(root / "map.gpkg", layer="units").total_bounds
    assert bx0 - 1e-5 <= x0 < x1 <= bx1 + 1e-5 and by0 - 1e-5 <= y0 < y1 <= by1 + 1e-5
    assert x1 - x0 > 0.5 * (bx1 - bx0) and y1 - y0 > 0.5 * (by1 - by0)  # the stretches run all over the map
