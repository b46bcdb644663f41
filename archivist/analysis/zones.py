"""Evidence inside a project of the CRS its coordinates were really captured in.

A map labelled throughout with a neighbouring UTM zone, or with the other
hemisphere, is consistent with itself: every layer lines up with every
other, and the coordinates often still fall inside the labelled CRS's area
of use. Only something independent of the label can tell. Three such things
are used here, each compared with the layers as labelled and then with
*candidate* CRSs taken from the EPSG dataset (pyproj's copy of it):

* **longitude/latitude columns** beside a layer's own coordinates
  (:mod:`archivist.vocab.coordinates` says which columns and how the cells are
  read): the columns are transformed into the layer's CRS with pyproj and
  compared with the stored position (the distance from the transformed point
  to the feature's geometry, measured on the WGS 84 ellipsoid);
* a **declared geographic extent** (``[map] geographic_extent = [west,
  south, east, north]`` in degrees): the layers' extent in longitude/latitude
  must fall inside it;
* **layers in another CRS** (or layers that do not line up with the rest):
  two clusters of layers that do not overlap on the globe as labelled, of
  which one overlaps the other when read in a candidate CRS.

The candidates are the CRSs the EPSG dataset names like the labelled one with
another zone number (the two neighbours on either side) or the other
hemisphere letter, on the same datum; and, for the longitude/latitude
columns only (a datum shifts positions by metres to a few hundred metres,
too little for the extents to tell), the same zone on every other datum
whose EPSG area of use holds the features. CRSs whose name has no zone
number (a national grid, a geographic CRS) have no candidates: a
disagreement is still reported, without a CRS that explains it.

Thresholds (each marked where it comes from):

* a longitude/latitude reading *agrees* with a position within
  :data:`AGREE_MIN_M` (20 m; common practice: a handheld GNSS position is good
  to 5-10 m, and degrees written to four decimals to about 11 m), or 1 mm at
  the map scale (common practice for plotting accuracy) when that is more,
  or the rounding step of the columns (0.001° is 111 m of latitude) when
  that is more;
* a layer's columns disagree *as a whole* when at least
  :data:`WHOLE_SHARE` (90 %, our choice) of the compared rows disagree;
  otherwise the rows that disagree are a partial finding;
* an extent is *inside* the declared one when it lies within it widened by
  10 % of its size and 0.01° (about 1 km) on every side (our choice: declared
  extents are usually rounded); clusters of layers *line up* when their
  longitude/latitude boxes, each widened the same way, intersect.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TYPE_CHECKING, NamedTuple

import numpy as np
import pyproj
import shapely
from pyproj.transformer import AreaOfInterest
from pyproj.database import query_crs_info
from pyproj.enums import PJType

from ..vocab.coordinates import LonLatColumns, read_lonlat
from .placement import Box, Placement, lonlat_boxes, outer_box, overshoot, within

if TYPE_CHECKING:
    from ..project import MapProject
    from .placement import SwapSuspects

AGREE_MIN_M = 20.0
AGREE_MAP_MM = 1.0
WHOLE_SHARE = 0.9
PAD_SHARE = 0.1
PAD_DEG = 0.01
METRES_PER_DEGREE_LAT = 111_320.0  # a degree of latitude, rounded up (WGS 84 meridian arc: 110.6-111.7 km)
_GEOD = pyproj.Geod(ellps="WGS84")
_ZONE_NAME = re.compile(r"^(?P<datum>.+?) / (?P<kind>.*?zone )(?P<zone>\d+)(?P<hemi>[NS]?)$")


# ---------------------------------------------------------------- candidates from the EPSG dataset

class Candidate(NamedTuple):
    """A CRS the coordinates may really be in, and how it differs from the label."""

    crs: pyproj.CRS
    how: str  # "zone", "hemisphere", "zone and hemisphere" or "datum"


@lru_cache(maxsize=1)
def _projected_names() -> dict[str, tuple[str, str, tuple[float, float, float, float] | None]]:
    """Every projected CRS of the EPSG dataset by name: (authority, code, area of use); current entries win."""
    out: dict[str, tuple[str, str, tuple[float, float, float, float] | None]] = {}
    infos = query_crs_info(auth_name="EPSG", pj_types=PJType.PROJECTED_CRS)
    for info in sorted(infos, key=lambda i: not i.deprecated):  # deprecated first, so current entries overwrite them
        a = info.area_of_use
        out[info.name] = (info.auth_name, info.code, (a.west, a.south, a.east, a.north) if a is not None else None)
    return out


def _epsg_name(crs: pyproj.CRS) -> str:
    code = crs.to_epsg(min_confidence=70)
    if code is not None:
        try:
            return pyproj.CRS.from_epsg(code).name
        except pyproj.exceptions.CRSError:
            pass
    return crs.name


def zone_of(crs: pyproj.CRS) -> tuple[str, str, int, str] | None:
    """(datum part, kind part, zone number, hemisphere letter) of a zoned CRS's EPSG name, or None."""
    m = _ZONE_NAME.match(_epsg_name(crs))
    if m is None or not crs.is_projected:
        return None
    return m["datum"], m["kind"], int(m["zone"]), m["hemi"]


def candidates(crs: pyproj.CRS, where: Box | None = None, datums: bool = False) -> list[Candidate]:
    """CRSs of the EPSG dataset that differ from ``crs`` by the zone (one or two either side), the hemisphere or (``datums``) the datum.

    Datum candidates are the same zone on another datum whose area of use
    holds the centre of ``where`` (lon/lat). The order is the order of
    preference when two fit equally well: the nearest zones, the other
    hemisphere, the zones two away, then other datums.
    """
    parts = zone_of(crs)
    if parts is None:
        return []
    datum, kind, zone, hemi = parts
    names = _projected_names()
    utm = "UTM" in kind

    def number(z: int) -> int | None:
        if utm:
            return (z - 1) % 60 + 1
        return z if z > 0 else None

    wanted: list[tuple[int | None, str, str]] = []
    other = {"N": "S", "S": "N"}.get(hemi)
    for step in (1, 2):
        for z in (zone - step, zone + step):
            wanted.append((number(z), hemi, "zone"))
        if step == 1 and other:
            wanted.append((zone, other, "hemisphere"))
            wanted += [(number(zone - 1), other, "zone and hemisphere"), (number(zone + 1), other, "zone and hemisphere")]
    out: list[Candidate] = []
    seen: set[str] = set()
    for zn, h, how in wanted:
        name = f"{datum} / {kind}{zn}{h}"
        if zn is None or name in seen or name not in names:
            continue
        seen.add(name)
        auth, code, _ = names[name]
        out.append(Candidate(pyproj.CRS.from_authority(auth, code), how))
    if datums and where is not None:
        cx, cy = (where[0] + where[2]) / 2, (where[1] + where[3]) / 2
        suffix = f" / {kind}{zone}{hemi}"
        for name, (auth, code, area) in sorted(names.items()):
            if not name.endswith(suffix) or name.startswith(datum + " / ") or "(" in name or area is None:
                continue
            w, s, e, n = area
            if w <= cx <= e and s <= cy <= n:
                out.append(Candidate(pyproj.CRS.from_authority(auth, code), "datum"))
    return out


# ---------------------------------------------------------------- longitude/latitude columns

@dataclass(frozen=True)
class ColumnEvidence:
    """A layer's longitude/latitude columns compared with its positions.

    Arrays are over the compared rows (``rows``: indices of the layer's
    features that have a geometry and both readings, and are not suspected
    of swapped axes).
    """

    role: str
    columns: LonLatColumns
    crs: pyproj.CRS  # the layer's CRS as labelled (or the map CRS it is assumed to be in)
    lonlat_crs: pyproj.CRS  # the CRS the columns are read in
    rows: np.ndarray
    n_features: int  # features in the layer
    left_out: int  # rows with a geometry but no usable reading
    agree_m: float
    offsets: np.ndarray  # metres between each reading and its position, under the label (NaN: cannot be placed)
    disagree: np.ndarray  # bool: beyond agree_m under the label
    fit: Candidate | None = None  # the candidate that explains most of the disagreeing rows
    swapped_columns: bool = False  # the disagreeing rows agree when longitude and latitude are exchanged
    explained: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))  # rows the fit (or the swap) explains
    fit_offsets: np.ndarray = field(default_factory=lambda: np.zeros(0))  # metres under the fit, for the explained rows

    @property
    def whole(self) -> bool:
        """At least :data:`WHOLE_SHARE` of the compared rows disagree under the label."""
        return len(self.rows) > 0 and self.disagree.sum() >= WHOLE_SHARE * len(self.rows)


def agree_distance(project: MapProject, step_deg: float) -> float:
    """Metres within which a reading agrees with a position (see the module's thresholds)."""
    plotting = project.config.scale * AGREE_MAP_MM / 1000.0
    return max(AGREE_MIN_M, plotting, step_deg * METRES_PER_DEGREE_LAT)


def _offsets(source: pyproj.CRS, target: pyproj.CRS, lon: np.ndarray, lat: np.ndarray, geoms: np.ndarray, aoi: AreaOfInterest | None) -> np.ndarray:
    """Metres (WGS 84 geodesic) from each reading to the nearest point of its geometry read in ``target``; NaN where PROJ cannot."""
    try:
        t = pyproj.Transformer.from_crs(source, target, always_xy=True, area_of_interest=aoi)
    except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
        return np.full(len(lon), np.nan)
    with np.errstate(invalid="ignore"):
        px, py = t.transform(lon, lat, errcheck=False)
    px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
    ok = np.isfinite(px) & np.isfinite(py)
    out = np.full(len(lon), np.nan)
    if not ok.any():
        return out
    near = shapely.shortest_line(shapely.points(px[ok], py[ok]), geoms[ok])
    q = shapely.get_coordinates(shapely.get_point(near, 1))
    with np.errstate(invalid="ignore"):
        qlon, qlat = t.transform(q[:, 0], q[:, 1], direction="INVERSE", errcheck=False)
    qlon, qlat = np.asarray(qlon, dtype=float), np.asarray(qlat, dtype=float)
    good = np.isfinite(qlon) & np.isfinite(qlat) & (np.abs(qlat) <= 90)
    dist = np.full(len(qlon), np.nan)
    if good.any():
        _, _, d = _GEOD.inv(lon[ok][good], lat[ok][good], qlon[good], qlat[good])
        dist[good] = d
    out[ok] = dist
    return out


def compare_columns(project: MapProject, placed: Placement, swap: np.ndarray | None) -> ColumnEvidence | None:
    """The layer's longitude/latitude columns against its positions, with the best candidate when they disagree."""
    layer = project.sources[placed.role]
    read = read_lonlat(layer)
    if read is None:
        return None
    try:
        source = pyproj.CRS.from_user_input(read.crs_text)
    except pyproj.exceptions.CRSError:
        return None  # reported by the manifest check
    if not source.is_geographic:
        return None
    lon, lat = read.lon, read.lat
    usable = placed.present & np.isfinite(lon) & np.isfinite(lat)
    if swap is not None:
        usable &= ~swap
    rows = np.flatnonzero(usable)
    left_out = int((placed.present & ~(np.isfinite(lon) & np.isfinite(lat))).sum())
    agree = agree_distance(project, read.step)
    geoms = layer.geometry[rows]
    lo, la = lon[rows], lat[rows]
    if not len(rows):
        return ColumnEvidence(placed.role, read.columns, placed.crs, source, rows, len(placed.present), left_out, agree, np.zeros(0), np.zeros(0, dtype=bool))
    aoi = AreaOfInterest(float(lo.min()), float(la.min()), float(lo.max()), float(la.max()))
    offsets = _offsets(source, placed.crs, lo, la, geoms, aoi)
    disagree = ~(offsets <= agree)
    evidence = ColumnEvidence(placed.role, read.columns, placed.crs, source, rows, len(placed.present), left_out, agree, offsets, disagree)
    if not disagree.any():
        return evidence
    bad = np.flatnonzero(disagree)
    where = (float(lo.min()), float(la.min()), float(lo.max()), float(la.max()))
    best: tuple[int, float] | None = None
    fit: Candidate | None = None
    fit_off = np.zeros(0)
    for cand in candidates(placed.crs, where, datums=True):
        o = _offsets(source, cand.crs, lo[bad], la[bad], geoms[bad], aoi)
        n = int((o <= agree).sum())
        if n and (best is None or n > best[0] or (n == best[0] and float(np.nanmedian(o)) < best[1] - agree)):
            best, fit, fit_off = (n, float(np.nanmedian(o))), cand, o
    # Longitude and latitude exchanged in the columns, read in the labelled CRS.
    swapped = _offsets(source, placed.crs, la[bad], lo[bad], geoms[bad], None) if np.all(np.abs(la[bad]) <= 180) and np.all(np.abs(lo[bad]) <= 90) else np.full(len(bad), np.nan)
    n_swapped = int((swapped <= agree).sum())
    explained = np.zeros(len(rows), dtype=bool)
    if n_swapped and (best is None or n_swapped > best[0]):
        explained[bad] = swapped <= agree
        return ColumnEvidence(
            placed.role, read.columns, placed.crs, source, rows, len(placed.present), left_out, agree, offsets, disagree,
            None, True, explained, swapped[swapped <= agree],
        )
    if fit is not None:
        explained[bad] = fit_off <= agree
        return ColumnEvidence(
            placed.role, read.columns, placed.crs, source, rows, len(placed.present), left_out, agree, offsets, disagree,
            fit, False, explained, fit_off[fit_off <= agree],
        )
    return evidence


# ---------------------------------------------------------------- extents: declared, and of the other layers


def padded(b: Box | np.ndarray) -> Box:
    """A lon/lat box widened by 10 % of its size and 0.01° on every side."""
    w, s, e, n = (float(v) for v in b)
    dx = ((e - w) % 360 if w > e else e - w) * PAD_SHARE + PAD_DEG
    dy = (n - s) * PAD_SHARE + PAD_DEG
    return (w - dx, max(-90.0, s - dy), e + dx, min(90.0, n + dy))


def _intersects(a: np.ndarray, b: Box) -> bool:
    w, s, e, n = b
    lon = np.array([a[0], a[2]])
    if w > e:  # b crosses the antimeridian
        lon = np.where(lon < w, lon + 360.0, lon)
        e += 360.0
    return bool(lon[0] <= e and lon[1] >= w and a[1] <= n and a[3] >= s)


@dataclass(frozen=True)
class Cluster:
    """Layers with one CRS whose features overlap on the globe, as labelled."""

    crs: pyproj.CRS
    roles: tuple[str, ...]
    box: np.ndarray  # lon/lat, as labelled
    features: int

    def read_as(self, placements: dict[str, Placement], crs: pyproj.CRS) -> np.ndarray | None:
        """The cluster's lon/lat box when its coordinates are read in ``crs``."""
        boxes = []
        for role in self.roles:
            p = placements[role]
            try:
                b = outer_box(lonlat_boxes(crs, p.bounds[p.present]))
            except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
                b = None
            if b is not None:
                boxes.append(b)
        return outer_box(np.array(boxes)) if boxes else None


def clusters(placements: dict[str, Placement]) -> list[Cluster]:
    """Layers grouped by CRS and overlap (each layer's lon/lat box widened as in :func:`padded`)."""
    items: list[tuple[str, Placement, np.ndarray]] = []
    for role, p in placements.items():
        b = p.box(p.present)
        if b is not None:
            items.append((role, p, b))
    parent = list(range(len(items)))

    def root(i: int) -> int:
        while parent[i] != i:
            i = parent[i]
        return i

    for i, (_, pi, bi) in enumerate(items):
        for j in range(i):
            _, pj, bj = items[j]
            if pi.crs.equals(pj.crs, ignore_axis_order=True) and _intersects(np.asarray(padded(bi)), padded(bj)):
                parent[root(i)] = root(j)
    groups: dict[int, list[int]] = {}
    for i in range(len(items)):
        groups.setdefault(root(i), []).append(i)
    out = []
    for members in groups.values():
        b = outer_box(np.array([items[i][2] for i in members]))
        assert b is not None
        out.append(Cluster(items[members[0]][1].crs, tuple(items[i][0] for i in members), b,
                           int(sum(int(items[i][1].present.sum()) for i in members))))
    return out


@dataclass(frozen=True)
class ExtentEvidence:
    """A cluster of layers outside the declared geographic extent."""

    declared: Box
    box: np.ndarray  # the cluster's lon/lat box as labelled
    metres: float  # how far beyond the declared extent (geodesic, WGS 84)
    direction: str
    fit: Candidate | None  # a candidate that puts the cluster inside it


@dataclass(frozen=True)
class LayersEvidence:
    """A cluster of layers that overlaps the others only when read in another CRS."""

    others: tuple[str, ...]  # the layers it is compared with
    metres: float  # distance between the two clusters' centres as labelled (geodesic, WGS 84)
    fit: Candidate
    alternative: tuple[tuple[str, ...], Candidate] | None  # the other reading that lines them up too


def declared_extent(project: MapProject) -> Box | None:
    """``[map] geographic_extent`` as (west, south, east, north), when the manifest gives a usable one."""
    value = project.manifest.get("map", {}).get("geographic_extent")
    if not isinstance(value, list) or len(value) != 4 or not all(isinstance(v, (int, float)) for v in value):
        return None
    w, s, e, n = (float(v) for v in value)
    if not (-180 <= w <= 180 and -180 <= e <= 180 and -90 <= s < n <= 90):
        return None
    return (w, s, e, n)


def _centre_distance(a: np.ndarray, b: np.ndarray) -> float:
    _, _, d = _GEOD.inv((a[0] + a[2]) / 2, (a[1] + a[3]) / 2, (b[0] + b[2]) / 2, (b[1] + b[3]) / 2)
    return float(d)


def compare_extent(cluster: Cluster, placements: dict[str, Placement], declared: Box) -> ExtentEvidence | None:
    """The cluster against the declared extent; None when it lies inside."""
    area = padded(declared)
    if within(cluster.box[None, :], area)[0]:
        return None
    fit = None
    for cand in candidates(cluster.crs):
        b = cluster.read_as(placements, cand.crs)
        if b is not None and within(b[None, :], area)[0]:
            fit = cand
            break
    metres, _, direction = overshoot(cluster.box, declared)
    return ExtentEvidence(declared, cluster.box, metres, direction, fit)


def _lines_up(cluster: Cluster, placements: dict[str, Placement], ref: np.ndarray) -> Candidate | None:
    for cand in candidates(cluster.crs):
        b = cluster.read_as(placements, cand.crs)
        if b is not None and _intersects(np.asarray(padded(b)), padded(ref)):
            return cand
    return None


def compare_layers(
    found: list[Cluster],
    placements: dict[str, Placement],
    map_crs: pyproj.CRS | None,
    confirmed: set[int] | None = None,
    strong: dict[int, pyproj.CRS] | None = None,
) -> dict[int, LayersEvidence]:
    """Clusters that overlap the rest of the map only when read in a candidate CRS, by index in ``found``.

    With two clusters, both readings may line them up (zone 32 read as 33,
    or zone 33 read as 32). Other evidence decides when there is some: a
    cluster whose label is ``confirmed`` (its longitude/latitude columns
    agree, or it lies inside the declared extent) is not the one to blame,
    and a cluster whose ``strong`` evidence (columns, declared extent) names
    the same CRS as its reading is. Without such evidence one finding names
    both readings, on the cluster thought the likelier to be mislabelled: of
    two clusters in different CRSs, the one with more layers (the rest of the
    map, labelled by hand, against one layer exported with its CRS); of two
    in the same CRS, the one with fewer layers (the odd one out).
    """
    confirmed = confirmed or set()
    strong = strong or {}
    out: dict[int, LayersEvidence] = {}
    if len(found) < 2:
        return out
    fits: dict[int, tuple[Candidate, np.ndarray, tuple[str, ...]]] = {}
    for i, c in enumerate(found):
        rest = [o for j, o in enumerate(found) if j != i]
        ref = outer_box(np.array([o.box for o in rest]))
        if ref is None or _intersects(np.asarray(padded(c.box)), padded(ref)):
            continue
        cand = _lines_up(c, placements, ref)
        if cand is not None and i not in confirmed:
            fits[i] = (cand, ref, tuple(r for o in rest for r in o.roles))
    if len(found) == 2 and len(fits) == 2:
        shown = [i for i in (0, 1) if i in strong and strong[i].equals(fits[i][0].crs)]
        if len(shown) == 1:
            main, alternative = shown[0], None
        else:
            a, b = found
            if a.crs.equals(b.crs, ignore_axis_order=True):
                key = lambda i: (len(found[i].roles), found[i].features)  # noqa: E731
            else:
                key = lambda i: (-len(found[i].roles), not (map_crs is not None and found[i].crs.equals(map_crs, ignore_axis_order=True)))  # noqa: E731
            main = min((0, 1), key=key)
            alternative = (found[1 - main].roles, fits[1 - main][0])
        cand, ref, others = fits[main]
        out[main] = LayersEvidence(others, _centre_distance(found[main].box, ref), cand, alternative)
        return out
    for i, (cand, ref, others) in fits.items():
        out[i] = LayersEvidence(others, _centre_distance(found[i].box, ref), cand, None)
    return out


# ---------------------------------------------------------------- all evidence, once per check

@dataclass(frozen=True)
class ClusterEvidence:
    """What the project holds about one cluster's CRS."""

    cluster: Cluster
    columns: tuple[ColumnEvidence, ...]  # members whose columns disagree as a whole
    extent: ExtentEvidence | None
    layers: LayersEvidence | None

    @property
    def fit(self) -> Candidate | None:
        """The CRS the evidence points to: the columns' first, then the declared extent's, then the other layers'."""
        for ev in self.columns:
            if ev.fit is not None and ev.explained.sum() >= WHOLE_SHARE * len(ev.rows):
                return ev.fit
        if self.extent is not None and self.extent.fit is not None:
            return self.extent.fit
        return self.layers.fit if self.layers is not None else None


@dataclass(frozen=True)
class ZoneEvidence:
    """Per cluster, the evidence that its label is wrong; per layer, readings that disagree in part."""

    clusters: tuple[ClusterEvidence, ...]
    partial: tuple[ColumnEvidence, ...]  # layers where only some rows disagree

    def known_rows(self) -> dict[str, np.ndarray]:
        """Layer role -> mask over its features whose true CRS a partial disagreement shows (the rows a candidate explains)."""
        out: dict[str, np.ndarray] = {}
        for ev in self.partial:
            if ev.fit is not None and ev.explained.any():
                mask = np.zeros(ev.n_features, dtype=bool)
                mask[ev.rows[ev.explained]] = True
                out[ev.role] = mask
        return out

    def true_crs(self) -> dict[str, pyproj.CRS]:
        """Layer role -> the CRS the evidence shows its coordinates are in, where it shows one."""
        out: dict[str, pyproj.CRS] = {}
        for ce in self.clusters:
            fit = ce.fit
            if fit is not None:
                out.update({role: fit.crs for role in ce.cluster.roles})
        return out


def zone_evidence(project: MapProject, placements: dict[str, Placement], swaps: dict[str, SwapSuspects]) -> ZoneEvidence:
    """Compare every layer's positions with the project's independent evidence (see the module docstring)."""
    found = clusters(placements)
    declared = declared_extent(project)
    columns: dict[str, ColumnEvidence] = {}
    for role, placed in placements.items():
        swap = swaps[role].suspect if role in swaps else None
        ev = compare_columns(project, placed, swap)
        if ev is not None and len(ev.rows):
            columns[role] = ev
    own: list[ClusterEvidence] = []
    confirmed: set[int] = set()
    strong: dict[int, pyproj.CRS] = {}
    for i, c in enumerate(found):
        here = [columns[r] for r in c.roles if r in columns]
        whole = tuple(ev for ev in here if ev.whole)
        extent = compare_extent(c, placements, declared) if declared is not None else None
        ce = ClusterEvidence(c, whole, extent, None)
        own.append(ce)
        if any(not ev.whole for ev in here) or (declared is not None and extent is None):
            confirmed.add(i)
        if ce.fit is not None:
            strong[i] = ce.fit.crs
    layers_ev = compare_layers(found, placements, project.crs, confirmed, strong)
    out = []
    for i, ce in enumerate(own):
        if ce.columns or ce.extent is not None or i in layers_ev:
            out.append(ClusterEvidence(ce.cluster, ce.columns, ce.extent, layers_ev.get(i)))
    in_clusters = {ev.role for ce in out for ev in ce.columns}
    partial = tuple(ev for role, ev in columns.items() if role not in in_clusters and ev.disagree.any())
    return ZoneEvidence(tuple(out), partial)


__all__ = [
    "Candidate", "ColumnEvidence", "Cluster", "ClusterEvidence", "ExtentEvidence", "LayersEvidence", "ZoneEvidence",
    "agree_distance", "candidates", "clusters", "compare_columns", "compare_extent", "compare_layers", "declared_extent",
    "padded", "zone_evidence", "zone_of",
]

