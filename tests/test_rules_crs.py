"""Family `crs`, checked against pyproj's copy of the EPSG dataset (areas of use, UTM zones, transformations)."""

import math

import numpy as np
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


# ---------------------------------------------------------------- the true zone, from the project's own evidence
#
# Reference throughout: pyproj's copy of the EPSG dataset (the UTM CRSs, their names and
# areas of use) and PROJ's transformations between them; positions are generated by
# pyproj from known longitudes and latitudes, never typed in.

# Invented places: around 14.70°E 61.30°N (UTM zone 33N: 12°E-18°E in the EPSG dataset)
# and 15.20°E 40.30°S (zone 33S).
NORTH = (14.70, 61.30)
SOUTH = (15.20, -40.30)


def _zoned(tmp_path, *, true, label, where=NORTH, name="zoned", columns=("lon", "lat"), lonlat=None, manifest=None):
    """A tiny two-unit map whose coordinates are computed in ``true`` from known lon/lat but labelled ``label``.

    Samples carry their longitude and latitude (six decimals) in ``columns``;
    ``lonlat`` (a function of the lon/lat arrays) replaces the values written.
    """
    import numpy as np

    from builders import tiny_project

    to_true = pyproj.Transformer.from_crs("EPSG:4326", true, always_xy=True)
    lon0, lat0 = where
    x0, y0 = (round(v) for v in to_true.transform(lon0, lat0))
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[shapely.box(x0, y0, x0 + 1000, y0 + 1000), shapely.box(x0 + 1000, y0, x0 + 2000, y0 + 1000)], crs=label)
    ring = [(x0 + 1000, y0), (x0, y0), (x0, y0 + 1000), (x0 + 2000, y0 + 1000), (x0 + 2000, y0), (x0 + 1000, y0)]
    lines = gpd.GeoDataFrame({"kind": ["contact", "map-boundary"], "certainty": ["certain", "certain"]},
                             geometry=[shapely.LineString([(x0 + 1000, y0), (x0 + 1000, y0 + 1000)]), shapely.LineString(ring)], crs=label)
    # Sample longitudes/latitudes: a row across the two units, inside them (1 km is about 0.019° of longitude here).
    lon, lat = to_true.transform(*(np.array([x0 + 150.0 + 240 * k for k in range(8)]), np.full(8, y0 + 500.0)), direction="INVERSE")
    lon, lat = np.round(lon, 6), np.round(lat, 6)
    x, y = to_true.transform(lon, lat)  # the positions: pyproj from the known lon/lat
    ids = [f"S-{k + 1:03d}" for k in range(8)]
    written_lon, written_lat = (lon, lat) if lonlat is None else lonlat(lon, lat)
    samples = gpd.GeoDataFrame(
        {"sample_id": ids, "unit": ["A" if v < x0 + 1000 else "B" for v in x], columns[0]: written_lon, columns[1]: written_lat},
        geometry=gpd.points_from_xy(x, y), crs=label,
    )
    extra = {"map": {"crs": label}}
    if manifest:
        from builders import _merge

        _merge(extra, manifest)
    return tiny_project(tmp_path, units=units, lines=lines, samples=samples, manifest=extra, name=name)


def zone_33_labelled_32(tmp_path):
    return _zoned(tmp_path, true="EPSG:32633", label="EPSG:32632")


def zone_33_labelled_33(tmp_path):
    return _zoned(tmp_path, true="EPSG:32633", label="EPSG:32633")


CASES["crs-zone-evidence"] = (zone_33_labelled_32, zone_33_labelled_33)


def test_true_zone_gives_no_crs_finding(tmp_path):
    for true, where in (("EPSG:32633", NORTH), ("EPSG:32733", SOUTH)):
        root = _zoned(tmp_path, true=true, label=true, where=where, name=true[5:])
        assert archivist.check(root, only=["crs"]).findings == ()


def test_neighbouring_zone_named_from_lonlat_columns(tmp_path):
    root = zone_33_labelled_32(tmp_path)
    # EPSG dataset: 32632 is WGS 84 / UTM zone 32N, 32633 zone 33N; the coordinates read in zone 32N
    # still fall inside its area of use (6°E-12°E), so the area-of-use check alone sees nothing.
    assert pyproj.CRS("EPSG:32633").name == "WGS 84 / UTM zone 33N"
    b = read_layer(root, "map.gpkg", "units").total_bounds
    lon, _ = pyproj.Transformer.from_crs("EPSG:32632", "EPSG:4326", always_xy=True).transform((b[0] + b[2]) / 2, (b[1] + b[3]) / 2)
    aou = pyproj.CRS("EPSG:32632").area_of_use
    assert aou.west <= lon <= aou.east
    assert found(root, "crs-outside-area-of-use") == []
    (f,) = found(root, "crs-zone-evidence")
    assert f.severity.value == "error"
    assert "labelled EPSG:32632 (WGS 84 / UTM zone 32N)" in f.message
    assert "are in EPSG:32633 (WGS 84 / UTM zone 33N), a neighbouring zone" in f.message
    assert "layers units, lines, samples" in f.message  # the whole map, one finding
    assert "(lon, lat) agree with all 8 positions" in f.message
    # The measure: median distance between where lon/lat put the samples and their positions read in zone 32N,
    # from PROJ (to zone 32N) and the WGS 84 geodesic.
    s = read_layer(root, "map.gpkg", "samples")
    qlon, qlat = pyproj.Transformer.from_crs("EPSG:32632", "EPSG:4326", always_xy=True).transform(s.geometry.x.values, s.geometry.y.values)
    _, _, d = pyproj.Geod(ellps="WGS84").inv(s.lon.values, s.lat.values, qlon, qlat)
    assert f.measure == pytest.approx(float(np.median(d)), rel=1e-6)
    assert f.measure > 250_000  # zones are 6° apart: about 320 km at 61°N
    assert f"a median {f.measure / 1000:.1f} km away from their positions under EPSG:32632" in f.message


def test_wrong_hemisphere_named_from_lonlat_columns(tmp_path):
    # Positions computed in zone 33S (EPSG:32733) and labelled 33N: the northings (about 5.5e6 m)
    # read as 33N fall near 50°N, inside 33N's area of use; only the lon/lat columns tell.
    root = _zoned(tmp_path, true="EPSG:32733", label="EPSG:32633", where=SOUTH)
    assert found(root, "crs-outside-area-of-use") == []
    (f,) = found(root, "crs-zone-evidence")
    assert "are in EPSG:32733 (WGS 84 / UTM zone 33S), the other hemisphere" in f.message
    assert pyproj.CRS("EPSG:32733").name == "WGS 84 / UTM zone 33S"  # EPSG dataset
    assert f.measure > 8_000_000  # about 90° of latitude apart


def test_other_datum_named_from_lonlat_columns(tmp_path):
    # Positions on ED50 / UTM zone 33N (EPSG:23033) labelled WGS 84 / UTM zone 33N: PROJ's ED50 to WGS 84
    # transformation moves them about 200 m here, far beyond 20 m and far too little for an extent to show.
    root = _zoned(tmp_path, true="EPSG:23033", label="EPSG:32633")
    (f,) = found(root, "crs-zone-evidence")
    assert "are in EPSG:23033 (ED50 / UTM zone 33N), the same zone on another datum" in f.message
    assert 50 < f.measure < 1000


def test_neighbouring_zone_south_labelled_north_one_zone_off(tmp_path):
    # Zone 34S coordinates labelled 33N: another zone and the other hemisphere at once.
    root = _zoned(tmp_path, true="EPSG:32734", label="EPSG:32633", where=(21.2, -40.3))
    (f,) = found(root, "crs-zone-evidence")
    assert "EPSG:32734 (WGS 84 / UTM zone 34S), a neighbouring zone in the other hemisphere" in f.message


def test_swapped_lonlat_columns_said(tmp_path):
    root = _zoned(tmp_path, true="EPSG:32633", label="EPSG:32633", lonlat=lambda lon, lat: (lat, lon))
    (f,) = found(root, "crs-zone-evidence")
    assert "look swapped" in f.message and f.severity.value == "warning"


def test_columns_that_fit_nothing_are_a_warning_naming_the_guess(tmp_path):
    root = _zoned(tmp_path, true="EPSG:32633", label="EPSG:32633", columns=("Longitude (WGS84)", "Latitude (WGS84)"),
                  lonlat=lambda lon, lat: (lon + 0.5, lat))
    (f,) = found(root, "crs-zone-evidence")
    assert f.severity.value == "warning"
    assert "no neighbouring zone, the other hemisphere or the same zone on another datum explains it" in f.message
    assert "lon_field/lat_field" in f.message  # the columns were guessed from their headers


def test_named_columns_are_used(tmp_path):
    root = _zoned(tmp_path, true="EPSG:32633", label="EPSG:32632", columns=("gps_e", "gps_n"))
    assert found(root, "crs-zone-evidence") == []  # headers that say nothing are not guessed
    edit_manifest(root, lambda m: m["layers"]["samples"].update(lon_field="gps_e", lat_field="gps_n"))
    (f,) = found(root, "crs-zone-evidence")
    assert "EPSG:32633" in f.message and "(gps_e, gps_n)" in f.message


def test_degrees_minutes_seconds_cells(tmp_path):
    def dms(lon, lat):
        def one(v, pos, neg):
            d = int(abs(v)); m = (abs(v) - d) * 60
            return f"{d}°{m:.4f}'{pos if v >= 0 else neg}"
        return [one(v, "E", "W") for v in lon], [one(v, "N", "S") for v in lat]

    root = _zoned(tmp_path, true="EPSG:32633", label="EPSG:32632", lonlat=dms)
    (f,) = found(root, "crs-zone-evidence")
    assert "EPSG:32633" in f.message


def test_part_of_a_layer_in_the_neighbouring_zone(tmp_path):
    # A map straddling a zone edge: two samples digitised in zone 32N, all labelled 33N.
    def two_in_32(frame):
        frame = frame.copy()
        g = frame.geometry.values.copy()
        g[:2] = gpd.GeoSeries(g[:2], crs="EPSG:32633").to_crs("EPSG:32632").values
        frame.geometry = g
        return frame.set_crs("EPSG:32633", allow_override=True)

    root = edit_layer(zone_33_labelled_33(tmp_path), "map.gpkg", "samples", two_in_32)
    (f,) = found(root, "crs-zone-evidence")
    assert f.layer == "samples" and f.features == ("S-001", "S-002")
    assert found(root, "crs-outside-area-of-use") == []  # the two features are reported once
    assert "2 of 8 features" in f.message and "EPSG:32632 (WGS 84 / UTM zone 32N)" in f.message
    assert f.severity.value == "error"


def _bundle_labelled(root, crs):
    for layer in LAYERS:
        edit_layer(root, "map.gpkg", layer, lambda f: f.set_crs(crs, allow_override=True))
    edit_manifest(root, lambda m: m["layers"]["stations"].update(crs=crs))  # the stations table declares its own CRS
    return edit_manifest(root, lambda m: m["map"].update(crs=crs))


def test_declared_extent_names_the_zone(tmp_path):
    root = _bundle_labelled(copy_bundle(tmp_path), "EPSG:32632")
    # The bundle's extent (zone 33N) in lon/lat, from PROJ: about 14.6-14.8°E, 61.2-61.3°N.
    w, s, e, n = _lonlat_bounds(copy_bundle(tmp_path, "ref"), "extent", "EPSG:32633")
    assert 14.5 < w < e < 14.9 and 61.1 < s < n < 61.4
    assert found(root, "crs-zone-evidence") == []  # nothing to compare with: consistent, cannot be told
    edit_manifest(root, lambda m: m["map"].update(geographic_extent=[14.5, 61.1, 14.9, 61.4]))
    (f,) = found(root, "crs-zone-evidence")
    assert "labelled EPSG:32632 (WGS 84 / UTM zone 32N) but the coordinates are in EPSG:32633" in f.message
    assert "map.geographic_extent" in f.message and "west of it" in f.message
    # The distance: from the extent's east edge to the farthest corner of the map read in zone 32N (WGS 84 geodesic).
    w2, s2, e2, n2 = _lonlat_bounds(root, "units", "EPSG:32632")
    assert f.measure == pytest.approx(max(pyproj.Geod(ellps="WGS84").inv(w2, lat, 14.5, lat)[2] for lat in (s2, n2)), rel=0.01)


def test_declared_extent_that_holds_the_map_gives_nothing(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["map"].update(geographic_extent=[14.5, 61.1, 14.9, 61.4]))
    assert found(root, "crs-zone-evidence") == []


def test_declared_extent_elsewhere_is_a_warning_without_a_zone(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["map"].update(geographic_extent=[14.5, 62.5, 14.9, 62.8]))
    (f,) = found(root, "crs-zone-evidence")
    assert f.severity.value == "warning" and "south of the declared geographic extent" in f.message


def test_layer_in_another_crs_shows_the_zone(tmp_path):
    # Samples exported in EPSG:4326 (a real transformation from zone 33N); the rest labelled zone 32N.
    root = copy_bundle(tmp_path)
    edit_layer(root, "map.gpkg", "samples", lambda f: f.to_crs("EPSG:4326"))
    for layer in ("units", "lines", "extent", "structures"):
        edit_layer(root, "map.gpkg", layer, lambda f: f.set_crs("EPSG:32632", allow_override=True))
    edit_manifest(root, lambda m: m["map"].update(crs="EPSG:32632"))
    edit_manifest(root, lambda m: m["layers"].pop("stations"))
    (f,) = found(root, "crs-zone-evidence")
    assert "layers units, lines, extent, structures are labelled EPSG:32632" in f.message
    assert "are in EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message and "line up with layers.samples only when read in EPSG:32633" in f.message
    assert "set map.crs to it" in f.message
    assert "would line them up too" not in f.message  # a geographic CRS has no neighbouring zone


def test_one_layer_digitised_in_the_neighbouring_zone(tmp_path):
    # Same label everywhere, but the samples' numbers are zone-32N coordinates: both readings line the
    # two groups up; the odd one out is named first.
    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", lambda f: f.to_crs("EPSG:32632").set_crs("EPSG:32633", allow_override=True))
    (f,) = found(root, "crs-zone-evidence")
    assert f.layer == "samples"
    assert "is labelled EPSG:32633 (WGS 84 / UTM zone 33N) but the coordinates are in EPSG:32632" in f.message
    assert "would line them up too" in f.message
    assert found(root, "crs-outside-area-of-use") == []  # zone-32N numbers read in 33N reach 20.7°E: reported once, here


def test_area_of_use_leaves_explained_layers_to_zone_evidence(tmp_path):
    # Zone 32N numbers labelled 33N fall east of 33N's area of use; with lon/lat columns the cause is known,
    # and it is reported once.
    root = _zoned(tmp_path, true="EPSG:32632", label="EPSG:32633", where=(8.7, 61.3))
    rules = {f.rule for f in archivist.check(root, only=["crs"]).findings}
    assert rules == {"crs-zone-evidence"}


def test_zone_evidence_exposes_the_true_crs(tmp_path):
    from archivist.analysis.context import CheckContext
    from archivist.project import load_project

    project = load_project(zone_33_labelled_32(tmp_path))
    true = CheckContext(project).zone_evidence().true_crs()
    assert {r: c.to_epsg() for r, c in true.items()} == {"units": 32633, "lines": 32633, "samples": 32633}


def test_candidates_from_the_epsg_dataset():
    from archivist.analysis.zones import candidates

    got = {(c.crs.to_epsg(), c.how) for c in candidates(pyproj.CRS("EPSG:32632"))}
    # EPSG dataset: WGS 84 / UTM zones 31N, 33N, 30N, 34N (neighbours), 32S (other hemisphere), 31S, 33S.
    assert got == {(32631, "zone"), (32633, "zone"), (32630, "zone"), (32634, "zone"), (32732, "hemisphere"),
                   (32731, "zone and hemisphere"), (32733, "zone and hemisphere")}
    # UTM zones wrap at the antimeridian: zone 1's western neighbour is zone 60.
    assert (32660, "zone") in {(c.crs.to_epsg(), c.how) for c in candidates(pyproj.CRS("EPSG:32601"))}
    datums = {c.crs.to_epsg() for c in candidates(pyproj.CRS("EPSG:32633"), (14.6, 61.2, 14.8, 61.3), datums=True) if c.how == "datum"}
    assert {23033, 25833} <= datums  # ED50 and ETRS89 / UTM zone 33N cover 61°N 14.7°E
    assert 2312 not in datums  # Garoua / UTM zone 33N (Cameroon) does not
    assert candidates(pyproj.CRS("EPSG:4326")) == []


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda m: m["map"].update(geographic_extent=[14.5, 61.4, 14.9, 61.1]), "south (61.4) must be less than north (61.1)"),
        (lambda m: m["map"].update(geographic_extent=[14.5, 61.1, 14.9]), "map.geographic_extent"),
        (lambda m: m["map"].update(geographic_extent=[14.5, 95, 14.9, 96]), "map.geographic_extent"),
        (lambda m: m["layers"]["samples"].update(lonlat_crs="EPSG:32633"), "layers.samples.lonlat_crs"),
        (lambda m: m["layers"]["samples"].update(lonlat_crs="not a crs"), "is not a geographic CRS"),
    ],
)
def test_evidence_keys_checked_in_the_manifest(tmp_path, change, words):
    root = edit_manifest(copy_bundle(tmp_path), change)
    hits = [f for f in archivist.check(root, only=["metadata"]).findings if f.rule == "manifest-invalid"]
    assert any(words in f.message for f in hits), [f.message for f in hits]
    # A key the check cannot use is left out; nothing is compared with it.
    assert found(root, "crs-zone-evidence") == []


def test_lonlat_columns_on_another_datum(tmp_path):
    # Longitudes/latitudes written on ED50 (EPSG:4230) beside ED50 / UTM zone 33N positions: declared, they agree.
    import numpy as np

    to_ed50 = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:4230", always_xy=True)

    def on_ed50(lon, lat):
        return tuple(np.round(v, 6) for v in to_ed50.transform(lon, lat))

    root = _zoned(tmp_path, true="EPSG:23033", label="EPSG:23033", lonlat=on_ed50)
    (f,) = found(root, "crs-zone-evidence")  # read as WGS 84 they are about 200 m off, as if the grid were on WGS 84
    assert "written on another datum, name it with lonlat_crs in [layers.samples]" in f.message
    edit_manifest(root, lambda m: m["layers"]["samples"].update(lonlat_crs="EPSG:4230"))
    assert found(root, "crs-zone-evidence") == []


def test_coordinate_table_with_lonlat_columns(tmp_path):
    # A sample table kept as a spreadsheet export: easting/northing computed by pyproj in zone 33N from the
    # GPS longitude/latitude, declared as zone 32N in the manifest; the map itself is right (zone 33N).
    import numpy as np

    root = zone_33_labelled_33(tmp_path)
    s = read_layer(root, "map.gpkg", "samples")
    table = s.drop(columns="geometry").assign(easting=np.round(s.geometry.x, 2), northing=np.round(s.geometry.y, 2))
    table = table.rename(columns={"lon": "Longitude", "lat": "Latitude"})
    table.to_csv(root / "samples.csv", index=False)
    edit_manifest(root, lambda m: m["layers"].update(samples={"path": "samples.csv", "x_field": "easting", "y_field": "northing",
                                                               "crs": "EPSG:32632", "id_field": "sample_id"}))
    (f,) = found(root, "crs-zone-evidence")
    assert f.layer == "samples" and "layers.samples (samples.csv) is labelled EPSG:32632" in f.message
    assert "are in EPSG:32633 (WGS 84 / UTM zone 33N)" in f.message and "(Longitude, Latitude)" in f.message
    assert "Assign EPSG:32633, the map CRS, to the layer" in f.message  # the rest of the map is right
    # One cause, one finding: the label differs from map.crs only because it is wrong.
    assert [g.rule for g in archivist.check(root, only=["crs"]).findings] == ["crs-zone-evidence"]
