"""Synthetic maps for the topology benchmark, written as a project folder.

    python tests/benchmarks/topology_maps.py DIR N_POLYGONS [--seed S] [--defects K | --density D [--scale S]]

The map comes from ``tests/coverage_builders.py``: a GEOS Voronoi coverage of
jittered points dissolved into about N unit polygons, with faults between
fault blocks, contacts between different units, the map boundary and a few
short faults ending inside polygons; lines and polygons agree exactly, so the
clean map must give no topology or linework finding. ``--defects K`` then
injects K of each of: an overlap (a polygon grown by 5 tolerances), a gap (a
polygon removed) and a dangle (a contact prolonged by 5 tolerances), at
random places, and lists them in ``defects.json`` beside the map.

``--density D`` instead gives a fraction D of the features each kind of
defect a mapper's editing leaves, all at once (every kind on its own
features, drawn at random):

* contacts redigitised 1 m off: a fraction D of the contacts moved 1 m
  sideways (perpendicular to the line from their first to their last vertex);
* lines deleted: a fraction D of the contacts and faults removed;
* polygons deleted: a fraction D of the unit polygons removed (gaps);
* polygons buffered: a fraction D of the polygons grown 2 m (mitred) into
  their neighbours (overlaps), clipped to the map extent;
* vertices moved: a fraction D of the polygons with one vertex of their
  outer ring moved 1 cm (misfits with the neighbours sharing it);
* faults crossing contacts: a fraction D of the contacts crossed at their
  middle by a new straight fault 60 m long (faults may end inside units).

At least one feature of each kind is changed when D > 0. The benchmark
draws its density maps (D = 0 included) at ``--scale 5000``, whose
tolerance (0.1 mm, 0.5 m) is below the 1 m shift, so the redigitised
contacts are real defects; the default scale is 1:10 000.
Everything in the map is invented.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from dataclasses import replace

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from coverage_builders import SyntheticMap, enlarge, extend_line, remove, synthetic_map, write_map  # noqa: E402


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


def inject_density(smap: SyntheticMap, density: float, seed: int) -> tuple[SyntheticMap, list[dict]]:
    """A fraction ``density`` of the features given each kind of defect (see the module doc), vectorised."""
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


def make(folder: Path, n: int, seed: int = 0, defects: int = 0, density: float = 0.0, scale: int | None = None) -> dict:
    """Write the map into ``folder`` (which must not exist) and return what was made."""
    smap = synthetic_map(n, seed=seed, **({"scale": scale} if scale else {}))
    made = {"polygons": len(smap.units), "lines": len(smap.lines), "defects": []}
    if density > 0:
        smap, made["defects"] = inject_density(smap, density, seed)
        made["polygons"], made["lines"] = len(smap.units), len(smap.lines)
    if defects:
        rng = np.random.default_rng(seed + 1)
        d = 5 * smap.tolerance
        picks = rng.choice(len(smap.units), 2 * defects, replace=False)
        grow, drop = picks[:defects], sorted(picks[defects:], reverse=True)
        for k in grow:
            smap = enlarge(smap, int(k), d)
            made["defects"].append({"kind": "overlap", "polygon": int(k) + 1})
        contacts = np.flatnonzero((smap.lines.kind == "contact").to_numpy() & ~smap.lines.geometry.is_closed.to_numpy())
        for j in rng.choice(contacts, defects, replace=False):
            smap = extend_line(smap, int(j), d)
            made["defects"].append({"kind": "dangle", "line": int(j) + 1})
        for k in drop:  # removed last: feature numbers of the grown polygons above refer to the map before removal
            made["defects"].append({"kind": "gap", "polygon": int(k) + 1})
            smap = remove(smap, int(k))
        made["polygons"] = len(smap.units)
    write_map(smap, folder, name=f"Synthetic map of {n} polygons")
    (folder.parent / f"{folder.name}.defects.json").write_text(json.dumps(made, indent=1), encoding="utf-8")
    return made


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("folder", type=Path)
    ap.add_argument("n", type=int)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--defects", type=int, default=0)
    ap.add_argument("--density", type=float, default=0.0, help="fraction of features carrying each kind of defect")
    ap.add_argument("--scale", type=int, default=None, help="map scale (default 10 000)")
    args = ap.parse_args(argv)
    if args.density and args.defects:
        ap.error("--defects and --density do not go together")
    made = make(args.folder, args.n, args.seed, args.defects, args.density, args.scale)
    kinds: dict[str, int] = {}
    for d in made["defects"]:
        kinds[d["kind"]] = kinds.get(d["kind"], 0) + 1
    print(json.dumps({"polygons": made["polygons"], "lines": made["lines"], "defects": kinds}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
