"""Sizes as messages and findings write them: small measures keep their significant digits."""

from __future__ import annotations

import pytest

from archivist.analysis.messages import num
from archivist.engine import _measure


# expected texts: Python's format mini-language, "{:.2f}" from 0.1 up and "{:.3g}" below (docs.python.org,
# Format Specification Mini-Language)
@pytest.mark.parametrize(
    "value, text",
    [
        (1.0, "1.00"),
        (12.25, "12.25"),
        (0.0, "0.00"),
        (1e-6, "1e-06"),
        (0.000123456, "0.000123"),
        (0.5, "0.50"),
        (0.0512, "0.0512"),
        (0.0996, "0.10"),
        (0.996, "1.00"),
    ],
)
def test_num_keeps_significant_digits_of_small_sizes(value, text):
    assert num(value) == text


def test_measure_of_a_tiny_overlap_is_not_zero():
    assert _measure(1e-6) == 1e-6
    assert _measure(0.0123456) == 0.0123
    assert _measure(1234.56789) == 1234.568
    assert _measure(0.0) == 0.0
    assert _measure(float("nan")) is None
    assert _measure(None) is None


# ---------------------------------------------------------------- ground measures in a geographic CRS

def test_ground_lengths_and_areas_at_60n_match_geod():
    import numpy as np
    import pyproj
    from shapely.geometry import LineString, Polygon

    from archivist.analysis.messages import Ground, ground

    class Project:  # the two attributes ground() reads
        crs = pyproj.CRS.from_epsg(4326)
        layers: dict = {}

    near = np.array([Polygon([(10.0, 60.0), (10.1, 60.0), (10.1, 60.05), (10.0, 60.05)])], dtype=object)
    g = ground(Project(), near)  # type: ignore[arg-type]
    assert isinstance(g, Ground) and g.geographic
    geod = pyproj.Geod(ellps="WGS84")  # reference: pyproj's Geod on the WGS 84 ellipsoid (GeographicLib)
    lines = np.array([
        LineString([(10.0, 60.02), (10.1, 60.02)]),  # east-west, about 5.6 km
        LineString([(10.05, 60.0), (10.05, 60.05)]),  # north-south, about 5.6 km
        LineString([(10.0, 60.0), (10.1, 60.05)]),  # diagonal
        LineString([(10.02, 60.01), (10.02001, 60.01)]),  # 0.56 m
    ], dtype=object)
    expect = [geod.geometry_length(line) for line in lines]  # reference: Geod.geometry_length
    assert g.lengths(lines) == pytest.approx(expect, rel=1e-3)
    polys = np.array([near[0], Polygon([(10.03, 60.01), (10.0302, 60.01), (10.0302, 60.03), (10.03, 60.03)])], dtype=object)
    expect_area = [abs(geod.geometry_area_perimeter(p)[0]) for p in polys]  # reference: Geod.geometry_area_perimeter
    assert g.areas(polys) == pytest.approx(expect_area, rel=1e-3)
    # the width of the 0.0002° x 0.02° strip: the east-west geodesic across it (reference: Geod.inv)
    assert g.widths(polys[1:], [np.nan])[0] == pytest.approx(geod.inv(10.03, 60.02, 10.0302, 60.02)[2], rel=1e-3)
