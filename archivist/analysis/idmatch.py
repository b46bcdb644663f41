"""Identifiers and their spreadsheet manglings: which id an unmatched reference probably meant.

Shared by the rules that tie one table to another by id (analyses to
samples, samples and structures to stations): leading zeros lost, a
trailing ".0", scientific notation, an id turned into a date, case, stray or
non-breaking spaces, typographic dashes, a leading apostrophe.
"""

from __future__ import annotations

import datetime as dt
import re
import unicodedata
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..readers import as_text

_SPACES = re.compile(r"[\s\u00a0\u2007\u202f\u200b\u2060\ufeff]+")
_DASHES = re.compile(r"[\u2010\u2011\u2012\u2013\u2014\u2015\u2212]")
_LEAD_ZEROS = re.compile(r"(?<!\d)0+(?=\d)")
_TRAILING_ZERO_DECIMAL = re.compile(r"(?<=\d)\.0+$")
_SCI = re.compile(r"^([+-]?)(\d+)(?:[.,](\d+))?[eE]([+-]?\d+)$")
MONTHS = ("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec")
MONTH_NAMES = ("january", "february", "march", "april", "may", "june", "july", "august", "september", "october", "november", "december")
_MON = "|".join(MONTHS + MONTH_NAMES + ("sept",))
_DATE_PATTERNS = (
    (re.compile(r"^(\d{4})-(\d{1,2})-(\d{1,2})(?:[ t]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?$"), "ymd"),
    (re.compile(rf"^(\d{{1,2}})[- ]({_MON})\.?(?:[- ](\d{{2}}|\d{{4}}))?$"), "d-mon-y"),
    (re.compile(rf"^({_MON})\.?[- ](\d{{1,4}})$"), "mon-n"),
    (re.compile(r"^(\d{1,2})[/.](\d{1,2})[/.](\d{2}|\d{4})$"), "a/b/y"),
)


def space_key(text: str) -> str:
    """An id with spaces (also non-breaking and zero-width), a leading apostrophe and typographic dashes removed."""
    s = unicodedata.normalize("NFKC", str(text))
    s = _DASHES.sub("-", s)
    s = _SPACES.sub("", s)
    return s[1:] if s.startswith("'") else s


def space_keys(values) -> pd.Series:
    """:func:`space_key` of a whole column, case folded, in vectorised string operations."""
    s = pd.Series(np.asarray(values, dtype=object), dtype=object).fillna("").astype(str)
    s = s.str.normalize("NFKC").str.replace(_DASHES, "-", regex=True).str.replace(_SPACES, "", regex=True)
    return s.str.replace(r"^'", "", regex=True).str.casefold()


def loose_key(text: str) -> str:
    """The loosest comparison key: :func:`space_key`, case folded, no trailing ".0", no leading zeros in digit runs."""
    s = space_key(text).casefold()
    s = _TRAILING_ZERO_DECIMAL.sub("", s)
    return _LEAD_ZEROS.sub("", s)


def _month(text: str) -> int:
    t = text.casefold().rstrip(".")
    if t == "sept":
        return 9
    return (MONTHS.index(t[:3]) + 1) if t[:3] in MONTHS else 0


def as_date(value) -> tuple[dt.date, bool] | None:
    """The date a spreadsheet made of an id and whether it has a year, or None.

    A date cell, or text such as "2024-03-01", "1-Mar", "Mar-24". Without a
    year in the text ("1-Mar") the date is in 2000 and the flag is False.
    """
    if isinstance(value, dt.datetime):
        return value.date(), True
    if isinstance(value, dt.date):
        return value, True
    text = str(value).strip().casefold()
    for pattern, kind in _DATE_PATTERNS:
        m = pattern.match(text)
        if not m:
            continue
        try:
            if kind == "ymd":
                return dt.date(int(m[1]), int(m[2]), int(m[3])), True
            if kind == "d-mon-y":
                year = int(m[3]) if m[3] else 2000
                year = year + 2000 if year < 100 else year
                return dt.date(year, _month(m[2]), int(m[1])), bool(m[3])
            if kind == "mon-n":
                n = int(m[2])
                if 1 <= n <= 28 and len(m[2]) <= 2:
                    return dt.date(2000, _month(m[1]), n), False
                year = n + 1900 if 29 <= n < 100 else n
                return dt.date(year, _month(m[1]), 1), True
            if kind == "a/b/y":
                a, b = int(m[1]), int(m[2])
                year = int(m[3]) + (2000 if len(m[3]) == 2 else 0)
                return (dt.date(year, a, b) if a <= 12 else dt.date(year, b, a)), True
        except ValueError:
            return None
    return None


def _date_originals(d: dt.date) -> list[str]:
    """Texts a spreadsheet turns into date ``d``: "3-1", "1-3", "3/1", "MAR1", "1-Mar", "Mar-24"..."""
    m, day, y = d.month, d.day, d.year
    mons = [MONTHS[m - 1], MONTH_NAMES[m - 1]] + (["sept"] if m == 9 else [])
    out = [f"{m}-{day}", f"{day}-{m}", f"{m}/{day}", f"{day}/{m}", f"{m}.{day}", f"{day}.{m}"]
    for mon in mons:
        out += [f"{mon}{day}", f"{mon}-{day}", f"{day}-{mon}", f"{day}{mon}"]
    if day == 1:
        yy = f"{y % 100:02d}"
        out += [f"{m}-{yy}", f"{m}/{yy}", f"{m}-{y}", f"{m}/{y}"]
        for mon in mons:
            out += [f"{mon}{yy}", f"{mon}-{yy}", f"{mon}{y}", f"{mon}-{y}"]
    out += [f"{m}-{day}-{y % 100:02d}", f"{day}-{m}-{y % 100:02d}", f"{m}/{day}/{y}", f"{day}/{m}/{y}"]
    return out


def _sci_candidates(text: str, numeric_ids: dict[int, list[str]]) -> list[str]:
    """Ids a number in scientific notation may stand for: the exact value, and ids that round to it."""
    m = _SCI.match(space_key(text))
    if not m:
        return []
    sign, whole, frac, exp = m[1], m[2], m[3] or "", int(m[4])
    digits = (whole + frac).lstrip("0") or "0"
    value = float(f"{sign}{whole}.{frac or '0'}e{exp}")
    out = []
    if value.is_integer():
        out.append(str(int(value)))
    # Excel shows 1.23457E+11 for 123456789012: match ids that round to the shown digits.
    shown = len(digits)
    magnitude = int(np.floor(np.log10(abs(value)))) if value else 0
    step = 10 ** max(0, magnitude - shown + 1)
    for n, ids in numeric_ids.items():
        if round(n / step) * step == round(value / step) * step:
            out.extend(ids)
    return out


@dataclass
class SampleIndex:
    """Sample ids ready for matching: exact, and by the loosest key."""

    ids: np.ndarray
    exact: set[str] = field(default_factory=set)
    by_loose: dict[str, list[str]] = field(default_factory=dict)
    numeric: dict[int, list[str]] = field(default_factory=dict)

    @classmethod
    def of(cls, ids) -> "SampleIndex":
        ids = np.asarray([str(i) for i in ids], dtype=object)
        index = cls(ids, set(ids))
        for sid in dict.fromkeys(ids):
            if not sid.strip():
                continue
            index.by_loose.setdefault(loose_key(sid), []).append(sid)
            digits = space_key(sid)
            if digits.isdigit():
                index.numeric.setdefault(int(digits), []).append(sid)
        return index


def _why(orphan: str, target: str) -> list[str]:
    """The manglings that turn ``target`` into ``orphan`` (both as text)."""
    reasons = []
    raw = str(orphan)
    if raw.strip().startswith("'"):
        reasons.append("a leading apostrophe")
    if _DASHES.search(raw) and not _DASHES.search(target):
        reasons.append("a typographic dash")
    if _SPACES.sub("", raw) != raw:
        reasons.append("a non-breaking space" if re.search(r"[\u00a0\u2007\u202f]", raw) else "stray spaces")
    a, b = space_key(orphan), space_key(target)
    if a.casefold() == b.casefold() and a != b:
        reasons.append("different case")
    a, b = a.casefold(), b.casefold()
    if _TRAILING_ZERO_DECIMAL.search(a) and not _TRAILING_ZERO_DECIMAL.search(b):
        reasons.append("a trailing '.0'")
        a = _TRAILING_ZERO_DECIMAL.sub("", a)
    if a != b and _LEAD_ZEROS.sub("", a) == _LEAD_ZEROS.sub("", b):
        reasons.append("leading zeros lost" if len(a) < len(b) else "extra leading zeros")
    return reasons


def probable_samples(value, index: SampleIndex) -> list[tuple[str, str]]:
    """The samples an unmatched analysis id probably meant, each with how it was mangled.

    Tries, in order: the id itself compared loosely (spaces, non-breaking
    spaces, typographic dashes, a leading apostrophe, case, a trailing
    ".0", leading zeros); scientific notation ("1.2E+04" for "12000", or a
    rounded "1.23457E+11"); a date a spreadsheet made of the id (a date
    cell, "2024-03-01", "1-Mar", an Excel day number) and the texts that
    become that date ("3-1", "MAR1"...).

    Examples
    --------
    >>> idx = SampleIndex.of(["HV24-0007", "HV24-0012"])
    >>> probable_samples("HV24-7", idx)
    [('HV24-0007', 'leading zeros lost')]
    """
    text = as_text(value) if not isinstance(value, (dt.date, dt.datetime)) else ""
    found: dict[str, str] = {}

    def take(candidates, how):
        for cand in candidates:
            for sid in index.by_loose.get(loose_key(cand), ()):
                if sid not in found:
                    found[sid] = how(sid) if callable(how) else how

    if text:
        take([text], lambda sid: ", ".join(_why(text, sid)) or "a different spelling")
    if not found and text:
        sci = _sci_candidates(text, index.numeric)
        for sid in sci:
            if sid in index.exact and sid not in found:
                found[sid] = "written in scientific notation"
        take(sci, "written in scientific notation")
    if not found:
        got = as_date(value) if not text or not _SCI.match(space_key(text)) else None
        how = "turned into the date {} by a spreadsheet"
        if got is None and text.isdigit() and 20000 <= int(text) <= 80000:
            # An Excel day number (1900 date system): a date cell later formatted as a number.
            got = (dt.date(1899, 12, 30) + dt.timedelta(days=int(text)), True)
            how = "turned into a date by a spreadsheet, then into its day number ({})"
        if got is not None:
            d, has_year = got
            shown = d.isoformat() if has_year else f"{d.day} {MONTH_NAMES[d.month - 1].capitalize()}"
            take(_date_originals(d), how.format(shown))
    return list(found.items())


