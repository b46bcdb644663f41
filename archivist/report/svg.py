"""The HTML report's map: the project's geometries and the findings as one SVG element.

* unit polygons filled with their legend colours, one ``<path>`` per unit;
* lines drawn by kind (contacts, faults, the map boundary) and certainty;
* samples as dots and structural measurements as strike-and-dip symbols;
* every finding with a location as a marker coloured by severity, and its
  geometry (an overlap, a gap, a dangling line) drawn unsimplified: notices
  under the samples and structural measurements, warnings and errors over
  them (errors on top);
* unit codes as labels at each polygon's pole of inaccessibility, which the
  page keeps at one screen size and shows only where they fit.

The page's measures are computed here, not in its script: the ground length
of a local unit and the direction of true north (:func:`ground_scale`, on
the CRS's ellipsoid with pyproj), the scale bars (:func:`scale_bars`), the
zoom box of each finding (:func:`zoom_boxes`) and where each label fits.

Display geometry is simplified (``shapely.coverage_simplify`` keeps shared
edges shared) to 1/20 000 of the map's width and written as integers on that
grid with relative path commands, so a map of 10^5 polygons stays a page a
browser opens in seconds. All of that is formatting: every number the page
states (counts, measures, positions) comes from the report or the project.

:func:`draw_map` returns the SVG and what the page says about it (notes,
counts for the key, zoom boxes of the findings) as one :class:`MapDrawing`.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import shapely
from pyproj.exceptions import ProjError

from ..model import Report
from ..readers import as_text
from .legend import UnitStyles
from .legend import layer_labels as _labels
from .markup import escape_text as _e
from .markup import plural as _plural
from .markup import script_json as _json

if TYPE_CHECKING:
    from ..project import Layer, MapProject

GRID_STEPS = 20000  # display grid: the map's larger side in this many steps
FINDING_GRID = 100  # findings are drawn on a grid this many times finer
SIMPLIFY_BELOW = 10  # simplify units only when their mean segment is shorter than this many grid steps
COVERAGE_VERTICES = 500_000  # above this, polygons are simplified one by one (coverage simplification is slow)
LINEAR_KINDS = ("lineation", "fold axis", "fold-axis", "fold hinge", "trend")
LABEL_PX = 12  # unit labels: font size in screen pixels at every zoom
LABEL_CHAR = 0.9  # width of a label character, in font sizes: above the 0.69-0.85 of bold capitals measured in Chromium
LABEL_LINE = 1.2  # height of a label's box, in font sizes (measured 1.17)
LABELS_MAX = 3000  # polygons labelled, the largest first; smaller ones are named by clicking



@dataclass
class Frame:
    """Map coordinates to the page's local SVG units.

    Local ``X = (x - x0) * kx``, ``Y = y1 - y``: map units with y pointing
    down and an origin at the top left; ``kx`` squeezes longitude for a
    geographic CRS so that the map is true to shape at its centre (1
    otherwise). Paths are written as integers on a grid of ``q`` local units.
    ``metres_per_unit`` is the ground length of one local unit, measured
    east-west at the map's centre (:func:`ground_scale`).
    """

    x0: float
    y1: float
    kx: float
    width: float
    height: float
    q: float
    metres_per_unit: float
    mm: float  # local units per millimetre of the printed map
    north: float | None = None  # true north at the centre, degrees clockwise from the page's up
    ground: str = ""  # how metres_per_unit was measured, for the caption

    def local(self, x, y):
        return (np.asarray(x, dtype=float) - self.x0) * self.kx, self.y1 - np.asarray(y, dtype=float)

    def grid(self, xy: np.ndarray, q: float) -> tuple[np.ndarray, np.ndarray]:
        X, Y = self.local(xy[:, 0], xy[:, 1])
        return np.rint(X / q).astype(np.int64), np.rint(Y / q).astype(np.int64)


@dataclass(frozen=True)
class GroundScale:
    """What one map unit is on the ground at a point of the map.

    ``metres_x``/``metres_y``: metres on the ground per map unit along x and
    along y; ``kx``: the squeeze of x that makes the page true to shape there
    (``metres_x / metres_y`` for a geographic CRS, 1 for a projected one,
    which is drawn on its grid); ``north``: the direction of true north in
    degrees clockwise from the map's y axis (the meridian convergence, None
    when the CRS has no known ellipsoid); ``how``: one sentence for the
    caption.
    """

    metres_x: float
    metres_y: float
    kx: float
    north: float | None
    how: str

    @property
    def metres_per_unit(self) -> float:
        """Ground metres per local (page) unit, east-west: the length a scale bar is built from."""
        return self.metres_x / self.kx


def ground_scale(crs, x: float, y: float, step: float) -> GroundScale:
    """Ground metres per map unit and the direction of true north at map point (``x``, ``y``).

    Measured on the ellipsoid of the CRS with pyproj's ``Geod`` between two
    points ``step`` map units apart (east-west, then north-south), after
    converting them to longitude and latitude with pyproj; so a map in
    degrees gets metres at its own latitude, and a projected map gets its
    true ground distance (the projection's scale factor included, which is
    up to 0.04 % in UTM and doubles at 60 degrees in Web Mercator). True
    north is the direction of the meridian through the point. Without a CRS,
    or with one pyproj cannot take to longitude and latitude, map units are
    read by the CRS's axis unit (metres when there is none) and north is
    unknown.
    """
    from pyproj import Transformer

    def by_axis(why: str) -> GroundScale:
        metres = 1.0
        if crs is not None and crs.axis_info and crs.axis_info[0].unit_conversion_factor:
            metres = float(crs.axis_info[0].unit_conversion_factor)
        return GroundScale(metres, metres, 1.0, None, why)

    if crs is None:
        return by_axis("the map has no CRS: its units are read as metres and up as north")
    try:
        geod = crs.get_geod()
        base = crs.geodetic_crs
        if geod is None or base is None:
            return by_axis(f"{crs.name} has no ellipsoid: distances are read in its axis unit (grid distance) and north is not known")
        to_ll = Transformer.from_crs(crs, base, always_xy=True)
        h = step / 2
        lon, lat = to_ll.transform(np.array([x - h, x + h, x, x, x]), np.array([y, y, y - h, y + h, y]))
        if not (np.all(np.isfinite(lon)) and np.all(np.isfinite(lat))):
            raise ValueError("point outside the CRS's domain")
        _, _, dx = geod.inv(lon[0], lat[0], lon[1], lat[1])
        _, _, dy = geod.inv(lon[2], lat[2], lon[3], lat[3])
        mx, my = float(dx) / step, float(dy) / step
        if not (mx > 0 and my > 0):
            raise ValueError("zero length")
        if crs.is_geographic:
            kx, north = mx / my, 0.0
        else:
            kx = 1.0
            # one step of latitude north of the centre, back in map units: its bearing on the grid
            to_map = Transformer.from_crs(base, crs, always_xy=True)
            dlat = max(abs(float(lat[3]) - float(lat[2])), 1e-7)  # as long as the north-south step; only its direction is used
            nx, ny = to_map.transform(lon[4], min(lat[4] + dlat, 90.0))
            north = math.degrees(math.atan2(float(nx) - x, float(ny) - y))
        ns = "N" if lat[4] >= 0 else "S"
        ellipsoid = crs.ellipsoid.name if crs.ellipsoid is not None else "CRS's"
        how = f"measured on the {ellipsoid} ellipsoid at latitude {abs(float(lat[4])):.2f}°{ns}"
        return GroundScale(mx, my, kx, north, how)
    except (ProjError, ValueError, TypeError, ZeroDivisionError):
        return by_axis(f"{crs.name} could not be measured on its ellipsoid: distances are read in its axis unit and north is not known")


def _frame(bounds: list[np.ndarray], project) -> Frame | None:
    b = [x for x in bounds if x is not None and np.all(np.isfinite(x))]
    if not b:
        return None
    arr = np.array(b, dtype=float)
    minx, miny = arr[:, 0].min(), arr[:, 1].min()
    maxx, maxy = arr[:, 2].max(), arr[:, 3].max()
    crs = getattr(project, "crs", None)
    step = max(maxx - minx, maxy - miny) / 100 or 1.0
    g = ground_scale(crs, (minx + maxx) / 2, (miny + maxy) / 2, step)
    kx, metres = g.kx, g.metres_per_unit
    scale = float(getattr(getattr(project, "config", None), "scale", 25000.0) or 25000.0)
    mm = scale / 1000.0 / metres  # local units per printed millimetre
    w, h = (maxx - minx) * kx, maxy - miny
    least = 20 * mm  # a frame at least 2 cm of the printed map across
    if w < least:
        minx -= (least - w) / 2 / kx
        w = least
    if h < least:
        maxy += (least - h) / 2
        h = least
    pad = 0.03 * max(w, h)
    x0 = minx - pad / kx
    y1 = maxy + pad
    width, height = w + 2 * pad, h + 2 * pad
    return Frame(x0, y1, kx, width, height, max(width, height) / GRID_STEPS, metres, mm, g.north, g.how)


def scale_bars(frame: Frame) -> list[tuple[float, str]]:
    """The scale bars the page can show, as (length in local units, label), shortest first.

    Round ground lengths (1, 2 and 5 times a power of ten metres) from a
    fifth of a millimetre of the printed map (a bar for the closest zoom) to
    three times the map's width (the farthest zoom out); each converted to
    local units with the ground length of a local unit at the map's centre
    (:attr:`Frame.metres_per_unit`). The page shows the longest bar that fits
    its box at the current zoom.
    """
    mpu = frame.metres_per_unit
    lo = 0.2 * frame.mm * mpu
    hi = 3 * frame.width * mpu
    out = []
    for k in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1):
        for m in (1, 2, 5):
            metres = m * 10.0**k
            if lo <= metres <= hi:
                label = f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"
                out.append((metres / mpu, label))
    return out


def map_units_per_mm(project) -> float:
    """Map units per millimetre of the printed map at the centre of the units layer (1 mm at 1:25 000 is 25 m).

    In a geographic CRS the shorter of the east-west and north-south
    lengths of a degree there decides, so the distance is at least 1 mm
    of the map either way.
    """
    scale = float(getattr(getattr(project, "config", None), "scale", 25000.0) or 25000.0)
    layer = project.layers.get("units") if project is not None else None
    if layer is None or len(layer.frame) == 0:
        return scale / 1000.0
    b = np.asarray(layer.frame.total_bounds, dtype=float)
    if not np.all(np.isfinite(b)):
        return scale / 1000.0
    step = max(b[2] - b[0], b[3] - b[1]) / 100 or 1.0
    g = ground_scale(layer.crs or project.crs, (b[0] + b[2]) / 2, (b[1] + b[3]) / 2, step)
    return scale / 1000.0 / min(g.metres_x, g.metres_y)


ZOOM_CONTEXT = 5.0  # a finding zoomed to spans at most 1/5 of the view
ZOOM_MIN_MM = 40.0  # and the view is at least 40 mm of the printed map across (1 km at 1:25 000)


def zoom_boxes(bounds: np.ndarray, frame: Frame) -> np.ndarray:
    """Zoom boxes (local units, ``x0 y0 x1 y1``) for findings with local bounds ``bounds`` (n x 4).

    Each is a square centred on the finding, :data:`ZOOM_CONTEXT` times its
    larger side and at least :data:`ZOOM_MIN_MM` millimetres of the printed
    map across, so the view shows where the finding is as well as what it is.
    The page fits the box to the shape of the map's window.
    """
    b = np.asarray(bounds, dtype=float).reshape(-1, 4)
    cx, cy = (b[:, 0] + b[:, 2]) / 2, (b[:, 1] + b[:, 3]) / 2
    size = np.maximum(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1])
    half = np.maximum(ZOOM_CONTEXT * size, ZOOM_MIN_MM * frame.mm) / 2
    return np.c_[cx - half, cy - half, cx + half, cy + half]


_LUT_N = 2 * GRID_STEPS + 16
_LEADS = np.array(["M", "l", " ", ""], dtype=object)
_LEAD_LEN = np.array([1, 1, 1, 0])


@lru_cache(maxsize=1)
def _int_lut() -> tuple[np.ndarray, np.ndarray]:
    """The text of every integer in [-_LUT_N, _LUT_N], and its length: int -> str by indexing."""
    text = np.array([str(v) for v in range(-_LUT_N, _LUT_N + 1)], dtype=object)
    return text, np.array([len(t) for t in text])


def _ints_as_text(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if len(v) == 0 or np.abs(v).max() <= _LUT_N:
        text, length = _int_lut()
        return text[v + _LUT_N], length[v + _LUT_N]
    t = v.astype(str)
    return t.astype(object), np.char.str_len(t)


def _encode(geoms: np.ndarray, frame: Frame, q: float, closed: bool):
    """Path data of all geometries as one string, with the end offset and owning geometry of each vertex.

    Vectorised: one pass of shapely over all parts, rings and vertices, and
    integers turned to text by table look-up. Vertices that fall on the same
    grid point as the one before are dropped, and so are rings that collapse
    below 3 points (polygons) or 2 points (lines) at this grid.
    """
    geoms = np.asarray(geoms, dtype=object)
    empty = ("", np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=bool))
    if len(geoms) == 0:
        return empty
    parts, gi = shapely.get_parts(geoms, return_index=True)
    types = shapely.get_type_id(parts)
    if closed:
        keep = types == 3
        parts, gi = parts[keep], gi[keep]
        rings, pi = shapely.get_rings(parts, return_index=True)
        gi = gi[pi]
    else:
        keep = (types == 1) | (types == 2)
        rings, gi = parts[keep], gi[keep]
    if len(rings) == 0:
        return empty
    xy, ri = shapely.get_coordinates(rings, return_index=True)
    if len(xy) == 0:
        return empty
    X, Y = frame.grid(xy, q)
    new_ring = np.r_[True, ri[1:] != ri[:-1]]
    last = np.r_[ri[1:] != ri[:-1], True]
    keep = ~(~new_ring & (X == np.r_[0, X[:-1]]) & (Y == np.r_[0, Y[:-1]]))
    if closed:
        keep &= ~last
    X, Y, ri = X[keep], Y[keep], ri[keep]
    if len(ri) == 0:
        return empty
    _, counts = np.unique(ri, return_counts=True)
    big_enough = np.repeat(counts >= (3 if closed else 2), counts)
    X, Y, ri = X[big_enough], Y[big_enough], ri[big_enough]
    if len(ri) == 0:
        return empty
    first = np.r_[True, ri[1:] != ri[:-1]]
    last = np.r_[ri[1:] != ri[:-1], True]
    second = np.r_[False, first[:-1]]
    dX = np.where(first, X, X - np.r_[0, X[:-1]])
    dY = np.where(first, Y, Y - np.r_[0, Y[:-1]])
    lead = np.where(first, 0, np.where(second, 1, np.where(dX < 0, 3, 2)))
    sx, lx = _ints_as_text(dX)
    sy, ly = _ints_as_text(dY)
    mid = dY >= 0
    table = np.empty((len(dX), 5), dtype=object)
    table[:, 0] = _LEADS[lead]
    table[:, 1] = sx
    table[:, 2] = np.where(mid, " ", "").astype(object)
    table[:, 3] = sy
    table[:, 4] = np.where(last & closed, "z", "").astype(object)
    ends = np.cumsum(_LEAD_LEN[lead] + lx + mid + ly + (last & closed))
    return "".join(table.ravel().tolist()), ends, gi[ri], first


def path_data(geoms: np.ndarray, frame: Frame, q: float, *, closed: bool) -> list[str]:
    """SVG path data (``M``, relative ``l``, ``z``) of each geometry, on a grid of ``q`` local units."""
    out = [""] * len(geoms)
    big, ends, owner, _ = _encode(geoms, frame, q, closed)
    if not big:
        return out
    change = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    starts = np.r_[0, ends[change[1:] - 1]]
    stops = np.r_[ends[change[1:] - 1], ends[-1]]
    for g, a, b in zip(owner[change].tolist(), starts.tolist(), stops.tolist()):
        out[g] = big[a:b]
    return out


def path_data_joined(geoms: np.ndarray, frame: Frame, q: float, *, closed: bool) -> tuple[str, np.ndarray]:
    """The path data of all geometries in one string, and how many rings of each geometry it holds."""
    big, _, owner, first = _encode(geoms, frame, q, closed)
    return big, np.bincount(owner[first], minlength=len(geoms))


def dots(x: np.ndarray, y: np.ndarray, frame: Frame, q: float) -> list[str]:
    """``M x y h0`` per point: drawn as a dot by a round-capped stroke."""
    ok = np.isfinite(x) & np.isfinite(y)
    X, Y = frame.grid(np.c_[np.where(ok, x, frame.x0), np.where(ok, y, frame.y1)], q)
    return [f"M{a} {b}h0" if k else "" for a, b, k in zip(X.tolist(), Y.tolist(), ok.tolist())]


def _display_crs(layer, project):
    """The layer's geometries in the map CRS (reprojected for display when they differ)."""
    frame = layer.frame
    note = None
    if project.crs is not None and frame.crs is not None and not frame.crs.equals(project.crs):
        try:
            frame = frame.to_crs(project.crs)
            note = f"{layer.source} is drawn after reprojection from {layer.frame.crs.name} to the map CRS."
        except (ProjError, ValueError):  # a CRS pyproj cannot convert: draw as stored
            note = f"{layer.source} could not be reprojected to the map CRS and is drawn as stored."
    return np.asarray(frame.geometry.array, dtype=object), note


def _simplify_units(geoms: np.ndarray, tolerance: float) -> tuple[np.ndarray | None, str | None]:
    """Unit polygons simplified for display, and how: ``"coverage"``, ``"polygon"`` or None (not needed).

    Segments already longer than a few grid steps lose nothing visible, so
    then nothing is done. A valid coverage of up to
    :data:`COVERAGE_VERTICES` vertices is simplified as a coverage (shared
    edges stay shared); a larger or broken one polygon by polygon
    (Douglas-Peucker), which is many times faster, at the cost of shared
    edges that may part by up to the tolerance when zoomed far in.
    """
    geoms = geoms.copy()
    ok = ~shapely.is_missing(geoms)
    ok[ok] = ~shapely.is_empty(geoms[ok]) & np.isin(shapely.get_type_id(geoms[ok]), (3, 6))
    if not ok.any():
        return None, None
    sub = geoms[ok]
    vertices = int(shapely.get_num_coordinates(sub).sum())
    if float(shapely.length(sub).sum()) / max(vertices, 1) > SIMPLIFY_BELOW * tolerance:
        return None, None
    if vertices <= COVERAGE_VERTICES and shapely.is_valid(sub).all():
        try:
            geoms[ok] = shapely.coverage_simplify(sub, tolerance)
            return geoms, "coverage"
        except shapely.errors.GEOSException:
            pass
    geoms[ok] = shapely.simplify(sub, tolerance, preserve_topology=False)
    return geoms, "polygon"


def _simplify_lines(geoms: np.ndarray, tolerance: float) -> np.ndarray:
    """Lines simplified for display, unless their segments are already longer than the display needs."""
    ok = ~shapely.is_missing(geoms)
    if not ok.any():
        return geoms
    mean_segment = float(shapely.length(geoms[ok]).sum()) / max(int(shapely.get_num_coordinates(geoms[ok]).sum()), 1)
    if mean_segment > SIMPLIFY_BELOW * tolerance:
        return geoms
    return shapely.simplify(geoms, tolerance, preserve_topology=False)


# ------------------------------------------------------------------ the map as one SVG element


@dataclass(frozen=True)
class MapDrawing:
    """The map and what the page says about it.

    ``svg`` is empty when there is nothing to draw (no readable layer, no
    finding with a place); ``frame`` is then None. ``boxes`` maps the index
    of each finding listed one by one and placed on the map to its zoom box
    in local units (``"x0 y0 x1 y1"``).
    """

    svg: str
    frame: Frame | None
    notes: tuple[str, ...] = ()
    unit_counts: Counter[str] = field(default_factory=Counter)
    unit_ids: list[list[str]] = field(default_factory=list)
    unit_rings: list[list[int] | None] = field(default_factory=list)
    simplified: str | None = None
    line_key: tuple[tuple[str, str, str, int], ...] = ()
    samples_n: int = 0
    structures_n: int = 0
    boxes: dict[int, str] = field(default_factory=dict)
    labels_n: int = 0
    labels_left: int = 0
    bars: tuple[tuple[float, str], ...] = ()


def draw_map(report: Report, project: MapProject | None, units: UnitStyles, detailed: np.ndarray) -> MapDrawing:
    """The project's layers and the report's findings as one ``<svg>`` element.

    ``units`` gives each unit its fill (and is asked in unit-code order, so
    the map's classes ``u0``, ``u1``... follow it); ``detailed`` marks the
    findings listed one by one, which get their own marker and geometry.
    """
    p = project
    notes: list[str] = []
    layers = {}
    bounds = []
    if p is not None:
        for role in ("units", "extent", "lines", "samples", "structures"):
            lay = p.layers.get(role)
            if lay is None or len(lay.frame) == 0:
                continue
            geoms, note = _display_crs(lay, p)
            if note:
                notes.append(note)
            layers[role] = (lay, geoms)
            present = geoms[~shapely.is_missing(geoms)]
            present = present[~shapely.is_empty(present)]
            if len(present):
                b = shapely.total_bounds(present)
                if np.all(np.isfinite(b)):
                    bounds.append(b)
    fx = np.array([f.x if f.x is not None else np.nan for f in report.findings], dtype=float)
    fy = np.array([f.y if f.y is not None else np.nan for f in report.findings], dtype=float)
    ok = np.isfinite(fx) & np.isfinite(fy)
    if ok.any():
        bounds.append(np.array([fx[ok].min(), fy[ok].min(), fx[ok].max(), fy[ok].max()]))
    fr = _frame(bounds, p)
    if fr is None:
        return MapDrawing("", None, tuple(notes))
    w = _MapWriter(fr, units, notes)
    parts = []
    labels = ""
    if "units" in layers:
        parts.append(w.units_svg(*layers["units"]))
        labels = w.labels_svg(*layers["units"])
    if "extent" in layers:
        parts.append(w.extent_svg(*layers["extent"]))
    if "lines" in layers:
        parts.append(w.lines_svg(*layers["lines"]))
    parts.append(labels)
    # notices under the field data, warnings and errors over it (errors on top)
    below, above = w.findings_svg(report, detailed, fx, fy)
    parts.append(below)
    if "structures" in layers:
        parts.append(w.structures_svg(*layers["structures"]))
    if "samples" in layers:
        parts.append(w.samples_svg(*layers["samples"]))
    parts.append(above)
    bars = scale_bars(fr)
    aspect = fr.width / fr.height
    defs = (
        '<defs><pattern id="nolegend" width="8" height="8" patternUnits="userSpaceOnUse" patternTransform="rotate(45)">'
        '<rect width="8" height="8" fill="#eee"/><rect width="3" height="8" fill="#bbb"/></pattern></defs>'
    )
    # the hatch pattern is in local units; make it a few pixels at full view
    pat = fr.width / 300
    defs = defs.replace('width="8" height="8" patternUnits', f'width="{pat:.6g}" height="{pat:.6g}" patternUnits')
    defs = defs.replace('<rect width="8" height="8"', f'<rect width="{pat:.6g}" height="{pat:.6g}"')
    defs = defs.replace('<rect width="3" height="8"', f'<rect width="{pat * 0.4:.6g}" height="{pat:.6g}"')
    full = f"0 0 {fr.width:.4f} {fr.height:.4f}"
    svg = (
        f'<svg id="geomap" role="img" aria-label="Map of the project with its findings" tabindex="0" '
        f'viewBox="{full}" preserveAspectRatio="xMidYMid meet" style="--aspect:{aspect:.5f}" '
        f'data-full="{full}" data-x0="{float(fr.x0)!r}" data-y1="{float(fr.y1)!r}" data-kx="{float(fr.kx)!r}" '
        f'data-mpu="{float(fr.metres_per_unit)!r}" data-minw="{fr.mm * 2:.6g}" data-label-px="{LABEL_PX}" '
        f'data-bars="{_e(_json([[float(f"{n:.9g}"), t] for n, t in bars]))}">'
        + defs
        + "".join(parts)
        + "</svg>"
    )
    return MapDrawing(
        svg, fr, tuple(w.notes), w.unit_counts, w.unit_ids, w.unit_rings, w.simplified,
        tuple(w.line_key), w.samples_n, w.structures_n, w.boxes, w.labels_n, w.labels_left, tuple(bars),
    )


class _MapWriter:
    """The groups of the map, one method per layer; each adds what the page will say about it to its attributes."""

    def __init__(self, frame: Frame, units: UnitStyles, notes: list[str]) -> None:
        self.frame = frame
        self.units = units
        self.notes = notes
        self.unit_counts: Counter[str] = Counter()
        self.unit_ids: list[list[str]] = []
        self.unit_rings: list[list[int] | None] = []
        self.simplified: str | None = None
        self.line_key: list[tuple[str, str, str, int]] = []
        self.samples_n = 0
        self.structures_n = 0
        self.boxes: dict[int, str] = {}
        self.labels_n = 0
        self.labels_left = 0

    def units_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        fr = self.frame
        q = fr.q
        parts = []
        codes = _labels(lay, "unit_field")
        if codes is None:
            codes = np.full(len(geoms), "", dtype=object)
            self.notes.append(f"{lay.source} has no unit field: its polygons are drawn without colour.")
        self.unit_counts = Counter(codes.tolist())
        simple, self.simplified = _simplify_units(geoms, q)
        shown = geoms if simple is None else simple
        # One path per unit (a browser draws 10 paths far faster than 10^5). Clicking finds the
        # polygon again: unit_ids[g] lists the feature ids of group g in the order of their
        # subpaths, unit_rings[g] how many rings (subpaths) each has, or null when all have one.
        # Polygons too small to draw at the display grid are left out.
        order = np.argsort(codes, kind="stable")
        ocodes = codes[order]
        self.unit_ids, self.unit_rings = [], []
        parts.append(f'<g class="units" transform="scale({q:.9g})">')
        for code in sorted(set(codes.tolist())):
            unit = self.units.unit_for(code)
            sel = order[ocodes == code]
            body, rings = path_data_joined(shown[sel], fr, q, closed=True)
            if not body:
                continue
            drawn = rings > 0
            self.unit_ids.append(lay.ids[sel[drawn]].tolist())
            self.unit_rings.append(rings[drawn].tolist() if (rings[drawn] != 1).any() else None)
            parts.append(
                f'<path class="{unit.cls}" data-unit="{_e(code)}" data-g="{len(self.unit_ids) - 1}" '
                f'style="fill:{unit.fill}" d="{body}"/>'
            )
        parts.append("</g>")
        return "".join(parts)

    def labels_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        """The unit code of each polygon at its pole of inaccessibility, for the page to size and show.

        Each ``<text>`` carries ``data-s``: the most local units per screen
        pixel at which the label, :data:`LABEL_PX` pixels high, fits inside
        the polygon's largest inscribed circle (GEOS). The page keeps the text
        that size at every zoom and shows a label only while it fits; labels
        are written largest circle first. Only the :data:`LABELS_MAX` largest
        polygons are labelled.
        """
        fr = self.frame
        codes = _labels(lay, "unit_field")
        if codes is None:
            return ""
        ok = ~shapely.is_missing(geoms)
        ok[ok] = ~shapely.is_empty(geoms[ok]) & np.isin(shapely.get_type_id(geoms[ok]), (3, 6))
        ok &= codes != ""
        idx = np.flatnonzero(ok)
        if len(idx) == 0:
            return ""
        order = idx[np.argsort(-shapely.area(geoms[idx]), kind="stable")]
        self.labels_left = max(len(order) - LABELS_MAX, 0)
        order = order[:LABELS_MAX]
        if fr.kx == 1.0:  # local units are map units reflected and shifted: the circle is found in map units
            local = geoms[order]
        else:
            local = shapely.transform(geoms[order], lambda xy: np.c_[fr.local(xy[:, 0], xy[:, 1])])
        try:
            # a coarse search (1/100 of each polygon's size) is enough to place a label: the radius
            # returned is the true distance from the centre found to the boundary, so a label that
            # fits that circle is inside the polygon whatever the tolerance
            b = shapely.bounds(local)
            mic = shapely.maximum_inscribed_circle(local, np.maximum(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1]) / 100)
            start = shapely.get_point(mic, 0)
            centre = np.c_[shapely.get_x(start), shapely.get_y(start)]  # NaN where GEOS gave nothing
            radius = shapely.length(mic)
        except shapely.errors.GEOSException:  # an invalid polygon: a point inside it, and a quarter of its smaller side
            inside = shapely.point_on_surface(local)
            centre = np.c_[shapely.get_x(inside), shapely.get_y(inside)]
            b = shapely.bounds(local)
            radius = np.minimum(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1]) / 4
        if fr.kx == 1.0:
            centre = np.c_[fr.local(centre[:, 0], centre[:, 1])]
        text = codes[order]
        chars = np.array([len(t) for t in text.tolist()], dtype=float)
        need = LABEL_PX * np.hypot(np.maximum(chars * LABEL_CHAR, 1.0), LABEL_LINE)  # the label's diagonal, in pixels
        fits = 2 * radius / need
        keep = np.isfinite(fits) & (fits > 0) & np.all(np.isfinite(centre), axis=1)
        srt = np.flatnonzero(keep)[np.argsort(-fits[keep], kind="stable")]
        self.labels_n = len(srt)
        body = "".join(
            f'<text x="{x:.7g}" y="{y:.7g}" data-s="{v:.4g}">{_e(t)}</text>'
            for x, y, v, t in zip(centre[srt, 0].tolist(), centre[srt, 1].tolist(), fits[srt].tolist(), text[srt].tolist())
        )
        return f'<g class="labels" aria-hidden="true">{body}</g>'

    def extent_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        q = self.frame.q
        boundary = shapely.boundary(geoms[~shapely.is_missing(geoms)])
        d = "".join(path_data(boundary, self.frame, q, closed=False))
        if d:
            return f'<g class="extent" transform="scale({q:.9g})"><path d="{d}"><title>map extent</title></path></g>'
        return ""

    def samples_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        q = self.frame.q
        pts = shapely.point_on_surface(geoms[~shapely.is_missing(geoms)])
        xy = shapely.get_coordinates(pts)
        d = "".join(dots(xy[:, 0], xy[:, 1], self.frame, q))
        if not d:
            return ""
        self.samples_n = len(xy)
        return (
            f'<g class="samples" transform="scale({q:.9g})"><title>{_e(_plural(len(xy), "sample"))}</title>'
            f'<path d="{d}"/><path class="inner" d="{d}"/></g>'
        )

    def lines_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        fr = self.frame
        q = fr.q
        n = len(geoms)
        kinds = _labels(lay, "kind_field")
        cert = _labels(lay, "certainty_field") if lay.spec.get("certainty_field") else None
        kinds = np.full(n, "", dtype=object) if kinds is None else kinds
        cert = np.full(n, "", dtype=object) if cert is None else cert
        simple = _simplify_lines(geoms, q)
        keys, inverse = np.unique(np.char.add(np.char.add(kinds.astype(str), "\x1f"), cert.astype(str)), return_inverse=True)
        pairs = [tuple(k.split("\x1f", 1)) for k in keys.tolist()]
        out = [f'<g class="lines" transform="scale({q:.9g})">']
        for j in sorted(range(len(pairs)), key=lambda j: (_kind_rank(pairs[j][0]), pairs[j])):
            kind, c = pairs[j]
            sel = np.flatnonzero(inverse == j)
            body, _ = path_data_joined(simple[sel], fr, q, closed=False)
            if not body:
                continue
            style = _line_style(kind, c)
            label = f"{kind or 'no kind'}{', ' + c if c else ''}"
            self.line_key.append((label, style, kind, len(sel)))
            out.append(f'<path style="{style}" d="{body}"><title>{_e(label)} ({_e(_plural(len(sel), "line"))})</title></path>')
        out.append("</g>")
        return "".join(out)

    def structures_svg(self, lay: Layer, geoms: np.ndarray) -> str:
        fr = self.frame
        ok = ~shapely.is_missing(geoms)
        pts = shapely.point_on_surface(geoms[ok])
        xy = shapely.get_coordinates(pts)
        if len(xy) == 0:
            return ""

        def num(key):
            col = lay.field(key)
            if col is None:
                return np.full(len(geoms), np.nan)
            return pd.to_numeric(lay.frame[col], errors="coerce").to_numpy(dtype=float)

        az = num("azimuth_field")[ok]
        kinds = _labels(lay, "kind_field")
        kinds = np.array([k.lower() for k in kinds[ok]], dtype=object) if kinds is not None else np.full(len(xy), "", dtype=object)
        rhr = str(lay.spec.get("convention", "dip-direction")) == "right-hand-rule"
        linear = np.isin(kinds, LINEAR_KINDS)
        # dip direction (planes) or trend (lines), degrees clockwise from grid north
        direction = np.where(linear | ~rhr, az, az + 90.0)
        X, Y = fr.local(xy[:, 0], xy[:, 1])
        L = 2.5 * fr.mm  # half strike line: 2.5 mm at map scale
        T = 1.5 * fr.mm  # dip tick
        rad = np.radians(direction)
        ux, uy = np.sin(rad), -np.cos(rad)  # unit vector of the direction in local units (y down)
        sx, sy = -uy, ux  # strike: perpendicular
        has = np.isfinite(rad)
        q = fr.q
        segs = []
        plane = has & ~linear
        line = has & linear
        # planes: strike line through the point, tick towards the dip direction
        segs.append((X - sx * L, Y - sy * L, X + sx * L, Y + sy * L, plane))
        segs.append((X, Y, X + ux * T, Y + uy * T, plane))
        # lines: an arrow along the trend
        segs.append((X, Y, X + ux * 2 * L, Y + uy * 2 * L, line))
        ax, ay = X + ux * 2 * L, Y + uy * 2 * L
        for ang in (150.0, -150.0):
            r = np.radians(ang)
            hx = ux * math.cos(r) - uy * math.sin(r)
            hy = ux * math.sin(r) + uy * math.cos(r)
            segs.append((ax, ay, ax + hx * T * 0.8, ay + hy * T * 0.8, line))
        pieces = []
        for a, b, c, dd, m in segs:
            if not m.any():
                continue
            A, B, C, D = (np.rint(v[m] / q).astype(np.int64) for v in (a, b, c, dd))
            pieces.append(
                np.char.add(
                    np.char.add(np.char.add(np.char.add("M", A.astype(str)), " "), B.astype(str)),
                    np.char.add(np.char.add(np.char.add("L", C.astype(str)), " "), D.astype(str)),
                )
            )
        nodir = ~has
        body = "".join("".join(p.tolist()) for p in pieces)
        if nodir.any():
            body += "".join(dots(xy[nodir, 0], xy[nodir, 1], fr, q))
        self.structures_n = len(xy)
        return (
            f'<g class="struct" transform="scale({q:.9g})"><title>{_e(_plural(len(xy), "structural measurement"))}</title>'
            f'<path d="{body}"/></g>'
        )

    def findings_svg(self, report: Report, detailed: np.ndarray, fx: np.ndarray, fy: np.ndarray) -> tuple[str, str]:
        """Markers and geometries of the findings: (notices, warnings and errors).

        The page puts the notices under the samples and structural
        measurements and the rest over them, errors on top. The findings
        listed one by one (``detailed``) get their own marker (clickable,
        linked to their row) and their geometry drawn; the others are marked
        too, as dots merged into one path per rule and severity.
        """
        fr = self.frame
        qf = fr.q / FINDING_GRID
        findings = report.findings
        geoms = _finding_geoms(report, detailed)
        located = np.isfinite(fx) & np.isfinite(fy)
        # zoom boxes in local units: around the finding's geometry, else its point
        X, Y = fr.local(fx, fy)
        bx = np.c_[X, Y, X, Y]
        has_geom = ~shapely.is_missing(geoms)
        if has_geom.any():
            b = shapely.bounds(geoms[has_geom])
            lx0, ly1 = fr.local(b[:, 0], b[:, 1])
            lx1, ly0 = fr.local(b[:, 2], b[:, 3])
            gb = np.c_[lx0, ly0, lx1, ly1]
            good = np.all(np.isfinite(gb), axis=1)
            bx[np.flatnonzero(has_geom)[good]] = gb[good]
        zb = zoom_boxes(bx, fr)
        for i in np.flatnonzero(detailed & located & np.all(np.isfinite(zb), axis=1)).tolist():
            self.boxes[i] = " ".join(f"{v:.3f}" for v in zb[i])
        rank = np.array([f.severity.rank for f in findings], dtype=int)
        # drawn notices first, errors last (on top): a stable sort on the severity
        paint = np.argsort(-rank, kind="stable")
        # geometries other than points, drawn unsimplified on the fine grid
        shapes: dict[int, str] = {}
        if has_geom.any():
            t = np.full(len(findings), -1)
            t[has_geom] = shapely.get_type_id(geoms[has_geom])
            poly = np.isin(t, (3, 6))
            lines = np.isin(t, (1, 2, 5))
            gpoly, gline = geoms.copy(), geoms.copy()
            gpoly[~poly] = None
            gline[~lines] = None
            dpoly = path_data(gpoly, fr, qf, closed=True)
            dline = path_data(gline, fr, qf, closed=False)
            for i in np.flatnonzero(poly | lines).tolist():
                dd = dpoly[i] if poly[i] else dline[i]
                if dd:
                    cls = f"s-{findings[i].severity.value}" + ("" if poly[i] else " ln")
                    shapes[i] = f'<path class="{cls}" data-k="{i}" d="{dd}"/>'
        marker = dots(fx, fy, fr, qf)
        marks = {
            i: f'<path class="s-{findings[i].severity.value}" data-k="{i}" d="{marker[i]}"/>'
            for i in np.flatnonzero(detailed & located).tolist()
        }
        bulk: dict[tuple[str, str], list[int]] = {}
        for i in paint.tolist():
            if located[i] and not detailed[i]:
                bulk.setdefault((findings[i].rule, findings[i].severity.value), []).append(i)
        bulk_marks: dict[int, str] = {}
        for (rule, sev), idx in bulk.items():
            f = findings[idx[0]]
            bulk_marks[idx[0]] = (
                f'<path class="s-{sev} bulk" data-rule="{_e(rule)}" data-family="{_e(f.family)}" data-severity="{sev}" '
                f'data-n="{len(idx)}" d="{"".join(marker[i] for i in idx)}"/>'
            )
        out = []
        for low in (True, False):
            order = [i for i in paint.tolist() if (rank[i] == 2) == low]
            fg = "".join(shapes[i] for i in order if i in shapes)
            fm = "".join(marks[i] for i in order if i in marks) + "".join(bulk_marks[i] for i in order if i in bulk_marks)
            layer = "below" if low else "above"
            out.append(
                f'<g class="fg {layer}" transform="scale({qf:.9g})">{fg}</g><g class="fm {layer}" transform="scale({qf:.9g})">{fm}</g>'
                if fg or fm or not low else ""
            )
        return out[0], out[1]



def _finding_geoms(report: Report, detailed: np.ndarray) -> np.ndarray:
    """The geometry of each finding listed one by one, read from its WKT (None for the others)."""
    geoms = np.full(len(report.findings), None, dtype=object)
    idx = [i for i, f in enumerate(report.findings) if f.wkt and detailed[i]]
    if idx:
        wkts = np.array([report.findings[i].wkt for i in idx], dtype=object)
        geoms[idx] = shapely.from_wkt(wkts, on_invalid="ignore")
    return geoms


def _kind_rank(kind: str) -> int:
    k = kind.lower()
    return 0 if k == "map-boundary" else 2 if "fault" in k else 1


def _line_style(kind: str, certainty: str) -> str:
    k, c = kind.lower(), certainty.lower()
    if "fault" in k:
        colour, width = "#111", 2.4
    elif k == "contact":
        colour, width = "#1a1a1a", 1.0
    elif "boundary" in k:
        colour, width = "#444", 1.6
    else:
        colour, width = "#6a3d9a", 1.2
    dash = {"approximate": "7 4", "approximately located": "7 4", "inferred": "3 4", "concealed": "1 4", "uncertain": "3 4"}.get(c)
    style = f"stroke:{colour};stroke-width:{width}px;fill:none;vector-effect:non-scaling-stroke"
    if dash:
        style += f";stroke-dasharray:{dash}"
    return style

