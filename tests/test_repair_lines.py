"""The line repairs: snapping onto boundaries, closing near-miss ends, drawing undrawn boundaries.

Worked examples use the tiny map of tests/builders.py: two 100 m squares,
A west of x = 100 and B east of it, at 1:10 000, where the default
tolerance (0.1 mm at map scale) is 1 m; ``[checks] tolerance`` sets another
where a case needs it. Distances are worked by hand beside each assertion;
GEOS (through shapely) is the outside reference for distances, Hausdorff
distances and intersections.
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from shapely.geometry import LineString, Point, box

sys.path.insert(0, str(Path(__file__).resolve().parent))

from builders import CRS, tiny_project  # noqa: E402
from coverage_builders import line_frame  # noqa: E402

from archivist.analysis.lines import build_line_network  # noqa: E402
from archivist.engine import check  # noqa: E402
from archivist.project import load_project  # noqa: E402
from archivist.repair.api import repair  # noqa: E402
from archivist.repair.lines import close_ends, snap_to_boundaries, undrawn_lines  # noqa: E402

FRAME = LineString([(100, 0), (0, 0), (0, 100), (200, 100), (200, 0), (100, 0)])
REPAIRED = {"line-off-boundary", "line-dangle", "boundary-without-line"}


def project_with(tmp_path: Path, *rows, tolerance: float | None = None, units=None, name: str = "tiny", repair_keys=None) -> Path:
    manifest: dict = {}
    if tolerance is not None:
        manifest["checks"] = {"tolerance": tolerance}
    if repair_keys:
        manifest["repair"] = repair_keys
    return tiny_project(tmp_path, name=name, lines=line_frame(*rows), units=units, manifest=manifest or None)


def copy_lines(out: Path) -> gpd.GeoDataFrame:
    return pyogrio.read_dataframe(out / "map.gpkg", layer="lines", fid_as_index=True)


def rules(project: Path) -> dict[str, int]:
    found: dict[str, int] = {}
    for f in check(project).findings:
        found[f.rule] = found.get(f.rule, 0) + 1
    return found


def single(g):
    """The one LineString of a (Multi)LineString as written by the repair."""
    parts = shapely.get_parts(g)
    assert len(parts) == 1
    return parts[0]


# ---------------------------------------------------------------- snapping

def test_contact_0_3_m_off_its_boundary_is_snapped_onto_it(tmp_path):
    # The contact is drawn at x = 100.3, 0.3 m east of the boundary x = 100, its ends on the frame.
    # Tolerance 1 m: every vertex is within it. By hand: (100.3, 0) goes to the boundary vertex (100, 0),
    # 0.3 m; (100.3, 50) to the nearest point of the boundary, (100, 50), 0.3 m; (100.3, 100) to (100, 100).
    project = project_with(tmp_path, ("contact", LineString([(100.3, 0), (100.3, 50), (100.3, 100)])), ("map-boundary", FRAME))
    out = tmp_path / "out"
    result = repair(project, out, only=["snap-lines"])
    contact = single(copy_lines(out).geometry.iloc[0])
    assert shapely.get_coordinates(contact).tolist() == [[100, 0], [100, 50], [100, 100]]
    (change,) = [c for c in result.changes if c.repair == "snap-lines" and c.features_before == ("1",)]
    assert change.max_shift == pytest.approx(0.3, abs=1e-9)  # by hand: every vertex moved 0.3 m west
    assert change.max_shift <= 1.0  # the tolerance
    assert float(shapely.hausdorff_distance(change.before, change.after)) == pytest.approx(0.3, abs=1e-9)  # GEOS
    # the contact now lies exactly on the polygons' common edge (GEOS): no line-off-boundary, no undrawn boundary
    assert shapely.covers(shapely.intersection(box(0, 0, 100, 100).boundary, box(100, 0, 200, 100).boundary), contact)
    assert not REPAIRED & set(rules(out))


def test_vertex_farther_than_the_tolerance_never_moves():
    # Boundary x = 100 (two squares); tolerance 1 m. (101.5, 50) is 1.5 m off: it stays.
    # (100.6, 20) and (100.4, 80) are 0.6 m and 0.4 m off: they go onto x = 100.
    targets = shapely.boundary(np.array([box(0, 0, 100, 100), box(100, 0, 200, 100)], dtype=object))
    line = LineString([(100.6, 20), (101.5, 50), (100.4, 80)])
    done = snap_to_boundaries(np.array([line], dtype=object), targets, 1.0)
    xy = shapely.get_coordinates(done.geoms[0]).tolist()
    assert xy == [[100, 20], [101.5, 50], [100, 80]]
    assert done.shift[0] == pytest.approx(0.6)  # GEOS Hausdorff distance: the farthest vertex moved 0.6 m
    assert not done.held[0]


def test_a_snap_that_would_make_a_line_cross_itself_is_not_made():
    # The line (0, 0) (10, 0) (10.2, 0.19) (20, 5) is simple (GEOS). Its vertex (10, 0) is held where another line
    # meets it, on the boundary (9.997, -5) (9.997, 0) (30, 0) but 3 mm past its vertex (9.997, 0); (10.2, 0.19) lies
    # 0.278 m from that vertex (by hand), within the 0.5 m tolerance. Snapped there, the line would run to x = 10 and
    # back 3 mm along itself: not simple (a 7 mm loop of this kind on the topology benchmark's map of 10^5 polygons).
    # The line stays as drawn and says why
    line = np.array([LineString([(0, 0), (10, 0), (10.2, 0.19), (20, 5)])], dtype=object)
    targets = np.array([LineString([(9.997, -5), (9.997, 0), (30, 0)])], dtype=object)
    done = snap_to_boundaries(line, targets, 0.5, pinned=np.array([[10.0, 0.0]]))
    assert done.tangled is not None and done.tangled[0]
    assert not done.changed[0] and not done.held[0]
    assert shapely.equals_exact(done.geoms[0], line[0], tolerance=0.0)
    assert not shapely.is_simple(LineString([(0, 0), (10, 0), (9.997, 0), (20, 5)]))  # what the snap would make


def test_no_vertex_moves_more_than_the_tolerance():
    # A wavy boundary and a noisy copy of it (deterministic noise up to 0.9 m, and a stretch 2.5 m off;
    # tolerance 1 m). Each vertex of the drawn line has one of the result within the tolerance (GEOS distance);
    # those farther than the tolerance from the boundary are there unmoved; all others now lie on the boundary.
    tol = 1.0
    x = np.linspace(0, 500, 101)
    boundary = LineString(np.c_[x, 20 * np.sin(x / 40)])
    for seed in range(5):
        rng = np.random.default_rng(seed)
        xs = np.sort(rng.uniform(1, 499, 60))
        off = rng.uniform(-0.9, 0.9, len(xs))
        off[20:24] = 2.5
        drawn = np.c_[xs, 20 * np.sin(xs / 40) + off]
        line = LineString(drawn)
        done = snap_to_boundaries(np.array([line], dtype=object), np.array([boundary], dtype=object), tol)
        assert done.changed[0] and not done.held[0]
        after = shapely.get_coordinates(done.geoms[0])
        assert len(after) <= len(drawn)  # no vertex added (two snapped onto one boundary vertex become one)
        nearest = shapely.distance(shapely.points(drawn), shapely.multipoints(after))
        d = shapely.distance(shapely.points(drawn), boundary)
        assert (nearest <= tol).all()
        assert (nearest[d > tol] == 0).all() and (d > tol).sum() >= 4
        # the others are on the boundary, or (where the nearest point of the boundary lies within the tolerance of a
        # boundary vertex that is itself farther than the tolerance) left where they were
        kept = np.array([tuple(p) in set(map(tuple, drawn)) for p in after])
        on = shapely.distance(shapely.points(after), boundary) < 1e-9
        assert (on | kept).all() and on.sum() > len(after) / 2
        assert done.shift[0] == pytest.approx(float(shapely.hausdorff_distance(line, done.geoms[0])))  # GEOS
        assert done.shift[0] <= tol
        # idempotent: the result snapped again is the same
        again = snap_to_boundaries(np.array([done.geoms[0]], dtype=object), np.array([boundary], dtype=object), tol)
        assert not again.changed[0]


# ---------------------------------------------------------------- near-miss ends

def test_dangle_0_4_m_short_is_closed_exactly_on_the_other_line(tmp_path):
    # Tolerance 0.5 m. The contact stops at (100, 99.6), 0.4 m short of the frame's top edge y = 100, which
    # has no vertex at x = 100 here. By hand: extended along its last segment (due north) by 0.4 m to (100, 100).
    frame = LineString([(0, 0), (0, 100), (200, 100), (200, 0), (0, 0)])
    project = project_with(tmp_path, ("contact", LineString([(100, 0), (100, 99.6)])), ("map-boundary", frame), tolerance=0.5)
    net = build_line_network(load_project(project))
    geoms, fixes = close_ends(net, 0.5)
    (fix,) = fixes
    assert (fix.how, fix.feat, fix.other) == ("extended", 0, 1)
    assert fix.distance == pytest.approx(0.4)
    end = Point(shapely.get_coordinates(geoms[0])[-1])
    assert (end.x, end.y) == (100.0, 100.0)
    assert shapely.intersects(end, frame)  # GEOS: the new end lies on the frame line itself
    # the whole run: no line-dangle, nothing moved more than the tolerance
    out = tmp_path / "out"
    result = repair(project, out, only=["close-dangles"])
    (change,) = result.changes
    assert change.max_shift == pytest.approx(0.4)
    contact = single(copy_lines(out).geometry.iloc[0])
    assert shapely.get_coordinates(contact).tolist() == [[100, 0], [100, 100]]
    assert "line-dangle" not in rules(out)


def test_overshoot_within_the_tolerance_is_trimmed_back():
    # The contact runs 0.4 m past the frame's top edge: trimmed back to (100, 100), 0.4 m removed.
    frame = LineString([(0, 0), (0, 100), (200, 100), (200, 0), (0, 0)])

    def net_of(tmp):
        return build_line_network(load_project(project_with(tmp, ("contact", LineString([(100, 0), (100, 100.4)])),
                                                            ("map-boundary", frame), tolerance=0.5)))

    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        geoms, fixes = close_ends(net_of(Path(tmp)), 0.5)
    (fix,) = fixes
    assert fix.how == "trimmed"
    assert fix.distance == pytest.approx(0.4)
    assert shapely.get_coordinates(geoms[0]).tolist() == [[100, 0], [100, 100]]


def test_dangle_beyond_the_tolerance_is_left_and_listed(tmp_path):
    # Tolerance 0.3 m: the end 0.4 m short is a line-dangle finding, and the repair leaves it for the geologist.
    frame = LineString([(0, 0), (0, 100), (200, 100), (200, 0), (0, 0)])
    line = LineString([(100, 0), (100, 99.6)])
    project = project_with(tmp_path, ("contact", line), ("map-boundary", frame), tolerance=0.3)
    assert rules(project).get("line-dangle") == 1
    result = repair(project, tmp_path / "out", only=["close-dangles"])
    assert result.changes == ()
    (left,) = result.left
    assert (left.repair, left.features) == ("close-dangles", ("1",))
    assert shapely.equals(single(copy_lines(tmp_path / "out").geometry.iloc[0]), line)
    assert rules(tmp_path / "out").get("line-dangle") == 1


def test_faults_are_never_moved(tmp_path):
    # A fault 0.3 m off the boundary and ending 0.4 m short of the frame: left as drawn.
    fault = LineString([(100.3, 0), (100.3, 99.6)])
    project = project_with(tmp_path, ("fault", fault), ("map-boundary", FRAME))
    result = repair(project, tmp_path / "out", only=["snap-lines", "close-dangles"])
    assert not [c for c in result.changes if c.features_before == ("1",)]
    assert shapely.equals(single(copy_lines(tmp_path / "out").geometry.iloc[0]), fault)


def test_contact_ending_on_a_fault_keeps_meeting_it_and_a_second_run_changes_nothing(tmp_path):
    # The contact runs 0.3 m east of the boundary x = 100 and ends at (100.3, 60), where a fault that is never
    # moved starts. Snapping that end onto the boundary, (100, 60), would part it from the fault, and closing the
    # end would put it back on the fault on the next run, for ever. By hand: the end stays at (100.3, 60), the
    # other end goes to the boundary vertex (100, 0), 0.3 m; the line then lies within 0.3 m of the boundary.
    contact = LineString([(100.3, 0), (100.3, 60)])
    fault = LineString([(100.3, 60), (150, 80)])
    project = project_with(tmp_path, ("contact", contact), ("fault", fault), ("map-boundary", FRAME))
    only = ["snap-lines", "close-dangles"]
    result = repair(project, tmp_path / "out", only=only)
    lines = copy_lines(tmp_path / "out")
    snapped, kept = single(lines.geometry.iloc[0]), single(lines.geometry.iloc[1])
    assert shapely.get_coordinates(snapped).tolist() == [[100, 0], [100.3, 60]]
    assert shapely.equals(kept, fault)
    assert shapely.distance(shapely.Point(100.3, 60), kept) == 0.0  # GEOS: still meets the fault
    assert max(c.max_shift for c in result.changes) <= 0.3 + 1e-9
    again = repair(tmp_path / "out", tmp_path / "again", only=only)
    assert again.changes == ()


# ---------------------------------------------------------------- boundaries with no line

def test_boundary_without_line_gets_a_generated_contact(tmp_path):
    # No contact between A and B: the boundary x = 100 from (100, 0) to (100, 100) is drawn as a contact,
    # certainty [repair] generated_certainty, generated = true; the frame keeps generated = false.
    project = project_with(tmp_path, ("map-boundary", FRAME), repair_keys={"generated_certainty": "approximate"})
    assert rules(project).get("boundary-without-line") == 1
    out = tmp_path / "out"
    result = repair(project, out)
    (change,) = [c for c in result.changes if c.repair == "draw-missing-lines"]
    assert change.features_before == () and change.units == ("A", "B")
    lines = copy_lines(out)
    assert lines["generated"].tolist() == [False, True]
    new = lines.iloc[1]
    assert (new["kind"], new["certainty"]) == ("contact", "approximate")
    assert shapely.equals(single(new.geometry), LineString([(100, 0), (100, 100)]))  # GEOS: exactly the common edge
    assert not REPAIRED & set(rules(out))
    # idempotent: the repaired copy repaired again changes nothing
    assert repair(out, tmp_path / "again").changes == ()


def test_generated_contact_ending_on_a_line_near_a_corner_is_settled_in_the_first_run(tmp_path):
    # B is split by the contact V (100, 50) -> (200, 70); the contact between A and B is drawn only south of V.
    # The stretch of x = 100 north of V is undrawn; its 1 m buffer from the sloping contact ends at y = 50 + 1/cos
    # (slope 0.2: 1.0198 m), whose nearest point on that contact (GEOS) lies 0.2 m from V along it, within the
    # tolerance of the boundary vertex V: snap-lines would move the generated end onto V on a second run, and V
    # is on the sloping contact too, so the first run draws it from V and the second changes nothing.
    from coverage_builders import unit_frame

    a = box(0, 0, 100, 100)
    b1 = shapely.Polygon([(100, 50), (200, 70), (200, 100), (100, 100)])
    b2 = shapely.Polygon([(100, 0), (200, 0), (200, 70), (100, 50)])
    slope = LineString([(100, 50), (200, 70)])
    project = project_with(tmp_path, ("map-boundary", FRAME), ("contact", LineString([(100, 0), (100, 50)])),
                           ("contact", slope), units=unit_frame(a, b1, b2))
    start = Point(100, 50 + float(np.hypot(1.0, 0.2)))  # where the 1 m buffer of the sloping contact leaves x = 100
    foot = shapely.get_coordinates(shapely.shortest_line(start, slope))[1]
    assert 0.19 < float(np.hypot(*(foot - [100, 50]))) < 0.21  # within the tolerance of V, not on it
    out = tmp_path / "out"
    result = repair(project, out)
    (change,) = [c for c in result.changes if c.repair == "draw-missing-lines"]
    assert change.units == ("A", "B")
    assert shapely.equals(single(change.after), LineString([(100, 50), (100, 100)]))  # GEOS: from V, along x = 100
    assert not REPAIRED & set(rules(out))
    assert repair(out, tmp_path / "again").changes == ()  # idempotent


def test_generated_stretch_meets_the_drawn_part_of_its_boundary():
    # The boundary x = 100 is drawn from y = 0 to 60 only. The undrawn stretch, as boundary-without-line finds
    # it, starts where the 1 m buffer of that line ends (y = 61); the generated line starts on the drawn line.
    piece = LineString([(100, 61), (100, 100)])
    done = undrawn_lines(np.array([piece], dtype=object), np.array([LineString([(100, 0), (100, 60)])], dtype=object), 1.0)
    assert shapely.get_coordinates(done[0]).tolist() == [[100, 60], [100, 100]]


def test_combined_line_layers_get_the_generated_contact_in_the_contacts_layer(tmp_path):
    # Contacts, faults and frame in three layers: the generated contact goes to the contacts layer.
    project = tiny_project(tmp_path, lines=line_frame(("map-boundary", FRAME)))
    gpkg = project / "map.gpkg"
    from builders import edit_manifest, write_layer

    write_layer(gpkg, "contacts", gpd.GeoDataFrame({"certainty": ["certain"]}, geometry=[LineString([(100, 0), (100, 40)])], crs=CRS))
    write_layer(gpkg, "frame", gpd.GeoDataFrame({"certainty": ["certain"]}, geometry=[FRAME], crs=CRS))

    def change(d):
        del d["layers"]["lines"]
        d["layers"]["contacts"] = {"path": "map.gpkg", "layer": "contacts", "certainty_field": "certainty"}
        d["layers"]["frame"] = {"path": "map.gpkg", "layer": "frame", "certainty_field": "certainty"}

    edit_manifest(project, change)
    out = tmp_path / "out"
    result = repair(project, out)
    (change_,) = [c for c in result.changes if c.repair == "draw-missing-lines"]
    assert change_.layer == "contacts"
    contacts = pyogrio.read_dataframe(out / "map.gpkg", layer="contacts")
    assert contacts["generated"].tolist() == [False, True]
    assert contacts["certainty"].tolist() == ["certain", "inferred"]  # the default generated certainty
    assert not REPAIRED & set(rules(out))


def test_generated_lines_with_a_free_end_are_dropped_in_turn():
    # Drawn: a fault along y = -5. Generated: B from (0, -5) up to (0, 0), A from (0, 0) up to (0, 5), C a closed
    # square ring off on its own, D from the fault at (10, -5) to the map edge x = 20. A's end (0, 5) meets nothing
    # within the 0.1 tolerance: not drawn. B's end (0, 0) then meets only A: not drawn either. C's two ends are one
    # point (closed), D's ends meet the fault and the edge: both drawn
    from types import SimpleNamespace

    from archivist.repair.lines import ends_met

    fault = np.array([LineString([(-20, -5), (20, -5)])], dtype=object)
    net = SimpleNamespace(geoms=fault, tree=shapely.STRtree(fault))
    new = np.array([LineString([(0, 0), (0, 5)]), LineString([(0, -5), (0, 0)]),
                    LineString([(5, 5), (6, 5), (6, 6), (5, 6), (5, 5)]), LineString([(10, -5), (20, -2)])], dtype=object)
    edge = np.array([LineString([(20, -10), (20, 10)])], dtype=object)
    keep, free = ends_met(new, net, edge, 0.1)
    assert keep.tolist() == [False, False, True, True]
    assert free[0].tolist() == [0, 5] and free[1].tolist() == [0, 0]  # where each would end free
    assert np.isnan(free[2:]).all()
    # with no map edge, D's end at x = 20 meets nothing
    assert ends_met(new, net, np.empty(0, dtype=object), 0.1)[0].tolist() == [False, False, True, False]


def test_the_working_lines_know_the_layer_each_came_from(tmp_path):
    # three line layers read as one: each working row names its own layer (the row order of the combined ids),
    # one lines layer names "lines"
    from builders import edit_manifest, write_layer

    from archivist.project import load_project
    from archivist.repair.api import make_state
    from archivist.repair.model import FEATURE_ID, SOURCE_LAYER

    project = tiny_project(tmp_path, lines=line_frame(("map-boundary", FRAME)))
    assert make_state(load_project(project)).lines[SOURCE_LAYER].tolist() == ["lines"]
    gpkg = project / "map.gpkg"
    two = [LineString([(100, 0), (100, 40)]), LineString([(100, 40), (100, 100)])]
    write_layer(gpkg, "contacts", gpd.GeoDataFrame({"certainty": ["certain"] * 2}, geometry=two, crs=CRS))
    write_layer(gpkg, "faults", gpd.GeoDataFrame({"certainty": ["certain"]}, geometry=[LineString([(0, 50), (200, 50)])], crs=CRS))
    write_layer(gpkg, "frame", gpd.GeoDataFrame({"certainty": ["certain"]}, geometry=[FRAME], crs=CRS))

    def change(d):
        del d["layers"]["lines"]
        for name in ("faults", "contacts", "frame"):
            d["layers"][name] = {"path": "map.gpkg", "layer": name, "certainty_field": "certainty"}

    edit_manifest(project, change)
    lines = make_state(load_project(project)).lines
    assert [(str(i).split(":")[0], layer) for i, layer in zip(lines[FEATURE_ID], lines[SOURCE_LAYER])] == [
        (layer, layer) for layer in lines[SOURCE_LAYER]]
    assert sorted(lines[SOURCE_LAYER].tolist()) == ["contacts", "contacts", "faults", "frame"]


def test_repaired_copy_has_no_linework_finding_of_the_repaired_kinds(tmp_path):
    # Three defects at once (tolerance 1 m): a contact 0.3 m off, an end 0.4 m short, a boundary with no line.
    units = gpd.GeoDataFrame({"unit": ["A", "B", "C"]},
                             geometry=[box(0, 0, 100, 100), box(100, 0, 200, 50), box(100, 50, 200, 100)], crs=CRS)
    project = project_with(tmp_path, ("contact", LineString([(100.3, 0), (100.3, 50), (100.3, 99.6)])),
                           ("map-boundary", FRAME), units=units)
    before = rules(project)
    assert before.get("boundary-without-line") == 1
    out = tmp_path / "out"
    result = repair(project, out)
    assert {c.repair for c in result.changes} >= {"snap-lines", "draw-missing-lines"}
    assert all(c.max_shift <= 1.0 for c in result.changes if c.layer != "units")
    assert not REPAIRED & set(rules(out))
    assert repair(out, tmp_path / "again").changes == ()  # idempotent


def _farthest_whole_lines(before, after, targets, tol):
    """The farther-than-drawn test measured on every densified point of the whole lines (GEOS segmentize and
    nearest-segment distances), the measurement ``_farther`` must agree with."""
    out = np.zeros(len(before), dtype=bool)
    moved = np.flatnonzero(~shapely.equals_exact(before, after, tolerance=0.0))
    xy, part = shapely.get_coordinates(shapely.get_parts(targets), return_index=True)
    same = part[1:] == part[:-1]
    tree = shapely.STRtree(shapely.linestrings(np.stack([xy[:-1][same], xy[1:][same]], axis=1)))

    def reach(lines):
        xy, idx = shapely.get_coordinates(shapely.segmentize(lines, tol / 4), return_index=True)
        far = np.zeros(len(lines))
        (who, _), d = tree.query_nearest(shapely.points(xy), return_distance=True, all_matches=False)
        np.maximum.at(far, idx[who], d)
        return far

    out[moved] = reach(after[moved]) > reach(before[moved]) + 1e-9
    return out


def test_farther_than_drawn_agrees_with_the_whole_lines_densified():
    # lines snapped part-way onto GEOS Voronoi cell boundaries (some vertices onto the nearest boundary point, some
    # moved at random, a few lines redrawn with other vertices): measuring only the segments that moved, and the
    # ends where they decide, gives the answer of every densified point of the whole lines
    from archivist.repair.lines import _farther

    rng = np.random.default_rng(7)
    cells = shapely.voronoi_polygons(shapely.multipoints(rng.uniform(0, 100, (40, 2))), extend_to=box(0, 0, 100, 100))
    targets = np.array(shapely.get_parts(shapely.boundary(shapely.get_parts(cells))), dtype=object)
    edge = shapely.union_all(targets)
    farther = 0
    for trial in range(8):
        before = np.array([shapely.linestrings(rng.uniform(0, 100, (int(rng.integers(2, 7)), 2))) for _ in range(40)], dtype=object)
        before[:5] = [shapely.multilinestrings([shapely.linestrings(rng.uniform(0, 100, (3, 2))),
                                                shapely.linestrings(rng.uniform(0, 100, (2, 2)))]) for _ in range(5)]
        after = before.copy()
        for i in range(len(before)):
            xy = shapely.get_coordinates(before[i])
            pick = rng.random(len(xy))
            onto = shapely.get_coordinates(shapely.shortest_line(shapely.points(xy), edge))[1::2]
            xy = np.where((pick < 0.4)[:, None], onto, xy + np.where((pick > 0.8)[:, None], rng.normal(0, 0.5, xy.shape), 0.0))
            after[i] = shapely.set_coordinates(before[i], xy)
        after[-1] = shapely.linestrings(rng.uniform(0, 100, (4, 2)))  # a different shape: measured whole
        tol = float(rng.choice([0.5, 1.0, 2.0]))
        expected = _farthest_whole_lines(before, after, targets, tol)
        assert np.array_equal(_farther(before, after, targets, tol), expected), trial
        farther += int(expected.sum())
    assert 0 < farther < 8 * 40  # both answers occur


def test_lines_snapped_onto_boundary_segments_are_never_farther_and_need_no_measuring():
    # lines along GEOS Voronoi cell boundaries, vertex for vertex (each segment one of a boundary's own), drawn a
    # little off them: lying on the targets all along, the snap cannot be farther than drawn. Read off the cells'
    # half-edge table (the snap's cache), they are not measured, and the answer is the one the densified whole
    # lines give; a line whose vertices are boundary vertices but whose segment cuts across a cell is measured
    from archivist.analysis.halfedges import build_edges
    from archivist.repair.lines import SEGMENTS, _along_targets, _farther

    rng = np.random.default_rng(11)
    cells = np.array(shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(rng.uniform(0, 100, (40, 2))),
                                                                extend_to=box(0, 0, 100, 100))), dtype=object)
    cells = shapely.intersection(cells, box(0, 0, 100, 100))
    targets = shapely.boundary(cells)
    along, across = [], []
    for c in cells[:20]:
        ring = shapely.get_coordinates(shapely.get_exterior_ring(c))
        k = int(rng.integers(2, len(ring)))
        along.append(shapely.linestrings(ring[:k]))  # k - 1 segments of the ring, in order
        across.append(shapely.linestrings(ring[[0, 2]]))  # a chord of the cell: its ends are vertices, it is not an edge
    after = np.array(along + across, dtype=object)
    before = shapely.set_coordinates(after.copy(), shapely.get_coordinates(after) + rng.normal(0, 0.3, (shapely.get_num_coordinates(after).sum(), 2)))
    cache = {SEGMENTS: build_edges(cells)}
    on = _along_targets(after, cache)
    assert on[:20].all() and not on[20:].any()
    assert not _along_targets(after, {}).any()  # no table: every line is measured
    expected = _farthest_whole_lines(before, after, targets, 0.5)
    assert not expected[:20].any() and expected[20:].any()  # the chords stray farther than drawn
    assert np.array_equal(_farther(before, after, targets, 0.5, cache), expected)
    assert np.array_equal(_farther(before, after, targets, 0.5), expected)


def test_nearest_target_within_a_bound_gives_the_distances_of_the_index():
    # points densified along lines near GEOS Voronoi cell boundaries, at UTM-sized coordinates: measuring each point
    # against the target segments within its line's bound (GEOS's point-to-segment formula on arrays) gives the
    # distance STRtree.query_nearest gives for every point
    from archivist.analysis.arrays import segments
    from archivist.repair.lines import _nearest_within

    rng = np.random.default_rng(3)
    x0, y0 = 417_000.0, 6_503_000.0
    cells = shapely.voronoi_polygons(shapely.multipoints(rng.uniform(0, 100, (40, 2)) + [x0, y0]),
                                     extend_to=box(x0, y0, x0 + 100, y0 + 100))
    sa, sb, _ = segments(shapely.get_parts(shapely.boundary(shapely.get_parts(cells))))
    tree = shapely.STRtree(shapely.linestrings(np.stack([sa, sb], axis=1)))
    lines = shapely.linestrings(rng.uniform(0, 100, (60, 2, 2)) + [x0, y0])
    xy, idx = shapely.get_coordinates(shapely.segmentize(lines, 0.25), return_index=True)
    (who, _), expected = tree.query_nearest(shapely.points(xy), return_distance=True, all_matches=False)
    want = np.empty(len(xy))
    want[who] = expected
    bound = np.zeros(len(lines))
    np.maximum.at(bound, idx, want)  # each line's farthest point: every point lies within it of a target
    got = _nearest_within(xy, idx, lines, bound, tree, sa, sb)
    assert np.allclose(got, want, rtol=0, atol=1e-9)
    assert np.mean(got == want) > 0.99  # the same arithmetic as GEOS: equal to the last bit nearly everywhere


def test_a_line_snapped_only_once_its_other_end_is_held_keeps_its_junctions(tmp_path):
    # A generated map (tests/test_repair_bounds.py's generator): a contact of two vertices whose snap is refused in
    # snap-lines' first round (farther from the boundaries than drawn) is snapped in a later round, once its start
    # is held where it meets two other contacts. Its end lies on a fault (2e-10 m) and 0.063 m from a boundary
    # vertex; the junctions were asked only of the lines the first round changed, so the end went onto the vertex,
    # off the fault, and close-dangles closed it again: on every run, so a second run was never a no-op.
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from coverage_builders import write_map
    from test_repair_bounds import broken

    smap = broken(n=28, seed=1924, grow=0.8387198320328457, shrink=0.5194775145171742, nudge=0.11652597408485786)
    project = write_map(smap, tmp_path / "map")
    first = repair(project, tmp_path / "out")
    assert not [c for c in first.changes if c.repair == "close-dangles"]
    assert repair(tmp_path / "out", tmp_path / "again").changes == ()


@pytest.mark.parametrize("ids", [["L1", "L2"], [101, 102]])
def test_a_generated_line_carries_the_id_the_log_gives_it_in_the_layers_id_field(tmp_path, ids):
    # the lines' ids come from a field of their own (text, or whole numbers in an INTEGER field): each line
    # draw-missing-lines adds holds its id there, so the copy, the log and diff name it the same
    from builders import edit_layer, edit_manifest

    from archivist.diff import diff

    units = gpd.GeoDataFrame({"unit": ["A", "B", "C"]},
                             geometry=[box(0, 0, 100, 100), box(100, 0, 200, 50), box(100, 50, 200, 100)], crs=CRS)
    project = project_with(tmp_path, ("contact", LineString([(100, 0), (100, 100)])), ("map-boundary", FRAME), units=units)
    edit_layer(project, "map.gpkg", "lines", lambda f: f.assign(line_id=ids))
    edit_manifest(project, lambda d: d["layers"]["lines"].update({"id_field": "line_id"}))
    result = repair(project, tmp_path / "out", only=["draw-missing-lines"])
    (added,) = [c for c in result.changes if c.repair == "draw-missing-lines"]
    copy = load_project(tmp_path / "out")
    assert list(copy.layers["lines"].ids) == [str(i) for i in ids] + list(added.features_after)
    stored = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines")["line_id"]
    assert stored.dtype.kind == ("i" if isinstance(ids[0], int) else "O")
    found = [c for c in diff(project, tmp_path / "out").changes if c.change == "line-added"]
    assert [c.features for c in found] == [added.features_after]


def _moved_boundary_state(project: Path, x: float):
    """The working copy of ``project`` as if the polygon repairs had moved A and B's common edge to ``x``."""
    from archivist.repair.api import make_state, settings_for

    proj = load_project(project)
    state = make_state(proj)
    geoms = np.asarray(state.units.geometry.values, dtype=object).copy()
    geoms[0], geoms[1] = box(0, 0, x, 100), box(x, 0, 200, 100)
    state.units = state.units.set_geometry(list(geoms), crs=state.units.crs)
    return state, settings_for(proj)


@pytest.mark.parametrize("x, follows", [(101.5, True), (102.5, False)])
def test_a_contact_on_a_boundary_the_polygon_repairs_moved_follows_it_within_twice_the_tolerance(tmp_path, x, follows):
    # The contact lies on A and B's common edge x = 100 as drawn (tolerance 1 m). The polygon repairs moved that
    # edge to x = 101.5 (two repairs within their bounds can move it up to 2 m): its middle vertex (100, 50) is
    # 1.5 m from every boundary, and within the tolerance it would stay there, a line-off-boundary the map did not
    # have. It follows the edge, by hand: (100, 0) to the boundary vertex (101.5, 0), (100, 50) to the nearest point
    # (101.5, 50), (100, 100) to (101.5, 100), 1.5 m each. Moved to x = 102.5 (beyond twice the tolerance) it stays.
    # The frame has no vertex where the contact meets it (at a shared vertex the junction holds the contact's end).
    from archivist.repair.lines import snap_lines

    frame = LineString([(0, 0), (0, 100), (200, 100), (200, 0), (0, 0)])
    project = project_with(tmp_path, ("contact", LineString([(100, 0), (100, 50), (100, 100)])), ("map-boundary", frame))
    state, settings = _moved_boundary_state(project, x)
    changes, left = snap_lines(state, settings)
    contact = state.lines.geometry.iloc[0]
    if not follows:
        assert [c for c in changes if c.features_before == ("1",)] == []
        assert shapely.get_coordinates(contact).tolist() == [[100, 0], [100, 50], [100, 100]]
        return
    assert shapely.get_coordinates(single(contact)).tolist() == [[101.5, 0], [101.5, 50], [101.5, 100]]
    (change,) = [c for c in changes if c.features_before == ("1",)]
    assert change.max_shift == pytest.approx(1.5, abs=1e-9)
    assert float(shapely.hausdorff_distance(change.before, change.after)) == pytest.approx(1.5, abs=1e-9)  # GEOS
    assert "moved more than 1 from it" in change.note


def test_a_contact_drawn_off_its_boundary_does_not_follow_a_boundary_the_repairs_moved(tmp_path):
    # Drawn at x = 98.5, 1.5 m west of the common edge x = 100 (a line-off-boundary before any repair): the
    # repairs moving the edge to x = 99.5 bring it within 1 m, so it is snapped as any contact within the
    # tolerance; moved to x = 101 (2.5 m away) it stays where it was drawn: only a contact drawn on a boundary
    # follows it
    from archivist.repair.lines import snap_lines

    line = LineString([(98.5, 0), (98.5, 50), (98.5, 100)])
    for x, moved in ((99.5, True), (101.0, False)):
        project = project_with(tmp_path / str(x), ("contact", line), ("map-boundary", FRAME))
        state, settings = _moved_boundary_state(project, x)
        changes, _ = snap_lines(state, settings)
        mine = [c for c in changes if c.features_before == ("1",)]
        assert bool(mine) is moved
        assert all("polygon repairs moved" not in c.note for c in mine)
