"""Benchmark: ``check --jobs N`` against ``--jobs 1`` on synthetic maps, and the reports of both compared.

    python tests/benchmarks/bench_jobs.py --sizes 10000 100000 [--defects K] [--jobs 2 4] [--repeat R]
    python tests/benchmarks/bench_jobs.py --map FOLDER [--jobs 2]       # a map already written
    ... [--processes]                                                 # partitions in worker processes instead
    ... [--threads]                                                   # threads, no partitions, whatever the size

For each size a map is written by ``topology_maps.py`` (a Voronoi coverage
dissolved into units, its contacts, faults and map boundary; with
``--defects K``, K overlaps, gaps and dangles) into a temporary folder, or
``--map`` names one. Side by side in one process, the whole check as a user
runs it (``load_project`` then ``archivist.check``) is timed with ``jobs=1``
and with ``jobs=N`` for each N asked (default: 2 and every core when there
are more), ``--repeat`` times each, the best time kept; the load and the
check are also timed apart. ``jobs=N`` runs the rule families side by side on
N threads (:func:`archivist.engine.run_rules`) on maps below
:data:`archivist.parallel.FORK_FEATURES` features and on N partitions in N
forked processes above (:func:`archivist.parallel.fork_parts`); with
``--threads``, on N threads without partitions whatever the size; with ``--processes``, the
partitioned families on N spatial partitions in N worker processes
(``parts=N``; :mod:`archivist.parallel`), and with ``--partitioned`` only the
rules registered ``partitioned``. Printed per size and N: the times, the
process's CPU time (user + system: all threads), the speed-up (jobs 1 / jobs
N), and whether the reports are identical (findings: rule, severity, layer,
features, message, place, measure, geometry, in order; notes; rules run).
The machine's load (``os.getloadavg``) is printed beside each figure: the
speed-up needs the cores to be free. ``--timeline`` runs one more check per
N timed inside (:func:`timeline`): when the tasks are sent, each partition's
run and CPU, the merge, the end; what lies outside the partitions runs on one
core. Exits 1 when reports differ.
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

    from concurrent.futures import ThreadPoolExecutor

    view = CheckContext(project).view()
    rules = [r for r in all_rules() if r.partitions(view) and all(role in view.layers for role in r.needs)]
    with ThreadPoolExecutor(1) as pool:  # the partitions one after the other; the merge and settle steps as a check runs them
        return list(parallel.run_partitioned(view, rules, pool, jobs).whole)


def timeline(folder: Path, jobs: int) -> str:
    """Where the time of one ``check(jobs=N)`` goes, from the call: the parent's work until the tasks are sent
    (cutting the map among it), each partition's run (start, end, CPU; measured in the worker), the merge, the end.

    ``time.perf_counter`` is the system's monotonic clock on Linux, the same in the forked workers. Each worker
    appends its partition's times to a temporary file (``run_partition`` is wrapped; the task sent is unchanged).
    """
    from archivist import check, load_project, parallel

    project = load_project(folder)
    fd, name = tempfile.mkstemp(prefix="archivist-timeline-")
    os.close(fd)
    log = Path(name)
    marks: dict[str, float] = {}
    run, init, merged = parallel.run_partition, parallel.Sent.__init__, parallel.Sent.merged

    def timed_run(task):
        t, c = time.perf_counter(), time.process_time()
        try:
            return run(task)
        finally:
            with open(log, "a", encoding="utf-8") as f:
                f.write(f"{task.index} {t} {time.perf_counter()} {time.process_time() - c}\n")

    def timed_init(self, *a, **k):
        marks["cut from"] = time.perf_counter()
        init(self, *a, **k)
        marks["cut to"] = time.perf_counter()

    def timed_merged(self, *a, **k):
        out = merged(self, *a, **k)
        marks["merged"] = time.perf_counter()
        return out

    parallel.run_partition, parallel.Sent.__init__, parallel.Sent.merged = timed_run, timed_init, timed_merged
    try:
        t0 = time.perf_counter()
        check(project, jobs=jobs)
        end = time.perf_counter() - t0
    finally:
        parallel.run_partition, parallel.Sent.__init__, parallel.Sent.merged = run, init, merged
    rows = sorted(tuple(float(x) for x in line.split()) for line in log.read_text(encoding="utf-8").splitlines())
    log.unlink()
    if "cut to" not in marks:
        return f"  timeline, jobs {jobs}: no partitions (threads or one process), check {end:.2f} s"
    parts = ", ".join(f"{int(i)}: {a - t0:.2f}-{b - t0:.2f} s, cpu {c:.2f} s" for i, a, b, c in rows)
    return (f"  timeline, jobs {jobs} (s from the call): tasks sent at {marks['cut to'] - t0:.2f} (cutting the map "
            f"{marks['cut to'] - marks['cut from']:.2f} of it); partitions {parts}; merged at "
            f"{marks.get('merged', float('nan')) - t0:.2f}; check ends at {end:.2f}")


def cpu() -> float:
    import resource

    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def main(argv=None) -> int:
    from archivist import check, load_project
    from archivist.engine import run_rules, select
    from archivist.parallel import default_jobs
    from archivist.registry import all_rules

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--map", type=Path, help="check this map folder instead of writing synthetic ones")
    ap.add_argument("--defects", type=int, default=0)
    ap.add_argument("--jobs", type=int, nargs="+", default=None)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--processes", action="store_true", help="partitions in worker processes instead of threads")
    ap.add_argument("--threads", action="store_true", help="threads without partitions, whatever the map's size")
    ap.add_argument("--explain", action="store_true", help="with --processes: the rules handed back to the whole map")
    ap.add_argument("--partitioned", action="store_true", help="run only the rules registered partitioned")
    ap.add_argument("--timeline", action="store_true",
                    help="one more check per N, timed inside: until the tasks are sent, each partition, the merge")
    args = ap.parse_args(argv)
    jobs_list = args.jobs or sorted({2, default_jobs()} - {1})
    rules = [r.id for r in all_rules() if r.partitioned] if args.partitioned else []
    differ = False
    print(f"cores {default_jobs()}, {load()}, {'processes on partitions' if args.processes else 'threads, no partitions' if args.threads else 'as check runs'}", flush=True)
    with tempfile.TemporaryDirectory(prefix="archivist-bench-jobs-") as work:
        for n in ([0] if args.map else args.sizes):
            if args.map:
                folder, label = args.map, str(args.map)
            else:
                folder = Path(work) / f"map{n}"
                made = make(folder, n, seed=1, defects=args.defects)
                label = f"{made['polygons']} polygons, {made['lines']} lines"
            best: dict[int, tuple[float, float, float, float]] = {}  # whole, load, check, cpu
            reports = {}
            for jobs in [1, *jobs_list]:
                for _ in range(args.repeat):
                    # the previous run's map is freed before the clock starts (a user's run has none to free:
                    # its freeing, about 0.15 s at 10^5 polygons, was counted in the next run's load)
                    project = None
                    t0, c0 = time.perf_counter(), cpu()
                    project = load_project(folder)
                    t1 = time.perf_counter()
                    if jobs == 1:
                        reports[jobs] = check(project, rules=rules, jobs=1)
                    elif args.processes:
                        reports[jobs] = check(project, rules=rules, jobs=jobs, parts=jobs)
                    elif args.threads:
                        reports[jobs] = run_rules(project, select((), rules), threads=jobs)
                    else:
                        reports[jobs] = check(project, rules=rules, jobs=jobs)
                    t2 = time.perf_counter()
                    got = (t2 - t0, t1 - t0, t2 - t1, cpu() - c0)
                    if jobs not in best or got[0] < best[jobs][0]:
                        best[jobs] = got
            ref = reports[1]
            w1, l1, k1, c1 = best[1]
            print(f"{label}, {len(ref.findings)} findings: jobs 1 {w1:.2f} s (load {l1:.2f} + check {k1:.2f}; "
                  f"cpu {c1:.2f} s) ({load()})", flush=True)
            for jobs in jobs_list:
                same = ([f.to_dict() for f in reports[jobs].findings] == [f.to_dict() for f in ref.findings]
                        and reports[jobs].notes == ref.notes and reports[jobs].rules_run == ref.rules_run)
                differ |= not same
                w, ld, k, c = best[jobs]
                extra = (f", handed back to the whole map: {handed_back(load_project(folder), jobs) or 'none'}"
                         if args.explain and args.processes else "")
                print(f"  jobs {jobs}: {w:.2f} s (load {ld:.2f} + check {k:.2f}; cpu {c:.2f} s), speed-up "
                      f"{w1 / w:.2f}x whole, {k1 / k:.2f}x check, reports {'identical' if same else 'DIFFER'} "
                      f"({load()}){extra}", flush=True)
                if args.timeline:
                    print(timeline(folder, jobs), flush=True)
    return 1 if differ else 0


if __name__ == "__main__":
    sys.exit(main())
