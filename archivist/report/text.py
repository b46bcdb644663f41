"""Text report: findings grouped by family, errors first, counts at the end.

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

from ..model import Report, Severity
from ..printable import printable
from ..registry import FAMILIES

CAUTION = (
    "archivist checks the form and consistency of the data, not the geological interpretation; "
    "a map used for engineering, hazard or resource decisions still needs review by a qualified "
    "geologist under local rules."
)
STYLE = {Severity.ERROR: "bold red", Severity.WARNING: "yellow", Severity.NOTICE: "cyan"}


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def write_text(report: Report, stream: IO[str], *, color: bool | None = None) -> None:
    """Write the report as text to ``stream``. ``color=None`` lets rich decide (terminal, NO_COLOR)."""
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
            if f.x is not None and f.y is not None:
                line.append(f"  [at {f.x:.1f}, {f.y:.1f}]", style="dim")
            console.print(line)
    s = report.summary
    console.print()
    if not report.findings:
        console.print(Text("No findings.", style="green"))
    console.print(
        f"{_plural(s.errors, 'error')}, {_plural(s.warnings, 'warning')}, {_plural(s.notices, 'notice')} "
        f"from {_plural(len(report.rules_run), 'rule')}."
    )
    console.print(Text(CAUTION, style="dim"))


def render_text(report: Report) -> str:
    buf = io.StringIO()
    write_text(report, buf, color=False)
    return buf.getvalue()
