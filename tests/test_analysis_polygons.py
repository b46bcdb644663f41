"""archivist.analysis.polygons: the unit polygons as the checks see them.

Outside reference: GEOS through shapely (``make_valid`` with method
'structure' keeps the area the rings enclose).
"""

from __future__ import annotations

import numpy as np
import shapely
from builders import copy_bundle
from coverage_builders import square_map
from shapely.geometry import LineString, Point, Polygon, box

from archivist.analysis.polygons import polygonal, read_units, sliver_thresholds
from archivist.project import load_project


def test_sliver_thresholds_follow_the_scale(tmp_path):
    # 1 mm² and 0.5 mm of map: at 1:1 000 that is 1 m² and 0.5 m; at 1:25 000, 25 m per mm: 625 m² and 12.5 m
    assert sliver_thresholds(load_project(square_map(tmp_path, "clean"))) == (1.0, 0.5)
    bundle = load_project(copy_bundle(tmp_path))
    assert sliver_thresholds(bundle) == (625.0, 12.5)


def test_polygonal_keeps_area_and_drops_the_rest():
    bowtie = Polygon([(0, 0), (2, 2), (2, 0), (0, 2)])  # invalid: two triangles of 1 m² each
    geoms = np.array([box(0, 0, 1, 1), bowtie, LineString([(0, 0), (1, 1)]), Point(0, 0), None, Polygon()], dtype=object)
    out = polygonal(geoms)
    assert out[0].equals(box(0, 0, 1, 1))
    assert shapely.area(out[1]) == shapely.area(shapely.make_valid(bowtie, method="structure")) == 2.0
    assert out[2:].tolist() == [None] * 4


def test_units_read_with_ids_and_codes(tmp_path):
    units = read_units(load_project(square_map(tmp_path, "codes", codes=["A", " B "])))
    assert units.ids.tolist() == ["1", "2"] and units.codes.tolist() == ["A", "B"]
    assert units.labels([0, 1]) == "polygons 1 (A) and 2 (B)"
    assert units.label(1) == "polygon 2 (B)" and units.labels([1]) == "polygon 2 (B)"
    assert units.labels([0, 1], code=False) == "polygons 1 and 2"
    assert units.numbers is None  # no id_field: the feature number is the name
    assert units.tree.query(Point(7, 5), predicate="within").tolist() == [1]
