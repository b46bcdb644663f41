"""Each layer's features placed on the globe, for the CRS checks.

The reference for "where a CRS is meant to be used" is the area of use
recorded for it in the EPSG dataset, as pyproj reads it from PROJ's database
(`CRS.area_of_use`). Boxes of features are transformed to longitude and
latitude on a 3 x 3 grid of points per box.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Iterable, NamedTuple

import numpy as np
import pyproj
import shapely
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

if TYPE_CHECKING:
    from ..project import MapProject

Box = tuple[float, float, float, float]  # west, south, east, north in degrees

WGS84 = pyproj.CRS("EPSG:4326")
_GEOD = pyproj.Geod(ellps="WGS84")
# Margin (degrees) around an area of use within which swapped coordinates are
# taken to "fit": generous, since swapped values usually land thousands of km away.
SWAP_MARGIN_DEG = 1.0
# An area of use wider than this (degrees) says little about where a map is
# (e.g. "World" for EPSG:4326); the swap check then uses the other layers' extent.
WIDE_AREA_DEG = 20.0


@dataclass(frozen=True)
class Placement:
    """A layer's features placed on the globe: longitude/latitude boxes as read and with x/y swapped."""

    role: str
    crs: pyproj.CRS
    own_crs: bool  # False when the layer has no CRS and the map CRS is assumed
    bounds: np.ndarray  # (n, 4) in the layer's CRS; NaN rows for empty geometries
    lonlat: np.ndarray  # (n, 4) west, south, east, north; NaN where the transform fails
    present: np.ndarray  # (n,) bool: the feature has a geometry

    def swapped(self, rows: np.ndarray) -> np.ndarray:
        """Lon/lat boxes of the selected rows with x and y exchanged before transforming.

        Computed only for the rows asked for (those that do not fit as read),
        since a clean layer needs none.
        """
        return lonlat_boxes(self.crs, self.bounds[rows][:, [1, 0, 3, 2]])

    def box(self, which: np.ndarray | None = None) -> np.ndarray | None:
        """The lon/lat box of all (or the selected) transformable features, or None."""
        b = self.lonlat if which is None else self.lonlat[which]
        ok = np.isfinite(b).all(axis=1)
        if not ok.any():
            return None
        b = b[ok]
        return np.array([b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max()])


def to_lonlat(crs: pyproj.CRS, bounds: np.ndarray) -> np.ndarray:
    """Lon/lat boxes of projected boxes: a 3 x 3 grid of each box transformed, NaN where PROJ fails."""
    n = len(bounds)
    if n == 0:
        return np.empty((0, 4))
    # the nine points in nine rows of n (row 3i + j: x column i, y column j), so every reduction runs along rows
    xs = (bounds[:, 0], (bounds[:, 0] + bounds[:, 2]) / 2, bounds[:, 2])
    ys = (bounds[:, 1], (bounds[:, 1] + bounds[:, 3]) / 2, bounds[:, 3])
    gx = np.concatenate([xs[i] for i in range(3) for _ in range(3)])
    gy = np.concatenate([ys[j] for _ in range(3) for j in range(3)])
    transformer = pyproj.Transformer.from_crs(crs, WGS84, always_xy=True)
    with np.errstate(invalid="ignore"):
        lon, lat = transformer.transform(gx, gy, errcheck=False, inplace=True)  # gx, gy are ours: no copy
    lon = np.asarray(lon, dtype=float).reshape(9, n)
    lat = np.asarray(lat, dtype=float).reshape(9, n)
    with np.errstate(invalid="ignore"):
        bad = ~np.logical_and.reduce(np.isfinite(lon) & np.isfinite(lat) & ~(np.abs(lat) > 90), axis=0)
    out = np.stack([lon.min(axis=0), lat.min(axis=0), lon.max(axis=0), lat.max(axis=0)], axis=1)
    out[bad] = np.nan
    return out


def lonlat_boxes(crs: pyproj.CRS, bounds: np.ndarray) -> np.ndarray:
    """Lon/lat boxes; NaN where a geographic CRS holds coordinates it cannot (|lat| > 90, |lon| > 360)."""
    out = to_lonlat(crs, bounds)
    if crs.is_geographic:
        out[(np.abs(bounds[:, 1]) > 90) | (np.abs(bounds[:, 3]) > 90) | (np.abs(bounds[:, 0]) > 360) | (np.abs(bounds[:, 2]) > 360)] = np.nan
    return out


def place_layers(project: MapProject) -> dict[str, Placement]:
    """Every layer with a usable CRS (its own, else the map's) placed on the globe."""
    out: dict[str, Placement] = {}
    for role, layer in project.sources.items():
        crs = layer.crs or project.crs
        if crs is None:
            continue
        geoms = layer.geometry
        present = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
        bounds = shapely.bounds(geoms)
        bounds[~present] = np.nan
        try:
            lonlat = lonlat_boxes(crs, bounds)
        except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
            continue  # a local or engineering CRS: not tied to the globe, nothing to place
        out[role] = Placement(role, crs, layer.crs is not None, bounds, lonlat, present)
    return out


def area_of_use(crs: pyproj.CRS) -> Box | None:
    """The CRS's area of use from the EPSG dataset: (west, south, east, north) in degrees."""
    aou = crs.area_of_use
    if aou is None:
        return None
    return (aou.west, aou.south, aou.east, aou.north)


def unwrap(lon: np.ndarray, west: float, east: float) -> tuple[np.ndarray, float]:
    """Longitudes and east bound shifted so an area of use crossing the antimeridian is one interval."""
    if west <= east:
        return lon, east
    return np.where(lon < west, lon + 360.0, lon), east + 360.0


def within(boxes: np.ndarray, area: Box, margin: float = 0.0) -> np.ndarray:
    """Which lon/lat boxes lie inside ``area`` (west, south, east, north) widened by ``margin`` degrees."""
    w, s, e, n = area
    west, e2 = unwrap(boxes[:, 0], w, e)
    east, _ = unwrap(boxes[:, 2], w, e)
    ok = np.isfinite(boxes).all(axis=1)
    with np.errstate(invalid="ignore"):
        inside = (west >= w - margin) & (east <= e2 + margin) & (boxes[:, 1] >= s - margin) & (boxes[:, 3] <= n + margin)
    return ok & inside


def overshoot(b: np.ndarray, area: Box) -> tuple[float, float, str]:
    """How far a lon/lat box reaches beyond an area of use: (metres, degrees, direction words)."""
    w, s, e, n = area
    lons, e2 = unwrap(np.array([b[0], b[2]]), w, e)
    corners = [(lons[0], b[1]), (lons[0], b[3]), (lons[1], b[1]), (lons[1], b[3])]
    best_m, best_deg, words = 0.0, 0.0, []
    for lon, lat in corners:
        clon, clat = min(max(lon, w), e2), min(max(lat, s), n)
        if (clon, clat) == (lon, lat):
            continue
        _, _, dist = _GEOD.inv(clon, clat, lon, lat)
        deg = max(abs(lon - clon), abs(lat - clat))
        if dist > best_m:
            best_m, best_deg = float(dist), float(deg)
    if b[1] < s:
        words.append("south")
    if b[3] > n:
        words.append("north")
    if lons[0] < w:
        words.append("west")
    if lons[1] > e2:
        words.append("east")
    return best_m, best_deg, "-".join(words) or "outside"


def reference_area(placements: dict[str, Placement], role: str, placed: Placement) -> tuple[Box, bool]:
    """Where the layer should lie, in lon/lat: its CRS's area of use, narrowed by the other layers when that is wide."""
    area = area_of_use(placed.crs) or (-180.0, -90.0, 180.0, 90.0)
    wide = (area[2] - area[0]) % 360 > WIDE_AREA_DEG or area[3] - area[1] > WIDE_AREA_DEG or area[2] - area[0] == 360
    if not wide:
        return area, False
    boxes = []
    for other_role, other in placements.items():
        if other_role == role:
            continue
        other_area = area_of_use(other.crs) or (-180.0, -90.0, 180.0, 90.0)
        fits = within(other.lonlat, other_area) & other.present
        b = other.box(fits)
        if b is not None and fits.sum() >= max(1, 0.5 * other.present.sum()):
            boxes.append(b)
    if not boxes:
        return area, False
    b = np.array(boxes)
    ref = np.array([b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max()])
    pad = max(SWAP_MARGIN_DEG, ref[2] - ref[0], ref[3] - ref[1])
    return (ref[0] - pad, max(-90.0, ref[1] - pad), ref[2] + pad, min(90.0, ref[3] + pad)), True


class SwapSuspects(NamedTuple):
    """Features of one layer that fit where the map can be only with x and y swapped."""

    suspect: np.ndarray  # mask over the layer's features
    ref: Box  # where the map can be, in lon/lat
    from_layers: bool  # ref is the other layers' extent (else the CRS's area of use)


def swap_suspects(placements: dict[str, Placement]) -> dict[str, SwapSuspects]:
    """Per layer: features that fit the reference area only with x and y swapped."""
    out: dict[str, SwapSuspects] = {}
    for role, placed in placements.items():
        ref, from_layers = reference_area(placements, role, placed)
        rows = np.flatnonzero(placed.present & ~within(placed.lonlat, ref, SWAP_MARGIN_DEG))
        suspect = np.zeros(len(placed.present), dtype=bool)
        if len(rows):
            suspect[rows] = within(placed.swapped(rows), ref, SWAP_MARGIN_DEG)
        if suspect.any():
            out[role] = SwapSuspects(suspect, ref, from_layers)
    return out


def suggest_projected(lonlat_box: Iterable[float], datum_crs: pyproj.CRS | None = None) -> tuple[pyproj.CRS | None, int]:
    """A UTM CRS from the EPSG dataset for a lon/lat box, and how many UTM zones the box spans.

    The zone whose area of use holds the box centre is chosen, on the datum
    of ``datum_crs`` when the EPSG dataset has UTM CRSs for it (e.g. ETRS89),
    else on WGS 84. Returns (None, 0) where no UTM zone applies (polar areas).
    """
    w, s, e, n = (float(v) for v in lonlat_box)
    cx, cy = (w + e) / 2, (s + n) / 2
    names = []
    if datum_crs is not None:
        names.append(datum_crs.geodetic_crs.name if datum_crs.geodetic_crs else datum_crs.name)
    names.append("WGS 84")
    for datum in names:
        try:
            infos = query_utm_crs_info(datum_name=datum, area_of_interest=AreaOfInterest(w, s, e, n))
        except pyproj.exceptions.CRSError:
            continue
        infos = [i for i in infos if not i.deprecated and i.area_of_use is not None]
        centre = [
            i for i in infos
            if (a := i.area_of_use) is not None and a.west <= cx <= a.east and a.south <= cy <= a.north
        ]
        if not centre:
            continue
        centre.sort(key=lambda i: ("(" in i.name, int(i.code) if i.code.isdigit() else 0))
        zones = {m.group(1) for i in infos if (m := re.search(r"zone (\d+)", i.name))}
        return pyproj.CRS.from_authority(centre[0].auth_name, centre[0].code), max(1, len(zones))
    return None, 0
