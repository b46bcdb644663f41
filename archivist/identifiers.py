"""Syntax checks for persistent identifiers (ORCID; DOI and IGSN come with the samples family)."""

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
