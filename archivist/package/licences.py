"""Licences of a deposit: SPDX identifiers, their full names and canonical URLs.

The SPDX License List gives every licence a short identifier and a page at
``https://spdx.org/licenses/<id>.html`` (its canonical URL). Validity of the
identifier is checked against the ``license-expression`` package's copy of the
list (the metadata rule ``licence-unknown``); the full names below are those
of the SPDX License List for the licences open data is usually released
under (from memory). Any other valid identifier is named by its id.
"""

from __future__ import annotations

from dataclasses import dataclass

SPDX_LIST_URL = "https://spdx.org/licenses/"

# Full names as on the SPDX License List (from memory).
NAMES = {
    "CC0-1.0": "Creative Commons Zero v1.0 Universal",
    "CC-BY-4.0": "Creative Commons Attribution 4.0 International",
    "CC-BY-SA-4.0": "Creative Commons Attribution Share Alike 4.0 International",
    "CC-BY-NC-4.0": "Creative Commons Attribution Non Commercial 4.0 International",
    "CC-BY-NC-SA-4.0": "Creative Commons Attribution Non Commercial Share Alike 4.0 International",
    "CC-BY-ND-4.0": "Creative Commons Attribution No Derivatives 4.0 International",
    "CC-BY-NC-ND-4.0": "Creative Commons Attribution Non Commercial No Derivatives 4.0 International",
    "CC-BY-3.0": "Creative Commons Attribution 3.0 Unported",
    "CC-BY-SA-3.0": "Creative Commons Attribution Share Alike 3.0 Unported",
    "ODbL-1.0": "Open Data Commons Open Database License v1.0",
    "ODC-By-1.0": "Open Data Commons Attribution License v1.0",
    "PDDL-1.0": "Open Data Commons Public Domain Dedication & License 1.0",
    "OGL-UK-3.0": "Open Government Licence v3.0",
    "OGL-Canada-2.0": "Open Government Licence - Canada",
    "etalab-2.0": "Etalab Open License 2.0",
    "DL-DE-BY-2.0": "Data licence Germany – attribution – version 2.0",
    "CDLA-Permissive-2.0": "Community Data License Agreement Permissive 2.0",
    "MIT": "MIT License",
    "Apache-2.0": "Apache License 2.0",
}


@dataclass(frozen=True)
class Licence:
    spdx: str
    title: str
    url: str

    def to_datapackage(self) -> dict[str, str]:
        return {"name": self.spdx, "title": self.title, "path": self.url}

    def to_datacite(self) -> dict[str, str]:
        return {
            "rights": self.title,
            "rightsUri": self.url,
            "rightsIdentifier": self.spdx,
            "rightsIdentifierScheme": "SPDX",
            "schemeUri": SPDX_LIST_URL,
        }


def licence_ids(expression: str) -> list[str]:
    """The licence identifiers of an SPDX expression, in order, without operators or exceptions."""
    from ..rules.metadata import _spdx  # the licence list, loaded once per process

    parsed = _spdx().parse(expression, validate=False, strict=False)
    keys = []
    for sym in parsed.literals if parsed is not None else ():
        key = str(getattr(sym, "key", sym))
        key = key.split(" WITH ")[0].strip()
        if key and key not in keys:
            keys.append(key)
    low = expression.lower()
    return sorted(keys, key=lambda k: (low.find(k.lower()) % (len(low) + 1), k))


def licences(expression: str) -> list[Licence]:
    """One :class:`Licence` per identifier in ``expression``."""
    return [Licence(k, NAMES.get(k, k), f"{SPDX_LIST_URL}{k}.html") for k in licence_ids(expression)]
