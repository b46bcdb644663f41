"""Syntax checks for persistent identifiers: ORCID iDs, DOIs and IGSN sample numbers."""

from __future__ import annotations

import re

# ORCID iD (ORCID support article "Structure of the ORCID Identifier"): 16
# characters in four groups of four, the last one a check character computed
# with ISO 7064 MOD 11-2, "X" standing for 10. ORCID writes the iD as the URI
# https://orcid.org/0000-0002-1825-0097; people also write it bare, without
# the scheme ("orcid.org/..."), with http:// or www., and with a lower-case
# check character "x". All of these are read; the output is always the
# canonical form (upper-case X; the https URI where a URI is wanted).
_ORCID = re.compile(
    r"^(?:(?:https?://)?(?:www\.)?orcid\.org/)?(\d{4})-(\d{4})-(\d{4})-(\d{3}[\dXx])/?$",
    re.IGNORECASE,
)
ORCID_URI = "https://orcid.org/"


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
    """None when ``value`` is a well-formed ORCID iD with a correct check character, else why not.

    Examples
    --------
    >>> orcid_problem("orcid.org/0000-0002-1825-0097") is None
    True
    """
    m = _ORCID.match(str(value).strip())
    if not m:
        return "is not of the form 0000-0000-0000-000X (optionally after https://orcid.org/)"
    digits = "".join(m.groups()).upper()
    expected = orcid_check_digit(digits[:15])
    if digits[15] != expected:
        return f"has check digit {digits[15]} where ISO 7064 MOD 11-2 gives {expected}"
    return None


def normalise_orcid(value: str) -> str | None:
    """The bare iD ``0000-0000-0000-000X`` (upper-case X) of an ORCID iD in any usual form, or None when it is not one.

    Examples
    --------
    >>> normalise_orcid("https://orcid.org/0000-0002-1694-233x")
    '0000-0002-1694-233X'
    """
    if orcid_problem(value) is not None:
        return None
    m = _ORCID.match(str(value).strip())
    assert m is not None
    return "-".join(m.groups()).upper()


def orcid_uri(value: str) -> str | None:
    """The canonical ORCID URI ``https://orcid.org/0000-0000-0000-000X`` of an iD in any usual form, or None."""
    bare = normalise_orcid(value)
    return f"{ORCID_URI}{bare}" if bare else None


# ---------------------------------------------------------------- DOI

# DOI syntax (DOI Handbook, section 2.2 "Syntax"): a prefix "10." followed by a
# registrant code of digits, optionally subdivided by further "." + digits;
# then "/"; then a suffix of any printable characters, unique under the
# prefix. DOIs are case-insensitive. The resolver and citation forms
# ("doi:", "https://doi.org/", the older "http://dx.doi.org/", "info:doi/")
# carry the same DOI. In a URL the DOI is percent-encoded (DOI Handbook,
# section 2.5.2.4 and appendix "Encoding rules for URLs"), so a resolver
# address, or a DOI copied from one, may carry "%2F" for the slash and other
# %xx escapes; they are decoded.
_DOI_FORMS = re.compile(
    r"^(?:(?:https?://)?(?:dx\.|www\.)?doi\.org/|doi:\s*|info:doi/)?(?P<doi>.*)$",
    re.IGNORECASE | re.DOTALL,
)
_DOI = re.compile(r"^(?P<prefix>10\.\d+(?:\.\d+)*)/(?P<suffix>.+)$", re.IGNORECASE | re.DOTALL)
_PERCENT = re.compile(r"%[0-9A-Fa-f]{2}")
DOI_URI = "https://doi.org/"


def _bare_doi(value: str) -> str:
    """``value`` without its resolver or scheme, percent-escapes decoded."""
    from urllib.parse import unquote

    text = str(value).strip()
    m = _DOI_FORMS.match(text)
    bare = m.group("doi") if m else text
    if _PERCENT.search(bare):
        bare = unquote(bare)
    return bare


def normalise_doi(value: str) -> str | None:
    """The bare DOI ("10.xxxx/suffix") of a DOI in any usual written form, or None when it is not one.

    Examples
    --------
    >>> normalise_doi("https://doi.org/10.1000/182")
    '10.1000/182'
    >>> normalise_doi("doi:10.1000%2F182")
    '10.1000/182'
    """
    return _bare_doi(value) if doi_problem(value) is None else None


def doi_uri(value: str) -> str | None:
    """The ``https://doi.org/`` URI of a DOI in any usual written form, or None.

    The DOI is percent-encoded for the URI where RFC 3986 needs it (the slash
    after the prefix and further slashes stay as they are).
    """
    from urllib.parse import quote

    bare = normalise_doi(value)
    return f"{DOI_URI}{quote(bare, safe='/:;()._-')}" if bare else None


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
    bare = _bare_doi(text)
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

# IGSN: the International Generic Sample Number. IGSN IDs are DOIs registered
# through DataCite ("IGSN IDs are functionally DataCite DOIs", DataCite IGSN
# FAQ), each allocating agent under its own DOI prefix ("Each IGSN allocating
# agent has their own unique DOI prefix", SESAR2 "IGSN changes" page). A DOI
# is therefore an IGSN only when it says so or when its prefix is one that
# IGSN allocating agents use. The written forms (DataCite, "Displaying IGSN
# IDs"): the URL https://doi.org/<prefix>/<code>, the short form
# igsn:<prefix>/<code>, or, where needed, only the code as igsn:<code>; the
# "igsn:" tag may be left out where a column is clearly marked as IGSNs, which
# archivist accepts for the prefix-and-code form only. A code alone with no
# "igsn:" tag is not accepted: nothing tells it from a local sample number.
# Legacy IGSNs (before DataCite) were written "IGSN:" + a code starting with
# the allocating agent's namespace (IGSN:XXTM00002), and resolved at igsn.org
# and through the Handle System under 10273 (the Handle prefix from memory);
# they still resolve (DataCite IGSN FAQ), so those forms are accepted.
IGSN_DOI_PREFIXES = {
    "10.58052": "SESAR2 shared prefix (geosamples.org, 'IGSN changes')",
    "10.58030": "Kiel University (igsn.uni-kiel.de, 'IGSN ID' specification example)",
    "10.21384": "the example prefix of DataCite's 'Displaying IGSN IDs' (igsn:10.21384/AU1234)",
    "10.60516": "from memory (an Australian allocating agent); not confirmed in a published source",
}
IGSN_LEGACY_DOI_PREFIX = "10.58052"
_IGSN_CODE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9][A-Za-z0-9._-]*$")
_IGSN_TAG = re.compile(r"^igsn:\s*(?P<rest>.*)$", re.IGNORECASE | re.DOTALL)
_IGSN_LEGACY = re.compile(
    r"^(?:(?:https?://)?(?:www\.)?igsn\.org/|(?:https?://)?hdl\.handle\.net/10273/|10273/)(?P<code>.*)$",
    re.IGNORECASE | re.DOTALL,
)


def _code_problem(code: str) -> str | None:
    if not code:
        return "has no code after the IGSN scheme or resolver"
    if any(ch.isspace() for ch in code):
        return "has white space inside the code"
    if not _IGSN_CODE.match(code):
        return "has a character outside letters, digits and '-', '.', '_', or does not start with two letters/digits of a namespace"
    return None


def igsn_problem(value: str) -> str | None:
    """None when ``value`` is an IGSN in a usual written form, else why not.

    Accepted: a DOI marked as an IGSN (``igsn:10.58052/XXTM00002``,
    ``igsn:https://doi.org/...``); a DOI (bare or as a resolver address) under
    a prefix of :data:`IGSN_DOI_PREFIXES`; an IGSN code with its tag
    (``IGSN:XXTM00002``, the legacy form, and DataCite's suffix-only short
    form); the legacy resolver forms ``https://igsn.org/XXTM00002`` and
    Handle ``10273/XXTM00002``. Refused: a DOI under any other prefix without
    the ``igsn:`` tag, and a bare code (a local sample number looks the same).

    Examples
    --------
    >>> igsn_problem("IGSN:XXTM00002") is None
    True
    >>> igsn_problem("10.58052/XXTM00002") is None
    True
    >>> igsn_problem("XXTM00002")[:18]
    'is a code with no '
    """
    text = str(value).strip()
    if not text:
        return "is empty"
    tagged = _IGSN_TAG.match(text)
    rest = tagged.group("rest").strip() if tagged else text
    low = rest.lower()
    looks_doi = low.startswith(("10.", "doi:", "info:doi/")) or "doi.org/" in low
    if looks_doi and not low.startswith("10273/"):
        why = doi_problem(rest)
        if why is not None:
            return f"is written as a DOI but {why}"
        prefix = _bare_doi(rest).split("/", 1)[0]
        if tagged or prefix in IGSN_DOI_PREFIXES:
            return _code_problem(_bare_doi(rest).split("/", 1)[1])
        return (
            f"is a DOI under prefix {prefix}, which is not a known IGSN prefix; "
            f"if it is an IGSN, write it as igsn:{_bare_doi(rest)}"
        )
    legacy = _IGSN_LEGACY.match(rest)
    if legacy:
        return _code_problem(legacy.group("code"))
    if tagged:
        return _code_problem(rest)
    if ":" in rest or "/" in rest:
        return 'is neither "IGSN:<code>", an igsn.org address nor a DOI'
    return "is a code with no igsn: tag or DOI prefix, which a local sample number cannot be told from; write it as IGSN:<code> or with its DOI prefix"
