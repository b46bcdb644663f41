"""Benchmark: the topology and linework families on spatial partitions give the findings of one process.

    python tests/benchmarks/partition_identity.py --map /work/maps/map_100000_d0 /work/maps/map_100000_d0.01 [--parts 2 4 8]
    python tests/benchmarks/partition_identity.py --sizes 100000 --densities 0 0.01 0.05 [--parts 2 4 8] [--work DIR]

Each map is a folder written by ``topology_maps.py`` (``--map``), or one is
written for each size and density into ``--work`` (a temporary folder by
default) as ``python tests/benchmarks/topology_maps.py DIR N --density D
--scale 5000`` writes it. On each map the two families (the coverage rules,
slivers, missing unit codes and the linework rules) are checked in one
process, the reference, then on ``--parts`` spatial partitions run on two
threads (:mod:`archivist.parallel`: the same partitions as worker processes
get). Printed per map and number of partitions: whether the reports are
identical (findings: rule, severity, layer, features, message, place,
measure, geometry, in order; notes; rules run), the rules the merge sent to
the whole map, and per partition the rules it could not judge (GEOS stopped,
or a gap near its core runs past its region) and how many of the findings it
owns it could not trust. The CPU time of the one-process check and of each
partition (``time.thread_time`` of the thread running it: its own work,
whatever else the machine runs) says how evenly the work splits; wall times
are given for orientation only, with the machine's load: the partitions here
run on threads of this process, which is not how ``check --jobs N`` runs them
(tests/benchmarks/bench_jobs.py times that). Exits 1 when a report differs.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent.parent))

from topology_maps import make  # noqa: E402


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def compare(project, rules: list[str], parts_list: list[int]) -> bool:
    import numpy as np

    from archivist import engine, parallel

    t, c = time.perf_counter(), time.thread_time()
    reference = engine.check(project, rules=rules)
    ref = [f.to_dict() for f in reference.findings]
    print(f"  one process: {len(ref)} findings, {time.perf_counter() - t:.1f} s, CPU {time.thread_time() - c:.2f} s "
          f"({load()})", flush=True)
    ok = True
    for parts in parts_list:
        results: list = []
        answers: list = []
        cpu: dict[int, float] = {}
        merge, merged, run = parallel.merge, parallel.Sent.merged, parallel.run_partition

        def timed(task):  # type: ignore[no-untyped-def]
            c = time.thread_time()  # this thread's CPU time: the partition's own work, whatever else runs
            try:
                return run(task)
            finally:
                cpu[task.index] = time.thread_time() - c

        def keep_results(plan, ids, res):  # type: ignore[no-untyped-def]
            results.append((plan, list(res)))
            return merge(plan, ids, res)

        def keep_answer(self, *args, **kwargs):  # type: ignore[no-untyped-def]
            answers.append(merged(self, *args, **kwargs))
            return answers[-1]

        parallel.merge, parallel.Sent.merged, parallel.run_partition = keep_results, keep_answer, timed
        try:
            t = time.perf_counter()
            with ThreadPoolExecutor(2) as pool:
                report = engine.check(project, rules=rules, executor=pool, parts=parts)
            took = time.perf_counter() - t
        finally:
            parallel.merge, parallel.Sent.merged, parallel.run_partition = merge, merged, run
        same = [f.to_dict() for f in report.findings] == ref and report.notes == reference.notes \
            and report.rules_run == reference.rules_run
        ok &= same
        whole = sorted({r for a in answers for r in a.whole})
        sent = sorted({r for a in answers for r in (*a.hits, *a.whole)})
        print(f"  {parts} partitions: {'identical' if same else 'REPORTS DIFFER'}, {took:.1f} s ({load()}); "
              f"{len(sent)} rules sent, to the whole map: {', '.join(whole) or 'none'}; CPU of the partitions "
              f"{sum(cpu.values()):.2f} s, the largest {max(cpu.values(), default=0.0):.2f} s", flush=True)
        for plan, res in results:
            for r in sorted(res, key=lambda r: r.index):
                if not r.hits:
                    untrusted = 0
                else:
                    xy = np.array([(h[2], h[3]) for h in r.hits], dtype=float)
                    owner = plan.owners(xy[:, 0], xy[:, 1])
                    untrusted = sum(1 for h, o in zip(r.hits, owner.tolist()) if o == r.index and not h[4])
                print(f"    partition {r.index}: {len(r.hits)} hits, CPU {cpu.get(r.index, float('nan')):.2f} s, "
                      f"{untrusted} owned and not trusted; "
                      f"could not judge: {', '.join(r.failed) or 'none'}", flush=True)
        if not same:
            import collections

            a = collections.Counter(f["rule"] for f in ref)
            b = collections.Counter(f.rule for f in report.findings)
            print(f"    findings per rule differ: {dict(a - b)} missing, {dict(b - a)} extra", flush=True)
    return ok


def main(argv=None) -> int:
    from archivist.project import load_project
    from archivist.registry import all_rules

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--map", type=Path, nargs="*", default=[], help="maps already written")
    ap.add_argument("--sizes", type=int, nargs="*", default=[], help="polygons of the maps to write")
    ap.add_argument("--densities", type=float, nargs="*", default=[0.0, 0.01, 0.05])
    ap.add_argument("--parts", type=int, nargs="*", default=[2, 4, 8])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--work", type=Path, default=None, help="where the maps are written (default: a temporary folder)")
    args = ap.parse_args(argv)
    if not args.map and not args.sizes:
        ap.error("give --map or --sizes")
    rules = [r.id for r in all_rules() if r.family in ("topology", "linework")]
    ok = True
    with tempfile.TemporaryDirectory(prefix="partition-identity-") as tmp:
        work = args.work or Path(tmp)
        folders = list(args.map)
        for n in args.sizes:
            for d in args.densities:
                folder = work / f"map_{n}_d{d:g}"
                if not folder.exists():
                    t = time.perf_counter()
                    make(folder, n, seed=args.seed, density=d, scale=5000)
                    print(f"wrote {folder} in {time.perf_counter() - t:.1f} s", flush=True)
                folders.append(folder)
        for folder in folders:
            print(f"{folder} ({load()})", flush=True)
            ok &= compare(load_project(folder), rules, args.parts)
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
