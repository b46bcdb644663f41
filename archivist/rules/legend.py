"""Family `legend`: is every mapped unit explained, completely and consistently with the time scale?

The legend is a table (`[tables.legend]`) with one row per unit. archivist
reads these columns (found by `archivist.vocab.legend`: the manifest's
`*_field` keys, else the usual header spellings in any case, such as `Code`,
`Unit name`, `Color`, `Min age (Ma)`): `unit`,
`name`, `description`, `age` (a name of the International
Chronostratigraphic Chart), `min_age_ma` and `max_age_ma` (numerical ages,
youngest and oldest, in Ma), `order` (1 = top of the legend = youngest),
`colour` (#RRGGBB), `lithology` and `kind` (sedimentary, volcanic,
intrusive, metamorphic, tectonic, superficial).

None of these checks says the ages are right: they say the legend agrees
with itself, with the map and with the published chart. The mapper's
evidence decides the ages.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Iterator

import numpy as np
import pandas as pd
import shapely

from ..analysis.messages import plural, verb
from ..model import Hit
from ..readers import as_text
from ..registry import rule
from ..vocab.ages import AgeError, parse_age
from ..vocab.legend import REQUIRED, cells, column, wanted

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject, Table

EXEMPT_KINDS = ("intrusive", "intrusion", "tectonic")
_HEX = re.compile(r"^#[0-9A-Fa-f]{6}$")


# ---------------------------------------------------------------- reading the legend

def row_ref(table: Table, i: int | np.integer) -> str:
    """A data row as a mapper finds it: "legend.csv, row 5" or "legend.xlsx, sheet 'units', row 5"."""
    data = table.data
    line = data.line(int(i))
    return f"{data.file}, sheet '{data.sheet}', row {line}" if data.sheet else f"{data.file}, row {line}"


def _unit_name(codes, i) -> str:
    return f"unit '{codes[i]}'" if codes is not None and codes[i] else "a unit with no code"


def _number(text: str) -> float | None:
    """A plain number, or None. A comma is not guessed at: "2,500" may be 2.5 or 2500."""
    try:
        value = float(text)
    except ValueError:
        return None
    return value if np.isfinite(value) else None


def _fmt_ma(v: float) -> str:
    return f"{v:g}"


# ---------------------------------------------------------------- map vs legend

def _mapped(project):
    units = project.layers["units"]
    codes = units.text("unit_field")
    if codes is None:
        return None, None, None
    return units, np.array([c.strip() for c in codes], dtype=object), codes


@rule("legend-missing-unit", family="legend", severity="error", needs=("units", "legend"))
def legend_missing_unit(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A unit code on the map has no entry in the legend.

    Catches
    -------
    Every distinct code of the units layer's `unit_field` that no legend row
    carries in its `unit` column (compared after trimming spaces; a legend
    code differing only in case is named as a hint), and unit polygons with
    no code at all. One finding per code, at its largest polygon, with the
    ids and total area of its polygons.

    Why it matters
    --------------
    A polygon whose unit is not explained cannot be read: the next user sees
    a colour and a code, but not what rock it is or how old.

    Fix
    ---
    Add a legend row for the code, or correct the code on the polygons if it
    is a typo for a unit that is in the legend.

    Example
    -------
    A polygon coded `KSE` with `KES` in the legend gives "unit code 'KSE'
    (1 polygon, 14928.4 m²) has no legend entry", located at the polygon.
    """
    units, codes, raw = _mapped(project)
    legend = project.tables["legend"]
    known = cells(legend, "unit")
    if codes is None or known is None:
        return
    known_set = {k for k in known if k}
    folded = {k.casefold(): k for k in known_set}
    geoms = units.geometry
    areas = shapely.area(geoms)
    frame = pd.DataFrame({"code": codes, "i": np.arange(len(codes))})
    blank = np.flatnonzero(codes == "")
    if len(blank):
        k = blank[np.argmax(areas[blank])]
        yield Hit(
            f"{plural(len(blank), 'unit polygon')} {verb(len(blank), 'has', 'have')} no unit code in {units.field('unit_field')} (total {np.nansum(areas[blank]):.1f} m²).",
            layer="units",
            features=tuple(units.ids[blank]),
            measure=float(np.nansum(areas[blank])),
            geometry=geoms[k],
        )
    missing = frame[(frame.code != "") & ~frame.code.isin(known_set)]
    for code, group in missing.groupby("code", sort=True):
        idx = group.i.to_numpy()
        area = float(np.nansum(areas[idx]))
        hint = f"; the legend has '{folded[code.casefold()]}'" if code.casefold() in folded else ""
        spaced = f" (written '{raw[idx[0]]}')" if raw[idx[0]] != code else ""
        yield Hit(
            f"unit code '{code}'{spaced} ({plural(len(idx), 'polygon')}, {area:.1f} m²) has no legend entry{hint}.",
            layer="units",
            features=tuple(units.ids[idx]),
            measure=area,
            geometry=geoms[idx[np.argmax(areas[idx])]],
        )


@rule("legend-unused-unit", family="legend", severity="notice", needs=("units", "legend"))
def legend_unused_unit(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A legend entry is never used on the map.

    Catches
    -------
    Legend rows whose `unit` code no polygon of the units layer carries.
    A notice: units known only from boreholes, sections or a neighbouring
    sheet are sometimes kept in a legend on purpose.

    Why it matters
    --------------
    An unused entry suggests a unit was lost or recoded while editing the
    map, and it makes the reader look for a unit that is not there.

    Fix
    ---
    Remove the row if the unit is not part of this map, or find the polygons
    that should carry the code.

    Example
    -------
    A legend row `GAB` with no GAB polygon gives "legend.csv, row 11: unit
    'GAB' (Harrowden Gabbro) is not on the map".
    """
    _, codes, _ = _mapped(project)
    legend = project.tables["legend"]
    known = cells(legend, "unit")
    if codes is None or known is None:
        return
    names = cells(legend, "name")
    mapped = set(codes)
    for i in np.flatnonzero([bool(k) and k not in mapped for k in known]):
        name = f" ({names[i]})" if names is not None and names[i] else ""
        yield Hit(f"{row_ref(legend, i)}: unit '{known[i]}'{name} is not on the map.", layer="legend", features=(known[i],))


@rule("legend-duplicate-unit", family="legend", severity="error", needs=("legend",))
def legend_duplicate_unit(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two legend rows carry the same unit code.

    Catches
    -------
    Unit codes (compared after trimming spaces) that appear in more than one
    legend row; the finding names the rows and says whether they are exact
    copies or disagree (and in which columns).

    Why it matters
    --------------
    A code with two entries has two names, ages or colours: the map cannot
    say which one a polygon means, and joins in other software duplicate the
    polygons.

    Fix
    ---
    Keep one row per code; if the rows describe two different units, give
    one of them a new code and recode its polygons.

    Example
    -------
    Two `MAR` rows with different ages give "unit 'MAR' has 2 legend rows
    (legend.csv, rows 6, 11) that differ in age".
    """
    legend = project.tables["legend"]
    known = cells(legend, "unit")
    if known is None:
        return
    frame = legend.frame
    series = pd.Series(known)
    for code, group in series[series != ""].groupby(series[series != ""], sort=True):
        if len(group) < 2:
            continue
        idx = group.index.to_numpy()
        rows = ", ".join(str(legend.data.line(i)) for i in idx)
        texts = frame.iloc[idx].map(lambda v: as_text(v).strip())
        differ = [str(c) for c in frame.columns if texts[c].nunique() > 1]
        how = f"that differ in {', '.join(differ)}" if differ else "that are exact copies"
        where = f"{legend.data.file}, sheet '{legend.data.sheet}'" if legend.data.sheet else legend.data.file
        yield Hit(f"unit '{code}' has {len(idx)} legend rows ({where}, rows {rows}) {how}.", layer="legend", features=(code,))


@rule("legend-incomplete-entry", family="legend", severity="error", needs=("legend",))
def legend_incomplete_entry(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A legend entry lacks a required column: unit, name, description or age.

    Catches
    -------
    A legend table without one of the columns `unit`, `name`,
    `description`, `age` (one finding per column), and rows in which any of
    them is empty (one finding per row, naming the empty columns). Optional
    columns (numerical ages, colour, lithology, kind) are not required here.

    Why it matters
    --------------
    The legend is the only place the next user learns what a unit is and how
    old; a code with no name or age is an unexplained colour on the map.

    Fix
    ---
    Fill in the empty cells; use the International Chronostratigraphic Chart
    name for the age.

    Example
    -------
    A row for `ORB` with no description gives "legend.csv, row 4 (unit
    'ORB'): description is empty".
    """
    legend = project.tables["legend"]
    present = {}
    for key in REQUIRED:
        col = cells(legend, key)
        if col is None:
            name = wanted(legend, key)
            have = ", ".join(map(str, legend.frame.columns)) or "none"
            yield Hit(f"{legend.source} has no '{name}' column (columns: {have}).", layer="legend")
        else:
            present[key] = col
    if not present:
        return
    codes = present.get("unit")
    n = len(legend.frame)
    empty = {k: np.array([not v for v in col], dtype=bool) for k, col in present.items()}
    for i in range(n):  # rows of a legend: tens, not a hot path
        blanks = [k for k in present if empty[k][i]]
        if blanks:
            what = ", ".join(blanks)
            yield Hit(
                f"{row_ref(legend, i)} ({_unit_name(codes, i)}): {what} {'is' if len(blanks) == 1 else 'are'} empty.",
                layer="legend",
                features=(codes[i],) if codes is not None and codes[i] else (),
            )


def colour_problem(text: str) -> str | None:
    """None when ``text`` is a #RRGGBB colour, else why not (with the #RRGGBB form when it can be read)."""
    t = text.strip()
    if _HEX.match(t):
        return None
    if not t:
        return "is empty"
    if re.fullmatch(r"#?[0-9A-Fa-f]{3}", t):
        h = t.lstrip("#")
        return f"is a short hex form; write #{''.join(c * 2 for c in h).upper()}"
    if re.fullmatch(r"[0-9A-Fa-f]{6}", t):
        return f"lacks the '#'; write #{t.upper()}"
    m = re.fullmatch(r"(?:rgb\s*\()?\s*(\d{1,3})\s*[,; ]\s*(\d{1,3})\s*[,; ]\s*(\d{1,3})\s*\)?", t, re.IGNORECASE)
    if m and all(int(v) <= 255 for v in m.groups()):
        return "is an RGB triple; write #" + "".join(f"{int(v):02X}" for v in m.groups())
    return "is not a colour in the form #RRGGBB"


@rule("legend-bad-colour", family="legend", severity="warning", needs=("legend",))
def legend_bad_colour(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A legend colour is not written as #RRGGBB.

    Catches
    -------
    Cells of the `colour` (or `color`) column that are empty or not a
    hash sign and six hexadecimal digits; short forms (#FFF), missing hash
    signs and RGB triples (255,0,0) are recognised and their #RRGGBB form is
    given. No finding when the legend has no colour column. Whether the
    colours follow a national or house colour scheme is not checked.

    Why it matters
    --------------
    The colour is how the next user rebuilds the map's look in another GIS or
    in print; colour names and other notations are read differently by
    different software, or not at all.

    Fix
    ---
    Write each colour as #RRGGBB (the form given in the finding where it can
    be worked out).

    Example
    -------
    `255,243,176` gives "legend.csv, row 2, column 'colour': '255,243,176'
    is an RGB triple; write #FFF3B0".
    """
    legend = project.tables["legend"]
    col = column(legend, "colour")
    if col is None:
        return
    values = cells(legend, "colour")
    codes = cells(legend, "unit")
    if values is None:
        return
    for i, text in enumerate(values):
        why = colour_problem(text)
        if why:
            yield Hit(
                f"{legend.data.cell(i, col)} ({_unit_name(codes, i)}): '{text}' {why}.",
                layer="legend",
                features=(codes[i],) if codes is not None and codes[i] else (),
            )


def _span_words(span) -> str:
    names = "-".join(dict.fromkeys(span.units))
    return f"{names}, {_fmt_ma(span.base_ma)}-{_fmt_ma(span.top_ma)} Ma"


@rule("legend-age-unknown", family="legend", severity="warning", needs=("legend",))
def legend_age_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A legend age is not a unit of the International Chronostratigraphic Chart, or its numbers do not fit it.

    Catches
    -------
    `age` cells that name no unit of the International Chronostratigraphic
    Chart (International Commission on Stratigraphy, CC BY 4.0; versions
    2024-12, the default, and 2023-09, chosen with `[checks] chart`; built
    from the ICS's own data, see `archivist/reference/`). Accepted (read by
    `archivist.vocab.ages`): chart names in any case, with or without accents,
    with British spellings (Palaeogene) and in every language the chart gives
    (Jura, Kreide, Jurassique, Cretácico); formal Lower/Middle/Upper and their
    Early/Middle/Late spellings; two names joined by a hyphen, "/", "to", "or" or "and"
    ("Cenomanian-Turonian", "Late Triassic to Early Jurassic", "Permian or
    Triassic"), spanning from the base of the older to the top of the
    younger; the combining forms of the trade (Permo-Triassic,
    Siluro-Devonian, Cambro-Ordovician, Plio-Pleistocene, Mio-Pliocene,
    Permo-Carboniferous, Devono-Carboniferous...: common practice); numerical
    ages with their unit ("250-260 Ma", "c. 255 Ma", "1.2-1.4 Ga"); a "?" of
    doubt. An informal Early/Middle/Late of a unit without formal
    subdivisions of that name ("Late Cambrian", "Late Eocene", and "Early
    Late Cretaceous" inside the formal Upper Cretaceous) is read as the older,
    middle or younger third of the unit, with half a third of leeway inside
    the unit (common practice: such subdivisions have no agreed boundaries,
    so only a clear contradiction is reported); of an eon or era it stands
    for the whole unit. Early/Middle/Late Pleistocene and Holocene are their
    formal subdivisions (from memory), Early/Middle/Late Proterozoic the
    Paleo-, Meso- and Neoproterozoic (common practice). Also:
    `min_age_ma`/`max_age_ma` that are not numbers, are swapped, or lie
    outside the named interval by more than the chart's stated uncertainty
    on that boundary. Regional stages (e.g. Namurian) and obsolete names
    (Tertiary) are reported, with that hint (the list of such names is from
    memory); whether they are acceptable is for the mapper and local practice
    to decide. A boundary the chart marks approximate without a ± gets no
    extra margin. Not covered: names combined across languages
    ("Unterkreide"), and regional stages as a time scale of their own.

    Why it matters
    --------------
    A legend age is how a map joins every other map and database: a name
    outside the chart cannot be placed in time by software or by a reader
    abroad, and numbers that contradict the name mean one of them is wrong.

    Fix
    ---
    Use the chart's name (keep a regional name in the description if it is
    useful), correct the spelling, or correct the numerical ages.

    Example
    -------
    `age = "Famennian"` with `max_age_ma = 380` gives "legend.csv, row 9,
    column 'max_age_ma' (unit 'AMB'): 380 Ma is older than the base of the
    Famennian (372.15 Ma ± 0.46) by 7.85 Myr (ICS chart 2024-12)". `age =
    "Late Cambrian"` with `max_age_ma = 530` gives "... 530 Ma is older than
    the base of Late Cambrian ... by ... Myr ...; 'Late Cambrian' is
    informal: read as the younger third of the Cambrian (common practice),
    with ... Myr of leeway inside the Cambrian".
    """
    legend = project.tables["legend"]
    ages = cells(legend, "age")
    codes = cells(legend, "unit")
    age_col = column(legend, "age")
    if ages is None or age_col is None:
        return
    lo_col, hi_col = column(legend, "min_age_ma"), column(legend, "max_age_ma")
    lo_txt, hi_txt = cells(legend, "min_age_ma"), cells(legend, "max_age_ma")
    for i, text in enumerate(ages):
        unit = _unit_name(codes, i)
        feats = (codes[i],) if codes is not None and codes[i] else ()
        span = None
        if text:
            try:
                span = parse_age(text, project.config.chart)
            except AgeError as exc:
                yield Hit(f"{legend.data.cell(i, age_col)} ({unit}): '{text}' {exc}.", layer="legend", features=feats)
        nums = {}
        for key, col, txt in (("min_age_ma", lo_col, lo_txt), ("max_age_ma", hi_col, hi_txt)):
            if col is None or txt is None or not txt[i]:
                continue
            value = _number(txt[i])
            if value is None or value < 0:
                yield Hit(
                    f"{legend.data.cell(i, col)} ({unit}): '{txt[i]}' is not an age in Ma (a number, 0 or more).",
                    layer="legend",
                    features=feats,
                )
                continue
            nums[key] = (value, col)
        if len(nums) == 2 and nums["min_age_ma"][0] > nums["max_age_ma"][0]:
            yield Hit(
                f"{row_ref(legend, i)} ({unit}): min_age_ma {_fmt_ma(nums['min_age_ma'][0])} is older than max_age_ma "
                f"{_fmt_ma(nums['max_age_ma'][0])}; min_age_ma is the youngest age, max_age_ma the oldest.",
                layer="legend",
                features=feats,
            )
            continue
        if span is None:
            continue
        informal = f"; {span.note}" if span.note else ""
        for key, (value, col) in nums.items():
            if span.contains(value):
                continue
            if value > span.base_ma:
                off = value - span.base_ma
                limit = f"older than the base of {text} ({_fmt_ma(span.base_ma)} Ma"
                unc = span.base_slack_ma
            else:
                off = span.top_ma - value
                limit = f"younger than the top of {text} ({_fmt_ma(span.top_ma)} Ma"
                unc = span.top_slack_ma
            limit += f" ± {_fmt_ma(unc)})" if unc else ")"
            yield Hit(
                f"{legend.data.cell(i, col)} ({unit}): {_fmt_ma(value)} Ma is {limit} by {off:.3g} Myr "
                f"({'as written in the age column' if span.numeric else f'ICS chart {span.chart}'}){informal}.",
                layer="legend",
                features=feats,
                measure=off,
            )


def _intervals(legend, chart: str):
    """Per legend row: (top_ma, base_ma) from the numerical ages if usable, else from the chart; NaN when unknown.

    An informal Early/Middle/Late is widened by its leeway (only a clear
    contradiction counts); ``exact`` holds the unwidened thirds and
    ``group`` the unit cut in thirds, so that two informal parts of the same
    unit are ordered exactly.
    """
    n = len(legend.frame)
    top, base = np.full(n, np.nan), np.full(n, np.nan)
    exact_top, exact_base = np.full(n, np.nan), np.full(n, np.nan)
    group = np.full(n, None, dtype=object)
    ages = cells(legend, "age")
    lo, hi = cells(legend, "min_age_ma"), cells(legend, "max_age_ma")
    for i in range(n):
        a = _number(lo[i]) if lo is not None and lo[i] else None
        b = _number(hi[i]) if hi is not None and hi[i] else None
        if a is not None and b is not None and 0 <= a <= b:
            top[i], base[i] = a, b
            continue
        if ages is not None and ages[i]:
            try:
                span = parse_age(ages[i], chart)
            except AgeError:
                continue
            top[i], base[i] = span.widest
            exact_top[i], exact_base[i], group[i] = span.top_ma, span.base_ma, span.thirds_of
    return top, base, exact_top, exact_base, group


@rule("legend-age-order", family="legend", severity="warning", needs=("legend",))
def legend_age_order(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The legend's order (youngest first) contradicts the units' ages.

    Catches
    -------
    Units listed above a unit that is wholly younger than they are, using
    `min_age_ma`/`max_age_ma` where both are given, else the span of the
    chart unit named in `age` (read as in `legend-age-unknown`; an informal
    Early/Middle/Late counts with its leeway, so only a clear contradiction
    is reported, except that two informal parts of the same unit, such as
    "Early Cambrian" and "Late Cambrian", are ordered exactly). Order is
    the `order` column (1 = top) or,
    without one, the row order. Units whose `kind` is intrusive or tectonic
    are exempt: legends conventionally list intrusions and tectonic units
    apart from the stratigraphic column. Overlapping ages are never a
    contradiction. A legend listed wholly oldest-first gives one finding.

    Why it matters
    --------------
    Readers take the legend's order as the stratigraphic column; an older
    unit above a younger one tells them a wrong story, or flags that an age
    or an order number is mistyped.

    Fix
    ---
    Renumber `order`, or correct the age of the unit named; mark intrusions
    and tectonic units as such in `kind`.

    Example
    -------
    `DUN` (Visean) and `KES` (Kasimovian) with their orders swapped give
    "legend.csv, row 7: unit 'DUN' (order 4, 333-344 Ma) is listed above
    younger units MAR (order 5, 309-320 Ma), KES (order 6, 304-306.5 Ma)",
    and a second finding for MAR, now above KES.
    """
    legend = project.tables["legend"]
    n = len(legend.frame)
    if n < 2:
        return
    codes = cells(legend, "unit")
    kinds = cells(legend, "kind")
    order_txt = cells(legend, "order")
    if order_txt is not None:
        order = np.array([_number(t) if t else None for t in order_txt], dtype=float)
        by = "order"
    else:
        order = np.arange(n, dtype=float)
        by = "row order"
    top, base, exact_top, exact_base, group = _intervals(legend, project.config.chart)
    exempt = np.array([k.casefold().startswith(EXEMPT_KINDS) for k in kinds], dtype=bool) if kinds is not None else np.zeros(n, bool)
    ok = np.isfinite(order) & np.isfinite(top) & np.isfinite(base) & ~exempt
    # above[i, j]: i is listed above j; older[i, j]: all of i is older than all of j (touching
    # spans such as two successive stages count as ordered; equal spans do not).
    above = (order[:, None] < order[None, :]) & ok[:, None] & ok[None, :]
    differ = (base[:, None] != base[None, :]) | (top[:, None] != top[None, :])
    older = (top[:, None] >= base[None, :]) & differ
    younger = (base[:, None] <= top[None, :]) & differ
    # Two informal parts of one unit ("Early Cambrian", "Late Cambrian"): their thirds, unwidened.
    siblings = (group[:, None] == group[None, :]) & (group[:, None] != None)  # noqa: E711 (element-wise)
    differ_exact = (exact_base[:, None] != exact_base[None, :]) | (exact_top[:, None] != exact_top[None, :])
    older = np.where(siblings, (exact_top[:, None] >= exact_base[None, :]) & differ_exact, older)
    younger = np.where(siblings, (exact_base[:, None] <= exact_top[None, :]) & differ_exact, younger)
    top = np.where(np.isnan(exact_top), top, exact_top)  # the findings show the thirds themselves
    base = np.where(np.isnan(exact_base), base, exact_base)
    inverted = above & older
    concordant = above & younger
    def name(i: int | np.integer) -> str:
        return str(codes[i]) if codes is not None and codes[i] else f"row {legend.data.line(int(i))}"

    if inverted.sum() >= 2 and not concordant.any():
        yield Hit(
            f"{legend.source}: the legend is listed oldest first by {by}; archivist expects youngest first (order 1 = youngest).",
            layer="legend",
        )
        return
    for i in np.flatnonzero(inverted.any(axis=1)):
        below = np.flatnonzero(inverted[i])
        below = below[np.argsort(order[below])]
        items = ", ".join(
            f"{name(j)} ({by} {order[j]:g}, {_fmt_ma(top[j])}-{_fmt_ma(base[j])} Ma)" for j in below
        )
        yield Hit(
            f"{row_ref(legend, i)}: unit '{name(i)}' ({by} {order[i]:g}, {_fmt_ma(top[i])}-{_fmt_ma(base[i])} Ma) "
            f"is listed above younger {'unit' if len(below) == 1 else 'units'} {items}.",
            layer="legend",
            features=(name(i), *(name(j) for j in below)),
        )
