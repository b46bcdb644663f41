"""Provenance of a package as W3C PROV-JSON (the W3C Member Submission "PROV-JSON", 2013).

Entities: every input file (with its SHA-256), the check report, the data
files of the package and the package itself. Activities: the check and the
pack runs with their times. Agents: archivist (a software agent with its
version) and the authors (persons, by ORCID where there is one). The package
is derived from the inputs, and from an earlier package when the manifest's
``map.derived_from`` names one (a ``prov:Revision`` when it is a new version
by the same authors, see :mod:`archivist.package.datacite`; a plain
derivation for a remap of someone else's map).

Namespaces: PROV-JSON names every record by a qualified name whose prefix
stands for a namespace IRI. archivist's own terms (``archivist:sha256``,
``archivist:Package``...) and its local names are URNs (RFC 8141 syntax),
not addresses on a host archivist does not own: a URN names without
promising that anything can be fetched from it. The ORCID namespace is
ORCID's resolving URI and ``xsd`` the W3C XML Schema namespace.
"""

from __future__ import annotations

import datetime as dt
import json
import re
from pathlib import Path
from dataclasses import dataclass
from typing import Any
from urllib.parse import quote

from .._version import __version__
from ..identifiers import normalise_doi
from .deposit import Deposit, slug
from .determinism import iso

NAMESPACE = "urn:archivist:vocabulary:"


@dataclass(frozen=True)
class FileFact:
    """A file as provenance records it: path, SHA-256, size and what it is."""

    path: str
    sha256: str
    bytes: int
    role: str


def _local(text: str) -> str:
    return quote(text, safe="/._-")


class _Doc:
    def __init__(self) -> None:
        self.doc: dict[str, Any] = {}
        self._n = 0

    def add(self, kind: str, ident: str, attrs: dict[str, Any]) -> str:
        self.doc.setdefault(kind, {})[ident] = attrs
        return ident

    def relate(self, kind: str, attrs: dict[str, Any]) -> None:
        self._n += 1
        self.doc.setdefault(kind, {})[f"_:{kind}{self._n}"] = attrs


def provenance(
    deposit: Deposit,
    inputs: list[FileFact],
    outputs: list[FileFact],
    report_path: str,
    check_times: tuple[dt.datetime, dt.datetime],
    pack_times: tuple[dt.datetime, dt.datetime],
    open_errors: int,
    revision: bool = False,
    repair: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """The PROV-JSON document of one pack run.

    ``revision``: the package is a new version, by the same authors, of the
    one ``map.derived_from`` names (a ``prov:Revision``); otherwise a plain
    derivation. ``repair``: the change log of the ``archivist repair`` run
    that made the project (a repaired copy; see :func:`repair_record`): the
    run is an activity (which repairs, their thresholds, the archivist
    version, the number of changes and of defects left) that generated the
    input files and informed the check.
    """
    pkg_ns = f"urn:archivist:package:{_local(deposit.stem)}/"
    p = _Doc()
    p.doc["prefix"] = {
        "archivist": NAMESPACE,
        "input": f"urn:archivist:input:{_local(deposit.stem)}/",
        "pkg": pkg_ns,
        "orcid": "https://orcid.org/",
        "person": "urn:archivist:person:",
        "xsd": "http://www.w3.org/2001/XMLSchema#",
    }
    software = p.add(
        "agent",
        f"archivist:archivist-{_local(__version__)}",
        {"prov:type": {"$": "prov:SoftwareAgent", "type": "prov:QUALIFIED_NAME"}, "prov:label": f"archivist {__version__}", "archivist:version": __version__},
    )
    people = []
    for a in deposit.authors:
        ident = f"orcid:{a.orcid}" if a.orcid else f"person:{slug(a.name)}"
        attrs: dict[str, Any] = {"prov:type": {"$": "prov:Person", "type": "prov:QUALIFIED_NAME"}, "prov:label": a.name}
        if a.affiliation:
            attrs["archivist:affiliation"] = a.affiliation
        people.append(p.add("agent", ident, attrs))

    def entity(prefix: str, fact: FileFact, kind: str) -> str:
        return p.add(
            "entity",
            f"{prefix}:{_local(fact.path)}",
            {
                "prov:type": {"$": f"archivist:{kind}", "type": "prov:QUALIFIED_NAME"},
                "prov:label": fact.path,
                "archivist:sha256": fact.sha256,
                "archivist:bytes": {"$": str(fact.bytes), "type": "xsd:long"},
                "archivist:role": fact.role,
            },
        )

    input_ids = [entity("input", f, "InputFile") for f in inputs]
    output_ids = [entity("pkg", f, "PackageFile") for f in outputs]
    package = p.add(
        "entity",
        "pkg:package",
        {
            "prov:type": {"$": "archivist:Package", "type": "prov:QUALIFIED_NAME"},
            "prov:label": f"{deposit.title}, version {deposit.version}",
            "archivist:name": deposit.name,
            "archivist:version": deposit.version,
            "archivist:openErrors": {"$": str(open_errors), "type": "xsd:int"},
        },
    )
    report = p.add(
        "entity",
        f"pkg:{_local(report_path)}",
        {"prov:type": {"$": "archivist:ValidationReport", "type": "prov:QUALIFIED_NAME"}, "prov:label": "archivist check report"},
    )
    check = p.add(
        "activity",
        "pkg:run/check",
        {"prov:startTime": iso(check_times[0]), "prov:endTime": iso(check_times[1]), "prov:label": "archivist check"},
    )
    pack = p.add(
        "activity",
        "pkg:run/pack",
        {"prov:startTime": iso(pack_times[0]), "prov:endTime": iso(pack_times[1]), "prov:label": "archivist pack"},
    )
    for act in (check, pack):
        p.relate("wasAssociatedWith", {"prov:activity": act, "prov:agent": software})
        for ent in input_ids:
            p.relate("used", {"prov:activity": act, "prov:entity": ent})
    p.relate("used", {"prov:activity": pack, "prov:entity": report})
    p.relate("wasInformedBy", {"prov:informed": pack, "prov:informant": check})
    p.relate("wasGeneratedBy", {"prov:entity": report, "prov:activity": check, "prov:time": iso(check_times[1])})
    p.relate("wasGeneratedBy", {"prov:entity": package, "prov:activity": pack, "prov:time": iso(pack_times[1])})
    for ent in output_ids:
        p.relate("wasGeneratedBy", {"prov:entity": ent, "prov:activity": pack, "prov:time": iso(pack_times[1])})
        p.relate("hadMember", {"prov:collection": package, "prov:entity": ent})
    for ent in input_ids:
        p.relate("wasDerivedFrom", {"prov:generatedEntity": package, "prov:usedEntity": ent, "prov:activity": pack})
    for person in people:
        p.relate("wasAttributedTo", {"prov:entity": package, "prov:agent": person})
        for ent in input_ids:
            p.relate("wasAttributedTo", {"prov:entity": ent, "prov:agent": person})
    if repair is not None:
        version = str(repair.get("version", ""))
        tool = p.add(
            "agent",
            f"archivist:archivist-{_local(version)}",
            {"prov:type": {"$": "prov:SoftwareAgent", "type": "prov:QUALIFIED_NAME"}, "prov:label": f"archivist {version}", "archivist:version": version},
        )
        changes = repair.get("changes") or []
        run = p.add(
            "activity",
            "pkg:run/repair",
            {
                "prov:label": "archivist repair",
                "archivist:repairs": ", ".join(map(str, repair.get("repairs") or [])),
                "archivist:settings": json.dumps(repair.get("settings") or {}, sort_keys=True),
                "archivist:changes": {"$": str(len(changes)), "type": "xsd:int"},
                "archivist:left": {"$": str(len(repair.get("left") or [])), "type": "xsd:int"},
                "archivist:version": version,
            },
        )
        p.relate("wasAssociatedWith", {"prov:activity": run, "prov:agent": tool})
        for ent in input_ids:
            p.relate("wasGeneratedBy", {"prov:entity": ent, "prov:activity": run})
        p.relate("wasInformedBy", {"prov:informed": check, "prov:informant": run})
    if deposit.derived_from:
        earlier = p.add(
            "entity",
            f"archivist:earlier/{_local(deposit.derived_from)}",
            {
                "prov:type": {"$": "archivist:Package", "type": "prov:QUALIFIED_NAME"},
                "prov:label": deposit.derived_from,
                "archivist:identifier": deposit.derived_from,
            },
        )
        derivation: dict[str, Any] = {"prov:generatedEntity": package, "prov:usedEntity": earlier}
        if revision:
            derivation["prov:type"] = {"$": "prov:Revision", "type": "prov:QUALIFIED_NAME"}
        p.relate("wasDerivedFrom", derivation)
    return p.doc


def repair_record(root: Path, manifest: dict[str, Any]) -> dict[str, Any] | None:
    """The change log named by ``[repair] record`` in a repaired copy's manifest, or None (not a repaired copy, or no readable log)."""
    from ..errors import ArchivistError
    from ..safeparse import load_json

    rel = (manifest.get("repair") or {}).get("record")
    if not isinstance(rel, str):
        return None
    path = (Path(root) / rel).resolve()
    if Path(root).resolve() not in path.parents or not path.is_file():
        return None
    try:
        data = load_json(path, str(path))
    except (OSError, ValueError, ArchivistError):
        return None
    return data if isinstance(data, dict) and data.get("tool") == "archivist" else None


def doi_of(text: str | None) -> str | None:
    """The DOI at the end of ``text`` (bare ``10.x/y``, ``doi:``, a doi.org URL, percent-encoded or not), or None.

    ``map.derived_from`` as ``unpack`` writes it ends with the DOI after the
    last ``;``.
    """
    if not text:
        return None
    last = text.strip().rsplit(";", 1)[-1].strip()
    bare = normalise_doi(last)
    if bare is None:
        m = re.search(r"(10\.\d{4,9}(?:/|%2[Ff])\S+)$", text.strip())
        bare = normalise_doi(m.group(1)) if m else None
    return bare
