"""Benchmark: ``check --jobs N`` against ``--jobs 1`` on synthetic maps, and the findings of both compared.

    python tests/benchmarks/bench_jobs.py --sizes 10000 100000 [--defects K] [--jobs 2 4] [--repeat R] [--threads]

For each size a map is written by ``topology_maps.py`` (a Voronoi coverage
dissolved into units, its contacts, faults and map boundary; with
``--defects K``, K overlaps, gaps and dangles) into a temporary folder. In
one process, side by side, the project is loaded once and checked with
``archivist.check(project, jobs=1)`` and with ``jobs=N`` for each N asked
(default: 2 and every core when there are more), ``--repeat`` times each; the
best time of each is kept. With ``--partitioned`` only the rules registered
``partitioned`` run (the whole check sends a family to the partitions only
when every rule of it can go; see ``archivist/engine.py``). Printed per size and N: the times, the speed-up
(jobs 1 / jobs N), whether the findings and notes are identical (rule,
severity, layer, features, message, place, measure, geometry, in order), and
which partitioned rules the partitions handed back to the whole map (their
findings could not be judged on a partition; see ``archivist/parallel.py``).
The machine's load (``os.getloadavg``) is printed beside each figure: the
speed-up needs the cores to be free. Exits 1 when findings differ.
Target: speed-up >= 1.6 with 2 jobs on 2 cores at 10^5 polygons.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent.parent))

from topology_maps import make  # noqa: E402


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def handed_back(project, jobs: int) -> list[str]:
    """The partitioned rules the merge sends to the whole map on this project (computed apart, in this process)."""
    from archivist import parallel
    from archivist.analysis.context import CheckContext
    from archivist.registry import all_rules

    view = CheckContext(project).view()
    rules = [r for r in all_rules() if r.partitioned and all(role in view.layers for role in r.needs)]
    plan = parallel.plan_partitions(view, jobs)
    results = []
    for part in plan.partitions:
        task = parallel.PartitionTask(part.index, parallel.sub_project(view, part), tuple(r.id for r in rules), plan.grid,
                                      part.marked, plan.reach)
        results.append(parallel.run_partition(task))
    return list(parallel.merge(plan, [r.id for r in rules], results).whole)


def main(argv=None) -> int:
    from archivist import check, load_project
    from archivist.parallel import default_jobs, make_executor
    from archivist.registry import all_rules

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--defects", type=int, default=0)
    ap.add_argument("--jobs", type=int, nargs="+", default=None)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--threads", action="store_true", help="threads instead of worker processes")
    ap.add_argument("--explain", action="store_true", help="list the rules handed back to the whole map")
    ap.add_argument("--partitioned", action="store_true", help="run only the rules registered partitioned")
    args = ap.parse_args(argv)
    jobs_list = args.jobs or sorted({2, default_jobs()} - {1})
    rules = [r.id for r in all_rules() if r.partitioned] if args.partitioned else []
    differ = False
    print(f"cores {default_jobs()}, {load()}", flush=True)
    with tempfile.TemporaryDirectory(prefix="archivist-bench-jobs-") as work:
        for n in args.sizes:
            folder = Path(work) / f"map{n}"
            made = make(folder, n, seed=1, defects=args.defects)
            project = load_project(folder)
            times: dict[int, float] = {}
            reports = {}
            for jobs in [1, *jobs_list]:
                pool = make_executor(jobs, "thread" if args.threads else "process") if jobs > 1 else None
                best = float("inf")
                for _ in range(args.repeat):
                    t = time.perf_counter()
                    if pool is None:
                        reports[jobs] = check(project, rules=rules, jobs=1)
                    else:
                        reports[jobs] = check(project, rules=rules, executor=pool, parts=jobs)
                    best = min(best, time.perf_counter() - t)
                if pool is not None:
                    pool.shutdown()
                times[jobs] = best
            ref = reports[1]
            print(f"{made['polygons']} polygons, {made['lines']} lines, {len(ref.findings)} findings: "
                  f"jobs 1 {times[1]:.2f} s ({load()})", flush=True)
            for jobs in jobs_list:
                same = ([f.to_dict() for f in reports[jobs].findings] == [f.to_dict() for f in ref.findings]
                        and reports[jobs].notes == ref.notes)
                differ |= not same
                extra = f", handed back to the whole map: {handed_back(project, jobs) or 'none'}" if args.explain else ""
                print(f"  jobs {jobs}: {times[jobs]:.2f} s, speed-up {times[1] / times[jobs]:.2f}x, "
                      f"findings {'identical' if same else 'DIFFER'} ({load()}){extra}", flush=True)
    return 1 if differ else 0


if __name__ == "__main__":
    sys.exit(main())
