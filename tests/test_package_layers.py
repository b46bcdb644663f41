"""The map's layers in GeoPackage and GeoJSON: ids kept, CRS kept, bytes stable."""

import datetime as dt
import hashlib
import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
from shapely.geometry import Point, Polygon, box

import archivist
from archivist.package.layers import all_tables, prepare_layers, write_geojson, write_geopackage
from builders import edit_layer, tiny_project

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
