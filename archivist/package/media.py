"""Photos and field-book scans in a package: ``data/photos/``, ``data/fieldbooks/`` and their link tables.

Each file is copied into a folder of its kind, streamed in chunks with its
SHA-256 computed on the way (:func:`archivist.filebytes.copy_new_file`), so a
set of thousands of photos and tens of GB packs with flat memory. Each file
becomes a Data Package resource of type ``file`` with its media type, size
and hash; ``tables/<kind>.csv`` ties each file to its station with the
location and time its EXIF gives, and names the file's path in the project
(``original``), which ``unpack`` puts it back at.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..filebytes import copy_new_file
from ..photos import KIND_WORDS, MediaSet, package_paths
from ..progress import Progress
from .bagwrite import Hashes
from .datapackage import ResourceInfo
from .determinism import write_text

COLUMNS = ("photo", "station", "link", "taken", "lon", "lat", "mediatype", "bytes", "original")
LINK_WORDS = {"table": "link table", "name": "name pattern", "": ""}


@dataclass
class PackedMedia:
    """What was packed of one kind: the file resources, its table, the manifest entry and the README line."""

    kind: str
    files: list[ResourceInfo] = field(default_factory=list)
    table: ResourceInfo | None = None
    manifest: dict[str, Any] = field(default_factory=dict)
    readme: str = ""
    count: int = 0
    size: int = 0


def table_schema(kind: str) -> dict[str, Any]:
    """The Table Schema of ``tables/<kind>.csv``."""
    word = KIND_WORDS[kind][0]
    return {
        "fields": [
            {"name": "photo", "type": "string", "description": f"The {word}: its path in the package, relative to data/."},
            {"name": "station", "type": "string", "description": "The station it is tied to (empty: none)."},
            {"name": "link", "type": "string", "description": "How it is tied: 'link table', 'name pattern', or empty."},
            {"name": "taken", "type": "string", "description": "When it was taken, from its EXIF (DateTimeOriginal), ISO 8601."},
            {"name": "lon", "type": "number", "description": "Longitude from its EXIF GPS tags, WGS 84 degrees."},
            {"name": "lat", "type": "number", "description": "Latitude from its EXIF GPS tags, WGS 84 degrees."},
            {"name": "mediatype", "type": "string", "description": "Its media type (IANA)."},
            {"name": "bytes", "type": "integer", "description": "Its size in bytes."},
            {"name": "original", "type": "string", "description": "Its path in the project it was packed from."},
        ],
        "primaryKey": ["photo"],
    }


def _number(v: float | None) -> str:
    return "" if v is None else f"{v:.8f}".rstrip("0").rstrip(".")


def pack_media(media: MediaSet, data: Path, hashes: Hashes, progress: Progress) -> PackedMedia:
    """Copy the files of ``media`` under ``data/<kind>/`` and write ``data/tables/<kind>.csv``."""
    kind = media.kind
    out = PackedMedia(kind)
    targets = package_paths(media)
    tags = media.geotags()
    rows: list[list[str]] = []
    word, words = KIND_WORDS[kind]
    with progress.step(f"copying {words}", total=len(media.files)) as step:
        for f, rel, tag in zip(media.files, targets, tags):
            dest = data / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            digest = copy_new_file(f.path, dest)
            size = dest.stat().st_size
            hashes.record(dest, digest, size)
            out.count += 1
            out.size += size
            at = f" at station {f.station}" if f.station else ""
            out.files.append(ResourceInfo(
                rel, "", f"{f.name} ({word})",
                f"{word.capitalize()}{at}, byte for byte as handed in ({f.rel}).",
                extra={"type": "file", "mediatype": f.media_type},
            ))
            rows.append([rel, f.station or "", LINK_WORDS[f.link], tag.taken or "", _number(tag.lon), _number(tag.lat),
                         f.media_type, str(size), f.rel])
            step.advance()
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(COLUMNS)
    writer.writerows(rows)
    table_rel = f"tables/{kind}.csv"
    (data / "tables").mkdir(exist_ok=True)
    write_text(data / table_rel, buf.getvalue())
    located = sum(1 for t in tags if t.located)
    linked = sum(1 for f in media.files if f.station)
    out.table = ResourceInfo(
        table_rel, f"{kind}-links", f"{words.capitalize()} and their stations",
        f"One row per {word} in {kind}/: its station, how it is tied to it, and the time and place its EXIF gives.",
        schema=table_schema(kind),
    )
    out.manifest = {"paths": [kind], "link_table": table_rel, "photo_field": "photo", "station_field": "station"}
    how = (f"{linked} tied to a station ({media.linked_by} in the project)" if media.linked_by != "not tied to stations"
           else "not tied to stations")
    out.readme = (f"{out.count} {words if out.count != 1 else word} in `{kind}/`, {how}, {located} with an EXIF location; "
                  f"`{table_rel}` lists each with its station, time and place.")
    return out
