"""``archivist audit``: a package's integrity, any archive's readiness for reuse, the map re-checked.

The packages are made by ``archivist pack`` (the example bundle and the tiny
project); the damaged ones are broken here in code.
"""

import importlib
import importlib.resources
import json
import shutil
import sys
import zipfile

import bagit
import jsonschema
import pytest
from click.testing import CliRunner

import archivist
from archivist.cli import cli
from archivist.manifest import load_schema, schema_dir
from archives import flip_byte, package, package_zip, rebag
from builders import tiny_project, tree_digest


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def rules_of(result):
    return {f["rule"] for f in json.loads(result.stdout)["findings"]}


# ---------------------------------------------------------------- a sound package

def test_example_bundle_package_fit_for_reuse(tmp_path):
    archive = package_zip(tmp_path, "bundle")
    result = run("audit", archive, "--format", "json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["summary"] == {"errors": 0, "warnings": 0, "notices": 0}
    families = {archivist.get_rule(r).family for r in data["rules_run"]}
    # every check family ran on the packaged map, besides the archive family
    assert {"archive", "metadata", "topology", "linework", "crs", "legend", "samples", "structures"} <= families
    assert data["notes"][0].startswith(f"Audited a private copy of {archive.name} (zip")


def test_audit_writes_nothing_into_the_archive(tmp_path):
    root = package(tmp_path)
    before = tree_digest(root)
    assert run("audit", root).exit_code == 0
    assert tree_digest(root) == before


def test_report_written_atomically_never_inside_the_archive(tmp_path):
    root = package(tmp_path)
    inside = run("audit", root, "--output", root / "report.txt")
    assert inside.exit_code == 2 and "inside the project folder" in inside.stderr
    out = tmp_path / "audit.json"
    assert run("audit", root, "--format", "json", "--output", out).exit_code == 0
    assert json.loads(out.read_text())["tool"] == "archivist"
    again = run("audit", root, "--output", out)
    assert again.exit_code == 2 and "--force" in again.stderr


# ---------------------------------------------------------------- what must show: the damaged file is named

@pytest.mark.parametrize("as_zip", [False, True], ids=["folder", "zip"])
def test_flipped_byte_names_the_file(as_zip, tmp_path):
    root = package(tmp_path / "p", "bundle")
    flip_byte(root / "data" / "map.gpkg", 5000)
    target = root
    if as_zip:
        target = shutil.make_archive(str(tmp_path / root.name), "zip", root.parent, root.name)
    result = run("audit", target, "--format", "json")
    assert result.exit_code == 1
    data = json.loads(result.stdout)
    mismatches = [f for f in data["findings"] if f["rule"] == "archive-checksum-mismatch"]
    assert [f["features"] for f in mismatches] == [["data/map.gpkg"]]
    assert mismatches[0]["severity"] == "error" and "data/map.gpkg" in mismatches[0]["message"]


def test_removed_file_is_named(tmp_path):
    root = package(tmp_path, "bundle")
    (root / "data" / "tables" / "analyses.csv").unlink()
    result = run("audit", root, "--format", "json")
    assert result.exit_code == 1
    missing = [f for f in json.loads(result.stdout)["findings"] if f["rule"] == "archive-file-missing"]
    assert [f["features"] for f in missing] == [["data/tables/analyses.csv"]]
    assert "data/tables/analyses.csv is listed in manifest-sha256.txt" in missing[0]["message"]


def test_text_report_names_the_file(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    root = package(tmp_path)
    flip_byte(root / "data" / "README.md", 3)
    out = run("audit", root).stdout
    assert "archive-checksum-mismatch: data/README.md: SHA256 is" in out
    assert "1 error" in out


def test_tampered_and_rebagged_data_caught_by_the_checks(tmp_path):
    """Someone edits a layer and re-computes every checksum: integrity holds, but the re-run checks catch the damage."""
    import geopandas as gpd
    import pyogrio
    from shapely.geometry import box

    root = package(tmp_path)
    gpkg = root / "data" / "map.gpkg"
    units = pyogrio.read_dataframe(gpkg, layer="units", fid_as_index=True)
    units.loc[units.index[1], "geometry"] = box(90, 0, 200, 100)  # now overlaps unit A by 10 m x 100 m
    others = {n: pyogrio.read_dataframe(gpkg, layer=n, fid_as_index=True) for n, _ in pyogrio.list_layers(gpkg) if n != "units"}
    gpkg.unlink()
    for name, frame in {"units": units, **others}.items():
        pyogrio.write_dataframe(gpd.GeoDataFrame(frame).reset_index(), gpkg, layer=name, driver="GPKG")
    rebag(root)
    result = run("audit", root, "--format", "json")
    found = rules_of(result)
    assert "archive-checksum-mismatch" not in found
    assert "unit-overlap" in found, found
    assert result.exit_code == 1


def _bag_only(root):
    """Re-save the bag's manifests (the ``bagit`` library's own way) but not the descriptor's hashes and sizes."""
    bag = bagit.Bag(str(root))
    bag.save(manifests=True)


def test_plain_file_unlike_its_descriptor_is_named(tmp_path):
    """A plain file resource (``"type": "file"``) whose bytes and hash are not the descriptor's, with the bag re-made."""
    root = package(tmp_path)
    target = root / "data" / "source" / "legend.csv"
    target.write_bytes(target.read_bytes() + b"\n")
    _bag_only(root)
    result = run("audit", root, "--format", "json", "--rule", "package-data-invalid")
    found = json.loads(result.stdout)["findings"]
    assert result.exit_code == 1
    assert [f["features"] for f in found] == [["data/source/legend.csv"]] * 2
    size = target.stat().st_size
    assert any(f"holds {size} bytes, not {size - 1} as described" in f["message"] for f in found)
    assert any("the sha256 hash of 'source/legend.csv' is" in f["message"] for f in found)


def test_plain_files_measured_as_frictionless_measures_them(tmp_path):
    """Each plain file resource gets the error types ``frictionless`` gives it (its own ``Resource.validate``)."""
    import hashlib

    from frictionless import Package

    from archivist.package.audit.records import file_problems

    (tmp_path / "a.bin").write_bytes(b"hello")
    sha, md5 = hashlib.sha256(b"hello").hexdigest(), hashlib.md5(b"hello").hexdigest()
    cases = [
        {"name": "good", "path": "a.bin", "type": "file", "bytes": 5, "hash": f"sha256:{sha}"},
        {"name": "md5-bare", "path": "a.bin", "type": "file", "hash": md5},
        {"name": "md5-prefixed-wrong", "path": "a.bin", "type": "file", "hash": "md5:" + hashlib.md5(b"hellx").hexdigest()},
        {"name": "both-wrong", "path": "a.bin", "type": "file", "bytes": 6, "hash": f"sha256:{sha[:-1]}0"},
        {"name": "size-only", "path": "a.bin", "type": "file", "bytes": 4},
        {"name": "nothing-declared", "path": "a.bin", "type": "file"},
        {"name": "gone", "path": "missing.bin", "type": "file", "bytes": 5},
    ]
    reference = Package({"name": "p", "resources": cases}, basepath=str(tmp_path)).validate()
    for res, task in zip(cases, reference.tasks):
        ours = file_problems(res, tmp_path, "data/")
        assert sorted(p.type for p in ours) == sorted(e.type for e in task.errors), res["name"]
        assert all(p.file == f"data/{res['path']}" and p.resource == res["name"] for p in ours)


# ---------------------------------------------------------------- what must show: a bare folder of layers

def test_bare_folder_of_layers_gives_reuse_findings(tmp_path):
    import geopandas as gpd
    import pyogrio

    src = tiny_project(tmp_path / "src")
    root = tmp_path / "layers"
    root.mkdir()
    for layer in ("units", "lines"):
        frame = pyogrio.read_dataframe(src / "map.gpkg", layer=layer)
        pyogrio.write_dataframe(gpd.GeoDataFrame(frame), root / f"{layer}.shp")
    result = run("audit", root, "--format", "json")
    assert result.exit_code == 1
    data = json.loads(result.stdout)
    archive = {f["rule"]: f["message"] for f in data["findings"] if f["family"] == "archive"}
    assert set(archive) == {
        "archive-licence-missing",
        "archive-authors-missing",
        "archive-contact-missing",
        "archive-lineage-missing",
        "archive-description-missing",
        "archive-legend-missing",
        "archive-checksums-absent",
    }
    assert all("ask" in m for m in archive.values()), archive  # each says what to ask for
    assert "2 codes: A, B" in archive["archive-legend-missing"]
    assert any(n.startswith("No archivist.toml in layers") for n in data["notes"])
    assert "metadata-incomplete" not in {f["rule"] for f in data["findings"]}  # the archive rules say it, once


def test_bare_folder_with_metadata_is_fit_for_reuse(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").write_text(
        (root / "archivist.toml").read_text().replace('licence = "CC-BY-4.0"', 'licence = "CC-BY-4.0"\ncontact = "maps@example.org"')
    )
    (root / "README.md").write_text("# Tiny map\n\n## Methods\n\nTwo units mapped in the field in 2024.\n")
    (root / "SHA256SUMS").write_text("")
    result = run("audit", root, "--format", "json", "--only", "archive")
    assert result.exit_code == 0, result.stdout
    assert json.loads(result.stdout)["findings"] == []


# ---------------------------------------------------------------- the descriptor is never followed outside

def test_descriptor_pointing_outside_is_not_followed(tmp_path):
    from archives import edit_json

    root = package(tmp_path)
    secret = tmp_path / "secret.csv"
    secret.write_text("a,b\n1,2\n")
    edit_json(root / "data" / "datapackage.json", lambda d: d["resources"].append({"name": "x", "path": "../../secret.csv"}))
    edit_json(root / "data" / "datapackage.json", lambda d: d["resources"].append({"name": "y", "path": "https://example.org/y.csv"}))
    rebag(root)
    result = run("audit", root, "--format", "json", "--rule", "descriptor-invalid", "--rule", "package-data-invalid")
    messages = [f["message"] for f in json.loads(result.stdout)["findings"]]
    assert any("'../../secret.csv' leads outside the package" in m for m in messages)
    assert any("'https://example.org/y.csv' is a remote address" in m for m in messages)
    assert not any("secret.csv" in m and "foreign" in m for m in messages)


def test_audit_of_a_damaged_zip_member_is_exit_2(tmp_path):
    archive = package_zip(tmp_path)
    raw = bytearray(archive.read_bytes())
    with zipfile.ZipFile(archive) as zf:
        info = next(i for i in zf.infolist() if i.filename.endswith("data/map.gpkg"))
    at = info.header_offset + 30 + len(info.filename) + len(info.extra) + 50
    raw[at] ^= 0xFF
    archive.write_bytes(bytes(raw))
    result = run("audit", archive)
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "corrupt zip" in line and "data/map.gpkg" in line


def test_zip_with_system_clutter_is_still_a_package(tmp_path):
    """A package zipped by a desktop that adds its resource-fork folder beside the package folder."""
    root = package(tmp_path / "p")
    archive = tmp_path / "zipped.zip"
    with zipfile.ZipFile(archive, "w", zipfile.ZIP_DEFLATED) as zf:
        for path in sorted(root.rglob("*")):
            if path.is_file():
                zf.write(path, f"{root.name}/{path.relative_to(root).as_posix()}")
        zf.writestr(f"__MACOSX/{root.name}/._bagit.txt", b"\x00\x05\x16\x07resource fork")
    result = run("audit", archive, "--format", "json", "--only", "archive")
    assert result.exit_code == 0, result.stdout
    assert "an archivist package" in json.loads(result.stdout)["notes"][0]


def test_archive_without_map_is_reported_once(tmp_path):
    (tmp_path / "bare").mkdir()
    (tmp_path / "bare" / "notes.txt").write_text("field notes\n", encoding="utf-8")
    report = archivist.audit(tmp_path / "bare")
    rules = [f.rule for f in report.findings]
    assert "archive-map-missing" in rules and "layer-missing" not in rules


# ---------------------------------------------------------------- structured files over the limits

def test_deeply_nested_descriptor_is_a_finding_not_a_traceback(tmp_path):
    """datapackage.json nested 100 000 deep: json's scanner would raise RecursionError; the audit goes on."""
    root = package(tmp_path)
    (root / "data" / "datapackage.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    bagit.Bag(str(root)).save(manifests=True)  # the bagit reference library re-bags it, intact
    result = run("audit", root, "--format", "json")
    assert result.exit_code == 1, result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    findings = json.loads(result.stdout)["findings"]
    messages = [f["message"] for f in findings if f["rule"] == "descriptor-invalid"]
    assert any("data/datapackage.json: nested more than 128 levels deep, over the limit; not read" in m for m in messages), messages
    assert "archive-checksum-mismatch" not in {f["rule"] for f in findings}  # the rest of the audit ran


def test_deeply_nested_archive_manifest_stops_in_one_line(tmp_path):
    root = package(tmp_path)
    (root / "data" / "archivist.toml").write_text("x = " + "[" * 100_000 + "]" * 100_000 + "\n", encoding="utf-8")
    rebag(root)
    result = run("audit", root)
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "archivist.toml: nested more than 128 levels deep, over the limit; not read" in line


def test_one_file_described_by_two_resources_is_a_descriptor_finding(tmp_path):
    """A descriptor listing one path twice (the symptom of two inputs of one base name colliding)."""
    pkg = package(tmp_path)
    desc_path = pkg / "data" / "datapackage.json"
    desc = json.loads(desc_path.read_text(encoding="utf-8"))
    first = next(r for r in desc["resources"] if str(r.get("path", "")).startswith("source/"))
    desc["resources"].append({**first, "name": first["name"] + "-again"})
    desc_path.write_text(json.dumps(desc, indent=2), encoding="utf-8")
    rebag(pkg)
    report = archivist.audit(pkg)
    hits = [f for f in report.findings if f.rule == "descriptor-invalid"]
    assert len(hits) == 1
    assert f"all describe the file '{first['path']}'" in hits[0].message
    assert archivist.audit(package(tmp_path / "clean")).summary.errors == 0


# ---------------------------------------------------------------- the same result whatever is installed

def _outcome(report):
    return [(f.rule, f.message) for f in report.findings], list(report.notes[1:])


def test_datacite_result_does_not_depend_on_the_datacite_package(tmp_path, monkeypatch):
    """The DataCite record is checked against the 4.5 JSON Schema shipped in schemas/ (copied from the
    datacite package), so hiding that package changes nothing; the value 'Mapz' is not in the schema's
    resourceTypeGeneral list (DataCite Metadata Schema 4.5, property 10.a)."""
    from archives import edit_json

    root = package(tmp_path)
    edit_json(root / "data" / "metadata" / "datacite.json", lambda d: d["types"].update(resourceTypeGeneral="Mapz"))
    rebag(root)
    with_package = _outcome(archivist.audit(root, only=["archive"]))
    assert any("Mapz" in m for r, m in with_package[0] if r == "datacite-record-invalid")
    monkeypatch.setitem(sys.modules, "datacite", None)  # import datacite now fails
    with pytest.raises(ImportError):
        importlib.import_module("datacite")
    assert _outcome(archivist.audit(root, only=["archive"])) == with_package


def test_shipped_datacite_schema_is_the_datacite_package_file():
    """schemas/datacite-v4.5.json is the datacite package's file byte for byte (schemas/README.md records the source)."""
    import datacite  # a test dependency (pyproject.toml, [test])

    shipped = schema_dir() / "datacite-v4.5.json"
    original = importlib.resources.files(datacite) / "schemas" / "datacite-v4.5.json"
    assert shipped.read_bytes() == original.read_bytes()
    jsonschema.Draft7Validator.check_schema(json.loads(shipped.read_text(encoding="utf-8")))


# ---------------------------------------------------------------- nothing unreadable is skipped silently

def test_unreadable_layer_files_are_findings(tmp_path):
    """A GeoPackage cut short after its SQLite header and a .geojson that is not JSON: GDAL cannot read
    either; each is an archive-file-unopened finding naming the file, not a silent skip."""
    root = tiny_project(tmp_path)
    gpkg = (root / "map.gpkg").read_bytes()
    (root / "extra").mkdir()
    (root / "extra" / "cut.gpkg").write_bytes(gpkg[:1024])  # "SQLite format 3" header, then nothing
    (root / "extra" / "broken.geojson").write_text('{"type": "FeatureCollection", "features": [', encoding="utf-8")
    report = archivist.audit(root, only=["archive"])
    unopened = {f.features[0]: f.message for f in report.findings if f.rule == "archive-file-unopened"}
    assert set(unopened) == {"extra/cut.gpkg", "extra/broken.geojson"}, unopened
    assert all("GDAL could not read it" in m for m in unopened.values())


def test_descriptor_frictionless_cannot_read_is_a_finding(tmp_path):
    """A field constraint of the wrong type passes frictionless's descriptor check, then fails while
    reading with a TypeError of its own: a descriptor finding, and the audit goes on."""
    from archives import edit_json

    root = package(tmp_path)

    def bad_constraint(d):
        res = next(r for r in d["resources"] if r.get("schema", {}).get("fields"))
        field = next(f for f in res["schema"]["fields"] if f.get("type") in ("integer", "number"))
        field.setdefault("constraints", {})["minimum"] = "x"

    edit_json(root / "data" / "datapackage.json", bad_constraint)
    rebag(root)
    report = archivist.audit(root, rules=["descriptor-invalid"])
    assert any("the frictionless library cannot read it" in f.message for f in report.findings), [f.message for f in report.findings]
