"""Benchmark: packing the 10^5-polygon synthetic map against writing its layers once with pyogrio.

    python tests/benchmarks/bench_pack.py [N_POLYGONS] [--zip] [--runs=N]

Both are measured in this process, side by side, best of five runs each:

- reference: ``pyogrio.write_dataframe`` of every layer of the loaded project
  into one GeoPackage (the plainest way to write the same layers);
- pack: ``archivist.pack`` of the same loaded project, given the check report
  so that only packing is timed (GeoPackage, GeoJSON in WGS 84, CSV tables,
  the input copies, checksums, metadata, the bag);
- pack + check: ``archivist.pack`` as the command runs it, checks included.

The target (issue 5) is pack <= 3x the reference. Prints the figures and
exits 1 when the target is missed.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import pyogrio

sys.path.insert(0, str(Path(__file__).resolve().parent))

import archivist  # noqa: E402
from synthetic import make_project  # noqa: E402

RUNS = 5


def main(n: int, make_zip: bool, runs: int = RUNS) -> int:
    work = Path(tempfile.mkdtemp(prefix="bench-pack-"))
    try:
        root = make_project(work / "project", n)
        project = archivist.load_project(root)
        counts = {role: len(layer.frame) for role, layer in project.layers.items()}
        t = time.perf_counter()
        report = archivist.check(project)
        check_time = time.perf_counter() - t
        reference, packing, full = [], [], []
        for i in range(runs):
            ref_dir = work / f"ref{i}"
            ref_dir.mkdir()
            t = time.perf_counter()
            for role, layer in project.layers.items():
                pyogrio.write_dataframe(layer.frame, ref_dir / "map.gpkg", layer=role, driver="GPKG")
            reference.append(time.perf_counter() - t)
            t = time.perf_counter()
            archivist.pack(project, work / f"out{i}", zip=make_zip, allow_errors=True, report=report)
            packing.append(time.perf_counter() - t)
            shutil.rmtree(ref_dir)
            shutil.rmtree(work / f"out{i}")
        t = time.perf_counter()
        result = archivist.pack(project, work / "full", zip=make_zip, allow_errors=True)
        full.append(time.perf_counter() - t)
        ref, pk = min(reference), min(packing)
        print(f"synthetic map: {counts} ({result.bytes / 1e6:.1f} MB packed, {len(result.files)} files)")
        print(f"checks: {report.summary.errors} errors, {report.summary.warnings} warnings in {check_time:.2f} s")
        print(f"reference (pyogrio write of the layers): {ref:.2f} s   runs {', '.join(f'{v:.2f}' for v in reference)}")
        print(f"pack{' --zip' if make_zip else ''} (checks given):           {pk:.2f} s   runs {', '.join(f'{v:.2f}' for v in packing)}   ratio {pk / ref:.2f}x")
        print(f"pack{' --zip' if make_zip else ''} with its checks:          {full[0]:.2f} s   ratio {full[0] / ref:.2f}x")
        return 0 if pk / ref <= 3.0 else 1
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    runs = next((int(a.split("=", 1)[1]) for a in sys.argv[1:] if a.startswith("--runs=")), RUNS)
    sys.exit(main(int(args[0]) if args else 100_000, "--zip" in sys.argv, runs))
