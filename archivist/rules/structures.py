"""Family `structures`: are orientation measurements in range, of a known kind, in a declared convention?

Structural measurements are points (`[layers.structures]`) with a kind
(`kind_field`), an azimuth (`azimuth_field`) and a dip (`dip_field`), in
degrees. The manifest's `convention` says what the azimuth of a planar
measurement means:

- `dip-direction` (the default): the azimuth is the direction the plane
  dips towards, clockwise from north, 0-360;
- `right-hand-rule`: the azimuth is the strike, taken so that the plane
  dips to the right when one looks along it (dip direction = strike + 90).

Linear measurements (lineation, fold axis) are always a trend and plunge:
the azimuth is the trend (0-360) and the dip field holds the plunge (0-90,
or -90-90 with `upward_plunge = "negative"`, a negative plunge pointing
upward). Overturned bedding keeps its dip 0-90 and is marked by its kind
(`overturned bedding`) or a yes/no column (`overturned_field`). A rake
column (`rake_field`) holds the rake of a line in the row's plane, 0-180.
`north` (true, magnetic, grid) and `declination` say which north the
azimuths are measured from. The words and conventions live in
:mod:`archivist.vocab.structures`.

These checks test that the numbers can be read; they cannot say that a
measurement is right, or that a dip of 90 is not a mistyped 9.
"""

from __future__ import annotations

import difflib
import re
from typing import TYPE_CHECKING, Any, Callable, Iterable, Iterator

import numpy as np
import pandas as pd
import shapely

from ..analysis.messages import plural, verb
from ..model import Hit
from ..registry import rule
from ..vocab import structures as sv
from ..vocab.structures import LINEAR_KINDS

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
    from ..project import Layer, MapProject

_QUADRANT = re.compile(r"^[NS]\s*\d{1,2}(?:\.\d+)?\s*[EW]$", re.IGNORECASE)
_fold = sv.fold
_fold_all = sv.fold_all


def convention_statement(project: MapProject) -> str | None:
    """The conventions of the structures layer for package metadata (see :func:`archivist.vocab.structures.convention_statement`)."""
    layer = project.layers.get("structures")
    return None if layer is None else sv.convention_statement(layer)


def _numbers(layer: Layer, key: str) -> tuple[str | None, Any, Any]:
    col = layer.field(key)
    if col is None:
        return None, None, None
    raw = layer.frame[col]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float, copy=True)
    text = raw.astype(object).where(raw.notna(), "").map(str).str.strip().to_numpy(dtype=object)
    return col, values, text


def _kinds(layer: Layer) -> np.ndarray:
    text = layer.text("kind_field") if layer.field("kind_field") else None
    return text if text is not None else np.full(len(layer.frame), "", dtype=object)


def _where(layer: Layer, rows: np.ndarray) -> Any:
    pts = [g for g in layer.geometry[rows] if g is not None and not g.is_empty]
    return pts[0] if len(pts) == 1 else (shapely.multipoints(pts) if pts else None)


def _grouped_hits(layer: Layer, groups: Iterable[tuple[np.ndarray, Callable[[np.ndarray], str]]]) -> Iterator[Hit]:
    """One hit per group of measurements a mask selects, worded by the group's ``words(rows)``."""
    for mask, words in groups:
        rows = np.flatnonzero(mask)
        if rows.size:
            yield Hit(
                f"structures: {plural(rows.size, 'measurement')} {words(rows)}.",
                layer="structures",
                features=tuple(layer.ids[rows]),
                geometry=_where(layer, rows),
            )


@rule("structure-out-of-range", family="structures", severity="error", needs=("structures",))
def structure_out_of_range(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An azimuth is outside 0-360, a dip outside 0-90 or a rake outside 0-180 degrees, or one is not a number.

    Catches
    -------
    Measurements whose azimuth (dip direction, right-hand-rule strike, or
    trend for lineations and fold axes) is not within 0-360, whose dip is not
    within 0-90, whose plunge is not within 0-90 (or -90-90 when
    `upward_plunge = "negative"` lets a negative plunge mean a line pointing
    upward), or where either is blank or not a number; and, with a
    `rake_field`, a rake that is not a number or not within 0-180 (a blank
    rake is no rake). A dip of more than 90 on bedding is reported with the
    way to write an overturned bed: dip 0-90, marked by the kind `overturned
    bedding` or the `overturned_field` flag. Quadrant notation such as "N30E"
    is recognised and reported as such. The limits are those of the trade's
    conventions (common practice). It does not judge whether a value is
    plausible for the kind or the place.

    Why it matters
    --------------
    Out-of-range values are typos (a dip of 125 for 12.5 or 25), swapped
    fields or gradians; they break stereonets and 3D models built from the
    map, and no one can tell later what the geologist measured.

    Fix
    ---
    Correct the value from the field notebook; convert quadrant notation and
    other units to azimuths in degrees, in the convention the manifest
    declares; write an overturned bed as its dip 0-90 with the overturned
    kind or flag.

    Example
    -------
    A bedding with dip 125 gives "structures feature 7 (bedding): dip 125
    is outside 0-90 (an overturned bed keeps its dip 0-90 and is marked
    overturned)".
    """
    layer = project.layers["structures"]
    kinds = _kinds(layer)
    folded = _fold_all(kinds)
    linear = np.isin(folded, LINEAR_KINDS)
    facing = np.isin(folded, sv.FACING_KINDS)
    upward = layer.spec.get("upward_plunge") == "negative"
    geoms = layer.geometry
    problems: dict[int, list[str]] = {}
    for key, lo, hi, plane_word, line_word in (
        ("azimuth_field", 0.0, 360.0, "azimuth", "trend"),
        ("dip_field", 0.0, 90.0, "dip", "plunge"),
        ("rake_field", 0.0, 180.0, "rake", "rake"),
    ):
        col, values, text = _numbers(layer, key)
        if col is None:
            continue
        blank = text == ""
        nan = np.isnan(values)
        low = np.full(len(values), lo)
        if key == "dip_field" and upward:
            low[linear] = -90.0
        with np.errstate(invalid="ignore"):
            out = ~nan & ((values < low) | (values > hi))
        bad = nan & ~blank | out if key == "rake_field" else nan | out
        for i in np.flatnonzero(bad):
            word = line_word if linear[i] else plane_word
            if blank[i]:
                why = f"has no {word} ({col} is empty)"
            elif nan[i] and key == "azimuth_field" and _QUADRANT.match(text[i]):
                why = f"{word} '{text[i]}' is quadrant notation; write it as an azimuth 0-360"
            elif nan[i]:
                why = f"{word} '{text[i]}' is not a number"
            else:
                why = f"{word} {values[i]:g} is outside {low[i]:g}-{hi:g}"
                if key == "dip_field" and facing[i] and 90.0 < values[i] <= 180.0:
                    why += " (an overturned bed keeps its dip 0-90 and is marked overturned)"
            problems.setdefault(int(i), []).append(why)
    for row in sorted(problems):
        fid = layer.ids[row]
        kind = f" ({kinds[row]})" if kinds[row] else ""
        g = geoms[row]
        yield Hit(
            f"structures feature {fid}{kind}: {'; '.join(problems[row])}.",
            layer="structures",
            features=(fid,),
            geometry=g if g is not None and not g.is_empty else None,
        )


@rule("structure-kind-unknown", family="structures", severity="warning", needs=("structures",))
def structure_kind_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A structural measurement's kind is not in the vocabulary.

    Catches
    -------
    Values of the kind field that are not in `checks.structure_kinds`
    (default: the trade's usual kinds: bedding, foliation, cleavage, joint,
    vein, fault plane, lineation, fold axis), compared without regard to
    case or to spaces, underscores and hyphens between words; blank kinds.
    `overturned bedding` is a known kind whenever `bedding` is.
    One finding per distinct value, with its features and the closest kind
    in the vocabulary when there is one.

    Why it matters
    --------------
    The kind says what was measured; "S0", "bed" and "Bedding" for one thing
    split a stereonet into three, and a kind nobody knows cannot be plotted
    or interpreted by the next user.

    Fix
    ---
    Recode the values to the vocabulary, or extend `structure_kinds` in
    `[checks]` when the map really records other kinds (e.g. "axial
    plane", "S2 foliation").

    Example
    -------
    Three measurements with kind `bed` give "kind 'bed' (3 measurements)
    is not in the structure kinds; closest: bedding".
    """
    layer = project.layers["structures"]
    kinds = layer.text("kind_field")
    if kinds is None:
        return
    vocab = {_fold(k): k for k in ctx.config.structure_kinds}
    if "bedding" in vocab:
        vocab.update({k: k for k in sv.OVERTURNED_KINDS})
    folded = _fold_all(kinds)
    unknown = ~np.isin(folded, list(vocab))
    geoms = layer.geometry
    frame = pd.DataFrame({"kind": kinds[unknown], "i": np.flatnonzero(unknown)})
    for kind, group in frame.groupby("kind", sort=True):
        idx = group.i.to_numpy()
        if not str(kind).strip():
            label = f"{plural(len(idx), 'measurement')} {verb(len(idx), 'has', 'have')} no kind"
            close = []
        else:
            label = f"kind '{kind}' ({plural(len(idx), 'measurement')}) is not in the structure kinds"
            close = difflib.get_close_matches(_fold(kind), list(vocab), n=1, cutoff=0.6)
        hint = f"; closest: {vocab[close[0]]}" if close else f"; known: {', '.join(ctx.config.structure_kinds)}"
        pts = [g for g in geoms[idx] if g is not None and not g.is_empty]
        yield Hit(
            f"{label}{hint}.",
            layer="structures",
            features=tuple(layer.ids[idx]),
            geometry=pts[0] if len(pts) == 1 else (shapely.multipoints(pts) if pts else None),
        )


@rule("overturned-inconsistent", family="structures", severity="warning", needs=("structures",))
def overturned_inconsistent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An overturned mark cannot be read, is on a kind without a younging direction, or contradicts the kind.

    Catches
    -------
    With an `overturned_field`: cells that are neither yes-like (yes, y,
    true, 1, overturned) nor no-like (no, n, false, 0, upright, blank); a
    measurement marked overturned whose kind has no younging direction (only
    bedding does: a joint or a lineation cannot be overturned; common
    practice); a measurement of kind `overturned bedding` whose flag says no.
    One finding per kind of problem, with its features. It cannot tell
    whether a bed really is overturned: that is the mapper's observation of
    younging.

    Why it matters
    --------------
    An overturned bed dips the same way as an upright one; only the mark
    says that its top faces down. Sections, 3D models and fold
    interpretations built from the map turn on it, so a mark that cannot be
    read, or that says two things, misleads the next user.

    Fix
    ---
    Write yes or no in the flag column; keep the mark on bedding; make the
    kind and the flag agree (or use only one of them).

    Example
    -------
    A joint marked yes gives "structures: 1 measurement marked overturned
    are not bedding (kinds: joint); only bedding has a younging direction".
    """
    layer = project.layers["structures"]
    col = layer.field("overturned_field")
    if col is None:
        return
    raw = layer.frame[col]
    flagged, unreadable = sv.read_flags(raw)
    shown = raw.astype(object).where(raw.notna(), "").map(str).str.strip().to_numpy(dtype=object)
    kinds = _kinds(layer)
    folded = _fold_all(kinds)
    said_no = ~flagged & ~unreadable & (shown != "")
    groups = (
        (unreadable, lambda rows: f"{verb(rows.size, 'has', 'have')} a value in '{col}' that is neither yes nor no ({', '.join(sorted({repr(v) for v in shown[rows]})[:5])})"),
        (flagged & ~np.isin(folded, sv.FACING_KINDS),
         lambda rows: f"marked overturned {verb(rows.size, 'is', 'are')} not bedding (kinds: {', '.join(sorted({str(k) or '(blank)' for k in kinds[rows]}))}); only bedding has a younging direction"),
        (np.isin(folded, sv.OVERTURNED_KINDS) & said_no,
         lambda rows: f"of kind overturned bedding {verb(rows.size, 'is', 'are')} marked not overturned in '{col}'"),
    )
    yield from _grouped_hits(layer, groups)


@rule("rake-inconsistent", family="structures", severity="warning", needs=("structures",))
def rake_inconsistent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A rake is given where there is no plane to measure it in.

    Catches
    -------
    With a `rake_field`: a rake on a linear measurement (lineation, fold
    axis), whose azimuth and dip fields hold a trend and plunge, not a plane;
    a rake on a horizontal plane (dip 0), which has no strike to measure the
    rake from. The rake is read as measured in the plane from the
    right-hand-rule strike towards the dip direction, 0-180 (common
    practice); its range is checked by `structure-out-of-range`. It does not
    judge whether the line is the one the mapper saw.

    Why it matters
    --------------
    A rake only means something in its plane; without one, the line cannot
    be drawn on a stereonet or turned into a trend and plunge, and the next
    user cannot tell which measurement was meant.

    Fix
    ---
    Record the rake on the row of the plane it lies in (a fault plane with
    its striae), or record the line itself as a trend and plunge; for a
    horizontal plane give the line's trend instead.

    Example
    -------
    A lineation with rake 40 gives "structures: 1 measurement has a rake
    but are linear (lineation); a rake needs a plane".
    """
    layer = project.layers["structures"]
    rcol, rake, rtext = _numbers(layer, "rake_field")
    if rcol is None:
        return
    has_rake = ~np.isnan(rake)
    kinds = _kinds(layer)
    linear = np.isin(_fold_all(kinds), LINEAR_KINDS)
    _, dip, _ = _numbers(layer, "dip_field")
    flat = np.zeros(len(rake), dtype=bool) if dip is None else (dip == 0.0)
    yield from _grouped_hits(layer, (
        (has_rake & linear, lambda rows: f"{verb(rows.size, 'has', 'have')} a rake but {verb(rows.size, 'is', 'are')} linear ({', '.join(sorted({str(k) for k in kinds[rows]}))}); a rake needs a plane"),
        (has_rake & ~linear & flat, lambda rows: f"{verb(rows.size, 'has', 'have')} a rake on a horizontal plane (dip 0), which has no strike to measure it from"),
    ))


@rule("north-undeclared", family="structures", severity="notice", needs=("structures",))
def north_undeclared(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The manifest does not say which north the azimuths are measured from.

    Catches
    -------
    A structures layer without `north` (`"true"`, `"magnetic"` or `"grid"`)
    in `[layers.structures]`. archivist then assumes true north (common
    practice for published maps, whose azimuths are corrected for
    declination) and says so in the package. It cannot tell from the values
    which north was used.

    Why it matters
    --------------
    Magnetic and true north differ by the declination (tens of degrees in
    places), and grid north by the meridian convergence of the projection;
    a reader who guesses wrong turns every strike and trend by that much.

    Fix
    ---
    Add `north = "true"` (or `"magnetic"` with `declination = <degrees
    east>`, or `"grid"`) to `[layers.structures]`.

    Example
    -------
    A manifest without `north` gives "layers.structures: the north reference
    is not declared; azimuths are assumed to be from true (geographic)
    north".
    """
    layer = project.layers["structures"]
    north, _ = sv.north_of(layer.spec)
    if north is None:
        yield Hit(
            f"layers.structures: the north reference is not declared; azimuths are assumed to be from "
            f"{sv.NORTHS[sv.ASSUMED_NORTH]} (add north = \"true\", \"magnetic\" or \"grid\").",
            layer="structures",
        )


@rule("declination-missing", family="structures", severity="warning", needs=("structures",))
def declination_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Azimuths are from magnetic north but the manifest gives no declination.

    Catches
    -------
    `north = "magnetic"` in `[layers.structures]` without `declination`
    (degrees, east positive). archivist does not compute a geomagnetic model:
    the declination is the one the mapper declares (read from the map sheet
    or a geomagnetic model for the date and place of the survey). It does
    not check that the declared value is right.

    Why it matters
    --------------
    Without the declination, magnetic azimuths cannot be turned to true or
    grid north, so they cannot be compared with other maps or used in a 3D
    model; the declination changes with place and year, so it cannot be
    recovered later without the survey date.

    Fix
    ---
    Add `declination = <degrees east>` (negative for west) for the date and
    place of the survey, or correct the azimuths to true north and declare
    `north = "true"`.

    Example
    -------
    `north = "magnetic"` alone gives "layers.structures: azimuths are from
    magnetic north but no declination is declared".
    """
    north, decl = sv.north_of(project.layers["structures"].spec)
    if north == "magnetic" and decl is None:
        yield Hit(
            "layers.structures: azimuths are from magnetic north but no declination is declared "
            "(add declination = <degrees east>, negative for west).",
            layer="structures",
        )
