"""How structural measurements are understood: kinds, conventions, the north reference, overturned flags, rake.

One place for the words and the geometry of orientation data, read by the
`structures` checks and by the package (column descriptions, README):

* kinds are compared loosely (case, and spaces/underscores/hyphens between
  words); `lineation` and `fold axis` are linear (trend and plunge), every
  other kind is a plane (azimuth and dip); `overturned bedding` is bedding
  whose younging direction is downward;
* ``convention`` says what the azimuth of a plane means (dip direction, or
  the strike by the right-hand rule);
* ``north`` says which north the azimuths are measured from (true, magnetic
  or grid), with ``declination`` (degrees, east positive) when magnetic.
  archivist does not compute a geomagnetic model: the declination is what
  the manifest declares;
* ``upward_plunge`` says whether a negative plunge means a line pointing
  upward (``"negative"``) or is not allowed (``"not-allowed"``, the default);
* ``overturned_field`` names a yes/no column marking overturned bedding;
* ``rake_field`` names the rake (pitch) of a line in the plane of the row,
  0-180 degrees, measured in the plane from the strike direction of the
  right-hand rule (dip direction - 90) towards the dip direction.

The conventions are those of the trade as structural geology textbooks teach
them (common practice; the rake/plunge relation below is standard spherical
trigonometry of a line in an inclined plane, from memory).
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from ..project import Layer

LINEAR_KINDS = ("lineation", "fold axis")
OVERTURNED_KINDS = ("overturned bedding",)
# Kinds with a younging direction, so that "overturned" means something (common practice: bedding).
FACING_KINDS = ("bedding", "overturned bedding")

CONVENTIONS = {
    "dip-direction": "azimuths of planes are dip directions (0-360, clockwise from north)",
    "right-hand-rule": "azimuths of planes are strikes by the right-hand rule (the plane dips to the right of the strike; dip direction = strike + 90)",
}
NORTHS = {
    "true": "true (geographic) north",
    "magnetic": "magnetic north",
    "grid": "grid north of the map CRS",
}
# What the package and the checks assume when the manifest does not say (common practice: published
# maps give azimuths corrected to true north).
ASSUMED_NORTH = "true"
UPWARD_PLUNGE = ("not-allowed", "negative")

# Cell values of an overturned flag, folded (casefold, stripped).
FLAG_YES = ("yes", "y", "true", "t", "1", "overturned", "ot", "x")
FLAG_NO = ("no", "n", "false", "f", "0", "upright", "")


def fold(text: Any) -> str:
    """A kind compared loosely: case, and spaces/underscores/hyphens between words."""
    return " ".join(re.split(r"[\s_\-]+", str(text).strip().casefold()))


def fold_all(values: Any) -> np.ndarray:
    """:func:`fold` of a whole column in vectorised string operations (missing values become "")."""
    s = pd.Series(np.asarray(values, dtype=object), dtype=object).fillna("").astype(str)
    s = s.str.strip().str.casefold().str.replace(r"[\s_\-]+", " ", regex=True).str.strip()
    return s.to_numpy(dtype=object)


def read_flags(values: Any) -> tuple[np.ndarray, np.ndarray]:
    """An overturned flag column read as (overturned, unreadable) boolean arrays.

    Yes-like values (yes, y, true, 1, overturned...) are overturned; no-like
    values and blanks are upright; anything else is unreadable (and not
    overturned).
    """
    folded = fold_all(values)
    if len(folded) and isinstance(values, pd.Series) and pd.api.types.is_bool_dtype(values):
        folded = np.where(np.asarray(values, dtype=bool), "yes", "no").astype(object)
    yes = np.isin(folded, FLAG_YES)
    return yes, ~yes & ~np.isin(folded, FLAG_NO)


def north_of(spec: dict[str, Any]) -> tuple[str | None, float | None]:
    """The declared north (``true``, ``magnetic``, ``grid`` or None) and declination of a structures spec."""
    north = spec.get("north")
    decl = spec.get("declination")
    return (north if north in NORTHS else None), (float(decl) if isinstance(decl, (int, float)) and not isinstance(decl, bool) else None)


def north_statement(spec: dict[str, Any]) -> str:
    """One sentence on the north the azimuths are measured from, for column descriptions and the package README.

    Examples
    --------
    ``{"north": "magnetic", "declination": -3.5}`` gives "Azimuths are
    measured clockwise from magnetic north; the declared declination is
    3.5° west (true azimuth = magnetic azimuth - 3.5°); the values are as
    recorded, not corrected."
    """
    north, decl = north_of(spec)
    if north is None:
        return (
            f"Azimuths are measured clockwise from north; the manifest does not say which north, "
            f"and {NORTHS[ASSUMED_NORTH]} is assumed."
        )
    text = f"Azimuths are measured clockwise from {NORTHS[north]}"
    if north != "magnetic":
        return text + "."
    if decl is None:
        return text + "; the declination was not declared, so they cannot be turned to true north."
    side = "east" if decl >= 0 else "west"
    sign = "+" if decl >= 0 else "-"
    return (
        f"{text}; the declared declination is {abs(decl):g}° {side} "
        f"(true azimuth = magnetic azimuth {sign} {abs(decl):g}°); the values are as recorded, not corrected."
    )


def convention_statement(layer: Layer) -> str:
    """The conventions of a structures layer in a few sentences: planes, lines, overturned, rake, north.

    Examples
    --------
    The packager writes it beside the structures resource, e.g. "Planar
    measurements: azimuths of planes are dip directions (0-360, clockwise
    from north); dips 0-90 from horizontal. Linear measurements (lineation,
    fold axis): trend 0-360 and plunge 0-90, in the same fields. Azimuths
    are measured clockwise from true (geographic) north."
    """
    spec = layer.spec
    conv = spec.get("convention", "dip-direction")
    plunge = "-90-90 (negative: the line points upward)" if spec.get("upward_plunge") == "negative" else "0-90"
    parts = [
        f"Planar measurements: {CONVENTIONS.get(conv, conv)}; dips 0-90 from horizontal.",
        f"Linear measurements ({', '.join(LINEAR_KINDS)}): trend 0-360 and plunge {plunge}, in the same fields.",
    ]
    if spec.get("overturned_field"):
        parts.append(f"Overturned bedding is marked yes in '{spec['overturned_field']}' (its dip stays 0-90).")
    if spec.get("rake_field"):
        parts.append(f"'{spec['rake_field']}': {RAKE_TEXT}")
    parts.append(north_statement(spec))
    return " ".join(parts)


RAKE_TEXT = (
    "rake (pitch) of a line in the plane, 0-180 degrees, measured in the plane from the strike direction "
    "of the right-hand rule (dip direction - 90) towards the dip direction."
)


def dip_directions(azimuths: Any, convention: str) -> np.ndarray:
    """Dip directions 0-360 from plane azimuths in ``convention`` (right-hand rule: strike + 90)."""
    az = np.asarray(azimuths, dtype=float)
    return np.mod(az + 90.0, 360.0) if convention == "right-hand-rule" else np.mod(az, 360.0)


def rake_to_line(dip_direction: Any, dip: Any, rake: Any) -> tuple[np.ndarray, np.ndarray]:
    """Trend and plunge (degrees) of lines given by their rake in planes (dip direction, dip), vectorised.

    The rake is measured in the plane from the right-hand-rule strike
    (dip direction - 90) towards the dip direction, 0-180. A unit vector
    along the line, in (east, north, down), is
    ``cos r * s + sin r * d`` with ``s`` the horizontal strike vector and
    ``d`` the down-dip vector of the plane: so ``sin(plunge) = sin(rake) *
    sin(dip)`` (the usual relation, common practice).
    """
    dd, dp, rk = (np.radians(np.asarray(v, dtype=float)) for v in (dip_direction, dip, rake))
    st = dd - np.pi / 2
    s = np.stack([np.sin(st), np.cos(st), np.zeros_like(st)])
    d = np.stack([np.sin(dd) * np.cos(dp), np.cos(dd) * np.cos(dp), np.sin(dp)])
    v = np.cos(rk) * s + np.sin(rk) * d
    trend = np.mod(np.degrees(np.arctan2(v[0], v[1])), 360.0)
    plunge = np.degrees(np.arcsin(np.clip(v[2], -1.0, 1.0)))
    return trend, plunge
