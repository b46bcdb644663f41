"""Synthetic maps for the topology benchmark, written as a project folder.

    python tests/benchmarks/topology_maps.py DIR N_POLYGONS [--seed S] [--defects K | --density D [--scale S]] [--tiled]

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

``--tiled`` builds the map tile by tile instead (``write_tiled_map`` in
``tests/coverage_builders.py``: cells of a jittered grid whose vertices two
tiles compute alike, each tile appended to the GeoPackage as it is made), so
its memory is that of one tile, not of the whole map: 339 MB and 2.4 min
for 10^6 polygons at 1 % defects, 416 MB and 30 min for 4 x 10^6 (3.0 GB of
GeoPackage; a busy 2-core machine), where the one-piece Voronoi diagram of
4 x 10^6 polygons did not fit in 23 GB. It
takes ``--density`` (each tile gets its share of every kind, at least one)
but not ``--defects``; it is a different map from the default one for the
same size and seed.
Everything in the map is invented.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from coverage_builders import enlarge, extend_line, remove, synthetic_map, with_defect_density, write_map, write_tiled_map  # noqa: E402


def make(folder: Path, n: int, seed: int = 0, defects: int = 0, density: float = 0.0, scale: int | None = None,
         tiled: bool = False) -> dict:
    """Write the map into ``folder`` (which must not exist) and return what was made."""
    if tiled:
        if defects:
            raise ValueError("a tiled map takes a defect density, not a number of defects")
        made = write_tiled_map(folder, n, seed=seed, density=density, scale=scale or 10_000, name=f"Synthetic map of {n} polygons")
        (folder.parent / f"{folder.name}.defects.json").write_text(json.dumps(made, indent=1), encoding="utf-8")
        return made
    smap = synthetic_map(n, seed=seed, **({"scale": scale} if scale else {}))
    made = {"polygons": len(smap.units), "lines": len(smap.lines), "defects": []}
    if density > 0:
        smap, made["defects"] = with_defect_density(smap, density, seed)
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
    ap.add_argument("--tiled", action="store_true", help="build the map tile by tile (memory of one tile; for millions of polygons)")
    args = ap.parse_args(argv)
    if args.density and args.defects:
        ap.error("--defects and --density do not go together")
    if args.tiled and args.defects:
        ap.error("--tiled takes --density, not --defects")
    made = make(args.folder, args.n, args.seed, args.defects, args.density, args.scale, args.tiled)
    kinds: dict[str, int] = {}
    for d in made["defects"]:
        kinds[d["kind"]] = kinds.get(d["kind"], 0) + 1
    print(json.dumps({"polygons": made["polygons"], "lines": made["lines"], "defects": kinds}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
