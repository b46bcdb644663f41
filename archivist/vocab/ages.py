"""Ages as mappers write them in a legend, read against the chronostratigraphic chart.

:func:`parse_age` turns the text of a legend's `age` cell into the span of
time it covers (:class:`AgeSpan`). It reads:

* chart names in any case, with or without accents, British spellings
  ("Palaeogene"), formal Lower/Middle/Upper and their Early/Middle/Late
  spellings ("Late Jurassic" is the Upper Jurassic);
* two chart names joined by a hyphen or dash, "/", "to", "or" or "and"
  ("Cenomanian-Turonian", "Silurian to Devonian", "Permian or Triassic"):
  the span runs from the base of the older to the top of the younger;
* the combining forms of the trade ("Permo-Triassic", "Siluro-Devonian",
  "Cambro-Ordovician", "Plio-Pleistocene", "Mio-Pliocene",
  "Permo-Carboniferous", "Devono-Carboniferous"...; the stems in
  :data:`COMBINING_STEMS` are common practice, not chart names);
* informal Early/Middle/Late of a unit that has no formal subdivision of
  that name ("Early Cambrian", "Late Eocene") and informal subdivisions of
  a formal one ("Early Late Cretaceous", "Lower Upper Cretaceous"): read as
  the older, middle or younger third of the unit's span, with half a third
  of leeway on the boundaries inside the unit (a convention, common
  practice: informal subdivisions have no agreed boundaries, so only a clear
  contradiction should be reported). Eons, eras and the Precambrian are
  not cut in thirds: their informal parts stay the whole unit;
* Lower/Middle/Upper in German, French and Spanish around a chart name in
  any language ("Unterkreide", "Untere Kreide", "Oberjura", "Mitteldevon",
  "Crétacé inférieur", "Cretácico Superior"): read as the formal unit when
  the chart has one, else as the English words are read;
* numerical ages with their unit: "250-260 Ma", "c. 255 Ma", "255 ± 5 Ma",
  "1.2-1.4 Ga", "11-12 ka".

What it does not do: it knows the global chart only. Regional stages and
obsolete names (:data:`REGIONAL_OR_OBSOLETE`, from memory) are refused with
the hint "(a regional or obsolete name?)"; whether they are acceptable on a
given map is for the mapper and local practice to decide. Other unknown
names are refused without that hint.

The chart itself comes from :mod:`archivist.reference`; this module calls
only ``lookup(name)`` and ``intervals()`` there, and reads the fields
``name``, ``rank``, ``parent``, ``base_ma``, ``top_ma`` and
``base_uncertainty_ma`` of the units they return.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass, replace
from typing import Any

from .. import reference as _reference


class _Chart:
    """One version of the chart as this module reads it: ``lookup`` and ``intervals`` on that version."""

    CHART_TITLE = _reference.CHART_TITLE

    def __init__(self, version: str | None = None) -> None:
        self.CHART_VERSION = _reference.check_version(version)

    def lookup(self, name: str) -> Any:
        return _reference.lookup(name, self.CHART_VERSION)

    def intervals(self) -> Any:
        return _reference.intervals(self.CHART_VERSION)

# Early/Middle/Late and their formal spellings: position in the unit, 0 = oldest third.
_POSITION = {
    "lower": 0, "early": 0, "earliest": 0,
    "middle": 1, "mid": 1,
    "upper": 2, "late": 2, "latest": 2,
}
_FORMAL = ("Lower", "Middle", "Upper")
_THIRD = ("older", "middle", "younger")

#: Combining stems of the trade (common practice): "Permo-Triassic" is Permian to Triassic.
COMBINING_STEMS = {
    "cambro": "Cambrian",
    "ordovico": "Ordovician",
    "siluro": "Silurian",
    "devono": "Devonian",
    "carbo": "Carboniferous",
    "carbonifero": "Carboniferous",
    "permo": "Permian",
    "triasso": "Triassic",
    "triassico": "Triassic",
    "juro": "Jurassic",
    "jura": "Jurassic",
    "cretaceo": "Cretaceous",
    "eo": "Eocene",
    "oligo": "Oligocene",
    "mio": "Miocene",
    "plio": "Pliocene",
    "pleisto": "Pleistocene",
}
_DASH = "-\u2010\u2011\u2012\u2013\u2014\u2212"
_STEM = re.compile(rf"(?i)\b({'|'.join(sorted(COMBINING_STEMS, key=len, reverse=True))})\s*[{_DASH}]\s*(?=\w)")
_SPLIT = re.compile(rf"\s*(?:[{_DASH}/]|\bto\b|\bor\b|\band\b)\s*", re.IGNORECASE)

# Informal Early/Middle/Late that stand for named units of the chart (used only when the chart
# read has no unit of that name). Pleistocene and Holocene subseries: from memory of the chart
# (Lower = Gelasian + Calabrian, Middle = Chibanian, Upper = the Upper Pleistocene stage; the
# Holocene's three stages). Proterozoic: Early/Middle/Late = Paleo-/Meso-/Neoproterozoic,
# common practice.
_EQUIVALENT: dict[tuple[str, int], tuple[str, ...]] = {
    ("pleistocene", 0): ("Gelasian", "Calabrian"),
    ("pleistocene", 1): ("Chibanian",),
    ("pleistocene", 2): ("Upper Pleistocene",),
    ("holocene", 0): ("Greenlandian",),
    ("holocene", 1): ("Northgrippian",),
    ("holocene", 2): ("Meghalayan",),
    ("proterozoic", 0): ("Paleoproterozoic",),
    ("proterozoic", 1): ("Mesoproterozoic",),
    ("proterozoic", 2): ("Neoproterozoic",),
}
# Lower/Middle/Upper in German (a prefix, "Unterkreide", or an adjective, "Untere Kreide"; Früh/Spät
# likewise), French and Spanish (an adjective after the name, "Crétacé inférieur", "Cretácico Superior"),
# folded as fold() leaves them. The chart names them so only for a few units ("Mitteldevon", "Frühe
# Kreide", "Crétacé précoce", "Cretácico temprano": ICS chart 2023-09, German, French and Spanish labels);
# the other forms are the usual ones of those languages (from memory).
_FOREIGN_POSITION = {
    "unter": 0, "untere": 0, "unterer": 0, "unteres": 0, "fruh": 0, "fruhe": 0, "fruher": 0, "fruhes": 0,
    "mittel": 1, "mittlere": 1, "mittlerer": 1, "mittleres": 1,
    "ober": 2, "obere": 2, "oberer": 2, "oberes": 2, "spat": 2, "spate": 2, "spater": 2, "spates": 2,
    "inferieur": 0, "inferieure": 0, "precoce": 0, "inferior": 0, "temprano": 0, "temprana": 0,
    "moyen": 1, "moyenne": 1, "medio": 1, "media": 1,
    "superieur": 2, "superieure": 2, "tardif": 2, "tardive": 2, "superior": 2, "tardio": 2, "tardia": 2,
}
_GERMAN_COMPOUND = re.compile(r"^(?P<pos>unter|mittel|ober|fruh|spat)-?(?P<name>[a-z]\S*)$")
_GERMAN_BEFORE = re.compile(r"^(?P<pos>(?:unter|mittler|ober|fruh|spat)e[rs]?)[ -](?P<name>\S.*)$")
_ROMANCE_AFTER = re.compile(r"^(?P<name>\S.*?) (?P<pos>inferieure?|precoce|inferior|tempran[oa]|moyenne?|medi[oa]"
                            r"|superieure?|tardi(?:f|ve)|superior|tardi[oa])$")

# Ranks cut in thirds by an informal Early/Middle/Late; above these, the whole unit is meant.
_THIRDS_RANKS = ("period", "subperiod", "epoch", "age")

#: Names not on the chart but common in older or regional legends, with what to write instead.
OBSOLETE = {
    "tertiary": "it was dropped from the chart; write Paleogene and/or Neogene",
    "recent": "write Holocene",
    "pleistogene": "write Quaternary",
    "eocambrian": "write Ediacaran or Cambrian",
    "infracambrian": "write Ediacaran or Cambrian",
}
#: Regional stages and series and obsolete chart names (from memory: British, north-west European,
#: Alpine, North American, Paratethyan, Russian and Chinese usage).
REGIONAL_OR_OBSOLETE = frozenset(
    """
    namurian westphalian stephanian dinantian silesian autunian
    arenig llanvirn caradoc ashgill tremadoc llandeilo
    lias dogger malm neocomian senonian gallic
    zechstein rotliegend rotliegendes buntsandstein muschelkalk keuper
    devensian ipswichian wolstonian hoxnian anglian cromerian flandrian
    weichselian eemian saalian holsteinian elsterian
    wurm riss mindel gunz villafranchian
    wisconsinan sangamonian illinoian kansan nebraskan
    pannonian sarmatian badenian pontian
    tatarian kazanian ufimian
    vendian riphean sinian algonkian huronian hadrynian helikian aphebian
    diluvium alluvium
    """.split()
)

_NUMBER = r"(\d+(?:\.\d+)?)"
_NUMERIC = re.compile(
    rf"^(?:c\.?|ca\.?|about|~)?\s*{_NUMBER}\s*(?:(?:[{_DASH}]|to)\s*{_NUMBER}|(?:±|\+/-|\+-)\s*{_NUMBER})?\s*(ka|ma|ga)$",
    re.IGNORECASE,
)
_SCALE = {"ka": 1e-3, "ma": 1.0, "ga": 1e3}


@dataclass(frozen=True)
class AgeSpan:
    """The span of time an age text covers, with the chart units it was read from.

    ``base_ma`` is the older end. ``base_slack_ma``/``top_slack_ma`` are the
    chart's stated uncertainties on the two ends (0 when none).
    ``informal`` is True when an Early/Middle/Late is not a formal unit of
    the chart; ``base_leeway_ma``/``top_leeway_ma`` are then the leeway the
    informal reading allows (half a third of the unit, 0 on a boundary of the
    unit itself), ``thirds_of`` is the unit cut in thirds (so two informal
    parts of the same unit can be ordered exactly) and ``note`` says how the
    text was read. ``numeric`` is True for "250-260 Ma" and the like.
    """

    text: str
    base_ma: float
    top_ma: float
    units: tuple[str, ...]
    informal: bool = False
    base_slack_ma: float = 0.0
    top_slack_ma: float = 0.0
    base_leeway_ma: float = 0.0
    top_leeway_ma: float = 0.0
    thirds_of: str | None = None
    note: str = ""
    numeric: bool = False
    chart: str = ""  # the chart version the span was read from

    def contains(self, age_ma: float) -> bool:
        """True when ``age_ma`` lies within the span, widened by the stated uncertainties and the informal leeway."""
        low = self.top_ma - self.top_slack_ma - self.top_leeway_ma - 1e-9
        high = self.base_ma + self.base_slack_ma + self.base_leeway_ma + 1e-9
        return low <= age_ma <= high

    @property
    def widest(self) -> tuple[float, float]:
        """(top_ma, base_ma) widened by the informal leeway only: what the span can mean at most."""
        return self.top_ma - self.top_leeway_ma, self.base_ma + self.base_leeway_ma


class AgeError(ValueError):
    """An age text that names no unit of the chart; the message says why, with a suggestion."""


@dataclass(frozen=True)
class _Piece:
    """One term of an age text: its span, and how it was read."""

    label: str
    base_ma: float
    top_ma: float
    units: tuple[str, ...]
    base_leeway_ma: float = 0.0
    top_leeway_ma: float = 0.0
    thirds_of: str | None = None
    informal: bool = False
    note: str = ""


fold = _reference.fold_name  # the chart reader's own folding: one rule for both sides of a lookup


def _formal(unit: Any, label: str) -> _Piece:
    return _Piece(label=label, base_ma=float(unit.base_ma), top_ma=float(unit.top_ma), units=(str(unit.name),))


def _ancestor_names(unit: Any, chart: _Chart) -> list[str]:
    out: list[str] = []
    while unit is not None and unit.parent:
        out.append(str(unit.parent))
        unit = chart.lookup(unit.parent)
    return out


def _third(inner: _Piece, position: int, word: str, chart: _Chart) -> _Piece:
    """The older, middle or younger third of ``inner`` (an informal subdivision)."""
    outer = chart.lookup(inner.thirds_of or inner.units[0])
    outer_base = float(outer.base_ma) if outer is not None else inner.base_ma
    outer_top = float(outer.top_ma) if outer is not None else inner.top_ma
    third = (inner.base_ma - inner.top_ma) / 3
    base = round(inner.base_ma - position * third, 6)
    top = round(inner.base_ma - (position + 1) * third, 6)
    half = round(third / 2, 6)
    group = inner.thirds_of or inner.units[0]
    return _Piece(
        label=f"{word} {inner.label}",
        base_ma=base,
        top_ma=top,
        units=inner.units,
        base_leeway_ma=0.0 if abs(base - outer_base) < 1e-6 else half,
        top_leeway_ma=0.0 if abs(top - outer_top) < 1e-6 else half,
        thirds_of=group,
        informal=True,
        note=(
            f"'{word} {inner.label}' is informal: read as the {_THIRD[position]} third of the {inner.label} "
            f"(common practice), with {half:g} Myr of leeway inside the {group}"
        ),
    )


def _in_english(norm: str, chart: _Chart) -> str:
    """A German, French or Spanish Lower/Middle/Upper of a chart name rewritten as "lower|middle|upper NAME".

    "Unterkreide", "Untere Kreide", "Mitteldevon", "Oberjura", "Oberkarbon",
    "Crétacé inférieur", "Cretácico Superior" (folded: no case, no accents).
    The name itself must be one the chart knows in some language ("Kreide",
    "Jura", "Devon", "Karbon" are the chart's own German names); other texts
    are returned unchanged.
    """
    m = _GERMAN_COMPOUND.match(norm) or _GERMAN_BEFORE.match(norm) or _ROMANCE_AFTER.match(norm)
    if m is None or chart.lookup(m.group("name")) is None:
        return norm
    return f"{_FORMAL[_FOREIGN_POSITION[m.group('pos')]].lower()} {m.group('name')}"


def _term(text: str, chart: _Chart) -> _Piece:
    """One age name (no range) -> its piece. Raises AgeError."""
    norm = fold(text).strip(" ?()").replace("mid-", "middle ")
    norm = " ".join(norm.replace("?", " ").split())
    if not norm:
        raise AgeError("is empty")
    hit = chart.lookup(norm)
    if hit is not None:
        return _formal(hit, str(hit.name))
    norm = _in_english(norm, chart)
    words = norm.split(" ")
    if words[0] in _POSITION and len(words) > 1:
        position, rest = _POSITION[words[0]], " ".join(words[1:])
        formal = chart.lookup(f"{_FORMAL[position]} {rest}")
        named = chart.lookup(rest) if formal is None else None
        if named is not None:  # the unit named in another language ("lower kreide"): its formal Lower, if any
            formal = chart.lookup(f"{_FORMAL[position]} {named.name}")
        if formal is not None:
            return _formal(formal, str(formal.name))
        same = _EQUIVALENT.get((rest, position), ())
        found = [u for u in (chart.lookup(n) for n in same) if u is not None]
        whole = chart.lookup(rest)
        if same and len(found) == len(same):
            label = f"{_FORMAL[position]} {whole.name if whole is not None else rest}"
            return _Piece(
                label=label,
                base_ma=max(float(u.base_ma) for u in found),
                top_ma=min(float(u.top_ma) for u in found),
                units=tuple(str(u.name) for u in found),
            )
        inner = _term(rest, chart)
        word = words[0].capitalize()
        unit = chart.lookup(inner.units[0])
        if inner.thirds_of is None and (unit is None or str(unit.rank) not in _THIRDS_RANKS or len(inner.units) > 1):
            return _Piece(
                label=f"{word} {inner.label}",
                base_ma=inner.base_ma,
                top_ma=inner.top_ma,
                units=inner.units,
                informal=True,
                note=f"'{word} {inner.label}' is informal, so the whole {inner.label} is allowed",
            )
        return _third(inner, position, word, chart)
    for cut in range(1, len(words)):
        o, i = chart.lookup(" ".join(words[:cut])), chart.lookup(" ".join(words[cut:]))
        if o is not None and i is not None and o.name in _ancestor_names(i, chart):
            return _formal(i, str(i.name))
    raise AgeError(why_unknown(norm, chart))


def why_unknown(text: str, chart: _Chart | None = None) -> str:
    """Why ``text`` is not read as an age, with a suggestion where one is known."""
    chart = chart or _Chart()
    norm = fold(text)
    words = norm.split(" ")
    core = " ".join(w for w in words if w not in _POSITION) or norm
    where = f"the {chart.CHART_TITLE} {chart.CHART_VERSION}"
    if core in OBSOLETE:
        return f"is not a unit of {where}: {OBSOLETE[core]}"
    if core in REGIONAL_OR_OBSOLETE:
        return f"is not a unit of {where} (a regional or obsolete name?)"
    if core in COMBINING_STEMS:
        return f"is a combining form of the {COMBINING_STEMS[core]}; join it with a hyphen to a second chart name"
    if re.search(r"\d", norm) and not norm.startswith(("stage", "series")):
        return (
            f"is not a unit of the {chart.CHART_TITLE}; write a numerical age with its unit "
            "('250-260 Ma') or put it in min_age_ma/max_age_ma"
        )
    names = {fold(i.name): str(i.name) for i in chart.intervals()}
    close = difflib.get_close_matches(core, list(names), n=1, cutoff=0.85)
    if close:
        return f"is not a unit of {where}; did you mean {names[close[0]]}?"
    return f"is not a unit of {where}"


def _boundary_slack(chart: _Chart) -> dict[float, float]:
    """Stated uncertainty of each boundary age (the largest given for any unit starting there)."""
    out: dict[float, float] = {}
    for i in chart.intervals():
        if i.base_uncertainty_ma:
            out[float(i.base_ma)] = max(out.get(float(i.base_ma), 0.0), float(i.base_uncertainty_ma))
    return out


def _numeric(raw: str) -> AgeSpan | None:
    m = _NUMERIC.match(fold(raw))
    if not m:
        return None
    a, b, pm, unit = m.groups()
    scale = _SCALE[unit.casefold()]
    x = float(a) * scale
    if b is not None:
        lo, hi = sorted((x, float(b) * scale))
    elif pm is not None:
        lo, hi = x - float(pm) * scale, x + float(pm) * scale
    else:
        lo = hi = x
    return AgeSpan(text=raw, base_ma=hi, top_ma=max(lo, 0.0), units=(), numeric=True)


def parse_age(text: str, version: str | None = None) -> AgeSpan:
    """The span of time an age text names (see the module's documentation for every form read).

    Raises
    ------
    AgeError
        The text names no unit of the chart; the message says why.

    Examples
    --------
    >>> s = parse_age("Permo-Triassic")
    >>> (s.base_ma, s.top_ma) == (parse_age("Permian").base_ma, parse_age("Triassic").top_ma)
    True
    >>> parse_age("Late Jurassic").units
    ('Upper Jurassic',)
    """
    raw = str(text).strip()
    chart = _Chart(version)
    number = _numeric(raw)
    if number is not None:
        return replace(number, chart=chart.CHART_VERSION)
    if _numeric(f"{raw} Ma") is not None:
        raise AgeError("is a number without its unit; write it as '250-260 Ma', or put it in min_age_ma/max_age_ma")
    try:
        pieces = [_term(raw, chart)]
    except AgeError:
        expanded = _STEM.sub(lambda m: f"{COMBINING_STEMS[m.group(1).casefold()]}-", re.sub(r"(?i)\bmid-", "Middle ", raw))
        parts = [p for p in _SPLIT.split(expanded) if p.strip()]
        if len(parts) < 2:
            raise
        pieces = []
        for k, part in enumerate(parts):
            words = fold(part).split(" ")
            if all(w in _POSITION for w in words) and k + 1 < len(parts):
                # "Early-Middle Jurassic": the bare modifier borrows the unit named on its right.
                right = [w for w in parts[k + 1].split() if fold(w) not in _POSITION]
                part = f"{part} {' '.join(right)}"
            try:
                pieces.append(_term(part, chart))
            except AgeError as exc:
                raise AgeError(f"part '{part}' {exc}") from None
    base = max(pieces, key=lambda p: p.base_ma)
    top = min(pieces, key=lambda p: p.top_ma)
    slack = _boundary_slack(chart)
    groups = {p.thirds_of for p in pieces}
    notes = [p.note for p in pieces if p.note]
    return AgeSpan(
        text=raw,
        base_ma=base.base_ma,
        top_ma=top.top_ma,
        units=tuple(u for p in pieces for u in p.units),
        informal=any(p.informal for p in pieces),
        base_slack_ma=0.0 if base.base_leeway_ma else slack.get(base.base_ma, 0.0),
        top_slack_ma=0.0 if top.top_leeway_ma else slack.get(top.top_ma, 0.0),
        base_leeway_ma=base.base_leeway_ma,
        top_leeway_ma=top.top_leeway_ma,
        thirds_of=groups.pop() if len(groups) == 1 else None,
        note="; ".join(dict.fromkeys(notes)),
        chart=chart.CHART_VERSION,
    )
