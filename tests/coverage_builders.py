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
(a dangle).

All content is invented; unit codes are ``U01``, ``U02``...
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

import geopandas as gpd
import numpy as np
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


def colour(pairs: np.ndarray, n: int, n_units: int, block: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Unit index per polygon such that neighbours in one block differ (random, repaired until clean)."""
    codes = rng.integers(0, n_units, n)
    a, b = pairs[:, 0], pairs[:, 1]
    same_block = block[a] == block[b]
    for _ in range(1000):
        clash = same_block & (codes[a] == codes[b])
        if not clash.any():
            return codes
        redo = np.unique(b[clash])
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
    block = np.zeros(n, dtype=np.int64)
    for k in range(n_faults):
        x0 = (k + 1) / (n_faults + 1)
        trace = x0 + 0.06 * np.sin(2 * np.pi * (v * (1.3 + 0.4 * k) + 0.7 * k)) + 0.03 * (v - 0.5)
        block += u > trace
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
    layers = """
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
    if extent:
        pyogrio.write_dataframe(gpd.GeoDataFrame({"name": ["map sheet"]}, geometry=[smap.extent], crs=smap.units.crs), gpkg, layer="extent", driver="GPKG")
        layers += '\n[layers.extent]\npath = "map.gpkg"\nlayer = "extent"\n'
    (folder / "archivist.toml").write_text(
        f"""[map]
title = "{name}"
version = "1.0.0"
scale = {smap.scale}
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
