"""What an archive says about itself: licence, authors, contact, lineage, description.

Read from the manifest, the Data Package descriptor, the DataCite and PROV
records, ``bag-info.txt``, and loose README, licence and ``CITATION.cff``
files, each kept as a :class:`~.facts.Statement` with where it was read.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from ...vocab.licences import recognise_licence
from ...safeparse import LimitExceeded, load_yaml
from ..source import OpenedMap
from .facts import ArchiveFacts, Statement, archive_paths, read_text, texts

LICENCE_FILE = re.compile(r"^(?:licen[cs]e|copying|rights)(?:[._-].*)?$", re.I)
README_FILE = re.compile(r"^read[ _-]?me(?:\..*)?$", re.I)
EMAIL = re.compile(r"[A-Za-z0-9._%+-]+@[A-Za-z0-9.-]+\.[A-Za-z]{2,}")
PROVENANCE_HEADING = re.compile(r"^#+\s*(methods?|lineage|provenance|sources?|history|how (?:the|this) map was made|data sources?)\b", re.I | re.M)
AUTHOR_HEADING = re.compile(r"^#+\s*(authors?|creators?|contributors?)\b", re.I | re.M)

# ------------------------------------------------------------------ licences: archivist.vocab.licences

def gather_statements(facts: ArchiveFacts, opened: OpenedMap) -> None:
    """Every statement the archive makes about its licence, authors, contact, lineage and description."""
    _, root, _ = archive_paths(opened)
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
            text = read_text(path)
            if text.strip():
                facts.licences.append(Statement(rel, text))
        elif README_FILE.match(name) and path.suffix.lower() in ("", ".txt", ".md", ".rst"):
            text = read_text(path)
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
        for lic in texts(data["license"]):
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

