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

With ``--repeat N`` check and repair are timed N times in pairs, each
repair right after its check (the host's speed drifts by some 10 % within
minutes), and the median of the N ratios is reported beside them. Both run
with the same ``--jobs`` (default 1: one thread each, as their Python
functions do; ``--jobs 2`` as their commands do on a 2-core machine: check
forks two partitions, repair runs the families of its checks on two
threads and writes its log in a forked process).

It also reports the findings of the repaired kinds before and after, the
changes per repair, whether GEOS finds the copy a valid coverage, and how
``archivist diff`` of the project and the copy agrees with the change log
(:func:`diff_agreement`, after the timings).

Every injected defect is one a repair may make: a polygon grown by half
the tolerance along a long border with one neighbour makes an overlap
larger than a repair gives away (100 m², the default 1 mm² at 1:10 000;
a 0.5 m strip along about 200 m of edge), which is left for the geologist by
design and listed. Such polygons are passed over for others (the count is
printed as ``grow_passed_over``); before they were, the copy kept one such
overlap at 10^4 and ten at 10^5, each an edge mismatch, and GEOS did not
find it a valid coverage. ``tests/test_repair_worked.py`` holds what repair
does with an overlap over the limit.
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


SAFE = 0.98  # an injected overlap stays this share of the limit below it: the check's overlay rounds it differently


def overlap_limit(smap) -> float:
    """The overlap area (m²) a repair may give away on the map with no ``[repair]`` table: the ``[checks]`` sliver
    area, 1 mm² at the map's scale (archivist's default)."""
    return 1.0 * (smap.scale / 1000.0) ** 2


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
    spare = k // 5 + 1  # more polygons to grow than needed: those whose overlap would be too large are passed over
    used: set[int] = set()
    picks: list[int] = []
    for p in rng.permutation(n).tolist():  # spread the defects apart: no two on neighbours
        if p in used or len(picks) == 5 * k + spare:
            continue
        picks.append(p)
        used |= {p} | nb[p]
    pool = np.array(picks[:k + spare], dtype=np.int64)
    shrink, nudge, rim, recode = (picks[k + spare + i * k:k + spare + (i + 1) * k] for i in range(4))
    d = smap.tolerance / 2
    # an overlap larger than a repair may give away is left for the geologist by design, not a repairable defect:
    # a polygon grown by d along a long border with one neighbour (more than about limit / d) is passed over
    grown = shapely.intersection(shapely.buffer(g[pool], d, quad_segs=2), smap.extent)
    gi = np.repeat(np.arange(len(pool)), [len(nb[p]) for p in pool.tolist()])
    gj = np.array([q for p in pool.tolist() for q in sorted(nb[p])], dtype=np.int64)
    largest = np.zeros(len(pool))
    np.maximum.at(largest, gi, shapely.area(shapely.intersection(grown[gi], g[gj])))
    fits = np.flatnonzero(largest <= SAFE * overlap_limit(smap))[:k]
    grow = pool[fits].tolist()
    g[grow] = grown[fits]
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
    return smap.__class__(units, smap.lines, smap.extent, smap.scale), {"per_kind": k, "grown": len(grow),
                                                                       "passed_over": int((largest > SAFE * overlap_limit(smap)).sum())}


def diff_agreement(project: Path, out: Path, changes, tol: float) -> dict:
    """``archivist diff`` of the project and its repaired copy against the change log, feature by feature.

    * unexplained: changes of units or lines diff lists that name no feature
      of a logged change (the lines' new ``generated`` column aside);
    * visible: logged changes diff can see (a feature removed or added, an
      overlap or gap moving a boundary further than the tolerance, beyond
      rounding (a gap of exactly the gap width moves its polygon by it, to
      within 1e-9 m); snapping moves nothing further, so diff's tolerance
      hides it), and how many of
      them name no feature of a diff change; of those, how many are lines
      with no more than twice the tolerance of their length farther than the
      tolerance from the other map's lines of their kind
      (``archivist.analysis.nearness.length_near``), which diff counts as
      the same linework split or joined at a node, not as a change (a short
      contact between two junctions, removed where two polygons of one unit
      were dissolved).
    """
    import pyogrio

    from archivist.analysis.nearness import length_near
    from archivist.diff import diff

    report = diff(project, out)
    logged = {(("units" if c.layer == "units" else "lines"), f) for c in changes for f in (*c.features_before, *c.features_after)}
    named = {(c.layer, f) for c in report.changes for f in (*c.old_features, *c.new_features)}
    mine = [c for c in report.changes if c.layer in ("units", "lines") and c.change != "column-added"]
    unexplained = [c for c in mine if not any((c.layer, f) in logged for f in (*c.old_features, *c.new_features))]
    visible = [c for c in changes
               if set(c.features_before) ^ set(c.features_after)
               or (c.layer == "units" and c.repair in ("resolve-overlaps", "fill-gaps") and c.max_shift > tol * (1 + 1e-6))]
    unseen = [c for c in visible
              if not any(("units" if c.layer == "units" else "lines", f) in named for f in (*c.features_before, *c.features_after))]
    sides = {side: pyogrio.read_dataframe(folder / "map.gpkg", layer="lines", fid_as_index=True) for side, folder in
             (("old", project), ("new", out))}

    def within(line, side: str, kind: str) -> bool:
        other = sides[side]
        other = other[other["kind"] == kind].geometry.values
        near = other[shapely.STRtree(other).query(line, predicate="dwithin", distance=tol)]
        off = line.length - length_near(np.array([line]), np.array([shapely.multilinestrings(shapely.get_parts(near))]), tol)[0]
        return bool(off <= 2 * tol)

    renoded = 0
    for c in unseen:
        if c.layer == "units":
            continue
        gone = not c.features_after
        fid = int((c.features_before if gone else c.features_after)[0])
        frame = sides["old" if gone else "new"]
        line = frame.loc[fid].geometry
        renoded += within(line, "new" if gone else "old", frame.loc[fid]["kind"])
    return {"diff_changes": len(mine), "unexplained": len(unexplained), "visible": len(visible), "unseen": len(unseen),
            "unseen_within_tolerance": renoded}


def run(size: int, density: float, keep: Path | None, repeat: int = 1, jobs: int = 1) -> dict:
    from archivist import check
    from archivist.project import load_project
    from archivist.repair.api import make_state, repair, settings_for
    from archivist.repair.registry import select

    tmp = Path(tempfile.mkdtemp(prefix="bench-repair-"))
    try:
        smap, made = inject(synthetic_map(size, seed=0), density)
        project = write_map(smap, tmp / "map", name=f"Synthetic map of {size} polygons")
        checks, repairs = [], []
        for k in range(repeat):  # check and repair side by side, pair by pair: the host's speed drifts
            out_k = tmp / f"out-{k}"
            t = time.perf_counter()
            report = check(project, jobs=jobs)
            checks.append(time.perf_counter() - t)
            t = time.perf_counter()
            result = repair(project, out_k, jobs=jobs)
            repairs.append(time.perf_counter() - t)
            if k:
                shutil.rmtree(out_k)
        shutil.move(tmp / "out-0", tmp / "out")
        ratios = [r / c for r, c in zip(repairs, checks)]
        proj = load_project(project)
        settings = settings_for(proj)
        assert settings.overlap_max_area == overlap_limit(smap), (settings.overlap_max_area, overlap_limit(smap))
        state = make_state(proj)
        t = time.perf_counter()
        for r in select():
            r.func(state, settings)
        t_repairs = time.perf_counter() - t
        import pyogrio

        units = pyogrio.read_dataframe(tmp / "out" / "map.gpkg", layer="units")
        agreement = diff_agreement(project, tmp / "out", result.changes, settings.tolerance)
        before = {k: sum(1 for f in report.findings if f.rule == k) for k in KINDS}
        after = {k: result.after.get(k, 0) for k in KINDS}
        out = {"polygons": size, "jobs": jobs, "defects_per_kind": made["per_kind"], "grown": made["grown"],
               "grow_passed_over": made["passed_over"], "check_s": [round(t, 2) for t in checks],
               "repairs_s": round(t_repairs, 2), "repair_s": [round(t, 2) for t in repairs],
               "ratio": [round(x, 2) for x in ratios], "ratio_median": round(float(np.median(ratios)), 2),
               "before": before, "after": after, "changes": result.per_repair(), "left": len(result.left),
               "coverage_valid": bool(shapely.coverage_is_valid(units.geometry.values)), "diff": agreement}
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
    ap.add_argument("--repeat", type=int, default=1, help="pairs of check and repair timed (the median ratio reported)")
    ap.add_argument("--jobs", type=int, default=1, help="jobs of both check and repair (1: one thread each)")
    args = ap.parse_args(argv)
    for size in args.sizes:
        print(json.dumps(run(size, args.density, args.keep, args.repeat, args.jobs)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
