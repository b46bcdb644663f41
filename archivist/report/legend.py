"""The legend as the HTML report reads it: its rows in legend order, and the fill of each unit.

The map (``svg.py``) and the page's legend section (``html.py``) both take
their unit colours from :class:`UnitStyles`, so a unit is drawn and listed in
the same colour.
"""

from __future__ import annotations

import re
import zlib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from ..vocab import legend as legend_vocab

if TYPE_CHECKING:
    from ..project import MapProject

HEX = re.compile(r"^#?([0-9a-fA-F]{3}|[0-9a-fA-F]{6})$")


def _colour(value) -> str | None:
    m = HEX.match(str(value or "").strip())
    if not m:
        return None
    h = m.group(1)
    if len(h) == 3:
        h = "".join(c * 2 for c in h)
    return "#" + h.upper()


def _generated_colour(code: str) -> str:
    """A stable pale colour for a unit the legend gives none."""
    hue = zlib.crc32(code.encode("utf-8")) % 360
    return f"hsl({hue},45%,78%)"


def legend_rows(project: MapProject | None) -> list[dict[str, Any]]:
    """The legend table's rows in legend order (``order`` column, then file order), one per unit code.

    Each row is the table's record with its stripped unit code added as
    ``_code``; rows without a code, and repeats of a code, are left out.
    Empty when there is no legend table or it lacks the unit column.
    """
    legend_rows: list[dict[str, Any]] = []
    p = project
    table = p.tables.get("legend") if p is not None else None
    if table is None:
        return legend_rows
    if legend_vocab.column(table, "unit") is None:
        return legend_rows
    records = legend_vocab.records(table)  # keyed "unit", "name", "colour"... whatever the headers
    rows = [records[i] for i in legend_vocab.display_order(table)]
    seen = set()
    for r in rows:
        code = "" if r.get("unit") is None else str(r.get("unit")).strip()
        if not code or code in seen:
            continue
        seen.add(code)
        legend_rows.append({**r, "_code": code})
    return legend_rows


@dataclass(frozen=True)
class UnitStyle:
    """How one unit is drawn: its CSS class on the map, legend colour (None if the legend gives none) and fill."""

    code: str
    cls: str
    colour: str | None
    fill: str


class UnitStyles:
    """The style of each unit code, given out in the order asked for (classes ``u0``, ``u1``, ...)."""

    def __init__(self, legend_rows: list[dict[str, Any]]) -> None:
        self.legend_rows = legend_rows
        self.units: dict[str, UnitStyle] = {}

    def unit_for(self, code: str) -> UnitStyle:
        """The style of unit ``code``: the legend's colour, a generated one, or a hatch when it is not in the legend."""
        if code not in self.units:
            legend = next((r for r in self.legend_rows if r["_code"] == code), None)
            colour = _colour(legend.get("colour")) if legend else None
            fill = colour or (_generated_colour(code) if legend else "url(#nolegend)")
            self.units[code] = UnitStyle(code, f"u{len(self.units)}", colour, fill)
        return self.units[code]
