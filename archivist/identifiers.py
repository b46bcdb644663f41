"""Syntax checks for persistent identifiers: ORCID iDs, DOIs and IGSN sample numbers."""

from __future__ import annotations

import re

_ORCID = re.compile(r"^(?:https?://orcid\.org/)?(\d{4})-(\d{4})-(\d{4})-(\d{3}[\dX])$")


def orcid_check_digit(base_digits: str) -> str:
    """ISO 7064 MOD 11-2 check character for the 15 base digits of an ORCID iD.

    Examples
    --------
    >>> orcid_check_digit("000000021825009")
    '7'
    """
    total = 0
    for ch in base_digits:
        total = (total + int(ch)) * 2
    result = (12 - total % 11) % 11
    return "X" if result == 10 else str(result)


def orcid_problem(value: str) -> str | None:
    """None when ``value`` is a well-formed ORCID iD with a correct check digit, else why not."""
    m = _ORCID.match(value.strip())
    if not m:
        return "is not of the form 0000-0000-0000-000X"
    digits = "".join(m.groups())
    expected = orcid_check_digit(digits[:15])
    if digits[15] != expected:
        return f"has check digit {digits[15]} where ISO 7064 MOD 11-2 gives {expected}"
    return None


# ---------------------------------------------------------------- DOI

# DOI syntax (DOI Handbook, section 2.2 "Syntax"): a prefix "10." followed by a
# registrant code of digits, optionally subdivided by further "." + digits;
# then "/"; then a suffix of any printable characters, unique under the
# prefix. DOIs are case-insensitive. The resolver and citation forms
# ("doi:", "https://doi.org/", the older "dx.doi.org") carry the same DOI.
_DOI_FORMS = re.compile(
    r"^(?:(?:https?://)?(?:dx\.)?doi\.org/|doi:\s*|info:doi/)?(?P<doi>.*)$",
    re.IGNORECASE,
)
_DOI = re.compile(r"^(?P<prefix>10\.\d+(?:\.\d+)*)/(?P<suffix>.+)$", re.IGNORECASE | re.DOTALL)


def normalise_doi(value: str) -> str | None:
    """The bare DOI ("10.xxxx/suffix") of a DOI in any usual written form, or None when it is not one.

    Examples
    --------
    >>> normalise_doi("https://doi.org/10.1000/182")
    '10.1000/182'
    >>> normalise_doi("doi:10.1000/182")
    '10.1000/182'
    """
    text = str(value).strip()
    m = _DOI_FORMS.match(text)
    bare = m.group("doi") if m else text
    return bare if doi_problem(bare) is None else None


def doi_problem(value: str) -> str | None:
    """None when ``value`` is a DOI by the DOI Handbook's syntax (any usual written form), else why not.

    Examples
    --------
    >>> doi_problem("10.1000/182") is None
    True
    >>> doi_problem("10.1000")
    'has no "/" between prefix and suffix'
    """
    text = str(value).strip()
    if not text:
        return "is empty"
    m = _DOI_FORMS.match(text)
    bare = m.group("doi") if m else text
    if not bare:
        return "has nothing after the resolver address"
    if not bare.startswith("10."):
        return 'does not begin with the DOI prefix "10." (directory indicator 10, a dot, a registrant code)'
    if "/" not in bare:
        return 'has no "/" between prefix and suffix'
    prefix, suffix = bare.split("/", 1)
    if not re.fullmatch(r"10\.\d+(?:\.\d+)*", prefix):
        return f"has prefix '{prefix}' where the registrant code after \"10.\" must be digits (optionally dot-separated)"
    if not suffix:
        return 'has an empty suffix after "/"'
    if any(ch.isspace() for ch in suffix):
        return "has white space in its suffix (usually a copy-and-paste break)"
    if any(not ch.isprintable() for ch in suffix):
        return "has a non-printable character in its suffix"
    return None


# ---------------------------------------------------------------- IGSN

# IGSN: the International Generic Sample Number. Since IGSN e.V. joined DataCite
# (from memory: around 2021-2022), new IGSN IDs are registered as DataCite DOIs, and
# the earlier IGSNs were made resolvable as DOIs under one prefix (from memory:
# 10.58052, i.e. "IGSN:XXX" -> "10.58052/XXX"). The earlier ("legacy") syntax was
# "IGSN:" + a code of letters and digits starting with the allocating agent's
# namespace (e.g. "IGSN:XXTM00002"), resolvable at igsn.org and through the
# Handle System under 10273. The character set of legacy codes is given from
# memory: letters and digits, with "-", "." and "_" tolerated after the first two
# characters.
IGSN_LEGACY_DOI_PREFIX = "10.58052"
_IGSN_CODE = re.compile(r"^[A-Za-z][A-Za-z0-9][A-Za-z0-9._-]*$")
_IGSN_FORMS = re.compile(
    r"^(?:igsn:\s*|(?:https?://)?(?:www\.)?igsn\.org/|(?:https?://)?hdl\.handle\.net/10273/|10273/)(?P<code>.*)$",
    re.IGNORECASE,
)


def igsn_problem(value: str) -> str | None:
    """None when ``value`` is an IGSN in a usual written form, else why not.

    Accepted forms: ``IGSN:XXTM00002``, ``https://igsn.org/XXTM00002``,
    ``10273/XXTM00002`` (legacy Handle), a bare code ``XXTM00002``, and any
    DOI (``10.58052/XXTM00002``, ``https://doi.org/...``), since IGSN IDs are
    now DOIs.

    Examples
    --------
    >>> igsn_problem("IGSN:XXTM00002") is None
    True
    >>> igsn_problem("10.58052/XXTM00002") is None
    True
    """
    text = str(value).strip()
    if not text:
        return "is empty"
    low = text.lower()
    if low.startswith(("10.", "doi:", "info:doi/")) or "doi.org/" in low:
        why = doi_problem(text)
        return None if why is None else f"is written as a DOI but {why}"
    m = _IGSN_FORMS.match(text)
    code = m.group("code") if m else text
    if not code:
        return "has no code after the IGSN scheme or resolver"
    if any(ch.isspace() for ch in code):
        return "has white space inside the code"
    if not _IGSN_CODE.match(code):
        if m is None and ":" in code:
            return 'is neither "IGSN:<code>", an igsn.org address nor a DOI'
        return "has a character outside letters, digits and '-', '.', '_', or does not start with two letters/digits of a namespace"
    return None
