"""The largest coordinate per geometry (``far_out``), found in one pass, equals a plain per-geometry loop."""

from __future__ import annotations

import numpy as np
import pyproj
import shapely

from archivist.farcoords import far_out


def largest_by_loop(geoms: np.ndarray) -> np.ndarray:
    """One geometry at a time: the largest |x| or |y| (inf if one is infinite, nan if one is NaN, 0 with none)."""
    out = np.zeros(len(geoms))
    for i, g in enumerate(geoms):
        xy = shapely.get_coordinates(g)
        if not len(xy):
            continue
        if np.isnan(xy).any():
            out[i] = np.nan
        else:
            out[i] = np.abs(xy).max()
    return out


def test_largest_coordinate_matches_the_loop_with_missing_empty_and_broken_geometries():
    rng = np.random.default_rng(5)
    geoms = [shapely.linestrings(rng.uniform(-1e5, 1e5, size=(rng.integers(2, 9), 2))) for _ in range(60)]
    geoms[3] = None
    geoms[7] = shapely.LineString()
    geoms[11] = shapely.linestrings([[0.0, 0.0], [np.inf, 1.0]])
    geoms[13] = shapely.linestrings([[0.0, 0.0], [np.nan, 1.0]])
    geoms[17] = shapely.multilinestrings([geoms[1], shapely.linestrings([[2e9, 0.0], [0.0, -3e9]])])
    geoms[59] = None  # a missing geometry last: no coordinates after the last run
    arr = np.array(geoms, dtype=object)
    mask, largest = far_out(arr, pyproj.CRS("EPSG:32633"))
    expected = largest_by_loop(arr)
    assert np.array_equal(largest, expected, equal_nan=True)
    assert np.flatnonzero(mask).tolist() == [11, 13, 17]


def test_largest_coordinate_of_a_layer_with_no_broken_coordinate_matches_the_loop():
    # every coordinate finite and near: the largest comes from each geometry's bounds, which must be its coordinates'
    rng = np.random.default_rng(8)
    geoms = [shapely.polygons(rng.uniform(-1e6, 1e6, size=(rng.integers(3, 9), 2)).tolist() + [[0.0, 0.0]])
             if i % 3 else shapely.linestrings(rng.uniform(-5e8, -1e3, size=(4, 2))) for i in range(90)]
    geoms[4] = None
    geoms[9] = shapely.Polygon()
    geoms[20] = shapely.multipoints([[-7.5e8, 3.0], [2.0, 1.0]])
    geoms[30] = shapely.GeometryCollection([shapely.Point(1.0, -9.25e8), shapely.LineString([(0, 0), (1, 1)])])
    arr = np.array(geoms, dtype=object)
    mask, largest = far_out(arr, pyproj.CRS("EPSG:32633"))
    assert not mask.any()
    assert np.array_equal(largest, largest_by_loop(arr))
    assert largest[4] == 0 and largest[9] == 0 and largest[20] == 7.5e8 and largest[30] == 9.25e8
    assert far_out(np.array([None, shapely.Point()], dtype=object), None)[1].tolist() == [0.0, 0.0]


def test_a_layer_finds_its_far_coordinates_once_and_as_far_out_does(tmp_path):
    from builders import tiny_project

    from archivist.project import load_project

    layer = load_project(tiny_project(tmp_path)).layers["units"]
    mask, largest = layer.far
    assert layer.far is layer.far  # computed once per load, shared by every check that asks
    expected_mask, expected_largest = far_out(layer.geometry, layer.crs)
    assert mask.tolist() == expected_mask.tolist() and np.array_equal(largest, expected_largest)
    assert not mask.any() and (largest > 0).all()
