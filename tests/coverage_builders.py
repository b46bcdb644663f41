"""Random geological map coverages built in code, for the property tests and the benchmarks.

A synthetic map is made the way a mapper's GIS would: GEOS Voronoi cells of
points on a jittered grid (so no cell is thinner than about a third of the
cell spacing), grouped into polygons by their nearest seed and dissolved with
GEOS coverage union. Units are assigned so that neighbours in the same fault
block always differ; faults are the polygon edges between fault blocks (two
polygons of one unit may meet across a fault), contacts are the edges between
different units, the map boundary is the outer edge, and a few short faults
end freely inside polygons. Every line is made of the polygons' own edges, so
on a clean map lines and polygons agree exactly.

Defect injection returns changed copies: ``enlarge`` (overlaps), ``shrink``
and ``remove`` (gaps), ``nudge_vertex`` (an edge misfit), ``extend_line``
(a dangle); ``with_defect_density`` gives a fraction of the features each
kind of editing defect at once.

All content is invented; unit codes are ``U01``, ``U02``...
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from shapely.geometry import LineString, box

CRS = "EPSG:32633"
ORIGIN = (400_000.0, 6_500_000.0)


@dataclass
class SyntheticMap:
    units: gpd.GeoDataFrame  # columns: unit, block
    lines: gpd.GeoDataFrame  # columns: kind, certainty
    extent: object  # Polygon
    scale: int = 10_000

    @property
    def tolerance(self) -> float:
        return self.scale * 1e-4  # 0.1 mm at map scale, archivist's default


def jittered_points(n: int, width: float, height: float, rng: np.random.Generator, jitter: float = 0.35) -> np.ndarray:
    """About ``n`` points on a square grid over the box, each moved at most ``jitter`` of a cell."""
    step = math.sqrt(width * height / n)
    nx, ny = max(1, round(width / step)), max(1, round(height / step))
    sx, sy = width / nx, height / ny
    gx, gy = np.meshgrid((np.arange(nx) + 0.5) * sx, (np.arange(ny) + 0.5) * sy)
    pts = np.c_[gx.ravel(), gy.ravel()]
    pts += rng.uniform(-jitter, jitter, pts.shape) * [sx, sy]
    return pts


def voronoi_cells(points: np.ndarray, box) -> np.ndarray:
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(points), extend_to=box))
    return shapely.intersection(cells, box)


def dissolve(cells: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """One polygon per group: GEOS coverage union of its cells, all groups at once."""
    order = np.argsort(group, kind="stable")
    g = group[order]
    counts = np.bincount(g, minlength=n_groups)
    start = np.r_[0, np.cumsum(counts)[:-1]]
    rank = np.arange(len(g)) - start[g]
    table = np.full((n_groups, max(int(counts.max()), 1)), None, dtype=object)
    table[g, rank] = cells[order]
    return shapely.coverage_union_all(table, axis=1)


def colour(pairs: np.ndarray, n: int, n_units: int, block: np.ndarray, rng: np.random.Generator,
           fixed: np.ndarray | None = None) -> np.ndarray:
    """Unit index per polygon such that neighbours in one block differ (random, repaired until clean).

    ``pairs``: (a, b) of neighbouring polygons; ``fixed`` (a tiled map): (a, block, unit) of a polygon
    against a neighbour across a seam, coloured before, which it must differ from as well.
    """
    fixed = np.zeros((0, 3), dtype=np.int64) if fixed is None else fixed
    codes = rng.integers(0, n_units, n)
    a, b = pairs[:, 0], pairs[:, 1]
    same_block = block[a] == block[b]
    fa, fb, fu = fixed[:, 0], fixed[:, 1], fixed[:, 2]
    seam = block[fa] == fb
    for _ in range(1000):
        clash = same_block & (codes[a] == codes[b])
        fclash = seam & (codes[fa] == fu)
        if not clash.any() and not fclash.any():
            return codes
        redo = np.unique(np.r_[b[clash], fa[fclash]])
        codes[redo] = rng.integers(0, n_units, len(redo))
    raise RuntimeError("could not colour the synthetic map")


def synthetic_map(
    n_polygons: int,
    *,
    seed: int = 0,
    spacing: float = 100.0,
    cells_per_polygon: int = 3,
    n_units: int = 10,
    n_faults: int = 2,
    splay_fraction: float = 0.002,
    scale: int = 10_000,
    origin: tuple[float, float] = ORIGIN,
) -> SyntheticMap:
    """A clean synthetic map of about ``n_polygons`` unit polygons (see the module doc)."""
    from archivist.analysis.arrays import merge_by_group
    from archivist.analysis.halfedges import build_edges

    rng = np.random.default_rng(seed)
    side = math.sqrt(n_polygons) * spacing
    ox, oy = origin
    box = shapely.box(ox, oy, ox + side, oy + side)
    fine = jittered_points(n_polygons * cells_per_polygon, side, side, rng) + [ox, oy]
    seeds = jittered_points(n_polygons, side, side, rng, jitter=0.45) + [ox, oy]
    cells = voronoi_cells(np.round(fine, 2), box)
    centre = shapely.get_coordinates(shapely.centroid(cells))
    nearest = shapely.STRtree(shapely.points(seeds)).query_nearest(shapely.points(centre), all_matches=False)
    group = np.empty(len(centre), dtype=np.int64)
    group[nearest[0]] = nearest[1]
    used, group = np.unique(group, return_inverse=True)
    polys = dissolve(cells, group, len(used))
    n = len(polys)
    # fault blocks: left of wavy N-S traces
    pc = shapely.get_coordinates(shapely.point_on_surface(polys))
    u, v = (pc[:, 0] - ox) / side, (pc[:, 1] - oy) / side
    block = _fault_block(u, v, n_faults)
    edges = build_edges(polys)
    twin = np.flatnonzero(edges.twin)
    pairs = np.c_[edges.left[twin], edges.right[twin]]
    code = colour(pairs, n, n_units, block, rng)
    names = np.array([f"U{k + 1:02d}" for k in range(n_units)], dtype=object)
    # lines from the polygons' own edges
    l, r = edges.left[twin], edges.right[twin]
    is_fault = block[l] != block[r]
    is_contact = ~is_fault & (code[l] != code[r])
    single = np.flatnonzero(edges.count == 1)
    rows = []

    def chains(idx, key, kind, certainties):
        if not len(idx):
            return
        uk, inv = np.unique(key, return_inverse=True)
        merged = merge_by_group(edges.lines(idx), inv, len(uk))
        parts = shapely.get_parts(merged)
        cert = rng.choice(certainties, len(parts))
        rows.extend({"kind": kind, "certainty": c, "geometry": p} for p, c in zip(parts, cert))

    chains(single, np.zeros(len(single), dtype=np.int64), "map-boundary", ["certain"])
    fi = twin[is_fault]
    chains(fi, np.minimum(block[l[is_fault]], block[r[is_fault]]) * (n_faults + 1) + np.maximum(block[l[is_fault]], block[r[is_fault]]), "fault", ["certain", "approximate", "concealed"])
    ci = twin[is_contact]
    chains(ci, np.minimum(l[is_contact], r[is_contact]) * n + np.maximum(l[is_contact], r[is_contact]), "contact", ["certain", "approximate", "inferred"])
    # short faults ending inside polygons, well away from their edges
    k = rng.choice(n, max(1, int(n * splay_fraction)), replace=False) if splay_fraction > 0 else np.zeros(0, dtype=np.int64)
    if len(k):
        circ = shapely.maximum_inscribed_circle(polys[k], 0.01)
        c = shapely.get_coordinates(shapely.get_point(circ, 0))
        rad = shapely.length(circ)
        ang = rng.uniform(0, np.pi, len(k))
        d = np.c_[np.cos(ang), np.sin(ang)] * (0.6 * rad)[:, None]
        bend = np.c_[-np.sin(ang), np.cos(ang)] * (0.1 * rad)[:, None]
        coords = np.stack([c - d, c + bend, c + d], axis=1).round(2)
        for line in shapely.linestrings(coords):
            rows.append({"kind": "fault", "certainty": "inferred", "geometry": line})
    units = gpd.GeoDataFrame({"unit": names[code], "block": block}, geometry=polys, crs=CRS)
    lines = gpd.GeoDataFrame(rows, geometry="geometry", crs=CRS)
    return SyntheticMap(units, lines, shapely.coverage_union_all(polys), scale)


def write_map(smap: SyntheticMap, folder: Path, *, extent: bool = True, name: str = "Synthetic test map") -> Path:
    """Write ``map.gpkg`` and ``archivist.toml`` into a new folder and return it."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=False)
    gpkg = folder / "map.gpkg"
    units = smap.units.copy()
    units.index = np.arange(1, len(units) + 1)
    units.index.name = "fid"
    pyogrio.write_dataframe(units.reset_index(), gpkg, layer="units", driver="GPKG")
    lines = smap.lines.copy()
    lines.index = np.arange(1, len(lines) + 1)
    lines.index.name = "fid"
    pyogrio.write_dataframe(lines.reset_index(), gpkg, layer="lines", driver="GPKG")
    layers = _LAYERS
    if extent:
        pyogrio.write_dataframe(gpd.GeoDataFrame({"name": ["map sheet"]}, geometry=[smap.extent], crs=smap.units.crs), gpkg, layer="extent", driver="GPKG")
        layers += _EXTENT_LAYER
    return _write_manifest(folder, smap.scale, name, layers)


_LAYERS = """
[layers.units]
path = "map.gpkg"
layer = "units"
unit_field = "unit"

[layers.lines]
path = "map.gpkg"
layer = "lines"
kind_field = "kind"
certainty_field = "certainty"
"""
_EXTENT_LAYER = '\n[layers.extent]\npath = "map.gpkg"\nlayer = "extent"\n'


def _write_manifest(folder: Path, scale: int, name: str, layers: str) -> Path:
    (folder / "archivist.toml").write_text(
        f"""[map]
title = "{name}"
version = "1.0.0"
scale = {scale}
crs = "{CRS}"
licence = "CC-BY-4.0"
abstract = "An invented map generated for tests."

[[map.authors]]
name = "Test Mapper"
{layers}""",
        encoding="utf-8",
    )
    return folder


# ---------------------------------------------------------------- defects

def with_units(smap: SyntheticMap, geoms) -> SyntheticMap:
    units = smap.units.copy()
    units["geometry"] = list(geoms)
    return replace(smap, units=gpd.GeoDataFrame(units, geometry="geometry", crs=smap.units.crs))


def enlarge(smap: SyntheticMap, k: int, d: float) -> SyntheticMap:
    """Polygon k grown by d (mitred corners) over its neighbours: overlaps of width d."""
    g = smap.units.geometry.values.copy()
    g[k] = shapely.intersection(shapely.buffer(g[k], d, join_style="mitre"), smap.extent)
    return with_units(smap, g)


def shrink(smap: SyntheticMap, k: int, d: float) -> SyntheticMap:
    """Polygon k shrunk by d: a gap ring of width d around it."""
    g = smap.units.geometry.values.copy()
    g[k] = shapely.buffer(g[k], -d, join_style="mitre")
    return with_units(smap, g)


def remove(smap: SyntheticMap, k: int) -> SyntheticMap:
    """Polygon k deleted: a gap exactly its shape."""
    units = smap.units.drop(index=smap.units.index[k])
    return replace(smap, units=units)


def extend_line(smap: SyntheticMap, j: int, length: float) -> SyntheticMap:
    """Line j's last segment prolonged by ``length`` beyond its end (an overshoot)."""
    lines = smap.lines.copy()
    xy = shapely.get_coordinates(lines.geometry.values[j])
    a, b = xy[-2], xy[-1]
    u = (b - a) / np.hypot(*(b - a))
    lines.loc[lines.index[j], "geometry"] = LineString(np.vstack([xy, b + u * length]))
    return replace(smap, lines=lines)


def _pick(rng: np.random.Generator, pool: np.ndarray, counts: list[int]) -> list[np.ndarray]:
    """Disjoint random draws of the given sizes from ``pool`` (sorted within each draw)."""
    take = rng.choice(pool, min(sum(counts), len(pool)), replace=False)
    out, at = [], 0
    for c in counts:
        out.append(np.sort(take[at:at + c]))
        at += c
    return out


def _translate(geoms: np.ndarray, dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
    """Each geometry moved by its own (dx, dy), all at once."""
    xy, k = shapely.get_coordinates(geoms, return_index=True)
    xy = xy + np.c_[dx[k], dy[k]]
    return shapely.set_coordinates(np.array(geoms, dtype=object, copy=True), xy)


def with_defect_density(smap: SyntheticMap, density: float, seed: int) -> tuple[SyntheticMap, list[dict]]:
    """A fraction ``density`` of the features given each kind of defect a mapper's editing leaves, all at once.

    Each kind on its own features, drawn at random (at least one of each when
    density > 0): contacts moved 1 m sideways (perpendicular to their chord),
    contacts and faults deleted, polygons deleted (gaps), polygons grown 2 m
    mitred into their neighbours (overlaps, clipped to the extent), polygons
    with one outer-ring vertex moved 1 cm (misfits), and contacts crossed at
    their middle by a new straight 60 m fault. Returns the changed map and
    the list of what was changed (feature numbers as written: position + 1,
    before deletion).
    """
    rng = np.random.default_rng(seed + 1)
    units = smap.units.geometry.values.copy()
    lines = smap.lines.geometry.values.copy()
    kind = smap.lines["kind"].to_numpy()
    n_poly = len(units)
    contacts = np.flatnonzero(kind == "contact")
    faults = np.flatnonzero(kind == "fault")

    def count(n: int) -> int:
        return max(1, int(round(density * n))) if n else 0

    # polygons: buffered, vertex moved, deleted (disjoint)
    simple = np.flatnonzero(shapely.get_type_id(units) == shapely.GeometryType.POLYGON.value)
    grow, moved = _pick(rng, simple, [count(n_poly), count(n_poly)])
    rest = np.setdiff1d(np.arange(n_poly), np.r_[grow, moved])
    (drop,) = _pick(rng, rest, [count(n_poly)])
    units[grow] = shapely.intersection(shapely.buffer(units[grow], 2.0, join_style="mitre"), smap.extent)
    ring_n = shapely.get_num_coordinates(shapely.get_exterior_ring(units[moved]))
    vertex = 1 + (rng.random(len(moved)) * np.maximum(ring_n - 2, 1)).astype(np.int64)  # never the closing vertex
    xy, k = shapely.get_coordinates(units[moved], return_index=True)
    start = np.searchsorted(k, np.arange(len(moved)))
    ang = rng.uniform(0, 2 * np.pi, len(moved))
    xy[start + vertex] += np.c_[np.cos(ang), np.sin(ang)] * 0.01
    units[moved] = shapely.set_coordinates(units[moved].copy(), xy)
    # lines: contacts shifted, contacts crossed by a fault, lines (contacts and faults) deleted
    shifted, crossed = _pick(rng, contacts, [count(len(contacts)), count(len(contacts))])
    pool = np.setdiff1d(np.r_[contacts, faults], np.r_[shifted, crossed])
    (deleted,) = _pick(rng, pool, [count(len(contacts) + len(faults))])
    a = shapely.get_coordinates(shapely.get_point(lines[shifted], 0))
    b = shapely.get_coordinates(shapely.get_point(lines[shifted], -1))
    d = b - a
    norm = np.hypot(d[:, 0], d[:, 1])
    loop = norm == 0  # a closed contact: moved east
    nx = np.where(loop, 1.0, -d[:, 1] / np.where(loop, 1.0, norm))
    ny = np.where(loop, 0.0, d[:, 0] / np.where(loop, 1.0, norm))
    lines[shifted] = _translate(lines[shifted], nx, ny)
    mid = shapely.line_interpolate_point(lines[crossed], 0.5, normalized=True)
    ahead = shapely.line_interpolate_point(lines[crossed], np.minimum(shapely.length(lines[crossed]) / 2 + 0.5,
                                                                        shapely.length(lines[crossed])))
    m, q = shapely.get_coordinates(mid), shapely.get_coordinates(ahead)
    t = q - m
    tn = np.hypot(t[:, 0], t[:, 1])
    tn[tn == 0] = 1.0
    across = np.c_[-t[:, 1], t[:, 0]] / tn[:, None] * 30.0
    new_faults = shapely.linestrings(np.stack([m - across, m + across], axis=1).round(2))
    keep = np.ones(len(lines), dtype=bool)
    keep[deleted] = False
    frame = smap.lines.copy()
    frame["geometry"] = lines
    frame = frame[keep]
    extra = gpd.GeoDataFrame({"kind": ["fault"] * len(new_faults), "certainty": ["inferred"] * len(new_faults)},
                             geometry=list(new_faults), crs=smap.lines.crs)
    frame = gpd.GeoDataFrame(pd.concat([frame, extra], ignore_index=True), geometry="geometry", crs=smap.lines.crs)
    uframe = smap.units.copy()
    uframe["geometry"] = units
    ukeep = np.ones(n_poly, dtype=bool)
    ukeep[drop] = False
    uframe = gpd.GeoDataFrame(uframe[ukeep], geometry="geometry", crs=smap.units.crs)
    # feature numbers as written (fid = position + 1), before deletion for the changed features
    made = ([{"kind": "buffered", "polygon": int(i) + 1} for i in grow]
            + [{"kind": "vertex-moved", "polygon": int(i) + 1} for i in moved]
            + [{"kind": "polygon-deleted", "polygon": int(i) + 1} for i in drop]
            + [{"kind": "contact-shifted", "line": int(i) + 1} for i in shifted]
            + [{"kind": "fault-crossing", "line": int(i) + 1} for i in crossed]
            + [{"kind": "line-deleted", "line": int(i) + 1} for i in deleted])
    return replace(smap, units=uframe, lines=frame), made


# ---------------------------------------------------------------- a 10 m square map at 1:1 000
# At 1:1 000 one map millimetre is 1 m of ground: the sliver thresholds are
# 1 m² and 0.5 m and the default tolerance (0.1 mm) is 0.1 m.

FRAME = LineString([(5, 0), (0, 0), (0, 10), (10, 10), (10, 0), (5, 0)])


def unit_frame(*geoms, codes=None) -> gpd.GeoDataFrame:
    codes = codes or ["A", "B", "C", "D"][: len(geoms)]
    return gpd.GeoDataFrame({"unit": codes}, geometry=list(geoms), crs=CRS)


def line_frame(*rows) -> gpd.GeoDataFrame:
    """Lines from (kind, geometry) or (kind, certainty, geometry) tuples."""
    rows = [r if len(r) == 3 else (r[0], "certain", r[1]) for r in rows]
    return gpd.GeoDataFrame({"kind": [r[0] for r in rows], "certainty": [r[1] for r in rows]}, geometry=[r[2] for r in rows], crs=CRS)


def square_map(tmp_path, name="square", *, a=None, b=None, extra=(), codes=None, line_rows=None, extent=None, tolerance=None):
    """A 10 m x 10 m square at 1:1 000 split at x = 5 into A (west) and B (east), with its contact and frame."""
    from builders import tiny_project

    geoms = [a if a is not None else box(0, 0, 5, 10), b if b is not None else box(5, 0, 10, 10), *extra]
    rows = line_rows if line_rows is not None else [("contact", LineString([(5, 0), (5, 10)])), ("map-boundary", FRAME)]
    manifest = {"map": {"scale": 1000}}
    if tolerance is not None:
        manifest["checks"] = {"tolerance": tolerance}
    return tiny_project(tmp_path, name=name, units=unit_frame(*geoms, codes=codes), lines=line_frame(*rows), extent=extent, manifest=manifest)


# ---------------------------------------------------------------- tiled maps of millions of polygons
# synthetic_map() builds one GEOS Voronoi diagram of the whole map: its memory
# grows with the map (4 x 10^6 polygons did not fit in 23 GB). write_tiled_map()
# builds a map of the same kind tile by tile and appends each tile to the
# GeoPackage, so it holds one tile (and one row of seam records) at a time.
#
# The cells are the quadrilaterals of a jittered grid of vertices, each
# vertex's offset a hash of its grid position and the seed: two tiles compute
# the vertices of their common seam identically, so neighbouring polygons
# share their vertices exactly across tiles and the coverage is valid. The
# map's outer vertices move only along the map edge (the map is a rectangle).
# Cells are grouped into polygons by their nearest seed, within a tile (a
# polygon never crosses a seam); units are drawn so that neighbours in one
# fault block differ, across seams too (each tile keeps the unit and block of
# its last column and row for the next tiles). Lines are made of the cells'
# own edges: contacts per pair of polygons, faults per pair of fault blocks
# and tile, the map boundary as one closed ring, and a few short faults
# ending inside polygons. Defects (density) are given tile by tile with
# with_defect_density().

_MASK64 = np.uint64(0xFFFFFFFFFFFFFFFF)


def _unit_hash(seed: int, keys: np.ndarray, salt: int) -> np.ndarray:
    """A uniform number in [0, 1) per integer key: splitmix64 of (seed, salt, key), vectorised."""
    with np.errstate(over="ignore"):
        z = keys.astype(np.uint64) * np.uint64(0x9E3779B97F4A7C15) + np.uint64((seed * 1_000_003 + salt) & 0xFFFFFFFF) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) / float(1 << 53)


@dataclass(frozen=True)
class TiledGrid:
    """The jittered vertex grid of a tiled map: ``cols`` x ``rows`` cells of ``step`` metres from ``origin``."""

    cols: int
    rows: int
    step: float
    origin: tuple[float, float]
    seed: int
    jitter: float = 0.25  # of a cell, on each axis: quadrilaterals stay simple (common practice for jittered meshes)

    def vertices(self, r0: int, r1: int, c0: int, c1: int) -> np.ndarray:
        """Coordinates of vertices rows r0..r1, columns c0..c1 (inclusive), shape (r1-r0+1, c1-c0+1, 2), rounded to 1 cm."""
        R, C = np.meshgrid(np.arange(r0, r1 + 1), np.arange(c0, c1 + 1), indexing="ij")
        key = R.astype(np.int64) * (self.cols + 1) + C
        jx = (2 * _unit_hash(self.seed, key, 1) - 1) * self.jitter
        jy = (2 * _unit_hash(self.seed, key, 2) - 1) * self.jitter
        jx[(C == 0) | (C == self.cols)] = 0.0  # the map's west and east edges stay straight
        jy[(R == 0) | (R == self.rows)] = 0.0
        x = self.origin[0] + (C + jx) * self.step
        y = self.origin[1] + (R + jy) * self.step
        return np.round(np.stack([x, y], axis=-1), 2)

    def frame_ring(self) -> np.ndarray:
        """The map's outer vertices, anticlockwise from the south-west corner, closed."""
        south = self.vertices(0, 0, 0, self.cols)[0]
        east = self.vertices(0, self.rows, self.cols, self.cols)[:, 0]
        north = self.vertices(self.rows, self.rows, 0, self.cols)[0][::-1]
        west = self.vertices(0, self.rows, 0, 0)[:, 0][::-1]
        return np.concatenate([south, east[1:], north[1:], west[1:]])


def _fault_block(x: np.ndarray, y: np.ndarray, n_faults: int) -> np.ndarray:
    """Fault block of points given as fractions of the map's width and height: left of wavy N-S traces."""
    block = np.zeros(len(x), dtype=np.int64)
    for k in range(n_faults):
        x0 = (k + 1) / (n_faults + 1)
        trace = x0 + 0.06 * np.sin(2 * np.pi * (y * (1.3 + 0.4 * k) + 0.7 * k)) + 0.03 * (y - 0.5)
        block += x > trace
    return block


def tiled_map_tiles(
    n_polygons: int,
    *,
    seed: int = 0,
    spacing: float = 100.0,
    cells_per_polygon: int = 3,
    n_units: int = 10,
    n_faults: int = 2,
    splay_fraction: float = 0.002,
    tile_cells: int = 256,
    origin: tuple[float, float] = ORIGIN,
):
    """The grid, then (units, lines) GeoDataFrames of one tile at a time (lines without the map boundary).

    Yields ``grid`` first (a :class:`TiledGrid`), then one ``(units, lines)``
    pair per tile, west to east, south to north. Units have columns unit,
    block; lines kind, certainty.
    """
    side = max(1, round(math.sqrt(n_polygons * cells_per_polygon)))
    step = spacing / math.sqrt(cells_per_polygon)  # a polygon of ``cells_per_polygon`` cells is about spacing^2
    grid = TiledGrid(side, side, step, origin, seed)
    yield grid
    names = np.array([f"U{k + 1:02d}" for k in range(n_units)], dtype=object)
    n_tiles = -(-side // tile_cells)
    top: list[np.ndarray | None] = [None] * n_tiles  # per tile column: (gid, block, unit) of the cells of the last row below
    next_gid = 0
    for tj in range(n_tiles):
        right: np.ndarray | None = None  # (gid, block, unit) of the cells of the last column to the west
        for ti in range(n_tiles):
            rng = np.random.default_rng([seed, tj, ti])
            r0, r1 = tj * tile_cells, min(side, (tj + 1) * tile_cells)
            c0, c1 = ti * tile_cells, min(side, (ti + 1) * tile_cells)
            nr, nc = r1 - r0, c1 - c0
            v = grid.vertices(r0, r1, c0, c1)
            quads = np.stack([v[:-1, :-1], v[:-1, 1:], v[1:, 1:], v[1:, :-1], v[:-1, :-1]], axis=2).reshape(-1, 5, 2)
            cells = shapely.polygons(quads)
            # group the cells by their nearest seed (in grid units), within the tile
            seeds = jittered_points(max(1, round(nr * nc / cells_per_polygon)), nc, nr, rng, jitter=0.45)
            cr, cc = np.meshgrid(np.arange(nr) + 0.5, np.arange(nc) + 0.5, indexing="ij")
            nearest = shapely.STRtree(shapely.points(seeds)).query_nearest(shapely.points(cc.ravel(), cr.ravel()), all_matches=False)
            group = np.empty(nr * nc, dtype=np.int64)
            group[nearest[0]] = nearest[1]
            used, group = np.unique(group, return_inverse=True)
            n = len(used)
            polys = dissolve(cells, group, n)
            one = shapely.get_num_geometries(polys) == 1
            polys[one] = shapely.get_geometry(polys[one], 0)  # a Polygon where one part (defects pick those); written as Multi
            del cells, quads
            sx, sy = seeds[used, 0] + c0, seeds[used, 1] + r0
            block = _fault_block(sx / side, sy / side, n_faults)
            g2 = group.reshape(nr, nc)
            # neighbours inside the tile (cell edges between two groups) and across the west and south seams
            h = g2[:, :-1] != g2[:, 1:]
            vv = g2[:-1, :] != g2[1:, :]
            pairs = np.r_[np.c_[g2[:, :-1][h], g2[:, 1:][h]], np.c_[g2[:-1, :][vv], g2[1:, :][vv]]]
            fixed = np.zeros((0, 3), dtype=np.int64)
            if right is not None:
                fixed = np.r_[fixed, np.c_[g2[:, 0], right[:, 1], right[:, 2]]]
            if top[ti] is not None:
                fixed = np.r_[fixed, np.c_[g2[0, :], top[ti][:, 1], top[ti][:, 2]]]
            code = colour(pairs, n, n_units, block, rng, fixed)
            gid = next_gid + np.arange(n)
            # every cell edge between two polygons, as (segment, polygon a, polygon b) with global ids, block and unit
            segs, ga, gb, ba, bb, ua, ub = [], [], [], [], [], [], []

            def add(s, a_g, a_b, a_u, b_g, b_b, b_u):
                segs.append(s), ga.append(a_g), ba.append(a_b), ua.append(a_u), gb.append(b_g), bb.append(b_b), ub.append(b_u)

            # vertical edges inside: between cells (r, c) and (r, c+1): vertices (r, c+1) - (r+1, c+1)
            rr, cc_ = np.nonzero(h)
            s = np.stack([v[rr, cc_ + 1], v[rr + 1, cc_ + 1]], axis=1)
            a_, b_ = g2[rr, cc_], g2[rr, cc_ + 1]
            add(s, gid[a_], block[a_], code[a_], gid[b_], block[b_], code[b_])
            rr, cc_ = np.nonzero(vv)
            s = np.stack([v[rr + 1, cc_], v[rr + 1, cc_ + 1]], axis=1)
            a_, b_ = g2[rr, cc_], g2[rr + 1, cc_]
            add(s, gid[a_], block[a_], code[a_], gid[b_], block[b_], code[b_])
            if right is not None:
                rr = np.arange(nr)
                s = np.stack([v[rr, 0], v[rr + 1, 0]], axis=1)
                b_ = g2[:, 0]
                add(s, right[:, 0], right[:, 1], right[:, 2], gid[b_], block[b_], code[b_])
            if top[ti] is not None:
                cc_ = np.arange(nc)
                s = np.stack([v[0, cc_], v[0, cc_ + 1]], axis=1)
                b_ = g2[0, :]
                add(s, top[ti][:, 0], top[ti][:, 1], top[ti][:, 2], gid[b_], block[b_], code[b_])
            segs_a, ga_, gb_ = np.concatenate(segs), np.concatenate(ga), np.concatenate(gb)
            ba_, bb_, ua_, ub_ = np.concatenate(ba), np.concatenate(bb), np.concatenate(ua), np.concatenate(ub)
            pieces = shapely.linestrings(segs_a)
            is_fault = ba_ != bb_
            is_contact = ~is_fault & (ua_ != ub_)
            rows = []

            def chains(idx, key, kind, certainties):
                if not len(idx):
                    return
                uk, inv = np.unique(key, return_inverse=True)
                parts = shapely.get_parts(merge_by_group(pieces[idx], inv, len(uk)))
                cert = rng.choice(certainties, len(parts))
                rows.append(pd.DataFrame({"kind": kind, "certainty": cert, "geometry": parts}))

            from archivist.analysis.arrays import merge_by_group

            fi = np.flatnonzero(is_fault)
            lo, hi = np.minimum(ba_[fi], bb_[fi]), np.maximum(ba_[fi], bb_[fi])
            chains(fi, lo * (n_faults + 1) + hi, "fault", ["certain", "approximate", "concealed"])
            ci = np.flatnonzero(is_contact)
            lo, hi = np.minimum(ga_[ci], gb_[ci]), np.maximum(ga_[ci], gb_[ci])
            _, key = np.unique(np.c_[lo, hi], axis=0, return_inverse=True)
            chains(ci, key.ravel(), "contact", ["certain", "approximate", "inferred"])
            # short faults ending inside polygons, well away from their edges
            k = rng.choice(n, max(1, int(n * splay_fraction)), replace=False) if splay_fraction > 0 else np.zeros(0, dtype=np.int64)
            if len(k):
                circ = shapely.maximum_inscribed_circle(polys[k], 0.01)
                c = shapely.get_coordinates(shapely.get_point(circ, 0))
                rad = shapely.length(circ)
                ang = rng.uniform(0, np.pi, len(k))
                d = np.c_[np.cos(ang), np.sin(ang)] * (0.6 * rad)[:, None]
                bend = np.c_[-np.sin(ang), np.cos(ang)] * (0.1 * rad)[:, None]
                coords = np.stack([c - d, c + bend, c + d], axis=1).round(2)
                rows.append(pd.DataFrame({"kind": "fault", "certainty": "inferred", "geometry": shapely.linestrings(coords)}))
            units = gpd.GeoDataFrame({"unit": names[code], "block": block}, geometry=polys, crs=CRS)
            lines = gpd.GeoDataFrame(pd.concat(rows, ignore_index=True) if rows else pd.DataFrame({"kind": [], "certainty": [], "geometry": []}),
                                     geometry="geometry", crs=CRS)
            yield units, lines
            # seams for the next tiles
            last_col, last_row = g2[:, -1], g2[-1, :]
            right = np.c_[gid[last_col], block[last_col], code[last_col]]
            top[ti] = np.c_[gid[last_row], block[last_row], code[last_row]]
            next_gid += n
    return


def write_tiled_map(
    folder: Path,
    n_polygons: int,
    *,
    seed: int = 0,
    density: float = 0.0,
    scale: int = 10_000,
    tile_cells: int = 256,
    name: str = "Synthetic test map",
    progress=None,
) -> dict:
    """Write a tiled map of about ``n_polygons`` polygons (see above) into a new project folder; what was made.

    With ``density`` > 0 each tile gets with_defect_density()'s defects (at
    least one of each kind per tile), listed under "defects" with their feature
    numbers as with_defect_density() gives them within the tile (position + 1,
    before deletion) plus the features written before the tile: the fids as
    written where the tile lost no feature before them. ``progress(tiles, written)``
    is called after each tile.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=False)
    gpkg = folder / "map.gpkg"
    tiles = tiled_map_tiles(n_polygons, seed=seed, tile_cells=tile_cells)
    grid: TiledGrid = next(tiles)
    ring = grid.frame_ring()
    extent = shapely.Polygon(ring)
    made: dict = {"polygons": 0, "lines": 0, "tiles": 0, "defects": []}
    written = {"units": 0, "lines": 0}
    frame_line = gpd.GeoDataFrame({"kind": ["map-boundary"], "certainty": ["certain"]}, geometry=[shapely.linestrings(ring)], crs=CRS)
    first_lines = True
    for t, (units, lines) in enumerate(tiles):
        if density > 0:
            tmap, changes = with_defect_density(SyntheticMap(units, lines, extent, scale), density, seed * 100_003 + t)
            for ch in changes:
                key = "polygon" if "polygon" in ch else "line"
                ch[key] += written["units" if key == "polygon" else "lines"] + (1 if key == "line" and first_lines else 0)
            made["defects"].extend(changes)
            units, lines = tmap.units, tmap.lines
        if first_lines:  # the map boundary is the first line, as in synthetic_map()
            lines = gpd.GeoDataFrame(pd.concat([frame_line, lines], ignore_index=True), geometry="geometry", crs=CRS)
            first_lines = False
        for frame, layer in ((units, "units"), (lines, "lines")):
            # fids are given by the GeoPackage in order (1, 2, ... as write_map writes them): SQLite's rowid of a
            # table only appended to is the last one plus one
            pyogrio.write_dataframe(frame.reset_index(drop=True), gpkg, layer=layer, driver="GPKG", append=written[layer] > 0,
                                    promote_to_multi=layer == "units")  # every unit a MultiPolygon, as write_map's are
            written[layer] += len(frame)
        made["tiles"] += 1
        if progress is not None:
            progress(made["tiles"], written)
    made["polygons"], made["lines"] = written["units"], written["lines"]
    pyogrio.write_dataframe(gpd.GeoDataFrame({"name": ["map sheet"]}, geometry=[extent], crs=CRS), gpkg, layer="extent", driver="GPKG")
    _write_manifest(folder, scale, name, _LAYERS + _EXTENT_LAYER)
    return made
