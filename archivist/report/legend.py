"""The legend as the HTML report reads it: its rows in legend order, and the fill of each unit.

The map (``svg.py``) and the page's legend section (``html.py``) both take
their unit colours from :class:`UnitStyles`, so a unit is drawn and listed in
the same colour. :func:`unit_fills` decides the fill of each unit, in this
order:

1. the legend's own colour (``#RRGGBB`` or ``#RGB``), never altered;
2. else the official colour of the unit's age on the International
   Chronostratigraphic Chart (the chart version the check used): the chart
   unit the age text names, or the smallest chart unit holding the span it
   (or the legend's ``min_age_ma``/``max_age_ma``) covers. Two touching units
   that would get the same chart colour are told apart by a lighter or
   darker shade of it;
3. else a colour of :data:`PALETTE`, given so that touching units get
   colours far apart in CIELAB (greedy colouring of the units' adjacency
   graph, most-connected units first).

Distances between colours are CIE 1976 ΔE*ab in CIELAB (D65 white), from
sRGB as IEC 61966-2-1 defines it. What this does not do: it does not look
at units that only meet across a gap wider than one millimetre of the map,
and with more than eleven mutually touching uncoloured units some
neighbours share a palette colour.
"""

from __future__ import annotations

import colorsys
import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Iterable, Mapping

import numpy as np

from ..readers import as_text
from ..vocab import legend as legend_vocab

if TYPE_CHECKING:
    from ..project import Layer, MapProject

HEX = re.compile(r"^#?([0-9a-fA-F]{3}|[0-9a-fA-F]{6})$")

#: The qualitative palette for units with neither a legend colour nor a readable age: ColorBrewer's
#: "Set3" (Cynthia Brewer, colorbrewer2.org, Apache License 2.0) without its grey, which reads as
#: "not mapped". Pale colours, so that lines, labels and findings stay readable on top.
PALETTE = (
    "#8DD3C7", "#FFFFB3", "#BEBADA", "#FB8072", "#80B1D3", "#FDB462",
    "#B3DE69", "#FCCDE5", "#BC80BD", "#CCEBC5", "#FFED6F",
)
#: Two fills closer than this (ΔE*ab) are taken as the same colour: a touching unit gets a shade.
#: About five times the just-noticeable difference of 2.3 (Sharma, "Digital Color Imaging
#: Handbook", 2003): common practice for colours that must be told apart at a glance.
DISTINCT_DE = 12.0
#: The shades tried, in order, for a chart colour that a touching unit already has (HLS lightness steps).
SHADES = (0.0, 0.12, -0.12, 0.22, -0.22)
#: Polygons closer than this many millimetres of the printed map count as touching.
TOUCH_MM = 1.0
#: Ranks whose colour stands for a span of several named units ("Permo-Triassic" is not the Phanerozoic).
_BROAD_RANKS = ("supereon", "eon", "era")


def _colour(value) -> str | None:
    m = HEX.match(str(value or "").strip())
    if not m:
        return None
    h = m.group(1)
    if len(h) == 3:
        h = "".join(c * 2 for c in h)
    return "#" + h.upper()


def srgb_to_lab(colour: str) -> tuple[float, float, float]:
    """CIELAB (L*, a*, b*; D65 white) of an ``#RRGGBB`` sRGB colour.

    sRGB decoding and the linear-RGB to XYZ matrix are those of IEC
    61966-2-1; L*, a*, b* are CIE 15's definitions.
    """
    h = colour.lstrip("#")
    rgb = np.array([int(h[i:i + 2], 16) / 255.0 for i in (0, 2, 4)])
    lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ lin / np.array([0.9505, 1.0, 1.0890])
    d = 6.0 / 29.0
    f = np.where(xyz > d**3, np.cbrt(xyz), xyz / (3 * d * d) + 4.0 / 29.0)
    return float(116 * f[1] - 16), float(500 * (f[0] - f[1])), float(200 * (f[1] - f[2]))


def delta_e(a: str, b: str) -> float:
    """CIE 1976 colour difference ΔE*ab between two ``#RRGGBB`` colours."""
    return math.dist(srgb_to_lab(a), srgb_to_lab(b))


def shade(colour: str, step: float) -> str:
    """``colour`` with its HLS lightness moved by ``step`` (-1..1), clipped to the visible range."""
    h = colour.lstrip("#")
    r, g, b = (int(h[i:i + 2], 16) / 255.0 for i in (0, 2, 4))
    hue, light, sat = colorsys.rgb_to_hls(r, g, b)
    r, g, b = colorsys.hls_to_rgb(hue, min(max(light + step, 0.08), 0.95), sat)
    return "#" + "".join(f"{round(v * 255):02X}" for v in (r, g, b))


def layer_labels(layer: Layer, key: str) -> np.ndarray | None:
    """A layer's column named by manifest key ``key`` as stripped text (codes, kinds), or None.

    Read as the rules read identifiers (``7.0`` is ``7``), converting each
    distinct value once.
    """
    import pandas as pd

    col = layer.field(key)
    if col is None:
        return None
    codes, uniques = pd.factorize(layer.frame[col], use_na_sentinel=True)
    text = np.array([as_text(u).strip() for u in uniques] + [""], dtype=object)
    return text[codes]


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


def _number(value: Any) -> float | None:
    try:
        v = float(str(value).strip())
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def chart_colour(row: Mapping[str, Any], version: str) -> tuple[str, str] | None:
    """The official chart colour of a legend row's age, and the chart unit it is the colour of; or None.

    The age text is read by :func:`archivist.vocab.ages.parse_age` on chart
    ``version``. A text naming one chart unit takes that unit's colour
    ("Visean", "Late Jurassic", "Early Cambrian" -> Cambrian); a span takes
    the colour of the smallest chart unit holding all of it
    ("Bashkirian-Moscovian" -> Pennsylvanian, "287-291 Ma" -> Cisuralian),
    but a span of named units never an eon's or era's colour: it then takes
    its oldest unit's ("Permo-Triassic" -> Permian). Without a readable age
    text, the row's ``min_age_ma``/``max_age_ma`` are the span.
    """
    from .. import reference
    from ..vocab.ages import AgeError, parse_age

    span = None
    text = row.get("age")
    if text is not None and str(text).strip() and str(text).strip().lower() != "nan":
        try:
            span = parse_age(str(text), version)
        except AgeError:
            span = None
    named: tuple[str, ...] = ()
    if span is not None:
        top, base, named = span.top_ma, span.base_ma, tuple(dict.fromkeys(span.units))
        if len(named) == 1:
            unit = reference.lookup(named[0], version)
            if unit is not None and unit.color:
                return unit.color.upper(), unit.name
    else:
        lo, hi = _number(row.get("min_age_ma")), _number(row.get("max_age_ma"))
        if lo is None and hi is None:
            return None
        lo = hi if lo is None else lo
        hi = lo if hi is None else hi
        assert lo is not None and hi is not None
        top, base = min(lo, hi), max(lo, hi)
    holders = [
        i for i in reference.intervals(version)
        if i.color and i.base_ma >= base - 1e-9 and i.top_ma <= top + 1e-9 and not (named and i.rank in _BROAD_RANKS)
    ]
    if holders:
        best = min(holders, key=lambda i: (i.base_ma - i.top_ma, i.name))
        return best.color.upper(), best.name
    units = [u for u in (reference.lookup(n, version) for n in named) if u is not None and u.color]
    if units:
        oldest = max(units, key=lambda u: u.base_ma)
        return oldest.color.upper(), oldest.name
    return None


def unit_neighbours(
    codes: np.ndarray, geoms: np.ndarray, distance: float, of: Iterable[str] | None = None
) -> dict[str, set[str]]:
    """Which unit codes touch which: polygons of different codes within ``distance`` (map units) of each other.

    One STRtree query (GEOS ``dwithin``); a unit is never its own
    neighbour. ``of`` limits the query to the polygons of those codes (the
    answer is then complete for them, and for the others only as far as they
    touch them).
    """
    import shapely

    codes = np.asarray(codes, dtype=object)
    geoms = np.asarray(geoms, dtype=object)
    out: dict[str, set[str]] = {str(c): set() for c in codes.tolist()}
    ok = ~shapely.is_missing(geoms)
    ok[ok] = ~shapely.is_empty(geoms[ok])
    idx = np.flatnonzero(ok)
    if len(idx) < 2:
        return out
    tree = shapely.STRtree(geoms[idx])
    ask = idx if of is None else idx[np.isin(codes[idx], list(of))]
    q, b = tree.query(geoms[ask], predicate="dwithin", distance=max(float(distance), 0.0))
    ca, cb = codes[ask[q]], codes[idx[b]]
    diff = ca != cb
    for x, y in set(zip(ca[diff].tolist(), cb[diff].tolist())):
        out[str(x)].add(str(y))
        out[str(y)].add(str(x))
    return out


@dataclass(frozen=True)
class UnitFill:
    """The fill of one legend unit and where it comes from.

    ``source`` is ``"legend"`` (the legend's colour), ``"chart"`` (the chart
    colour of ``chart_unit``, ``shaded`` when lightened or darkened to stand
    apart from a touching unit) or ``"palette"``.
    """

    colour: str
    source: str
    chart_unit: str | None = None
    shaded: bool = False


def _min_distance(colour: str, others: Iterable[str]) -> float:
    return min((delta_e(colour, o) for o in others), default=math.inf)


def unit_fills(
    legend_rows: list[dict[str, Any]], neighbours: Mapping[str, Iterable[str]], chart_version: str
) -> dict[str, UnitFill]:
    """The fill of every legend unit (see the module's documentation for the order of sources)."""
    fills: dict[str, UnitFill] = {}
    codes = [r["_code"] for r in legend_rows]
    near = {c: set(neighbours.get(c, ())) for c in codes}
    for r in legend_rows:
        c = _colour(r.get("colour"))
        if c:
            fills[r["_code"]] = UnitFill(c, "legend")
    for r in legend_rows:
        code = r["_code"]
        if code in fills:
            continue
        hit = chart_colour(r, chart_version)
        if hit is None:
            continue
        base, name = hit
        taken = [fills[n].colour for n in near[code] if n in fills]
        shades = [shade(base, s) if s else base for s in SHADES]
        good = [c for c in shades if _min_distance(c, taken) >= DISTINCT_DE]
        pick = good[0] if good else max(shades, key=lambda c: _min_distance(c, taken))
        fills[code] = UnitFill(pick, "chart", name, pick != base)
    rest = [c for c in codes if c not in fills]
    rank = {c: i for i, c in enumerate(codes)}
    used: dict[str, int] = dict.fromkeys(PALETTE, 0)
    for code in sorted(rest, key=lambda c: (-len(near[c]), rank[c])):
        taken = [fills[n].colour for n in near[code] if n in fills]
        # far from every touching unit first (anything beyond 40 is as good), then the least used
        pick = max(PALETTE, key=lambda p: (min(_min_distance(p, taken), 40.0), -used[p], -PALETTE.index(p)))
        used[pick] += 1
        fills[code] = UnitFill(pick, "palette")
    return fills


@dataclass(frozen=True)
class UnitStyle:
    """How one unit is drawn: its CSS class on the map, legend colour (None if the legend gives none) and fill.

    ``source`` says where the fill comes from: ``"legend"``, ``"chart"``,
    ``"palette"`` or ``"none"`` (a code the legend lacks: hatched).
    """

    code: str
    cls: str
    colour: str | None
    fill: str
    source: str = "legend"
    chart_unit: str | None = None
    shaded: bool = False


class UnitStyles:
    """The style of each unit code, given out in the order asked for (classes ``u0``, ``u1``, ...)."""

    def __init__(self, legend_rows: list[dict[str, Any]], fills: Mapping[str, UnitFill] | None = None) -> None:
        self.legend_rows = legend_rows
        self.fills = dict(fills) if fills is not None else unit_fills(legend_rows, {}, _default_chart())
        self.units: dict[str, UnitStyle] = {}

    def unit_for(self, code: str) -> UnitStyle:
        """The style of unit ``code``: its fill from :func:`unit_fills`, or a hatch when it is not in the legend."""
        if code not in self.units:
            fill = self.fills.get(code)
            cls = f"u{len(self.units)}"
            if fill is None:
                self.units[code] = UnitStyle(code, cls, None, "url(#nolegend)", "none")
            else:
                colour = fill.colour if fill.source == "legend" else None
                self.units[code] = UnitStyle(code, cls, colour, fill.colour, fill.source, fill.chart_unit, fill.shaded)
        return self.units[code]

    @property
    def chart_units(self) -> list[str]:
        """Legend codes drawn in a chart colour, in legend order."""
        return [r["_code"] for r in self.legend_rows if self.fills.get(r["_code"], UnitFill("", "")).source == "chart"]


def _default_chart() -> str:
    from ..reference import DEFAULT_CHART

    return DEFAULT_CHART


def project_fills(project: MapProject | None, legend_rows: list[dict[str, Any]], touch: float) -> dict[str, UnitFill]:
    """:func:`unit_fills` for a project: its units layer's adjacency (within ``touch`` map units) and its chart."""
    neighbours: dict[str, set[str]] = {}
    layer = project.layers.get("units") if project is not None else None
    uncoloured = [r["_code"] for r in legend_rows if _colour(r.get("colour")) is None]
    if layer is not None and len(layer.frame) and uncoloured:  # only units without a legend colour need them
        codes = layer_labels(layer, "unit_field")
        if codes is not None:
            neighbours = unit_neighbours(codes, np.asarray(layer.geometry, dtype=object), touch, of=uncoloured)
    version = getattr(getattr(project, "config", None), "chart", None) or _default_chart()
    return unit_fills(legend_rows, neighbours, version)
