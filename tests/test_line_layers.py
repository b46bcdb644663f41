"""Several line layers (contacts, faults, the map frame, others) checked as one linework, named as the mapper's own."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import pyogrio
import pyproj
import pytest
from shapely.affinity import translate
from shapely.geometry import LineString

import archivist
from archivist.errors import ArchivistError
from archivist.manifest import validate_manifest
from archivist.package.source import screen_manifest
from archivist.project import load_project
from builders import copy_bundle, edit_manifest, read_layer, tiny_project, tree_digest, write_layer

PARTS = (("contact", "contacts"), ("fault", "faults"), ("map-boundary", "frame"))


def _broken_lines(root: Path) -> gpd.GeoDataFrame:
    """The bundle's lines with four planted defects: a misspelt kind, a contact moved 30 m, a contact removed, a fault end moved."""
    lines = read_layer(root, "map.gpkg", "lines")
    contacts = lines.index[lines["kind"] == "contact"]
    faults = lines.index[lines["kind"] == "fault"]
    lines.loc[contacts[3], "kind"] = "contcat"
    lines.loc[contacts[5], "geometry"] = translate(lines.loc[contacts[5], "geometry"], 30, 0)
    lines = lines.drop(index=contacts[8])
    end = list(lines.loc[faults[1], "geometry"].coords)
    lines.loc[faults[1], "geometry"] = LineString(end[:-1] + [(end[-1][0] + 50, end[-1][1] + 80)])
    return lines


def split_lines(root: Path, lines: gpd.GeoDataFrame, *, crs: dict[str, str] | None = None) -> dict[str, tuple[str, str]]:
    """Write ``lines`` as contacts.shp, faults.shp and frame.shp (kinds fixed by the manifest keys) in place of the one
    lines layer; return {old fid: (layer, new fid)}. ``crs`` reprojects a part (layer name -> CRS)."""
    naming: dict[str, tuple[str, str]] = {}
    for kind, name in PARTS:
        own = lines[lines["kind"].str.startswith(kind) | ((kind == "contact") & (lines["kind"] == "contcat"))]
        part = own.drop(columns=["kind"]) if kind != "contact" else own  # contacts keep their kind field (with the misspelling)
        if crs and name in crs:
            part = part.to_crs(crs[name])
        part.to_file(root / f"{name}.shp")
        naming.update({str(fid): (name, str(i)) for i, fid in enumerate(own.index)})  # shapefile fids count from 0

    def change(m):
        del m["layers"]["lines"]
        m["layers"]["contacts"] = {"path": "contacts.shp", "kind_field": "kind", "certainty_field": "certainty"}
        m["layers"]["faults"] = {"path": "faults.shp", "certainty_field": "certainty"}
        m["layers"]["frame"] = {"path": "frame.shp"}

    edit_manifest(root, change)
    return naming


def _key(f, naming=None):
    layer, features = f.layer, f.features
    if naming is not None and layer in ("contacts", "faults", "frame"):
        layer = "lines"
        features = tuple(next(old for old, own in naming.items() if own == (f.layer, x)) for x in features)
    return (f.rule, f.severity.value, layer, features, f.measure, f.x, f.y, f.wkt)


def test_contacts_and_faults_in_layers_of_their_own_check_as_in_one(tmp_path):
    one = copy_bundle(tmp_path, "one")
    lines = _broken_lines(one)
    write_layer(one / "map.gpkg", "lines", lines)
    several = copy_bundle(tmp_path, "several")
    naming = split_lines(several, lines)
    before = tree_digest(several)
    a, b = archivist.check(one), archivist.check(several)
    assert tree_digest(several) == before
    # same rules, same counts, same measures and places; each line named by its own layer and feature
    assert a.summary == b.summary and a.summary.errors >= 3
    assert sorted(map(_key, a.findings)) == sorted(_key(f, naming) for f in b.findings)
    own = [f for f in b.findings if f.family == "linework" and f.layer != "units"]
    assert own and {f.layer for f in own} <= {"contacts", "faults", "frame"}
    kind = next(f for f in own if f.rule == "line-kind-unknown")
    was = next(f for f in a.findings if f.rule == "line-kind-unknown")
    assert (was.layer, kind.layer) == ("lines", "contacts") and naming[was.features[0]] == ("contacts", kind.features[0])
    assert f"Line contacts:{kind.features[0]} has kind 'contcat'" in kind.message


def test_each_line_layer_keeps_its_file_its_kind_and_its_crs(tmp_path):
    root = copy_bundle(tmp_path, "several")
    lines = read_layer(root, "map.gpkg", "lines")
    split_lines(root, lines, crs={"faults": "EPSG:32632"})
    project = load_project(root)
    parts = project.layers["lines"].parts
    assert [p.role for p in parts] == ["contacts", "faults", "frame"]
    assert set(project.sources) >= {"units", "contacts", "faults", "frame"} and "lines" not in project.sources
    kinds = project.layers["lines"].frame["kind"]
    assert kinds.value_counts().to_dict() == lines["kind"].value_counts().to_dict()
    report = archivist.check(root)
    mismatch = [f for f in report.findings if f.rule == "crs-mismatch"]
    assert [f.layer for f in mismatch] == ["faults"] and "layers.faults" in mismatch[0].message
    # EPSG:32632 and EPSG:32633 (pyproj's EPSG data) are six degrees apart: the faults were reprojected to be checked
    # with the others, so the linework finds nothing more than on the one-layer map (which is clean).
    assert pyproj.CRS("EPSG:32632").name == "WGS 84 / UTM zone 32N"
    assert not [f for f in report.findings if f.family == "linework"]
    assert any("Line layer faults" in n and "reprojected" in n for n in report.notes)


def test_a_list_of_line_layers_with_names(tmp_path):
    root = tiny_project(tmp_path)
    lines = read_layer(root, "map.gpkg", "lines")
    write_layer(root / "map.gpkg", "boundary", lines[lines["kind"] == "map-boundary"])
    write_layer(root / "map.gpkg", "geology", lines[lines["kind"] == "contact"].drop(columns=["kind"]))

    def change(m):
        m["layers"]["lines"] = [
            {"path": "map.gpkg", "layer": "boundary", "name": "edge", "kind_field": "kind"},
            {"path": "map.gpkg", "layer": "geology", "kind": "contact"},
        ]

    edit_manifest(root, change)
    project = load_project(root)
    assert project.problems == []
    assert [(p.role, p.key) for p in project.layers["lines"].parts] == [("edge", "layers.lines[0]"), ("geology", "layers.lines[1]")]
    assert archivist.check(root).summary.errors == 0

    def clash(m):
        m["layers"]["lines"][1]["name"] = "units"

    edit_manifest(root, clash)
    hits = load_project(root).problems
    assert [h.rule for h in hits] == ["manifest-invalid"] and "layers.lines[1]: the name 'units' is taken" in hits[0].message


def test_schema_knows_line_layer_keys_and_names_typos():
    base = {"map": {"title": "t", "version": "1", "scale": 1000, "crs": "EPSG:32633"}, "layers": {"units": {"path": "u.shp"}}}
    good = {**base, "layers": {**base["layers"], "faults": {"path": "f.shp"}, "lines": [{"path": "a.shp", "kind": "dyke"}]}}
    assert validate_manifest(good, "archivist.toml") == []
    bad = {**base, "layers": {**base["layers"], "faults": {"path": "f.shp", "kind_feild": "type"}}}
    assert [h.message for h in validate_manifest(bad, "archivist.toml")] == ["archivist.toml: unknown key 'layers.faults.kind_feild'; did you mean 'kind_field'?"]
    listed = {**base, "layers": {**base["layers"], "lines": [{"path": "a.shp", "knd": "x"}]}}
    assert [h.message for h in validate_manifest(listed, "archivist.toml")] == ["archivist.toml: unknown key 'layers.lines[0].knd'; did you mean 'kind'?"]


def test_pack_keeps_each_line_layer_and_unpack_restores_them(tmp_path):
    root = copy_bundle(tmp_path, "several")
    split_lines(root, read_layer(root, "map.gpkg", "lines"))
    first = archivist.check(root)
    result = archivist.pack(root, tmp_path / "out")
    data = result.path / "data" if (result.path / "data").is_dir() else result.path
    names = {str(n) for n, _ in pyogrio.list_layers(data / "map.gpkg")}
    assert {"contacts", "faults", "frame"} <= names and "lines" not in names
    resources = {r["name"] for r in json.loads((data / "datapackage.json").read_text())["resources"]}
    assert {"contacts", "faults", "frame", "contacts-geojson", "faults-geojson", "frame-geojson"} <= resources
    packaged = archivist.check(data)
    assert packaged.summary == first.summary
    back = archivist.unpack(result.path, tmp_path / "back")
    project = load_project(back.path)
    assert [p.role for p in project.layers["lines"].parts] == ["contacts", "faults", "frame"]
    again = archivist.check(back.path)
    assert sorted(map(_key, again.findings)) == sorted(map(_key, first.findings))


def test_an_archive_listing_a_line_layer_outside_it_is_refused(tmp_path):
    raw = {"layers": {"units": {"path": "u.shp"}, "lines": [{"path": "ok.shp"}, {"path": "../../outside.shp"}]}}
    with pytest.raises(ArchivistError, match=r"layers\.lines\[1\]\.path '\.\./\.\./outside\.shp' leads outside the archive"):
        screen_manifest(raw, tmp_path, "archive.zip", "archivist.toml")
