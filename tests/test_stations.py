"""Stations as a role, files handed in together (a list of paths), and ground distances to stations."""

from __future__ import annotations

import numpy as np
import pyproj
import pytest
from shapely.geometry import Point

import archivist
from archivist.project import load_project
from builders import tiny_project, tiny_samples, two_units, two_units_lines
from test_rules_stations import ST1, ST2, station_project, write_csv


def test_stations_load_as_a_layer(tmp_path):
    project = load_project(station_project(tmp_path))
    st = project.layers["stations"]
    assert list(st.ids) == ["ST-1", "ST-2"]
    assert st.frame.index.name == "row" and list(st.frame.index) == [2, 3]
    assert st.row_files is None


def test_list_of_files_is_one_table_with_the_source_column(tmp_path):
    root = station_project(tmp_path, {"stations_anna.csv": [ST1], "stations_ben.csv": [ST2]})
    project = load_project(root)
    st = project.layers["stations"]
    assert list(st.ids) == ["ST-1", "ST-2"]
    assert list(st.frame["source_file"]) == ["stations_anna.csv", "stations_ben.csv"]
    assert list(st.frame.index) == ["2 of stations_anna.csv", "2 of stations_ben.csv"]
    assert {p.name for p in project.files} >= {"stations_anna.csv", "stations_ben.csv"}


def test_missing_file_of_a_list_is_named_by_its_place(tmp_path):
    root = station_project(tmp_path, {"stations_anna.csv": [ST1, ST2], "stations_ben.csv": [ST2]})
    (root / "stations_ben.csv").unlink()
    report = archivist.check(root, rules=["layer-missing"])
    assert any("layers.stations.path[1]: file 'stations_ben.csv' does not exist." in f.message for f in report.findings)


def test_user_column_named_source_file_is_kept(tmp_path):
    head = ["station_id", "easting", "northing", "source_file"]
    root = station_project(tmp_path, {"a.csv": [ST1], "b.csv": [ST2]})
    write_csv(root / "a.csv", [ST1[:3] + ["tablet 1"]], head)
    write_csv(root / "b.csv", [ST2[:3] + ["tablet 2"]], head)
    st = load_project(root).layers["stations"]
    assert list(st.frame["source_file"]) == ["tablet 1", "tablet 2"]
    assert st.source_column == "source_file_" and list(st.row_files) == ["a.csv", "b.csv"]


def test_analyses_list_names_each_cell_in_its_own_file(tmp_path):
    from builders import major_rows, write_xlsx, MAJOR_HEADER

    root = station_project(tmp_path)
    write_xlsx(root / "an_a.xlsx", "majors", MAJOR_HEADER, major_rows(["S-0001"]))
    write_xlsx(root / "an_b.xlsx", "majors", MAJOR_HEADER, major_rows(["S-0002", "S-0009"]))
    import tomllib

    from builders import write_manifest

    data = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    data["tables"]["analyses"] = {"path": ["an_a.xlsx", "an_b.xlsx"], "sheet": "majors", "sample_field": "sample_id"}
    write_manifest(root, data)
    report = archivist.check(root, rules=["analysis-orphan"])
    (f,) = report.findings
    assert f.message.startswith("an_b.xlsx, sheet 'majors', cell A3: sample id 'S-0009' matches no sample")


def _geographic(tmp_path, offset_m: float):
    """The tiny map in longitude/latitude near 60°N, a station, and a sample ``offset_m`` metres north-east of it."""
    units = two_units().to_crs("EPSG:4326")
    lines = two_units_lines().to_crs("EPSG:4326")
    geod = pyproj.Geod(ellps="WGS84")
    c = units.geometry.iloc[0].centroid
    lon, lat, _ = geod.fwd(c.x, c.y, 45.0, offset_m)
    samples = tiny_samples().to_crs("EPSG:4326")
    samples = samples.set_geometry([Point(lon, lat), samples.geometry.iloc[1]], crs="EPSG:4326")
    samples = samples.assign(station=["ST-1", ""])
    root = tiny_project(tmp_path, units=units, lines=lines, samples=samples,
                        manifest={"map": {"crs": "EPSG:4326"}, "checks": {"station_distance_m": 5},
                                  "layers": {"stations": {"path": "stations.csv", "x_field": "lon", "y_field": "lat",
                                                          "crs": "EPSG:4326"}}})
    write_csv(root / "stations.csv", [["ST-1", repr(c.x), repr(c.y)]], ["station_id", "lon", "lat"])
    return root, (c.x, c.y, lon, lat)


@pytest.mark.parametrize("metres", [7.5, 42.0])
def test_distance_in_a_geographic_crs_is_the_geodesic(tmp_path, metres):
    """Reference: pyproj ``Geod`` on the WGS 84 ellipsoid (GeographicLib's inverse problem)."""
    root, (x0, y0, x1, y1) = _geographic(tmp_path, metres)
    (f,) = [x for x in archivist.check(root, rules=["station-link-distant"]).findings]
    _, _, expected = pyproj.Geod(ellps="WGS84").inv(x0, y0, x1, y1)
    assert expected == pytest.approx(metres, abs=1e-6)
    assert f.measure == pytest.approx(expected, abs=1e-6)


def test_ground_distances_projected_use_metres_per_unit(tmp_path):
    from archivist.analysis.stations import ground_distances

    project = load_project(station_project(tmp_path))
    d = ground_distances(project, np.array([Point(0, 0), None], dtype=object), np.array([Point(3, 4), Point(1, 1)], dtype=object))
    assert d[0] == 5.0 and np.isnan(d[1])


# ---------------------------------------------------------------- in the package

def test_stations_handed_in_pack_audit_and_unpack(tmp_path):
    import json

    import frictionless

    root = station_project(tmp_path, {"stations_anna.csv": [ST1], "stations_ben.csv": [ST2]})
    result = archivist.pack(root, tmp_path / "out")
    bag = result.path
    data = bag / "data"
    dp = json.loads((data / "datapackage.json").read_text(encoding="utf-8"))
    res = {r["name"]: r for r in dp["resources"]}
    stations = res["stations"]
    fields = {f["name"]: f for f in stations["schema"]["fields"]}
    assert {"station_id", "date", "observer", "observation", "source_file"} <= set(fields)
    assert fields["source_file"]["description"].startswith("The file this row was handed in in")
    assert stations["schema"]["primaryKey"] == ["station_id"]
    fks = res["samples"]["schema"]["foreignKeys"]
    assert {"fields": ["station"], "reference": {"resource": "stations", "fields": ["station_id"]}} in fks
    # frictionless (the Data Package reference implementation) finds the package valid, keys included
    report = frictionless.validate(data / "datapackage.json")
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])[:5]
    for name in ("stations_anna.csv", "stations_ben.csv"):
        assert (data / "source" / name).read_bytes() == (root / name).read_bytes()
    audited = archivist.audit(bag)
    assert not [f for f in audited.findings if f.severity.value == "error"], [f.message for f in audited.findings]
    work = archivist.unpack(bag, tmp_path / "work")
    assert {"stations_anna.csv", "stations_ben.csv"} <= set(work.files)
    again = load_project(tmp_path / "work")
    assert list(again.layers["stations"].frame["source_file"]) == ["stations_anna.csv", "stations_ben.csv"]


def test_audit_refuses_a_list_path_leading_outside(tmp_path):
    import tomllib

    from archivist.errors import ArchivistError
    from builders import write_manifest

    root = station_project(tmp_path / "arc", {"stations_anna.csv": [ST1], "stations_ben.csv": [ST2]})
    (tmp_path / "arc" / "secret.csv").write_text("station_id,easting,northing\nX,1,1\n", encoding="utf-8")
    data = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    data["layers"]["stations"]["path"] = ["stations_anna.csv", "../secret.csv"]
    write_manifest(root, data)
    with pytest.raises(ArchivistError, match=r"layers.stations.path '../secret.csv' leads outside the archive"):
        archivist.audit(root)


# ---------------------------------------------------------------- init

def test_init_places_stations_handed_in_as_a_list(tmp_path):
    import tomllib

    from click.testing import CliRunner

    from archivist.cli import cli
    from archivist.manifest import validate_manifest

    root = station_project(tmp_path, {"stations_anna.csv": [ST1], "stations_ben.csv": [ST2]})
    (root / "archivist.toml").unlink()
    result = CliRunner().invoke(cli, ["init", str(root)])
    assert result.exit_code == 0, result.output
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    data = tomllib.loads(text)
    st = data["layers"]["stations"]
    assert st["path"] == ["stations_anna.csv", "stations_ben.csv"]
    assert (st["id_field"], st["x_field"], st["y_field"]) == ("station_id", "easting", "northing")
    assert (st["date_field"], st["observer_field"], st["observation_field"], st["unit_field"]) == ("date", "observer", "observation", "unit")
    assert st["crs"] == "EPSG:32633"
    assert "# Field stations and observations:" in text and "2 files with the same columns" in text
    assert not validate_manifest(data, "archivist.toml")
    assert "samples" in data["layers"] and data["layers"]["samples"]["path"] == "map.gpkg"
    assert archivist.check(root, rules=["station-unknown", "station-duplicate-id"]).findings == ()


# ---------------------------------------------------------------- the example bundle: clean, and broken at one place each

from builders import BUNDLE, copy_bundle, edit_layer, edit_table  # noqa: E402

STATION_RULES = ["station-duplicate-id", "station-unknown", "station-outside-extent", "station-unit-mismatch",
                 "station-link-distant", "hand-in-row-repeated"]


def _bundle_found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def test_bundle_has_stations_handed_in_by_three_mappers_and_checks_clean():
    project = load_project(BUNDLE)
    st = project.layers["stations"]
    assert len(st.frame) == 20 and len(set(st.ids)) == 20
    assert sorted(set(st.row_files)) == ["stations_calderwyn.csv", "stations_oakeshaw.csv", "stations_tollivast.csv"]
    linked = {role: int(project.layers[role].frame["station"].notna().sum()) for role in ("samples", "structures")}
    assert linked == {"samples": 14, "structures": 6}
    assert not archivist.check(BUNDLE, rules=STATION_RULES).findings


def test_bundle_sample_naming_a_mangled_station(tmp_path):
    def mangle(frame):
        i = frame.index[frame.station == "ST24-007"][0]
        frame.loc[i, "station"] = "ST24-7"

    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", mangle)
    (f,) = _bundle_found(root, "station-unknown")
    assert "names station 'ST24-7'" in f.message and "probably ST24-007 (leading zeros lost)" in f.message


def test_bundle_conflicting_station_in_two_mappers_files(tmp_path):
    root = copy_bundle(tmp_path)
    other = (root / "stations_tollivast.csv").read_text(encoding="utf-8").splitlines()[1].split(",")
    sid, x, y = other[0], float(other[1]), float(other[2])
    with open(root / "stations_oakeshaw.csv", "a", encoding="utf-8") as fh:
        fh.write(f"{sid},{x + 30:.2f},{y + 40:.2f},2024-08-30,Sunniva Oakeshaw,Another stop.,{other[-1]}\n")
    (f,) = _bundle_found(root, "station-duplicate-id")
    assert f.severity.value == "error"
    assert f"station {sid} is in stations_oakeshaw.csv row 6 and stations_tollivast.csv row 2 with different positions (50.0 m apart)" in f.message


def test_bundle_station_row_handed_in_twice(tmp_path):
    root = copy_bundle(tmp_path)
    row = (root / "stations_tollivast.csv").read_text(encoding="utf-8").splitlines()[1]
    with open(root / "stations_calderwyn.csv", "a", encoding="utf-8") as fh:
        fh.write(row + "\n")
    (f,) = _bundle_found(root, "station-duplicate-id")
    assert f.severity.value == "notice" and "handed in twice, identical" in f.message
    assert "stations_calderwyn.csv row 7 and stations_tollivast.csv row 2" in f.message


def test_bundle_station_off_the_map_and_with_a_wrong_unit(tmp_path):
    def move(frame):
        frame.loc[0, "northing"] = "6799000.00"  # 1 km north of the sheet's top edge (6798000)
        frame.loc[1, "unit"] = "SKG" if frame.loc[1, "unit"] != "SKG" else "PEL"

    root = edit_table(copy_bundle(tmp_path), "stations_tollivast.csv", move)
    (out,) = _bundle_found(root, "station-outside-extent")
    assert out.message.startswith("station ST24-001 (row 2 of stations_tollivast.csv) lies ")
    assert "north of the map extent" in out.message
    (wrong,) = _bundle_found(root, "station-unit-mismatch")
    assert wrong.message.startswith("station ST24-005 (row 3 of stations_tollivast.csv) is recorded as SKG but lies in polygon")


def test_bundle_sample_far_from_its_station(tmp_path):
    def relink(frame):
        i = frame.index[frame.station == "ST24-003"][0]
        frame.loc[i, "station"] = "ST24-020"  # a station at the other end of the map

    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", relink)
    (f,) = _bundle_found(root, "station-link-distant")
    assert "from its station ST24-020 (stations_oakeshaw.csv row 5); more than station_distance_m (100 m)" in f.message
    assert f.measure > 1000
