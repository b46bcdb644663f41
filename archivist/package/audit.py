"""``archivist audit``: is someone else's archive intact, complete enough to reuse, and clean?

The archive (a zip or a folder; an archivist package or any other archive of
map data) is opened with :mod:`archivist.package.safe`, so a hostile archive
is refused before anything is extracted and nothing is ever run or imported
from it. On the private copy, :func:`gather` collects what the archive says
about itself into :class:`ArchiveFacts`:

* for a BagIt bag, the verification of every checksum (:mod:`.bag`);
* for a Data Package descriptor, its validation by the ``frictionless``
  library (structure, every table against its Table Schema, the foreign keys,
  every resource's bytes and hash) and against ``schemas/package.schema.json``
  when the package profile is there;
* the DataCite record against the mandatory properties of the DataCite
  Metadata Schema 4.x (and the schema itself when the ``datacite`` package is
  installed), the PROV-JSON record's structure;
* for any archive, the reuse-readiness facts: licence, CRS of every layer,
  legend, authors, contact, provenance, description, file formats.

The map inside is loaded as a :class:`~archivist.project.MapProject` with the
facts attached as ``project.archive``; then every rule runs on it, those of
the ``archive`` family (which need the facts) and every check family (on the
packaged data). The result is an ordinary :class:`~archivist.model.Report`.

What a clean audit does not say: that the geology is right, that the authors
had the right to license the data, or that the archive is complete in ways no
file records (a missing field season leaves no trace).
"""

from __future__ import annotations

import dataclasses
import json
import re
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

import jsonschema
import pyproj

from .. import registry, vectorio
from ..engine import run_rules
from ..errors import ArchivistError
from ..manifest import load_schema, schema_dir
from ..model import Report
from ..progress import Progress
from ..safeparse import LimitExceeded, load_json, load_yaml
from ..project import crs_label
from ..vocab.licences import recognise_licence
from .bagcheck import BagCheck, file_digest, read_manifest_lines, verify_bag
from .safe import DEFAULT_LIMITS, Limits, open_archive, sniff_vector
from .source import OpenedMap, is_bag, load_archive_project

JSON_CAP = 64 * 1024 * 1024  # metadata files larger than this are not parsed
TEXT_CAP = 1024 * 1024  # README and licence texts: the first MiB is read

# Formats with no open specification, or readable in full only by one vendor's software
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
LICENCE_FILE = re.compile(r"^(?:licen[cs]e|copying|rights)(?:[._-].*)?$", re.I)
README_FILE = re.compile(r"^read[ _-]?me(?:\..*)?$", re.I)
EMAIL = re.compile(r"[A-Za-z0-9._%+-]+@[A-Za-z0-9.-]+\.[A-Za-z]{2,}")
PROVENANCE_HEADING = re.compile(r"^#+\s*(methods?|lineage|provenance|sources?|history|how (?:the|this) map was made|data sources?)\b", re.I | re.M)
AUTHOR_HEADING = re.compile(r"^#+\s*(authors?|creators?|contributors?)\b", re.I | re.M)
PROV_KEYS = {
    "prefix", "entity", "activity", "agent", "wasGeneratedBy", "used", "wasInformedBy", "wasStartedBy", "wasEndedBy",
    "wasInvalidatedBy", "wasDerivedFrom", "wasAttributedTo", "wasAssociatedWith", "actedOnBehalfOf", "wasInfluencedBy",
    "specializationOf", "alternateOf", "hadMember", "mentionOf", "bundle",
}  # the top-level members of a PROV-JSON document (W3C Member Submission "PROV-JSON", 2013, section 2)
# The properties a DataCite record cannot do without: the "required" list of datacite-v4.5.json in the
# datacite package (creators, titles, publisher, publicationYear, types, schemaVersion).
DATACITE_REQUIRED = ("creators", "titles", "publisher", "publicationYear", "types", "schemaVersion")
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

def _read_json(path: Path, rel: str, problems: list[str]) -> Any:
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


def _read_text(path: Path, cap: int = TEXT_CAP) -> str:
    with open(path, "rb") as fh:
        return fh.read(cap).decode("utf-8", errors="replace")


def _texts(value: Any) -> list[str]:
    if isinstance(value, str):
        return [value] if value.strip() else []
    if isinstance(value, list):
        return [x for v in value for x in _texts(v)]
    return []


# ------------------------------------------------------------------ package records

def _check_descriptor(facts: ArchiveFacts, data: Path, rel_prefix: str) -> None:
    path = data / "datapackage.json"
    rel = f"{rel_prefix}datapackage.json"
    desc = _read_json(path, rel, facts.descriptor_problems)
    if not isinstance(desc, dict):
        if desc is not None:
            facts.descriptor_problems.append(f"{rel} is not a JSON object.")
        return
    facts.descriptor, facts.descriptor_source = desc, rel
    profile = schema_dir() / "package.schema.json"
    if profile.is_file():
        validator = jsonschema.Draft202012Validator(load_schema("package.schema.json"))
        for err in sorted(validator.iter_errors(desc), key=lambda e: list(map(str, e.absolute_path)))[:50]:
            where = "/".join(map(str, err.absolute_path)) or "(top)"
            facts.descriptor_problems.append(f"{rel}: at '{where}': {err.message} (package profile schemas/package.schema.json).")
    safe, unsafe = _safe_descriptor(desc, data)
    facts.descriptor_problems.extend(f"{rel}: {u}" for u in unsafe)
    facts.descriptor_problems.extend(f"{rel}: {d}" for d in _shared_paths(desc))
    try:
        from frictionless import Package
    except ImportError:  # pragma: no cover - frictionless is a dependency
        return
    try:
        report = Package.validate_descriptor(safe)
        for e in report.errors:
            facts.descriptor_problems.append(f"{rel}: {e.message}")
        for task in report.tasks:
            for e in task.errors:
                facts.descriptor_problems.append(f"{rel}: {e.message}")
        if not report.valid:
            return
        package = Package(safe, basepath=str(data))
        result = package.validate()
    except Exception as exc:  # frictionless raises its own exception types for broken descriptors
        facts.descriptor_problems.append(f"{rel}: the frictionless library cannot read it: {exc}")
        return
    for e in result.errors:
        facts.descriptor_problems.append(f"{rel}: {e.message}")
    for task in result.tasks:
        place = getattr(task, "place", None)
        for e in task.errors[:200]:
            facts.data_problems.append(DataProblem(task.name or "?", f"{rel_prefix}{place}" if isinstance(place, str) else None, e.type, e.message))


def _shared_paths(desc: dict[str, Any]) -> list[str]:
    """Files that more than one resource describes (a file listed twice hides another that is missing)."""
    owners: dict[str, list[str]] = {}
    resources = desc.get("resources")
    for i, res in enumerate(resources if isinstance(resources, list) else []):
        if not isinstance(res, dict):
            continue
        paths = res.get("path")
        for p in paths if isinstance(paths, list) else [paths]:
            if isinstance(p, str):
                owners.setdefault(p, []).append(str(res.get("name") or f"#{i + 1}"))
    return [
        f"resources {', '.join(repr(n) for n in names)} all describe the file '{p}'; each file should be one resource"
        for p, names in owners.items()
        if len(names) > 1
    ]


def _unsafe_ref(value: Any, data: Path) -> str | None:
    if not isinstance(value, str):
        return None
    if "://" in value or value.startswith(("//", "file:")):
        return f"'{value}' is a remote address"
    if value.startswith("/") or ".." in value.split("/") or "\\" in value:
        return f"'{value}' leads outside the package"
    target = (data / value).resolve()
    if data.resolve() not in target.parents:
        return f"'{value}' leads outside the package"
    return None


def _safe_descriptor(desc: dict[str, Any], data: Path) -> tuple[dict[str, Any], list[str]]:
    """A copy of the descriptor frictionless may read without leaving the package or using the network."""
    out = json.loads(json.dumps(desc))
    problems = []
    for key in ("profile", "$schema"):
        v = out.get(key)
        if isinstance(v, str) and "://" in v and "frictionlessdata.io" not in v and "datapackage.org" not in v:
            problems.append(f"{key} '{v}' points at a remote profile, which was not fetched.")
            out.pop(key)
    resources = out.get("resources")
    if not isinstance(resources, list):
        return out, problems
    kept = []
    for i, res in enumerate(resources):
        if not isinstance(res, dict):
            kept.append(res)
            continue
        name = res.get("name", f"resources[{i}]")
        bad = None
        paths = res.get("path")
        for p in paths if isinstance(paths, list) else [paths]:
            bad = bad or _unsafe_ref(p, data)
        for key in ("schema", "dialect"):
            bad = bad or _unsafe_ref(res.get(key), data)
        v = res.get("profile") or res.get("$schema")
        if isinstance(v, str) and "://" in v and "frictionlessdata.io" not in v and "datapackage.org" not in v:
            bad = bad or f"'{v}' is a remote profile"
        if bad:
            problems.append(f"resource '{name}': {bad}; it was not read.")
            continue
        kept.append(res)
    out["resources"] = kept
    return out, problems


def _check_datacite(facts: ArchiveFacts, path: Path, rel: str) -> None:
    record = _read_json(path, rel, facts.datacite_problems)
    if record is None:
        return
    if isinstance(record, dict) and isinstance(record.get("data"), dict) and isinstance(record["data"].get("attributes"), dict):
        record = record["data"]["attributes"]  # the DataCite REST API's JSON:API wrapping
    if not isinstance(record, dict):
        facts.datacite_problems.append(f"{rel} is not a JSON object.")
        return
    facts.datacite, facts.datacite_source = record, rel
    for key in DATACITE_REQUIRED:
        value = record.get(key)
        if value in (None, "", [], {}):
            facts.datacite_problems.append(f"{rel}: the mandatory property '{key}' is missing (DataCite Metadata Schema 4.x).")
    for i, c in enumerate(record.get("creators") or []):
        if not isinstance(c, dict) or not str(c.get("name", "")).strip():
            facts.datacite_problems.append(f"{rel}: creators[{i}] has no name.")
    types = record.get("types")
    if isinstance(types, dict) and not types.get("resourceTypeGeneral"):
        facts.datacite_problems.append(f"{rel}: types.resourceTypeGeneral is missing.")
    schema = _datacite_schema(str(record.get("schemaVersion", "")))
    if schema is not None:
        validator = jsonschema.Draft7Validator(schema)
        for err in sorted(validator.iter_errors(record), key=lambda e: list(map(str, e.absolute_path)))[:50]:
            where = "/".join(map(str, err.absolute_path)) or "(top)"
            facts.datacite_problems.append(f"{rel}: at '{where}': {err.message} (DataCite JSON Schema of the datacite package).")
    else:
        facts.notes.append("The DataCite record was checked for its mandatory properties only: the 'datacite' package, whose JSON Schema archivist uses, is not installed.")


def _datacite_schema(version: str) -> dict[str, Any] | None:
    """The DataCite JSON Schema shipped by the optional ``datacite`` package, closest to ``version``."""
    try:
        import importlib.resources as res

        folder = res.files("datacite") / "schemas"
    except (ImportError, ModuleNotFoundError, TypeError):
        return None
    m = re.search(r"4\.(\d+)", version)
    wanted = [f"datacite-v4.{m.group(1)}.json"] if m else []
    wanted += ["datacite-v4.5.json", "datacite-v4.3.json"]
    for name in wanted:
        f = folder / name
        if f.is_file():
            schema = json.loads(f.read_text(encoding="utf-8"))
            schema.pop("$id", None)  # keep $ref resolution local
            return _inline_refs(schema, folder)
    return None


def _inline_refs(schema: dict[str, Any], folder) -> dict[str, Any]:
    """Resolve the schema's references to its sibling files (never over the network)."""
    def walk(node):
        if isinstance(node, dict):
            ref = node.get("$ref")
            if isinstance(ref, str) and ref.endswith(".json") and "://" not in ref:
                f = folder / ref
                if f.is_file():
                    sub = json.loads(f.read_text(encoding="utf-8"))
                    sub.pop("$id", None)
                    sub.pop("$schema", None)
                    return walk(sub)
            return {k: walk(v) for k, v in node.items()}
        if isinstance(node, list):
            return [walk(v) for v in node]
        return node

    return walk(schema)


_RELATION_REFS = {
    "wasGeneratedBy": ("prov:entity", "prov:activity"),
    "used": ("prov:activity", "prov:entity"),
    "wasDerivedFrom": ("prov:generatedEntity", "prov:usedEntity"),
    "wasAttributedTo": ("prov:entity", "prov:agent"),
    "wasAssociatedWith": ("prov:activity", "prov:agent"),
    "actedOnBehalfOf": ("prov:delegate", "prov:responsible"),
    "wasInformedBy": ("prov:informed", "prov:informant"),
}


def _check_provenance(facts: ArchiveFacts, path: Path, rel: str) -> None:
    doc = _read_json(path, rel, facts.provenance_problems)
    if doc is None:
        return
    if not isinstance(doc, dict):
        facts.provenance_problems.append(f"{rel} is not a JSON object.")
        return
    facts.provenance, facts.provenance_source = doc, rel
    extra = sorted(set(doc) - PROV_KEYS)
    if extra:
        facts.provenance_problems.append(f"{rel}: '{extra[0]}' is not a PROV-JSON member.")
    prefixes = set((doc.get("prefix") or {}).keys()) | {"prov", "xsd", "_"}
    declared: set[str] = set()
    for kind in ("entity", "activity", "agent"):
        records = doc.get(kind) or {}
        if not isinstance(records, dict):
            facts.provenance_problems.append(f"{rel}: '{kind}' is not an object of records.")
            continue
        declared.update(records)
    for kind in ("entity", "activity", "agent"):
        if not doc.get(kind):
            facts.provenance_problems.append(f"{rel}: no {kind} is recorded.")
    for ident in sorted(declared):
        p = ident.split(":", 1)[0] if ":" in ident else None
        if p is not None and p not in prefixes:
            facts.provenance_problems.append(f"{rel}: '{ident}' uses the undeclared prefix '{p}'.")
    for kind, roles in _RELATION_REFS.items():
        records = doc.get(kind) or {}
        if not isinstance(records, dict):
            facts.provenance_problems.append(f"{rel}: '{kind}' is not an object of records.")
            continue
        for rid, attrs in records.items():
            if not isinstance(attrs, dict):
                continue
            for role in roles:
                ref = attrs.get(role)
                if isinstance(ref, str) and ref not in declared:
                    facts.provenance_problems.append(f"{rel}: {kind} '{rid}' refers to '{ref}' ({role}), which is not recorded.")
    if not (doc.get("wasDerivedFrom") or doc.get("wasGeneratedBy") or doc.get("used")):
        facts.provenance_problems.append(f"{rel}: records no derivation or generation: it does not say what the data came from.")


# ------------------------------------------------------------------ reuse-readiness facts

def _gather_statements(facts: ArchiveFacts, opened: OpenedMap) -> None:
    root = opened.root
    project = opened.project
    # the manifest, when the archive carries one
    if project.manifest_path is not None:
        rel = project.manifest_path.relative_to(root).as_posix()
        m = project.manifest.get("map", {})
        if isinstance(m.get("licence"), str) and m["licence"].strip():
            facts.licences.append(Statement(f"{rel} map.licence", m["licence"].strip()))
        for a in m.get("authors") or []:
            if isinstance(a, dict) and str(a.get("name", "")).strip():
                facts.authors.append(Statement(f"{rel} map.authors", str(a["name"])))
                if a.get("email"):
                    facts.contacts.append(Statement(f"{rel} map.authors", str(a["email"])))
        if isinstance(m.get("contact"), str) and m["contact"].strip():
            facts.contacts.append(Statement(f"{rel} map.contact", m["contact"]))
        if isinstance(m.get("abstract"), str) and m["abstract"].strip():
            facts.descriptions.append(Statement(f"{rel} map.abstract", m["abstract"]))
        if isinstance(m.get("derived_from"), str) and m["derived_from"].strip():
            facts.lineage.append(Statement(f"{rel} map.derived_from", m["derived_from"]))
        if isinstance(m.get("crs"), str) and m["crs"].strip():
            facts.declared_crs.append(Statement(f"{rel} map.crs", m["crs"]))
    # the Data Package descriptor
    desc = facts.descriptor
    if isinstance(desc, dict):
        src = facts.descriptor_source or "datapackage.json"
        for lic in desc.get("licenses") or []:
            if isinstance(lic, dict):
                text = " ".join(str(lic.get(k, "")) for k in ("name", "path", "title") if lic.get(k))
                if text.strip():
                    facts.licences.append(Statement(f"{src} licenses", text))
        for c in desc.get("contributors") or []:
            if isinstance(c, dict) and str(c.get("title", "")).strip():
                facts.authors.append(Statement(f"{src} contributors", str(c["title"])))
                if c.get("email"):
                    facts.contacts.append(Statement(f"{src} contributors", str(c["email"])))
        if str(desc.get("description", "")).strip():
            facts.descriptions.append(Statement(f"{src} description", str(desc["description"])))
        if desc.get("sources"):
            facts.lineage.append(Statement(f"{src} sources", json.dumps(desc["sources"])[:200]))
    # the DataCite record
    dc = facts.datacite
    if isinstance(dc, dict):
        src = facts.datacite_source
        for r in dc.get("rightsList") or []:
            if isinstance(r, dict):
                text = " ".join(str(r.get(k, "")) for k in ("rightsIdentifier", "rightsUri", "rights") if r.get(k))
                if text.strip():
                    facts.licences.append(Statement(f"{src} rightsList", text))
        for c in dc.get("creators") or []:
            if isinstance(c, dict) and str(c.get("name", "")).strip():
                facts.authors.append(Statement(f"{src} creators", str(c["name"])))
        for c in dc.get("contributors") or []:
            if isinstance(c, dict) and c.get("contributorType") == "ContactPerson":
                facts.contacts.append(Statement(f"{src} contributors", str(c.get("name", ""))))
        for d in dc.get("descriptions") or []:
            if isinstance(d, dict) and str(d.get("description", "")).strip():
                if d.get("descriptionType") == "Methods":
                    facts.lineage.append(Statement(f"{src} descriptions (Methods)", str(d["description"])))
                else:
                    facts.descriptions.append(Statement(f"{src} descriptions", str(d["description"])))
    if facts.provenance and not facts.provenance_problems:
        facts.lineage.append(Statement(facts.provenance_source, "W3C PROV record"))
    # bag-info.txt
    if facts.bag is not None:
        for key in ("Contact-Email", "Contact-Name", "Contact-Phone"):
            for v in facts.bag.info.get(key, []):
                if v.strip():
                    facts.contacts.append(Statement(f"bag-info.txt {key}", v))
        for v in facts.bag.info.get("External-Description", []):
            if v.strip():
                facts.descriptions.append(Statement("bag-info.txt External-Description", v))
    # loose files anywhere: licence, README, CITATION.cff
    for rel in facts.members:
        name = rel.rsplit("/", 1)[-1]
        path = root / rel
        if LICENCE_FILE.match(name) and path.suffix.lower() in ("", ".txt", ".md", ".rst"):
            text = _read_text(path)
            if text.strip():
                facts.licences.append(Statement(rel, text))
        elif README_FILE.match(name) and path.suffix.lower() in ("", ".txt", ".md", ".rst"):
            text = _read_text(path)
            if len(text.strip()) >= 40:
                facts.descriptions.append(Statement(rel, text[:200]))
            for m in EMAIL.findall(text):
                facts.contacts.append(Statement(rel, m))
            if PROVENANCE_HEADING.search(text):
                facts.lineage.append(Statement(rel, "a section on methods, sources or lineage"))
            section = re.search(r"^#+\s*licen[cs]e\s*$(.*?)(?=^#|\Z)", text, re.I | re.M | re.S)
            if section and section.group(1).strip():
                facts.licences.append(Statement(f"{rel} (Licence section)", section.group(1).strip()))
            if AUTHOR_HEADING.search(text):
                facts.authors.append(Statement(rel, "an authors section"))
        elif name == "CITATION.cff":
            _read_cff(facts, path, rel)
    for st in facts.licences:
        spdx = recognise_licence(st.text)
        if spdx:
            facts.licence_ids.append(Statement(st.source, spdx))


def _read_cff(facts: ArchiveFacts, path: Path, rel: str) -> None:
    import yaml

    try:
        data = load_yaml(path, rel)
    except LimitExceeded as exc:
        facts.unread.append((rel, str(exc).split(": ", 1)[-1].removesuffix("; not read")))
        return
    except (yaml.YAMLError, UnicodeDecodeError, OSError):
        facts.unread.append((rel, "it is not valid UTF-8 YAML (Citation File Format)"))
        return
    if not isinstance(data, dict):
        return
    if isinstance(data.get("license"), (str, list)):
        for lic in _texts(data["license"]):
            facts.licences.append(Statement(f"{rel} license", lic))
    for a in data.get("authors") or []:
        if isinstance(a, dict):
            name = " ".join(str(a.get(k, "")) for k in ("given-names", "family-names") if a.get(k)) or str(a.get("name", ""))
            if name.strip():
                facts.authors.append(Statement(f"{rel} authors", name))
            if a.get("email"):
                facts.contacts.append(Statement(f"{rel} authors", str(a["email"])))
    for c in data.get("contact") or []:
        if isinstance(c, dict) and (c.get("email") or c.get("name")):
            facts.contacts.append(Statement(f"{rel} contact", str(c.get("email") or c.get("name"))))
    if str(data.get("abstract", "")).strip():
        facts.descriptions.append(Statement(f"{rel} abstract", str(data["abstract"])))


def _packed_input_folder(rel: str, root: Path) -> bool:
    """True for a folder-format dataset (a File Geodatabase) kept as handed in under a package's ``data/source/``.

    The package's map is read from its own GeoPackage; the inputs are kept
    byte for byte beside it and covered by the bag's checksums, so a folder
    format there is expected, not a file held back.
    """
    return is_bag(root) and rel.startswith("data/source/") and rel.endswith("/")


def _gather_layers(facts: ArchiveFacts, opened: OpenedMap) -> None:
    """CRS of every layer GDAL may safely open (in a package: the GeoPackage master only)."""
    root = opened.root
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
                layers = vectorio.list_layers(path)
        except vectorio.VectorReadError:
            continue
        for name, gtype in layers:
            if gtype is None:
                continue
            try:
                with vectorio.untrusted():
                    info = vectorio.read_info(path, layer=str(name))
            except vectorio.VectorReadError:
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
        facts.declared_crs.append(Statement("data/metadata/crs.wkt", _read_text(crs_wkt).strip()))


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
        entries = read_manifest_lines(_read_text(root / rel, JSON_CAP), rel, lambda msg: facts.notes.append(msg))
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
    arc = opened.archive
    root = opened.root
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
        _check_descriptor(facts, data, rel_prefix)
    for rel in ("metadata/datacite.json", "datacite.json"):
        if (data / rel).is_file():
            _check_datacite(facts, data / rel, rel_prefix + rel)
            break
    for rel in ("metadata/provenance.json", "provenance.json"):
        if (data / rel).is_file():
            _check_provenance(facts, data / rel, rel_prefix + rel)
            break
    _verify_checksum_files(facts, root)
    _gather_statements(facts, opened)
    _gather_layers(facts, opened)
    return facts


# ------------------------------------------------------------------ API

def _scrub(report: Report, *roots: Path) -> Report:
    """Findings name files as they are in the archive, never by the private copy's temporary path."""
    def clean(text: str | None) -> str | None:
        if text is None:
            return None
        for root in sorted({str(r) for r in roots}, key=len, reverse=True):
            text = text.replace(root + "/", "").replace(root, ".")
        return text

    findings = tuple(dataclasses.replace(f, message=clean(f.message), layer=clean(f.layer)) for f in report.findings)
    return dataclasses.replace(report, findings=findings, notes=tuple(clean(n) for n in report.notes))


def audit(
    archive: str | Path,
    *,
    limits: Limits | None = None,
    only: Iterable[str] = (),
    rules: Iterable[str] = (),
    workdir: str | Path | None = None,
    progress: Progress | None = None,
) -> Report:
    """Audit an archive (zip or folder) and return a report in the same form as ``check``.

    Parameters
    ----------
    archive
        A zip file or a folder: an archivist package or any other archive of map data.
    limits
        Caps on members, size and compression ratio (:class:`~archivist.package.safe.Limits`);
        defaults sized for real deposits.
    only, rules
        Families and rule ids to run, as for :func:`archivist.check`; all when both are empty.
    workdir
        Where the private temporary copy is made (default: the system's temporary folder).
    progress
        A :class:`archivist.progress.Progress` told about each step; silent when None.

    Returns
    -------
    Report
        ``report.ok`` is True when the archive is fit for reuse (no errors).

    Raises
    ------
    ArchivistError
        The archive cannot be opened: no such path, not a zip, corrupt, or hostile
        (a path escape, a link, a duplicate name, over a cap).

    Examples
    --------
    >>> report = audit("tarrowmere-1.0.0.zip")  # doctest: +SKIP
    >>> report.summary.errors  # doctest: +SKIP
    0
    """
    try:
        selected = registry.select(only, rules)
    except KeyError as exc:
        raise ArchivistError(f"unknown {exc.args[0]}; 'archivist rules' lists them") from None
    limits = limits or DEFAULT_LIMITS
    progress = progress or Progress()
    with ExitStack() as stack:
        with progress.step(f"opening {Path(archive).name}"):
            arc = stack.enter_context(open_archive(archive, limits, workdir=workdir))
        with progress.step("reading the map"):
            opened = load_archive_project(arc)
        with progress.step("verifying checksums and metadata"):
            facts = gather(opened)
        project = opened.project
        project.archive = facts
        # files held back by the screen are findings of archive-file-unopened, not notes as well
        shown = tuple(f"{rel} was not opened:" for rel, _ in opened.unopened)
        project.notes = [n for n in project.notes if not n.startswith(shown)] if shown else project.notes
        if project.manifest_path is None and any(r.id == "metadata-incomplete" for r in selected):
            # its subject is archivist.toml, which this archive does not have: the archive rules report what is missing
            selected = [r for r in selected if r.id != "metadata-incomplete"]
            facts.notes.append("metadata-incomplete was not run: the archive has no archivist.toml; the archive rules say which metadata are missing.")
        report = run_rules(project, selected, progress)
        report = _scrub(report, arc.root, opened.root)
    size = sum(m.size for m in arc.members)
    what = "an archivist package (a BagIt bag)" if facts.is_package else "not a BagIt bag: read as a plain archive of map data"
    notes = [
        f"Audited a private copy of {arc.label} ({arc.kind}, {len(arc.members)} files, {size} bytes): {what}. "
        "Nothing in the archive was run or imported.",
        *facts.notes,
        *[n for n in report.notes],
    ]
    return dataclasses.replace(report, project=str(Path(archive)), notes=tuple(dict.fromkeys(notes)))
