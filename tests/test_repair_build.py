"""``--build-polygons``: unit polygons from contacts, faults and frame, coded by label points.

The hand-drawn map: a 300 m square frame, two contacts (x = 100 and x = 200,
the second stopping 0.4 m short of the top edge), and a fault from (200, 150)
to the east edge. Faces by hand: [0,100]x[0,300] (30 000 m²),
[100,200]x[0,300] (30 000 m²), [200,300]x[0,150] and [200,300]x[150,300]
(15 000 m² each): 90 000 m², the frame's area. GEOS (shapely
``coverage_is_valid``, ``union_all``, ``polygonize_full``) is the outside
reference.
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from shapely.geometry import LineString, Point, Polygon, box

sys.path.insert(0, str(Path(__file__).resolve().parent))

from builders import CRS, edit_manifest, tiny_project, write_layer  # noqa: E402
from coverage_builders import line_frame  # noqa: E402

from archivist.engine import check  # noqa: E402
from archivist.errors import ArchivistError  # noqa: E402
from archivist.repair.api import repair  # noqa: E402
from archivist.repair.build import BUILT_UNITS, build_units  # noqa: E402

SQUARE = box(0, 0, 300, 300)
FRAME = LineString([(0, 0), (0, 300), (300, 300), (300, 0), (0, 0)])
CONTACT_WEST = LineString([(100, 0), (100, 300)])
CONTACT_EAST = LineString([(200, 0), (200, 299.6)])  # 0.4 m short of the top edge
FAULT = LineString([(200, 150), (300, 150)])
# labels: A in the west face (twice), B in the middle, C in the south-east; none in the north-east face
LABELS = [("A", Point(50, 50)), ("A", Point(40, 200)), ("B", Point(150, 50)), ("C", Point(250, 50))]


def linework() -> np.ndarray:
    return np.array([CONTACT_WEST, LineString([(200, 0), (200, 300)]), FAULT, FRAME], dtype=object)


def test_faces_of_the_hand_drawn_map_form_a_valid_coverage_of_the_frame():
    codes = np.array([c for c, _ in LABELS] + ["B"], dtype=object)
    points = np.array([p for _, p in LABELS] + [Point(150, 250)], dtype=object)
    built = build_units(linework(), None, points, codes)
    assert len(built.polygons) == 4
    assert bool(shapely.coverage_is_valid(built.polygons))  # GEOS
    union = shapely.union_all(built.polygons)
    assert float(union.area) == pytest.approx(90_000.0)  # by hand: 300 m x 300 m
    assert shapely.equals(union, SQUARE)  # GEOS: the union is the frame's square
    by_area = sorted(zip(shapely.area(built.polygons).tolist(), built.codes.tolist()))
    assert by_area == [(15_000.0, ""), (15_000.0, "C"), (30_000.0, "A"), (30_000.0, "B")]
    (none,) = built.unlabelled()
    assert shapely.equals(built.polygons[none], box(200, 150, 300, 300))
    assert len(built.conflicting(codes)) == 0
    assert len(built.dangles) == len(built.cuts) == len(built.invalid) == 0


def test_two_different_labels_in_one_face_leave_it_uncoded():
    codes = np.array(["A", "B"], dtype=object)
    points = np.array([Point(50, 50), Point(60, 250)], dtype=object)  # both in the west face
    built = build_units(linework(), None, points, codes)
    (both,) = built.conflicting(codes)
    assert built.codes[both] == ""
    assert shapely.equals(built.polygons[both], box(0, 0, 100, 300))


def test_polygonize_leftovers_are_reported():
    # A contact ending inside a face is a dangle; GEOS polygonize_full returns it (GEOS reference).
    lines = np.append(linework(), LineString([(20, 20), (60, 60)]))
    built = build_units(lines, None, np.empty(0, dtype=object), np.empty(0, dtype=object))
    assert len(built.dangles) == 1
    assert shapely.equals(built.dangles[0], LineString([(20, 20), (60, 60)]))


def labels_project(tmp_path: Path, labels=LABELS, extra_lines=()) -> Path:
    rows = [("contact", CONTACT_WEST), ("contact", CONTACT_EAST), ("fault", FAULT), ("map-boundary", FRAME), *extra_lines]
    project = tiny_project(tmp_path, lines=line_frame(*rows), manifest={"checks": {"tolerance": 0.5}})
    frame = gpd.GeoDataFrame({"unit": [c for c, _ in labels]}, geometry=[p for _, p in labels], crs=CRS)
    write_layer(project / "map.gpkg", "labels", frame)

    def change(d):
        del d["layers"]["units"]
        d["layers"]["labels"] = {"path": "map.gpkg", "layer": "labels", "unit_field": "unit"}

    return edit_manifest(project, change)


def test_build_polygons_writes_coded_units_and_lists_what_it_cannot_decide(tmp_path):
    labels = [*LABELS, ("B", Point(150, 280)), ("C", Point(140, 150))]  # the middle face gets B and C: two units
    project = labels_project(tmp_path, labels)
    out = tmp_path / "out"
    result = repair(project, out, build_polygons=True)
    built = [c for c in result.changes if c.repair == "build-polygons"]
    assert len(built) == 4
    assert sum(c.area_moved for c in built) == pytest.approx(90_000.0)
    units = pyogrio.read_dataframe(out / BUILT_UNITS, layer="units")
    geoms = np.asarray(units.geometry.array, dtype=object)
    assert bool(shapely.coverage_is_valid(geoms))  # GEOS
    assert shapely.equals(shapely.union_all(geoms), SQUARE)  # GEOS: the union is the frame's area
    reasons = sorted(lf.reason.split(":")[0] for lf in result.left if lf.repair == "build-polygons")
    assert reasons == ["label points of different units inside (B, C)", "no label point inside"]
    assert sorted(units["unit"].fillna("").tolist()) == ["", "", "A", "C"]
    # the copy's manifest names the built layer; check reads it, and the linework agrees with it
    found = {f.rule for f in check(out).findings}
    assert not found & {"line-off-boundary", "line-dangle", "boundary-without-line", "unit-overlap", "unit-gap"}
    assert "unit-code-missing" in found  # the two faces left uncoded are there for the geologist


def test_build_polygons_closes_the_dangle_and_never_moves_the_labels(tmp_path):
    # The east contact stops 0.4 m short of the frame (tolerance 0.5 m): the faces still close.
    project = labels_project(tmp_path)
    result = repair(project, tmp_path / "out", build_polygons=True)
    assert len([c for c in result.changes if c.repair == "build-polygons"]) == 4
    assert not [lf for lf in result.left if "dangle" in lf.reason]
    lines = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines")
    east = shapely.get_parts(lines.geometry.iloc[1])[0]
    assert shapely.get_coordinates(east)[-1].tolist() == [200.0, 300.0]  # closed exactly on the frame
    assert pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="labels").geometry.equals(
        pyogrio.read_dataframe(project / "map.gpkg", layer="labels").geometry)


def test_a_fault_dying_out_inside_a_face_is_not_listed(tmp_path):
    project = labels_project(tmp_path, extra_lines=[("fault", LineString([(20, 250), (60, 280)]))])
    result = repair(project, tmp_path / "out", build_polygons=True)
    assert not [lf for lf in result.left if "dangle" in lf.reason]


def test_build_polygons_refuses_a_project_with_units(tmp_path):
    project = tiny_project(tmp_path)
    with pytest.raises(ArchivistError, match="already has 2"):
        repair(project, tmp_path / "out", build_polygons=True)


def test_build_polygons_needs_label_points(tmp_path):
    project = tiny_project(tmp_path)
    edit_manifest(project, lambda d: d["layers"].pop("units"))
    with pytest.raises(ArchivistError, match=r"\[layers.labels\]"):
        repair(project, tmp_path / "out", build_polygons=True)


def test_holes_and_islands_are_faces_of_their_own():
    # A contact ring inside the west face: the face gets a hole and the ring an island (GEOS polygonize).
    ring = LineString([(30, 30), (70, 30), (70, 70), (30, 70), (30, 30)])
    lines = np.append(linework(), ring)
    codes = np.array(["A", "D"], dtype=object)
    built = build_units(lines, None, np.array([Point(10, 10), Point(50, 50)], dtype=object), codes)
    assert len(built.polygons) == 5
    assert bool(shapely.coverage_is_valid(built.polygons))
    island = [i for i, c in enumerate(built.codes) if c == "D"]
    assert len(island) == 1 and shapely.equals(built.polygons[island[0]], Polygon(ring))
