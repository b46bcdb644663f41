"""Reference data shipped inside the package: the International Chronostratigraphic Chart.

``ics_chart.csv`` holds every eon, era, period, epoch and age of the chart
published by the International Commission on Stratigraphy (ICS), version
:data:`CHART_VERSION`, with the numerical ages of their boundaries in Ma. The
file header says how the values were transcribed; read it before relying on
a number.

:func:`parse_age` reads an age as mappers write it in a legend: a chart name
("Visean"), a formal or informal subdivision ("Upper Jurassic", "Late
Jurassic", "early Visean"), or a range ("Cenomanian-Turonian", "Late
Triassic to Early Jurassic"), and returns the span of time it covers.

What it does not do: it knows the global chart only. Regional stages
(e.g. the British or North American ones), local zonations and obsolete names
are reported as unknown, with a hint where one is known; whether they are
acceptable on a given map is for the mapper and local practice to decide.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
import unicodedata
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

CHART_VERSION = "v2023/09"
CHART_PUBLISHER = "International Commission on Stratigraphy"
CHART_TITLE = "International Chronostratigraphic Chart"
RANKS = ("supereon", "eon", "era", "period", "subperiod", "epoch", "age")

_MODIFIERS = {
    "lower": "Lower", "early": "Lower", "earliest": "Lower",
    "middle": "Middle", "mid": "Middle",
    "upper": "Upper", "late": "Upper", "latest": "Upper",
}
# Names that are not on the chart but common in older legends, with what to write instead.
_OBSOLETE = {
    "tertiary": "it was dropped from the chart; write Paleogene and/or Neogene",
    "recent": "write Holocene",
    "pleistogene": "write Quaternary",
    "eocambrian": "write Ediacaran or Cambrian",
    "infracambrian": "write Ediacaran or Cambrian",
}
_RANGE_SPLIT = re.compile(r"\s*(?:[-\u2010\u2011\u2012\u2013\u2014\u2212/]|\bto\b)\s*", re.IGNORECASE)


@dataclass(frozen=True)
class Interval:
    """One unit of the chart. Ages in Ma; ``base_ma`` is the older boundary."""

    name: str
    rank: str
    parent: str | None
    base_ma: float
    top_ma: float
    base_uncertainty_ma: float | None
    base_estimated: bool


@dataclass(frozen=True)
class AgeSpan:
    """The span of time an age text covers, with the chart units it was read from.

    ``informal`` is True when a Lower/Middle/Upper or Early/Middle/Late
    modifier is not a formal unit of the chart (e.g. "Late Eocene"): the span
    is then the whole unit it qualifies. ``base_slack_ma``/``top_slack_ma``
    are the chart's stated uncertainties on the two boundaries (0 when none).
    """

    text: str
    base_ma: float
    top_ma: float
    units: tuple[str, ...]
    informal: bool = False
    base_slack_ma: float = 0.0
    top_slack_ma: float = 0.0

    def contains(self, age_ma: float) -> bool:
        """True when ``age_ma`` lies within the span, widened by the boundaries' stated uncertainties."""
        return self.top_ma - self.top_slack_ma - 1e-9 <= age_ma <= self.base_ma + self.base_slack_ma + 1e-9


class AgeError(ValueError):
    """An age text that does not name a unit of the chart; the message says why, with a suggestion."""


def _normalise(text: str) -> str:
    """Case, accents and British spellings folded: "Palaeogene" -> "paleogene", "Viséan" -> "visean"."""
    s = unicodedata.normalize("NFKD", str(text))
    s = "".join(ch for ch in s if not unicodedata.combining(ch))
    s = s.casefold().replace("\u00a0", " ")
    s = s.replace("palaeo", "paleo").replace("archaean", "archean")
    return " ".join(s.split())


def _read_chart() -> tuple[Interval, ...]:
    text = resources.files("archivist.reference").joinpath("ics_chart.csv").read_text(encoding="utf-8")
    lines = [line for line in text.splitlines() if line.strip() and not line.startswith("#")]
    rows = []
    for rec in csv.DictReader(io.StringIO("\n".join(lines))):
        unc = rec["base_uncertainty_ma"].strip()
        rows.append(
            Interval(
                name=rec["name"].strip(),
                rank=rec["rank"].strip(),
                parent=rec["parent"].strip() or None,
                base_ma=float(rec["base_ma"]),
                top_ma=float(rec["top_ma"]),
                base_uncertainty_ma=float(unc) if unc else None,
                base_estimated=rec["base_estimated"].strip().lower() == "yes",
            )
        )
    return tuple(rows)


@lru_cache(maxsize=1)
def intervals() -> tuple[Interval, ...]:
    """Every unit of the chart, in file order."""
    return _read_chart()


@lru_cache(maxsize=1)
def _by_name() -> dict[str, Interval]:
    return {_normalise(i.name): i for i in intervals()}


@lru_cache(maxsize=1)
def _boundary_slack() -> dict[float, float]:
    """Stated uncertainty of each boundary age (the largest given for any unit starting there)."""
    out: dict[float, float] = {}
    for i in intervals():
        if i.base_uncertainty_ma:
            out[i.base_ma] = max(out.get(i.base_ma, 0.0), i.base_uncertainty_ma)
    return out


def lookup(name: str) -> Interval | None:
    """The chart unit spelt ``name`` (case, accents and "palaeo"/"paleo" ignored), or None."""
    return _by_name().get(_normalise(name))


def children(name: str) -> list[Interval]:
    """The units one rank below ``name``, oldest first."""
    unit = lookup(name)
    if unit is None:
        return []
    return sorted((i for i in intervals() if i.parent == unit.name), key=lambda i: -i.base_ma)


def ancestors(name: str) -> list[str]:
    """Names of the units containing ``name``, nearest first."""
    out = []
    unit = lookup(name)
    while unit is not None and unit.parent:
        out.append(unit.parent)
        unit = lookup(unit.parent)
    return out


def _term(text: str) -> tuple[Interval, bool]:
    """One age name (no range) -> (chart unit, informal?). Raises AgeError."""
    norm = _normalise(text).strip(" ?()").replace("mid-", "middle ")
    norm = " ".join(norm.replace("?", " ").split())
    if not norm:
        raise AgeError("is empty")
    hit = _by_name().get(norm)
    if hit is not None:
        return hit, False
    words = norm.split(" ")
    if words[0] in _MODIFIERS and len(words) > 1:
        rest = " ".join(words[1:])
        formal = _by_name().get(_normalise(f"{_MODIFIERS[words[0]]} {rest}"))
        if formal is not None:
            return formal, False
        base = _by_name().get(rest)
        if base is not None:
            return base, True
    for cut in range(1, len(words)):
        outer, inner = " ".join(words[:cut]), " ".join(words[cut:])
        o, i = _by_name().get(outer), _by_name().get(inner)
        if o is not None and i is not None and o.name in ancestors(i.name):
            return i, False
    raise AgeError(_why_unknown(norm))


def _why_unknown(norm: str) -> str:
    words = norm.split(" ")
    core = " ".join(w for w in words if w not in _MODIFIERS) or norm
    if core in _OBSOLETE:
        return f"is not a unit of the {CHART_TITLE} {CHART_VERSION}: {_OBSOLETE[core]}"
    if re.search(r"\d", norm) and not norm.startswith(("stage", "series")):
        return f"is not a unit of the {CHART_TITLE}; put numerical ages in min_age_ma/max_age_ma"
    names = [i.name for i in intervals()]
    close = difflib.get_close_matches(core, [_normalise(n) for n in names], n=1, cutoff=0.85)
    if close:
        return f"is not a unit of the {CHART_TITLE} {CHART_VERSION}; did you mean {_by_name()[close[0]].name}?"
    return f"is not a unit of the {CHART_TITLE} {CHART_VERSION} (a regional or obsolete name?)"


def parse_age(text: str) -> AgeSpan:
    """The span of time an age text names.

    Accepts chart names in any case, with or without accents and with British
    spellings ("Palaeogene"); formal and informal Lower/Middle/Upper and
    Early/Middle/Late forms; ranges written with a hyphen, dash, slash or
    "to"; a "?" of uncertainty is ignored.

    Raises
    ------
    AgeError
        The text names no unit of the chart; the message says why.

    Examples
    --------
    >>> s = parse_age("Cenomanian-Turonian")
    >>> (s.base_ma, s.top_ma)
    (100.5, 89.8)
    >>> parse_age("Late Jurassic").units
    ('Upper Jurassic',)
    """
    raw = str(text).strip()
    parts = [p for p in _RANGE_SPLIT.split(re.sub(r"(?i)\bmid-", "Middle ", raw)) if p.strip()]
    if not parts:
        raise AgeError("is empty")
    found: list[tuple[Interval, bool]] = []
    for k, part in enumerate(parts):
        words = _normalise(part).split(" ")
        if all(w in _MODIFIERS for w in words) and k + 1 < len(parts):
            # "Early-Middle Jurassic": the bare modifier borrows the unit named on its right.
            right = [w for w in parts[k + 1].split() if _normalise(w) not in _MODIFIERS]
            part = f"{part} {' '.join(right)}"
        try:
            found.append(_term(part))
        except AgeError as exc:
            if len(parts) > 1:
                raise AgeError(f"part '{part}' {exc}") from None
            raise
    base_unit = max(found, key=lambda f: f[0].base_ma)[0]
    top_unit = min(found, key=lambda f: f[0].top_ma)[0]
    slack = _boundary_slack()
    return AgeSpan(
        text=raw,
        base_ma=base_unit.base_ma,
        top_ma=top_unit.top_ma,
        units=tuple(f[0].name for f in found),
        informal=any(f[1] for f in found),
        base_slack_ma=slack.get(base_unit.base_ma, 0.0),
        top_slack_ma=slack.get(top_unit.top_ma, 0.0),
    )
