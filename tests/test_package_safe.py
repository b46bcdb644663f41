"""Opening untrusted archives: the hostile corpus is refused before anything is written.

Every hostile archive is built here in code. Each must be refused by
``audit``, ``unpack`` and ``diff`` alike with exit code 2 and one line naming
the entry and the reason, and nothing may be written: not outside the
temporary folder, and not even there (the archive is refused before
extraction; the temporary folder is gone afterwards).
"""

import os
import random
import socket
import stat
import threading
import tempfile
import unicodedata
import zipfile
import zlib

import pytest
from click.testing import CliRunner

from archivist.cli import cli
from archivist.errors import ArchivistError
from archivist.package.safe import DEFAULT_LIMITS, Limits, name_problem, open_archive, sniff_vector
from archives import (
    link_entry,
    outside_secret,
    package,
    plant_reaching_layers,
    rebag,
    set_central_field,
    tree_names,
    zip_folder,
    zip_with,
)
from builders import tiny_project

MiB = 1024 * 1024


def _plain(tmp_path, name="plain.zip"):
    return zip_with(tmp_path / name, [("data/a.csv", b"unit,name\nA,Alder\n"), ("README.md", b"# An archive\n")])


# ---------------------------------------------------------------- the hostile corpus

def traversal(tmp_path):
    return zip_with(tmp_path / "traversal.zip", [("data/ok.csv", b"x\n"), ("../../evil.txt", b"pwned\n")])


def traversal_inside(tmp_path):
    return zip_with(tmp_path / "traversal2.zip", [("data/../../evil.txt", b"pwned\n")])


def absolute(tmp_path):
    return zip_with(tmp_path / "absolute.zip", [(f"{tmp_path}/evil.txt", b"pwned\n")])


def windows_path(tmp_path):
    return zip_with(tmp_path / "backslash.zip", [("..\\..\\evil.txt", b"pwned\n")])


def drive_letter(tmp_path):
    return zip_with(tmp_path / "drive.zip", [("C:/evil.txt", b"pwned\n")])


def symlink(tmp_path):
    return zip_with(tmp_path / "link.zip", [("data/a.csv", b"x\n"), (link_entry("data/passwd", "/etc/passwd"), b"/etc/passwd")])


def device(tmp_path):
    info = zipfile.ZipInfo("data/fifo")
    info.create_system = 3
    info.external_attr = (stat.S_IFIFO | 0o644) << 16
    return zip_with(tmp_path / "fifo.zip", [(info, b"")])


def bomb_ratio(tmp_path):
    # 8 MiB of zeros deflate to about 8 KiB: a ratio near 1000, close to DEFLATE's ceiling of about 1032:1 (from memory:
    # zlib's technical notes; a match copies at most 258 bytes, RFC 1951 section 3.2.5).
    return zip_with(tmp_path / "bomb.zip", [("data/zeros.bin", bytes(8 * MiB))])


def bomb_overlap(tmp_path):
    path = zip_with(tmp_path / "overlap.zip", [("a.bin", bytes(4096)), ("b.bin", bytes(4096))], zipfile.ZIP_STORED)
    # b's central header (offset 42: relative offset of local header) points at a's data: two entries, one stream.
    return set_central_field(path, "b.bin", 42, "<I", 0)


def lying_size(tmp_path):
    path = zip_with(tmp_path / "liar.zip", [("data/big.csv", b"1234567890\n" * 100_000)])
    # declare 1 000 bytes where the stream holds 1.1 MB (offset 24: uncompressed size)
    return set_central_field(path, "data/big.csv", 24, "<I", 1000)


def duplicate(tmp_path):
    return zip_with(tmp_path / "dup.zip", [("data/legend.csv", b"unit\nA\n"), ("data/legend.csv", b"unit\nB\n")])


def duplicate_case(tmp_path):
    return zip_with(tmp_path / "dupcase.zip", [("data/Legend.csv", b"unit\nA\n"), ("data/legend.csv", b"unit\nB\n")])


def duplicate_unicode(tmp_path):
    nfc = unicodedata.normalize("NFC", "data/café.csv")
    nfd = unicodedata.normalize("NFD", "data/café.csv")
    assert nfc != nfd
    return zip_with(tmp_path / "dupnfd.zip", [(nfc, b"a\n"), (nfd, b"b\n")])


def file_and_folder(tmp_path):
    return zip_with(tmp_path / "filefolder.zip", [("data", b"a file"), ("data/legend.csv", b"unit\n")])


def encrypted(tmp_path):
    path = zip_with(tmp_path / "encrypted.zip", [("data/secret.csv", b"ciphertext")])
    # general purpose bit 0 (offset 8 of the central header): the entry is encrypted (APPNOTE 4.4.4)
    return set_central_field(path, "data/secret.csv", 8, "<H", 0x1)


def not_a_zip(tmp_path):
    path = tmp_path / "noise.zip"
    path.write_bytes(random.Random(4096).randbytes(4096))  # seeded noise: the same bytes every run
    return path


def truncated(tmp_path):
    path = _plain(tmp_path, "truncated.zip")
    raw = path.read_bytes()
    path.write_bytes(raw[: len(raw) - 30])  # the end of central directory record is cut
    return path


def bad_crc(tmp_path):
    path = zip_with(tmp_path / "crc.zip", [("data/a.csv", b"unit,name\nA,Alder\n" * 50)], zipfile.ZIP_STORED)
    raw = bytearray(path.read_bytes())
    at = raw.index(b"Alder")
    raw[at] ^= 0x20  # the stored data no longer matches its CRC-32
    path.write_bytes(bytes(raw))
    return path


HOSTILE = {
    "path traversal": (traversal, ["../../evil.txt", "'..'"]),
    "path traversal inside a name": (traversal_inside, ["data/../../evil.txt", "'..'"]),
    "absolute path": (absolute, ["absolute path"]),
    "windows path": (windows_path, ["backslash"]),
    "drive letter": (drive_letter, ["drive-letter"]),
    "symbolic link": (symlink, ["data/passwd", "symbolic link"]),
    "special file": (device, ["data/fifo", "not a regular file"]),
    "bomb by ratio": (bomb_ratio, ["data/zeros.bin", "zip bomb"]),
    "bomb by overlapping entries": (bomb_overlap, ["overlap"]),
    "size that lies": (lying_size, ["data/big.csv"]),
    "duplicate name": (duplicate, ["data/legend.csv", "twice"]),
    "duplicate by case": (duplicate_case, ["Legend.csv", "legend.csv", "case"]),
    "duplicate by Unicode form": (duplicate_unicode, ["Unicode"]),
    "file and folder": (file_and_folder, ["also the folder"]),
    "encrypted": (encrypted, ["encrypted"]),
    "not a zip": (not_a_zip, ["not a readable zip"]),
    "truncated zip": (truncated, ["not a readable zip"]),
    "corrupt data": (bad_crc, ["corrupt zip", "data/a.csv"]),
}


@pytest.fixture
def private_tmp(tmp_path, monkeypatch):
    """Point the temporary folder at an empty folder we can inspect afterwards."""
    work = tmp_path / "system-tmp"
    work.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(work))
    return work


def _assert_nothing_written(tmp_path, archive, private_tmp, before):
    assert tree_names(tmp_path) == before, "something was written beside the archive"
    assert list(private_tmp.iterdir()) == [], "the temporary folder was left behind"
    for p in tmp_path.parent.rglob("evil.txt"):
        raise AssertionError(f"{p} was written")


@pytest.mark.parametrize("case", sorted(HOSTILE))
@pytest.mark.parametrize("command", ["audit", "unpack", "diff"])
def test_hostile_archive_refused_exit_2_one_line(case, command, tmp_path, private_tmp):
    make, words = HOSTILE[case]
    archive = make(tmp_path)
    before = tree_names(tmp_path)
    args = {
        "audit": ["audit", str(archive)],
        "unpack": ["unpack", str(archive), str(tmp_path / "out" / "project")],
        "diff": ["diff", str(archive), str(archive)],
    }[command]
    (tmp_path / "out").mkdir()
    before = tree_names(tmp_path)
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 2, (result.exit_code, result.output)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, lines
    assert "Traceback" not in result.output
    assert archive.name in lines[0]
    for w in words:
        assert w in lines[0], (w, lines[0])
    _assert_nothing_written(tmp_path, archive, private_tmp, before)


def test_bomb_by_total_size(tmp_path, private_tmp):
    # three members of 4 MiB of random (incompressible) bytes against a 10 MiB cap
    archive = zip_with(tmp_path / "big.zip", [(f"data/part{i}.bin", random.Random(i).randbytes(4 * MiB)) for i in range(3)])
    before = tree_names(tmp_path)
    result = CliRunner().invoke(cli, ["audit", str(archive), "--max-size", "10MiB"])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "big.zip" in line and "10.0 MiB" in line and "data/part2.bin" in line
    _assert_nothing_written(tmp_path, archive, private_tmp, before)
    with pytest.raises(ArchivistError, match="expand to more than"):
        with open_archive(archive, Limits(max_total_bytes=10 * MiB)):
            pass


def test_too_many_members(tmp_path, private_tmp):
    archive = zip_with(tmp_path / "many.zip", [(f"data/f{i:04d}.txt", b"") for i in range(101)])
    before = tree_names(tmp_path)
    result = CliRunner().invoke(cli, ["audit", str(archive), "--max-members", "100"])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "101 members" in line and "cap of 100" in line
    _assert_nothing_written(tmp_path, archive, private_tmp, before)


def test_too_many_members_by_default(tmp_path, private_tmp):
    n = DEFAULT_LIMITS.max_members + 1
    archive = zip_with(tmp_path / "many.zip", [(f"d/{i}", b"") for i in range(n)], zipfile.ZIP_STORED)
    with pytest.raises(ArchivistError, match=f"holds {n} members"):
        with open_archive(archive):
            pass
    assert list(private_tmp.iterdir()) == []


# ---------------------------------------------------------------- folders

def test_folder_with_symlink_refused(tmp_path, private_tmp):
    root = tiny_project(tmp_path)
    secret = tmp_path / "secret.txt"
    secret.write_text("not for the archive\n")
    os.symlink(secret, root / "notes.txt")
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "notes.txt" in line and "symbolic link" in line
    assert list(private_tmp.iterdir()) == []


def test_folder_with_linked_subfolder_refused(tmp_path, private_tmp):
    root = tiny_project(tmp_path)
    os.symlink(tmp_path, root / "up")
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code == 2 and "'up' is a symbolic link" in result.stderr


def test_folder_with_fifo_refused(tmp_path, private_tmp):
    root = tiny_project(tmp_path)
    os.mkfifo(root / "pipe")
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code == 2 and "'pipe' is not a regular file" in result.stderr


def test_folder_duplicate_by_case_refused(tmp_path):
    root = tmp_path / "arc"
    root.mkdir()
    (root / "Legend.csv").write_text("unit\nA\n")
    (root / "legend.csv").write_text("unit\nB\n")
    if len(list(root.iterdir())) < 2:  # a case-insensitive file system merged them already
        return
    with pytest.raises(ArchivistError, match="differ only in case"):
        with open_archive(root):
            pass


# ---------------------------------------------------------------- what a clean archive gives

def test_clean_zip_extracted_privately_and_removed(tmp_path, private_tmp):
    info = zipfile.ZipInfo("data/run.sh")
    info.create_system = 3
    info.external_attr = (stat.S_IFREG | 0o755) << 16
    archive = zip_with(tmp_path / "ok.zip", [("data/a.csv", b"unit\nA\n"), (info, b"#!/bin/sh\necho hi\n")])
    with open_archive(archive) as arc:
        assert arc.kind == "zip"
        assert [m.name for m in arc.members] == ["data/a.csv", "data/run.sh"]
        assert private_tmp in arc.root.parents
        assert (arc.root / "data" / "a.csv").read_bytes() == b"unit\nA\n"
        mode = (arc.root / "data" / "run.sh").stat().st_mode
        assert not mode & (stat.S_IXUSR | stat.S_IXGRP | stat.S_IXOTH), "an archive's file came out executable"
        assert stat.S_IMODE(os.stat(arc.root.parent).st_mode) == 0o700
    assert list(private_tmp.iterdir()) == []


def test_temporary_folder_removed_on_error(tmp_path, private_tmp):
    archive = _plain(tmp_path)
    with pytest.raises(RuntimeError):
        with open_archive(archive):
            raise RuntimeError("boom")
    assert list(private_tmp.iterdir()) == []


def test_folder_copied_not_read_in_place(tmp_path, private_tmp):
    root = tiny_project(tmp_path)
    with open_archive(root) as arc:
        assert arc.kind == "folder"
        assert (arc.root / "map.gpkg").read_bytes() == (root / "map.gpkg").read_bytes()
        assert root not in arc.root.parents


def test_ratio_cap_spares_small_members(tmp_path, private_tmp):
    # 512 KiB of zeros compress about 1000:1 but are under the 1 MiB floor: harmless, accepted.
    archive = zip_with(tmp_path / "blank.zip", [("data/blank.txt", bytes(512 * 1024))])
    with open_archive(archive) as arc:
        assert arc.members[0].size == 512 * 1024


def test_ratio_of_deflate_is_what_zlib_says(tmp_path):
    # The cap is measured with zipfile's own sizes; they agree with zlib compressing the same bytes.
    data = bytes(8 * MiB)
    archive = zip_with(tmp_path / "bomb.zip", [("zeros.bin", data)])
    (info,) = zipfile.ZipFile(archive).infolist()
    assert info.file_size == len(data)
    assert abs(info.compress_size - len(zlib.compress(data, 6)) + 6) < 64  # raw deflate vs zlib's 6-byte wrapper
    assert info.file_size / info.compress_size > DEFAULT_LIMITS.max_ratio


@pytest.mark.parametrize(
    "name, problem",
    [
        ("data/map.gpkg", None),
        ("a/b/c.csv", None),
        ("../x", "'..'"),
        ("a/../../x", "'..'"),
        ("/etc/passwd", "absolute"),
        ("C:/x", "drive-letter"),
        ("a\\..\\x", "backslash"),
        ("a\x00b", "control character"),
        ("", "empty"),
    ],
)
def test_name_problem(name, problem):
    why = name_problem(name)
    assert (why is None) if problem is None else (problem in why)


# ---------------------------------------------------------------- what GDAL may open

def test_sniff_vector(tmp_path):
    root = tiny_project(tmp_path)
    assert sniff_vector(root / "map.gpkg") == "sqlite"
    vrt = tmp_path / "units.geojson"
    vrt.write_text('<OGRVRTDataSource><OGRVRTLayer name="x"><SrcDataSource>/etc/passwd</SrcDataSource></OGRVRTLayer></OGRVRTDataSource>')
    assert sniff_vector(vrt) is None
    fake = tmp_path / "units.gpkg"
    fake.write_text("<OGRVRTDataSource/>")
    assert sniff_vector(fake) is None
    gj = tmp_path / "ok.geojson"
    gj.write_text('{"type": "FeatureCollection", "features": []}')
    assert sniff_vector(gj) == "geojson"


def test_disguised_layer_in_manifest_is_not_opened(tmp_path, private_tmp):
    """A manifest naming a 'GeoPackage' that is really a GDAL virtual layer over another file: never opened."""
    root = tiny_project(tmp_path)
    secret = tmp_path / "secret.csv"
    secret.write_text("name,code\nsecret,42\n")
    (root / "sneaky.gpkg").write_text(
        f'<OGRVRTDataSource><OGRVRTLayer name="units"><SrcDataSource>{secret}</SrcDataSource></OGRVRTLayer></OGRVRTDataSource>'
    )
    text = (root / "archivist.toml").read_text().replace('[layers.lines]\npath = "map.gpkg"', '[layers.lines]\npath = "sneaky.gpkg"')
    (root / "archivist.toml").write_text(text)
    result = CliRunner().invoke(cli, ["audit", str(root), "--format", "json", "--only", "metadata"])
    assert result.exit_code == 1
    assert "sneaky.gpkg" in result.output and "was not opened" in result.output
    assert "secret" not in result.output.replace("secret.csv", "")


def test_manifest_path_escaping_the_archive_refused(tmp_path, private_tmp):
    root = tiny_project(tmp_path)
    text = (root / "archivist.toml").read_text().replace('path = "legend.csv"', 'path = "../../../etc/passwd"')
    (root / "archivist.toml").write_text(text)
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "tables.legend.path '../../../etc/passwd' leads outside the archive" in line
    assert list(private_tmp.iterdir()) == []


def test_workbook_bomb_inside_an_archive_is_not_opened(tmp_path, private_tmp):
    """An .xlsx is a zip too: a sheet that expands 1000 times is never handed to the spreadsheet reader."""
    root = tiny_project(tmp_path)
    zip_with(root / "analyses.xlsx", [("[Content_Types].xml", b"<Types/>"), ("xl/worksheets/sheet1.xml", bytes(8 * MiB))])
    text = (root / "archivist.toml").read_text() + '\n[tables.analyses]\npath = "analyses.xlsx"\n'
    (root / "archivist.toml").write_text(text)
    result = CliRunner().invoke(cli, ["audit", str(root), "--format", "json", "--only", "metadata"])
    assert result.exit_code == 1
    assert "'analyses.xlsx' was not opened" in result.output and "xl/worksheets/sheet1.xml" in result.output


# ---------------------------------------------------------------- nothing reaches outside the archive

TOKEN = "QZXSECRET7731"  # invented; appears only in a file outside every archive


class Listener:
    """A TCP socket listening on 127.0.0.1 that accepts (with a timeout) and records every connection."""

    def __init__(self) -> None:
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.connections: list[tuple[str, int]] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._accept, daemon=True)
        self._thread.start()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                conn, addr = self.sock.accept()
            except (socket.timeout, OSError):
                continue
            self.connections.append(addr)
            conn.close()

    def close(self) -> list[tuple[str, int]]:
        self._stop.set()
        self._thread.join()
        self.sock.close()
        return self.connections


@pytest.fixture
def listener():
    lis = Listener()
    yield lis
    lis.close()


def _reaching_bare(tmp_path, secret, url):
    root = tmp_path / "survey-data"
    root.mkdir(parents=True)
    (root / "README.md").write_text("# Survey data of Glenmarrow\n", encoding="utf-8")
    (root / "legend.csv").write_text("unit,name\nKa,Alder sandstone\n", encoding="utf-8")
    planted = plant_reaching_layers(root, secret, url)
    return root, planted


def _reaching_package(tmp_path, secret, url):
    """A package whose own manifest names a virtual layer as its units layer, with more planted below data/."""
    root = package(tmp_path)
    data = root / "data"
    planted = ["data/" + p for p in plant_reaching_layers(data, secret, url)]
    manifest = data / "archivist.toml"
    text = manifest.read_text(encoding="utf-8").replace('[layers.units]\npath = "map.gpkg"\nlayer = "units"', '[layers.units]\npath = "sub/units.gpkg"')
    assert 'path = "sub/units.gpkg"' in text
    manifest.write_text(text, encoding="utf-8")
    rebag(root)
    return root, planted


@pytest.mark.parametrize("make", [_reaching_bare, _reaching_package], ids=["bare", "package"])
@pytest.mark.parametrize("as_zip", [False, True], ids=["folder", "zip"])
def test_archive_layers_at_any_depth_never_reach_outside(tmp_path, private_tmp, listener, make, as_zip, monkeypatch):
    """GDAL virtual layers disguised as GeoPackage, GeoJSON, shapefile, FlatGeobuf, CSV and a .gdb folder,
    below sub-folders, pointing at a local file and at a listening socket: none is opened, each is named."""
    monkeypatch.setenv("GDAL_HTTP_TIMEOUT", "5")  # should GDAL ever connect, the run still ends
    outside = tmp_path / "outside"
    outside.mkdir()
    secret = outside_secret(outside, TOKEN)
    url = f"http://127.0.0.1:{listener.port}/secret.csv"
    root, planted = make(tmp_path / "arc", secret, url)
    target = zip_folder(root, tmp_path / (root.name + ".zip")) if as_zip else root
    runs = {
        "audit text": CliRunner().invoke(cli, ["audit", str(target)]),
        "audit json": CliRunner().invoke(cli, ["audit", str(target), "--format", "json"]),
    }
    if as_zip:  # a folder that is no bag is one's own project to diff; a zip is an archive
        runs["diff"] = CliRunner().invoke(cli, ["diff", str(target), str(tiny_project(tmp_path / "new"))])
    for what, result in runs.items():
        assert result.exit_code in ((0, 1, 2) if what == "diff" else (1,)), f"{what}: {result.output}"
        assert result.exception is None or isinstance(result.exception, SystemExit), what
        assert TOKEN not in result.output and TOKEN not in (result.stderr or ""), f"{what} printed the outside file"
    for what in ("audit text", "audit json"):
        out = runs[what].output
        for rel in planted:
            assert rel in out, f"{what} does not name {rel}"
        assert "was not opened" in out
        assert "GDAL virtual layer" in out
    assert listener.close() == [], "something connected to the listening socket"
    assert list(private_tmp.glob("archivist-archive-*")) == []


# ---------------------------------------------------------------- names longer than the system allows

def test_name_component_over_255_bytes_refused_in_zip(tmp_path, private_tmp):
    """NAME_MAX is 255 bytes on Linux (<linux/limits.h>) and on ext4/XFS; a longer name cannot be written."""
    long_name = "data/" + "é" * 128 + ".csv"  # 256 bytes of UTF-8 in one component
    archive = zip_with(tmp_path / "long.zip", [("data/a.csv", b"x\n"), (long_name, b"x\n")])
    for command in ("audit", "unpack"):
        args = [command, str(archive)] + ([str(tmp_path / "out")] if command == "unpack" else [])
        result = CliRunner().invoke(cli, args)
        assert result.exit_code == 2, result.output
        (line,) = result.stderr.strip().splitlines()
        assert "longer than 255 bytes" in line and "long.zip" in line
    assert list(private_tmp.glob("archivist-archive-*")) == []


def test_path_over_path_max_refused_in_zip(tmp_path, private_tmp):
    """PATH_MAX is 4096 bytes on Linux (<linux/limits.h>): 25 folders of 200 bytes cannot be created."""
    deep = "/".join(["d" * 200] * 25) + "/units.csv"
    archive = zip_with(tmp_path / "deep.zip", [("README.md", b"# deep\n"), (deep, b"x\n")])
    result = CliRunner().invoke(cli, ["audit", str(archive)])
    assert result.exit_code == 2, result.output
    (line,) = result.stderr.strip().splitlines()
    assert "deep.zip: entry 'ddd" in line and "longer than this system allows" in line
    assert list(private_tmp.glob("archivist-archive-*")) == []


def test_path_over_path_max_refused_in_folder(tmp_path, private_tmp):
    """A folder whose deepest path fits where it is but not in the (longer) private copy."""
    root = tmp_path / "f"
    root.mkdir()
    (root / "README.md").write_text("# deep\n")
    room = 4095 - len(str(root)) - 1  # bytes left for the relative path under PATH_MAX
    parts, used = [], 0
    while used + 201 < room - 20:
        parts.append("d" * 200)
        used += 201
    parts.append("u" * (room - used - 1))
    rel = "/".join(parts)
    assert len(str(root / rel)) <= 4095
    os.makedirs(root / "/".join(parts[:-1]))
    (root / rel).write_text("x\n")
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code == 2, result.output
    (line,) = result.stderr.strip().splitlines()
    assert line.startswith("archivist: f: entry 'ddd") and "longer than this system allows" in line
    assert list(private_tmp.glob("archivist-archive-*")) == []


# ---------------------------------------------------------------- SIGTERM mid-audit

@pytest.mark.slow
def test_sigterm_mid_audit_removes_the_private_copy(tmp_path):
    """A scheduler's SIGTERM while the audit reads the copy: the copy is removed, one line, exit 143 (128 + 15)."""
    import signal
    import subprocess
    import sys
    import time

    root = tmp_path / "many"
    root.mkdir()
    (root / "README.md").write_text("# Many invented tables\n")
    for i in range(1500):  # reading every table keeps the audit busy for a while after the copy exists
        (root / f"t{i:04d}.csv").write_text("unit,name\n" + "".join(f"U{j},Unit {j}\n" for j in range(50)))
    work = tmp_path / "tmp"
    work.mkdir()
    env = {**os.environ, "TMPDIR": str(work)}
    code = "import sys; from archivist.cli import main; sys.exit(main())"
    proc = subprocess.Popen([sys.executable, "-c", code, "audit", str(root)], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        # wait (not a timing assertion) until the private copy has been made, then signal
        while proc.poll() is None and not any(work.glob("archivist-archive-*/content/t1499.csv")):
            time.sleep(0.01)
        assert proc.poll() is None, "the audit ended before it could be signalled"
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 128 + signal.SIGTERM, err.decode()
    assert "Traceback" not in err.decode()
    (line,) = err.decode().strip().splitlines()
    assert line.startswith("archivist: stopped by signal 15")
    assert list(work.iterdir()) == [], "the private copy was left in the temporary folder"
