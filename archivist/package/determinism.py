"""Reproducible output: one clock, stable JSON and text, a byte-stable zip, a fixed GeoPackage date.

``SOURCE_DATE_EPOCH`` (the reproducible-builds.org convention: whole seconds
since 1970-01-01 UTC) fixes every time a package records; without it the
current time is used. Same project + same archivist + same
``SOURCE_DATE_EPOCH`` gives the same bytes.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import stat
import zipfile
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

import pyogrio

from ..errors import ArchivistError

# The earliest time a zip entry can carry (the DOS date format starts in 1980; PKWARE APPNOTE 4.4.6).
ZIP_EPOCH = dt.datetime(1980, 1, 1, tzinfo=dt.timezone.utc)
FILE_MODE = 0o644
DIR_MODE = 0o755


def pack_time(environ: dict[str, str] | None = None) -> dt.datetime:
    """The time a package records, in UTC, to the second: ``SOURCE_DATE_EPOCH`` when set, else now.

    Raises ArchivistError when ``SOURCE_DATE_EPOCH`` is not a whole number of seconds.
    """
    env = os.environ if environ is None else environ
    raw = env.get("SOURCE_DATE_EPOCH")
    if raw is None or raw.strip() == "":
        return dt.datetime.now(dt.timezone.utc).replace(microsecond=0)
    try:
        seconds = int(raw.strip())
    except ValueError:
        raise ArchivistError(f"SOURCE_DATE_EPOCH='{raw}' is not a whole number of seconds since 1970-01-01") from None
    if seconds < 0:
        raise ArchivistError(f"SOURCE_DATE_EPOCH='{raw}' is before 1970-01-01")
    return dt.datetime.fromtimestamp(seconds, dt.timezone.utc)


def iso(t: dt.datetime) -> str:
    """RFC 3339 UTC time to the second: ``2024-06-11T09:30:00Z``."""
    return t.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def json_text(data: Any) -> str:
    """JSON with sorted keys, two-space indent, UTF-8 text and a final newline."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(path: Path, data: Any) -> None:
    write_text(path, json_text(data))


def write_text(path: Path, text: str) -> None:
    """Write UTF-8 text with ``\\n`` line ends whatever the platform."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)


@contextmanager
def gdal_date(t: dt.datetime) -> Iterator[None]:
    """Make GDAL stamp GeoPackage contents with ``t`` (``OGR_CURRENT_DATE``), restoring the setting after."""
    key = "OGR_CURRENT_DATE"
    before = pyogrio.get_gdal_config_option(key)
    stamp = t.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    pyogrio.set_gdal_config_options({key: stamp})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({key: before})


def fix_modes(root: Path) -> None:
    """Files 0644, folders 0755: permissions do not depend on the user's umask."""
    for dirpath, dirnames, filenames in os.walk(root):
        os.chmod(dirpath, DIR_MODE)
        for name in filenames:
            os.chmod(os.path.join(dirpath, name), FILE_MODE)


def zip_tree(src: Path, dest: Path, prefix: str, t: dt.datetime) -> None:
    """Zip the folder ``src`` into ``dest`` under ``prefix/``, byte-stable.

    Entries are sorted, every entry carries time ``t`` (no earlier than
    1980-01-01, the zip format's first day), Unix permissions 0644/0755 and
    the same compression; no extra fields or comments depend on the machine.
    """
    t = max(t.astimezone(dt.timezone.utc), ZIP_EPOCH)
    stamp = (t.year, t.month, t.day, t.hour, t.minute, t.second)
    entries: list[tuple[str, Path | None]] = [(prefix + "/", None)]
    for path in sorted(src.rglob("*"), key=lambda p: p.relative_to(src).as_posix()):
        rel = path.relative_to(src).as_posix()
        entries.append((f"{prefix}/{rel}/" if path.is_dir() else f"{prefix}/{rel}", None if path.is_dir() else path))
    entries.sort(key=lambda e: e[0])
    with zipfile.ZipFile(dest, "w", allowZip64=True) as zf:
        for name, member in entries:
            info = zipfile.ZipInfo(name, date_time=stamp)
            info.create_system = 3  # Unix, so the permission bits below are read
            if member is None:
                info.external_attr = (stat.S_IFDIR | DIR_MODE) << 16 | 0x10
                info.compress_type = zipfile.ZIP_STORED
                zf.writestr(info, b"")
            else:
                info.external_attr = (stat.S_IFREG | FILE_MODE) << 16
                info.compress_type = zipfile.ZIP_DEFLATED
                with open(member, "rb") as fh, zf.open(info, "w", force_zip64=member.stat().st_size > 2**31) as out:
                    while chunk := fh.read(1 << 20):
                        out.write(chunk)
