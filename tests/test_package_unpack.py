"""``archivist unpack``: a package back into an editable project; packing it again gives the same data."""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
import tomllib
import zipfile
from pathlib import Path

import bagit
import pytest
from click.testing import CliRunner
from packaging.version import Version

import archivist
from archivist.cli import cli
from archivist.package.unpack import MARKER, bump_version, edit_map_keys
from archives import EPOCH, flip_byte, package, package_zip, rebag
from builders import BUNDLE, REPO, tiny_project, tree_digest

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
    stations = ("stations_calderwyn.csv", "stations_oakeshaw.csv", "stations_tollivast.csv")
    media = tuple(sorted(f"{d}/{p.name}" for d in ("fieldbook", "photos") for p in (BUNDLE / d).iterdir()))
    assert result.files == ("analyses.xlsx", "archivist.toml", *media[:1], "legend.csv", "map.gpkg", *media[1:], "references.csv", *stations)
    for name in ("analyses.xlsx", "legend.csv", "map.gpkg", "references.csv", *stations):
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


def test_unpack_refuses_a_folder_it_did_not_make_even_with_force(tmp_path):
    root = package(tmp_path)
    target = tmp_path / "work"
    target.mkdir()
    (target / "mine.txt").write_text("keep me")
    for args in ((), ("--force",)):
        refused = run("unpack", root, target, *args)
        assert refused.exit_code == 2
        (line,) = refused.stderr.strip().splitlines()
        assert str(target) in line and "not made by 'archivist unpack'" in line
        assert sorted(p.name for p in target.iterdir()) == ["mine.txt"] and (target / "mine.txt").read_text() == "keep me"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".work")] == []


def test_unpack_replaces_an_empty_folder_with_force_only(tmp_path):
    # nothing in it to lose (a folder made for the output beforehand): replaced with --force, as an unchanged
    # earlier unpack is; without it, one line says it exists and is empty
    root = package(tmp_path)
    target = tmp_path / "work"
    target.mkdir()
    refused = run("unpack", root, target)
    assert refused.exit_code == 2 and "already exists (empty); use --force" in refused.stderr
    assert run("unpack", root, target, "--force").exit_code == 0
    assert (target / MARKER).is_file() and archivist.check(target).ok


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


def test_edit_map_keys_keeps_comments_on_the_edited_lines_and_the_authors():
    """A comment on the changed line itself, comments between keys, [[map.authors]] after them: all kept (tomlkit)."""
    text = ('[map]  # the map\ntitle = "T"\nversion = "1.0.0"  # bumped by unpack\n# scale of the printed sheet\nscale = 25000\n'
            '\n# who mapped it\n[[map.authors]]\nname = "A. Mapper"  # field lead\n\n[layers.units]\npath = "u.gpkg"\n')
    out = edit_map_keys(text, {"version": "1.0.1-dev", "derived_from": "t-1.0.0", "doi": None})
    assert out == text.replace('version = "1.0.0"  # bumped by unpack\n',
                               'version = "1.0.1-dev"  # bumped by unpack\nderived_from = "t-1.0.0"\n')
    assert tomllib.loads(out)["map"]["authors"] == [{"name": "A. Mapper"}]


# ---------------------------------------------------------------- multi-file formats travel whole

SHAPEFILE_PARTS = (".shp", ".shx", ".dbf", ".prj", ".cpg")  # ESRI "Shapefile file extensions": .shp/.shx/.dbf required; .prj CRS; .cpg code page


def shapefile_project(tmp_path: Path, name: str = "shp") -> Path:
    """The tiny project with its units and lines as shapefiles (written by GDAL through pyogrio) instead of a GeoPackage."""
    import pyogrio

    from builders import edit_manifest, two_units, two_units_lines

    root = tiny_project(tmp_path, name=name)
    units = two_units()
    units["note"] = ["Grès rouge, Ærdal type", "Schiste à ciment"]  # non-ASCII: read right only with the .cpg
    pyogrio.write_dataframe(units, root / "units.shp", encoding="UTF-8")
    pyogrio.write_dataframe(two_units_lines(), root / "lines.shp", encoding="UTF-8")
    (root / "map.gpkg").unlink()

    def use_shapefiles(m):
        m["layers"]["units"] = {"path": "units.shp", "unit_field": "unit"}
        m["layers"]["lines"] = {"path": "lines.shp", "kind_field": "kind", "certainty_field": "certainty"}

    edit_manifest(root, use_shapefiles)
    for layer in ("units", "lines"):
        assert sorted(p.suffix for p in root.glob(f"{layer}.*")) == sorted(SHAPEFILE_PARTS)
    return root


def test_shapefile_project_survives_pack_unpack_check_pack(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    src = shapefile_project(tmp_path)
    (tmp_path / "first").mkdir()
    first = archivist.pack(src, tmp_path / "first", zip=True)
    result = run("unpack", first.zip_path, tmp_path / "work")
    assert result.exit_code == 0, result.output
    work = tmp_path / "work"
    for layer in ("units", "lines"):
        for suffix in SHAPEFILE_PARTS:
            assert (work / f"{layer}{suffix}").read_bytes() == (src / f"{layer}{suffix}").read_bytes()
    # the unpacked project opens and checks like the original
    old, new = archivist.check(src), archivist.check(work)
    assert [f.to_dict() for f in new.findings] == [f.to_dict() for f in old.findings]
    assert new.rules_run == old.rules_run and new.summary.errors == 0
    (tmp_path / "again").mkdir()
    second = archivist.pack(work, tmp_path / "again")
    a, b = manifest_entries(first.path), manifest_entries(second.path)
    assert set(a) == set(b)
    data = sorted(set(a) - METADATA)
    for layer in ("units", "lines"):
        assert {f"data/source/{layer}{s}" for s in SHAPEFILE_PARTS} <= set(data)
    assert "data/map.gpkg" in data and "data/tables/units.csv" in data
    assert {k: a[k] for k in data} == {k: b[k] for k in data}


def test_unpack_keeps_parts_of_any_case_and_metadata_sidecars(tmp_path):
    """Parts written with upper-case suffixes (as files from Windows often are) and an ArcGIS .shp.xml come back too."""
    import pyogrio

    src = shapefile_project(tmp_path)
    (src / "units.shx").rename(src / "units.SHX")
    (src / "units.dbf").rename(src / "units.DBF")
    (src / "units.shp.xml").write_text("<metadata><idinfo><citation>invented</citation></idinfo></metadata>\n")
    (src / "legend.csv.aux.xml").write_text("<PAMDataset/>\n")
    (src / "unrelated.txt").write_text("not part of any dataset\n")
    (tmp_path / "out").mkdir()
    packed = archivist.pack(src, tmp_path / "out")
    result = archivist.unpack(packed.path, tmp_path / "work")
    expected = sorted(p.name for p in src.iterdir() if p.name != "unrelated.txt")
    assert list(result.files) == expected
    for name in expected:
        if name != "archivist.toml":
            assert (tmp_path / "work" / name).read_bytes() == (src / name).read_bytes()
    # GDAL reads the unpacked shapefile as it reads the original (attributes, CRS from .prj, text through .cpg)
    a = pyogrio.read_dataframe(src / "units.shp")
    b = pyogrio.read_dataframe(tmp_path / "work" / "units.shp")
    assert a.equals(b) and b.crs == a.crs and list(b["note"]) == ["Grès rouge, Ærdal type", "Schiste à ciment"]


def test_unpack_brings_back_a_file_geodatabase_folder_whole(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    src = gdb_project(tmp_path)
    inside = sorted(p.relative_to(src).as_posix() for p in (src / "map.gdb").rglob("*") if p.is_file())
    assert len(inside) > 5  # a File Geodatabase is a folder of many files (GDAL OpenFileGDB driver)
    (tmp_path / "out").mkdir()
    first = archivist.pack(src, tmp_path / "out")
    result = archivist.unpack(first.path, tmp_path / "work")
    assert result.origin == "source"
    assert set(inside) <= set(result.files)
    for rel in inside:
        assert (tmp_path / "work" / rel).read_bytes() == (src / rel).read_bytes()
    assert [f.to_dict() for f in archivist.check(tmp_path / "work").findings] == [f.to_dict() for f in archivist.check(src).findings]


def gdb_project(tmp_path: Path) -> Path:
    """The tiny project with its units and lines in a File Geodatabase folder (GDAL's OpenFileGDB driver)."""
    import pyogrio

    from builders import edit_manifest, two_units, two_units_lines

    src = tiny_project(tmp_path, name="gdb")
    pyogrio.write_dataframe(two_units(), src / "map.gdb", layer="units", driver="OpenFileGDB")
    pyogrio.write_dataframe(two_units_lines(), src / "map.gdb", layer="lines", driver="OpenFileGDB")
    (src / "map.gpkg").unlink()
    edit_manifest(src, lambda m: [m["layers"][r].update(path="map.gdb") for r in ("units", "lines")])
    return src


def test_audit_reads_multi_file_datasets_whole(tmp_path):
    """A shapefile's parts (any case) are read with it; a package's inputs as handed in are not taken for its data."""
    src = shapefile_project(tmp_path)
    (src / "units.shx").rename(src / "units.SHX")
    (src / "units.prj").rename(src / "units.PRJ")
    (src / "units.shp.xml").write_text("<metadata/>\n")
    bare = archivist.audit(src)  # a plain archive: the CRS of each shapefile comes from its .prj
    rules = {f.rule for f in bare.findings}
    assert bare.summary.errors == 0 and "archive-crs-undeclared" not in rules and "layer-unreadable" not in rules
    for i, project in enumerate((src, gdb_project(tmp_path))):
        (tmp_path / f"out{i}").mkdir()
        packed = archivist.pack(project, tmp_path / f"out{i}")
        report = archivist.audit(packed.path)
        assert report.summary.errors == 0, [f.message for f in report.findings]
        assert not [f.message for f in report.findings if "source/" in f.message]  # e.g. data/source/map.gdb/ called a closed format


# ---------------------------------------------------------------- --force replaces only what unpack made

def test_force_never_replaces_a_folder_that_holds_the_package(tmp_path):
    target = tmp_path / "work"
    zipped = package_zip(target, "tiny")  # the package zip inside DIR
    folder = package(target / "pkgs")  # and a package folder inside DIR
    (target / "notes.txt").write_text("field notes")
    before = tree_digest(target)
    for pkg in (zipped, folder):
        result = run("unpack", pkg, target, "--force")
        assert result.exit_code == 2, result.output
        (line,) = result.stderr.strip().splitlines()
        assert str(target) in line and "holds the package" in line
        assert tree_digest(target) == before
    assert [p.name for p in tmp_path.iterdir()] == ["work"]


def test_force_replaces_an_unchanged_earlier_unpack(tmp_path):
    root = package(tmp_path)
    target = tmp_path / "work"
    assert run("unpack", root, target).exit_code == 0
    record = json.loads((target / MARKER).read_text())
    # the mark records the SHA-256 of every file written (hashlib), and nothing else is in the folder
    assert record["files"] == {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in target.iterdir() if p.name != MARKER}
    again = run("unpack", root, target)
    assert again.exit_code == 2 and "--force" in again.stderr
    forced = run("unpack", root, target, "--force")
    assert forced.exit_code == 0, forced.output
    assert sorted(p.name for p in target.iterdir()) == sorted([MARKER, "archivist.toml", "legend.csv", "map.gpkg"])
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".work")] == []


@pytest.mark.parametrize("work", ["extra file", "extra hidden file", "edited file", "edited manifest", "no mark", "broken mark", "link"])
def test_force_never_loses_the_mappers_work(tmp_path, work):
    root = package(tmp_path)
    target = tmp_path / "work"
    assert run("unpack", root, target).exit_code == 0
    if work == "extra file":
        (target / "sub").mkdir()
        (target / "sub" / "field-photo.jpg").write_bytes(b"\xff\xd8 invented")
    elif work == "extra hidden file":
        (target / ".map.gpkg-journal").write_bytes(b"pending")
    elif work == "edited file":
        with open(target / "legend.csv", "a") as fh:
            fh.write("C,Cedar Tuff,Welded tuff.,Rhaetian,201,208,3,#C0C0C0,tuff,volcanic\n")
    elif work == "edited manifest":
        with open(target / "archivist.toml", "a") as fh:
            fh.write("# my note\n")
    elif work == "no mark":
        (target / MARKER).unlink()
    elif work == "broken mark":
        (target / MARKER).write_text("{not json")
    elif work == "link":
        (target / "elsewhere").symlink_to(tmp_path)
    before = tree_digest(target)
    result = run("unpack", root, target, "--force")
    assert result.exit_code == 2, result.output
    (line,) = result.stderr.strip().splitlines()
    assert str(target) in line and "Traceback" not in result.output
    assert tree_digest(target) == before
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".work")] == []


@pytest.mark.parametrize("where", ["current folder", "parent of the current folder"])
def test_force_into_the_current_folder_is_one_line(tmp_path, monkeypatch, where):
    root = package(tmp_path / "pkgs")
    target = tmp_path / "work"
    assert run("unpack", root, target).exit_code == 0  # a folder unpack made: only the place stops it
    cwd = target if where == "current folder" else target / "sub"
    cwd.mkdir(exist_ok=True)
    before = tree_digest(target)
    monkeypatch.chdir(cwd)
    result = CliRunner().invoke(cli, ["unpack", str(root), "." if where == "current folder" else "..", "--force"])
    assert result.exit_code == 2 and isinstance(result.exception, SystemExit)
    (line,) = result.stderr.strip().splitlines()
    assert "current folder" in line and "Traceback" not in result.output
    assert tree_digest(target) == before and cwd.is_dir()


def test_force_into_the_current_folder_in_a_subprocess(tmp_path):
    root = package(tmp_path / "pkgs")
    target = tmp_path / "work"
    assert run("unpack", root, target).exit_code == 0
    proc = subprocess.run(
        [sys.executable, "-c", "from archivist.cli import main; main()", "unpack", str(root), ".", "--force"],
        cwd=target, env={**os.environ, "PYTHONPATH": str(REPO)}, capture_output=True, text=True, timeout=120,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr + proc.stdout
    (line,) = proc.stderr.strip().splitlines()
    assert line.startswith("archivist: .: is the current folder")


def test_the_mark_stays_out_of_check_pack_and_role_guessing(tmp_path):
    from archivist.infer import scan

    root = package(tmp_path)
    work = tmp_path / "work"
    archivist.unpack(root, work)
    assert (work / MARKER).is_file()
    sources, other = scan(work)
    assert MARKER not in {s.rel for s in sources} | {rel for rel, _ in other}
    report = archivist.check(work)
    assert MARKER not in json.dumps(report.to_dict())
    (tmp_path / "again").mkdir()
    packed = archivist.pack(work, tmp_path / "again", force=True)
    assert not [f for f in packed.files if MARKER in f]


# ---------------------------------------------------------------- interrupted runs leave nothing

SLOW_UNPACK = """
import sys, time
from pathlib import Path
import archivist.package.unpack as u

archive, flag, target = sys.argv[1:4]
real = u._copy_file
def slow(src, dest):
    digest = real(src, dest)
    Path(flag).write_text("copying")
    time.sleep(60)
    return digest
u._copy_file = slow
from archivist.cli import main
sys.argv = ["archivist", "unpack", archive, target]
main()
"""


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT], ids=["SIGTERM", "Ctrl-C"])
def test_a_stop_mid_copy_leaves_no_staging_folder_and_no_private_copy(tmp_path, signum):
    archive = package_zip(tmp_path / "pkgs", "tiny")
    temp = tmp_path / "tmp"
    temp.mkdir()
    flag = tmp_path / "copying"
    out = tmp_path / "out"
    out.mkdir()
    proc = subprocess.Popen(
        [sys.executable, "-c", SLOW_UNPACK, str(archive), str(flag), str(out / "work")],
        env={**os.environ, "PYTHONPATH": str(REPO), "TMPDIR": str(temp)},
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        deadline = time.monotonic() + 120
        while not flag.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert flag.exists(), proc.communicate()
        # mid-copy: the staging folder and the private copy of the archive exist
        assert [p.name for p in out.iterdir() if p.name.endswith(".part")]
        assert [p.name for p in temp.iterdir() if p.name.startswith("archivist-archive-")]
        proc.send_signal(signum)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130
    assert "Traceback" not in stdout + stderr and "interrupted" in stderr
    assert list(out.iterdir()) == []
    assert list(temp.iterdir()) == []


def test_leftovers_of_a_killed_unpack_are_removed_by_the_next(tmp_path):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    leftover = tmp_path / f".work.{int(dead.stdout)}-0123abcd.part"  # what a run killed outright (SIGKILL) leaves
    leftover.mkdir()
    (leftover / "map.gpkg").write_bytes(b"half")
    other = tmp_path / f".other.{int(dead.stdout)}-0123abcd.part"  # not this folder's: left alone
    other.mkdir()
    assert run("unpack", package(tmp_path / "pkgs"), tmp_path / "work").exit_code == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([other.name, "pkgs", "work"])
