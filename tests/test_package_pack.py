"""archivist pack: the example bundle as a package, checked against outside references.

Outside references used here (each named beside its check):
- frictionless (Frictionless Data Package / Table Schema, incl. foreign keys),
- bagit (the Library of Congress BagIt library, RFC 8493) and coreutils ``sha256sum -c``,
- the DataCite Metadata Schema 4.5 JSON Schema shipped by the ``datacite`` package,
- prov (W3C PROV-JSON reader),
- pyogrio/GDAL reading the layers back, and pyproj for the WGS 84 coordinates.
"""

from __future__ import annotations

import hashlib
import importlib
import json
import re
import os
import shutil
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import bagit
import frictionless
import jsonschema
import numpy as np
import pyogrio
import pyproj
import pytest
import shapely
from click.testing import CliRunner

import archivist
from archivist.cli import cli
from archivist.manifest import load_schema
from archivist.package import PackRefused, pack
from builders import BUNDLE, edit_manifest, tiny_project, tree_digest

EPOCH = "1767225600"  # 2026-01-01T00:00:00Z
STEM = "geological-map-of-the-tarrowmere-district-1.0.0"


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    """The example bundle packed once (folder and zip) with a fixed SOURCE_DATE_EPOCH."""
    out = tmp_path_factory.mktemp("packed")
    before = tree_digest(BUNDLE)
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", EPOCH)
        result = pack(BUNDLE, out, zip=True)
    assert tree_digest(BUNDLE) == before, "pack wrote into the project"
    return result


def data_of(result) -> Path:
    return result.path / "data"


def descriptor(result) -> dict:
    return json.loads((data_of(result) / "datapackage.json").read_text(encoding="utf-8"))


# ---------------------------------------------------------------- 1. the five outside references on the bundle


def test_layout(packed):
    assert packed.path.name == STEM and packed.zip_path.name == f"{STEM}.zip"
    for rel in [
        "bagit.txt", "bag-info.txt", "manifest-sha256.txt", "tagmanifest-sha256.txt",
        "data/datapackage.json", "data/map.gpkg", "data/README.md", "data/LICENSE.txt", "data/CITATION.cff",
        "data/metadata/datacite.json", "data/metadata/provenance.json", "data/metadata/validation-report.json",
        "data/metadata/crs.wkt", "data/metadata/validation-report.html", "data/tables/legend.csv", "data/tables/analyses.csv", "data/tables/samples.csv",
        "data/tables/structures.csv", "data/source/archivist.toml", "data/source/analyses.xlsx",
    ] + [f"data/geojson/{r}.geojson" for r in ("units", "lines", "extent", "samples", "structures")]:
        assert rel in packed.files, rel
    assert not [p for p in packed.path.parent.iterdir() if p.name.startswith(".")], "staging left behind"


def test_html_report_inside_package_is_self_contained(packed):
    page = (data_of(packed) / "metadata" / "validation-report.html").read_text(encoding="utf-8")
    assert page.lstrip().lower().startswith("<!doctype html>") and "<svg" in page
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", page), "the packaged page must not fetch anything"


def test_frictionless_validates_package_with_foreign_keys(packed):
    # Outside reference: the frictionless library validates the descriptor, every hash and size,
    # every table against its Table Schema and every foreign key.
    report = frictionless.validate(str(data_of(packed) / "datapackage.json"))
    assert report.valid, report.flatten(["resourceName", "type", "message"])[:10]
    resources = {r["name"]: r for r in descriptor(packed)["resources"]}
    # the bundle's analyses include rows compiled from publications: the team's own rows are tied to their
    # samples by the analysis-samples table (archivist.package.literature)
    assert {"fields": ["sample_id"], "reference": {"resource": "samples", "fields": ["sample_id"]}} in resources["analysis-samples"]["schema"]["foreignKeys"]
    assert {"fields": ["unit"], "reference": {"resource": "legend", "fields": ["unit"]}} in resources["units"]["schema"]["foreignKeys"]
    assert {"fields": ["unit"], "reference": {"resource": "legend", "fields": ["unit"]}} in resources["samples"]["schema"]["foreignKeys"]
    assert resources["legend"]["schema"]["primaryKey"] == ["unit"]


def test_frictionless_command_line_validates(packed):
    # Outside reference: the `frictionless validate` command itself.
    exe = shutil.which("frictionless") or str(Path(sys.executable).with_name("frictionless"))
    run = subprocess.run([exe, "validate", "datapackage.json"], cwd=data_of(packed), capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stdout[-2000:] + run.stderr[-2000:]


def test_frictionless_fails_when_a_link_is_broken(packed, tmp_path):
    # Break one analysis's sample link in a copy and refresh its hash and size, so only the foreign key fails.
    # (The bundle's analyses include compiled rows: the link to the samples is in tables/analysis-samples.csv.)
    copy = tmp_path / "copy"
    shutil.copytree(packed.path, copy)
    csv = copy / "data" / "tables" / "analysis-samples.csv"
    lines = csv.read_text(encoding="utf-8").split("\n")
    first = lines[1].split(",")
    first[1] = "NO-SUCH-SAMPLE"
    lines[1] = ",".join(first)
    csv.write_text("\n".join(lines), encoding="utf-8")
    dp = json.loads((copy / "data" / "datapackage.json").read_text(encoding="utf-8"))
    for r in dp["resources"]:
        if r["name"] == "analysis-samples":
            r["hash"] = "sha256:" + hashlib.sha256(csv.read_bytes()).hexdigest()
            r["bytes"] = csv.stat().st_size
    (copy / "data" / "datapackage.json").write_text(json.dumps(dp), encoding="utf-8")
    report = frictionless.validate(str(copy / "data" / "datapackage.json"))
    assert not report.valid
    types = {t for t, *_ in report.flatten(["type"])}
    assert types == {"foreign-key"}, report.flatten(["type", "message"])


def test_bagit_library_validates_bag(packed):
    # Outside reference: the bagit library (RFC 8493) checks the tag files, Payload-Oxum and every checksum.
    bag = bagit.Bag(str(packed.path))
    bag.validate()
    assert bag.is_valid()
    assert bag.info["Bagging-Date"] == "2026-01-01"
    assert bag.info["Payload-Oxum"].endswith(f".{sum(1 for f in packed.files if f.startswith('data/'))}")
    assert "Source-Organization" in bag.info and "External-Description" in bag.info and "Contact-Name" in bag.info


def test_bagit_detects_a_changed_payload(packed, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(packed.path, copy)
    with open(copy / "data" / "tables" / "legend.csv", "a", encoding="utf-8") as fh:
        fh.write("\n")
    with pytest.raises(bagit.BagValidationError):
        bagit.Bag(str(copy)).validate()


def test_sha256sum_checks_the_manifest(packed):
    # Outside reference: GNU coreutils sha256sum reads the manifest as its own check format.
    run = subprocess.run(["sha256sum", "--strict", "-c", "manifest-sha256.txt"], cwd=packed.path, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr
    assert run.stdout.count(": OK") == sum(1 for f in packed.files if f.startswith("data/"))
    run = subprocess.run(["sha256sum", "--strict", "-c", "tagmanifest-sha256.txt"], cwd=packed.path, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr


def datacite_validator():
    """The DataCite 4.5 JSON Schema as shipped in the ``datacite`` package (its own validator)."""
    from datacite import schema45

    return schema45.validator


def test_datacite_record_validates_against_shipped_schema(packed):
    # Outside reference: datacite-v4.5.json from the datacite package.
    record = json.loads((data_of(packed) / "metadata" / "datacite.json").read_text(encoding="utf-8"))
    errors = [e.message for e in datacite_validator().iter_errors(record)]
    assert errors == []
    assert record["types"]["resourceTypeGeneral"] == "Dataset"
    assert record["rightsList"][0]["rightsIdentifier"] == "CC-BY-4.0"
    assert record["rightsList"][0]["rightsIdentifierScheme"] == "SPDX"
    box = record["geoLocations"][0]["geoLocationBox"]
    assert box["westBoundLongitude"] < box["eastBoundLongitude"] and box["southBoundLatitude"] < box["northBoundLatitude"]
    assert record["publicationYear"] == "2026"
    assert [c["name"] for c in record["creators"]] == ["Tollivast, Maren", "Calderwyn, Idris", "Oakeshaw, Sunniva"]
    assert {d["descriptionType"] for d in record["descriptions"]} == {"Abstract", "TechnicalInfo"}


def test_prov_library_reads_provenance(packed):
    # Outside reference: the prov library's PROV-JSON deserializer.
    from prov.model import ProvActivity, ProvAgent, ProvDerivation, ProvDocument, ProvEntity

    doc = ProvDocument.deserialize(source=str(data_of(packed) / "metadata" / "provenance.json"), format="json")
    records = doc.get_records()
    entities = {str(r.identifier): r for r in records if isinstance(r, ProvEntity)}
    activities = {str(r.identifier): r for r in records if isinstance(r, ProvActivity)}
    agents = [r for r in records if isinstance(r, ProvAgent)]
    derivations = [r for r in records if isinstance(r, ProvDerivation)]
    assert {a.split("/")[-1] for a in activities} == {"check", "pack"}
    for act in activities.values():
        assert act.get_startTime() is not None and act.get_endTime() is not None
    # every input file is an entity carrying its SHA-256, which hashlib confirms on the project's own file
    digests = {}
    for ident, ent in entities.items():
        values = {str(k): v for k, v in ent.attributes}
        if str(values.get("prov:type")).endswith("InputFile"):
            digests[str(values["prov:label"])] = str(values[next(k for k in values if k.endswith("sha256"))])
    stations = {"stations_calderwyn.csv", "stations_oakeshaw.csv", "stations_tollivast.csv"}  # the mappers' files, each
    assert set(digests) == {"archivist.toml", "analyses.xlsx", "legend.csv", "map.gpkg", "references.csv", *stations}
    for name, digest in digests.items():
        assert digest == hashlib.sha256((BUNDLE / name).read_bytes()).hexdigest()
    labels = sorted(str(dict((str(k), v) for k, v in a.attributes).get("prov:label")) for a in agents)
    assert f"archivist {archivist.__version__}" in labels and "Maren Tollivast" in labels
    assert len(derivations) >= 4  # the package from each input


def test_pyogrio_reads_back_every_layer(packed):
    # Outside reference: GDAL through pyogrio reads the written GeoPackage and GeoJSON.
    project = archivist.load_project(BUNDLE)
    gpkg = data_of(packed) / "map.gpkg"
    assert [n for n, _ in pyogrio.list_layers(gpkg)] == ["units", "lines", "extent", "samples", "structures", "stations"]
    to_wgs84 = pyproj.Transformer.from_crs(project.crs, "EPSG:4326", always_xy=True)
    for role, layer in project.layers.items():
        back = pyogrio.read_dataframe(gpkg, layer=role, fid_as_index=True)
        assert len(back) == len(layer.frame)
        assert pyproj.CRS(back.crs).equals(project.crs)
        # feature ids kept; a layer read from coordinate tables (the stations) is numbered 1..n
        ids = list(layer.frame.index) if layer.frame.index.name == "fid" else list(range(1, len(layer.frame) + 1))
        assert list(back.index) == ids, "feature ids kept"
        for col in layer.frame.columns.drop("geometry"):
            assert back[col].astype(str).tolist() == layer.frame[col].astype(str).tolist(), (role, col)
        assert shapely.equals_exact(np.asarray(back.geometry.array), np.asarray(layer.frame.geometry.array), 0).all()
        gj = pyogrio.read_dataframe(data_of(packed) / "geojson" / f"{role}.geojson")
        assert len(gj) == len(layer.frame)
        assert pyproj.CRS(gj.crs).equals(pyproj.CRS("EPSG:4326"))
        for col in layer.frame.columns.drop("geometry"):
            mine = layer.frame[col].astype(str).tolist()
            theirs = gj[col].astype(str).tolist() if gj[col].dtype.kind != "M" else gj[col].dt.strftime("%Y-%m-%d").tolist()
            if layer.frame[col].dtype.kind == "f":
                assert np.allclose(gj[col].to_numpy(float), layer.frame[col].to_numpy(float), rtol=1e-14, equal_nan=True)
            else:
                assert theirs == mine, (role, col)
        # coordinates: pyproj's transform of the project's own coordinates, to the 7 decimals written
        expected = to_wgs84.transform(*shapely.get_coordinates(np.asarray(layer.frame.geometry.array)).T)
        got = shapely.get_coordinates(np.asarray(gj.geometry.array))
        if role in ("units", "extent"):  # rings may start elsewhere after reorientation: compare as sets
            exp = np.round(np.column_stack(expected), 7)
            assert np.allclose(np.unique(got, axis=0), np.unique(exp, axis=0), atol=1.5e-7)
        else:
            assert np.allclose(got, np.column_stack(expected), atol=1e-7)


def test_geojson_is_rfc7946(packed):
    """RFC 7946: WGS 84 lon/lat without a crs member, exterior rings counterclockwise (section 3.1.6)."""
    doc = json.loads((data_of(packed) / "geojson" / "units.geojson").read_text(encoding="utf-8"))
    assert doc["type"] == "FeatureCollection" and "crs" not in doc
    w, s, e, n = doc["bbox"]
    assert -180 <= w < e <= 180 and -90 <= s < n <= 90
    for feat in doc["features"]:
        ring = shapely.LinearRing(feat["geometry"]["coordinates"][0])
        assert ring.is_ccw
        assert feat["properties"]["fid"] == feat["id"]


# ---------------------------------------------------------------- package contents


def test_descriptor_follows_package_profile(packed):
    dp = descriptor(packed)
    jsonschema.validate(dp, load_schema("package.schema.json"))
    assert dp["licenses"] == [{"name": "CC-BY-4.0", "title": "Creative Commons Attribution 4.0 International", "path": "https://spdx.org/licenses/CC-BY-4.0.html"}]
    assert dp["created"] == "2026-01-01T00:00:00Z"
    assert dp["spatial"]["crs"] == "EPSG:32633"
    assert dp["spatial"]["bbox"] == [480000.0, 6792000.0, 488000.0, 6798000.0]
    # the WGS 84 box covers the map extent's corners transformed by pyproj
    t = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    lon, lat = t.transform([480000, 488000, 480000, 488000], [6792000, 6792000, 6798000, 6798000])
    w, s, e, n = dp["spatial"]["bbox_wgs84"]
    assert w <= min(lon) and e >= max(lon) and s <= min(lat) and n >= max(lat)
    assert dp["archivist"]["validation"]["errors"] == 0 and dp["archivist"]["validation"]["packed_with_errors"] is False
    every = {r["path"] for r in dp["resources"]}
    assert every == {f[len("data/"):] for f in packed.files if f.startswith("data/")} - {"datapackage.json"}


def test_analyte_units_read_from_headers(packed):
    fields = {f["name"]: f for r in descriptor(packed)["resources"] if r["name"] == "analyses" for f in r["schema"]["fields"]}
    assert fields["SiO2 (wt%)"]["unit"] == "wt%" and fields["SiO2 (wt%)"]["type"] == "number"
    assert fields["sample_id"]["type"] == "string"
    # MnO holds '<0.01' (below detection limit): kept as written, the column stays a number and its own
    # missingValues (Frictionless Table Schema v2) says what the reading means
    mno = fields["MnO (wt%)"]
    assert mno["type"] == "number" and "laboratory wrote them" in mno["description"]
    assert {"value": "<0.01", "label": "below the detection limit of 0.01 (written '<0.01')"} in mno["missingValues"]
    assert {"value": "<0.01", "kind": "below-detection-limit", "limit": 0.01} in mno["censoring"]
    text = (data_of(packed) / "tables" / "analyses.csv").read_text(encoding="utf-8")
    assert "<0.01" in text and "\r" not in text


def test_readme_describes_the_map(packed):
    text = (data_of(packed) / "README.md").read_text(encoding="utf-8")
    for words in ["# Geological map of the Tarrowmere district", "1:25 000", "EPSG:32633", "Skelvane Granite",
                  "Cisuralian", "287–291", "## How to cite", "Tollivast, Maren", "CC-BY-4.0",
                  "0 errors, 0 warnings and 0 notices", "## What the checks do not cover", "not a statement that the geology is right"]:
        assert words in text, words
    assert "open error" not in text.lower()


def test_licence_and_citation(packed):
    import yaml

    lic = (data_of(packed) / "LICENSE.txt").read_text(encoding="utf-8")
    assert "CC-BY-4.0" in lic and "Creative Commons Attribution 4.0 International" in lic and "https://spdx.org/licenses/CC-BY-4.0.html" in lic
    cff = yaml.safe_load((data_of(packed) / "CITATION.cff").read_text(encoding="utf-8"))
    # Citation File Format 1.2.0 keys (from memory of the CFF schema): cff-version, message, title, authors required.
    assert cff["cff-version"] == "1.2.0" and cff["type"] == "dataset" and cff["license"] == "CC-BY-4.0"
    assert cff["authors"][0] == {"family-names": "Tollivast", "given-names": "Maren", "affiliation": "Tarrowmere Geological Survey"}


def test_report_and_crs_are_shareable(packed):
    report = json.loads((data_of(packed) / "metadata" / "validation-report.json").read_text(encoding="utf-8"))
    jsonschema.validate(report, load_schema("report.schema.json"))
    assert report["project"] == "archivist.toml"
    assert str(BUNDLE) not in json.dumps(report) and str(BUNDLE) not in (data_of(packed) / "datapackage.json").read_text()
    wkt = (data_of(packed) / "metadata" / "crs.wkt").read_text(encoding="utf-8")
    assert pyproj.CRS.from_wkt(wkt).equals(pyproj.CRS("EPSG:32633")) and wkt.lstrip().startswith("PROJCRS")


def test_package_data_is_itself_a_checkable_project(packed):
    original = archivist.check(BUNDLE)
    again = archivist.check(data_of(packed))
    assert again.summary == original.summary
    assert sorted(again.rules_run) == sorted(original.rules_run)


def test_sources_are_the_inputs_byte_for_byte(packed):
    for name in ("archivist.toml", "analyses.xlsx", "legend.csv", "map.gpkg"):
        assert (data_of(packed) / "source" / name).read_bytes() == (BUNDLE / name).read_bytes()


# ---------------------------------------------------------------- 2. reproducible


def test_two_packs_are_byte_identical(packed, tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    time.sleep(1.1)  # a clock that leaked into the output would now differ
    again = pack(BUNDLE, tmp_path, zip=True)
    assert tree_digest(again.path) == tree_digest(packed.path)
    assert again.zip_path.read_bytes() == packed.zip_path.read_bytes()


def test_zip_is_sorted_stamped_and_holds_the_folder(packed):
    with zipfile.ZipFile(packed.zip_path) as zf:
        infos = zf.infolist()
        names = [i.filename for i in infos]
        assert names == sorted(names) and names[0] == f"{STEM}/"
        assert {i.date_time for i in infos} == {(2026, 1, 1, 0, 0, 0)}
        for info in infos:
            mode = (info.external_attr >> 16) & 0o777
            assert mode == (0o755 if info.is_dir() else 0o644), info.filename
            if not info.is_dir():
                assert zf.read(info) == (packed.path.parent / info.filename).read_bytes()
        assert {n[len(STEM) + 1:] for n in names if not n.endswith("/")} == set(packed.files)


def test_unset_source_date_uses_now(tmp_path, monkeypatch):
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    root = tiny_project(tmp_path)
    result = pack(root, tmp_path / "out")
    created = descriptor(result)["created"]
    import datetime as dt

    stamp = dt.datetime.strptime(created, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=dt.timezone.utc)
    assert abs((dt.datetime.now(dt.timezone.utc) - stamp).total_seconds()) < 120


# ---------------------------------------------------------------- 3. errors refuse; --allow-errors records them


def bad_orcid_project(tmp_path):
    return tiny_project(tmp_path, manifest={"map": {"authors": [{"name": "Test Mapper", "orcid": "0000-0002-1825-0098"}]}})


def test_errors_refuse_with_exit_1_and_the_report(tmp_path):
    root = bad_orcid_project(tmp_path)
    before = tree_digest(root)
    out = tmp_path / "out"
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)])
    assert result.exit_code == 1
    assert "identifier-invalid" in result.stdout and "error" in result.stdout
    assert "--allow-errors" in result.stderr
    assert not out.exists() or list(out.iterdir()) == []
    assert tree_digest(root) == before
    with pytest.raises(PackRefused) as exc:
        pack(root, out)
    assert exc.value.report.summary.errors >= 1


def test_allow_errors_records_them_in_readme_and_metadata(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = bad_orcid_project(tmp_path)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out"), "--allow-errors"])
    assert result.exit_code == 0, result.output
    assert "open error" in result.stderr
    data = tmp_path / "out" / "tiny-test-map-1.0.0" / "data"
    readme = (data / "README.md").read_text(encoding="utf-8")
    head = readme.split("## The map")[0]
    assert "open error" in head and "identifier-invalid" in head and "0000-0002-1825-0098" in head
    dp = json.loads((data / "datapackage.json").read_text(encoding="utf-8"))
    v = dp["archivist"]["validation"]
    assert v["packed_with_errors"] is True and v["errors"] >= 1
    assert "identifier-invalid" in v["open_errors_by_rule"]
    assert any(e["rule"] == "identifier-invalid" for e in v["open_errors"])
    jsonschema.validate(dp, load_schema("package.schema.json"))
    record = json.loads((data / "metadata" / "datacite.json").read_text(encoding="utf-8"))
    assert datacite_validator().is_valid(record)
    other = [d["description"] for d in record["descriptions"] if d["descriptionType"] == "Other"]
    assert other and "identifier-invalid" in other[0]
    assert "nameIdentifiers" not in record["creators"][0], "a wrong ORCID is not passed on as an identifier"
    bag = bagit.Bag(str(data.parent))
    bag.validate()
    assert "open error" in bag.info["Internal-Sender-Description"]


def samples_and_analyses(tmp_path, analyses_ids=("007", "S-2")):
    """The tiny map with two samples (ids '007' and 'S-2') and an analyses CSV."""
    import geopandas as gpd
    from shapely.geometry import Point

    samples = gpd.GeoDataFrame(
        {"sample_id": ["007", "S-2"], "unit": ["A", "B"]}, geometry=[Point(50, 50), Point(150, 50)], crs="EPSG:32633"
    )
    root = tiny_project(tmp_path, samples=samples, manifest={"tables": {"analyses": {"path": "analyses.csv", "sample_field": "sample_id"}}})
    rows = "".join(f"{sid},72.5,0.28\n" for sid in analyses_ids)
    (root / "analyses.csv").write_text("sample_id,SiO2 (wt%),Zr [ppm]\n" + rows, encoding="utf-8")
    return root


def test_identifiers_stay_text_and_links_validate(tmp_path):
    root = samples_and_analyses(tmp_path)
    result = pack(root, tmp_path / "out")
    data = result.path / "data"
    assert "007," in (data / "tables" / "samples.csv").read_text(encoding="utf-8").split("\n", 2)[1] or \
        ",007," in (data / "tables" / "samples.csv").read_text(encoding="utf-8")
    assert (data / "tables" / "analyses.csv").read_text(encoding="utf-8").split("\n")[1].startswith("007,")
    fields = {f["name"]: f for r in descriptor(result)["resources"] if r["name"] == "analyses" for f in r["schema"]["fields"]}
    assert fields["Zr [ppm]"]["unit"] == "ppm" and fields["sample_id"]["type"] == "string"
    report = frictionless.validate(str(data / "datapackage.json"))
    assert report.valid, report.flatten(["type", "message"])


def test_a_broken_link_packed_with_allow_errors_fails_frictionless(tmp_path):
    root = samples_and_analyses(tmp_path, analyses_ids=("007", "S-9"))
    result = pack(root, tmp_path / "out", allow_errors=True)
    report = frictionless.validate(str(result.path / "data" / "datapackage.json"))
    assert not report.valid
    errors = report.flatten(["type", "message"])
    assert {t for t, _ in errors} == {"foreign-key"} and "S-9" in errors[0][1]


# ---------------------------------------------------------------- metadata a deposit needs


@pytest.mark.parametrize("key", ["title", "version", "abstract", "licence", "authors"])
def test_missing_deposit_metadata_names_the_key(tmp_path, key):
    def drop(data):
        del data["map"][key]

    from builders import edit_manifest

    root = tiny_project(tmp_path)
    edit_manifest(root, drop)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert f"map.{key}" in line and "archivist.toml" in line and "Traceback" not in result.output
    assert not (tmp_path / "out").exists()


def test_licence_that_is_not_spdx_stops_pack(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}})
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out"), "--allow-errors"])
    assert result.exit_code == 2 and "map.licence" in result.stderr and "SPDX" in result.stderr


def test_no_manifest_stops_pack(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").unlink()
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2 and "archivist.toml" in result.stderr


def test_bad_source_date_epoch_is_one_line(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "yesterday")
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2 and "SOURCE_DATE_EPOCH" in result.stderr


# ---------------------------------------------------------------- outputs: never in the project, never over a package without --force


def test_existing_package_needs_force(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = tiny_project(tmp_path)
    out = tmp_path / "out"
    first = pack(root, out)
    digest = tree_digest(first.path)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)])
    assert result.exit_code == 2 and "--force" in result.stderr
    assert tree_digest(first.path) == digest
    (first.path / "data" / "stray.txt").write_text("old", encoding="utf-8")
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out), "--force"])
    assert result.exit_code == 0, result.output
    assert not (first.path / "data" / "stray.txt").exists()
    assert tree_digest(first.path) == digest
    assert sorted(p.name for p in out.iterdir()) == ["tiny-test-map-1.0.0"]


def test_out_inside_project_refused(tmp_path):
    root = tiny_project(tmp_path)
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(root / "build")])
    assert result.exit_code == 2 and "inside the project" in result.stderr
    assert tree_digest(root) == before and not (root / "build").exists()


def test_package_would_replace_the_project_refused(tmp_path):
    root = tiny_project(tmp_path, name="tiny-test-map-1.0.0")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path), "--force"])
    assert result.exit_code == 2
    assert tree_digest(root) == before


def test_map_name_from_manifest(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"name": "tiny-map", "version": "2.1"}})
    result = pack(root, tmp_path / "out", zip=True)
    assert result.path.name == "tiny-map-2.1" and result.zip_path.name == "tiny-map-2.1.zip"
    assert descriptor(result)["name"] == "tiny-map"


# ---------------------------------------------------------------- 4. an interrupted pack leaves no package


def test_failure_at_the_last_step_leaves_nothing(tmp_path, monkeypatch):
    pack_module = importlib.import_module("archivist.package.pack")  # the module, not the function

    root = tiny_project(tmp_path)
    before = tree_digest(root)
    out = tmp_path / "out"

    def boom(*args, **kwargs):
        raise OSError("disk full (injected)")

    monkeypatch.setattr(pack_module, "move_into_place", boom)
    with pytest.raises(OSError, match="injected"):
        pack(root, out, zip=True)
    assert list(out.iterdir()) == []
    assert tree_digest(root) == before


def test_failed_force_keeps_the_old_package(tmp_path, monkeypatch):
    pack_module = importlib.import_module("archivist.package.pack")  # the module, not the function

    root = tiny_project(tmp_path)
    out = tmp_path / "out"
    first = pack(root, out)
    digest = tree_digest(first.path)

    def boom(*args, **kwargs):
        raise OSError("injected")

    monkeypatch.setattr(pack_module, "write_bag", boom)
    with pytest.raises(OSError):
        pack(root, out, force=True)
    assert tree_digest(first.path) == digest
    assert sorted(p.name for p in out.iterdir()) == [first.path.name]


SLOW_PACK = """
import importlib, sys, time
p = importlib.import_module("archivist.package.pack")
real = p.write_bag
def slow(*a, **k):
    print("writing", flush=True)
    time.sleep(60)
    return real(*a, **k)
p.write_bag = slow
from archivist.cli import main
sys.argv = ["archivist", "pack", sys.argv[1], "--out", sys.argv[2], "--zip"]
main()
"""


def _start_and_stop(tmp_path, sig):
    import signal

    root = tiny_project(tmp_path)
    before = tree_digest(root)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-c", SLOW_PACK, str(root), str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = proc.stdout.readline()
        assert line.strip() == "writing", line + proc.stderr.read()
        assert any(p.name.endswith(".part") for p in out.iterdir()), "the package is being built in a staging folder"
        os.kill(proc.pid, getattr(signal, sig))
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    return root, before, out, proc


def test_sigterm_half_way_leaves_no_package(tmp_path):
    root, before, out, proc = _start_and_stop(tmp_path, "SIGTERM")
    assert proc.returncode == 130
    assert "interrupted" in proc.stderr.read()
    assert list(out.iterdir()) == []
    assert tree_digest(root) == before


def test_sigkill_leftover_is_removed_by_the_next_pack(tmp_path):
    root, before, out, proc = _start_and_stop(tmp_path, "SIGKILL")
    leftovers = [p.name for p in out.iterdir()]
    assert leftovers and all(n.startswith(".") and n.endswith(".part") for n in leftovers), leftovers
    assert tree_digest(root) == before
    result = pack(root, out)
    assert sorted(p.name for p in out.iterdir()) == [result.path.name]


# ---------------------------------------------------------------- the command line


def test_cli_reports_what_it_wrote(tmp_path):
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out"), "--zip"])
    assert result.exit_code == 0, result.output
    assert "tiny-test-map-1.0.0" in result.stdout and "Zip:" in result.stdout and "0 errors" in result.stdout


def test_input_named_with_a_percent_sign(tmp_path):
    root = tiny_project(tmp_path)
    (root / "legend.csv").rename(root / "legend 100%.csv")
    from builders import edit_manifest

    edit_manifest(root, lambda m: m["tables"]["legend"].update(path="legend 100%.csv"))
    result = pack(root, tmp_path / "out")
    assert "data/source/legend 100_.csv" in result.files
    bagit.Bag(str(result.path)).validate()
    assert subprocess.run(["sha256sum", "-c", "manifest-sha256.txt"], cwd=result.path, capture_output=True).returncode == 0
    titles = [r["title"] for r in descriptor(result)["resources"]]
    assert "legend 100%.csv (as handed in)" in titles


def test_shapefile_inputs_come_with_their_side_files(tmp_path):
    from builders import edit_manifest, two_units

    root = tiny_project(tmp_path)
    pyogrio.write_dataframe(two_units(), root / "units.shp")
    edit_manifest(root, lambda m: (m["layers"]["units"].update(path="units.shp"), m["layers"]["units"].pop("layer")))
    result = pack(root, tmp_path / "out", allow_errors=True)
    for suffix in (".shp", ".shx", ".dbf", ".prj"):
        assert f"data/source/units{suffix}" in result.files
    back = pyogrio.read_dataframe(result.path / "data" / "map.gpkg", layer="units", fid_as_index=True)
    assert back.index.tolist() == [0, 1]  # the shapefile's own feature ids
    assert frictionless.validate(str(result.path / "data" / "datapackage.json")).valid


def test_samples_from_a_table_keep_their_coordinate_columns(tmp_path):
    from builders import edit_manifest

    root = tiny_project(tmp_path)
    (root / "samples.csv").write_text("sample_id,easting,northing,unit\n007,50,50,A\nS-2,150,50.5,B\n", encoding="utf-8")
    edit_manifest(root, lambda m: m["layers"].update(samples={"path": "samples.csv", "x_field": "easting", "y_field": "northing", "crs": "EPSG:32633"}))
    result = pack(root, tmp_path / "out", allow_errors=True)
    rows = (result.path / "data" / "tables" / "samples.csv").read_text(encoding="utf-8").split("\n")
    assert rows[0] == "fid,sample_id,unit,easting,northing" and rows[1] == "1,007,A,50.0,50.0"
    assert archivist.check(result.path / "data").summary == result.report.summary


def test_no_readable_units_is_one_line_exit_2_even_with_allow_errors(tmp_path):
    root = tiny_project(tmp_path)
    (root / "map.gpkg").write_bytes(b"")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out"), "--allow-errors"])
    assert result.exit_code == 2 and "layers.units" in result.stderr and len(result.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())
    assert tree_digest(root) == before


def test_untransformable_layer_is_one_line_exit_2_naming_it(tmp_path):
    import geopandas as gpd
    from shapely.geometry import box

    # Metre-sized coordinates labelled as degrees: latitudes of 100 cannot be placed on the globe.
    units = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 100, 100), box(100, 0, 200, 100)], crs="EPSG:4326")
    root = tiny_project(tmp_path)
    units.to_file(root / "u.geojson")
    edit_manifest(root, lambda m: m["layers"].update(units={"path": "u.geojson"}))
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out"), "--allow-errors"])
    assert result.exit_code == 2 and "u.geojson" in result.stderr and "cannot be transformed" in result.stderr
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


# ---------------------------------------------------------------- every input recorded under its own, relative name

def outside_inputs(tmp_path):
    """A project whose legend and analyses are two different files named table.csv in two folders outside it;
    the legend is named by an absolute path, the analyses by a relative one."""
    from builders import tiny_legend, tiny_samples

    root = tiny_project(tmp_path, samples=tiny_samples())
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    tiny_legend().to_csv(tmp_path / "a" / "table.csv", index=False, lineterminator="\n")
    (tmp_path / "b" / "table.csv").write_text("sample_id,SiO2 (wt%)\nS-0001,70.5\nS-0002,71.5\n", encoding="utf-8")
    return edit_manifest(
        root,
        lambda m: (
            m["tables"]["legend"].update(path=str(tmp_path / "a" / "table.csv")),
            m["tables"].update(analyses={"path": "../b/table.csv", "sample_field": "sample_id"}),
        ),
    )


def test_outside_inputs_of_one_name_stay_apart(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = outside_inputs(tmp_path)
    result = pack(root, tmp_path / "out")
    data = data_of(result)
    legend, analyses = data / "source/external/a/table.csv", data / "source/external/b/table.csv"
    assert legend.read_bytes() == (tmp_path / "a" / "table.csv").read_bytes()
    assert analyses.read_bytes() == (tmp_path / "b" / "table.csv").read_bytes()
    sources = json.loads((data / "datapackage.json").read_text(encoding="utf-8"))["sources"]
    paths = [s["path"] for s in sources]
    assert len(paths) == len(set(paths)) and {"source/external/a/table.csv", "source/external/b/table.csv"} <= set(paths)
    # provenance (read with the prov library): each input named once, with its own file's SHA-256 (hashlib)
    from prov.model import ProvDocument, ProvEntity

    doc = ProvDocument.deserialize(source=str(data / "metadata" / "provenance.json"), format="json")
    digests = {}
    for ent in (r for r in doc.get_records() if isinstance(r, ProvEntity)):
        values = {str(k): v for k, v in ent.attributes}
        if str(values.get("prov:type")).endswith("InputFile"):
            digests[str(values["prov:label"])] = str(values[next(k for k in values if k.endswith("sha256"))])
    assert digests["external/a/table.csv"] == hashlib.sha256((tmp_path / "a" / "table.csv").read_bytes()).hexdigest()
    assert digests["external/b/table.csv"] == hashlib.sha256((tmp_path / "b" / "table.csv").read_bytes()).hexdigest()
    # the bagit library validates the bag
    assert bagit.Bag(str(result.path)).is_valid()


def test_no_absolute_path_of_the_packing_machine_in_the_package(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = outside_inputs(tmp_path)
    result = pack(root, tmp_path / "out", allow_errors=True)
    prefixes = {str(tmp_path), str(tmp_path.resolve())}
    for path in result.path.rglob("*"):
        if path.is_file() and path.suffix != ".gpkg":
            text = path.read_bytes().decode("utf-8", errors="replace")
            assert not any(p in text for p in prefixes), path.relative_to(result.path)


def test_source_manifest_points_at_the_copies_and_is_checkable(tmp_path, monkeypatch):
    import tomllib

    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = outside_inputs(tmp_path)
    result = pack(root, tmp_path / "out")
    source = data_of(result) / "source"
    manifest = tomllib.loads((source / "archivist.toml").read_text(encoding="utf-8"))
    assert manifest["tables"]["legend"]["path"] == "external/a/table.csv"
    assert manifest["tables"]["analyses"]["path"] == "external/b/table.csv"
    descriptor = json.loads((data_of(result) / "datapackage.json").read_text(encoding="utf-8"))
    (res,) = [r for r in descriptor["resources"] if r["path"] == "source/archivist.toml"]
    assert "rewritten" in res["description"]
    report = archivist.check(source)
    assert set(report.rules_run) and not [f for f in report.findings if f.rule in ("layer-missing", "layer-unreadable")]


def test_audit_of_a_package_with_outside_inputs_is_clean(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    result = pack(outside_inputs(tmp_path), tmp_path / "out")
    report = archivist.audit(result.path)
    assert [f for f in report.findings if f.family == "archive"] == [], [f.message for f in report.findings]


# ---------------------------------------------------------------- interruption and concurrent packs tell the truth

def test_ctrl_c_after_the_move_names_the_whole_package(tmp_path, monkeypatch):
    pack_module = importlib.import_module("archivist.package.pack")

    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = tiny_project(tmp_path)
    out = tmp_path / "out"
    real = pack_module.move_into_place

    def move_then_interrupt(tmp, target):
        real(tmp, target)
        raise KeyboardInterrupt

    monkeypatch.setattr(pack_module, "move_into_place", move_then_interrupt)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)])
    assert result.exit_code == 130
    assert "no package was written" not in result.stderr
    assert str(out / "tiny-test-map-1.0.0") in result.stderr and "whole" in result.stderr
    assert bagit.Bag(str(out / "tiny-test-map-1.0.0")).is_valid()  # the bagit library agrees


def test_ctrl_c_before_the_move_leaves_nothing(tmp_path, monkeypatch):
    pack_module = importlib.import_module("archivist.package.pack")

    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = tiny_project(tmp_path)
    out = tmp_path / "out"

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(pack_module, "write_bag", interrupt)
    result = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)])
    assert result.exit_code == 130 and "no package was written" in result.stderr
    assert list(out.iterdir()) == []


HELD_PACK = """
import sys, time
from pathlib import Path
import importlib
pack_module = importlib.import_module("archivist.package.pack")
from archivist.cli import main

ready, go = Path(sys.argv[1]), Path(sys.argv[2])
real = pack_module.move_into_place

def held(tmp, target):
    ready.touch()
    for _ in range(6000):  # at most 60 s, in case the test process died
        if go.exists():
            break
        time.sleep(0.01)
    real(tmp, target)

pack_module.move_into_place = held
sys.argv = ["archivist", "pack", sys.argv[3], "--out", sys.argv[4]] + sys.argv[5:]
main()
"""


@pytest.mark.parametrize("force", [False, True])
def test_a_second_pack_into_a_busy_folder_is_refused(force, tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    root = tiny_project(tmp_path)
    out = tmp_path / "out"
    ready, go = tmp_path / "ready", tmp_path / "go"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(Path(archivist.__file__).parent.parent), os.environ.get("PYTHONPATH", "")]))
    first = subprocess.Popen(
        [sys.executable, "-c", HELD_PACK, str(ready), str(go), str(root), str(out)] + (["--force"] if force else []),
        env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        for _ in range(12000):  # wait until the first pack holds the folder (no timing is asserted)
            if ready.exists() or first.poll() is not None:
                break
            time.sleep(0.01)
        assert ready.exists(), first.communicate()
        second = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)] + (["--force"] if force else []))
        assert second.exit_code == 2, second.output
        assert "another archivist pack is writing" in second.stderr and "Traceback" not in second.output
    finally:
        go.touch()
        stdout, stderr = first.communicate(timeout=120)
    assert first.returncode == 0, stderr
    assert bagit.Bag(str(out / "tiny-test-map-1.0.0")).is_valid()
    # once the first is done, a pack without --force refuses the existing package as before
    third = CliRunner().invoke(cli, ["pack", str(root), "--out", str(out)])
    assert third.exit_code == 2 and "already exists" in third.stderr
