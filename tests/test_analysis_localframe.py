"""Maps in longitude/latitude are judged in metres alike in every direction (analysis/localframe.py, engine)."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely
from builders import tiny_project
from coverage_builders import line_frame
from shapely.geometry import LineString, Point, box

import archivist
from archivist.analysis.localframe import LocalFrame, metres_per_degree
from archivist.project import make_config

WGS84 = pyproj.Geod(ellps="WGS84")  # reference: pyproj's Geod (geodesics on the WGS 84 ellipsoid, GeographicLib)
TOPOLOGY_AND_LINES = ["topology", "linework"]


def geod_east(lon: float, lat: float, metres: float) -> float:
    """The longitude ``metres`` east of (lon, lat) along the geodesic (reference: Geod.fwd)."""
    return WGS84.fwd(lon, lat, 90.0, metres)[0]


def geod_north(lon: float, lat: float, metres: float) -> float:
    return WGS84.fwd(lon, lat, 0.0, metres)[1]


@pytest.mark.parametrize("lat", [0.0, 45.0, 60.0, 70.0, 80.0])
def test_metres_per_degree_matches_the_geodesic(lat):
    kx, ky = metres_per_degree(pyproj.CRS("EPSG:4326"), lat)
    d = 1e-4  # a short step, where the geodesic and the degree step agree to well under 1e-6
    assert kx * d == pytest.approx(WGS84.inv(10.0, lat, 10.0 + d, lat)[2], rel=1e-6)  # reference: Geod.inv
    assert ky * d == pytest.approx(WGS84.inv(10.0, lat - d / 2, 10.0, lat + d / 2)[2], rel=1e-6)  # reference: Geod.inv


def test_the_frame_keeps_straight_edges_and_inverts_exactly():
    crs = pyproj.CRS("EPSG:4326")
    frame = LocalFrame.around(crs, np.array([box(10.0, 60.0, 10.03, 60.01)], dtype=object))
    # a vertex on a neighbour's edge along a parallel stays on it (the frame is affine)
    edge, corner = LineString([(10.0, 60.0), (10.0102, 60.0)]), Point(10.01, 60.0)
    assert shapely.distance(frame.to_local(edge), frame.to_local(corner)) == 0.0
    p = Point(10.123456789, 60.123456789)
    back = frame.to_map(frame.to_local(p))
    assert back.x == pytest.approx(p.x, abs=1e-12) and back.y == pytest.approx(p.y, abs=1e-12)


def test_default_tolerance_of_a_geographic_map_is_in_metres():
    cfg = make_config({"map": {"scale": 25000}}, pyproj.CRS("EPSG:4326"))
    assert cfg.tolerance == pytest.approx(2.5)  # 0.1 mm at 1:25 000, judged in metres in the local frame
    assert make_config({"map": {"scale": 25000}}, pyproj.CRS("EPSG:32633")).tolerance == pytest.approx(2.5)


def two_units_apart(tmp_path, name, lat, gap_m, direction):
    """Two units with a strip ``gap_m`` metres wide between them, east-west or north-south, at ``lat``; 1:25 000."""
    lon0, lon1, lat1 = 10.0, 10.04, lat + 0.02
    if direction == "east-west":  # the strip runs north-south; its width is measured east-west
        mid = 10.02
        a = box(lon0, lat, mid, lat1)
        b = box(geod_east(mid, (lat + lat1) / 2, gap_m), lat, lon1, lat1)
    else:
        mid = lat + 0.01
        a = box(lon0, lat, lon1, mid)
        b = box(lon0, geod_north(10.02, mid, gap_m), lon1, lat1)
    frame = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[a, b], crs="EPSG:4326")
    outline = LineString(box(lon0, lat, lon1, lat1).exterior.coords)
    lines = line_frame(("map-boundary", outline)).set_crs("EPSG:4326", allow_override=True)
    return tiny_project(tmp_path, name=name, units=frame, lines=lines, extent=box(lon0, lat, lon1, lat1),
                        manifest={"map": {"scale": 25000, "crs": "EPSG:4326"}})


@pytest.mark.parametrize("lat", [60.0, 70.0])
@pytest.mark.parametrize("times", [0.5, 0.7, 1.5, 3.0])
def test_a_gap_is_judged_alike_east_west_and_north_south(tmp_path, lat, times):
    # 1:25 000: the tolerance is 2.5 m. A strip `times` tolerances wide, measured on the ground with Geod.fwd,
    # is a gap (unit-gap) when wider than the tolerance, and a misfit of the shared edge when not, in
    # either direction. One metres-per-degree factor made a 0.7-tolerance strip east-west at 60°N a gap.
    tol = 2.5
    rules = {}
    for direction in ("east-west", "north-south"):
        root = two_units_apart(tmp_path, f"{direction}-{lat}-{times}", lat, times * tol, direction)
        report = archivist.check(root, only=TOPOLOGY_AND_LINES)
        rules[direction] = sorted({f.rule for f in report.findings if f.family == "topology"})
        gaps = [f for f in report.findings if f.rule == "unit-gap"]
        if times > 1:
            (gap,) = gaps
            assert "wide" in gap.message
        else:
            assert gaps == [], [f.message for f in gaps]
    assert rules["east-west"] == rules["north-south"], rules


@pytest.mark.parametrize("lat", [60.0, 75.0])
def test_sample_distances_at_high_latitude_match_the_geodesic(tmp_path, lat):
    lon0, lon1, lat1 = 10.0, 10.04, lat + 0.02
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(lon0, lat, 10.02, lat1), box(10.02, lat, lon1, lat1)], crs="EPSG:4326")
    lines = line_frame(("map-boundary", LineString(box(lon0, lat, lon1, lat1).exterior.coords))).set_crs("EPSG:4326", allow_override=True)
    east = Point(geod_east(lon1, lat + 0.01, 100.0), lat + 0.01)  # 100 m east of the extent
    north = Point(10.02, geod_north(10.02, lat1, 100.0))  # 100 m north of it
    samples = gpd.GeoDataFrame({"sample_id": ["E", "N"], "unit": ["B", "B"]}, geometry=[east, north], crs="EPSG:4326")
    root = tiny_project(tmp_path, name=f"s{lat}", units=units, lines=lines, samples=samples, extent=box(lon0, lat, lon1, lat1),
                        manifest={"map": {"scale": 25000, "crs": "EPSG:4326"}})
    found = {f.features[0]: f for f in archivist.check(root, rules=["sample-outside-extent"]).findings}
    assert sorted(found) == ["E", "N"]
    for sid, p, ref in (("E", east, (lon1, lat + 0.01)), ("N", north, (10.02, lat1))):
        expect = WGS84.inv(ref[0], ref[1], p.x, p.y)[2]  # reference: Geod.inv (100 m by construction)
        assert found[sid].measure == pytest.approx(expect, rel=0.01)
        assert (found[sid].x, found[sid].y) == (round(p.x, 8), round(p.y, 8))  # reported in the map CRS


def test_locations_keep_the_precision_of_the_crs(tmp_path):
    lat = 60.0
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(10.0, lat, 10.02, lat + 0.2), box(10.02, lat, 10.04, lat + 0.2)], crs="EPSG:4326")
    lines = line_frame(("map-boundary", LineString(box(10.0, lat, 10.04, lat + 0.2).exterior.coords))).set_crs("EPSG:4326", allow_override=True)
    p = Point(10.123456789, 60.123456789)  # 0.08° (about 4.5 km) east of the extent
    samples = gpd.GeoDataFrame({"sample_id": ["P"], "unit": ["B"]}, geometry=[p], crs="EPSG:4326")
    root = tiny_project(tmp_path, name="deg", units=units, lines=lines, samples=samples, manifest={"map": {"scale": 25000, "crs": "EPSG:4326"}})
    (f,) = archivist.check(root, rules=["sample-outside-extent"]).findings
    assert (f.x, f.y) == (10.12345679, 60.12345679)
    assert f.wkt == "POINT (10.12345679 60.12345679)"

    # the listings (text, HTML, package README) print degrees to 6 decimals (about 0.1 m at 60°N; 1 decimal
    # would be about 11 km in latitude), metres to 1 decimal
    from archivist.report.html import render_html
    from archivist.report.text import render_text

    report = archivist.check(root, rules=["sample-outside-extent"])
    assert report.place_decimals == 6
    assert "10.123457, 60.123457" in render_text(report, details=True)
    assert "10.123457, 60.123457" in render_html(report)

    q = Point(500_123.456789, 6_650_987.654321)
    utm = gpd.GeoDataFrame({"sample_id": ["Q"], "unit": ["B"]}, geometry=[q], crs="EPSG:32633")
    root = tiny_project(tmp_path, name="utm", samples=utm)
    (f,) = archivist.check(root, rules=["sample-outside-extent"]).findings
    assert (f.x, f.y) == (500_123.457, 6_650_987.654)
    assert f.wkt == "POINT (500123.457 6650987.654)"
    report = archivist.check(root, rules=["sample-outside-extent"])
    assert report.place_decimals == 1
    assert "500123.5, 6650987.7" in render_text(report, details=True)


def test_a_tiny_overlap_prints_its_digits_in_the_text_report(tmp_path):
    from archivist.report.text import render_text

    # two 100 m squares (EPSG:32633) overlapping by 1e-6 m² (a 1 mm x 1 mm corner)
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 100, 100), box(99.999, 99.999, 200, 200)], crs="EPSG:32633")
    root = tiny_project(tmp_path, name="tiny-overlap", units=units, manifest={"checks": {"tolerance": 0.0001}})
    report = archivist.check(root, rules=["unit-overlap"])
    (f,) = report.findings
    assert f.measure == pytest.approx(1e-6, rel=1e-3)
    text = render_text(report)
    assert "1e-06 m²" in text and "0.00 m²" not in text
