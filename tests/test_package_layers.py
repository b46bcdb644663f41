"""The map's layers in GeoPackage and GeoJSON: ids kept, CRS kept, bytes stable."""

import datetime as dt
import hashlib
import json
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import shapely
from builders import (
    LINE_MEASURES,
    add_measures,
    edit_layer,
    edit_manifest,
    measures_of,
    tiny_project,
    tiny_with_measures,
    tree_digest,
)
from shapely.geometry import Point, Polygon, box

import archivist
from archivist.package.layers import (
    all_tables,
    prepare_layers,
    write_geojson,
    write_geopackage,
)

T = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)


def digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_geopackage_two_writes_are_byte_identical(tmp_path):
    layers = prepare_layers(archivist.load_project(tiny_project(tmp_path)))
    write_geopackage(layers, tmp_path / "a.gpkg", T)
    write_geopackage(layers, tmp_path / "b.gpkg", T)
    assert digest(tmp_path / "a.gpkg") == digest(tmp_path / "b.gpkg")
    # the date GDAL stamps is the one given (gpkg_contents.last_change), not the clock
    write_geopackage(layers, tmp_path / "c.gpkg", T + dt.timedelta(days=1))
    assert digest(tmp_path / "c.gpkg") != digest(tmp_path / "a.gpkg")


def test_feature_ids_and_crs_kept(tmp_path):
    root = tiny_project(tmp_path)
    edit_layer(root, "map.gpkg", "units", lambda f: f.set_axis(pd.Index([10, 20], name="fid")))  # fids 10 and 20
    project = archivist.load_project(root)
    layers = prepare_layers(project)
    write_geopackage(layers, tmp_path / "m.gpkg", T)
    back = pyogrio.read_dataframe(tmp_path / "m.gpkg", layer="units", fid_as_index=True)
    assert back.index.tolist() == [10, 20]
    assert pyproj.CRS(back.crs).equals(project.crs)


@pytest.mark.filterwarnings("ignore:.crs. was not provided")
def test_layer_without_crs_takes_the_map_crs(tmp_path):
    root = tiny_project(tmp_path)
    edit_layer(root, "map.gpkg", "lines", lambda f: f.set_crs(None, allow_override=True))
    project = archivist.load_project(root)
    layers = {pl.role: pl for pl in prepare_layers(project)}
    assert layers["lines"].frame.crs.equals(project.crs) and "no CRS" in layers["lines"].note


def test_layer_in_another_crs_is_reprojected(tmp_path):
    root = tiny_project(tmp_path)
    edit_layer(root, "map.gpkg", "lines", lambda f: f.to_crs("EPSG:3035"))
    project = archivist.load_project(root)
    layers = {pl.role: pl for pl in prepare_layers(project)}
    # pyproj round trip: back in the map CRS within a millimetre
    assert np.allclose(layers["lines"].frame.geometry.iloc[0].coords, [(100, 0), (100, 100)], atol=1e-3)
    assert "reprojected" in layers["lines"].note


def test_geojson_matches_gdal_rfc7946_writer(tmp_path):
    # Outside reference: GDAL's own GeoJSON driver with RFC7946=YES on the same layer.
    samples = gpd.GeoDataFrame({"sample_id": ["a", "b"], "unit": ["A", "B"], "depth": [1.5, np.nan]},
                               geometry=[Point(50, 50), Point(150, 50)], crs="EPSG:32633")
    hole = Polygon(box(0, 0, 100, 100).exterior.coords[::-1], [box(10, 10, 20, 20).exterior.coords])
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[hole, box(100, 0, 200, 100)], crs="EPSG:32633")
    project = archivist.load_project(tiny_project(tmp_path, units=units, samples=samples))
    for pl in prepare_layers(project):
        write_geojson(pl, tmp_path / f"{pl.role}.geojson")
        pyogrio.write_dataframe(pl.frame, tmp_path / f"{pl.role}.gdal.geojson", driver="GeoJSON", layer_options={"RFC7946": "YES"})
        mine = json.loads((tmp_path / f"{pl.role}.geojson").read_text(encoding="utf-8"))
        gdal = json.loads((tmp_path / f"{pl.role}.gdal.geojson").read_text(encoding="utf-8"))
        assert len(mine["features"]) == len(gdal["features"])
        for a, b in zip(mine["features"], gdal["features"]):
            assert a["properties"] == b["properties"]
            assert a["geometry"]["type"] == b["geometry"]["type"]
            assert np.allclose(_flat(a["geometry"]["coordinates"]), _flat(b["geometry"]["coordinates"]), atol=1.01e-7)


def _flat(coords):
    out = []

    def walk(c):
        if isinstance(c[0], (int, float)):
            out.append(c[:2])
        else:
            for x in c:
                walk(x)

    walk(coords)
    return np.array(out, dtype=float)


def test_null_geometry_is_written_as_null(tmp_path):
    root = tiny_project(tmp_path)
    edit_layer(root, "map.gpkg", "lines", lambda f: f.set_geometry([None, f.geometry.iloc[1]], crs=f.crs))
    project = archivist.load_project(root)
    pl = next(p for p in prepare_layers(project) if p.role == "lines")
    write_geojson(pl, tmp_path / "lines.geojson")
    doc = json.loads((tmp_path / "lines.geojson").read_text(encoding="utf-8"))
    assert doc["features"][0]["geometry"] is None


def test_keys_link_the_tables(tmp_path):
    project = archivist.load_project(tiny_project(tmp_path))
    tables = {t.name: t for t in all_tables(project, prepare_layers(project))}
    assert tables["units"].primary_key == ["fid"]
    assert tables["units"].foreign_keys == [{"fields": ["unit"], "reference": {"resource": "legend", "fields": ["unit"]}}]
    assert tables["legend"].primary_key == ["unit"]
    legend = {f["name"]: f for f in tables["legend"].fields}
    assert legend["min_age_ma"]["unit"] == "Ma" and legend["min_age_ma"]["type"] == "integer"


# ---------------------------------------------------------------- M (measure) values

MEASURES_RULE = "measures-source-only"


def test_measured_layer_is_what_gdal_calls_measured_and_pyogrio_reads_without_m(tmp_path):
    # The premise of the rule, against GDAL itself: GDAL's ST_IsMeasured (its SQLite SQL dialect) sees
    # the M of every feature the builder wrote, pyogrio 0.13 reads them without M and says so.
    root = tiny_with_measures(tmp_path)
    assert measures_of(root / "map.gpkg", "lines") == LINE_MEASURES  # the builder's values, read back with sqlite3 + shapely
    flags = pyogrio.read_dataframe(root / "map.gpkg", sql='SELECT ST_IsMeasured("geom") AS m FROM "lines"',
                                   sql_dialect="SQLITE", read_geometry=False)
    assert flags["m"].tolist() == [1, 1]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        frame = pyogrio.read_dataframe(root / "map.gpkg", layer="lines")
    assert not shapely.has_m(frame.geometry.array).any()
    assert any("Measured (M)" in str(w.message) for w in caught)


@pytest.mark.parametrize("with_z", [False, True], ids=["LineString M", "LineString ZM"])
def test_check_names_the_layer_and_counts_features_with_m(tmp_path, with_z):
    root = tiny_with_measures(tmp_path, with_z=with_z)
    before = tree_digest(root)
    report = archivist.check(root)
    found = [f for f in report.findings if f.rule == MEASURES_RULE]
    assert len(found) == 1 and found[0].layer == "lines" and found[0].severity.value == "warning"
    assert "lines layer map.gpkg:lines: 2 features carry M (measure) values" in found[0].message
    assert "source/" in found[0].message and "map.gpkg" in found[0].message
    assert archivist.load_project(root).layers["units"].measured == 0
    assert tree_digest(root) == before


def test_only_the_features_with_m_are_counted(tmp_path):
    # GeoPackage 1.4, table 7: m = 2 means M is optional; feature 2 alone carries it here.
    root = tiny_project(tmp_path)
    add_measures(root / "map.gpkg", "lines", {2: LINE_MEASURES[2]}, optional=True)
    assert archivist.load_project(root).layers["lines"].measured == 1
    found = [f for f in archivist.check(root).findings if f.rule == MEASURES_RULE]
    assert "1 feature carries M" in found[0].message


def test_shapefile_with_m_is_counted(tmp_path):
    # A PolyLineM shapefile (shape type 23, ESRI Shapefile Technical Description, 1998), written by GDAL
    # from ISO WKB 2002 with its SHPT=ARCM layer option.
    root = tiny_project(tmp_path)
    lines = pyogrio.read_dataframe(root / "map.gpkg", layer="lines")
    xy = [shapely.get_coordinates(g) for g in lines.geometry]
    wkt = [f"LINESTRING M ({', '.join(f'{x} {y} {m}' for (x, y), m in zip(c, LINE_MEASURES[i + 1]))})" for i, c in enumerate(xy)]
    wkb = shapely.to_wkb(shapely.from_wkt(wkt), flavor="iso", output_dimension=4)
    pyogrio.raw.write(root / "lines.shp", wkb, [lines["kind"].to_numpy(), lines["certainty"].to_numpy()], ["kind", "certainty"],
                      driver="ESRI Shapefile", geometry_type="LineString", crs="EPSG:32633", layer_options={"SHPT": "ARCM"})
    assert int.from_bytes((root / "lines.shp").read_bytes()[32:36], "little") == 23
    edit_manifest(root, lambda m: m["layers"]["lines"].update(path="lines.shp", layer="lines"))
    found = [f for f in archivist.check(root).findings if f.rule == MEASURES_RULE]
    assert len(found) == 1 and "lines layer lines.shp:lines: 2 features carry M" in found[0].message


def test_pack_says_where_the_m_values_are_and_keeps_them_in_source(tmp_path):
    root = tiny_with_measures(tmp_path)
    before = tree_digest(root)
    data = archivist.pack(root, tmp_path / "out").path / "data"
    # The input, byte for byte, with every M value as written.
    assert digest(data / "source" / "map.gpkg") == digest(root / "map.gpkg")
    assert measures_of(data / "source" / "map.gpkg", "lines") == LINE_MEASURES
    # map.gpkg has the lines without M (pyogrio writes none), and says nothing false about them.
    assert measures_of(data / "map.gpkg", "lines") == {1: [], 2: []}
    assert pyogrio.read_dataframe(data / "map.gpkg", sql='SELECT ST_IsMeasured("geom") AS m FROM "lines"',
                                  sql_dialect="SQLITE", read_geometry=False)["m"].tolist() == [0, 0]
    # GeoJSON positions: longitude, latitude (RFC 7946, section 3.1.1: no M).
    doc = json.loads((data / "geojson" / "lines.geojson").read_text(encoding="utf-8"))
    assert {len(p) for f in doc["features"] for p in f["geometry"]["coordinates"]} == {2}
    readme = (data / "README.md").read_text(encoding="utf-8")
    assert "Note: lines layer map.gpkg:lines: 2 features carry M (measure) values" in readme
    assert "map.gpkg and geojson/lines.geojson hold the geometries without M" in readme
    report = json.loads((data / "metadata" / "validation-report.json").read_text(encoding="utf-8"))
    assert [f["layer"] for f in report["findings"] if f["rule"] == MEASURES_RULE] == ["lines"]
    assert tree_digest(root) == before
