"""Do no harm, as a property over generated projects and archives.

Every command (check, pack, diff, init, audit, unpack, repair) is run in-process
through click on projects and archives drawn by hypothesis, in a sandbox
folder of its own, and every run must:

* end with exit code 0, 1 or 2 and never with a traceback;
* leave every input byte, file, folder listing and modification time as it
  was (``init`` may add ``archivist.toml``, which is what it is for);
* write nothing outside its named output and the private temporary folder,
  and leave the temporary folder empty when it ends;
* make no network connection: Python's sockets are guarded in this process,
  and hostile archives point GDAL at a TCP listener on 127.0.0.1 that must
  never see a connection (libcurl runs in C, below any Python guard).

The projects vary the container (GeoPackage in rollback-journal mode, a
GeoPackage left in WAL mode by an editor with committed frames not yet
checkpointed, shapefiles), the presence of a manifest, and a defect (none,
an overlap, a unit code carrying terminal escape sequences, a legend that is
a folder). The archives are packages (folder and zip), damaged packages and
hostile ones (a path escape, a GDAL virtual layer at depth pointing at a
local file and at a URL, a YAML alias bomb, a deeply nested JSON file).
"""

from __future__ import annotations

import hashlib
import os
import socket
import sqlite3
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from shapely.geometry import box

import archives
from builders import CRS, tiny_project, two_units, write_manifest, read_manifest
from archivist.cli import cli

SECRET = "SECRET-7f3a9c-not-for-any-report"


# ------------------------------------------------------------------ the sandbox


def snapshot(root: Path) -> dict[str, tuple]:
    """Every entry under ``root`` (and ``root`` itself): kind, size, mtime in ns, SHA-256 of files."""
    out: dict[str, tuple] = {}
    st_root = os.lstat(root)
    out["."] = ("dir", st_root.st_mtime_ns)
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            s = os.lstat(p)
            rel = p.relative_to(root).as_posix()
            if os.path.isdir(p) and not os.path.islink(p):
                out[rel] = ("dir", s.st_mtime_ns)
            elif os.path.islink(p):
                out[rel] = ("link", os.readlink(p))
            else:
                out[rel] = ("file", s.st_size, s.st_mtime_ns, hashlib.sha256(p.read_bytes()).hexdigest())
    return out


class Listener:
    """A TCP listener on 127.0.0.1 that counts the connections made to it."""

    def __init__(self) -> None:
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.sock.setblocking(False)
        self.port = self.sock.getsockname()[1]

    def connections(self) -> int:
        n = 0
        while True:
            try:
                conn, _ = self.sock.accept()
            except BlockingIOError:
                return n
            conn.close()
            n += 1

    def close(self) -> None:
        self.sock.close()


@pytest.fixture(scope="module")
def listener():
    lis = Listener()
    yield lis
    lis.close()


@pytest.fixture
def socket_guard(monkeypatch):
    """Refuse and record every outgoing connection a Python socket tries."""
    attempts: list[object] = []
    real_connect = socket.socket.connect
    real_connect_ex = socket.socket.connect_ex

    def connect(self, address):
        attempts.append(address)
        raise OSError("network use refused by the test's socket guard")

    monkeypatch.setattr(socket.socket, "connect", connect)
    monkeypatch.setattr(socket.socket, "connect_ex", lambda self, a: (attempts.append(a), 111)[1])
    yield attempts
    monkeypatch.setattr(socket.socket, "connect", real_connect)
    monkeypatch.setattr(socket.socket, "connect_ex", real_connect_ex)


def run_in_sandbox(sandbox: Path, args: list[str], inputs: list[Path], allowed: list[Path], monkeypatch) -> tuple[int, str]:
    """Run ``archivist ARGS`` with cwd and TMPDIR inside ``sandbox``; check the sandbox afterwards.

    ``allowed`` are the outputs the command may create or replace. Returns (exit code, output).
    """
    cwd = sandbox / "cwd"
    tmp = sandbox / "tmp"
    for d in (cwd, tmp):
        d.mkdir(exist_ok=True)
    before = {p: snapshot(p) if p.is_dir() else snapshot_file(p) for p in inputs}
    outside_before = _outside(sandbox, allowed)
    monkeypatch.chdir(cwd)
    monkeypatch.setenv("TMPDIR", str(tmp))
    monkeypatch.setattr(tempfile, "tempdir", str(tmp))
    monkeypatch.setenv("NO_COLOR", "1")
    result = CliRunner().invoke(cli, args, catch_exceptions=True)
    monkeypatch.setattr(tempfile, "tempdir", None)
    output = result.output
    exc = result.exception
    assert exc is None or isinstance(exc, SystemExit), f"archivist {' '.join(args)} raised {exc!r}\n{output}"
    assert result.exit_code in (0, 1, 2), f"archivist {' '.join(args)} exited {result.exit_code}\n{output}"
    assert "Traceback" not in output, f"archivist {' '.join(args)} printed a traceback\n{output}"
    for p, snap in before.items():
        after = snapshot(p) if p.is_dir() else snapshot_file(p)
        changed = sorted(k for k in set(snap) | set(after) if snap.get(k) != after.get(k))
        assert not changed, f"archivist {' '.join(args)} changed its input {p.name}: {changed}"
    assert _outside(sandbox, allowed) == outside_before, f"archivist {' '.join(args)} wrote outside its output"
    assert not any(tmp.iterdir()), f"archivist {' '.join(args)} left {sorted(x.name for x in tmp.iterdir())} in the temporary folder"
    assert not any(cwd.iterdir()), f"archivist {' '.join(args)} wrote into the working folder"
    return result.exit_code, output


def snapshot_file(p: Path) -> dict[str, tuple]:
    """A file input and its folder's entries (a zip's siblings must not change either)."""
    return snapshot(p.parent)


def _outside(sandbox: Path, allowed: list[Path]) -> dict[str, tuple]:
    """The sandbox outside the allowed outputs, the temporary and the working folder.

    A folder that holds an allowed output keeps its listing but may change its
    modification time (an entry appeared in it).
    """
    skip = [a.relative_to(sandbox).as_posix() for a in allowed] + ["tmp", "cwd"]
    holders = {"."} | {a.relative_to(sandbox).parent.as_posix() for a in allowed}
    out = {}
    for k, v in snapshot(sandbox).items():
        if any(k == s or k.startswith(s + "/") for s in skip):
            continue
        out[k] = ("dir",) if k in holders else v
    return out


# ------------------------------------------------------------------ generated projects


def leave_wal_pending(gpkg: Path, sql: str) -> None:
    """Switch ``gpkg`` to WAL mode and commit ``sql`` in a process that dies before checkpointing.

    SQLite checkpoints and deletes the -wal file when the last connection
    closes (SQLite's "Write-Ahead Logging" documentation); a process that
    exits without closing leaves the committed frames in the -wal, as an
    editor that crashed or is still open does.
    """
    code = (
        "import os, sqlite3, sys, struct, shapely\n"
        "con = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
        # GDAL's R-tree triggers call the GeoPackage SQL functions (GeoPackage 1.4, Annex F.3);
        # a plain sqlite3 writer provides them from the geometry blob: 8-byte header, envelope, WKB.
        "def wkb(b):\n"
        "    n = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}[(b[3] >> 1) & 7]\n"
        "    return shapely.from_wkb(bytes(b[8 + n:]))\n"
        "con.create_function('ST_IsEmpty', 1, lambda b: None if b is None else int(wkb(b).is_empty))\n"
        "for name, i in (('ST_MinX', 0), ('ST_MinY', 1), ('ST_MaxX', 2), ('ST_MaxY', 3)):\n"
        "    con.create_function(name, 1, lambda b, i=i: None if b is None else wkb(b).bounds[i])\n"
        "con.execute('PRAGMA journal_mode=WAL')\n"
        "con.execute('PRAGMA wal_autocheckpoint=0')\n"
        "con.execute('BEGIN'); con.execute(sys.argv[2]); con.execute('COMMIT')\n"
        "os._exit(0)\n"
    )
    subprocess.run([sys.executable, "-c", code, str(gpkg), sql], check=True)
    wal = gpkg.with_name(gpkg.name + "-wal")
    assert wal.is_file() and wal.stat().st_size > 32, "the builder must leave committed frames in the -wal"


def make_project(base: Path, container: str, manifest: bool, defect: str) -> Path:
    units = two_units()
    if defect == "overlap":
        units.loc[units.index[0], "geometry"] = box(0, 0, 120, 100)
    if defect == "escape-code":
        units.loc[units.index[0], "unit"] = "\x1b[2J\x1b[HNo findings\x07"
    root = tiny_project(base, units=units, name="project")
    if container == "shapefile":
        import pyogrio

        for layer in ("units", "lines"):
            frame = pyogrio.read_dataframe(root / "map.gpkg", layer=layer)
            pyogrio.write_dataframe(frame, root / f"{layer}.shp")
        (root / "map.gpkg").unlink()
        data = read_manifest(root)
        for layer in ("units", "lines"):
            data["layers"][layer]["path"] = f"{layer}.shp"
            data["layers"][layer].pop("layer", None)
        write_manifest(root, data)
    if container == "wal-gpkg":
        leave_wal_pending(root / "map.gpkg", "UPDATE gpkg_contents SET description = 'edited in the field'")
    if defect == "legend-folder":
        (root / "legend.csv").unlink()
        (root / "legend.csv").mkdir()
    if not manifest:
        (root / "archivist.toml").unlink()
    return root


CONTAINERS = ["gpkg", "wal-gpkg", "shapefile"]
DEFECTS = ["none", "overlap", "escape-code", "legend-folder"]


def _fresh(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("sandbox")


@pytest.mark.slow
@pytest.mark.parametrize("container", CONTAINERS)
@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(manifest=st.booleans(), defect=st.sampled_from(DEFECTS), inside=st.booleans())
def test_project_commands_do_no_harm(container, manifest, defect, inside, tmp_path_factory, monkeypatch, socket_guard, listener):
    sandbox = _fresh(tmp_path_factory)
    project = make_project(sandbox / "in", container, manifest, defect)
    out = sandbox / "out"
    out.mkdir()
    other = make_project(sandbox / "in2", "gpkg", True, "none")
    runs = [
        (["check", str(project)], [], None),
        (["check", str(project), "--format", "json", "--output", str(out / "r.json"), "--html", str(out / "r.html"),
          "--findings-gpkg", str(out / "f.gpkg")], [out], None),
        (["pack", str(project), "--out", str(out), "--zip", "--allow-errors"], [out], None),
        (["diff", str(other), str(project), "--output", str(out / "d.txt"), "--force"], [out], None),
        (["audit", str(project), "--output", str(out / "a.txt"), "--force"], [out], None),
        (["repair", str(project), "--out", str(out / "repaired"), "--force"], [out], None),
        (["repair", str(project), "--out", str(out / "dry"), "--dry-run"], [out], None),
    ]
    if inside:  # an output named inside the project is refused (exit 2), and nothing is written there
        runs += [
            (["check", str(project), "--output", str(project / "report.txt")], [], 2),
            (["pack", str(project), "--out", str(project)], [], 2),
            (["diff", str(other), str(project), "--gpkg", str(project / "changes.gpkg")], [], 2),
            (["repair", str(project), "--out", str(project / "repaired")], [], 2),
        ]
    for args, allowed, expected in runs:
        code, output = run_in_sandbox(sandbox, args, [project, other], allowed, monkeypatch)
        assert expected is None or code == expected, f"archivist {' '.join(args)} exited {code}\n{output}"
    if not manifest:
        before = snapshot(project)
        run_in_sandbox(sandbox, ["init", str(project)], [], [project], monkeypatch)
        after = snapshot(project)
        changed = sorted(k for k in set(before) | set(after) if before.get(k) != after.get(k))
        assert set(changed) <= {".", "archivist.toml"}, f"archivist init changed {changed}"
    assert socket_guard == []
    assert listener.connections() == 0


# ------------------------------------------------------------------ generated archives


VRT = """<OGRVRTDataSource>
  <OGRVRTLayer name="units">
    <SrcDataSource>{src}</SrcDataSource>
    <SrcLayer>secret</SrcLayer>
    <GeometryType>wkbPolygon</GeometryType>
    <GeometryField encoding="WKT" field="WKT"/>
  </OGRVRTLayer>
</OGRVRTDataSource>
"""


def make_archive(base: Path, kind: str, port: int) -> Path:
    base.mkdir(parents=True, exist_ok=True)
    secret = base.parent / "secret.csv"
    secret.write_text(f"unit,WKT\n{SECRET},\"POLYGON ((0 0, 1 0, 1 1, 0 0))\"\n", encoding="utf-8")
    if kind == "package":
        return archives.package(base)
    if kind == "package-zip":
        return archives.package_zip(base)
    if kind == "package-flipped":
        pkg = archives.package(base)
        archives.flip_byte(pkg / "data" / "map.gpkg", 200)
        return pkg
    if kind == "traversal-zip":
        return archives.zip_with(base / "evil.zip", [("../escape.txt", b"x"), ("map/a.txt", b"y")])
    if kind in ("vrt-local", "vrt-url"):
        src = str(secret) if kind == "vrt-local" else f"/vsicurl/http://127.0.0.1:{port}/units.gpkg"
        folder = base / "deposit"
        (folder / "sub" / "deeper").mkdir(parents=True)
        (folder / "sub" / "units.gpkg").write_text(VRT.format(src=src), encoding="utf-8")
        (folder / "sub" / "deeper" / "lines.shp").write_text(VRT.format(src=src), encoding="utf-8")
        (folder / "README.txt").write_text("An old deposit.\n", encoding="utf-8")
        # a legend, so that a unit code read from outside would be reported as missing from it
        (folder / "legend.csv").write_text("code,name\nKa,Tarrowmere Sandstone\n", encoding="utf-8")
        return archives.zip_with(base / "deposit.zip", [(p.relative_to(folder).as_posix(), p.read_bytes())
                                                        for p in sorted(folder.rglob("*")) if p.is_file()])
    if kind == "yaml-bomb":
        pkg = archives.package(base)
        lines = ['a0: &a0 ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
        for i in range(1, 10):
            lines.append(f"a{i}: &a{i} [" + ",".join([f"*a{i - 1}"] * 9) + "]")
        (pkg / "data" / "CITATION.cff").write_text("\n".join(lines) + "\n", encoding="utf-8")
        return archives.rebag(pkg)
    if kind == "deep-json":
        pkg = archives.package(base)
        (pkg / "data" / "metadata" / "datacite.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
        return archives.rebag(pkg)
    raise AssertionError(kind)


ARCHIVE_KINDS = ["package", "package-zip", "package-flipped", "traversal-zip", "vrt-local", "vrt-url", "yaml-bomb", "deep-json"]


@pytest.mark.slow
@pytest.mark.parametrize("kind", ARCHIVE_KINDS)
@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(fmt=st.sampled_from(["text", "json"]), force=st.booleans())
def test_archive_commands_do_no_harm(kind, fmt, force, tmp_path_factory, monkeypatch, socket_guard, listener):
    sandbox = _fresh(tmp_path_factory)
    archive = make_archive(sandbox / "in", kind, listener.port)
    project = make_project(sandbox / "mine", "gpkg", True, "none")
    out = sandbox / "out"
    out.mkdir()
    extra = ["--force"] if force else []
    runs = [
        (["audit", str(archive), "--format", fmt], []),
        (["audit", str(archive), "--format", fmt, "--output", str(out / "audit.out"), *extra], [out]),
        (["unpack", str(archive), str(out / "remap"), *extra], [out]),
        (["unpack", str(archive), str(archive.parent), "--force"], []),  # never over the folder holding the package
        (["diff", str(archive), str(project), "--format", fmt], []),
    ]
    for args, allowed in runs:
        code, output = run_in_sandbox(sandbox, args, [archive, project], allowed, monkeypatch)
        assert SECRET not in output, f"archivist {' '.join(args)} printed a local file's content"
        if args[0] == "unpack" and not allowed:
            assert code == 2
    for p in out.rglob("*"):
        if p.is_file():
            assert SECRET.encode() not in p.read_bytes(), f"{p.name} holds a local file's content"
    assert socket_guard == []
    assert listener.connections() == 0, "a hostile archive made archivist connect to the network"
