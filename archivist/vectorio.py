"""Every read of vector data through GDAL goes through this module.

Two promises are kept here.

* **An input is never changed.** GDAL opens a GeoPackage through SQLite, and
  SQLite writes beside a database it opens when the database uses a
  write-ahead log (WAL): it creates ``-wal``/``-shm`` files, copies pending
  frames into the database on close (checkpoint) and deletes the sidecars.
  So an SQLite-based file (recognised by its header string, SQLite file
  format section 1.3, whatever its name) is read

  - from a private copy (the file and its ``-wal`` or ``-journal``, in a
    folder only this user can enter, removed when the reading session ends,
    also on an exception or SIGTERM) when it is in WAL mode (header bytes 18
    and 19 are 2, section 1.3) or has a ``-wal``/``-journal`` beside it: SQLite
    then reads the committed frames of the copy's log exactly as it would
    read the original's; a file is copied once per session however many of
    its layers are read;
  - otherwise, in place with GDAL's GeoPackage open option ``IMMUTABLE=YES``
    (SQLite's ``immutable=1``: no locks, no journal, no change detection), so
    a large clean GeoPackage costs no copy. Other SQLite files (the
    ``SQLite`` driver has no such option) are copied.

* **Untrusted data stays inside.** :func:`untrusted` switches off, for every
  GDAL call inside it, all drivers except the self-contained formats
  (GeoPackage, SQLite, shapefile, GeoJSON, FlatGeobuf) and GDAL's access to
  the network; see its docstring for the options and what they do not cover.

GDAL's error texts are written for programmers ("prefix the path with
<DRIVER>:", "set SHAPE_RESTORE_SHX config option"); :func:`explain` turns them
into one sentence for a mapper that names the file.
"""

from __future__ import annotations

import contextvars
import ctypes
import errno
import os
import re
import shutil
import tempfile
import threading
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import pandas as pd
import pyogrio

# SQLite file format, section 1.3 "The database header": the 16-byte header string,
# and the file format write/read version bytes at offsets 18 and 19 (1 = rollback journal, 2 = WAL).
SQLITE_MAGIC = b"SQLite format 3\x00"
WAL_VERSION = 2
# GeoPackage 1.4 (OGC 12-128r19), requirement 2: application_id (SQLite header offset 68) is "GPKG";
# 1.0/1.1 files used "GP10"/"GP11" (from memory).
GPKG_APPLICATION_IDS = (b"GPKG", b"GP10", b"GP11")
SIDECARS = ("-wal", "-journal")  # SQLite's names for the log files beside a database (sqlite.org/tempfiles.html)

# What an untrusted archive may be read with: formats that hold their data in the file itself.
SELF_CONTAINED_DRIVERS = ("GPKG", "SQLite", "ESRI Shapefile", "GeoJSON", "FlatGeobuf")


class VectorReadError(Exception):
    """GDAL could not read a file; the message is one sentence in a mapper's words."""


# ---------------------------------------------------------------- SQLite inputs

@dataclass(frozen=True)
class SqliteState:
    """What the first bytes of a file and its neighbours say about it as an SQLite database."""

    is_sqlite: bool
    is_geopackage: bool = False
    wal_mode: bool = False
    sidecars: tuple[str, ...] = ()

    @property
    def needs_copy(self) -> bool:
        """True when reading in place would make SQLite write beside the file (or miss logged rows)."""
        return self.is_sqlite and (self.wal_mode or bool(self.sidecars) or not self.is_geopackage)


def sqlite_state(path: Path) -> SqliteState:
    """Read the header of ``path`` (SQLite file format section 1.3) and look for its log files."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError:
        return SqliteState(False)
    if not head.startswith(SQLITE_MAGIC) or len(head) < 72:
        return SqliteState(False)
    wal = head[18] == WAL_VERSION or head[19] == WAL_VERSION
    sidecars = tuple(s for s in SIDECARS if os.path.lexists(f"{path}{s}"))
    gpkg = head[68:72] in GPKG_APPLICATION_IDS or path.suffix.lower() == ".gpkg"
    return SqliteState(True, gpkg, wal, sidecars)


@dataclass
class Reader:
    """One reading session: where GDAL reads each input, and the private copies made for it.

    Use :func:`reading` rather than making one: it shares the session with
    every read inside it and removes the copies at the end.
    """

    _tmp: Path | None = None
    _targets: dict[Path, tuple[str, dict[str, str]]] = field(default_factory=dict)
    copies: int = 0  # files copied in this session

    def target(self, path: str | Path) -> tuple[str, dict[str, str]]:
        """The path GDAL opens for ``path`` and the open options it needs (a private copy for SQLite files that change)."""
        p = Path(path)
        _refuse_remote(str(path))
        key = p.absolute()
        if key in self._targets:
            return self._targets[key]
        state = sqlite_state(p) if p.is_file() else SqliteState(False)
        found: tuple[str, dict[str, str]]
        if state.needs_copy:
            found = (str(self._copy(p, state)), {})
        elif state.is_sqlite:
            found = (str(p), {"IMMUTABLE": "YES"})
        else:
            found = (str(p), {})
        self._targets[key] = found
        return found

    def _copy(self, path: Path, state: SqliteState) -> Path:
        if self._tmp is None:
            self._tmp = Path(tempfile.mkdtemp(prefix="archivist-read-"))  # mode 0700 (tempfile.mkdtemp)
        folder = self._tmp / str(self.copies)
        folder.mkdir()
        self.copies += 1
        dest = folder / path.name
        try:
            _copy_with_logs(path, dest, state.sidecars)
        except OSError as exc:
            raise VectorReadError(f"'{path.name}' could not be read ({exc.strerror or exc})") from None
        return dest

    def close(self) -> None:
        """Remove the private copies."""
        if self._tmp is not None:
            shutil.rmtree(self._tmp, ignore_errors=True)
            self._tmp = None
        self._targets.clear()

    # ---- reads

    def list_layers(self, path: str | Path, *, label: str | None = None) -> list[tuple[str, str | None]]:
        """(name, geometry type or None for a table) of every layer in ``path``; ``label`` names it in errors."""
        where, options = self.target(path)
        with _gdal_errors(label or path):
            if not options:
                return [(str(n), None if t is None else str(t)) for n, t in pyogrio.list_layers(where)]
            # pyogrio.list_layers takes no open options: walk the layers by index instead.
            out: list[tuple[str, str | None]] = []
            while True:
                try:
                    info = pyogrio.read_info(where, layer=len(out), **options)
                except pyogrio.errors.DataLayerError:
                    return out
                gtype = info.get("geometry_type")
                out.append((str(info["layer_name"]), None if gtype is None else str(gtype)))

    def read_info(self, path: str | Path, layer: str | int | None = None, *, label: str | None = None, **kwargs: Any) -> dict[str, Any]:
        """``pyogrio.read_info`` of one layer of ``path``; ``label`` names it in errors."""
        where, options = self.target(path)
        with _gdal_errors(label or path, layer):
            return pyogrio.read_info(where, layer=layer, **kwargs, **options)

    def read_dataframe(self, path: str | Path, layer: str | int | None = None, *, label: str | None = None, **kwargs: Any) -> pd.DataFrame:
        """``pyogrio.read_dataframe`` of one layer of ``path`` (a GeoDataFrame when it has geometry); ``label`` names it in errors."""
        where, options = self.target(path)
        with _gdal_errors(label or path, layer):
            return pyogrio.read_dataframe(where, layer=layer, **kwargs, **options)


_session: contextvars.ContextVar[Reader | None] = contextvars.ContextVar("archivist_vector_session", default=None)


@contextmanager
def reading() -> Iterator[Reader]:
    """A reading session: every read inside shares one :class:`Reader`; its private copies go at the end.

    Nested sessions use the outer one. SIGTERM inside raises (see
    :func:`archivist.interrupt.terminate_as_exception`) so the copies
    are removed when a run is stopped.
    """
    current = _session.get()
    if current is not None:
        yield current
        return
    from .interrupt import terminate_as_exception

    reader = Reader()
    token = _session.set(reader)
    try:
        with terminate_as_exception():
            yield reader
    finally:
        _session.reset(token)
        reader.close()


def list_layers(path: str | Path, *, label: str | None = None) -> list[tuple[str, str | None]]:
    """(name, geometry type) of every layer of ``path``, read without changing it.

    Raises :class:`VectorReadError` (one sentence naming ``label`` or the file) when GDAL cannot.
    """
    with reading() as reader:
        return reader.list_layers(path, label=label)


def read_info(path: str | Path, layer: str | int | None = None, *, label: str | None = None, **kwargs: Any) -> dict[str, Any]:
    """``pyogrio.read_info`` of a layer of ``path``, read without changing it (errors as :func:`list_layers`)."""
    with reading() as reader:
        return reader.read_info(path, layer, label=label, **kwargs)


def read_dataframe(path: str | Path, layer: str | int | None = None, *, label: str | None = None, **kwargs: Any) -> pd.DataFrame:
    """``pyogrio.read_dataframe`` of a layer of ``path``, read without changing it (errors as :func:`list_layers`)."""
    with reading() as reader:
        return reader.read_dataframe(path, layer, label=label, **kwargs)


# ---------------------------------------------------------------- GDAL's words, a mapper's words

def explain(exc: BaseException, path: str | Path, layer: str | int | None = None) -> str:
    """One sentence saying why GDAL could not read ``path`` (and ``layer``), without GDAL's jargon."""
    name = Path(str(path)).name if Path(str(path)).is_absolute() else str(path)
    where = f"'{name}'" + (f", layer '{layer}'," if layer is not None else "")
    text = " ".join(str(exc).split())
    low = text.lower()
    if isinstance(exc, VectorReadError):
        return text
    if "not recognized as being in a supported file format" in low or "not recognised as" in low:
        return f"{where} is not in a vector format archivist can read (GeoPackage, shapefile, GeoJSON, FlatGeobuf and others GDAL knows)"
    m = re.search(r"unable to open (\S+?\.shx)", text, re.I)
    if m:
        return f"{where} has no '{Path(m.group(1)).name}' index file beside it; copy it from where the shapefile came from (every shapefile travels as .shp, .shx, .dbf and .prj)"
    if "does not exist in the file system" in low or "no such file" in low:
        return f"{where} does not exist or is not a file archivist can open"
    if "permission denied" in low:
        return f"{where} cannot be read: permission denied"
    if "file is not a database" in low or "malformed" in low or "corrupt" in low or "truncated" in low:
        return f"{where} is damaged: its content is not complete or not what its name says"
    if "could not be opened" in low and layer is not None:
        return f"{where} cannot be read"
    sentence = _strip_hints(text)
    return f"{where} cannot be read: {sentence}" if sentence else f"{where} cannot be read"


_HINT = re.compile(r"(prefix|<driver>|config(uration)? option|driver|gdal|ogr|cple_|\bvsi)", re.I)


def _strip_hints(text: str) -> str:
    """GDAL's message without its advice to programmers and without paths."""
    parts = [p.strip() for p in re.split(r"[;.]\s+|\.$", text) if p.strip()]
    kept = [p for p in parts if not _HINT.search(p)]
    return re.sub(r"(/[^\s']+)+", lambda m: Path(m.group(0)).name, "; ".join(kept)).strip()


@contextmanager
def _gdal_errors(path: str | Path, layer: str | int | None = None) -> Iterator[None]:
    try:
        yield
    except VectorReadError:
        raise
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, pyogrio.errors.CRSError,
            pyogrio.errors.FieldError, pyogrio.errors.GeometryError, OSError, RuntimeError, ValueError) as exc:
        raise VectorReadError(explain(exc, path, layer)) from exc


# ---------------------------------------------------------------- shapefile sidecars

def sidecar(shp: Path, suffix: str) -> Path | None:
    """The file beside a shapefile with ``suffix`` (``.dbf``, ``.prj``...), in either letter case, or None."""
    for cand in (shp.with_suffix(suffix.lower()), shp.with_suffix(suffix.upper())):
        if os.path.lexists(cand):
            return cand
    return None


def prj_problem(shp: Path) -> str | None:
    """Why the ``.prj`` beside ``shp`` cannot be used as its CRS, or None (no .prj, or a readable one)."""
    import pyproj

    prj = sidecar(shp, ".prj")
    if prj is None:
        return None
    if not prj.is_file():
        return f"'{prj.name}' is not a file, so the CRS of '{shp.name}' cannot be read"
    try:
        text = prj.read_bytes().decode("utf-8", errors="replace").strip()
    except OSError as exc:
        return f"'{prj.name}' cannot be read ({exc.strerror or exc}), so the CRS of '{shp.name}' is unknown"
    try:
        pyproj.CRS.from_user_input(text)
    except pyproj.exceptions.CRSError:
        return f"'{prj.name}' is there but its text is not a CRS definition (WKT) that PROJ understands, so the CRS of '{shp.name}' is unknown"
    return None


# ---------------------------------------------------------------- the fence for untrusted data

def _refuse_remote(path: str) -> None:
    if _fence_depth and (path.startswith("/vsi") or "://" in path or re.match(r"^[A-Za-z][A-Za-z0-9_ ]+:", path)):
        raise VectorReadError(f"'{path}' is not a file inside the archive; archivist opens nothing else from an archive")


# GDAL configuration options (names as GDAL 3.12 reads them; GDAL_SKIP and the two CPL_VSIL_CURL_* options
# are each tested in tests/test_vectorio.py; the SQLite ones restate GDAL's defaults and are not tested apart):
FENCE_OPTIONS: dict[str, str] = {
    # /vsicurl/ and the file systems built on it (and http:// paths, which GDAL opens through it)
    # only open a file with exactly this name or one of these extensions: nothing is ever fetched.
    "CPL_VSIL_CURL_ALLOWED_FILENAME": "/archivist-no-network",
    "CPL_VSIL_CURL_ALLOWED_EXTENSIONS": ".archivist-no-network",
    "GDAL_HTTP_MAX_RETRY": "0",
    # SQLite and GeoPackage: no SQLite extensions loaded, no VirtualOGR tables (which open other
    # datasets) listed or reachable from views and triggers. These are GDAL's defaults, asserted here.
    "OGR_SQLITE_LOAD_EXTENSIONS": "",
    "OGR_SQLITE_LIST_VIRTUAL_OGR": "NO",
    "ALLOW_VIRTUAL_OGR_FROM_TRIGGER_AND_VIEW": "NO",
    "ALLOW_OGR_SQL_FUNCTIONS_FROM_TRIGGER_AND_VIEW": "NO",
}

_fence_lock = threading.RLock()
_fence_depth = 0


def _gdal() -> ctypes.CDLL:
    # The GDAL library pyogrio is linked to; symbols are looked up through its extension module.
    import pyogrio._ogr as ogr

    lib = ctypes.CDLL(ogr.__file__)
    lib.GDALGetDriverCount.restype = ctypes.c_int
    lib.GDALGetDriver.restype = ctypes.c_void_p
    lib.GDALGetDriver.argtypes = [ctypes.c_int]
    lib.GDALGetDriverShortName.restype = ctypes.c_char_p
    lib.GDALGetDriverShortName.argtypes = [ctypes.c_void_p]
    return lib


def registered_drivers() -> list[str]:
    """Short names of every GDAL driver registered now (vector and raster)."""
    lib = _gdal()
    return [lib.GDALGetDriverShortName(lib.GDALGetDriver(i)).decode() for i in range(lib.GDALGetDriverCount())]


@contextmanager
def untrusted() -> Iterator[None]:
    """Run the GDAL calls inside with GDAL fenced in: for data from an archive someone else made.

    * ``GDAL_SKIP`` lists every registered driver except
      :data:`SELF_CONTAINED_DRIVERS`, and GDAL's driver registration
      (``GDALAllRegister``) is run so that it takes effect: GDAL reads
      ``GDAL_SKIP`` only while registering drivers. Virtual formats (OGR VRT,
      VRT, GDALG, tile indexes), web services and every other driver that
      follows references to other files or URLs are then unknown to GDAL.
    * :data:`FENCE_OPTIONS` keep ``/vsicurl/`` and ``http://`` paths from
      reaching the network and keep SQLite from loading extensions or
      VirtualOGR tables.
    * Paths that are not local files (``/vsi...``, URLs, ``DRIVER:`` prefixes)
      are refused by this module before GDAL sees them.

    On exit every option gets its previous value back and the drivers are
    registered again. The options are process-wide: other threads calling
    GDAL meanwhile are fenced too. Not covered: what GDAL's remaining
    drivers do with a malformed file (memory safety is GDAL's own), and
    network access by code that does not go through GDAL.
    """
    global _fence_depth
    with _fence_lock:
        if _fence_depth:
            _fence_depth += 1
            try:
                yield
            finally:
                _fence_depth -= 1
            return
        lib = _gdal()
        options = dict(FENCE_OPTIONS)
        options["GDAL_SKIP"] = ",".join(d for d in registered_drivers() if d not in SELF_CONTAINED_DRIVERS)
        before = {key: pyogrio.get_gdal_config_option(key) for key in options}
        try:
            pyogrio.set_gdal_config_options({k: (v if v != "" else None) for k, v in options.items()})
            lib.GDALAllRegister()
            _fence_depth = 1
            yield
        finally:
            _fence_depth = 0
            pyogrio.set_gdal_config_options(before)
            lib.GDALAllRegister()


# GDAL's SQLite settings for files written into a staging folder (GDAL configuration options of its SQLite-based
# drivers, GeoPackage included; names as GDAL 3.12 reads them): no rollback journal, no sync at each transaction.
STAGING_OPTIONS: dict[str, str] = {"OGR_SQLITE_JOURNAL": "OFF", "OGR_SQLITE_SYNCHRONOUS": "OFF"}
_staging_lock = threading.Lock()


@contextmanager
def staged_writes() -> Iterator[None]:
    """GeoPackages written inside are written without SQLite's rollback journal and without a sync to disk at each
    transaction (:data:`STAGING_OPTIONS`); every option gets its previous value back on exit.

    Only for files in a staging folder that is thrown away if the run stops
    (a file cut off mid-write never reaches the user); the caller syncs each
    one (:func:`sync_file`) before moving the folder into place. The options
    are process-wide, like :func:`untrusted`'s: other threads writing
    through GDAL meanwhile write the same way.
    """
    with _staging_lock:
        before = {key: pyogrio.get_gdal_config_option(key) for key in STAGING_OPTIONS}
        pyogrio.set_gdal_config_options(dict(STAGING_OPTIONS))
        try:
            yield
        finally:
            pyogrio.set_gdal_config_options(before)


def _copy_with_logs(src: Path, dest: Path, logs: tuple[str, ...], copy: Any = shutil.copyfile) -> None:
    """Copy a database file and the log files ``logs`` (suffixes, :data:`SIDECARS`) beside it."""
    copy(src, dest)
    for suffix in logs:
        shutil.copyfile(f"{src}{suffix}", f"{dest}{suffix}")


def settled_copy(src: Path, dest: Path, *, times: bool = True) -> tuple[str, ...]:
    """Copy the file ``src`` to ``dest`` (with its times and mode where ``times``, as ``shutil.copy2``; else its
    bytes only); an SQLite database with its log files (``-wal``, ``-journal``), which are then settled into the
    copy, so that it holds what a reader of ``src`` reads, in one file.

    A GeoPackage open in a GIS keeps its latest committed edits in the ``-wal`` file until SQLite copies them
    into the database (a checkpoint); a copy of the database file alone lacks them. The copy is opened with
    Python's ``sqlite3``: a hot ``-journal`` is rolled back on the first read (as a reader would see the file),
    and the write-ahead log is checkpointed into the database (``PRAGMA wal_checkpoint(TRUNCATE)``); the copy's
    own log files are then gone. ``src`` and its log files are only read. Returns the log files settled into the
    copy (none: the copy is ``src`` byte for byte).
    """
    state = sqlite_state(src)
    _copy_with_logs(src, dest, state.sidecars if state.is_sqlite else (), shutil.copy2 if times else shutil.copyfile)
    if not state.is_sqlite or not state.sidecars:
        return ()
    import sqlite3

    con = sqlite3.connect(str(dest))
    try:
        con.execute("PRAGMA schema_version").fetchone()  # the first read rolls a hot journal back
        if "-wal" in state.sidecars:
            busy, _, _ = con.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchone()
            if busy:  # a copy only this run opens: not expected
                raise OSError(errno.EBUSY, "its write-ahead log could not be copied into the database", str(src))
    finally:
        con.close()
    for suffix in (*SIDECARS, "-shm"):  # emptied above; a journal left by journal_mode=PERSIST is not hot
        if os.path.lexists(f"{dest}{suffix}"):
            os.unlink(f"{dest}{suffix}")
    return state.sidecars


def sync_file(path: Path) -> None:
    """Flush a written file to disk (``os.fsync``)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
