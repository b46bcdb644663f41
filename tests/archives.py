"""Archives for the audit, unpack and diff tests, built in code.

``hostile_zip`` writes the zips a hostile archive could be; ``package`` copies
a package packed once per test session from the tiny project (or the example
bundle); ``rebag`` makes a package consistent again after a test changed it
(Data Package hashes, then the bag's manifests through the ``bagit``
reference library), so that a test can break one thing at a time.
"""

from __future__ import annotations

import atexit
import hashlib
import json
import shutil
import stat
import struct
import tempfile
import zipfile
from pathlib import Path
from typing import Callable

import bagit

from builders import BUNDLE, tiny_project

_CACHE: dict[str, Path] = {}
EPOCH = "1767225600"  # 2026-01-01T00:00:00Z: packs in tests are reproducible


def _packed(kind: str) -> Path:
    """A package folder packed once per session: ``tiny`` (the tiny project) or ``bundle`` (the example bundle)."""
    if kind not in _CACHE:
        import os

        import archivist

        work = Path(tempfile.mkdtemp(prefix=f"archivist-test-{kind}-"))
        atexit.register(shutil.rmtree, work, True)
        src = tiny_project(work, name="tiny") if kind == "tiny" else BUNDLE
        out = work / "out"
        out.mkdir()
        before = os.environ.get("SOURCE_DATE_EPOCH")
        os.environ["SOURCE_DATE_EPOCH"] = EPOCH
        try:
            result = archivist.pack(src, out, zip=True)
        finally:
            if before is None:
                os.environ.pop("SOURCE_DATE_EPOCH", None)
            else:
                os.environ["SOURCE_DATE_EPOCH"] = before
        _CACHE[kind] = result.path
    return _CACHE[kind]


def package(tmp_path: Path, kind: str = "tiny", name: str | None = None) -> Path:
    """A private copy of a packed package folder, to break."""
    src = _packed(kind)
    dest = Path(tmp_path) / (name or src.name)
    dest.parent.mkdir(parents=True, exist_ok=True)
    shutil.copytree(src, dest)
    return dest


def package_zip(tmp_path: Path, kind: str = "tiny") -> Path:
    """A private copy of the zip of a packed package."""
    src = _packed(kind)
    dest = Path(tmp_path) / (src.name + ".zip")
    dest.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(src.parent / (src.name + ".zip"), dest)
    return dest


def flip_byte(path: Path, offset: int = 10) -> Path:
    raw = bytearray(Path(path).read_bytes())
    raw[offset] ^= 0x01
    Path(path).write_bytes(bytes(raw))
    return Path(path)


def edit_json(path: Path, change: Callable[[dict], None]) -> Path:
    data = json.loads(Path(path).read_text(encoding="utf-8"))
    change(data)
    Path(path).write_text(json.dumps(data, indent=2), encoding="utf-8")
    return Path(path)


def rebag(root: Path) -> Path:
    """Make the package consistent after an edit: descriptor hashes and sizes, then the bag manifests.

    The bag is re-saved by the ``bagit`` library, the reference implementation's
    own way of updating manifests and Payload-Oxum.
    """
    data = Path(root) / "data"
    desc_path = data / "datapackage.json"
    if desc_path.is_file():
        desc = json.loads(desc_path.read_text(encoding="utf-8"))
        kept = []
        for res in desc.get("resources", []):
            p = data / str(res.get("path", ""))
            if isinstance(res.get("path"), str) and p.is_file():
                raw = p.read_bytes()
                if "hash" in res:
                    res["hash"] = ("sha256:" if str(res["hash"]).startswith("sha256:") else "") + hashlib.sha256(raw).hexdigest()
                if "bytes" in res:
                    res["bytes"] = len(raw)
                kept.append(res)
            elif isinstance(res.get("path"), str) and ".." not in res["path"] and "://" not in res["path"]:
                continue  # the file was removed on purpose: so is its resource
            else:
                kept.append(res)
        desc["resources"] = kept
        desc_path.write_text(json.dumps(desc, indent=2), encoding="utf-8")
    bag = bagit.Bag(str(root))
    bag.save(manifests=True)
    return Path(root)


# ---------------------------------------------------------------- hostile zips

def zip_with(path: Path, entries: list[tuple[zipfile.ZipInfo | str, bytes]], compression=zipfile.ZIP_DEFLATED) -> Path:
    """A zip holding exactly ``entries`` (name or ZipInfo, content), duplicates included."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # zipfile warns about duplicate names, which some tests want
        with zipfile.ZipFile(path, "w", compression) as zf:
            for info, data in entries:
                zf.writestr(info, data)
    return Path(path)


def link_entry(name: str, target: str) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(name)
    info.create_system = 3  # Unix, so that the mode bits mean what they say
    info.external_attr = (stat.S_IFLNK | 0o777) << 16
    return info


def set_central_field(path: Path, member: str, field_offset: int, fmt: str, value: int) -> Path:
    """Overwrite one field of ``member``'s central directory header (ZIP format, APPNOTE 4.3.12)."""
    raw = bytearray(Path(path).read_bytes())
    name = member.encode("utf-8")
    at = 0
    while True:
        at = raw.index(b"PK\x01\x02", at)
        n = struct.unpack_from("<H", raw, at + 28)[0]
        if raw[at + 46 : at + 46 + n] == name:
            struct.pack_into(fmt, raw, at + field_offset, value)
            break
        at += 4
    Path(path).write_bytes(bytes(raw))
    return Path(path)


def tree_names(root: Path) -> set[str]:
    return {p.relative_to(root).as_posix() for p in Path(root).rglob("*")}


# ---------------------------------------------------------------- archives that try to reach outside

def vrt_over(source: str, layer: str, geometry: str = "wkbPolygon") -> str:
    """An OGR VRT document exposing ``layer`` of ``source`` with geometries from its WKT field.

    The elements are those of GDAL's "VRT -- Virtual Format" vector driver page
    (OGRVRTDataSource, OGRVRTLayer, SrcDataSource, SrcLayer, GeometryType,
    GeometryField encoding="WKT").
    """
    return (
        f'<OGRVRTDataSource><OGRVRTLayer name="{layer}"><SrcDataSource>{source}</SrcDataSource>'
        f"<SrcLayer>{Path(source).stem}</SrcLayer><GeometryType>{geometry}</GeometryType>"
        '<GeometryField encoding="WKT" field="WKT"/></OGRVRTLayer></OGRVRTDataSource>\n'
    )


def outside_secret(folder: Path, token: str) -> Path:
    """A CSV outside any archive whose unit codes are ``token``: GDAL's CSV driver reads its WKT column."""
    path = Path(folder) / "secret.csv"
    path.write_text(
        f'unit,kind,WKT\n{token},contact,"POLYGON ((0 0, 100 0, 100 100, 0 0))"\n'
        f'{token}B,fault,"POLYGON ((0 0, 100 100, 0 100, 0 0))"\n',
        encoding="utf-8",
    )
    return path


def plant_reaching_layers(root: Path, secret: Path, url: str) -> list[str]:
    """Write layers under ``root``, at several depths, that are GDAL virtual layers over ``secret`` and ``url``.

    Returns their paths relative to ``root``: each must be held back by the
    audit, with the reason.
    """
    planted = {
        "sub/units.gpkg": vrt_over(str(secret), "units"),
        "sub/deeper/units.geojson": vrt_over(f"/vsicurl/{url}", "units"),
        "sub/deeper/faults.shp": vrt_over(str(secret), "faults", "wkbLineString"),
        "sub/deeper/still/contacts.fgb": vrt_over(f"/vsicurl/{url}", "contacts", "wkbLineString"),
        "old.gdb/a00000001.gdbtable": vrt_over(str(secret), "units"),
        "notes/units.csv": vrt_over(f"/vsicurl/{url}", "units"),
    }
    for rel, text in planted.items():
        path = Path(root) / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    return sorted({r if not r.startswith("old.gdb/") else "old.gdb/" for r in planted})


def zip_folder(folder: Path, dest: Path) -> Path:
    """A zip of ``folder``'s content (its files under the folder's name), as a depositor would make it."""
    folder = Path(folder)
    with zipfile.ZipFile(dest, "w", zipfile.ZIP_DEFLATED) as zf:
        for p in sorted(folder.rglob("*")):
            if p.is_file():
                zf.write(p, f"{folder.name}/{p.relative_to(folder).as_posix()}")
    return Path(dest)
