"""What the audit finds out about an archive (:class:`ArchiveFacts`), and the small safe readers it uses."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ...errors import ArchivistError
from ...safeparse import LimitExceeded, load_json
from ..bagcheck import BagCheck

if TYPE_CHECKING:
    from ..safe import OpenedArchive
    from ..source import OpenedMap

JSON_CAP = 64 * 1024 * 1024  # metadata files larger than this are not parsed
TEXT_CAP = 1024 * 1024  # README and licence texts: the first MiB is read


@dataclass
class Statement:
    """Something the archive says, and where: ``source`` is a file (and key) inside the archive."""

    source: str
    text: str


@dataclass(frozen=True)
class DataProblem:
    """One error frictionless found in a resource: its name, file (relative to the archive), error type and message."""

    resource: str
    file: str | None
    type: str
    message: str


@dataclass
class ArchiveFacts:
    """What the audit found out about an archive; the ``archive`` rule family reads it.

    Lists hold :class:`Statement` objects (where each fact was read) or
    problem texts, ready for a finding's message.
    """

    label: str
    kind: str  # "package" (a BagIt bag) or "archive"
    members: list[str] = field(default_factory=list)
    bag: BagCheck | None = None
    checksum_files: list[str] = field(default_factory=list)
    checksum_mismatches: list[tuple[str, str]] = field(default_factory=list)  # (file, message)
    checksum_missing: list[tuple[str, str]] = field(default_factory=list)
    descriptor: dict[str, Any] | None = None
    descriptor_source: str | None = None
    descriptor_problems: list[str] = field(default_factory=list)
    data_problems: list[DataProblem] = field(default_factory=list)
    datacite: dict[str, Any] | None = None
    datacite_source: str = "metadata/datacite.json"
    datacite_problems: list[str] = field(default_factory=list)
    provenance: dict[str, Any] | None = None
    provenance_source: str = "metadata/provenance.json"
    provenance_problems: list[str] = field(default_factory=list)
    parts_missing: list[str] = field(default_factory=list)
    licences: list[Statement] = field(default_factory=list)  # licence statements, as written
    licence_ids: list[Statement] = field(default_factory=list)  # SPDX ids recognised, with where
    authors: list[Statement] = field(default_factory=list)
    contacts: list[Statement] = field(default_factory=list)
    lineage: list[Statement] = field(default_factory=list)
    descriptions: list[Statement] = field(default_factory=list)
    layer_crs: list[tuple[str, str | None, str | None]] = field(default_factory=list)  # ("file:layer", CRS label, CRS as GDAL gave it)
    declared_crs: list[Statement] = field(default_factory=list)
    closed_files: list[tuple[str, str]] = field(default_factory=list)
    held: list[str] = field(default_factory=list)
    unread: list[tuple[str, str]] = field(default_factory=list)  # (file, why): files not opened or not read, and why
    notes: list[str] = field(default_factory=list)

    @property
    def is_package(self) -> bool:
        return self.kind == "package"


# ------------------------------------------------------------------ small readers

def read_json(path: Path, rel: str, problems: list[str]) -> Any:
    """The JSON in ``path`` read within :mod:`archivist.safeparse`'s limits, or None with the reason in ``problems``."""
    try:
        return load_json(path, rel, max_bytes=JSON_CAP)
    except LimitExceeded as exc:
        problems.append(f"{exc}.")
    except OSError as exc:
        problems.append(f"{rel} cannot be read ({exc.strerror or exc}).")
    except UnicodeDecodeError as exc:
        problems.append(f"{rel} is not UTF-8 (byte offset {exc.start}).")
    except json.JSONDecodeError as exc:
        problems.append(f"{rel} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}.")
    return None


def read_text(path: Path, cap: int = TEXT_CAP) -> str:
    with open(path, "rb") as fh:
        return fh.read(cap).decode("utf-8", errors="replace")


def texts(value: Any) -> list[str]:
    if isinstance(value, str):
        return [value] if value.strip() else []
    if isinstance(value, list):
        return [x for v in value for x in texts(v)]
    return []



def archive_paths(opened: OpenedMap) -> tuple[OpenedArchive, Path, Path]:
    """The private copy, the folder its content starts at, and the map's data folder, of a map opened from an archive."""
    if opened.archive is None or opened.root is None or opened.data is None:
        raise ArchivistError(f"{opened.label}: not opened as an archive, so it cannot be audited")
    return opened.archive, opened.root, opened.data
