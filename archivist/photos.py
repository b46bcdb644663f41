"""Photos and field-book scans: the files declared in ``[files.photos]`` and ``[files.fieldbooks]``.

Each kind names its files by folders or glob patterns (``paths``, relative to
the manifest) and may tie each file to a field station, by a table
(``link_table`` with ``photo_field`` and ``station_field``) or by a naming
pattern (``name_pattern = "{station}_*.jpg"``). Loading only lists the files
(name, size, media type, station); nothing is read from them. A file's
location and time come from its EXIF tags, read on demand by
:meth:`MediaSet.geotags` with Pillow (``Image.open`` reads the header, never
the pixels; ``getexif()``, the GPS IFD 0x8825 and the Exif IFD 0x8769), and
its checksum is computed when it is packed, in chunks.

For a file from an untrusted archive (``archivist audit``) the EXIF header
is parsed only when the file is within :data:`UNTRUSTED_EXIF_BYTES`, only by
Pillow's JPEG, PNG, TIFF and WebP readers, and only under Pillow's
decompression-bomb guard; nothing in a file is ever run.

Not covered: image content (nothing about what a photo shows is judged),
EXIF in formats Pillow does not read (HEIC, camera raw files), XMP sidecars,
and the GPS datum tag (GPSMapDatum): EXIF positions are taken as WGS 84, as
the EXIF 2.3 specification recommends (from memory).
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import TYPE_CHECKING, Any

import numpy as np

from .model import Hit

if TYPE_CHECKING:
    from .project import MapProject

KINDS = ("photos", "fieldbooks")
KIND_WORDS = {"photos": ("photo", "photos"), "fieldbooks": ("field-book scan", "field-book scans")}

# Media types, as registered with IANA (image/jpeg: RFC 2046; image/png, image/tiff: RFC 3302;
# application/pdf: RFC 8118; image/webp: RFC 9649; image/heic: ISO/IEC 23008-12 registration).
MEDIA_TYPES = {
    ".jpg": "image/jpeg",
    ".jpeg": "image/jpeg",
    ".png": "image/png",
    ".tif": "image/tiff",
    ".tiff": "image/tiff",
    ".webp": "image/webp",
    ".heic": "image/heic",
    ".pdf": "application/pdf",
}
SUFFIXES = {
    "photos": (".jpg", ".jpeg", ".png", ".tif", ".tiff", ".webp", ".heic"),
    "fieldbooks": (".jpg", ".jpeg", ".png", ".tif", ".tiff", ".pdf"),
}
# Formats whose EXIF Pillow reads without decoding pixels (Pillow's format names).
EXIF_FORMATS = {".jpg": "JPEG", ".jpeg": "JPEG", ".png": "PNG", ".tif": "TIFF", ".tiff": "TIFF", ".webp": "WEBP"}
UNTRUSTED_EXIF_BYTES = 256 * 1024 * 1024
"""Largest file from an untrusted archive whose EXIF is parsed: 256 MiB, above any camera JPEG (common practice)."""

# EXIF tags (EXIF 2.32, CIPA DC-008; Pillow's ExifTags names them alike).
GPS_IFD = 0x8825
EXIF_IFD = 0x8769
GPS_LAT_REF, GPS_LAT, GPS_LON_REF, GPS_LON = 1, 2, 3, 4
DATETIME_ORIGINAL, OFFSET_TIME_ORIGINAL, DATETIME = 0x9003, 0x9011, 0x0132

GLOB_CHARS = re.compile(r"[*?\[]")


def media_sets(project: MapProject) -> Iterator[tuple[str, str, MediaSet]]:
    """Each set of files the project names (photos, field-book scans): its kind, the word for one file, the set."""
    for kind, media in project.media.items():
        if isinstance(media, MediaSet):
            yield kind, KIND_WORDS[kind][0], media


def media_type(path: str | Path) -> str:
    """The media type of a photo or scan from its suffix (``application/octet-stream`` when unknown)."""
    return MEDIA_TYPES.get(PurePosixPath(str(path)).suffix.lower(), "application/octet-stream")


@dataclass(frozen=True)
class Geotag:
    """What a file's EXIF says: longitude and latitude in degrees (WGS 84), time taken, or why it could not be read."""

    lon: float | None = None
    lat: float | None = None
    taken: str | None = None  # ISO 8601, with its offset when the EXIF gives one
    problem: str | None = None

    @property
    def located(self) -> bool:
        return self.lon is not None and self.lat is not None


@dataclass(frozen=True)
class MediaFile:
    """One photo or scan: where it is, its size, and the station it is tied to (and how)."""

    kind: str
    path: Path
    rel: str  # as the project names it: relative to the manifest's folder, with /
    size: int
    station: str | None = None
    link: str = ""  # "table" (row of the link table), "name" (name pattern) or "" (not linked)
    row: int | None = None  # the link table's row, as a spreadsheet program numbers it

    @property
    def media_type(self) -> str:
        return media_type(self.path)

    @property
    def name(self) -> str:
        return self.path.name


@dataclass(frozen=True)
class MissingFile:
    """A file the link table names but no declared path holds."""

    name: str
    station: str | None
    row: int


@dataclass
class MediaSet:
    """The photos (or field-book scans) of a project, their links, and what the link table names that is not there."""

    kind: str
    spec: dict[str, Any]
    files: tuple[MediaFile, ...]
    missing: tuple[MissingFile, ...] = ()
    link_source: str | None = None  # the link table as the manifest names it
    max_exif_bytes: int | None = None  # set for files from an untrusted archive
    _tags: list[Geotag] | None = field(default=None, repr=False)

    @property
    def key(self) -> str:
        return f"files.{self.kind}"

    @property
    def linked_by(self) -> str:
        """How files are tied to stations, in words."""
        ways = []
        if self.link_source:
            ways.append(f"by the table {self.link_source}")
        if self.spec.get("name_pattern"):
            ways.append(f"by their names ({self.spec['name_pattern']})")
        return ", else ".join(ways) if ways else "not tied to stations"

    def geotags(self) -> list[Geotag]:
        """The EXIF location and time of every file, aligned with ``files``; read once, on first call."""
        if self._tags is None:
            self._tags = [read_geotag(f.path, self.max_exif_bytes) for f in self.files]
        return self._tags

    def lonlat(self) -> tuple[np.ndarray, np.ndarray]:
        """Longitudes and latitudes of the files as arrays (NaN where a file has no EXIF location)."""
        tags = self.geotags()
        lon = np.array([t.lon if t.lon is not None else np.nan for t in tags], dtype=float)
        lat = np.array([t.lat if t.lat is not None else np.nan for t in tags], dtype=float)
        return lon, lat


# ---------------------------------------------------------------- EXIF

def _degrees(value: Any, ref: Any, negative: str) -> float | None:
    """Degrees from an EXIF (degrees, minutes, seconds) triple of rationals, as Pillow gives it, and its reference letter."""
    try:
        parts = [float(v) for v in value]
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    if not parts or len(parts) > 3 or not all(math.isfinite(p) for p in parts):
        return None
    parts += [0.0] * (3 - len(parts))
    deg = parts[0] + parts[1] / 60.0 + parts[2] / 3600.0
    if isinstance(ref, bytes):
        ref = ref.decode("ascii", "replace")
    if isinstance(ref, str) and ref.strip().upper().startswith(negative):
        deg = -deg
    return deg


def _iso_time(text: Any, offset: Any) -> str | None:
    """``2024:06:11 14:03:20`` (EXIF DateTime form) as ISO 8601, with ``+02:00`` when the offset tag gives one."""
    if isinstance(text, bytes):
        text = text.decode("ascii", "replace")
    if not isinstance(text, str):
        return None
    m = re.match(r"^\s*(\d{4}):(\d{2}):(\d{2})[ T](\d{2}):(\d{2}):(\d{2})", text)
    if not m or m.group(1) == "0000":
        return None
    out = "{}-{}-{}T{}:{}:{}".format(*m.groups())
    if isinstance(offset, str) and re.fullmatch(r"[+-]\d{2}:\d{2}", offset.strip()):
        out += offset.strip()
    return out


def read_geotag(path: Path, max_bytes: int | None = None) -> Geotag:
    """The EXIF location (GPS IFD) and time taken (DateTimeOriginal, else DateTime) of the file ``path``.

    Pillow's ``Image.open`` reads the file's header only; the pixels are
    never decoded. ``max_bytes`` caps the size of a file whose EXIF is read
    (files from an untrusted archive). Files of other formats (PDF) have no
    EXIF: an empty :class:`Geotag`.
    """
    fmt = EXIF_FORMATS.get(path.suffix.lower())
    if fmt is None:
        return Geotag()
    try:
        size = path.stat().st_size
    except OSError as exc:
        return Geotag(problem=f"cannot be read ({exc.strerror or exc})")
    if max_bytes is not None and size > max_bytes:
        return Geotag(problem=f"is larger than {max_bytes // (1024 * 1024)} MiB, so its EXIF was not read")
    from PIL import Image

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # Pillow's warnings (a bomb-sized header, odd tags) become no output
            with Image.open(path, formats=[fmt]) as im:
                exif = im.getexif()
                gps = exif.get_ifd(GPS_IFD)
                sub = exif.get_ifd(EXIF_IFD)
                base_time = exif.get(DATETIME)
    except Image.DecompressionBombError:
        return Geotag(problem="declares more pixels than Pillow's decompression-bomb guard allows, so its EXIF was not read")
    except Exception as exc:  # noqa: BLE001 - any failure of the reader is one problem of this file, named
        return Geotag(problem=f"has an EXIF header Pillow cannot read ({type(exc).__name__})")
    taken = _iso_time(sub.get(DATETIME_ORIGINAL), sub.get(OFFSET_TIME_ORIGINAL)) or _iso_time(base_time, None)
    lat = _degrees(gps.get(GPS_LAT), gps.get(GPS_LAT_REF), "S") if GPS_LAT in gps else None
    lon = _degrees(gps.get(GPS_LON), gps.get(GPS_LON_REF), "W") if GPS_LON in gps else None
    if lat is not None and lon is not None and not (-90 <= lat <= 90 and -180 <= lon <= 180):
        return Geotag(taken=taken, problem=f"has EXIF GPS values out of range (latitude {lat:.6f}, longitude {lon:.6f})")
    if lat is None or lon is None:
        return Geotag(taken=taken)
    return Geotag(lon=lon, lat=lat, taken=taken)


# ---------------------------------------------------------------- finding the files

def name_regex(pattern: str) -> re.Pattern[str]:
    """A naming pattern such as ``{station}_*.jpg`` as a regular expression with a ``station`` group.

    ``*`` stands for any run of characters, ``?`` for one; case is ignored
    in the suffix only by being matched as written (file systems differ).
    """
    out = ""
    for token in re.split(r"(\{station\}|\*|\?)", pattern):
        if token == "{station}":
            out += "(?P<station>.+?)" if "(?P<station>" not in out else "(?P=station)"
        elif token == "*":
            out += ".*"
        elif token == "?":
            out += "."
        else:
            out += re.escape(token)
    return re.compile(out + r"\Z", re.S)


def _rel(root: Path, path: Path) -> str:
    try:
        return path.relative_to(root).as_posix()
    except ValueError:
        return path.as_posix()


def find_files(root: Path, kind: str, entries: list[str], where: str, problems: list[Hit]) -> list[Path]:
    """The files ``entries`` name under ``root``: folders (every file of the kind's suffixes in them, at any depth)
    and glob patterns (``photos/**/*.jpg``); hidden files are left out. An entry naming nothing is a problem."""
    found: dict[Path, None] = {}
    for i, entry in enumerate(entries):
        base = Path(entry)
        hits: list[Path] = []
        if GLOB_CHARS.search(entry):
            if base.is_absolute():
                anchor = Path(base.anchor)
                hits = sorted(p for p in anchor.glob(str(base.relative_to(anchor))) if p.is_file())
            else:
                hits = sorted(p for p in root.glob(entry) if p.is_file())
        else:
            target = base if base.is_absolute() else root / base
            if target.is_dir():
                hits = sorted(p for p in target.rglob("*") if p.is_file() and p.suffix.lower() in SUFFIXES[kind])
            elif target.is_file():
                hits = [target]
        hits = [p for p in hits if not any(part.startswith(".") for part in PurePosixPath(_rel(root, p)).parts)]
        if not hits:
            problems.append(Hit(f"{where}.paths[{i}]: '{entry}' names no file.", layer=kind, rule="layer-missing"))
        found.update(dict.fromkeys(hits))
    return list(found)


def _link_rows(root: Path, kind: str, spec: dict[str, Any], problems: list[Hit]) -> tuple[list[tuple[str, str, int]], str | None]:
    """(file as written, station, row) of the link table, and its name; empty when there is none or it cannot be read."""
    from .readers import read_table, text_column

    rel = spec.get("link_table")
    if not isinstance(rel, str):
        return [], None
    path = root / rel if not Path(rel).is_absolute() else Path(rel)
    where = f"files.{kind}.link_table"
    if not path.is_file():
        problems.append(Hit(f"{where}: file '{rel}' does not exist.", layer=kind, rule="layer-missing"))
        return [], rel
    data, hits = read_table(path, rel, spec.get("sheet"))
    problems.extend(hits)
    if data is None:
        return [], rel
    frame = data.frame
    photo_col = spec.get("photo_field") or next((c for c in ("photo", "file", "filename", "scan") if c in frame.columns), "photo")
    station_col = spec.get("station_field") or next((c for c in ("station_id", "station") if c in frame.columns), "station_id")
    for key, col in (("photo_field", photo_col), ("station_field", station_col)):
        if col not in frame.columns:
            problems.append(Hit(f"{where}: '{rel}' has no column '{col}' (set files.{kind}.{key}; columns: "
                                f"{', '.join(map(str, frame.columns))}).", layer=kind, rule="field-missing"))
            return [], rel
    names = text_column(frame[photo_col])
    stations = text_column(frame[station_col])
    lines = list(data.all_lines())
    rows = [(str(n).strip(), str(s).strip(), int(line)) for n, s, line in zip(names, stations, lines) if str(n).strip()]
    return rows, rel


def load_media(root: Path, manifest: dict[str, Any], problems: list[Hit]) -> dict[str, MediaSet]:
    """The photos and field-book scans the manifest's ``[files]`` declares, linked to their stations.

    Only names and sizes are read here. A link table row is matched to a
    file by the file's path relative to the manifest's folder, else by its
    name when one file alone bears it; rows matching no file are kept as
    :attr:`MediaSet.missing`.
    """
    out: dict[str, MediaSet] = {}
    files_spec = manifest.get("files") or {}
    for kind in KINDS:
        spec = files_spec.get(kind)
        if not isinstance(spec, dict):
            continue
        entries = spec.get("paths") or []
        entries = [entries] if isinstance(entries, str) else [e for e in entries if isinstance(e, str)]
        paths = find_files(root, kind, entries, f"files.{kind}", problems)
        rels = [_rel(root, p) for p in paths]
        rows, link_source = _link_rows(root, kind, spec, problems)
        by_rel = {r.casefold(): i for i, r in enumerate(rels)}
        by_name: dict[str, list[int]] = {}
        for i, p in enumerate(paths):
            by_name.setdefault(p.name.casefold(), []).append(i)
        station: dict[int, tuple[str | None, str, int | None]] = {}
        missing: list[MissingFile] = []
        for name, st_text, row in rows:
            key = name.replace("\\", "/").casefold()
            found = by_rel.get(key)
            if found is None:
                same = by_name.get(PurePosixPath(key).name, [])
                found = same[0] if len(same) == 1 else None
            if found is None:
                missing.append(MissingFile(name, st_text or None, row))
            elif found not in station:
                station[found] = (st_text or None, "table" if st_text else "", row)
        pattern = spec.get("name_pattern")
        regex = name_regex(pattern) if isinstance(pattern, str) and "{station}" in pattern else None
        if regex is not None:
            for i, p in enumerate(paths):
                if i in station:
                    continue
                m = regex.match(rels[i] if "/" in str(pattern) else p.name)
                if m:
                    station[i] = (m.group("station"), "name", None)
        files = []
        for i, p in enumerate(paths):
            st, how, line = station.get(i, (None, "", None))
            try:
                size = p.stat().st_size
            except OSError:
                size = 0
            files.append(MediaFile(kind, p, rels[i], size, st, how, line))
        out[kind] = MediaSet(kind, dict(spec), tuple(files), tuple(missing), link_source)
    return out


def common_folder(rels: list[str]) -> str:
    """The deepest folder holding every path of ``rels`` (with /), "" when they share none."""
    if not rels:
        return ""
    split = [PurePosixPath(r).parent.parts for r in rels]
    common: list[str] = []
    for parts in zip(*split):
        if len(set(parts)) != 1:
            break
        common.append(parts[0])
    return str(PurePosixPath(*common)) if common else ""


def package_paths(media: MediaSet) -> list[str]:
    """Where each file of ``media`` goes in a package, relative to ``data/``: ``<kind>/<path below their common folder>``.

    Paths outside the project folder keep only what follows their common
    folder, so no absolute path of the packing machine enters the package.
    """
    rels = [f.rel for f in media.files]
    base = common_folder(rels)
    out = []
    for r in rels:
        below = PurePosixPath(r).relative_to(base).as_posix() if base else r.lstrip("/")
        out.append(f"{media.kind}/{below}")
    return out
