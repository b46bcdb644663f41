"""Reference data shipped inside the package: the International Chronostratigraphic Chart.

``ics_chart_<version>.csv`` holds, for each version in :data:`CHART_VERSIONS`
(default :data:`DEFAULT_CHART`, the latest), every unit of every rank of the
chart published by the International Commission on Stratigraphy (ICS): its
broader unit, base and top in Ma with the chart's ± and "approximate" flag,
the official colour and every name the chart gives in any language. The
tables are built by ``tools/build_chart.py`` from the ICS's own
machine-readable data (kept in ``tests/data/ics/`` of the source tree, CC BY 4.0); each header records
the version, the SHA-256 of the source file and every transcription glitch
repaired. Attribution: "International Chronostratigraphic Chart,
International Commission on Stratigraphy, version <v>, CC BY 4.0" and
:data:`CHART_CITATION`.

:func:`lookup` finds a unit by any name the chart gives it; reading an age
as mappers write it in a legend (combining forms, ranges, informal parts) is
:mod:`archivist.vocab.ages`, which reads the chart only through
:func:`lookup` and :func:`intervals`.

What it does not do: it knows the global chart only. Regional stages
(e.g. the British or North American ones), local zonations and obsolete names
are reported as unknown, with a hint where one is known; whether they are
acceptable on a given map is for the mapper and local practice to decide.
"""

from __future__ import annotations

import csv
import io
import re
import unicodedata
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

CHART_VERSIONS = ("2023-09", "2024-12")
DEFAULT_CHART = "2024-12"
CHART_VERSION = DEFAULT_CHART
CHART_PUBLISHER = "International Commission on Stratigraphy"
CHART_TITLE = "International Chronostratigraphic Chart"
CHART_LICENCE = "CC BY 4.0"
CHART_CITATION = (
    "Cohen, K.M., Finney, S.C., Gibbard, P.L. & Fan, J.-X. (2013; updated) "
    "The ICS International Chronostratigraphic Chart. Episodes 36: 199-204."
)
RANKS = ("supereon", "eon", "era", "period", "subperiod", "epoch", "age")

_MODIFIERS = {
    "lower": "Lower", "early": "Lower", "earliest": "Lower",
    "middle": "Middle", "mid": "Middle",
    "upper": "Upper", "late": "Upper", "latest": "Upper",
}


@dataclass(frozen=True)
class Interval:
    """One unit of the chart. Ages in Ma; ``base_ma`` is the older boundary.

    ``base_uncertainty_ma``/``top_uncertainty_ma`` are the chart's "±" (None
    when it gives none); ``base_estimated``/``top_estimated`` are its
    "approximate" flags. ``labels`` holds every name the chart gives, as
    (language tag, name) pairs; ``color`` is the official ``#RRGGBB``.
    """

    name: str
    rank: str
    parent: str | None
    base_ma: float
    top_ma: float
    base_uncertainty_ma: float | None
    base_estimated: bool
    top_uncertainty_ma: float | None = None
    top_estimated: bool = False
    color: str = ""
    id: str = ""
    labels: tuple[tuple[str, str], ...] = ()

    def label(self, language: str) -> str | None:
        """The chart's name of this unit in ``language`` (a tag such as "de" or "fr"), or None."""
        for lang, text in self.labels:
            if lang.casefold() == language.casefold():
                return text
        return None


@dataclass(frozen=True)
class ChartInfo:
    """Where one shipped chart table comes from, as its header records it."""

    version: str
    source: str
    sha256: str
    repairs: tuple[str, ...]

    @property
    def attribution(self) -> str:
        """The credit the chart's licence asks for."""
        return f"{CHART_TITLE}, {CHART_PUBLISHER}, version {self.version}, {CHART_LICENCE}"


CREDIT_PREFIX = f"Legend ages checked against the {CHART_TITLE}"


def chart_credit(version: str | None = None) -> str:
    """One line saying which chart a check used, with the attribution and citation its licence asks for."""
    info = chart_info(version)
    return f"{CREDIT_PREFIX}, {CHART_PUBLISHER}, version {info.version}, {CHART_LICENCE} ({CHART_CITATION})"


class ChartVersionError(ValueError):
    """A chart version archivist does not ship."""


def fold_name(text: str) -> str:
    """Case, accents and British spellings folded: "Palaeogene" -> "paleogene", "Viséan" -> "visean"."""
    s = unicodedata.normalize("NFKD", str(text))
    s = "".join(ch for ch in s if not unicodedata.combining(ch))
    s = s.casefold().replace("\u00a0", " ")
    s = s.replace("palaeo", "paleo").replace("archaean", "archean")
    return " ".join(s.split())


def check_version(version: str | None) -> str:
    """The chart version to use: ``version`` if archivist ships it, the latest when None.

    Raises
    ------
    ChartVersionError
        ``version`` is not one of :data:`CHART_VERSIONS`.
    """
    if version is None:
        return DEFAULT_CHART
    v = str(version).strip().lstrip("vV").replace("/", "-")
    if v not in CHART_VERSIONS:
        raise ChartVersionError(
            f"chart version '{version}' is not shipped with archivist; use one of {', '.join(CHART_VERSIONS)}"
        )
    return v


def _table_text(version: str) -> str:
    return resources.files("archivist.reference").joinpath(f"ics_chart_{version}.csv").read_text(encoding="utf-8")


def _opt(text: str) -> float | None:
    text = text.strip()
    return float(text) if text else None


@lru_cache(maxsize=None)
def _read_chart(version: str) -> tuple[ChartInfo, tuple[Interval, ...]]:
    text = _table_text(version)
    header = [line[1:].strip() for line in text.splitlines() if line.startswith("#")]
    meta = dict(line.split(": ", 1) for line in header if line.startswith(("chart_version:", "source:")))
    source, _, sha = meta["source"].partition(", sha256 ")
    info = ChartInfo(
        version=meta["chart_version"],
        source=source,
        sha256=sha,
        repairs=tuple(line.removeprefix("repair: ") for line in header if line.startswith("repair: ")),
    )
    lines = [line for line in text.splitlines() if line.strip() and not line.startswith("#")]
    rows = []
    for rec in csv.DictReader(io.StringIO("\n".join(lines))):
        labels = tuple((lang, name) for lang, _, name in (item.partition(":") for item in rec["labels"].split("|")) if name)
        rows.append(
            Interval(
                name=rec["name"].strip(),
                rank=rec["rank"].strip(),
                parent=rec["parent"].strip() or None,
                base_ma=float(rec["base_ma"]),
                top_ma=float(rec["top_ma"]),
                base_uncertainty_ma=_opt(rec["base_uncertainty_ma"]),
                base_estimated=rec["base_approximate"].strip() == "yes",
                top_uncertainty_ma=_opt(rec["top_uncertainty_ma"]),
                top_estimated=rec["top_approximate"].strip() == "yes",
                color=rec["color"].strip(),
                id=rec["id"].strip(),
                labels=labels,
            )
        )
    return info, tuple(rows)


def chart_info(version: str | None = None) -> ChartInfo:
    """Version, source file, SHA-256 and repairs of the shipped chart ``version`` (default: the latest)."""
    return _read_chart(check_version(version))[0]


def intervals(version: str | None = None) -> tuple[Interval, ...]:
    """Every unit of the chart ``version`` (default: the latest), youngest first, as the chart orders them."""
    return _read_chart(check_version(version))[1]


# The formal subseries of the Pleistocene and Holocene that the data gives as stages (or not at
# all), from memory of the ICS ratifications: Lower Pleistocene = Gelasian + Calabrian, Middle
# Pleistocene = Chibanian; Lower/Middle/Upper Holocene = Greenlandian/Northgrippian/Meghalayan.
_SUBSERIES = {
    "Lower Pleistocene": ("Gelasian", "Calabrian"),
    "Middle Pleistocene": ("Chibanian",),
    "Lower Holocene": ("Greenlandian",),
    "Middle Holocene": ("Northgrippian",),
    "Upper Holocene": ("Meghalayan",),
}


def _subseries(units: dict[str, Interval]) -> dict[str, Interval]:
    out = {}
    for name, parts in _SUBSERIES.items():
        got = [units[p] for p in parts if p in units]
        if len(got) != len(parts):
            continue
        old, young = max(got, key=lambda u: u.base_ma), min(got, key=lambda u: u.top_ma)
        out[name] = Interval(
            name=name, rank="subseries", parent=got[0].parent,
            base_ma=old.base_ma, top_ma=young.top_ma,
            base_uncertainty_ma=old.base_uncertainty_ma, base_estimated=old.base_estimated,
            top_uncertainty_ma=young.top_uncertainty_ma, top_estimated=young.top_estimated,
            color=got[0].color if len(got) == 1 else "",
        )
    return out


def _label_keys(text: str) -> list[str]:
    """Index forms of one chart label: as written, without a bracketed gloss, with hyphens as spaces."""
    base = fold_name(text)
    keys = [base, fold_name(re.sub(r"\s*\(.*?\)\s*", " ", text)), base.replace("-", " ")]
    return [k for k in dict.fromkeys(keys) if k and k not in _MODIFIERS]


@lru_cache(maxsize=None)
def _by_name(version: str = DEFAULT_CHART) -> dict[str, Interval]:
    """Name index: the chart's names first, then its English labels, then every other language's."""
    units = intervals(version)
    out: dict[str, Interval] = {fold_name(i.name): i for i in units}
    for name, unit in _subseries({i.name: i for i in units}).items():
        out.setdefault(fold_name(name), unit)
    # Then the labels the other shipped versions give for the same unit (same identifier): a
    # version that leaves a unit unlabelled (2024-12 gives no label for "Lower Jurassic") still
    # knows its names in other languages.
    by_id = {i.id: i for i in units}
    others = [u for v in CHART_VERSIONS if v != version for u in intervals(v) if u.id in by_id]
    for english in (True, False):
        for pool in (units, others):
            for i in pool:
                for lang, text in i.labels:
                    if lang.startswith("en") == english:
                        for key in _label_keys(text):
                            out.setdefault(key, by_id.get(i.id, i))
    return out


@lru_cache(maxsize=None)
def lookup(name: str, chart: str | None = None) -> Interval | None:
    """The chart unit called ``name`` in any language the chart gives (case, accents and
    "palaeo"/"paleo" ignored; Early/Late for Lower/Upper of formal series), or None."""
    version = check_version(chart)
    norm = fold_name(name)
    hit = _by_name(version).get(norm)
    if hit is None:
        words = norm.split(" ")
        if len(words) > 1 and words[0] in _MODIFIERS:
            hit = _by_name(version).get(fold_name(f"{_MODIFIERS[words[0]]} {' '.join(words[1:])}"))
    return hit


def children(name: str, chart: str | None = None) -> list[Interval]:
    """The units one rank below ``name``, oldest first."""
    version = check_version(chart)
    unit = lookup(name, version)
    if unit is None:
        return []
    return sorted((i for i in intervals(version) if i.parent == unit.name), key=lambda i: -i.base_ma)


def ancestors(name: str, chart: str | None = None) -> list[str]:
    """Names of the units containing ``name``, nearest first."""
    version = check_version(chart)
    out = []
    unit = lookup(name, version)
    while unit is not None and unit.parent:
        out.append(unit.parent)
        unit = lookup(unit.parent, version)
    return out
