"""Text report: a summary that fits a terminal, then (on request) every finding.

The summary gives the counts, one line per rule and layer (worst first: errors,
then the most findings; repeated findings of one rule on one layer are one
line with the largest of them), the layers and features with most findings,
and the closing statement of what a check does not cover. With ``details``
every finding follows, grouped by family, errors first. The grouping is
computed by :mod:`archivist.report.summary`; this module only formats.

Colour only on a terminal and never under NO_COLOR (rich honours both).
Every value that comes from the data (project path, CRS name, notes,
messages) passes through :func:`archivist.printable.printable` and is printed
as rich ``Text``, never as markup: the only control sequences in the output
are the writer's own newlines and colour codes.
"""

from __future__ import annotations

import io
from itertools import groupby
from typing import IO

from rich.console import Console
from rich.text import Text

from ..analysis.messages import plural
from ..model import Finding, Report, Severity
from ..printable import printable
from ..registry import FAMILIES
from .summary import Group, Place, group_findings, measure_text, worst_features, worst_layers

CAUTION = (
    "archivist checks the form and consistency of the data, not the geological interpretation; "
    "a map used for engineering, hazard or resource decisions still needs review by a qualified "
    "geologist under local rules."
)
STYLE = {Severity.ERROR: "bold red", Severity.WARNING: "yellow", Severity.NOTICE: "cyan"}


# Lines of the summary given to rule groups; the rest are counted in one line.
SUMMARY_GROUPS = 12
# Layers and features named in the "most findings" lines.
SUMMARY_PLACES = 4


def _at(f: Finding, decimals: int = 1) -> str:
    return f" at {f.x:.{decimals}f}, {f.y:.{decimals}f}" if f.x is not None and f.y is not None else ""


def _counts(errors: int, warnings: int, notices: int) -> str:
    parts = [(errors, "error"), (warnings, "warning"), (notices, "notice")]
    return ", ".join(plural(n, w) for n, w in parts if n) or "no findings"


def _group_line(g: Group, decimals: int = 1) -> Text:
    line = Text("  ")
    line.append(f"{g.severity.value:<7}", style=STYLE[g.severity])
    if g.count == 1:
        f = g.largest
        line.append(f" {printable(g.rule)}: ", style="bold")
        line.append(printable(f.message))
        if _at(f, decimals):
            line.append(f"  [{_at(f, decimals).strip()}]", style="dim")
        return line
    where = f" on {printable(g.layer)}" if g.layer else ""
    line.append(f" {printable(g.rule)}{where}: ", style="bold")
    located = all(f.x is not None for f in g.findings)
    line.append(plural(g.count, "place" if located else "finding"))
    size = measure_text(g.largest)
    if size is not None:
        line.append(f", largest {printable(size)}{_at(g.largest, decimals)}")
    elif _at(g.largest, decimals):
        line.append(f", the first{_at(g.largest, decimals)}")
    return line


def _place_text(p: Place) -> str:
    name = printable(p.layer) if p.feature is None else f"{printable(p.layer)} feature {printable(p.feature)}"
    return f"{name} ({_counts(p.errors, p.warnings, p.notices)})"


def _write_summary(report: Report, console: Console) -> None:
    s = report.summary
    console.print()
    totals = (f"{plural(s.errors, 'error')}, {plural(s.warnings, 'warning')}, {plural(s.notices, 'notice')} "
              f"from {plural(len(report.rules_run), 'rule')}.")
    if not report.findings:
        console.print(Text(f"No findings: {totals}", style="green"))
        return
    console.print(Text(totals, style="bold"))
    groups = group_findings(report)
    console.print(Text("By rule, worst first:"))
    for g in groups[:SUMMARY_GROUPS]:
        console.print(_group_line(g, report.place_decimals))
    rest = groups[SUMMARY_GROUPS:]
    if rest:
        n = sum(g.count for g in rest)
        console.print(Text(f"  ... and {plural(len(rest), 'more rule', 'more rules')} or layers with {plural(n, 'finding')}.",
                           style="dim"))
    layers = worst_layers(report)
    if len(layers) > 1:
        shown = ", ".join(_place_text(p) for p in layers[:SUMMARY_PLACES])
        console.print(Text(f"Most findings by layer: {shown}."))
    features = worst_features(report)
    if features:
        shown = ", ".join(_place_text(p) for p in features[:SUMMARY_PLACES])
        console.print(Text(f"Most findings by feature: {shown}."))


def write_text(report: Report, stream: IO[str], *, color: bool | None = None, details: bool = False) -> None:
    """Write the report as text to ``stream``: the summary, and every finding with ``details``.

    ``color=None`` lets rich decide (terminal, NO_COLOR).
    """
    console = Console(
        file=stream,
        force_terminal=color if color else None,
        no_color=(color is False) or None,
        highlight=False,
        soft_wrap=True,
        emoji=False,
    )
    for note in report.notes:
        console.print(Text(f"Note: {printable(note)}", style="italic"))
    console.print(Text(f"archivist {report.version}: {printable(report.project)}", style="bold"))
    console.print(Text(f"Map CRS: {printable(report.crs) if report.crs else 'not declared'}"))
    _write_summary(report, console)
    if details and report.findings:
        _write_details(report, console)
    elif report.findings:
        console.print(Text(f"Every finding: --details (text) or --format json ({plural(len(report.findings), 'finding')}).",
                           style="dim"))
    console.print(Text(CAUTION, style="dim"))


def _write_details(report: Report, console: Console) -> None:
    order = {f: i for i, f in enumerate(FAMILIES)}
    by_family = sorted(report.findings, key=lambda f: (order.get(f.family, 99), f.severity.rank, f.rule))
    for family, group in groupby(by_family, key=lambda f: f.family):
        items = list(group)
        console.print()
        console.print(Text(f"{printable(family)} ({len(items)})", style="bold underline"))
        for f in items:
            line = Text("  ")
            line.append(f"{f.severity.value:<7}", style=STYLE[f.severity])
            line.append(f" {printable(f.rule)}: ", style="bold")
            line.append(printable(f.message))
            if report.place(f):
                line.append(f"  [at {report.place(f)}]", style="dim")
            console.print(line)
    s = report.summary
    console.print()
    console.print(
        f"{plural(s.errors, 'error')}, {plural(s.warnings, 'warning')}, {plural(s.notices, 'notice')} "
        f"from {plural(len(report.rules_run), 'rule')}."
    )


def render_text(report: Report, *, details: bool = False) -> str:
    buf = io.StringIO()
    write_text(report, buf, color=False, details=details)
    return buf.getvalue()
