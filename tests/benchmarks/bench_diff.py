"""Benchmark: ``archivist diff`` of the 10^5-polygon synthetic map against an edited copy.

    python tests/benchmarks/bench_diff.py [N_POLYGONS]

The edited copy has 1 % of its polygons recoded and its feature order
reversed (so fids no longer match and every feature must be matched by
geometry). Measured in this process, side by side, best of three:

- reference: loading both projects (``archivist.load_project`` twice), which
  any comparison has to do;
- diff: ``archivist.diff`` of the two loaded projects (matching and reporting only).

Prints the figures, the ratio diff / reference and the number of changes
found, and exits 1 when the number of changes is not the number of edits.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyogrio

sys.path.insert(0, str(Path(__file__).resolve().parent))

import archivist  # noqa: E402
from synthetic import make_project  # noqa: E402

RUNS = 3


def edited_copy(root: Path, dest: Path, share: float = 0.01) -> int:
    """Copy ``root``, recode ``share`` of its polygons (to a unit no neighbour has) and reverse the feature order."""
    import shapely

    shutil.copytree(root, dest)
    gpkg = dest / "map.gpkg"
    layers = {str(n): pyogrio.read_dataframe(gpkg, layer=str(n)) for n, _ in pyogrio.list_layers(gpkg)}
    units = layers["units"]
    geoms = np.asarray(units.geometry.array, dtype=object)
    codes = units["unit"].to_numpy(dtype=object).copy()
    tree = shapely.STRtree(geoms)
    a, b = tree.query(geoms, predicate="touches")
    rng = np.random.default_rng(7)
    picked = rng.choice(len(geoms), int(len(geoms) * share), replace=False)
    all_codes = sorted(set(codes))
    done = 0
    for i in sorted(picked):
        used = set(codes[b[a == i]]) | {codes[i]}
        free = [c for c in all_codes if c not in used]
        if free:
            codes[i] = free[0]
            done += 1
    units["unit"] = codes
    gpkg.unlink()
    for name, frame in layers.items():
        frame = frame.iloc[::-1].reset_index(drop=True)  # new fids for every feature
        pyogrio.write_dataframe(frame, gpkg, layer=name, driver="GPKG")
    return done


def best(fn) -> float:
    times = []
    for _ in range(RUNS):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main(n: int) -> int:
    work = Path(tempfile.mkdtemp(prefix="bench-diff-"))
    try:
        old = make_project(work / "old", n)
        edits = edited_copy(old, work / "new")
        reference = best(lambda: (archivist.load_project(old), archivist.load_project(work / "new")))
        a, b = archivist.load_project(old), archivist.load_project(work / "new")
        report = None

        def run():
            nonlocal report
            report = archivist.diff(a, b)

        diffing = best(run)
        polys = len(a.layers["units"].frame)
        print(f"{polys} polygons, {len(a.layers['lines'].frame)} lines; {edits} polygons recoded, feature order reversed")
        print(f"reference (load both projects): {reference:.2f} s")
        print(f"diff (match and report):        {diffing:.2f} s  ({diffing / reference:.2f}x the reference)")
        kinds = report.counts
        print(f"changes found: {len(report.changes)} {kinds}")
        ok = len(report.changes) == edits and set(kinds) == {"polygon-recoded"}
        return 0 if ok else 1
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main(int(sys.argv[1]) if len(sys.argv) > 1 else 100_000))
