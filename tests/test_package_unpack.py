"""``archivist unpack``: a package back into an editable project; packing it again gives the same data."""

import hashlib
import os
import tomllib
import zipfile
from pathlib import Path

import bagit
import pytest
from click.testing import CliRunner
from packaging.version import Version

import archivist
from archivist.cli import cli
from archivist.package.unpack import bump_version, edit_map_keys
from archives import EPOCH, flip_byte, package, package_zip, rebag
from builders import BUNDLE, tiny_project, tree_digest

# Files whose bytes depend on the version and origin written in the manifest: everything else is data.
METADATA = {
    "data/archivist.toml", "data/source/archivist.toml", "data/README.md", "data/CITATION.cff", "data/LICENSE.txt",
    "data/datapackage.json", "data/metadata/datacite.json", "data/metadata/provenance.json",
    "data/metadata/validation-report.json", "data/metadata/validation-report.html",
}


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def manifest_entries(bag: Path) -> dict[str, str]:
    """The payload manifest as path -> SHA-256, read with the bagit reference library."""
    entries = bagit.Bag(str(bag)).payload_entries()
    return {k.replace(os.sep, "/"): v["sha256"] for k, v in entries.items()}


# ---------------------------------------------------------------- what must show: the round trip

def test_unpack_then_pack_gives_the_same_data(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    first = package_zip(tmp_path / "first", "bundle")
    result = run("unpack", first, tmp_path / "work")
    assert result.exit_code == 0, result.output
    (tmp_path / "again").mkdir()
    second = archivist.pack(tmp_path / "work", tmp_path / "again")
    a = manifest_entries(package(tmp_path / "a", "bundle"))
    b = manifest_entries(second.path)
    assert set(a) == set(b)
    data = sorted(set(a) - METADATA)
    assert "data/map.gpkg" in data and "data/source/analyses.xlsx" in data and "data/tables/legend.csv" in data
    assert {k: a[k] for k in data} == {k: b[k] for k in data}
    # the same checks, with the same results
    old = archivist.check(BUNDLE)
    new = second.report
    assert [f.to_dict() for f in old.findings] == [f.to_dict() for f in new.findings]
    assert old.rules_run == new.rules_run


def test_unpacked_project_is_the_input_with_new_version_and_origin(tmp_path):
    archive = package_zip(tmp_path, "bundle")
    result = archivist.unpack(archive, tmp_path / "work")
    assert result.origin == "source"
    assert result.files == ("analyses.xlsx", "archivist.toml", "legend.csv", "map.gpkg")
    for name in ("analyses.xlsx", "legend.csv", "map.gpkg"):
        assert (tmp_path / "work" / name).read_bytes() == (BUNDLE / name).read_bytes()
    before = tomllib.loads((BUNDLE / "archivist.toml").read_text())
    after = tomllib.loads((tmp_path / "work" / "archivist.toml").read_text())
    assert after["map"]["version"] == "1.0.1-dev" and result.previous_version == "1.0.0"
    stem = archive.name.removesuffix(".zip")
    assert after["map"]["derived_from"].startswith(f"{stem}; bag manifest sha256:")
    digest = after["map"]["derived_from"].split("sha256:")[1][:64]
    with zipfile.ZipFile(archive) as zf:
        assert hashlib.sha256(zf.read(f"{stem}/manifest-sha256.txt")).hexdigest() == digest
    assert {k: v for k, v in after["map"].items() if k not in ("version", "derived_from")} == {k: v for k, v in before["map"].items() if k != "version"}
    assert {k: v for k, v in after.items() if k != "map"} == {k: v for k, v in before.items() if k != "map"}
    # the comments of the original manifest are kept
    assert (tmp_path / "work" / "archivist.toml").read_text().startswith("# Example bundle written by")
    assert archivist.check(tmp_path / "work").ok


def test_unpack_writes_nothing_into_the_package(tmp_path):
    root = package(tmp_path)
    before = tree_digest(root)
    assert run("unpack", root, tmp_path / "work").exit_code == 0
    assert tree_digest(root) == before
    inside = run("unpack", root, root / "work")
    assert inside.exit_code == 2 and "inside the project folder" in inside.stderr


def test_unpack_refuses_to_overwrite_without_force(tmp_path):
    root = package(tmp_path)
    target = tmp_path / "work"
    target.mkdir()
    (target / "mine.txt").write_text("keep me")
    refused = run("unpack", root, target)
    assert refused.exit_code == 2 and "--force" in refused.stderr
    assert (target / "mine.txt").read_text() == "keep me"
    assert run("unpack", root, target, "--force").exit_code == 0
    assert not (target / "mine.txt").exists() and (target / "archivist.toml").is_file()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".work")] == []


def test_damaged_package_refused_naming_the_file(tmp_path):
    root = package(tmp_path)
    flip_byte(root / "data" / "source" / "legend.csv", 3)
    result = run("unpack", root, tmp_path / "work")
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "damaged" in line and "data/source/legend.csv" in line and "archivist audit" in line
    assert not (tmp_path / "work").exists()


def test_not_a_package_refused(tmp_path):
    root = tiny_project(tmp_path)
    result = run("unpack", root, tmp_path / "work")
    assert result.exit_code == 2 and "not an archivist package" in result.stderr
    assert not (tmp_path / "work").exists()


def test_without_the_inputs_the_package_files_are_used(tmp_path):
    root = package(tmp_path)
    import shutil

    shutil.rmtree(root / "data" / "source")
    rebag(root)
    result = archivist.unpack(root, tmp_path / "work")
    assert result.origin == "package"
    assert "map.gpkg" in result.files and "tables/legend.csv" in result.files
    data = tomllib.loads((tmp_path / "work" / "archivist.toml").read_text())
    assert data["map"]["version"] == "1.0.1-dev"
    assert archivist.check(tmp_path / "work").ok


def test_doi_moves_into_derived_from(tmp_path):
    src = tiny_project(tmp_path / "src", manifest={"map": {"doi": "10.5555/tiny.1"}})
    (tmp_path / "out").mkdir()
    packed = archivist.pack(src, tmp_path / "out")
    archivist.unpack(packed.path, tmp_path / "work")
    m = tomllib.loads((tmp_path / "work" / "archivist.toml").read_text())["map"]
    assert "doi" not in m  # the DOI names the deposited version, not the work that starts from it
    assert m["derived_from"].endswith("; https://doi.org/10.5555/tiny.1")


# ---------------------------------------------------------------- versions

@pytest.mark.parametrize(
    "old, new, next_release",
    [("1.0.0", "1.0.1-dev", "1.0.1"), ("2.3", "2.4-dev", "2.4"), ("0.9.12", "0.9.13-dev", "0.9.13"), ("1.0.0-rc.1", "1.0.1-dev", "1.0.1"), ("4", "5-dev", "5")],
)
def test_bump_version_orders_between_releases(old, new, next_release):
    assert bump_version(old) == new
    # PEP 440 ordering (the packaging library): old < new < the release it leads to
    assert Version(old) < Version(new) < Version(next_release)


def test_bump_version_of_free_text():
    assert bump_version("first edition") == "first edition-dev"


def test_edit_map_keys_keeps_comments_and_order():
    text = '# my notes\n[map]\ntitle = "T" # the title\nversion = "1.0.0"\ndoi = "10.1/x"\n\n[layers.units]\npath = "u.gpkg"\n'
    out = edit_map_keys(text, {"version": "1.0.1-dev", "derived_from": "t-1.0.0", "doi": None})
    assert out == '# my notes\n[map]\ntitle = "T" # the title\nversion = "1.0.1-dev"\nderived_from = "t-1.0.0"\n\n[layers.units]\npath = "u.gpkg"\n'


def test_edit_map_keys_inline_table_falls_back_to_rewrite():
    text = 'map = {title = "T", version = "1"}\n[layers.units]\npath = "u.gpkg"\n'
    out = edit_map_keys(text, {"version": "2-dev"})
    assert tomllib.loads(out) == {"map": {"title": "T", "version": "2-dev"}, "layers": {"units": {"path": "u.gpkg"}}}
