"""Reading vector data never changes an input; untrusted data is read with GDAL fenced in.

Outside references: the SQLite file format (sqlite.org/fileformat2.html): the
header string (section 1.3), the write/read version bytes 18-19 (1 rollback,
2 WAL, section 1.3) and the WAL header magic and frame layout (section 4.1);
SQLite's temporary files page (sqlite.org/tempfiles.html) for the ``-wal``,
``-shm`` and ``-journal`` names; GDAL 3.12's GeoPackage open option
``IMMUTABLE`` (from the driver's own option list) and its configuration
options ``GDAL_SKIP`` (read while drivers are registered) and
``CPL_VSIL_CURL_ALLOWED_FILENAME`` / ``CPL_VSIL_CURL_ALLOWED_EXTENSIONS``,
each tested here for the effect relied on.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import textwrap
from pathlib import Path

import pyogrio
import pytest
from click.testing import CliRunner

import archivist
from archivist import vectorio
from archivist.cli import cli
from archivist.project import load_project
from builders import CRS, folder_state, leave_in_wal, tiny_project, two_units, wal_frames, write_layer

SIDECAR_NAMES = ("-wal", "-shm", "-journal")


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


def wal_project(tmp_path: Path, name: str = "walmap", manifest: bool = True) -> Path:
    """A tiny project whose map.gpkg is in WAL mode with unit B renamed to Z in frames not yet checkpointed."""
    root = tiny_project(tmp_path, name=name)
    if not manifest:
        (root / "archivist.toml").unlink()
    leave_in_wal(root / "map.gpkg", "UPDATE units SET unit = 'Z' WHERE unit = 'B'")
    return root


def test_builder_leaves_committed_frames_in_the_wal(tmp_path):
    root = wal_project(tmp_path)
    head = (root / "map.gpkg").read_bytes()[:20]
    assert head[:16] == b"SQLite format 3\x00"  # SQLite file format 1.3
    assert head[18] == head[19] == 2  # WAL mode (1.3)
    assert wal_frames(root / "map.gpkg-wal") >= 1  # WAL frames (4.1)


def test_a_settled_copy_holds_the_rows_of_the_wal_in_one_file(tmp_path):
    # the committed frames of the -wal (WAL format, section 4.1) are in the copy's database file itself: read
    # there without its log files, the copy has the renamed unit; the source and its log are only read
    root = wal_project(tmp_path)
    before = folder_state(root)
    out = tmp_path / "copy"
    out.mkdir()
    vectorio.settled_copy(root / "map.gpkg", out / "map.gpkg")
    assert sorted(p.name for p in out.iterdir()) == ["map.gpkg"]
    assert sorted(pyogrio.read_dataframe(out / "map.gpkg", layer="units")["unit"]) == ["A", "Z"]
    assert folder_state(root) == before
    plain = tmp_path / "plain.csv"
    plain.write_text("a,b\n1,2\n", encoding="utf-8")
    vectorio.settled_copy(plain, out / "plain.csv")
    assert (out / "plain.csv").read_bytes() == plain.read_bytes()


def test_sqlite_state_reads_the_header_not_the_name(tmp_path):
    root = wal_project(tmp_path)
    renamed = root / "map.data"
    shutil.copyfile(root / "map.gpkg", renamed)
    state = vectorio.sqlite_state(renamed)
    assert state.is_sqlite and state.wal_mode and state.is_geopackage and state.needs_copy
    clean = tiny_project(tmp_path, name="clean") / "map.gpkg"
    state = vectorio.sqlite_state(clean)
    assert state.is_sqlite and not state.wal_mode and state.sidecars == () and not state.needs_copy
    (tmp_path / "fake.gpkg").write_text("not a database")
    assert not vectorio.sqlite_state(tmp_path / "fake.gpkg").is_sqlite


def test_load_reads_the_uncheckpointed_rows_and_changes_nothing(tmp_path):
    root = wal_project(tmp_path)
    before = folder_state(root)
    project = load_project(root)
    assert sorted(project.layers["units"].frame["unit"]) == ["A", "Z"]
    assert folder_state(root) == before


def test_a_file_is_copied_once_per_session_and_the_copy_is_removed(tmp_path, monkeypatch):
    root = wal_project(tmp_path)
    made = []
    real = vectorio.tempfile.mkdtemp

    def spy(*a, **k):
        made.append(Path(real(*a, **k)))
        return str(made[-1])

    monkeypatch.setattr(vectorio.tempfile, "mkdtemp", spy)
    with vectorio.reading() as reader:
        assert [n for n, _ in vectorio.list_layers(root / "map.gpkg")] == ["units", "lines"]
        vectorio.read_dataframe(root / "map.gpkg", layer="units")
        vectorio.read_dataframe(root / "map.gpkg", layer="lines")
        assert reader.copies == 1
        assert oct(made[0].stat().st_mode & 0o777) == "0o700"
    assert len(made) == 1 and not made[0].exists()


def test_the_copy_is_removed_on_an_exception(tmp_path, monkeypatch):
    root = wal_project(tmp_path)
    with pytest.raises(RuntimeError):
        with vectorio.reading() as reader:
            vectorio.read_info(root / "map.gpkg", layer="units")
            tmp = reader._tmp
            assert tmp is not None and tmp.exists()
            raise RuntimeError("stop")
    assert not tmp.exists()


def test_the_copy_is_removed_on_sigterm(tmp_path):
    root = wal_project(tmp_path)
    script = textwrap.dedent(
        f"""
        import os, signal, sys, time
        from archivist import vectorio
        with vectorio.reading() as reader:
            vectorio.read_info({str(root / 'map.gpkg')!r}, layer="units")
            print(reader._tmp, flush=True)
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(30)
        """
    )
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(Path(archivist.__file__).parent.parent), os.environ.get("PYTHONPATH", "")])}
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120, env=env)
    tmp = Path(proc.stdout.strip().splitlines()[0])
    assert proc.returncode != 0
    assert not tmp.exists()


def test_clean_geopackage_is_read_in_place_without_a_copy(tmp_path):
    root = tiny_project(tmp_path)
    before = folder_state(root)
    with vectorio.reading() as reader:
        where, options = reader.target(root / "map.gpkg")
        assert where == str(root / "map.gpkg") and options == {"IMMUTABLE": "YES"}
        assert [n for n, _ in reader.list_layers(root / "map.gpkg")] == ["units", "lines"]
        assert reader.copies == 0
    assert folder_state(root) == before


def test_a_hot_journal_is_copied_with_its_database(tmp_path):
    root = tiny_project(tmp_path)
    (root / "map.gpkg-journal").write_bytes(b"")  # an empty journal is not hot (SQLite file format 2.1); its presence is enough to copy
    state = vectorio.sqlite_state(root / "map.gpkg")
    assert state.sidecars == ("-journal",) and state.needs_copy
    before = folder_state(root)
    assert sorted(load_project(root).layers["units"].frame["unit"]) == ["A", "B"]
    assert folder_state(root) == before


# ---------------------------------------------------------------- every command on a WAL GeoPackage

def _assert_untouched(before, after, *, written=()):
    for key in written:
        after.pop(key, None)
    if written:  # creating a file changes the folder's mtime by design
        before = {k: v for k, v in before.items() if k != "."}
        after = {k: v for k, v in after.items() if k != "."}
    assert after == before
    assert not [k for k in after if k.endswith(SIDECAR_NAMES) and k not in before]


def test_check_changes_nothing_and_sees_the_wal_rows(tmp_path):
    root = wal_project(tmp_path)
    before = folder_state(root)
    result = run("check", root, "--format", "json")
    assert result.exit_code == 1, result.output
    messages = [f["message"] for f in json.loads(result.output)["findings"] if f["rule"] == "legend-missing-unit"]
    assert any("Z" in m for m in messages), messages
    _assert_untouched(before, folder_state(root))


def test_check_without_manifest_changes_nothing(tmp_path):
    root = wal_project(tmp_path, manifest=False)
    before = folder_state(root)
    result = run("check", root, "--format", "json")
    assert result.exit_code in (0, 1), result.output
    _assert_untouched(before, folder_state(root))


def test_pack_changes_nothing_and_packs_the_wal_rows(tmp_path):
    root = wal_project(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    before = folder_state(root)
    result = run("pack", root, "--out", out, "--allow-errors")
    assert result.exit_code in (0, 1), result.output
    _assert_untouched(before, folder_state(root))
    packaged = [p for p in out.rglob("map.gpkg") if "data" in p.parts]
    # the package's GeoPackage and its copy of the source file as handed in (data/source/), both with the rows
    # of the -wal: the source copy held the database file alone, without them
    assert sorted(p.parent.name for p in packaged) == ["data", "source"]
    for path in packaged:
        assert "Z" in set(pyogrio.read_dataframe(path, layer="units")["unit"]), path
    assert not [p for p in out.rglob("*") if p.name.endswith(SIDECAR_NAMES)]
    described = json.loads(next(out.rglob("datapackage.json")).read_text(encoding="utf-8"))["resources"]
    (source,) = [r for r in described if r["path"] == "source/map.gpkg"]
    assert "map.gpkg-wal" in source["description"] and "not byte for byte" in source["description"]


def test_diff_changes_nothing_and_sees_the_wal_rows(tmp_path):
    root = wal_project(tmp_path)
    clean = tiny_project(tmp_path, name="clean")
    before = folder_state(root)
    result = run("diff", clean, root, "--format", "json")
    assert result.exit_code in (0, 1), result.output
    assert "Z" in result.output
    _assert_untouched(before, folder_state(root))


def test_init_writes_only_its_manifest(tmp_path):
    root = wal_project(tmp_path, manifest=False)
    before = folder_state(root)
    result = run("init", root)
    assert result.exit_code == 0, result.output
    after = folder_state(root)
    assert "archivist.toml" in after
    _assert_untouched(before, after, written=("archivist.toml",))


def test_audit_of_a_folder_changes_nothing(tmp_path):
    root = wal_project(tmp_path)
    before = folder_state(root)
    result = run("audit", root, "--format", "json")
    assert result.exit_code in (0, 1), result.output
    _assert_untouched(before, folder_state(root))


# ---------------------------------------------------------------- the fence for untrusted data

def _vrt_to_secret(tmp_path: Path, name: str) -> tuple[Path, str]:
    secret = tmp_path / "outside" / "secret.csv"
    secret.parent.mkdir()
    token = "SECRET-7f3a-QUARTZ"
    secret.write_text(f'id,unit,wkt\n1,{token},"POLYGON ((0 0, 100 0, 100 100, 0 100, 0 0))"\n', encoding="utf-8")
    vrt = tmp_path / "archive" / name
    vrt.parent.mkdir(exist_ok=True)
    vrt.write_text(  # an OGR VRT layer: polygons whose unit codes come from a file outside the archive
        f'<OGRVRTDataSource><OGRVRTLayer name="units"><SrcDataSource>{secret}</SrcDataSource>'
        f'<SrcLayer>secret</SrcLayer><GeometryType>wkbPolygon</GeometryType><LayerSRS>{CRS}</LayerSRS>'
        f'<GeometryField encoding="WKT" field="wkt"/></OGRVRTLayer></OGRVRTDataSource>',
        encoding="utf-8",
    )
    return vrt, token


@pytest.mark.parametrize("name", ["units.gpkg", "units.vrt"])
def test_fence_keeps_a_virtual_layer_from_reading_an_outside_file(tmp_path, name):
    vrt, token = _vrt_to_secret(tmp_path, name)
    # Without the fence GDAL follows the reference (this is what the fence is for).
    assert token in set(pyogrio.read_dataframe(vrt)["unit"])
    with vectorio.untrusted():
        assert "OGR_VRT" not in vectorio.registered_drivers()  # GDAL_SKIP took effect
        with pytest.raises(Exception) as raised:
            pyogrio.read_dataframe(vrt)
        assert token not in str(raised.value)
        with pytest.raises(vectorio.VectorReadError) as raised:
            vectorio.read_dataframe(vrt)
        assert token not in str(raised.value) and "DRIVER" not in str(raised.value)
    # Everything comes back afterwards.
    assert "OGR_VRT" in vectorio.registered_drivers()
    assert token in set(pyogrio.read_dataframe(vrt)["unit"])


def test_fence_restores_previous_option_values(tmp_path):
    pyogrio.set_gdal_config_options({"CPL_VSIL_CURL_ALLOWED_EXTENSIONS": ".tif"})
    try:
        with vectorio.untrusted():
            assert pyogrio.get_gdal_config_option("CPL_VSIL_CURL_ALLOWED_EXTENSIONS") == ".archivist-no-network"
            with vectorio.untrusted():  # nested: still fenced
                assert pyogrio.get_gdal_config_option("GDAL_SKIP")
            assert pyogrio.get_gdal_config_option("GDAL_SKIP")
        assert pyogrio.get_gdal_config_option("CPL_VSIL_CURL_ALLOWED_EXTENSIONS") == ".tif"
        assert pyogrio.get_gdal_config_option("GDAL_SKIP") is None
    finally:
        pyogrio.set_gdal_config_options({"CPL_VSIL_CURL_ALLOWED_EXTENSIONS": None})


def _listening_socket():
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(8)
    server.settimeout(0.5)
    return server


def _connections(server) -> int:
    n = 0
    while True:
        try:
            conn, _ = server.accept()
        except (socket.timeout, BlockingIOError):
            return n
        n += 1
        conn.close()


def test_fence_makes_no_network_connection(tmp_path):
    # libcurl connects from C, which a Python socket guard cannot see: a real listening socket counts.
    server = _listening_socket()
    port = server.getsockname()[1]
    urls = [
        f"/vsicurl/http://127.0.0.1:{port}/x.gpkg",
        f"/vsicurl?url=http://127.0.0.1:{port}/y.gpkg",
        f"/vsicurl_streaming/http://127.0.0.1:{port}/z.gpkg",
        f"http://127.0.0.1:{port}/w.geojson",
    ]
    try:
        with vectorio.untrusted():
            for url in urls:  # GDAL's own options, without this module's refusal in front
                with pytest.raises(Exception):
                    pyogrio.list_layers(url)
                with pytest.raises(vectorio.VectorReadError, match="not a file inside the archive"):
                    vectorio.list_layers(url)
        assert _connections(server) == 0
    finally:
        server.close()


@pytest.mark.parametrize("option", ["CPL_VSIL_CURL_ALLOWED_FILENAME", "CPL_VSIL_CURL_ALLOWED_EXTENSIONS"])
def test_each_network_option_alone_keeps_vsicurl_off_the_network(option):
    server = _listening_socket()
    port = server.getsockname()[1]
    pyogrio.set_gdal_config_options({option: vectorio.FENCE_OPTIONS[option], "GDAL_HTTP_TIMEOUT": "1", "GDAL_HTTP_MAX_RETRY": "0"})
    try:
        with pytest.raises(Exception):
            pyogrio.list_layers(f"/vsicurl/http://127.0.0.1:{port}/{option.lower()}.gpkg")
        assert _connections(server) == 0
    finally:
        pyogrio.set_gdal_config_options({option: None, "GDAL_HTTP_TIMEOUT": None, "GDAL_HTTP_MAX_RETRY": None})
        server.close()


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::RuntimeWarning")
def test_fence_the_connection_is_really_possible_without_it():
    # The listening socket does see GDAL's connections when the fence is off (so the test above means something).
    server = _listening_socket()
    port = server.getsockname()[1]
    pyogrio.set_gdal_config_options({"GDAL_HTTP_TIMEOUT": "1", "GDAL_HTTP_MAX_RETRY": "0"})
    try:
        with pytest.raises(Exception):
            pyogrio.list_layers(f"/vsicurl/http://127.0.0.1:{port}/seen.gpkg")
        assert _connections(server) >= 1
    finally:
        pyogrio.set_gdal_config_options({"GDAL_HTTP_TIMEOUT": None, "GDAL_HTTP_MAX_RETRY": None})
        server.close()


def test_audit_of_an_archive_with_a_virtual_layer_in_a_subfolder(tmp_path):
    vrt, token = _vrt_to_secret(tmp_path, "units.gpkg")
    sub = tmp_path / "archive" / "sub"
    sub.mkdir()
    shutil.move(str(vrt), sub / "units.gpkg")
    (tmp_path / "archive" / "legend.csv").write_text("unit,name\nA,Alder Sandstone\n", encoding="utf-8")
    import zipfile

    arc = tmp_path / "delivery.zip"
    with zipfile.ZipFile(arc, "w") as zf:
        for p in sorted((tmp_path / "archive").rglob("*")):
            if p.is_file():
                zf.write(p, p.relative_to(tmp_path / "archive").as_posix())
    for command in (("audit", arc, "--format", "json"), ("diff", arc, arc, "--format", "json")):
        result = run(*command)
        assert result.exit_code in (0, 1, 2), result.output
        assert token not in result.output


# ---------------------------------------------------------------- shapefile sidecars and GDAL's words

def _shapefile_project(tmp_path: Path) -> Path:
    root = tiny_project(tmp_path)
    write_layer(root / "units.shp", "units", two_units())
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    (root / "archivist.toml").write_text(text.replace('path = "map.gpkg"\nlayer = "units"', 'path = "units.shp"', 1), encoding="utf-8")
    assert load_project(root).layers["units"].path.name == "units.shp"
    return root


def test_missing_dbf_is_named_not_a_missing_field(tmp_path):
    root = _shapefile_project(tmp_path)
    (root / "units.dbf").unlink()
    project = load_project(root)
    rules = {h.rule: h.message for h in project.problems}
    assert "field-missing" not in rules
    assert "'units.dbf' is missing beside 'units.shp'" in rules["layer-unreadable"]


@pytest.mark.parametrize("kind", ["garbage", "folder"])
def test_unreadable_prj_is_named_not_a_missing_one(tmp_path, kind):
    root = _shapefile_project(tmp_path)
    prj = root / "units.prj"
    prj.unlink()
    if kind == "garbage":
        prj.write_text("this is not a coordinate system", encoding="utf-8")
    else:
        prj.mkdir()
    report = archivist.check(root)
    messages = {f.rule: f.message for f in report.findings}
    assert "units.prj" in messages["layer-unreadable"]
    assert "is the .prj file missing" not in messages.get("crs-missing", "")
    assert "could not be read or understood" in messages["crs-missing"]


def test_missing_shx_and_unknown_format_in_mapper_words(tmp_path):
    root = _shapefile_project(tmp_path)
    (root / "units.shx").unlink()
    hits = [h.message for h in load_project(root).problems if h.rule == "layer-unreadable"]
    assert hits and "units.shx" in hits[0]
    assert "SHAPE_RESTORE_SHX" not in hits[0] and "config option" not in hits[0]
    (root / "units.shx").write_bytes(b"")
    (root / "lines.gpkg").write_text("<html>not a layer</html>", encoding="utf-8")
    text = (root / "archivist.toml").read_text(encoding="utf-8")
    (root / "archivist.toml").write_text(text.replace('path = "map.gpkg"\nlayer = "lines"', 'path = "lines.gpkg"'), encoding="utf-8")
    hits = [h.message for h in load_project(root).problems if h.rule == "layer-unreadable" and "lines.gpkg" in h.message]
    assert hits, load_project(root).problems
    assert "<DRIVER>" not in hits[0] and "prefix" not in hits[0].lower()


def test_staged_writes_turn_off_the_sqlite_journal_and_sync_only_inside_and_the_file_reads_back(tmp_path):
    # GDAL's SQLite options as GDAL itself reports them (pyogrio.get_gdal_config_option), before, inside and after;
    # the GeoPackage written inside reads back the same features and leaves no journal beside it
    import geopandas as gpd
    import pyogrio
    from shapely.geometry import box

    import shapely

    from archivist.vectorio import STAGING_OPTIONS, staged_writes, sync_file

    before = {k: pyogrio.get_gdal_config_option(k) for k in STAGING_OPTIONS}
    frame = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1)], crs="EPSG:32633")
    with staged_writes():
        # pyogrio reads GDAL's "OFF" back as False
        assert {k: pyogrio.get_gdal_config_option(k) for k in STAGING_OPTIONS} == {"OGR_SQLITE_JOURNAL": False,
                                                                                   "OGR_SQLITE_SYNCHRONOUS": False}
        pyogrio.write_dataframe(frame, tmp_path / "map.gpkg", layer="units", driver="GPKG")
    assert {k: pyogrio.get_gdal_config_option(k) for k in STAGING_OPTIONS} == before
    sync_file(tmp_path / "map.gpkg")
    back = pyogrio.read_dataframe(tmp_path / "map.gpkg", layer="units")
    assert back["unit"].tolist() == ["A", "B"] and shapely.equals_exact(back.geometry.values, frame.geometry.values, tolerance=0).all()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.gpkg"]
