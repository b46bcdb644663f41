"""Gathering :class:`~.facts.ArchiveFacts` from an opened archive: members, bag, checksum lists, layers' CRS,
then the records (:mod:`.records`) and the statements (:mod:`.statements`)."""

from __future__ import annotations

import re
from pathlib import Path

import pyproj

from ... import vectorio
from ...project import crs_label
from ...manifest import spec_paths
from ..bagcheck import file_digest, read_manifest_lines, verify_bag
from ..safe import sniff_vector
from ..source import OpenedMap, is_bag
from .facts import JSON_CAP, ArchiveFacts, Statement, archive_paths, read_text
from .records import check_datacite, check_descriptor, check_provenance
from .statements import gather_statements

# (common practice in data repositories' format guidance). The value says what to ask for.
CLOSED_FORMATS = {
    ".mxd": "an ArcMap document; ask for the layers as GeoPackage and the symbology described in the legend",
    ".mxt": "an ArcMap template; ask for the layers as GeoPackage",
    ".aprx": "an ArcGIS Pro project; ask for the layers as GeoPackage",
    ".lyr": "an ArcGIS layer file (symbology only); ask for the legend colours as a table",
    ".gdb": "an Esri File Geodatabase; ask for the layers as GeoPackage",
    ".mdb": "a Microsoft Access (personal geodatabase) file; ask for the layers as GeoPackage and tables as CSV",
    ".accdb": "a Microsoft Access database; ask for the tables as CSV",
    ".dwg": "an AutoCAD drawing; ask for the linework as GeoPackage with attributes",
    ".xls": "a legacy binary Excel workbook; ask for CSV or XLSX",
    ".doc": "a legacy binary Word document; ask for PDF/A, Markdown or plain text",
    ".e00": "an ArcInfo interchange file; ask for the layers as GeoPackage",
    ".tab": "a MapInfo table; ask for the layers as GeoPackage",
    ".wor": "a MapInfo workspace; ask for the layers as GeoPackage",
    ".ecw": "an ECW image (proprietary compression); ask for GeoTIFF",
    ".sid": "a MrSID image (proprietary compression); ask for GeoTIFF",
}
CHECKSUM_FILE = re.compile(r"^(?:(sha256|sha512|sha1|md5)sums?(?:\.txt)?|.+\.(sha256|sha512|md5))$", re.I)
# Parts of an archivist package (the packager's layout); a package lacking one is incomplete.
PACKAGE_PARTS = (
    "data/datapackage.json",
    "data/map.gpkg",
    "data/README.md",
    "data/LICENSE.txt",
    "data/CITATION.cff",
    "data/metadata/datacite.json",
    "data/metadata/provenance.json",
    "data/metadata/validation-report.json",
    "data/metadata/crs.wkt",
)


def _packed_input_folder(rel: str, root: Path) -> bool:
    """True for a folder-format dataset (a File Geodatabase) kept as handed in under a package's ``data/source/``.

    The package's map is read from its own GeoPackage; the inputs are kept
    byte for byte beside it and covered by the bag's checksums, so a folder
    format there is expected, not a file held back.
    """
    return is_bag(root) and rel.startswith("data/source/") and rel.endswith("/")


def _manifest_layer_files(opened: OpenedMap) -> set[str]:
    """Files (relative to the archive root) that the archive's manifest names as layers: an unreadable one
    is reported by ``layer-unreadable`` when the map is loaded."""
    if opened.project.manifest_path is None:
        return set()
    layers = opened.project.manifest.get("layers")
    _, root, data = archive_paths(opened)
    prefix = data.relative_to(root).as_posix() + "/" if data != root else ""
    values = layers.values() if isinstance(layers, dict) else []
    specs = [s for v in values for s in (v if isinstance(v, list) else [v])]  # [[layers.lines]] is a list
    return {prefix + str(p).replace("\\", "/") for spec in specs for p in spec_paths(spec)}  # a list of files: each


def _gather_layers(facts: ArchiveFacts, opened: OpenedMap) -> None:
    """CRS of every layer GDAL may safely open (in a package: the GeoPackage master only).

    A file or layer GDAL cannot read is never skipped silently: it goes to
    ``facts.unread`` (reported by ``archive-file-unopened``) unless the
    manifest names it, when ``layer-unreadable`` reports it already.
    """
    _, root, _ = archive_paths(opened)
    named = _manifest_layer_files(opened)
    for rel in facts.members:
        path = root / rel
        suffix = path.suffix.lower()
        as_handed_in = facts.is_package and rel.startswith("data/source/")  # beside the package's open copies
        if suffix in CLOSED_FORMATS and not as_handed_in:
            facts.closed_files.append((rel, CLOSED_FORMATS[suffix]))
        if facts.is_package and rel != "data/map.gpkg":
            continue  # the GeoJSON copies are WGS 84 by RFC 7946; source/ holds the inputs as handed in
        if suffix not in (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".sqlite"):
            continue
        if rel.rsplit("/", 1)[-1] in ("datapackage.json", "datacite.json", "provenance.json", "validation-report.json"):
            continue
        if sniff_vector(path) is None:
            if rel not in facts.held and suffix != ".json":
                facts.held.append(rel)
            continue
        try:
            with vectorio.untrusted():
                layers = vectorio.list_layers(path, label=rel)
        except vectorio.VectorReadError as exc:
            if suffix != ".json" and rel not in named:  # a .json file need not be a layer at all
                facts.unread.append((rel, f"GDAL could not read it, so its CRS was not checked ({str(exc).rstrip('.')})"))
            continue
        for name, gtype in layers:
            if gtype is None:
                continue
            try:
                with vectorio.untrusted():
                    info = vectorio.read_info(path, layer=str(name), label=rel)
            except vectorio.VectorReadError as exc:
                if rel not in named:
                    facts.unread.append((f"{rel}:{name}", f"GDAL could not read the layer, so its CRS was not checked ({str(exc).rstrip('.')})"))
                continue
            label = f"{rel}:{name}" if len(layers) > 1 or suffix == ".gpkg" else rel
            crs = info.get("crs")
            text = None
            if crs:
                try:
                    text = crs_label(pyproj.CRS.from_user_input(crs))
                except pyproj.exceptions.CRSError:
                    text = str(crs)
            facts.layer_crs.append((label, text, crs or None))
    gdb = sorted({m.group(1) for rel in facts.members if (m := re.match(r"(?i)^(.*?\.gdb)/", rel))
                  and not (facts.is_package and rel.startswith("data/source/"))})
    for g in gdb:
        facts.closed_files.append((g + "/", CLOSED_FORMATS[".gdb"]))
    crs_wkt = root / "data" / "metadata" / "crs.wkt"
    if facts.is_package and crs_wkt.is_file():
        facts.declared_crs.append(Statement("data/metadata/crs.wkt", read_text(crs_wkt).strip()))


def _verify_checksum_files(facts: ArchiveFacts, root: Path) -> None:
    """Verify loose checksum lists (``SHA256SUMS``, ``*.md5``...) in the ``sha256sum`` format."""
    for rel in facts.members:
        name = rel.rsplit("/", 1)[-1]
        m = CHECKSUM_FILE.match(name)
        if not m:
            continue
        algorithm = (m.group(1) or m.group(2)).lower()
        folder = (root / rel).parent
        facts.checksum_files.append(rel)
        entries = read_manifest_lines(read_text(root / rel, JSON_CAP), rel, lambda msg: facts.notes.append(msg))
        for target, digest in entries.items():
            path = folder / target
            shown = path.relative_to(root).as_posix()
            if not path.is_file():
                facts.checksum_missing.append((shown, f"{shown} is listed in {rel} but is not in the archive."))
                continue
            actual = file_digest(path, algorithm)
            if actual != digest:
                facts.checksum_mismatches.append(
                    (shown, f"{shown}: {algorithm.upper()} is {actual[:16]}... where {rel} records {digest[:16]}...; the file was changed or damaged.")
                )


def gather(opened: OpenedMap) -> ArchiveFacts:
    """Everything the ``archive`` rules need, from an archive opened with :func:`open_map`."""
    arc, root, _ = archive_paths(opened)
    members = []
    prefix = root.relative_to(arc.root).as_posix() + "/" if root != arc.root else ""
    for m in arc.members:
        if m.name.startswith(prefix):
            members.append(m.name[len(prefix):])
    facts = ArchiveFacts(
        label=opened.label,
        kind="package" if is_bag(root) else "archive",
        members=sorted(members),
        held=list(opened.held),
        unread=[(rel, why) for rel, why in opened.unopened if not _packed_input_folder(rel, root)],
    )
    if facts.is_package:
        facts.bag = verify_bag(root)
        facts.parts_missing = [p for p in PACKAGE_PARTS if not (root / p).is_file()]
    data = root / "data" if facts.is_package and (root / "data").is_dir() else root
    rel_prefix = "data/" if data != root else ""
    if (data / "datapackage.json").is_file():
        check_descriptor(facts, data, rel_prefix)
    for rel in ("metadata/datacite.json", "datacite.json"):
        if (data / rel).is_file():
            check_datacite(facts, data / rel, rel_prefix + rel)
            break
    for rel in ("metadata/provenance.json", "provenance.json"):
        if (data / rel).is_file():
            check_provenance(facts, data / rel, rel_prefix + rel)
            break
    _verify_checksum_files(facts, root)
    gather_statements(facts, opened)
    _gather_layers(facts, opened)
    return facts

