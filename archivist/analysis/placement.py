"""Each layer's features placed on the globe, for the CRS checks.

The reference for "where a CRS is meant to be used" is the area of use
recorded for it in the EPSG dataset, as pyproj reads it from PROJ's database
(`CRS.area_of_use`). Boxes of features are transformed to longitude and
latitude on a 3 x 3 grid of points per box.

A large layer is not transformed point by point unless an answer needs it:
its envelope is transformed on a grid (:class:`Sketch`), each feature's nine
points are interpolated on that grid with a bound on the error, and only the
features the bound leaves in doubt (near an edge of the area tested, or
among the extremes of the layer's box) are transformed exactly. The answers
(which features lie inside an area, the layer's box) are those of the exact
boxes.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property
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


# Layers of fewer present features than this are transformed exactly at once (our own choice: below it the
# exact transform costs a few milliseconds).
SKETCH_MIN = 4096
# The envelope grid: GRID x GRID points (our own choice).
GRID = 33
# The interpolation error bound is the bilinear one, (hx^2 max|f_xx| + hy^2 max|f_yy|) / 8, with the second
# derivatives estimated from the grid's second differences and multiplied by this safety factor (our own
# choice, common practice for such estimates; a projection smooth at the grid's scale varies its second
# derivatives by far less than this factor from one grid cell to the next).
SAFETY = 16.0
# A bound above this (degrees) means the grid does not follow the projection (a pole, the antimeridian, the
# edge of its domain inside the envelope): the layer is transformed exactly.
MAX_ERROR_DEG = 1e-4


@dataclass(frozen=True)
class Sketch:
    """Lon/lat boxes of a layer's features interpolated on a grid over its envelope, to within ``error`` degrees."""

    approx: np.ndarray  # (n, 4) west, south, east, north, NaN for rows without geometry
    error: float


@dataclass(frozen=True)
class Placement:
    """A layer's features placed on the globe: longitude/latitude boxes as read and with x/y swapped.

    ``lonlat`` (every feature's box, as :func:`lonlat_boxes` gives it) is computed when first read; the
    questions the checks ask (:meth:`inside`, :meth:`box`, :meth:`failed`, :meth:`boxes`) are answered
    from a :class:`Sketch` where the layer has one, with the exact boxes of the features it leaves in doubt.
    """

    role: str
    crs: pyproj.CRS
    own_crs: bool  # False when the layer has no CRS and the map CRS is assumed
    bounds: np.ndarray  # (n, 4) in the layer's CRS; NaN rows for empty geometries
    present: np.ndarray  # (n,) bool: the feature has a geometry
    sketch: Sketch | None = None  # None: small layer, or one the grid does not follow

    @cached_property
    def lonlat(self) -> np.ndarray:
        """(n, 4) west, south, east, north; NaN where the transform fails."""
        return lonlat_boxes(self.crs, self.bounds)

    def boxes(self, rows: np.ndarray) -> np.ndarray:
        """The exact lon/lat boxes of the selected rows (``lonlat[rows]``), transforming only those rows."""
        if "lonlat" in self.__dict__ or self.sketch is None:
            return self.lonlat[rows]
        return lonlat_boxes(self.crs, self.bounds[rows])

    def failed(self) -> np.ndarray:
        """Which features have no finite lon/lat box (no geometry, or where PROJ fails)."""
        if self.sketch is None:
            return ~np.isfinite(self.lonlat).all(axis=1)
        return ~np.isfinite(self.sketch.approx).all(axis=1)  # the grid found the whole envelope placeable

    def inside(self, area: Box, margin: float = 0.0) -> np.ndarray:
        """``within(lonlat, area, margin)``: the features whose box lies inside ``area`` widened by ``margin``."""
        sk = self.sketch
        w, s, e, n = area
        if sk is None or w > e:  # an area across the antimeridian: asked exactly
            return within(self.lonlat, area, margin)
        a, err = sk.approx, sk.error
        ok = np.isfinite(a).all(axis=1)
        with np.errstate(invalid="ignore"):
            sure_in = ok & (a[:, 0] - err > w - margin) & (a[:, 2] + err < e + margin) & \
                (a[:, 1] - err > s - margin) & (a[:, 3] + err < n + margin)
            sure_out = ~ok | (a[:, 0] + err < w - margin) | (a[:, 2] - err > e + margin) | \
                (a[:, 1] + err < s - margin) | (a[:, 3] - err > n + margin)
        out = sure_in.copy()
        doubt = np.flatnonzero(~sure_in & ~sure_out)
        if len(doubt):
            out[doubt] = within(self.boxes(doubt), area, margin)
        return out

    def swapped(self, rows: np.ndarray) -> np.ndarray:
        """Lon/lat boxes of the selected rows with x and y exchanged before transforming.

        Computed only for the rows asked for (those that do not fit as read),
        since a clean layer needs none.
        """
        return lonlat_boxes(self.crs, self.bounds[rows][:, [1, 0, 3, 2]])

    def box(self, which: np.ndarray | None = None) -> np.ndarray | None:
        """The lon/lat box of all (or the selected) transformable features, or None."""
        if self.sketch is None or "lonlat" in self.__dict__:
            b = self.lonlat if which is None else self.lonlat[which]
            return outer_box(b)
        rows = np.arange(len(self.bounds)) if which is None else np.arange(len(self.bounds))[which]
        a, err = self.sketch.approx[rows], self.sketch.error
        ok = np.isfinite(a).all(axis=1)
        rows, a = rows[ok], a[ok]
        if not len(rows):
            return None
        # a feature can hold an extreme of the exact boxes only if its interpolated box is within 2 error bounds
        # of the interpolated extreme (every exact value is within one bound of its interpolation)
        near = (a[:, 0] <= a[:, 0].min() + 2 * err) | (a[:, 1] <= a[:, 1].min() + 2 * err) | \
            (a[:, 2] >= a[:, 2].max() - 2 * err) | (a[:, 3] >= a[:, 3].max() - 2 * err)
        return outer_box(self.boxes(rows[near]))


def outer_box(b: np.ndarray) -> np.ndarray | None:
    """The box around the finite rows of ``b``, or None."""
    ok = np.isfinite(b).all(axis=1)
    if not ok.any():
        return None
    b = b[ok]
    return np.array([b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max()])


def sketch_of(crs: pyproj.CRS, bounds: np.ndarray, present: np.ndarray) -> Sketch | None:
    """Every present feature's lon/lat box interpolated on a :data:`GRID` grid over the layer's envelope, with a
    bound on the error; None where the layer is small or the grid does not follow the projection.

    The interpolation error of a bilinear interpolant on a cell of size hx x hy is at most
    (hx² max|f_xx| + hy² max|f_yy|) / 8 for f the longitude or the latitude (a textbook bound); the second
    derivatives are estimated from the grid's second differences, times :data:`SAFETY`. Every point of the grid
    must transform to a finite longitude and a latitude within ±90 (the features' points lie inside the grid's
    envelope), in a geographic CRS within the ranges :func:`lonlat_boxes` accepts.
    """
    if present.sum() < SKETCH_MIN:
        return None
    b = bounds[present]
    x0, y0, x1, y1 = float(b[:, 0].min()), float(b[:, 1].min()), float(b[:, 2].max()), float(b[:, 3].max())
    if not (x1 > x0 and y1 > y0):
        return None
    if crs.is_geographic and (max(abs(y0), abs(y1)) > 90 or max(abs(x0), abs(x1)) > 360):
        return None
    gx, gy = np.linspace(x0, x1, GRID), np.linspace(y0, y1, GRID)
    mx, my = np.meshgrid(gx, gy, indexing="ij")  # [i, j]: x column i, y row j
    transformer = pyproj.Transformer.from_crs(crs, WGS84, always_xy=True)
    with np.errstate(invalid="ignore"):
        lon, lat = transformer.transform(mx.ravel(), my.ravel(), errcheck=False)
    lon = np.asarray(lon, dtype=float).reshape(GRID, GRID)
    lat = np.asarray(lat, dtype=float).reshape(GRID, GRID)
    if not (np.isfinite(lon).all() and np.isfinite(lat).all() and (np.abs(lat) <= 90).all()):
        return None
    hx, hy = gx[1] - gx[0], gy[1] - gy[0]
    err = 0.0
    for f in (lon, lat):
        fxx = np.abs(np.diff(f, 2, axis=0)).max() / hx**2
        fyy = np.abs(np.diff(f, 2, axis=1)).max() / hy**2
        err = max(err, SAFETY * (hx * hx * fxx + hy * hy * fyy) / 8.0)
    err += 1e-9 * max(float(np.abs(lon).max()), float(np.abs(lat).max()), 1.0)  # rounding of the arithmetic
    if not err < MAX_ERROR_DEG:
        return None
    b = np.where(present[:, None], bounds, x0)  # rows without geometry: anywhere on the grid (NaN at the end)

    def cell(v: np.ndarray, v0: float, h: float) -> tuple[np.ndarray, np.ndarray]:
        """Grid cell of each coordinate and its place across it (0 to 1)."""
        at = np.clip((v - v0) / h, 0.0, GRID - 1.0)
        k = np.minimum(at.astype(np.int64), GRID - 2)
        return k, at - k

    cols = [cell(v, x0, hx) for v in (b[:, 0], (b[:, 0] + b[:, 2]) / 2, b[:, 2])]
    rows = [cell(v, y0, hy) for v in (b[:, 1], (b[:, 1] + b[:, 3]) / 2, b[:, 3])]
    flat = [lon.ravel(), lat.ravel()]
    n = len(bounds)
    lo = [np.full(n, np.inf), np.full(n, np.inf)]
    hi = [np.full(n, -np.inf), np.full(n, -np.inf)]
    for i, t in cols:
        for j, u in rows:
            k = i * GRID + j
            w00, w10, w01, w11 = (1 - t) * (1 - u), t * (1 - u), (1 - t) * u, t * u
            for g, low, high in zip(flat, lo, hi):
                v = w00 * g[k] + w10 * g[k + GRID] + w01 * g[k + 1] + w11 * g[k + GRID + 1]
                np.minimum(low, v, out=low)
                np.maximum(high, v, out=high)
    approx = np.stack([lo[0], lo[1], hi[0], hi[1]], axis=1)
    approx[~present] = np.nan
    return Sketch(approx, err)


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
            sketch = sketch_of(crs, bounds, present)
            placed = Placement(role, crs, layer.crs is not None, bounds, present, sketch)
            if sketch is None:
                placed.lonlat  # noqa: B018 -- transformed now, where a CRS not tied to the globe fails
        except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
            continue  # a local or engineering CRS: not tied to the globe, nothing to place
        out[role] = placed
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
        fits = other.inside(other_area) & other.present
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
        rows = np.flatnonzero(placed.present & ~placed.inside(ref, SWAP_MARGIN_DEG))
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
