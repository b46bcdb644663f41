"""Family `crs`, checked against pyproj's copy of the EPSG dataset (areas of use, UTM zones, transformations)."""

import math
import warnings

import geopandas as gpd
import pyproj
import pytest
import shapely

import archivist
from builders import BUNDLE, copy_bundle, edit_layer, edit_manifest, read_layer, tiny_project

pytestmark = pytest.mark.skipif(not (BUNDLE / "archivist.toml").exists(), reason="example bundle not generated")
LAYERS = ("units", "lines", "extent", "samples", "structures")


def clean(tmp_path):
    return copy_bundle(tmp_path)


def _swap(frame):
    frame = frame.copy()
    frame.geometry = shapely.transform(frame.geometry.values, lambda c: c[:, ::-1])
    return frame


def no_crs(tmp_path):
    with warnings.catch_warnings():  # pyogrio warns that the layer will have no CRS: that is the defect
        warnings.simplefilter("ignore", UserWarning)
        return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", lambda f: f.set_crs(None, allow_override=True))


def other_zone(tmp_path):
    # Samples reprojected (a real transformation) to UTM zone 32N: a different CRS from map.crs.
    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", lambda f: f.to_crs("EPSG:32632"))


def wrong_zone(tmp_path):
    # The classic mistake: coordinates captured in UTM zone 32N, labelled as zone 33N.
    root = copy_bundle(tmp_path)
    for layer in LAYERS:
        edit_layer(root, "map.gpkg", layer, lambda f: f.to_crs("EPSG:32632").set_crs("EPSG:32633", allow_override=True))
    return root


def swapped_samples(tmp_path):
    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", _swap)


def geographic(tmp_path):
    root = copy_bundle(tmp_path)
    for layer in LAYERS:
        edit_layer(root, "map.gpkg", layer, lambda f: f.to_crs("EPSG:4326"))
    return edit_manifest(root, lambda m: m["map"].update(crs="EPSG:4326"))


CASES = {
    "crs-missing": (no_crs, clean),
    "crs-mismatch": (other_zone, clean),
    "crs-outside-area-of-use": (wrong_zone, clean),
    "crs-axis-swap-suspected": (swapped_samples, clean),
    "crs-geographic": (geographic, clean),
}


def found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def test_clean_bundle_gives_no_crs_findings(tmp_path):
    assert archivist.check(clean(tmp_path), only=["crs"]).findings == ()


def test_missing_crs_names_the_layer(tmp_path):
    (f,) = found(no_crs(tmp_path), "crs-missing")
    assert f.layer == "samples" and "map.gpkg:samples" in f.message
    assert "EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message  # the assumption is stated


def test_coordinate_table_without_crs_asks_for_the_key(tmp_path):
    root = tiny_project(tmp_path)
    (root / "samples.csv").write_text("sample_id,easting,northing\nS-1,50,50\n", encoding="utf-8")
    edit_manifest(root, lambda m: m["layers"].update(samples={"path": "samples.csv", "x_field": "easting", "y_field": "northing"}))
    (f,) = found(root, "crs-missing")
    assert 'crs = "EPSG:..."' in f.message and "[layers.samples]" in f.message


def test_mismatch_labels_and_distance_from_pyproj(tmp_path):
    root = other_zone(tmp_path)
    (f,) = found(root, "crs-mismatch")
    assert "EPSG:32632 (WGS 84 / UTM zone 32N)" in f.message and "EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message
    # Reference: the same coordinate pair read in zone 32N and transformed to 33N by PROJ.
    b = read_layer(root, "map.gpkg", "samples").total_bounds
    cx, cy = (b[0] + b[2]) / 2, (b[1] + b[3]) / 2
    tx, ty = pyproj.Transformer.from_crs("EPSG:32632", "EPSG:32633", always_xy=True).transform(cx, cy)
    assert f.measure == pytest.approx(math.hypot(tx - cx, ty - cy), abs=0.01)
    assert f.measure > 100_000  # zones are hundreds of km apart at the same coordinates


@pytest.mark.parametrize(
    "spelling",
    [
        # The same CRS as EPSG:32633, written as an ESRI .prj would write it.
        'PROJCS["WGS_1984_UTM_Zone_33N",GEOGCS["GCS_WGS_1984",DATUM["D_WGS_1984",SPHEROID["WGS_1984",6378137.0,298.257223563]],'
        'PRIMEM["Greenwich",0.0],UNIT["Degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],'
        'PARAMETER["False_Easting",500000.0],PARAMETER["False_Northing",0.0],PARAMETER["Central_Meridian",15.0],'
        'PARAMETER["Scale_Factor",0.9996],PARAMETER["Latitude_Of_Origin",0.0],UNIT["Meter",1.0]]',
        pyproj.CRS("EPSG:32633").to_wkt(),
        "epsg:32633",
    ],
)
def test_same_crs_spelt_differently_is_not_a_mismatch(tmp_path, spelling):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["map"].update(crs=spelling))
    assert found(root, "crs-mismatch") == []


def _lonlat_bounds(root, layer, crs):
    b = read_layer(root, "map.gpkg", layer).total_bounds
    t = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    return t.transform_bounds(*b, densify_pts=21)


def test_wrong_zone_measured_against_epsg_area_of_use(tmp_path):
    root = wrong_zone(tmp_path)
    (f,) = found(root, "crs-outside-area-of-use")
    aou = pyproj.CRS("EPSG:32633").area_of_use  # EPSG dataset: 12°E to 18°E, equator to 84°N
    assert (aou.west, aou.east) == (12.0, 18.0)
    west, south, east, north = _lonlat_bounds(root, "units", "EPSG:32633")
    overshoot = east - aou.east
    assert overshoot > 2  # zone-32 coordinates read in zone 33 land in 20-21°E
    assert f"reach {overshoot:.2f}° " in f.message and "east" in f.message
    # The distance: geodesic from the area's east edge to the farthest corner, on the WGS 84 ellipsoid.
    expected = max(pyproj.Geod(ellps="WGS84").inv(aou.east, lat, east, lat)[2] for lat in (south, north))
    assert f.measure == pytest.approx(expected, rel=1e-6)
    assert "EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message


def test_wrong_hemisphere_label(tmp_path):
    # The bundle's northings (6.79e6 m) read as zone 33 South: still inside 33S's area of use
    # (0-80°S) as far as latitude goes, so no finding: the rule only knows the area of use.
    root = copy_bundle(tmp_path)
    for layer in LAYERS:
        edit_layer(root, "map.gpkg", layer, lambda f: f.set_crs("EPSG:32733", allow_override=True))
    edit_manifest(root, lambda m: m["map"].update(crs="EPSG:32733"))
    south = pyproj.CRS("EPSG:32733").area_of_use
    lon, lat = pyproj.Transformer.from_crs("EPSG:32733", "EPSG:4326", always_xy=True).transform(484000, 6795000)
    assert south.south <= lat <= south.north and south.west <= lon <= south.east
    assert found(root, "crs-outside-area-of-use") == []


def test_swapped_samples_named_at_the_layer(tmp_path):
    root = swapped_samples(tmp_path)
    (f,) = found(root, "crs-axis-swap-suspected")
    assert f.layer == "samples" and "all 33 features" in f.message
    # The area-of-use rule sees the same layer and points at the swap.
    outside = found(root, "crs-outside-area-of-use")
    assert outside and "swapped" in outside[0].message


def test_a_few_swapped_points_each_named(tmp_path):
    def swap_two(frame):
        frame = frame.copy()
        g = frame.geometry.values.copy()
        g[:2] = shapely.transform(g[:2], lambda c: c[:, ::-1])
        frame.geometry = g
        return frame

    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", swap_two)
    hits = found(root, "crs-axis-swap-suspected")
    ids = read_layer(root, "map.gpkg", "samples").sample_id.tolist()[:2]
    assert sorted(f.features for f in hits) == sorted((i,) for i in ids)


def test_latitude_longitude_swapped_in_geographic_layer(tmp_path):
    root = geographic(tmp_path)
    assert found(root, "crs-axis-swap-suspected") == []
    edit_layer(root, "map.gpkg", "samples", _swap)
    (f,) = found(root, "crs-axis-swap-suspected")
    assert f.layer == "samples" and "where the other layers are" in f.message


def test_geographic_map_gets_the_utm_zone_of_its_centre(tmp_path):
    root = geographic(tmp_path)
    (f,) = found(root, "crs-geographic")
    w, s, e, n = _lonlat_bounds(root, "extent", "EPSG:4326")
    lon, lat = (w + e) / 2, (s + n) / 2
    # UTM zone numbering: zone = floor((lon + 180) / 6) + 1; WGS 84 / UTM north zones are EPSG:326zz.
    zone = math.floor((lon + 180) / 6) + 1
    expected = pyproj.CRS.from_epsg(32600 + zone)
    aou = expected.area_of_use
    assert aou.west <= lon <= aou.east and aou.south <= lat <= aou.north
    assert f"EPSG:{32600 + zone} ({expected.name})" in f.message
    assert "EPSG:4326 (WGS 84)" in f.message


def test_geographic_etrs89_map_gets_an_etrs89_zone(tmp_path):
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[shapely.box(14.60, 61.20, 14.65, 61.25), shapely.box(14.65, 61.20, 14.70, 61.25)], crs="EPSG:4258")
    lines = gpd.GeoDataFrame({"kind": ["contact"], "certainty": ["certain"]}, geometry=[shapely.LineString([(14.65, 61.20), (14.65, 61.25)])], crs="EPSG:4258")
    root = tiny_project(tmp_path, units=units, lines=lines, manifest={"map": {"crs": "EPSG:4258"}})
    (f,) = found(root, "crs-geographic")
    # EPSG dataset: ETRS89 / UTM zone 33N is EPSG:25833.
    assert "EPSG:25833 (ETRS89 / UTM zone 33N)" in f.message


def test_projected_map_is_not_geographic(tmp_path):
    assert found(clean(tmp_path), "crs-geographic") == []


def test_findings_leave_the_project_alone(tmp_path):
    from builders import tree_digest

    root = wrong_zone(tmp_path)
    before = tree_digest(root)
    archivist.check(root, only=["crs"])
    assert tree_digest(root) == before


def test_spanning_two_zones_is_said(tmp_path):
    # A geographic map from 11°E to 13.5°E crosses 12°E, where zone 32N ends in the EPSG dataset.
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[shapely.box(11, 60, 12.5, 60.5), shapely.box(12.5, 60, 13.5, 60.5)], crs="EPSG:4326")
    lines = gpd.GeoDataFrame({"kind": ["contact"], "certainty": ["certain"]}, geometry=[shapely.LineString([(12.5, 60), (12.5, 60.5)])], crs="EPSG:4326")
    root = tiny_project(tmp_path, units=units, lines=lines, manifest={"map": {"crs": "EPSG:4326"}})
    (f,) = found(root, "crs-geographic")
    assert pyproj.CRS("EPSG:32632").area_of_use.east == 12.0
    assert "spans 2 UTM zones" in f.message
    centre = (11 + 13.5) / 2
    zone = math.floor((centre + 180) / 6) + 1  # UTM zone numbering
    assert zone == 33 and "EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message


def test_local_engineering_crs_is_not_a_crash(tmp_path):
    # A site grid with no tie to the globe: nothing to place, so no area-of-use or swap finding, and no traceback.
    local = 'LOCAL_CS["site grid",LOCAL_DATUM["site",0],UNIT["metre",1],AXIS["Easting",EAST],AXIS["Northing",NORTH]]'
    root = copy_bundle(tmp_path)
    edit_layer(root, "map.gpkg", "samples", lambda f: f.set_crs(local, allow_override=True))
    report = archivist.check(root, only=["crs"])
    assert [f.rule for f in report.findings] == ["crs-mismatch"]
    assert "site grid" in report.findings[0].message
