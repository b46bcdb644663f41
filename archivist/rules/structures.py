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
the azimuth is the trend (0-360) and the dip field holds the plunge (0-90).

These checks test that the numbers can be read; they cannot say that a
measurement is right, or that a dip of 90 is not a mistyped 9.
"""

from __future__ import annotations

import difflib
import re
from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import pandas as pd
import shapely

from ..model import Hit
from ..registry import rule

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
    from ..project import Layer, MapProject

LINEAR_KINDS = ("lineation", "fold axis")
CONVENTIONS = {
    "dip-direction": "azimuths of planes are dip directions (0-360, clockwise from north)",
    "right-hand-rule": "azimuths of planes are strikes by the right-hand rule (the plane dips to the right of the strike; dip direction = strike + 90)",
}
_QUADRANT = re.compile(r"^[NS]\s*\d{1,2}(?:\.\d+)?\s*[EW]$", re.IGNORECASE)


def _fold(text: Any) -> str:
    """A kind compared loosely: case, and spaces/underscores/hyphens between words."""
    return " ".join(re.split(r"[\s_\-]+", str(text).strip().casefold()))


def _fold_all(values: Any) -> np.ndarray:
    """:func:`_fold` of a whole column in vectorised string operations."""
    s = pd.Series(np.asarray(values, dtype=object), dtype=object).fillna("").astype(str)
    s = s.str.strip().str.casefold().str.replace(r"[\s_\-]+", " ", regex=True).str.strip()
    return s.to_numpy(dtype=object)


def convention_statement(project: MapProject) -> str | None:
    """One sentence for package metadata: the convention of the structures layer, with trend/plunge for lines.

    Examples
    --------
    The packager writes it beside the structures resource, e.g. "Planar
    measurements: azimuths of planes are dip directions (0-360, clockwise
    from north); dips 0-90 from horizontal. Linear measurements (lineation,
    fold axis): trend 0-360 and plunge 0-90."
    """
    layer = project.layers.get("structures")
    if layer is None:
        return None
    conv = layer.spec.get("convention", "dip-direction")
    text = CONVENTIONS.get(conv, conv)
    return (
        f"Planar measurements: {text}; dips 0-90 from horizontal. "
        f"Linear measurements ({', '.join(LINEAR_KINDS)}): trend 0-360 and plunge 0-90, in the same fields."
    )


def _numbers(layer: Layer, key: str) -> tuple[str | None, Any, Any]:
    col = layer.field(key)
    if col is None:
        return None, None, None
    raw = layer.frame[col]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float, copy=True)
    text = raw.astype(object).where(raw.notna(), "").map(str).str.strip().to_numpy(dtype=object)
    return col, values, text


@rule("structure-out-of-range", family="structures", severity="error", needs=("structures",))
def structure_out_of_range(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An azimuth is outside 0-360 or a dip outside 0-90 degrees, or one is not a number.

    Catches
    -------
    Measurements whose azimuth (dip direction, right-hand-rule strike, or
    trend for lineations and fold axes) is not within 0-360, whose dip (or
    plunge) is not within 0-90, or where either is blank or not a number.
    Quadrant notation such as "N30E" is recognised and reported as such. It
    does not judge whether a value is plausible for the kind or the place.

    Why it matters
    --------------
    Out-of-range values are typos (a dip of 125 for 12.5 or 25), swapped
    fields or gradians; they break stereonets and 3D models built from the
    map, and no one can tell later what the geologist measured.

    Fix
    ---
    Correct the value from the field notebook; convert quadrant notation and
    other units to azimuths in degrees, in the convention the manifest
    declares.

    Example
    -------
    A bedding with dip 125 gives "structures feature 7 (bedding): dip 125
    is outside 0-90".
    """
    layer = project.layers["structures"]
    kind_col = layer.field("kind_field")
    text = layer.text("kind_field") if kind_col else None
    kinds = text if text is not None else np.full(len(layer.frame), "", dtype=object)
    linear = np.isin(_fold_all(kinds), LINEAR_KINDS)
    geoms = layer.geometry
    problems: dict[int, list[str]] = {}
    for key, lo, hi, plane_word, line_word in (
        ("azimuth_field", 0.0, 360.0, "azimuth", "trend"),
        ("dip_field", 0.0, 90.0, "dip", "plunge"),
    ):
        col, values, text = _numbers(layer, key)
        if col is None:
            continue
        blank = text == ""
        nan = np.isnan(values)
        with np.errstate(invalid="ignore"):
            out = ~nan & ((values < lo) | (values > hi))
        for i in np.flatnonzero(nan | out):
            word = line_word if linear[i] else plane_word
            if blank[i]:
                why = f"has no {word} ({col} is empty)"
            elif nan[i] and key == "azimuth_field" and _QUADRANT.match(text[i]):
                why = f"{word} '{text[i]}' is quadrant notation; write it as an azimuth 0-360"
            elif nan[i]:
                why = f"{word} '{text[i]}' is not a number"
            else:
                why = f"{word} {values[i]:g} is outside {lo:g}-{hi:g}"
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
    folded = _fold_all(kinds)
    unknown = ~np.isin(folded, list(vocab))
    geoms = layer.geometry
    frame = pd.DataFrame({"kind": kinds[unknown], "i": np.flatnonzero(unknown)})
    for kind, group in frame.groupby("kind", sort=True):
        idx = group.i.to_numpy()
        if not str(kind).strip():
            label = f"{len(idx)} measurement(s) have no kind"
            close = []
        else:
            label = f"kind '{kind}' ({len(idx)} measurement(s)) is not in the structure kinds"
            close = difflib.get_close_matches(_fold(kind), list(vocab), n=1, cutoff=0.6)
        hint = f"; closest: {vocab[close[0]]}" if close else f"; known: {', '.join(ctx.config.structure_kinds)}"
        pts = [g for g in geoms[idx] if g is not None and not g.is_empty]
        yield Hit(
            f"{label}{hint}.",
            layer="structures",
            features=tuple(layer.ids[idx]),
            geometry=pts[0] if len(pts) == 1 else (shapely.multipoints(pts) if pts else None),
        )
