"""Benchmark: the topology and linework checks against reading the map and GEOS's coverage validation.

    python tests/benchmarks/bench_topology.py --sizes 10000 100000 1000000 [--defects K] [--repeat R] [--keep DIR]
    python tests/benchmarks/bench_topology.py --sizes 10000 100000 --density 0 0.001 0.01 0.05 [--findings DIR]

For each size a child process writes a synthetic map (``topology_maps.py``:
a Voronoi coverage dissolved into units, with its contacts, faults and map
boundary) to a temporary GeoPackage. A second, fresh child process then
measures, side by side in that one process:

* read: ``pyogrio.read_dataframe`` of the units and the lines layers;
* reference: ``shapely.coverage_is_valid`` on the unit polygons just read;
* check: ``archivist.check(project, only=["topology", "linework"])`` on the
  project loaded by ``archivist.load_project`` (loading is timed apart);
* ratio: check / (read + reference);
* peak memory: the measuring process's maximum resident set size
  (``resource.getrusage``), covering read, reference, load and check.

Timings are the best of ``--repeat`` runs. The clean maps must give no
finding; with ``--defects K`` the findings per rule are listed instead.
Targets: ratio <= 2 at 10^5 polygons, 10^6 polygons under 6 GB,
time roughly proportional to size. Exits 1 when a clean map has findings or
the 10^5 ratio exceeds 2.

Defect density as a second axis
-------------------------------
``--density D1 D2 ...`` makes one map per (size, density) with
``topology_maps.py --density D --scale 5000`` (a fraction D of the features
carrying each kind of defect: contacts 1 m off, lines deleted, polygons
deleted, polygons buffered 2 m, vertices moved 1 cm, faults crossing
contacts) and prints one row per map: read, reference (read +
``coverage_is_valid``), the topology and linework check, the whole check
(every family that applies, one process), the whole check's ratio to the
reference, the slowest rules (per-rule times from archivist's progress
hook; a rule's time includes the shared analyses it is the first to ask
for), peak memory and the findings per rule. ``--findings DIR`` writes
each map's findings (rule, features, measure) to ``DIR/<map>.json`` for
comparing two versions of archivist. The check is timed on a project
already loaded; the load (``archivist.load_project``: reading the layers and
what the loader prepares) is printed beside it, with the ratio of load and
whole check together to the reference. Target: at 10^5 polygons and 1 % the
whole check takes at most 2 x the reference, and time grows no more than
linearly with polygons and with defects. Exits 1 when a clean map has
findings or a 10^5-polygon map of at most 1 % density is above 2 x.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def best(fn, repeat: int):
    out, times = None, []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return out, min(times)


def measure(folder: Path, repeat: int, whole: bool = False, findings_out: Path | None = None) -> dict:
    """Run in a fresh process: read, reference, load and check, with the peak memory.

    ``whole`` also times the whole check (every family) and keeps the
    per-rule times of both checks; ``findings_out`` receives the findings.
    """
    import pyogrio
    import shapely

    import archivist
    from archivist.progress import Progress
    from archivist.project import load_project

    gpkg = folder / "map.gpkg"

    def read():
        return pyogrio.read_dataframe(gpkg, layer="units"), pyogrio.read_dataframe(gpkg, layer="lines")

    (units, lines), t_read = best(read, repeat)
    valid, t_ref = best(lambda polys=units.geometry.values: shapely.coverage_is_valid(polys), repeat)
    del units, lines
    project, t_load = best(lambda: load_project(folder), repeat)
    before_check = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    hooks: list[Progress] = []

    def run(only):
        hooks.append(Progress())
        return archivist.check(project, progress=hooks[-1], **({"only": only} if only else {}))

    report, t_check = best(lambda: run(["topology", "linework"]), repeat)
    rules: dict[str, float] = {}
    if whole:
        hooks.clear()
        report, t_whole = best(lambda: run(None), repeat)
        for hook in hooks:
            for t in hook.timings:
                if t.depth == 1:
                    rules[t.label] = min(rules.get(t.label, t.seconds), t.seconds)
    counts: dict[str, int] = {}
    for f in report.findings:
        counts[f.rule] = counts.get(f.rule, 0) + 1
    if findings_out is not None:
        rows = [[f.rule, list(f.features), None if f.measure is None else round(float(f.measure), 6)] for f in report.findings]
        findings_out.write_text(json.dumps(rows, indent=0), encoding="utf-8")
    geoms = project.layers["units"].geometry
    extra = {"whole": t_whole, "whole_ratio": t_whole / (t_read + t_ref), "rules": rules} if whole else {}
    return {
        "polygons": len(geoms),
        "lines": len(project.layers["lines"].frame),
        "vertices": int(shapely.get_num_coordinates(geoms).sum()),
        "read": t_read,
        "coverage_is_valid": t_ref,
        "valid": bool(valid),
        "load": t_load,
        "check": t_check,
        "ratio": t_check / (t_read + t_ref),
        "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
        "peak_before_check_mb": before_check,
        "findings": counts,
        **extra,
    }


def machine() -> str:
    import numpy
    import pyogrio
    import shapely

    cpu = platform.processor() or "?"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return (
        f"{os.cpu_count()} CPUs ({cpu}); Python {platform.python_version()}, shapely {shapely.__version__} "
        f"(GEOS {shapely.geos_version_string}), numpy {numpy.__version__}, pyogrio {pyogrio.__version__} "
        f"(GDAL {pyogrio.__gdal_version_string__})"
    )


def by_density(args: argparse.Namespace, work: Path) -> bool:
    """One row per (size, density); True when a target is missed or a clean map has findings."""
    head = (f"{'polygons':>9} {'density':>7} {'read s':>7} {'ref s':>6} {'topo+line s':>11} {'whole s':>8} "
            f"{'ratio':>6} {'load s':>7} {'+load':>6} {'peak MB':>8}  slowest rules (s) | findings per rule")
    print("ref = read + coverage_is_valid; ratio = whole check / ref; topo+line = the topology and linework families;")
    print("load = archivist.load_project (reading and preparing the layers); +load = (load + whole check) / ref")
    print(head)
    rows, failed = [], False
    if args.findings:
        args.findings.mkdir(parents=True, exist_ok=True)
    for n in args.sizes:
        for density in args.density:
            name = f"map_{n}_seed{args.seed}_density{density:g}"
            folder = work / name
            if not (folder / "map.gpkg").exists():
                t = time.perf_counter()
                subprocess.run([sys.executable, str(HERE / "topology_maps.py"), str(folder), str(n), "--seed", str(args.seed),
                                "--density", str(density), "--scale", "5000"], check=True, stdout=subprocess.DEVNULL)
                print(f"  (generated {folder.name} in {time.perf_counter() - t:.0f} s)", flush=True)
            cmd = [sys.executable, __file__, "--_measure", str(folder), "--repeat", str(args.repeat), "--_whole"]
            if args.findings:
                cmd += ["--_findings_out", str(args.findings / f"{name}.json")]
            out = subprocess.run(cmd, capture_output=True, text=True)
            if out.returncode:
                sys.stderr.write(out.stderr)
                raise SystemExit(f"measuring {name} failed")
            r = json.loads(out.stdout.strip().splitlines()[-1])
            r["density"] = density
            rows.append(r)
            ref = r["read"] + r["coverage_is_valid"]
            slow = ", ".join(f"{k} {v:.2f}" for k, v in sorted(r["rules"].items(), key=lambda kv: -kv[1])[:4])
            found = ", ".join(f"{k} {v}" for k, v in sorted(r["findings"].items())) or "none"
            print(f"{r['polygons']:>9} {density:>7g} {r['read']:>7.2f} {ref:>6.2f} {r['check']:>11.2f} {r['whole']:>8.2f} "
                  f"{r['whole_ratio']:>6.2f} {r['load']:>7.2f} {(r['load'] + r['whole']) / ref:>6.2f} {r['peak_mb']:>8.0f}  "
                  f"{slow} | {found}", flush=True)
            topo = {k: v for k, v in r["findings"].items() if not k.startswith(("metadata", "crs"))}
            if density == 0 and topo:
                failed = True
                print("  a clean synthetic map gave findings", flush=True)
            if 50_000 <= r["polygons"] <= 200_000 and density <= 0.01 and r["whole_ratio"] > 2.0:
                failed = True
                print("  above the target of 2x (read + coverage_is_valid) at 10^5 polygons", flush=True)
    # growth: with polygons at each density, and with defects at each size (ratios of the ratio to the reference)
    for density in args.density:
        same = [r for r in rows if r["density"] == density]
        for a, b in zip(same, same[1:]):
            print(f"  density {density:g}: {a['polygons']} -> {b['polygons']} polygons (x{b['polygons'] / a['polygons']:.1f}): "
                  f"whole check x{b['whole'] / a['whole']:.1f}, reference x{(b['read'] + b['coverage_is_valid']) / (a['read'] + a['coverage_is_valid']):.1f}")
    for n in args.sizes:
        same = [r for r in rows if abs(r["polygons"] - n) <= 0.2 * n]
        for a, b in zip(same, same[1:]):
            print(f"  about {n} polygons: density {a['density']:g} -> {b['density']:g}: whole check / reference "
                  f"{a['whole_ratio']:.2f} -> {b['whole_ratio']:.2f}")
    print(f"load at the end: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f} (1, 5, 15 min)")
    return failed


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--defects", type=int, default=0, help="inject K overlaps, K gaps and K dangles")
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--keep", type=Path, help="write the maps here and keep them (default: a temporary folder)")
    ap.add_argument("--density", type=float, nargs="+",
                    help="fractions of features carrying each kind of defect, e.g. 0 0.001 0.01 0.05 (one row per size and density)")
    ap.add_argument("--findings", type=Path, help="with --density: write each map's findings to DIR/<map>.json")
    ap.add_argument("--_measure", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--_whole", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--_findings_out", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args._measure:
        print(json.dumps(measure(args._measure, args.repeat, args._whole, args._findings_out)))
        return 0
    if args.density is not None and args.defects:
        ap.error("--defects and --density do not go together")
    work = args.keep or Path(tempfile.mkdtemp(prefix="archivist-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    print(machine())
    print(f"load: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f} (1, 5, 15 min)")
    if args.density is not None:
        failed = by_density(args, work)
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
        return 1 if failed else 0
    head = (f"{'polygons':>9} {'lines':>9} {'vertices':>10} {'read s':>7} {'cov_valid s':>11} {'load s':>7} {'check s':>8} "
            f"{'ratio':>6} {'peak MB':>8} {'(before check)':>14}  findings")
    print(head)
    rows, failed = [], False
    for n in args.sizes:
        folder = work / (f"map_{n}_seed{args.seed}" + (f"_defects{args.defects}" if args.defects else ""))
        if not (folder / "map.gpkg").exists():
            t = time.perf_counter()
            subprocess.run([sys.executable, str(HERE / "topology_maps.py"), str(folder), str(n), "--seed", str(args.seed),
                            "--defects", str(args.defects)], check=True, stdout=subprocess.DEVNULL)
            print(f"  (generated {folder.name} in {time.perf_counter() - t:.0f} s)", flush=True)
        out = subprocess.run([sys.executable, __file__, "--_measure", str(folder), "--repeat", str(args.repeat)],
                             check=True, capture_output=True, text=True)
        r = json.loads(out.stdout.strip().splitlines()[-1])
        rows.append(r)
        found = ", ".join(f"{k} {v}" for k, v in sorted(r["findings"].items())) or "none"
        print(f"{r['polygons']:>9} {r['lines']:>9} {r['vertices']:>10} {r['read']:>7.2f} {r['coverage_is_valid']:>11.2f} {r['load']:>7.2f} "
              f"{r['check']:>8.2f} {r['ratio']:>6.2f} {r['peak_mb']:>8.0f} {r['peak_before_check_mb']:>14.0f}  {found}", flush=True)
        if not args.defects and r["findings"]:
            failed = True
            print("  a clean synthetic map gave findings", flush=True)
        if not args.defects and not r["valid"]:
            failed = True
            print("  GEOS says the clean synthetic coverage is not valid", flush=True)
        if 50_000 <= r["polygons"] <= 200_000 and r["ratio"] > 2.0:
            failed = True
            print("  above the target of 2x (read + coverage_is_valid) at 10^5 polygons", flush=True)
    for a, b in zip(rows, rows[1:]):
        grow = b["polygons"] / a["polygons"]
        print(f"  {a['polygons']} -> {b['polygons']} polygons (x{grow:.1f}): check time x{b['check'] / a['check']:.1f}, "
              f"reference x{(b['read'] + b['coverage_is_valid']) / (a['read'] + a['coverage_is_valid']):.1f}")
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
