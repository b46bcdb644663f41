"""Open an untrusted archive (a zip file or a folder) without trusting it.

Everything from outside is hostile until proven otherwise. :func:`open_archive`
first inspects the whole archive and refuses it, with one line naming the
entry and the reason, when any entry

* has an absolute path, a drive letter, a backslash, a control character, or
  a ``..`` component (it would land outside the extraction folder);
* is a link (a zip entry whose Unix mode says symlink, a symbolic link in a
  folder) or a device, pipe or socket;
* duplicates another entry's name, also after Unicode NFC normalisation and
  case folding (two names that one file system would merge), or is both a
  file and a folder;
* is encrypted, overlaps another entry's data, or uses a compression method
  Python cannot read;

or when the archive holds more members, more uncompressed bytes, or a member
with a higher compression ratio than :class:`Limits` allows (zip bombs). Only
then does it copy the members, streaming and counting the bytes actually
produced, into a fresh temporary folder of its own, created with mode 0700.
Files are written with ``O_EXCL | O_NOFOLLOW`` and without execute bits;
nothing is run or imported from the archive. The folder is removed when the
``with`` block ends, whatever happens inside it, SIGTERM included.

A folder archive is copied the same way, so that the audit works on a private
snapshot that cannot change under it and GDAL never opens a file in the
user's folder.

:func:`screen_tree` runs over the whole private copy, at every depth, before
any reader is handed a file: :func:`open_problem` names what must not be
opened, and :func:`set_aside` keeps it out of reach while the map is read.
:func:`sniff_vector` guards every GDAL open in an audit: a file is read as a
layer only when its first bytes are those of a self-contained format
(GeoPackage/SQLite, shapefile, FlatGeobuf, GeoJSON). A file that merely bears
such a suffix, but holds for instance a GDAL virtual-format XML that points at
other files or URLs, is never opened.
"""

from __future__ import annotations

import errno
import os
import shutil
import signal
import stat
import tempfile
import threading
import unicodedata
import zipfile
import zlib
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Iterator

from ..errors import ArchivistError
from ..filebytes import human_size
from ..interrupt import Interrupted, terminate_as_exception

SYSTEM_CLUTTER = {"__MACOSX", ".DS_Store", "Thumbs.db", "desktop.ini"}
GiB = 1024**3
MiB = 1024**2
CHUNK = MiB


@dataclass(frozen=True)
class Limits:
    """Caps applied before anything is extracted.

    The defaults are sized for real map deposits, which hold tens to a few
    thousand files and rarely more than a few GB; general-purpose data
    repositories commonly cap one record at tens of GB (from memory).

    Attributes
    ----------
    max_members
        Most entries (files and folders) an archive may hold: 50 000.
    max_total_bytes
        Most bytes all members may expand to: 16 GiB.
    max_ratio
        Highest uncompressed/compressed ratio of one member: 200. Text and
        GeoPackages compress 3 to 20 times (measured on the example bundle:
        the GeoPackage 5.6x); DEFLATE cannot exceed about 1032x, which zip
        bombs approach (common practice: caps of 100 to 1000 are usual).
    ratio_floor_bytes
        Members smaller than this (1 MiB) are exempt from the ratio cap: a
        small file of blanks compresses very well and harms no one.
    """

    max_members: int = 50_000
    max_total_bytes: int = 16 * GiB
    max_ratio: float = 200.0
    ratio_floor_bytes: int = MiB

    def describe(self) -> str:
        return (
            f"at most {self.max_members} members, {_size(self.max_total_bytes)} uncompressed, "
            f"compression ratio {self.max_ratio:g} per member over {_size(self.ratio_floor_bytes)}"
        )


DEFAULT_LIMITS = Limits()


def _size(n: float) -> str:
    """A size in words, in the binary units the caps are set in (``16.0 GiB``)."""
    return human_size(n, binary=True)


@dataclass(frozen=True)
class Member:
    """One file of the archive as found (before or after extraction)."""

    name: str  # relative POSIX path inside the archive
    size: int  # uncompressed bytes
    compressed: int | None = None  # bytes in the zip; None for a folder


@dataclass
class OpenedArchive:
    """A verified private copy of an archive.

    Attributes
    ----------
    source
        The archive as the user named it.
    kind
        ``"zip"`` or ``"folder"``.
    root
        The private copy (a temporary folder); removed after the ``with`` block.
    members
        Every file (not folders), sorted by name.
    """

    source: Path
    kind: str
    root: Path
    members: list[Member] = field(default_factory=list)

    @property
    def label(self) -> str:
        return self.source.name

    def content_root(self) -> Path:
        """The folder that holds the content: the copy itself, or its single top folder.

        The resource-fork folder and folder-view files some systems add when zipping
        (``__MACOSX/``, ``.DS_Store``) do not count.
        """
        entries = [p for p in self.root.iterdir() if p.name not in SYSTEM_CLUTTER]
        if len(entries) == 1 and entries[0].is_dir():
            return entries[0]
        return self.root


# ------------------------------------------------------------------ names

_CONTROL = {chr(c) for c in range(32)} | {"\x7f"}
# The longest file name most file systems store: ext4, XFS, APFS, NTFS (255 bytes or UTF-16 units;
# Linux <linux/limits.h> NAME_MAX). Longer paths in total (PATH_MAX, 4096 on Linux) are caught when
# the private copy is written, where the length of the temporary folder's own path is known.
NAME_MAX = 255


def name_problem(name: str) -> str | None:
    """Why ``name`` may not be extracted, or None when it is a plain relative path."""
    if not name:
        return "has an empty name"
    if any(ch in _CONTROL for ch in name):
        return "has a control character in its name"
    if "\\" in name:
        return "has a backslash in its name (a Windows path that could escape the folder)"
    if name.startswith("/"):
        return "has an absolute path"
    if len(name) >= 2 and name[1] == ":" and name[0].isalpha():
        return "has a drive-letter path"
    parts = PurePosixPath(name).parts
    if any(p == ".." for p in name.split("/")):
        return "has a '..' component that leads outside the archive"
    if any(len(p.encode("utf-8", "surrogateescape")) > NAME_MAX for p in name.split("/")):
        return f"has a name longer than {NAME_MAX} bytes, more than file systems allow"
    if not parts:
        return "has an empty name"
    return None


def fold(name: str) -> str:
    """The key under which a file system that ignores case or normalisation would store ``name``."""
    return unicodedata.normalize("NFC", name).casefold()


def _check_duplicates(names: list[tuple[str, bool]], label: str) -> None:
    """Refuse equal names after folding, and a name that is both a file and a folder."""
    seen: dict[str, str] = {}
    files: dict[str, str] = {}
    dirs: dict[str, str] = {}
    for name, is_dir in names:
        clean = name.rstrip("/")
        key = fold(clean)
        if key in seen and not (is_dir and key in dirs):
            other = seen[key]
            if other == clean:
                raise ArchivistError(f"{label}: entry '{clean}' appears twice; refusing the archive")
            raise ArchivistError(
                f"{label}: entries '{other}' and '{clean}' differ only in case or Unicode form and would overwrite each other; refusing the archive"
            )
        seen.setdefault(key, clean)
        (dirs if is_dir else files)[key] = clean
    for key, clean in files.items():
        parts = key.split("/")
        for i in range(1, len(parts)):
            parent = "/".join(parts[:i])
            if parent in files:
                raise ArchivistError(f"{label}: '{files[parent]}' is a file and also the folder of '{clean}'; refusing the archive")


# ------------------------------------------------------------------ zip

def _zip_mode(info: zipfile.ZipInfo) -> int:
    return (info.external_attr >> 16) & 0xFFFF


def inspect_zip(path: Path, limits: Limits = DEFAULT_LIMITS) -> list[zipfile.ZipInfo]:
    """Check every entry of the zip at ``path`` against the rules above; return its entries.

    Raises ArchivistError with one line naming the entry and the reason.
    """
    label = path.name
    try:
        zf = zipfile.ZipFile(path)
    except zipfile.BadZipFile as exc:
        raise ArchivistError(f"{label}: not a readable zip file ({exc})") from None
    except OSError as exc:
        raise ArchivistError(f"{label}: cannot be read ({exc.strerror or exc})") from None
    with zf:
        infos = zf.infolist()
    if len(infos) > limits.max_members:
        raise ArchivistError(f"{label}: holds {len(infos)} members, over the cap of {limits.max_members}; refusing the archive")
    total = 0
    for info in infos:
        name = info.filename
        why = name_problem(name)
        if why:
            raise ArchivistError(f"{label}: entry '{name}' {why}; refusing the archive")
        mode = _zip_mode(info)
        kind = stat.S_IFMT(mode)
        if stat.S_ISLNK(mode):
            raise ArchivistError(f"{label}: entry '{name}' is a symbolic link; refusing the archive")
        if kind and kind not in (stat.S_IFREG, stat.S_IFDIR):
            raise ArchivistError(f"{label}: entry '{name}' is not a regular file or folder (mode {oct(mode)}); refusing the archive")
        if info.flag_bits & 0x1:
            raise ArchivistError(f"{label}: entry '{name}' is encrypted; archivist does not audit encrypted archives")
        if info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED, zipfile.ZIP_BZIP2, zipfile.ZIP_LZMA):
            raise ArchivistError(f"{label}: entry '{name}' uses compression method {info.compress_type}, which cannot be read")
        if info.file_size < 0 or info.compress_size < 0:
            raise ArchivistError(f"{label}: entry '{name}' declares a negative size; refusing the archive")
        total += info.file_size
        if total > limits.max_total_bytes:
            raise ArchivistError(
                f"{label}: members expand to more than {_size(limits.max_total_bytes)} (cap reached at '{name}'); refusing the archive"
            )
        if info.file_size > limits.ratio_floor_bytes:
            ratio = info.file_size / max(info.compress_size, 1)
            if ratio > limits.max_ratio:
                raise ArchivistError(
                    f"{label}: entry '{name}' expands {ratio:.0f} times ({_size(info.compress_size)} to {_size(info.file_size)}), "
                    f"over the cap of {limits.max_ratio:g}; refusing the archive as a zip bomb"
                )
    _check_duplicates([(i.filename, i.is_dir()) for i in infos], label)
    _check_overlap(infos, label)
    return infos


def _check_overlap(infos: list[zipfile.ZipInfo], label: str) -> None:
    """Refuse entries whose data overlap (a zip bomb technique that reuses one compressed stream)."""
    ordered = sorted(infos, key=lambda i: i.header_offset)
    for a, b in zip(ordered, ordered[1:]):
        # 30 bytes of local header plus the name come before the data (ZIP format, APPNOTE 4.3.7).
        end = a.header_offset + 30 + len(a.filename.encode("utf-8")) + a.compress_size
        if end > b.header_offset:
            raise ArchivistError(f"{label}: entries '{a.filename}' and '{b.filename}' overlap in the zip; refusing the archive")


def _open_new(path: Path):
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_BINARY", 0)
    return os.fdopen(os.open(path, flags, 0o644), "wb")


def _inside(root: Path, rel: str) -> Path:
    target = (root / rel).resolve()
    if target != root and root not in target.parents:  # cannot happen after name_problem; belt and braces
        raise ArchivistError(f"entry '{rel}' resolves outside the extraction folder; refusing the archive")
    return target


def _too_long(label: str, rel: str, dest: Path) -> str:
    shown = rel if len(rel) <= 80 else f"{rel[:56]}...{rel[-20:]}"
    return (
        f"{label}: entry '{shown}' ({len(rel.encode())} bytes) makes a path longer than this system allows "
        f"under the temporary folder {dest.parent.parent}; refusing the archive"
    )


def _make_room(dest: Path, rel: str, label: str) -> Path:
    """The path of ``rel`` inside ``dest``, its folders created; a path too long for the system is one line."""
    try:
        target = _inside(dest, rel.rstrip("/"))
        if rel.endswith("/"):
            target.mkdir(parents=True, exist_ok=True)
        else:
            target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        if exc.errno == errno.ENAMETOOLONG:
            raise ArchivistError(_too_long(label, rel, dest)) from None
        raise ArchivistError(f"{label}: entry '{rel}' cannot be written to the private copy ({exc.strerror or exc})") from None
    return target


def _extract_zip(path: Path, infos: list[zipfile.ZipInfo], dest: Path, limits: Limits) -> list[Member]:
    label = path.name
    members: list[Member] = []
    total = 0
    try:
        zf = zipfile.ZipFile(path)
    except zipfile.BadZipFile as exc:
        raise ArchivistError(f"{label}: not a readable zip file ({exc})") from None
    with zf:
        for info in infos:
            target = _make_room(dest, info.filename, label)
            if info.is_dir():
                continue
            written = 0
            try:
                with zf.open(info) as src, _open_new(target) as out:
                    while chunk := src.read(CHUNK):
                        written += len(chunk)
                        total += len(chunk)
                        if written > info.file_size or total > limits.max_total_bytes:
                            raise ArchivistError(f"{label}: entry '{info.filename}' expands beyond its declared size; refusing the archive")
                        out.write(chunk)
            except (zipfile.BadZipFile, zlib.error, EOFError, OSError, ValueError, NotImplementedError) as exc:
                if isinstance(exc, OSError) and exc.errno == errno.ENAMETOOLONG:
                    raise ArchivistError(_too_long(label, info.filename, dest)) from None
                if isinstance(exc, FileExistsError):
                    raise ArchivistError(f"{label}: entry '{info.filename}' would overwrite another entry; refusing the archive") from None
                reason = str(exc) or type(exc).__name__
                raise ArchivistError(f"{label}: corrupt zip: entry '{info.filename}': {reason}") from None
            members.append(Member(info.filename, written, info.compress_size))
    return sorted(members, key=lambda m: m.name)


# ------------------------------------------------------------------ folder

def inspect_folder(path: Path, limits: Limits = DEFAULT_LIMITS) -> list[tuple[str, int, bool]]:
    """Walk a folder without following links; return (relative name, size, is_dir) of every entry.

    Raises ArchivistError naming the first link, special file, duplicate or cap breach.
    """
    label = path.name
    found: list[tuple[str, int, bool]] = []
    total = 0
    for dirpath, dirnames, filenames in os.walk(path, followlinks=False):
        here = Path(dirpath)
        for name in sorted(dirnames) + sorted(filenames):
            full = here / name
            rel = full.relative_to(path).as_posix()
            st = os.lstat(full)
            if stat.S_ISLNK(st.st_mode):
                raise ArchivistError(f"{label}: '{rel}' is a symbolic link; refusing the archive")
            if not (stat.S_ISREG(st.st_mode) or stat.S_ISDIR(st.st_mode)):
                raise ArchivistError(f"{label}: '{rel}' is not a regular file or folder; refusing the archive")
            why = name_problem(rel)
            if why:
                raise ArchivistError(f"{label}: '{rel}' {why}; refusing the archive")
            is_dir = stat.S_ISDIR(st.st_mode)
            found.append((rel, 0 if is_dir else st.st_size, is_dir))
            if len(found) > limits.max_members:
                raise ArchivistError(f"{label}: holds more than {limits.max_members} members, over the cap; refusing the archive")
            total += 0 if is_dir else st.st_size
            if total > limits.max_total_bytes:
                raise ArchivistError(f"{label}: holds more than {_size(limits.max_total_bytes)} (cap reached at '{rel}'); refusing the archive")
    _check_duplicates([(n, d) for n, _, d in found], label)
    return found


def _copy_folder(path: Path, entries: list[tuple[str, int, bool]], dest: Path, limits: Limits) -> list[Member]:
    label = path.name
    members = []
    total = 0
    for rel, size, is_dir in entries:
        target = _make_room(dest, rel + "/" if is_dir else rel, label)
        if is_dir:
            continue
        flags = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_BINARY", 0)
        try:
            fd = os.open(path / rel, flags)
        except OSError as exc:
            raise ArchivistError(f"{label}: '{rel}' cannot be read ({exc.strerror or exc})") from None
        written = 0
        try:
            out = _open_new(target)
        except OSError as exc:
            os.close(fd)
            if exc.errno == errno.ENAMETOOLONG:
                raise ArchivistError(_too_long(label, rel, dest)) from None
            raise ArchivistError(f"{label}: '{rel}' cannot be written to the private copy ({exc.strerror or exc})") from None
        with os.fdopen(fd, "rb") as src, out:
            if not stat.S_ISREG(os.fstat(src.fileno()).st_mode):
                raise ArchivistError(f"{label}: '{rel}' changed into something other than a file while being read; refusing the archive")
            while chunk := src.read(CHUNK):
                written += len(chunk)
                total += len(chunk)
                if total > limits.max_total_bytes:
                    raise ArchivistError(f"{label}: '{rel}' grew while being read, past {_size(limits.max_total_bytes)}; refusing the archive")
                out.write(chunk)
        members.append(Member(rel, written))
    return sorted(members, key=lambda m: m.name)


# ------------------------------------------------------------------ entry point

@contextmanager
def open_archive(path: str | Path, limits: Limits | None = None, *, workdir: str | Path | None = None) -> Iterator[OpenedArchive]:
    """Inspect an archive, copy it into a private temporary folder, yield it, remove the folder.

    Parameters
    ----------
    path
        A ``.zip`` file or a folder.
    limits
        Caps on members, size and compression ratio; :data:`DEFAULT_LIMITS` when None.
    workdir
        Where to create the temporary folder (default: the system's temporary folder).

    Raises
    ------
    ArchivistError
        The archive does not exist, is not a zip or folder, is corrupt, or breaks a rule
        above (one line naming the entry and the reason).

    Examples
    --------
    >>> with open_archive("tarrowmere-1.0.0.zip") as arc:  # doctest: +SKIP
    ...     (arc.content_root() / "bagit.txt").is_file()
    True
    """
    limits = limits or DEFAULT_LIMITS
    source = Path(path)
    if not source.exists():
        raise ArchivistError(f"{source}: no such file or folder")
    if source.is_dir():
        kind = "folder"
        entries = inspect_folder(source.resolve(), limits)
        need = sum(s for _, s, _ in entries)
    elif source.is_file():
        kind = "zip"
        infos = inspect_zip(source, limits)
        need = sum(i.file_size for i in infos)
    else:
        raise ArchivistError(f"{source}: not a zip file or a folder")
    try:
        # SIGTERM (a scheduler's time limit, `kill`) raises inside the block so the copy is removed;
        # the signal is then delivered again to whatever handled it before (by default: the process ends).
        with terminate_as_exception():
            tmp = Path(tempfile.mkdtemp(prefix="archivist-archive-", dir=workdir))
            try:
                free = shutil.disk_usage(tmp).free
                if need > free:
                    raise ArchivistError(f"{source.name}: needs {_size(need)} to extract but {tmp.parent} has {_size(free)} free")
                root = tmp / "content"
                root.mkdir()
                if kind == "folder":
                    members = _copy_folder(source.resolve(), entries, root, limits)
                else:
                    members = _extract_zip(source, infos, root, limits)
                yield OpenedArchive(source=source, kind=kind, root=root, members=members)
            finally:
                shutil.rmtree(tmp, ignore_errors=True)
    except Interrupted:
        if threading.current_thread() is threading.main_thread():
            os.kill(os.getpid(), signal.SIGTERM)
        raise


# ------------------------------------------------------------------ what GDAL may open

SQLITE_MAGIC = b"SQLite format 3\x00"  # SQLite file format, section 1.3 (header string)
SHP_MAGIC = b"\x00\x00\x27\x0a"  # ESRI Shapefile Technical Description: file code 9994, big-endian
FGB_MAGIC = b"fgb\x03"  # FlatGeobuf specification: magic bytes 'fgb' + major version 3


def sniff_vector(path: Path) -> str | None:
    """The self-contained vector format ``path`` holds judging by its first bytes, or None.

    Returns ``"sqlite"`` (GeoPackage or SQLite), ``"shapefile"``, ``"flatgeobuf"`` or
    ``"geojson"``. Anything else, such as XML that GDAL would follow to other
    files or URLs, gives None and is never opened during an audit.
    """
    try:
        with open(path, "rb") as fh:
            head = fh.read(64)
    except OSError:
        return None
    suffix = path.suffix.lower()
    if head.startswith(SQLITE_MAGIC) and suffix in (".gpkg", ".sqlite", ".db"):
        return "sqlite"
    if head.startswith(SHP_MAGIC) and suffix == ".shp":
        return "shapefile"
    if head.startswith(FGB_MAGIC) and suffix == ".fgb":
        return "flatgeobuf"
    if suffix in (".geojson", ".json"):
        text = head.lstrip(b"\xef\xbb\xbf \t\r\n")
        if text.startswith(b"{"):
            return "geojson"
    return None


# ------------------------------------------------------------------ the screen before any reader

# Suffixes of files and folders GDAL may be handed (archivist.readers.VECTOR_SUFFIXES, plus the
# SQLite and FlatGeobuf spellings sniff_vector knows).
VECTOR_LIKE = {".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gdb", ".gml", ".kml", ".sqlite", ".db"}
WORKBOOK_SUFFIXES = {".xlsx", ".xlsm"}
# Document roots through which GDAL reaches other files or network addresses: the OGR and GDAL
# virtual formats, the WMS/WCS/WFS service descriptions (GDAL documentation, "VRT -- GDAL Virtual
# Format", "OGR VRT driver", "WMS", "WCS", "WFS" driver pages).
FOLLOWING_ROOTS = (b"<OGRVRTDataSource", b"<VRTDataset", b"<GDAL_WMS", b"<WCS_GDAL", b"<OGRWFSDataSource", b"<OGRWFS3DataSource")
# GDAL's virtual file system and network prefixes (GDAL documentation, "GDAL Virtual File Systems").
VSI_PREFIXES = (b"/vsi", b"http://", b"https://", b"ftp://", b"file:")
SNIFF_BYTES = 4096
# A workbook is itself a zip: its parts are checked like an archive's members before openpyxl reads them.
WORKBOOK_LIMITS = Limits(max_members=10_000, max_total_bytes=2 * GiB, max_ratio=500.0)

LAYER_WHY = "its content is not a self-contained GeoPackage, shapefile, FlatGeobuf or GeoJSON"
FOLLOW_WHY = (
    "its content is a GDAL virtual layer or service description, which can make GDAL read files "
    "or network addresses outside the archive"
)


def workbook_problem(path: Path) -> str | None:
    """Why the spreadsheet at ``path`` must not be opened (a zip bomb, a path escape...), or None."""
    if path.suffix.lower() not in WORKBOOK_SUFFIXES:
        return None
    try:
        inspect_zip(path, WORKBOOK_LIMITS)
    except ArchivistError as exc:
        return str(exc).split(": ", 1)[-1].replace("; refusing the archive", "")
    from ..readers import workbook_xml_problem  # its XML parts: no DTD, no entities

    return workbook_xml_problem(path)


def _follows(head: bytes) -> bool:
    """True when a file begins with a virtual-file-system path or is XML whose root is one GDAL follows."""
    text = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if text.lower().startswith(VSI_PREFIXES):
        return True
    return text.startswith(b"<") and any(root in text for root in FOLLOWING_ROOTS)


def open_problem(path: Path) -> str | None:
    """Why no reader (GDAL, openpyxl) may be handed ``path`` from an untrusted archive, or None.

    A folder with a vector suffix (a File Geodatabase, say) is never opened; a
    file with a vector suffix is opened only when :func:`sniff_vector` names
    its format; a workbook must pass the zip checks; and a file of any suffix
    whose first bytes are a GDAL virtual layer, a service description or a
    virtual-file-system path is held back, since such a file only points
    elsewhere.

    Not covered: a self-contained file GDAL opens may still be malformed; the
    GDAL configuration of the untrusted opens is the second fence for that.
    """
    suffix = path.suffix.lower()
    if path.is_dir():
        if suffix in VECTOR_LIKE:
            return "it is a folder in a multi-file vector format, which is not opened in an audit"
        return None
    if not path.is_file():
        return None
    try:
        with open(path, "rb") as fh:
            head = fh.read(SNIFF_BYTES)
    except OSError as exc:
        return f"it cannot be read ({exc.strerror or exc})"
    if _follows(head):
        return FOLLOW_WHY
    if suffix in WORKBOOK_SUFFIXES:
        return workbook_problem(path)
    if suffix in VECTOR_LIKE and sniff_vector(path) is None:
        return LAYER_WHY
    return None


def screen_tree(root: Path) -> list[tuple[str, str]]:
    """Every file or folder under ``root``, at any depth, that no reader may be handed: (relative path, why).

    Folders so held are not looked into. Links cannot occur in a private copy
    made by :func:`open_archive`, and are not followed.
    """
    found: list[tuple[str, str]] = []
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        here = Path(dirpath)
        keep = []
        for name in sorted(dirnames):
            why = open_problem(here / name)
            if why:
                found.append(((here / name).relative_to(root).as_posix() + "/", why))
            else:
                keep.append(name)
        dirnames[:] = keep
        for name in sorted(filenames):
            why = open_problem(here / name)
            if why:
                found.append(((here / name).relative_to(root).as_posix(), why))
    return sorted(found)


@contextmanager
def set_aside(root: Path, entries: list[tuple[str, str]], store: Path) -> Iterator[None]:
    """Move ``entries`` (from :func:`screen_tree`) out of ``root`` into ``store`` for the block, then put them back.

    While they are away no reader can reach them, whatever walks the tree; the
    copy is whole again afterwards, for the checksum verification.
    """
    moved: list[tuple[Path, Path]] = []
    try:
        for n, (rel, _) in enumerate(entries):
            src = root / rel.rstrip("/")
            if not src.exists():
                continue  # inside a folder already set aside
            dest = store / str(n)
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.rename(src, dest)
            moved.append((src, dest))
        yield
    finally:
        for src, dest in reversed(moved):
            os.rename(dest, src)
