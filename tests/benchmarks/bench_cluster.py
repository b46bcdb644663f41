"""Benchmark: ``check --scheduler local`` (a Dask LocalCluster) against one process, with the peak memory of each worker.

    python tests/benchmarks/bench_cluster.py --size 100000 [--defects K | --tiled [--density D]] [--workers N]
        [--worker-memory 2GB] [--keep DIR] [--no-one-process] [--modes sent read]

Needs the dask extra (``pip install -e '.[dask]'``). A map of ``--size``
polygons is written by ``topology_maps.py`` (a Voronoi coverage dissolved
into units, its contacts, faults and map boundary; with ``--defects K``, K
overlaps, gaps and dangles) unless ``--keep DIR`` already holds it. Then two
fresh child processes, one after the other:

* one process: ``load_project`` and ``archivist.check(project, jobs=1)``;
  its times and its peak resident memory (``resource.getrusage``);
* cluster: a local cluster of ``--workers`` worker processes
  (``archivist.cluster.open_executor``; default: every usable core), then the
  same load and ``check`` with the partitioned families on the cluster, cut
  as the command line cuts them (``archivist.cluster.partitions``), once
  with the features sent with each task (what ``--scheduler local`` does)
  and once read by the workers from the files by fid (what a running
  cluster does, :mod:`archivist.partread`). Printed for each:
  the times (cluster start apart), the client's peak memory (it also runs the
  scheduler), each worker's peak memory (``resource.getrusage`` in the
  worker process, asked just before the cluster stops; a worker restarted by
  its nanny reports its new process's), the client's resident and peak memory
  at each step (on stderr, as it runs), how many partition
  tasks the workers read from the files and how many fell back to carrying
  their features, and whether the report is byte for byte the one-process
  report (every finding, place, measure and note, in order).

The machine's load (``os.getloadavg``) is printed beside the figures: on a
shared machine the times are noisy; the memory figures are not. Exits 1
when the reports differ.

``--tiled`` writes the map tile by tile (``topology_maps.py --tiled``: its
memory is one tile's, about 300 MB at any size), with ``--density D`` (a
fraction D of the features carrying each kind of editing defect, at scale
1:5 000, as the topology benchmark's density maps). ``--no-one-process``
skips the one-process run (for a map one process cannot hold; the reports are
then not compared), ``--partitioned-only`` checks only the rules registered
``partitioned=True`` (a whole check sends no family to the cluster while
every family holds a rule that runs on the whole map: the client then runs
the whole check), and ``--modes`` picks the cluster runs (``sent``: the
features sent with the tasks, as ``--scheduler local`` does; ``read``: read by
the workers).

The 4 x 10^6-polygon case: ``--size 4000000 --tiled --density 0.01
--keep /big/disk/maps --no-one-process --partitioned-only --modes read`` (the
map took 30 minutes to write on a busy 2-core machine, 416 MB of memory and
3.0 GB of disk; with the features sent, the client holds every partition's
pickled features while the tasks wait, a second copy of the map).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def peak_mb() -> float:
    """This process's peak resident memory in MB (Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def one_process(folder: Path, out: Path, partitioned_only: bool = False) -> dict:
    import archivist
    from archivist.project import load_project
    from archivist.report import render_json

    t = time.perf_counter()
    project = load_project(folder)
    t_load = time.perf_counter() - t
    t = time.perf_counter()
    report = archivist.check(project, rules=chosen_rules(partitioned_only), jobs=1)
    t_check = time.perf_counter() - t
    out.write_text(render_json(report), encoding="utf-8")
    return {"load": t_load, "check": t_check, "peak_mb": peak_mb(), "findings": len(report.findings),
            "polygons": len(project.layers["units"].frame), "lines": len(project.layers["lines"].frame)}


def chosen_rules(partitioned_only: bool) -> tuple[str, ...]:
    """The rule ids to check: every rule (empty), or those registered ``partitioned=True``."""
    if not partitioned_only:
        return ()
    from archivist.registry import all_rules

    return tuple(info.id for info in all_rules() if info.partitioned)


def on_cluster(folder: Path, reference: Path, workers: int | None, memory: str | None, read: bool, partitioned_only: bool = False) -> dict:
    from archivist import engine
    from archivist.cluster import open_executor, partitions
    from archivist.project import load_project
    from archivist.report import render_json

    t = time.perf_counter()
    with open_executor("local", workers=workers, memory_limit=memory, read_on_workers=read) as executor:
        t_start = time.perf_counter() - t
        t = time.perf_counter()
        watch = memory_progress()
        project = load_project(folder, progress=watch)
        executor.reading(project)
        t_load = time.perf_counter() - t
        loaded_mb = peak_mb()
        parts = partitions(project, executor.workers)
        t = time.perf_counter()
        report = engine.check(project, rules=chosen_rules(partitioned_only), executor=executor, parts=parts, progress=watch)
        t_check = time.perf_counter() - t
        client = executor.inner._client
        worker_peaks = sorted(v / 1024.0 for v in client.run(_worker_peak_kib).values())
        limits = sorted({w["memory_limit"] for w in client.scheduler_info()["workers"].values()})
        slim, fell_back = executor.sent_slim, executor.fell_back
    same = reference.exists() and render_json(report) == reference.read_text(encoding="utf-8")
    return {"start": t_start, "load": t_load, "check": t_check, "parts": parts, "client_peak_mb": peak_mb(), "client_loaded_mb": loaded_mb,
            "polygons": len(project.layers["units"].frame), "lines": len(project.layers["lines"].frame),
            "worker_peaks_mb": worker_peaks, "memory_limit_mb": [m / 2**20 for m in limits], "slim": slim,
            "fell_back": fell_back, "same": same, "findings": len(report.findings)}


def rss_mb() -> float:
    """This process's resident memory now, in MB."""
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20


def memory_progress():
    """A progress hook writing each step's start and end with the client's resident and peak memory to stderr."""
    from archivist.progress import Progress

    class MemoryProgress(Progress):
        t0 = time.perf_counter()

        def _say(self, what: str, label: str) -> None:
            print(f"    {time.perf_counter() - self.t0:7.1f} s  rss {rss_mb():6.0f} MB  peak {peak_mb():6.0f} MB  {what} {label}",
                  file=sys.stderr, flush=True)

        def _begin(self, step) -> None:
            self._say("start", step.label)

        def _end(self, step) -> None:
            self._say("end  ", step.label)

    return MemoryProgress()


def _worker_peak_kib() -> int:
    import resource as r

    return r.getrusage(r.RUSAGE_SELF).ru_maxrss


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=100_000)
    ap.add_argument("--defects", type=int, default=0, help="inject K overlaps, K gaps and K dangles")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--workers", type=int, help="worker processes (default: every usable core)")
    ap.add_argument("--worker-memory", help="each worker's memory limit (default: the machine's memory shared out)")
    ap.add_argument("--keep", type=Path, help="write the map here and keep it (default: a temporary folder)")
    ap.add_argument("--tiled", action="store_true", help="write the map tile by tile (topology_maps.py --tiled)")
    ap.add_argument("--density", type=float, default=0.0, help="with --tiled: fraction of features carrying each kind of defect")
    ap.add_argument("--no-one-process", action="store_true", help="skip the one-process run (the reports are not compared)")
    ap.add_argument("--partitioned-only", action="store_true",
                    help="check only the rules registered partitioned=True (the only ones a cluster runs)")
    ap.add_argument("--modes", nargs="+", choices=("sent", "read"), default=["sent", "read"], help="cluster runs to make")
    ap.add_argument("--_one", nargs=2, type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--_cluster", nargs=2, type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--_read", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args._one:
        print(json.dumps(one_process(*args._one, args.partitioned_only)))
        return 0
    if args._cluster:
        print(json.dumps(on_cluster(*args._cluster, args.workers, args.worker_memory, args._read, args.partitioned_only)))
        return 0
    if args.density and not args.tiled:
        ap.error("--density goes with --tiled")
    if args.tiled and args.defects:
        ap.error("--tiled takes --density, not --defects")
    work = args.keep or Path(tempfile.mkdtemp(prefix="archivist-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    if args.tiled:
        folder = work / f"map_{args.size}_tiled_density{args.density:g}"
        how = ["--tiled", "--density", str(args.density), "--scale", "5000"]
    else:
        folder = work / (f"map_{args.size}_seed{args.seed}" + (f"_defects{args.defects}" if args.defects else ""))
        how = ["--defects", str(args.defects)]
    if not (folder / "map.gpkg").exists():
        t = time.perf_counter()
        subprocess.run([sys.executable, str(HERE / "topology_maps.py"), str(folder), str(args.size), "--seed", str(args.seed), *how],
                       check=True, stdout=subprocess.DEVNULL)
        print(f"(generated {folder.name} in {time.perf_counter() - t:.0f} s)", flush=True)
    reference = work / f"{folder.name}.one-process{'.partitioned' if args.partitioned_only else ''}.json"
    extra = [*(["--workers", str(args.workers)] if args.workers else []), *(["--worker-memory", args.worker_memory] if args.worker_memory else []),
             *(["--partitioned-only"] if args.partitioned_only else [])]
    one = None
    if not args.no_one_process:
        print(f"one process ({load()})", flush=True)
        out = subprocess.run([sys.executable, __file__, "--_one", str(folder), str(reference),
                              *(["--partitioned-only"] if args.partitioned_only else [])],
                             check=True, capture_output=True, text=True)
        one = json.loads(out.stdout.strip().splitlines()[-1])
        print(f"  {one['polygons']} polygons, {one['lines']} lines: load {one['load']:.1f} s, check {one['check']:.1f} s, "
              f"peak {one['peak_mb']:.0f} MB, {one['findings']} findings", flush=True)
    same = True
    for read in [mode == "read" for mode in args.modes]:
        how = "features read by the workers from the files" if read else "features sent with the tasks (as --scheduler local does)"
        print(f"local cluster, {how} ({load()})", flush=True)
        out = subprocess.run([sys.executable, __file__, "--_cluster", str(folder), str(reference), *extra, *(["--_read"] if read else [])],
                             check=True, stdout=subprocess.PIPE, text=True)  # stderr: the client's memory step by step, live
        many = json.loads(out.stdout.strip().splitlines()[-1])
        peaks = ", ".join(f"{p:.0f}" for p in many["worker_peaks_mb"])
        ratio = f" (one process / cluster: x{one['check'] / many['check']:.2f})" if one else ""
        print(f"  {len(many['worker_peaks_mb'])} workers (limit {', '.join(f'{m:.0f}' for m in many['memory_limit_mb'])} MB each), "
              f"{many['parts']} partitions: start {many['start']:.1f} s, load {many['load']:.1f} s, check {many['check']:.1f} s{ratio}",
              flush=True)
        print(f"  {many['polygons']} polygons, {many['lines']} lines, {many['findings']} findings", flush=True)
        print(f"  peak memory: client and scheduler {many['client_peak_mb']:.0f} MB (after loading {many['client_loaded_mb']:.0f} MB); "
              f"workers {peaks} MB", flush=True)
        if read:
            print(f"  partition tasks read by the workers: {many['slim']}, fell back to carrying their features: {many['fell_back']}", flush=True)
        if one:
            print(f"  report identical to one process: {'yes' if many['same'] else 'NO'} ({load()})", flush=True)
            same = same and many["same"]
        else:
            print(f"  ({load()})", flush=True)
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
