"""A DataCite Metadata Schema 4.5 record in DataCite's JSON form (``metadata/datacite.json``).

The property names and controlled values are those of the DataCite Metadata
Schema 4.5 and its JSON Schema (``datacite-v4.5.json``, which the ``datacite``
package ships and the tests validate against). A repository that mints the
DOI fills in ``doi``, ``publisher`` when it was not given, and ``url``.

A record without a DOI
----------------------
The JSON Schema does not require ``doi`` (its ``required`` list is creators,
titles, publisher, publicationYear, types, schemaVersion), and a DataCite
repository assigns the DOI when it registers the record. Until then the
record names the package version by an ``alternateIdentifiers`` entry of type
``URN`` holding a name-based UUID URN (``urn:uuid:...``, RFC 4122 section 4.3,
SHA-1 of the package name, version, title, year and authors), so the record
carries an identifier that the schema accepts, that is the same every time
the same version is packed, and that no one has to register.

Relation to an earlier package
------------------------------
``map.derived_from`` (written by ``archivist unpack``) names the package the
map came from. When the project was made by ``unpack``, its mark
(``.archivist-unpack.json``) lists the authors of that earlier package; the
record then says ``IsNewVersionOf`` when every earlier author is still an
author (matched by ORCID when both sides have one, otherwise by given and
family name, ignoring case; new co-authors may be added), and
``IsDerivedFrom`` otherwise: a remap of someone else's map. Without the
earlier authors (no mark, or ``derived_from`` typed by hand) the record says
``IsDerivedFrom``, which is true of both (DataCite 4.5, relationType:
IsNewVersionOf "indicates A is a new edition of B"; IsDerivedFrom "indicates
B is a source upon which A is based"; both from memory).

Works cited by compiled analyses
--------------------------------
Analyses compiled from publications cite works (``[tables.analyses]
source_field``, ``[tables.references]``). A work with a DOI is a
``relatedIdentifiers`` entry with ``relationType`` ``References`` and
``relatedIdentifierType`` ``DOI``; a work without one is a ``relatedItems``
entry (a related item described by its titles, creators and year when it
has no identifier; added in DataCite 4.4, from memory, and present in the
shipped 4.5 JSON Schema, which requires its ``titles``), ``relatedItemType``
``Text`` (:mod:`archivist.package.literature`).
"""

from __future__ import annotations

import json
import re
import uuid
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from ..identifiers import normalise_orcid
from ..vocab.licences import licence_choice
from .deposit import Author, Deposit, split_name
from .provenance import doi_of

EARLIER_MARK = ".archivist-unpack.json"  # the mark archivist unpack leaves (archivist.package.unpack.MARKER)
UUID_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_URL, "urn:archivist:package")

SCHEMA_VERSION = "http://datacite.org/schema/kernel-4"
MAX_LISTED = 20  # open errors quoted in the record


def package_urn(deposit: Deposit) -> str:
    """The name-based UUID URN of a package version (RFC 4122, version 5): the same inputs give the same URN."""
    names = "; ".join(f"{a.name}|{a.orcid or ''}" for a in deposit.authors)
    key = f"{deposit.name}\n{deposit.version}\n{deposit.title}\n{deposit.year}\n{names}"
    return uuid.uuid5(UUID_NAMESPACE, key).urn


EarlierAuthor = tuple[str, "str | None"]


def earlier_authors(root: Path) -> tuple[EarlierAuthor, ...] | None:
    """(name, ORCID or None) of the authors of the package ``root`` was unpacked from, or None when unknown."""
    mark = Path(root) / EARLIER_MARK
    try:
        if not mark.is_file() or mark.stat().st_size > 1_000_000:
            return None
        data = json.loads(mark.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    authors = data.get("authors") if isinstance(data, dict) else None
    if not isinstance(authors, list):
        return None
    out = []
    for a in authors:
        if isinstance(a, dict) and isinstance(a.get("name"), str) and a["name"].strip():
            orcid = a.get("orcid")
            out.append((a["name"], normalise_orcid(orcid) if isinstance(orcid, str) else None))
    return tuple(out)


def _name_key(name: str) -> tuple[str, str]:
    given, family = split_name(name)
    return ((given or "").casefold(), (family or "").casefold())


def same_authors(now: Sequence[Author], earlier: Sequence[EarlierAuthor]) -> bool:
    """True when every earlier author is among ``now`` (by ORCID when both have one, else by given and family name)."""
    if not earlier:
        return False
    for name, orcid in earlier:
        found = False
        for a in now:
            if orcid and a.orcid:
                found = orcid == a.orcid
            else:
                found = _name_key(name) == _name_key(a.name)
            if found:
                break
        if not found:
            return False
    return True


def relation_to_earlier(deposit: Deposit, earlier: Sequence[EarlierAuthor] | None) -> str:
    """``IsNewVersionOf`` when the earlier package's authors are all still authors, else ``IsDerivedFrom``."""
    return "IsNewVersionOf" if earlier is not None and same_authors(deposit.authors, earlier) else "IsDerivedFrom"


def creator(author: Author) -> dict[str, Any]:
    """A DataCite ``creators`` entry; the ORCID iD as its https URI."""
    out: dict[str, Any] = {"name": author.inverted, "nameType": "Personal"}
    if author.given:
        out["givenName"] = author.given
    if author.family:
        out["familyName"] = author.family
    if author.orcid:
        out["nameIdentifiers"] = [
            {"nameIdentifier": author.orcid_url, "nameIdentifierScheme": "ORCID", "schemeUri": "https://orcid.org"}
        ]
    if author.affiliation:
        out["affiliation"] = [{"name": author.affiliation}]
    return out


def datacite_record(
    deposit: Deposit,
    *,
    bbox_wgs84: tuple[float, float, float, float] | None,
    formats: list[str],
    sizes: list[str],
    technical: str,
    open_errors: list[str],
    earlier: Sequence[EarlierAuthor] | None = None,
    references: tuple[list[dict[str, Any]], list[dict[str, Any]]] = ([], []),
) -> dict[str, Any]:
    """The record; ``open_errors`` (messages) are stated in a description when the package was made with errors.

    ``earlier``: the authors of the package named by ``map.derived_from``
    (:func:`earlier_authors`), which decides the relation type.
    ``references``: (relatedIdentifiers, relatedItems) entries of the works
    the compiled analyses cite (:func:`archivist.package.literature.related`).
    """
    rec: dict[str, Any] = {
        "schemaVersion": SCHEMA_VERSION,
        "types": {"resourceTypeGeneral": "Dataset", "resourceType": "Geological map"},
        "creators": [creator(a) for a in deposit.authors],
        "titles": [{"title": deposit.title}],
        "publisher": {"name": deposit.publisher},
        "publicationYear": deposit.year,
        "subjects": [{"subject": k} for k in dict.fromkeys(deposit.keywords)],
        "dates": [{"date": deposit.created.strftime("%Y-%m-%d"), "dateType": "Created"}],
        "version": deposit.version,
        "formats": sorted(set(formats)),
        "sizes": sizes,
        "rightsList": [lic.to_datacite() for lic in deposit.licences],
        "descriptions": [
            {"description": deposit.abstract, "descriptionType": "Abstract"},
            {"description": technical, "descriptionType": "TechnicalInfo"},
        ],
    }
    choice = licence_choice(deposit.licence)
    if choice:
        rec["descriptions"].append({
            "description": (
                f"Licence: the SPDX expression '{deposit.licence}' offers a choice: the user may use the data under "
                + " or under ".join(f"'{c}'" for c in choice) + ", whichever they choose; each is listed in rightsList."
            ),
            "descriptionType": "Other",
        })
    if open_errors:
        shown = open_errors[:MAX_LISTED]
        more = f" ... and {len(open_errors) - len(shown)} more." if len(open_errors) > len(shown) else ""
        text = (
            f"Open errors: this package was made with {len(open_errors)} error(s) reported by archivist check "
            "and not fixed (all are listed in data/metadata/validation-report.json): " + " ".join(shown) + more
        )
        rec["descriptions"].append({"description": text, "descriptionType": "Other"})
    if bbox_wgs84 is not None:
        w, s, e, n = bbox_wgs84
        rec["geoLocations"] = [
            {"geoLocationBox": {"westBoundLongitude": w, "eastBoundLongitude": e, "southBoundLatitude": s, "northBoundLatitude": n}}
        ]
    if deposit.doi:
        rec["doi"] = deposit.doi
        prefix, _, suffix = deposit.doi.partition("/")
        rec["prefix"], rec["suffix"] = prefix, suffix
    else:
        rec["alternateIdentifiers"] = [{"alternateIdentifier": package_urn(deposit), "alternateIdentifierType": "URN"}]
    contact = deposit.contact_name
    if contact:
        rec["contributors"] = [{"name": contact, "contributorType": "ContactPerson"}]
    if deposit.derived_from:
        relation = relation_to_earlier(deposit, earlier)
        earlier_doi = doi_of(deposit.derived_from)
        if earlier_doi:
            rec["relatedIdentifiers"] = [{"relatedIdentifier": earlier_doi, "relatedIdentifierType": "DOI", "relationType": relation}]
        elif re.match(r"^https?://", deposit.derived_from):
            rec["relatedIdentifiers"] = [{"relatedIdentifier": deposit.derived_from, "relatedIdentifierType": "URL", "relationType": relation}]
    cited, items = references
    if cited:
        rec["relatedIdentifiers"] = rec.get("relatedIdentifiers", []) + list(cited)
    if items:
        rec["relatedItems"] = list(items)
    return rec
