"""A DataCite Metadata Schema 4.5 record in DataCite's JSON form (``metadata/datacite.json``).

The property names and controlled values are those of the DataCite Metadata
Schema 4.5 and its JSON Schema (``datacite-v4.5.json``, which the ``datacite``
package ships and the tests validate against). A repository that mints the
DOI fills in ``doi``, ``publisher`` when it was not given, and ``url``.
"""

from __future__ import annotations

import re
from typing import Any

from .deposit import Deposit
from .provenance import doi_of

SCHEMA_VERSION = "http://datacite.org/schema/kernel-4"
MAX_LISTED = 20  # open errors quoted in the record


def creator(author) -> dict[str, Any]:
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
) -> dict[str, Any]:
    """The record; ``open_errors`` (messages) are stated in a description when the package was made with errors."""
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
    contact = deposit.contact_name
    if contact:
        rec["contributors"] = [{"name": contact, "contributorType": "ContactPerson"}]
    if deposit.derived_from:
        earlier = doi_of(deposit.derived_from)
        if earlier:
            rec["relatedIdentifiers"] = [{"relatedIdentifier": earlier, "relatedIdentifierType": "DOI", "relationType": "IsNewVersionOf"}]
        elif re.match(r"^https?://", deposit.derived_from):
            rec["relatedIdentifiers"] = [{"relatedIdentifier": deposit.derived_from, "relatedIdentifierType": "URL", "relationType": "IsDerivedFrom"}]
    return rec
