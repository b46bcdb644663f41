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


# ---------------------------------------------------------------- directions and names in messages

from archivist.analysis.messages import compass, feature_name, grid_azimuth, offset, plural, verb  # noqa: E402


@pytest.mark.parametrize(
    "dx, dy, azimuth, point",
    [
        # azimuth measured clockwise from north (+y): atan2(dx, dy), as in any surveying text
        (0.0, 4.0, 0.0, "north"),
        (3.0, 3.0, 45.0, "north-east"),
        (4.0, 0.0, 90.0, "east"),
        (1.0, -1.0, 135.0, "south-east"),
        (0.0, -2.0, 180.0, "south"),
        (-5.0, -5.0, 225.0, "south-west"),
        (-1.0, 0.0, 270.0, "west"),
        (-2.0, 2.0, 315.0, "north-west"),
        (1.0, 3.0, 18.43494882, "north"),  # under 22.5°: still north
        (1.0, 2.0, 26.56505118, "north-east"),  # over 22.5°: north-east
    ],
)
def test_compass_of_known_vectors(dx, dy, azimuth, point):
    assert grid_azimuth(dx, dy) == pytest.approx(azimuth)
    assert compass(grid_azimuth(dx, dy)) == point
    assert offset(None, 10.0, 20.0, 10.0 + dx, 20.0 + dy)[1] == point


def test_compass_sector_edges():
    assert [compass(a) for a in (-22.5, 22.4999, 22.5, 337.5, 359.9, 360.0, 720.0 + 90)] == [
        "north", "north", "north-east", "north", "north", "north", "east"]


def test_offset_in_a_projected_crs_is_the_map_distance_in_metres():
    import pyproj

    dist, point = offset(pyproj.CRS("EPSG:32633"), 500_000.0, 6_800_000.0, 500_003.0, 6_799_996.0)
    assert dist == pytest.approx(5.0) and point == "south-east"
    # a CRS in US survey feet (EPSG:2227): 1 ft = 1200/3937 m (the survey foot's definition, pyproj's EPSG data)
    factor = pyproj.CRS("EPSG:2227").axis_info[0].unit_conversion_factor
    assert offset(pyproj.CRS("EPSG:2227"), 0.0, 0.0, 0.0, 10.0, factor) == (pytest.approx(10 * 1200 / 3937), "north")


def test_offset_in_a_geographic_crs_is_geodesic_at_high_latitude():
    """At 70°N a step of 0.001° east is not 0.001° of anything on the ground: the distance and azimuth are Geod's."""
    import pyproj

    geod = pyproj.Geod(ellps="WGS84")  # EPSG:4326 is on the WGS 84 ellipsoid (EPSG data through pyproj)
    for (x0, y0, x1, y1), point in [
        ((20.0, 70.0, 20.001, 70.0), "east"),
        ((20.0, 70.0, 20.0, 70.001), "north"),
        ((20.0, 70.0, 19.997, 69.999), "south-west"),  # 0.003° of longitude is about 114 m, 0.001° of latitude 111.7 m
    ]:
        az, _, dist = geod.inv(x0, y0, x1, y1)
        got = offset(pyproj.CRS("EPSG:4326"), x0, y0, x1, y1)
        assert got[0] == pytest.approx(dist, rel=1e-12) and got[1] == point == compass(az)
    # a step east at 70°N is about a third of a step north of the same angle (cos 70° = 0.342)
    east = offset(pyproj.CRS("EPSG:4326"), 20.0, 70.0, 20.001, 70.0)[0]
    north = offset(pyproj.CRS("EPSG:4326"), 20.0, 70.0, 20.0, 70.001)[0]
    assert east / north == pytest.approx(0.342, abs=0.002)


def test_feature_names_put_the_mappers_id_first():
    assert feature_name("sample", 12, "KV-023") == "sample KV-023 (feature 12)"
    assert feature_name("sample", 14, "KV-023", number_word="row") == "sample KV-023 (row 14)"
    assert feature_name("polygon", 1, None, "Lst") == "polygon 1 (Lst)"
    assert feature_name("polygon", 1, "P-7", "Lst") == "polygon P-7 (feature 1, Lst)"
    assert feature_name("polygon", 3, "3", "Lst") == "polygon 3 (Lst)"  # the id field repeats the number
    assert feature_name("sample", 5, " ") == "sample 5"  # a blank id is no name


def test_plural_and_verb():
    assert [plural(n, "notice") for n in (0, 1, 2)] == ["0 notices", "1 notice", "2 notices"]
    assert plural(2, "analysis", "analyses") == "2 analyses"
    assert (verb(1, "has", "have"), verb(3, "has", "have")) == ("has", "have")
