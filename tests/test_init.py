"""``archivist init``: a commented manifest guessed from the data, never over an existing one."""

from __future__ import annotations

import json
import shutil
import tomllib
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
import pytest
from click.testing import CliRunner
from shapely.geometry import LineString, Point, box

import archivist
from archivist.cli import cli
from archivist.infer import infer_manifest
from archivist.manifest import validate_manifest
from builders import BUNDLE, CRS, edit_layer, edit_table, tiny_legend, tree_digest, write_layer

DATA_FILES = ("map.gpkg", "legend.csv", "analyses.xlsx", "references.csv", "stations_calderwyn.csv", "stations_oakeshaw.csv", "stations_tollivast.csv")
# What only the mapper knows: init leaves these keys for them to fill in.
MAPPER_KEYS = ("title", "version", "licence", "abstract", "keywords", "authors", "publisher", "contact", "doi")
# The north the azimuths are measured from is not in the data either: init leaves it to the mapper.
MAPPER_STRUCTURE_KEYS = ("north", "declination")


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def bundle_files(tmp_path: Path, name: str = "field") -> Path:
    """A folder made from the example bundle's data files, without its manifest."""
    root = tmp_path / name
    root.mkdir()
    for f in DATA_FILES:
        shutil.copy2(BUNDLE / f, root / f)
    return root


def with_manifest(tmp_path: Path, files: Path, name: str = "original") -> Path:
    """The same data files with the bundle's own manifest."""
    root = tmp_path / name
    shutil.copytree(files, root)
    shutil.copy2(BUNDLE / "archivist.toml", root / "archivist.toml")
    for folder in ("photos", "fieldbook"):  # the manifest's [files] (init placing them: tests/test_photos.py)
        shutil.copytree(BUNDLE / folder, root / folder)
    return root


def findings(root: Path) -> list[dict]:
    return [f.to_dict() for f in archivist.check(root).findings]


def confirm(init_root: Path, original: Path) -> None:
    """Do what the mapper does after init: fill in the [map] keys only they know (and their check settings)."""
    text = (init_root / "archivist.toml").read_text(encoding="utf-8")
    mine = tomllib.loads(text)
    theirs = tomllib.loads((original / "archivist.toml").read_text(encoding="utf-8"))
    # scale and CRS are init's own guesses: they must already agree
    assert mine["map"]["scale"] == theirs["map"]["scale"] and mine["map"]["crs"] == theirs["map"]["crs"]
    lines = [ln for ln in text.splitlines() if not ln.startswith(("title =", "version ="))]
    at = lines.index("[map]") + 1
    lines[at:at] = [
        f"{key} = {json.dumps(theirs['map'][key], ensure_ascii=False)}"
        for key in MAPPER_KEYS
        if key in theirs["map"] and key != "authors"
    ]
    at = lines.index("[layers.structures]") + 1
    lines[at:at] = [
        f"{key} = {json.dumps(theirs['layers']['structures'][key])}"
        for key in MAPPER_STRUCTURE_KEYS
        if key in theirs["layers"]["structures"]
    ]
    body = "\n".join(lines) + "\n"
    for a in theirs["map"].get("authors", []):
        body += "[[map.authors]]\n" + "".join(f"{k} = {json.dumps(v, ensure_ascii=False)}\n" for k, v in a.items())
    if "checks" in theirs:
        body += "[checks]\n" + "".join(f"{k} = {json.dumps(v)}\n" for k, v in theirs["checks"].items() if not isinstance(v, dict))
    (init_root / "archivist.toml").write_text(body, encoding="utf-8")


def test_init_on_bundle_files_recognises_every_role(tmp_path):
    root = bundle_files(tmp_path)
    result = run("init", root)
    assert result.exit_code == 0, result.output
    written = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    original = tomllib.loads((BUNDLE / "archivist.toml").read_text(encoding="utf-8"))
    # the same roles, files, layers, sheets and fields as the manifest written by hand; the north
    # reference is the mapper's declaration, which init does not guess
    assert not set(MAPPER_STRUCTURE_KEYS) & set(written["layers"]["structures"])
    for key in MAPPER_STRUCTURE_KEYS:
        original["layers"]["structures"].pop(key, None)
    assert written["layers"] == original["layers"]
    assert written["tables"] == original["tables"]
    assert written["map"]["crs"] == original["map"]["crs"] == "EPSG:32633"
    assert validate_manifest(written, "archivist.toml") == []
    # the guess is the one load_project makes without a manifest
    guess = infer_manifest(bundle_files(tmp_path, "field2"))[0]
    assert guess["map"].pop("title") == "field2" and written["map"].pop("title") == "field"
    assert guess == written
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    assert "CONFIRM" in text and "analyses.xlsx:method" in text  # what it could not place is listed
    assert "units" in result.output and "Confirm the" in result.output


@pytest.mark.slow
@pytest.mark.parametrize("defects", ["clean", "broken"])
def test_check_gives_the_same_findings_as_the_original(tmp_path, defects):
    files = bundle_files(tmp_path)
    if defects == "broken":
        # defects several families see: an unknown unit code, a kind of line nobody declared,
        # a legend colour that is not a colour
        edit_layer(files, "map.gpkg", "units", lambda df: df.__setitem__("unit", df["unit"].where(df.index != df.index[2], "ZZZ")))
        edit_layer(files, "map.gpkg", "lines", lambda df: df.__setitem__("kind", df["kind"].where(df.index != df.index[5], "dyke margin")))
        edit_table(files, "legend.csv", lambda df: df.__setitem__("colour", df["colour"].where(df["unit"] != "MAR", "grey")))
    original = with_manifest(tmp_path, files)
    assert run("init", files).exit_code == 0
    before = findings(original)
    raw = findings(files)
    # Unconfirmed, the manifest lacks only what the data cannot tell: the deposit metadata and the north reference.
    extra = [f for f in raw if f not in before]
    assert [f for f in before if f not in raw] == []
    assert [f["rule"] for f in extra if f["rule"] != "metadata-incomplete"] == ["north-undeclared"]
    assert {f["message"].split(" ")[0] for f in extra if f["rule"] == "metadata-incomplete"} == {"map.abstract", "map.licence", "map.authors"}
    # Confirmed by the mapper, the findings are the original's, one for one.
    confirm(files, original)
    assert tomllib.loads((files / "archivist.toml").read_text(encoding="utf-8"))["map"] == tomllib.loads(
        (original / "archivist.toml").read_text(encoding="utf-8")
    )["map"]
    after = findings(files)
    assert after == before
    if defects == "broken":
        assert len(before) >= 3


def test_never_overwrites_a_manifest(tmp_path):
    root = bundle_files(tmp_path)
    (root / "archivist.toml").write_text("# mine\n", encoding="utf-8")
    before = tree_digest(root)
    result = run("init", root)
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "archivist.toml" in line and "never replaces" in line
    assert tree_digest(root) == before
    with pytest.raises(archivist.ArchivistError):
        archivist.init_project(root)


def test_writes_only_the_manifest(tmp_path):
    root = bundle_files(tmp_path)
    before = tree_digest(root)
    path = archivist.init_project(root)
    assert path == root / "archivist.toml"
    after = tree_digest(root)
    assert set(after) - set(before) == {"archivist.toml"}
    assert {k: v for k, v in after.items() if k != "archivist.toml"} == before


def test_geopackage_path(tmp_path):
    root = bundle_files(tmp_path)
    (root / "notes.pdf").write_bytes(b"%PDF-1.4\n")
    result = run("init", root / "map.gpkg")
    assert result.exit_code == 0, result.output
    m = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    assert set(m["layers"]) == {"units", "lines", "extent", "samples", "structures"}
    assert "tables" not in m  # only the GeoPackage was looked at
    assert m["map"]["title"] == "map"


@pytest.mark.parametrize(
    "args, words",
    [(["init", "no/such/folder"], "no such folder"), (["init", "{root}/legend.csv"], "GeoPackage"), (["init", "{empty}"], "no vector layers or tables")],
)
def test_cannot_init_is_one_line_exit_2(tmp_path, args, words):
    root = bundle_files(tmp_path)
    empty = tmp_path / "empty"
    empty.mkdir()
    (empty / "photo.jpg").write_bytes(b"\xff\xd8")
    result = run(*[a.format(root=root, empty=empty) for a in args])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert words in line and "Traceback" not in result.output


def test_a_folder_of_loose_files(tmp_path):
    """Shapefile, GeoJSON and CSVs with names nobody agreed on: values and geometry types decide."""
    root = tmp_path / "season"
    (root / "gis").mkdir(parents=True)
    units = gpd.GeoDataFrame(
        {"LABEL": ["A", "B"], "AREA_HA": [1.0, 1.0]}, geometry=[box(0, 0, 100, 100), box(100, 0, 200, 100)], crs=CRS
    )
    pyogrio.write_dataframe(units, root / "gis" / "geology_polys.shp")
    lines = gpd.GeoDataFrame(
        {"TYPE": ["contact", "fault", "boundary"], "CONF": ["certain", "inferred", "certain"]},
        geometry=[LineString([(100, 0), (100, 100)]), LineString([(50, 0), (60, 100)]), LineString(box(0, 0, 200, 100).exterior.coords)],
        crs=CRS,
    )
    pyogrio.write_dataframe(lines, root / "gis" / "linework.geojson", driver="GeoJSON")
    struct = gpd.GeoDataFrame({"strike": [30.0], "dip": [40.0], "type": ["bedding"]}, geometry=[Point(20, 20)], crs="EPSG:4326")
    pyogrio.write_dataframe(struct, root / "gis" / "measurements.shp")
    tiny_legend().rename(columns={"unit": "code"}).to_csv(root / "key.csv", index=False)
    pd.DataFrame({"sample_id": ["S1"], "easting": ["50"], "northing": ["50"]}).to_csv(root / "samples.csv", index=False)
    (root / "photo.jpg").write_bytes(b"\xff\xd8")
    archivist.init_project(root)
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    m = tomllib.loads(text)
    assert m["layers"]["units"] == {"path": "gis/geology_polys.shp", "unit_field": "LABEL"}
    assert m["layers"]["lines"] == {"path": "gis/linework.geojson", "kind_field": "TYPE", "certainty_field": "CONF"}
    assert m["layers"]["structures"]["convention"] == "right-hand-rule"
    assert m["layers"]["structures"]["azimuth_field"] == "strike"
    assert m["layers"]["samples"] == {"path": "samples.csv", "id_field": "sample_id", "x_field": "easting", "y_field": "northing", "crs": CRS}
    assert m["tables"]["legend"] == {"path": "key.csv", "unit_field": "code"}
    assert "photo.jpg" in text
    # the structures' CRS differs from the map's: said beside it
    block = text.split("[layers.structures]")[0].rsplit("\n\n", 1)[1]
    assert "CONFIRM" in block and "EPSG:4326" in block
    # and check runs on it
    result = run("check", root, "--only", "metadata")
    assert result.exit_code in (0, 1), result.output
    project = archivist.load_project(root)
    assert set(project.layers) == {"units", "lines", "samples", "structures"} and set(project.tables) == {"legend"}
    assert project.problems == []


def test_awkward_names_round_trip(tmp_path):
    root = tmp_path / "odd"
    root.mkdir()
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1)], crs=CRS)
    name = 'Einheiten "alt" \\ ü'
    write_layer(root / "karte.gpkg", name, units)
    write_layer(root / "karte.gpkg", "extent", gpd.GeoDataFrame(geometry=[box(0, 0, 2, 1)], crs=CRS))
    archivist.init_project(root)
    m = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    assert m["layers"]["units"]["layer"] == name
    assert archivist.load_project(root).layers["units"].frame.shape[0] == 2


def test_no_units_still_writes_a_manifest_to_complete(tmp_path):
    root = tmp_path / "lines_only"
    root.mkdir()
    write_layer(root / "lines.gpkg", "lines", gpd.GeoDataFrame({"kind": ["fault"]}, geometry=[LineString([(0, 0), (1, 1)])], crs=CRS))
    result = run("init", root)
    assert result.exit_code == 0
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    assert "# [layers.units]" in text and "CONFIRM: archivist needs unit polygons" in text
    check = run("check", root, "--only", "metadata")
    assert check.exit_code == 1 and "layers.units" in check.output


def test_packages_inside_the_folder_are_not_read(tmp_path):
    root = bundle_files(tmp_path)
    bag = root / "build" / "tarrowmere-1.0.0"
    (bag / "data").mkdir(parents=True)
    (bag / "bagit.txt").write_text("BagIt-Version: 1.0\nTag-File-Character-Encoding: UTF-8\n", encoding="utf-8")
    write_layer(bag / "data" / "map.gpkg", "units", gpd.GeoDataFrame({"unit": ["A"]}, geometry=[box(0, 0, 1, 1)], crs=CRS))
    archivist.init_project(root)
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    m = tomllib.loads(text)
    assert m["layers"]["units"]["path"] == "map.gpkg"
    assert "build/tarrowmere-1.0.0: a BagIt package" in text


def test_a_layer_declared_as_mixed_geometry_is_judged_by_its_features(tmp_path):
    root = tmp_path / "mixed"
    root.mkdir()
    write_layer(root / "map.gpkg", "units", gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1)], crs=CRS))
    lines = gpd.GeoDataFrame({"kind": ["contact", "fault"]}, geometry=[LineString([(1, 0), (1, 1)]), LineString([(0, 0), (2, 1)])], crs=CRS)
    pyogrio.write_dataframe(lines, root / "map.gpkg", layer="linework", geometry_type="Unknown")
    assert dict(pyogrio.list_layers(root / "map.gpkg"))["linework"] in ("Unknown", "Geometry")  # GDAL's own view
    archivist.init_project(root)
    m = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    assert m["layers"]["lines"] == {"path": "map.gpkg", "layer": "linework", "kind_field": "kind"}


def test_contacts_and_faults_in_files_of_their_own_are_both_declared(tmp_path):
    root = tmp_path / "field"
    root.mkdir()
    gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 100, 100), box(100, 0, 200, 100)], crs=CRS).to_file(root / "units.shp")
    gpd.GeoDataFrame({"certainty": ["certain"]}, geometry=[LineString([(100, 0), (100, 100)])], crs=CRS).to_file(root / "contacts.shp")
    gpd.GeoDataFrame({"name": ["Hask Fault"]}, geometry=[LineString([(150, 0), (150, 100)])], crs=CRS).to_file(root / "faults.shp")
    frame = LineString([(0, 0), (0, 100), (200, 100), (200, 0), (0, 0)])
    gpd.GeoDataFrame({"id": [1]}, geometry=[frame], crs=CRS).to_file(root / "map_frame.shp")
    result = run("init", root)
    assert result.exit_code == 0, result.output
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    m = tomllib.loads(text)
    assert validate_manifest(m, "archivist.toml") == []
    assert m["layers"]["contacts"] == {"path": "contacts.shp", "certainty_field": "certainty"}
    assert m["layers"]["faults"] == {"path": "faults.shp"}
    assert m["layers"]["frame"] == {"path": "map_frame.shp"}
    assert "lines" not in m["layers"]
    assert "every line is a fault" in text
    project = archivist.load_project(root)
    kinds = dict(zip(project.layers["lines"].ids, project.layers["lines"].frame["kind"]))
    assert kinds == {"contacts:0": "contact", "faults:0": "fault", "frame:0": "map-boundary"}
    assert [f.rule for f in archivist.check(root).findings if f.family == "linework"] == []


def test_line_layers_of_no_one_kind_become_a_list(tmp_path):
    root = tmp_path / "field"
    root.mkdir()
    gpd.GeoDataFrame({"unit": ["A"]}, geometry=[box(0, 0, 100, 100)], crs=CRS).to_file(root / "units.shp")
    for name in ("dykes", "axial_traces"):
        gpd.GeoDataFrame({"x": [1]}, geometry=[LineString([(10, 0), (10, 100)])], crs=CRS).to_file(root / f"{name}.shp")
    assert run("init", root).exit_code == 0
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    m = tomllib.loads(text)
    assert [e["name"] for e in m["layers"]["lines"]] == ["axial_traces", "dykes"]
    assert text.count("[[layers.lines]]") == 2 and "set kind_field, or kind" in text


def test_init_on_a_folder_of_projects_says_so(tmp_path):
    maps = tmp_path / "maps"
    (maps / "north").mkdir(parents=True)
    shutil.copytree(BUNDLE, maps / "south", ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    for f in DATA_FILES:
        shutil.copy2(BUNDLE / f, maps / "north" / f)
    shutil.copy2(BUNDLE / "archivist.toml", maps / "north" / "archivist.toml")
    before = tree_digest(maps)
    result = run("init", maps)
    assert result.exit_code == 2
    (line,) = result.output.strip().splitlines()
    assert "a folder of map projects (north, south), each with its own archivist.toml" in line
    assert tree_digest(maps) == before
