"""Longitude and latitude columns beside a layer's own coordinates: which headers, and how the cells are written.

Sample, station and structure tables often keep the position twice: the
projected coordinates (or the geometry) the map uses, and the longitude and
latitude the GPS showed in the field. The second pair is independent
evidence of where the features are, which the `crs` checks compare with the
first. This module decides, in one place:

* which columns hold longitude and latitude: the columns the manifest names
  with ``lon_field`` and ``lat_field`` in the layer's entry (a difference of
  case is forgiven), else the first headers that, compared without regard to
  case and punctuation and once qualifiers such as ``deg``, ``dd``,
  ``decimal``, ``WGS84`` or ``EPSG:4326`` are set aside, read ``lon``,
  ``long``, ``longitude`` or ``lng`` (and ``lat`` or ``latitude``), or ``x``
  and ``y`` *with* such a geographic qualifier (``x_wgs84``, ``y_wgs84``).
  The spellings are those in common use (common practice); they are a
  convenience, the ``*_field`` keys are the contract;
* how a cell is read: decimal degrees (a decimal comma is accepted when the
  cell has no point), or degrees, minutes and seconds with the usual marks
  (``14°42'30"E``, ``61 18.5 N``, ``S 40°12'``), a west or south letter
  making the value negative. A cell that is none of these, or outside
  -180..180 (longitude) or -90..90 (latitude), is not a reading.

``lonlat_crs`` in the layer's entry names the geographic CRS the columns
are in; without it they are taken as WGS 84 (EPSG:4326), what GPS receivers
show unless set otherwise.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from ..project import Layer

LON_WORDS = ("lon", "long", "longitude", "lng", "longitud", "longitudine", "laenge", "decimallongitude")
LAT_WORDS = ("lat", "latitude", "latitud", "latitudine", "breite", "decimallatitude")
# Words that say a header is in geographic degrees, set aside before the header is matched.
GEOGRAPHIC_QUALIFIERS = ("wgs84", "wgs", "84", "1984", "4326", "epsg", "etrs89", "gps", "geo", "geographic", "geog",
                         "deg", "degree", "degrees", "dd", "dec", "decimal", "decdeg")
# Words that may follow a header without changing its meaning ("Longitude (E)", "lat_N").
_HEMISPHERE_WORDS = ("e", "n", "east", "north")
DEFAULT_LONLAT_CRS = "EPSG:4326"
_NOT_WORD = re.compile(r"[^0-9a-z]+")


def _core(header: Any) -> tuple[str, bool]:
    """A header's words without qualifiers, and whether a geographic qualifier was among them."""
    words = [w for w in _NOT_WORD.split(str(header).strip().casefold().replace("°", " deg ")) if w]
    qualified = any(w in GEOGRAPHIC_QUALIFIERS for w in words)
    kept = [w for w in words if w not in GEOGRAPHIC_QUALIFIERS and w not in _HEMISPHERE_WORDS]
    return "_".join(kept), qualified


def header_axis(header: Any) -> str | None:
    """``"lon"``, ``"lat"`` or None: what a column header says it holds."""
    core, qualified = _core(header)
    if core in LON_WORDS or (core == "x" and qualified):
        return "lon"
    if core in LAT_WORDS or (core == "y" and qualified):
        return "lat"
    return None


class LonLatColumns(NamedTuple):
    """The longitude and latitude columns of a layer, and whether the manifest named them."""

    lon: str
    lat: str
    named: bool


def lonlat_columns(columns: list[Any], spec: dict[str, Any]) -> LonLatColumns | None:
    """The columns holding longitude and latitude, named by ``lon_field``/``lat_field`` or found by their headers.

    None when the layer has no such pair (or the manifest names a column
    that is not there: the loader reports the missing field).
    """
    names = [c for c in columns if c != "geometry"]
    lon_named, lat_named = spec.get("lon_field"), spec.get("lat_field")
    if isinstance(lon_named, str) or isinstance(lat_named, str):
        folded = {str(c).strip().casefold(): c for c in names}

        def find(name: Any, axis: str) -> Any:
            if isinstance(name, str):
                return name if name in names else folded.get(name.strip().casefold())
            return next((c for c in names if header_axis(c) == axis), None)

        lon, lat = find(lon_named, "lon"), find(lat_named, "lat")
        return LonLatColumns(str(lon), str(lat), True) if lon is not None and lat is not None else None
    lon = next((c for c in names if header_axis(c) == "lon"), None)
    lat = next((c for c in names if header_axis(c) == "lat"), None)
    if lon is None or lat is None:
        return None
    return LonLatColumns(str(lon), str(lat), False)


_NUM = r"\d+(?:[.,]\d*)?"
_DMS = re.compile(
    rf"""^\s*(?P<h1>[NSEWnsew])?\s*(?P<sign>[-+\u2212])?\s*
    (?P<d>{_NUM})\s*(?:°|º|˚|deg|d|:|\s)?\s*
    (?:(?P<m>{_NUM})\s*(?:'|′|’|min|m|:|\s)?\s*)?
    (?:(?P<s>{_NUM})\s*(?:"|″|''|’’|sec|s)?\s*)?
    (?P<h2>[NSEWnsew])?\s*$""",
    re.VERBOSE,
)


def degrees(values: Any, axis: str) -> np.ndarray:
    """Cells of a longitude (``axis="lon"``) or latitude (``"lat"``) column as decimal degrees; NaN where unreadable.

    Numbers are taken as decimal degrees; text is read as decimal degrees or
    degrees-minutes-seconds with an optional hemisphere letter (W and S
    negative). A letter of the other axis (N on a longitude), minutes or
    seconds of 60 or more, and values out of range give NaN.
    """
    series = pd.Series(values).reset_index(drop=True)
    numeric = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
    out = numeric.copy()
    todo = np.isnan(numeric) & series.notna().to_numpy()
    if todo.any():
        text = series[todo].astype(str)
        parts = text.str.extract(_DMS)
        comma_only = ~text.str.contains(".", regex=False)

        def num(col: str) -> np.ndarray:
            v = parts[col].where(~(comma_only & parts[col].notna()), parts[col].str.replace(",", ".", regex=False))
            return pd.to_numeric(v, errors="coerce").to_numpy(dtype=float)

        d, m, s = num("d"), num("m"), num("s")
        m0, s0 = np.nan_to_num(m), np.nan_to_num(s)
        value = d + m0 / 60.0 + s0 / 3600.0
        value[(m0 >= 60) | (s0 >= 60) | (~np.isnan(s) & np.isnan(m))] = np.nan
        letter = parts["h1"].fillna(parts["h2"]).str.upper()
        both = parts["h1"].notna() & parts["h2"].notna()
        allowed = ("E", "W") if axis == "lon" else ("N", "S")
        wrong = (letter.notna() & ~letter.isin(allowed)) | both
        negative = letter.isin(("W", "S")).to_numpy() ^ parts["sign"].isin(("-", "\u2212")).to_numpy()
        value = np.where(negative, -value, value)
        value[wrong.to_numpy()] = np.nan
        out[todo] = value
    limit = 180.0 if axis == "lon" else 90.0
    with np.errstate(invalid="ignore"):
        out[~(np.abs(out) <= limit)] = np.nan
    return out


def rounding_step(values: np.ndarray) -> float:
    """The coarsest decimal step (in degrees) all finite values are written to: 1e-4 for ``14.7012``; 0 when none or finer than 1e-8."""
    v = values[np.isfinite(values)]
    if not len(v):
        return 0.0
    for k in range(9):
        if np.all(np.abs(v - np.round(v, k)) <= 1e-9):
            return 10.0 ** -k
    return 0.0


class LonLat(NamedTuple):
    """A layer's longitude/latitude readings, aligned with its features."""

    columns: LonLatColumns
    lon: np.ndarray  # NaN where the cell is not a reading
    lat: np.ndarray
    crs_text: str  # the geographic CRS the columns are in, as the manifest wrote it
    step: float  # the coarsest decimal step the values are written to, degrees


def read_lonlat(layer: Layer) -> LonLat | None:
    """The layer's longitude/latitude columns read as degrees, or None when it has none."""
    cols = lonlat_columns(list(layer.frame.columns), layer.spec)
    if cols is None:
        return None
    lon = degrees(layer.frame[cols.lon].to_numpy(dtype=object), "lon")
    lat = degrees(layer.frame[cols.lat].to_numpy(dtype=object), "lat")
    if not cols.named and not (np.isfinite(lon) & np.isfinite(lat)).any():
        return None  # guessed headers holding no degrees at all: not a pair of coordinate columns
    crs_text = layer.spec.get("lonlat_crs") if isinstance(layer.spec.get("lonlat_crs"), str) else DEFAULT_LONLAT_CRS
    return LonLat(cols, lon, lat, str(crs_text), max(rounding_step(lon), rounding_step(lat)))
