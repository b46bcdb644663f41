"""Validators of the records an archive carries about itself: the Data Package descriptor, DataCite, W3C PROV.

Each fills its part of :class:`~.facts.ArchiveFacts`: the record as read,
where it was read, and the problems found. The DataCite record is validated
against the DataCite Metadata Schema 4.5 JSON Schema shipped in ``schemas/``
(so the result does not depend on what else is installed).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

import jsonschema

from ...manifest import load_schema, schema_dir
from .facts import ArchiveFacts, DataProblem, read_json

PROV_KEYS = {
    "prefix", "entity", "activity", "agent", "wasGeneratedBy", "used", "wasInformedBy", "wasStartedBy", "wasEndedBy",
    "wasInvalidatedBy", "wasDerivedFrom", "wasAttributedTo", "wasAssociatedWith", "actedOnBehalfOf", "wasInfluencedBy",
    "specializationOf", "alternateOf", "hadMember", "mentionOf", "bundle",
}  # the top-level members of a PROV-JSON document (W3C Member Submission "PROV-JSON", 2013, section 2)
# The properties a DataCite record cannot do without: the "required" list of datacite-v4.5.json in the
# datacite package (creators, titles, publisher, publicationYear, types, schemaVersion).
DATACITE_REQUIRED = ("creators", "titles", "publisher", "publicationYear", "types", "schemaVersion")
# The DataCite Metadata Schema 4.5 as JSON Schema, shipped in schemas/ (source and licence: schemas/README.md).
DATACITE_SCHEMA = "datacite-v4.5.json"
# What frictionless lets escape, besides its own FrictionlessException, from a descriptor its own
# descriptor check passed (a constraint of the wrong type, for one, ends in a TypeError while reading).
FRICTIONLESS_ESCAPES = (TypeError, ValueError, LookupError, AttributeError, ArithmeticError)


def check_descriptor(facts: ArchiveFacts, data: Path, rel_prefix: str) -> None:
    """Validate ``datapackage.json`` in ``data``: the package profile, unsafe references, then frictionless
    (the descriptor, every table against its Table Schema, foreign keys, bytes and hashes); plain file
    resources are measured by :func:`file_problems`, so memory does not grow with their number."""
    path = data / "datapackage.json"
    rel = f"{rel_prefix}datapackage.json"
    desc = read_json(path, rel, facts.descriptor_problems)
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
    from frictionless import (  # imported when an archive has a descriptor
        FrictionlessException,
        Package,
    )

    try:
        report = Package.validate_descriptor(safe)
        for e in report.errors:
            facts.descriptor_problems.append(f"{rel}: {e.message}")
        for task in report.tasks:
            for e in task.errors:
                facts.descriptor_problems.append(f"{rel}: {e.message}")
        if not report.valid:
            return
        # plain files (photos, scans: thousands of them) are measured here, streamed; frictionless keeps a
        # read buffer and a report per resource until the package is let go, which grew the audit's
        # memory with the number of files
        files, tables = _split_files(safe)
        package = Package({**safe, "resources": [r for _, r in tables]}, basepath=str(data))
        result = package.validate()
    except (FrictionlessException, *FRICTIONLESS_ESCAPES) as exc:
        facts.descriptor_problems.append(f"{rel}: the frictionless library cannot read it: {exc}")
        return
    for e in result.errors:
        facts.descriptor_problems.append(f"{rel}: {e.message}")
    found: list[tuple[int, list[DataProblem]]] = []
    order = [i for i, _ in tables] if len(result.tasks) == len(tables) else [len(safe["resources"])] * len(result.tasks)
    for i, task in zip(order, result.tasks):
        place = getattr(task, "place", None)
        file_at = f"{rel_prefix}{place}" if isinstance(place, str) else None
        found.append((i, [DataProblem(task.name or "?", file_at, e.type, e.message) for e in task.errors[:200]]))
    for i, res in files:
        found.append((i, file_problems(res, data, rel_prefix)))
    for _, problems in sorted(found, key=lambda f: f[0]):
        facts.data_problems.extend(problems)


# The hash algorithms of a Data Package resource's "hash" (Data Package v1: MD5 when unprefixed,
# otherwise "<algorithm>:<hex>") that frictionless verifies; a resource with another is left to it.
FILE_HASHES = ("md5", "sha256")


def _split_files(desc: dict[str, Any]) -> tuple[list[tuple[int, dict[str, Any]]], list[tuple[int, Any]]]:
    """The resources declared ``"type": "file"`` with one path (and a hash, if any, of :data:`FILE_HASHES`),
    and the others, each with its place in the descriptor."""
    files, others = [], []
    for i, res in enumerate(desc.get("resources") or []):
        if isinstance(res, dict) and res.get("type") == "file" and isinstance(res.get("path"), str) and _hash_of(res) is not None:
            files.append((i, res))
        else:
            others.append((i, res))
    return files, others


def _hash_of(res: dict[str, Any]) -> tuple[str, str] | tuple[()] | None:
    """``(algorithm, hex)`` of the resource's hash, ``()`` when it has none, None when it is not one of :data:`FILE_HASHES`."""
    value = res.get("hash")
    if value is None:
        return ()
    if not isinstance(value, str):
        return None
    algorithm, _, hexdigest = value.rpartition(":")
    algorithm = algorithm.lower() or "md5"
    return (algorithm, hexdigest.lower()) if algorithm in FILE_HASHES else None


def file_problems(res: dict[str, Any], data: Path, rel_prefix: str) -> list[DataProblem]:
    """A plain file resource against its descriptor: it exists, and its size and hash are the declared ones.

    The file is read once, in blocks (nothing of it is kept), and only when a hash is declared. Error types are
    frictionless's, so the archive rules treat them alike: ``scheme-error``
    (not there), ``byte-count``, ``hash-count``.
    """
    rel = res["path"]
    name = str(res.get("name") or rel)
    where = f"{rel_prefix}{rel}"
    path = data / rel
    if not path.is_file():
        return [DataProblem(name, where, "scheme-error", f"the file '{rel}' it describes is not in the package")]
    declared = _hash_of(res)
    problems = []
    if not declared:  # nothing to hash against: the size alone
        size = path.stat().st_size
    else:
        digest = hashlib.new(declared[0])
        size = 0
        with open(path, "rb") as fh:
            while block := fh.read(BLOCK):
                digest.update(block)
                size += len(block)
        if digest.hexdigest() != declared[1]:
            problems.append(DataProblem(name, where, "hash-count",
                                        f"the {declared[0]} hash of '{rel}' is {digest.hexdigest()}, not {declared[1]} as described"))
    expected = res.get("bytes")
    if isinstance(expected, int) and not isinstance(expected, bool) and expected != size:
        problems.append(DataProblem(name, where, "byte-count", f"'{rel}' holds {size} bytes, not {expected} as described"))
    return problems


BLOCK = 1024 * 1024


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


def check_datacite(facts: ArchiveFacts, path: Path, rel: str) -> None:
    """Check the DataCite record at ``path``: its mandatory properties, then the DataCite 4.5 JSON Schema."""
    record = read_json(path, rel, facts.datacite_problems)
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
    validator = jsonschema.Draft7Validator(_datacite_schema())
    for err in sorted(validator.iter_errors(record), key=lambda e: list(map(str, e.absolute_path)))[:50]:
        where = "/".join(map(str, err.absolute_path)) or "(top)"
        facts.datacite_problems.append(f"{rel}: at '{where}': {err.message} (DataCite Metadata Schema 4.5, JSON Schema in schemas/datacite-v4.5.json).")


def _datacite_schema() -> dict[str, Any]:
    """The DataCite Metadata Schema 4.5 JSON Schema shipped in ``schemas/``; its references are all inside it."""
    schema = dict(load_schema(DATACITE_SCHEMA))
    schema.pop("$id", None)  # keep $ref resolution local
    return schema


_RELATION_REFS = {
    "wasGeneratedBy": ("prov:entity", "prov:activity"),
    "used": ("prov:activity", "prov:entity"),
    "wasDerivedFrom": ("prov:generatedEntity", "prov:usedEntity"),
    "wasAttributedTo": ("prov:entity", "prov:agent"),
    "wasAssociatedWith": ("prov:activity", "prov:agent"),
    "actedOnBehalfOf": ("prov:delegate", "prov:responsible"),
    "wasInformedBy": ("prov:informed", "prov:informant"),
}


def check_provenance(facts: ArchiveFacts, path: Path, rel: str) -> None:
    """Check the PROV-JSON record at ``path``: its members, prefixes, and that relations refer to recorded records."""
    doc = read_json(path, rel, facts.provenance_problems)
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

