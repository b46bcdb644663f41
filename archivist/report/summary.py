"""What the short text summary shows, computed from a :class:`~archivist.model.Report` alone.

The writers only format; the grouping behind the summary lives here, in
pure functions of the report, so that every writer can show the same
groups. Nothing here changes the findings: the JSON report keeps every one.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterable

from ..model import Finding, Report, Severity


@dataclass(frozen=True)
class Group:
    """The findings of one rule with one severity on one layer (or table, or file).

    ``largest`` is the finding with the largest measure (the first one when
    none has a measure): the place to look at first.
    """

    rule: str
    family: str
    severity: Severity
    layer: str | None
    findings: tuple[Finding, ...]
    largest: Finding

    @property
    def count(self) -> int:
        return len(self.findings)


@dataclass(frozen=True)
class Place:
    """A layer, or one feature of a layer, and how many findings of each severity name it."""

    layer: str
    feature: str | None
    errors: int
    warnings: int
    notices: int

    @property
    def total(self) -> int:
        return self.errors + self.warnings + self.notices


def _largest(findings: list[Finding]) -> Finding:
    measured = [f for f in findings if f.measure is not None]
    if not measured:
        return findings[0]
    return max(measured, key=lambda f: abs(float(f.measure or 0.0)))


def group_findings(report: Report) -> tuple[Group, ...]:
    """The report's findings grouped by rule, severity and layer; worst first.

    Worst first: by severity (errors first), then by the number of findings
    (most first), then by rule id and layer, so that the order is the same on
    every run.
    """
    buckets: dict[tuple[str, Severity, str], list[Finding]] = {}
    for f in report.findings:
        buckets.setdefault((f.rule, f.severity, f.layer or ""), []).append(f)
    groups = [
        Group(rule, fs[0].family, sev, layer or None, tuple(fs), _largest(fs))
        for (rule, sev, layer), fs in buckets.items()
    ]
    groups.sort(key=lambda g: (g.severity.rank, -g.count, g.rule, g.layer or ""))
    return tuple(groups)


def _count(findings: Iterable[Finding]) -> tuple[int, int, int]:
    n = {s: 0 for s in Severity}
    for f in findings:
        n[f.severity] += 1
    return n[Severity.ERROR], n[Severity.WARNING], n[Severity.NOTICE]


def _worst(places: list[Place]) -> list[Place]:
    return sorted(places, key=lambda p: (-p.errors, -p.warnings, -p.notices, p.layer, p.feature or ""))


def worst_layers(report: Report) -> tuple[Place, ...]:
    """Each layer (or table, or file) named by findings, with its counts; most errors first."""
    by_layer: dict[str, list[Finding]] = {}
    for f in report.findings:
        if f.layer:
            by_layer.setdefault(f.layer, []).append(f)
    return tuple(_worst([Place(layer, None, *_count(fs)) for layer, fs in by_layer.items()]))


def worst_features(report: Report, *, at_least: int = 2) -> tuple[Place, ...]:
    """Features named by ``at_least`` findings or more, with their counts; most errors first.

    A finding naming two features (an overlap of two polygons) counts for both.
    """
    by_feature: dict[tuple[str, str], list[Finding]] = {}
    for f in report.findings:
        if f.layer:
            for fid in dict.fromkeys(f.features):
                by_feature.setdefault((f.layer, fid), []).append(f)
    places = [Place(layer, fid, *_count(fs)) for (layer, fid), fs in by_feature.items() if len(fs) >= at_least]
    return tuple(_worst(places))


# A measure as rules write it in their messages, followed by its unit.
_UNIT = re.compile(r"\s?(m²|km²|m|km|wt%|ppm|°)(?![\w²])")


def measure_text(f: Finding) -> str | None:
    """The finding's measure with its unit, as its own message writes it (``4.20 m``), or None.

    A finding's ``measure`` carries no unit; the unit is read from the message
    where the message prints the measure (with the formats rules use), so the
    summary never states a unit the rule did not.
    """
    if f.measure is None:
        return None
    from ..analysis.messages import num

    v = float(f.measure)
    for shown in dict.fromkeys((num(v), f"{v:.1f}", f"{v:.2f}", f"{v:g}")):
        for m in re.finditer(re.escape(shown), f.message):
            before = f.message[m.start() - 1] if m.start() else " "
            if before.isdigit() or before == ".":
                continue
            unit = _UNIT.match(f.message, m.end())
            if unit:
                return f"{shown} {unit.group(1)}"
    return None
