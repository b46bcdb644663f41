"""Benchmark: ``archivist repair`` against ``archivist check`` on synthetic maps with repairable defects.

    python tests/benchmarks/bench_repair.py --sizes 10000 100000 [--density 0.01] [--keep DIR]

For each size a map is written (``tests/coverage_builders.py`` through
``topology_maps.py``'s generator: a Voronoi coverage dissolved into units, at
1:10 000, tolerance 1 m) and, with ``--density`` d, d x N polygons get each
repairable defect (this script's own injector): grown over the neighbours by
half the tolerance (overlaps), shrunk by half the tolerance (thin gaps), one
vertex moved by half the tolerance (edge misfits; the first vertex whose move
leaves the polygon valid: a self-intersection is not a kind repair makes), a 2 m rim cut off as a
polygon of another unit (slivers), and recoded to a neighbour's unit across a
contact (same-unit neighbours). One process then times, side by side:

* check: ``archivist.check`` of the broken project (all families);
* repairs: the repairs alone (the working copy, every repair in order);
* repair: ``archivist.repair`` as a whole (check before, repairs, write the
  copy, check the copy);
* ratio: repair / check (target <= 3 at 10^5 polygons).

It also reports the findings of the repaired kinds before and after, the
changes per repair and whether GEOS finds the copy a valid coverage.

Not every injected defect is within the repair's bounds: growing a polygon by
half the tolerance along a long shared edge can make an overlap larger than
a repair may give away (at 10^4 polygons, seed 0: 101.69 m², a 0.5 m strip
along about 203 m of edge, against 100 m² = 1 mm² at 1:10 000). It is left
and listed, so the copy keeps one finding (an edge mismatch: the overlap is
thinner than the tolerance) and GEOS does not find it a valid coverage.
snap-edges gives it back clipped to its neighbour as cleaned (there 44.1 m²
less, said in the change log), so a second run finds two overlaps under the
limit and gives them away.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import shapely

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from coverage_builders import synthetic_map, with_units, write_map  # noqa: E402

KINDS = ("unit-overlap", "unit-gap", "unit-edge-mismatch", "unit-sliver", "unit-same-neighbour")


def inject(smap, density: float, seed: int = 1):
    """The map with d x N polygons of each repairable kind of defect (disjoint picks, not neighbours of each other)."""
    from archivist.analysis.halfedges import build_edges

    g = np.asarray(smap.units.geometry.values, dtype=object).copy()
    codes = smap.units["unit"].to_numpy(dtype=object).copy()
    n = len(g)
    k = max(1, int(round(density * n)))
    rng = np.random.default_rng(seed)
    edges = build_edges(g)
    twin = np.flatnonzero(edges.twin)
    nb = [set() for _ in range(n)]
    for a, b in zip(edges.left[twin].tolist(), edges.right[twin].tolist()):
        nb[a].add(b)
        nb[b].add(a)
    used: set[int] = set()
    picks: list[int] = []
    for p in rng.permutation(n).tolist():  # spread the defects apart: no two on neighbours
        if p in used or len(picks) == 5 * k:
            continue
        picks.append(p)
        used |= {p} | nb[p]
    grow, shrink, nudge, rim, recode = (picks[i * k:(i + 1) * k] for i in range(5))
    d = smap.tolerance / 2
    g[grow] = shapely.intersection(shapely.buffer(g[grow], d, quad_segs=2), smap.extent)
    g[shrink] = shapely.buffer(g[shrink], -d, quad_segs=2)
    for p in nudge:  # the first vertex whose move leaves the polygon valid (a self-intersection is not a repairable kind)
        for v in range(1, shapely.get_num_coordinates(g[p]) - 1):
            xy = shapely.get_coordinates(g[p])
            xy[v] += d
            try:
                moved = shapely.set_coordinates(shapely.from_wkb(shapely.to_wkb(g[p])), xy)
            except shapely.errors.GEOSException:  # the closing vertex of a ring: not moved alone
                continue
            if shapely.is_valid(moved):
                g[p] = moved
                break
    rims = shapely.difference(g[rim], shapely.buffer(g[rim], -2.0, join_style="mitre"))
    g[rim] = shapely.buffer(g[rim], -2.0, join_style="mitre")
    for p in recode:
        others = [q for q in nb[p] if codes[q] != codes[p]]
        if others:
            codes[p] = codes[others[0]]
    units = smap.units.copy()
    units["unit"] = codes
    smap = with_units(smap.__class__(units, smap.lines, smap.extent, smap.scale), g)
    extra = smap.units.iloc[:len(rim)].copy()
    extra["geometry"] = list(rims)
    extra["unit"] = "U99"
    import geopandas as gpd
    import pandas as pd

    units = gpd.GeoDataFrame(pd.concat([smap.units, extra], ignore_index=True), geometry="geometry", crs=smap.units.crs)
    return smap.__class__(units, smap.lines, smap.extent, smap.scale), {"per_kind": k}


def run(size: int, density: float, keep: Path | None) -> dict:
    from archivist import check
    from archivist.project import load_project
    from archivist.repair.api import make_state, repair, settings_for
    from archivist.repair.registry import select

    tmp = Path(tempfile.mkdtemp(prefix="bench-repair-"))
    try:
        smap, made = inject(synthetic_map(size, seed=0), density)
        project = write_map(smap, tmp / "map", name=f"Synthetic map of {size} polygons")
        t = time.perf_counter()
        report = check(project)
        t_check = time.perf_counter() - t
        proj = load_project(project)
        settings = settings_for(proj)
        state = make_state(proj)
        t = time.perf_counter()
        for r in select():
            r.func(state, settings)
        t_repairs = time.perf_counter() - t
        t = time.perf_counter()
        result = repair(project, tmp / "out")
        t_repair = time.perf_counter() - t
        import pyogrio

        units = pyogrio.read_dataframe(tmp / "out" / "map.gpkg", layer="units")
        before = {k: sum(1 for f in report.findings if f.rule == k) for k in KINDS}
        after = {k: result.after.get(k, 0) for k in KINDS}
        out = {"polygons": size, "defects_per_kind": made["per_kind"], "check_s": round(t_check, 2),
               "repairs_s": round(t_repairs, 2), "repair_s": round(t_repair, 2), "ratio": round(t_repair / t_check, 2),
               "before": before, "after": after, "changes": result.per_repair(), "left": len(result.left),
               "coverage_valid": bool(shapely.coverage_is_valid(units.geometry.values))}
        if keep is not None:
            shutil.copytree(tmp, keep / f"repair-{size}", dirs_exist_ok=True)
        return out
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--density", type=float, default=0.01)
    ap.add_argument("--keep", type=Path)
    args = ap.parse_args(argv)
    for size in args.sizes:
        print(json.dumps(run(size, args.density, args.keep)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
