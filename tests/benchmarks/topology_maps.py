"""Synthetic maps for the topology benchmark, written as a project folder.

    python tests/benchmarks/topology_maps.py DIR N_POLYGONS [--seed S] [--defects K]

The map comes from ``tests/coverage_builders.py``: a GEOS Voronoi coverage of
jittered points dissolved into about N unit polygons, with faults between
fault blocks, contacts between different units, the map boundary and a few
short faults ending inside polygons; lines and polygons agree exactly, so the
clean map must give no topology or linework finding. ``--defects K`` then
injects K of each of: an overlap (a polygon grown by 5 tolerances), a gap (a
polygon removed) and a dangle (a contact prolonged by 5 tolerances), at
random places, and lists them in ``defects.json`` beside the map.
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

from coverage_builders import enlarge, extend_line, remove, synthetic_map, write_map  # noqa: E402


def make(folder: Path, n: int, seed: int = 0, defects: int = 0) -> dict:
    """Write the map into ``folder`` (which must not exist) and return what was made."""
    smap = synthetic_map(n, seed=seed)
    made = {"polygons": len(smap.units), "lines": len(smap.lines), "defects": []}
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
    args = ap.parse_args(argv)
    made = make(args.folder, args.n, args.seed, args.defects)
    print(json.dumps(made))
    return 0


if __name__ == "__main__":
    sys.exit(main())
