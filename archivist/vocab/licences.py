"""Licences: SPDX expressions, their full names and URLs, and licences named in free text.

The SPDX License List gives every licence a short identifier and a page at
``https://spdx.org/licenses/<id>.html`` (its canonical URL). Validity of an
identifier or expression is checked against the ``license-expression``
package's copy of the list (:func:`licence_problem`, used by the metadata
rule ``licence-unknown`` and by ``pack``); the full names below are those of
the SPDX License List for the licences open data is usually released under
(from memory). Any other valid identifier is named by its id.

Two kinds of identifier are valid but earn a caution (:func:`licence_cautions`,
the warnings of ``licence-unknown``): ``LicenseRef-<idstring>``, the SPDX
form for a licence not on the list (SPDX specification, annex "SPDX License
Expressions": ``[DocumentRef-<idstring>:]LicenseRef-<idstring>``), which tells
a reuser nothing about what it allows; and deprecated SPDX ids such as
``GPL-2.0``, which the SPDX list replaced (by ``GPL-2.0-only``). Which ids are
deprecated and what replaces them is read from the ``license-expression``
package's data: its licence index lists the current SPDX id of each licence
with the older SPDX ids as ``other_spdx_license_keys``, and flags licences
that are deprecated with no replacement (``is_deprecated``).
:func:`recognise_licence` reads the licence statements of an archive
(``audit``): SPDX tags and URLs, Creative Commons and Open Data Commons
URLs and names, and bare expressions.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

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


LICENCE_REF = re.compile(r"^(?:DocumentRef-[A-Za-z0-9.-]+:)?LicenseRef-[A-Za-z0-9.-]+$")
OWN_LICENCE_TITLE = "a licence of the authors' own, not on the SPDX licence list"


@dataclass(frozen=True)
class Licence:
    """One licence of an expression: its SPDX id, full name and canonical URL ("" for a ``LicenseRef-``)."""

    spdx: str
    title: str
    url: str

    @property
    def listed(self) -> bool:
        """True for an id of the SPDX licence list, False for a ``LicenseRef-`` of the authors' own."""
        return LICENCE_REF.match(self.spdx) is None

    def to_datapackage(self) -> dict[str, str]:
        """The Data Package ``licenses`` entry (no ``path`` for a licence that has no public page)."""
        out = {"name": self.spdx, "title": self.title}
        if self.url:
            out["path"] = self.url
        return out

    def to_datacite(self) -> dict[str, str]:
        """The DataCite ``rightsList`` entry; the SPDX scheme only for ids on the SPDX list."""
        if not self.listed:
            return {"rights": f"{self.spdx} ({self.title})"}
        return {
            "rights": self.title,
            "rightsUri": self.url,
            "rightsIdentifier": self.spdx,
            "rightsIdentifierScheme": "SPDX",
            "schemeUri": SPDX_LIST_URL,
        }


def licence_ids(expression: str) -> list[str]:
    """The licence identifiers of an SPDX expression, in order, without operators or exceptions."""
    parsed = spdx_licensing().parse(expression, validate=False, strict=False)
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
    out = []
    for k in licence_ids(expression):
        if LICENCE_REF.match(k):
            out.append(Licence(k, OWN_LICENCE_TITLE, ""))
        else:
            out.append(Licence(k, NAMES.get(k, k), f"{SPDX_LIST_URL}{k}.html"))
    return out


def licence_choice(expression: str) -> list[str] | None:
    """The alternatives of an expression whose top level is ``OR`` (the user may choose one), else None.

    Examples
    --------
    >>> licence_choice("CC-BY-4.0 OR ODbL-1.0")
    ['CC-BY-4.0', 'ODbL-1.0']
    >>> licence_choice("CC-BY-4.0") is None
    True
    """
    try:
        parsed = spdx_licensing().parse(expression, validate=False, strict=False)
    except _parse_errors():
        return None
    if parsed is None or type(parsed).__name__ != "OR":
        return None
    return [str(arg) for arg in parsed.args]  # ids as licence_ids() gives them (current SPDX spelling)


_TOKEN = re.compile(r"(?:DocumentRef-[A-Za-z0-9.-]+:)?[A-Za-z0-9.+-]+")
_OPERATORS = {"and", "or", "with"}


@lru_cache(maxsize=1)
def _licence_index() -> list[dict[str, Any]]:
    """license-expression's licence index (a JSON file of about 1 MB), read once per process for both its uses."""
    from license_expression import get_license_index

    return get_license_index()


@lru_cache(maxsize=1)
def _spdx_renames() -> tuple[dict[str, str], dict[str, str]]:
    """(older SPDX id -> current id, lower-cased; current id of a deprecated licence -> itself), from license-expression's index."""
    renamed: dict[str, str] = {}
    deprecated: dict[str, str] = {}
    for entry in _licence_index():
        current = entry.get("spdx_license_key")
        if not current or current.startswith("LicenseRef-"):
            continue
        if entry.get("is_deprecated"):
            deprecated[current.lower()] = current
        for old in entry.get("other_spdx_license_keys") or []:
            # Older SPDX ids only: the index also holds spellings with spaces and LicenseRef- aliases.
            if old and " " not in old and not old.startswith("LicenseRef-") and old.lower() != current.lower():
                renamed[old.lower()] = current
    return renamed, deprecated


def licence_cautions(expression: str) -> list[str]:
    """Why a valid expression may still mislead a reuser: ``LicenseRef-`` ids and deprecated SPDX ids.

    Examples
    --------
    >>> licence_cautions("GPL-2.0")
    ["'GPL-2.0' is a deprecated SPDX id; the SPDX licence list replaced it by 'GPL-2.0-only'"]
    """
    renamed, deprecated = _spdx_renames()
    out: list[str] = []
    seen: set[str] = set()
    for token in _TOKEN.findall(expression):
        low = token.lower()
        if low in _OPERATORS or low in seen:
            continue
        seen.add(low)
        if LICENCE_REF.match(token):
            out.append(
                f"'{token}' is a licence of the authors' own (LicenseRef-): reusers cannot tell from the identifier "
                "what it allows; ship its full text in the package, or use a licence on the SPDX list"
            )
        elif low in renamed:
            out.append(f"'{token}' is a deprecated SPDX id; the SPDX licence list replaced it by '{renamed[low]}'")
        elif low in deprecated:
            out.append(f"'{token}' is deprecated on the SPDX licence list")
    return out


# ---------------------------------------------------------------- validation

def _parse_errors() -> tuple[type[BaseException], ...]:
    """What the licence-expression parser raises on text it cannot read.

    Its own ExpressionError and boolean.py's ParseError; on some punctuation
    it fails inside the tokenizer with AttributeError or IndexError instead
    (seen with license-expression 30.x on inputs such as "()-").
    """
    from boolean.boolean import ParseError
    from license_expression import ExpressionError

    return (ExpressionError, ParseError, AttributeError, IndexError)


@lru_cache(maxsize=1)
def spdx_licensing() -> Any:
    """The SPDX licence list of the ``license-expression`` package, loaded once per process."""
    from license_expression import build_spdx_licensing

    return build_spdx_licensing(_licence_index())


def licence_problem(expression: str) -> str | None:
    """None when `expression` is a valid SPDX licence expression, else why not."""
    try:
        info = spdx_licensing().validate(expression, strict=True)
    except _parse_errors():  # the parser raises on some free text instead of reporting it
        return f"'{expression}' is not an SPDX licence identifier or expression"
    if info.errors:
        unknown = [s for s in info.invalid_symbols if not LICENCE_REF.match(str(s))]
        if not unknown and all("Unknown license key" in e for e in info.errors):
            return None  # only LicenseRef- ids: valid syntax (their caution is licence_cautions)
        if unknown:
            return f"'{', '.join(map(str, unknown))}' is not on the SPDX licence list"
        return "; ".join(info.errors)
    return None


# ---------------------------------------------------------------- free text

_CC = re.compile(r"creativecommons\.org/licenses/(by(?:-nc)?(?:-sa|-nd)?)/(\d\.\d)", re.I)
_CC0 = re.compile(r"creativecommons\.org/publicdomain/zero/1\.0|\bCC0\b", re.I)
_CC_NAME = re.compile(
    r"Creative Commons (Attribution(?:[- ]Non[- ]?Commercial)?(?:[- ]Share[- ]?Alike|[- ]No[- ]?Derivatives|[- ]NoDerivs)?) (\d\.\d)", re.I
)
_SPDX_EXPRESSION = re.compile(r"^\(?[A-Za-z0-9.+-]+\)?(?:\s+(?:AND|OR|WITH)\s+\(?[A-Za-z0-9.+-]+\)?)*$")
_SPDX_TAG = re.compile(r"SPDX-License-Identifier:\s*([^\r\n]+)", re.I)
_SPDX_URL = re.compile(r"spdx\.org/licenses/([A-Za-z0-9.+-]+?)(?:\.html|\.json)?(?:[\s\"')#]|$)", re.I)
_NAMED = [
    (re.compile(r"opendatacommons\.org/licenses/odbl|Open Database Licen[cs]e", re.I), "ODbL-1.0"),
    (re.compile(r"opendatacommons\.org/licenses/by/|Open Data Commons Attribution Licen[cs]e", re.I), "ODC-By-1.0"),
    (re.compile(r"opendatacommons\.org/licenses/pddl|Public Domain Dedication and Licen[cs]e", re.I), "PDDL-1.0"),
    (re.compile(r"Open Government Licen[cs]e,? v(?:ersion)?\s*3\.0", re.I), "OGL-UK-3.0"),
]


def recognise_licence(text: str) -> str | None:
    """The SPDX expression a licence statement names, or None when it names none archivist knows.

    Reads an ``SPDX-License-Identifier:`` line, an SPDX list URL, a Creative
    Commons or Open Data Commons URL or full name, or a bare SPDX expression.
    Every candidate is checked against the SPDX licence list.
    """
    candidates: list[str] = []
    m = _SPDX_TAG.search(text)
    if m:
        candidates.append(m.group(1).strip())
    candidates += [u for u in _SPDX_URL.findall(text)]
    for kind, version in _CC.findall(text):
        candidates.append(f"CC-{kind.upper()}-{version}")
    for name, version in _CC_NAME.findall(text):
        low = name.lower().replace("-", " ")
        code = "BY" + ("-NC" if "non" in low else "") + ("-SA" if "share" in low else "") + ("-ND" if "deriv" in low else "")
        candidates.append(f"CC-{code}-{version}")
    if _CC0.search(text):
        candidates.append("CC0-1.0")
    for pattern, spdx in _NAMED:
        if pattern.search(text):
            candidates.append(spdx)
    first = text.strip().splitlines()[0].strip() if text.strip() else ""
    if first and len(first) < 80:
        candidates.append(first)
    for c in candidates:
        if not c or not _SPDX_EXPRESSION.match(c.strip()):
            continue
        try:
            if licence_problem(c.strip()) is None:
                return c.strip()
        except _parse_errors():  # the parser can fail on odd input; then it names no licence
            continue
    return None
