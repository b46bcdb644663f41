"""The expensive rules on spatial partitions of the map, run side by side and merged into one answer.

Where this is used: ``check --scheduler`` (Dask workers, :mod:`archivist.cluster`)
and ``archivist.check(project, jobs=N, parts=P)`` (worker processes). ``check
--jobs N`` on one machine uses threads instead, without partitions: the rule
families side by side and the element-wise work of an analysis cut into runs
(:func:`archivist.engine.run_rules`, :mod:`archivist.threads`), which share one
copy of the map and its analyses.

What is partitioned
-------------------
A rule registered with ``partitioned=True`` (:func:`archivist.registry.rule`)
judges every place of the map from what lies near it: the polygons, lines
and samples within a known reach. Such a rule can run on a piece of the map
with a margin around it and give, for the places in the piece, the findings
it gives on the whole map. A rule whose answer depends on the whole map (a
count over a layer, a summary of a systematic fault, the legend, the
metadata, the CRS labels) runs once on the whole project, in the calling
process.

Which rules are partitioned, and why
------------------------------------
Partitioned: ``unit-sliver`` (each polygon alone), ``unit-code-missing``
(each polygon's unit field), ``line-self-intersection``
and ``line-kind-unknown`` (each line alone: its geometry, its kind and
certainty against the vocabulary), ``line-duplicate`` and
``line-same-unit-contact`` (a line, the lines within the tolerance of it and
the polygon edges it runs along), ``line-dangle`` (a free end, the lines and
the map edge around it, and the nearest line, whose link is the finding's
geometry), ``line-off-boundary`` (a line and the polygon edges and map edge
within the tolerance).

``boundary-without-line`` is partitioned with a settle step
(:class:`archivist.registry.Settle`): each stretch of boundary no line draws
is found from the polygon edges and lines around it, but whether the
stretches are listed or summed up in one finding per kind of boundary
depends on their share of the whole map, and the summary names whole-map
facts. The partitions give every stretch and a tally: the length of the
boundaries between units and of the units' edge along the map edge, each
edge counted by the partition owning its first vertex, and the number of
contact lines, each counted by the partition owning its first vertex. The
merge adds the tallies exactly (:class:`archivist.tally.ExactSum`, the
correctly rounded sum whatever the order, as :func:`math.fsum` gives it)
and finishes the merged stretches with the same function a check in one
process finishes its stretches with, which takes them in an order of its own
(by polygon ids, then vertices), so the two agree by construction: the
count, the missing length, the share against the threshold, the box, the
longest stretch, the summary's geometry. Without an extent layer the map
edge is the outline of the units, which a partition's units do not give
(an enclosed hole open in a partition, a partition's own outer edge): the
rule then runs on the whole map, decided before the partitions are sent
(``Settle.partitions_can``).

The coverage rules ``unit-gap``, ``unit-overlap``, ``unit-edge-mismatch``,
``unit-same-neighbour`` and ``unit-outside-extent`` are partitioned on a map
with an extent layer (``partitioned=extent_is_declared``, a predicate the
engine asks of the project as the partitions get it:
:meth:`archivist.registry.RuleInfo.partitions`). Each overlap is an exact
intersection of two polygons, each unit's area outside the extent is cut
from that polygon alone, and each gap is measured from the polygons within a
small margin of it (:mod:`archivist.analysis.coverage`). A partition keeps
the whole extent layer; it traces the gaps within the extent and its region
(its marked cells: every unit of the map over them is in the partition) and
measures them against the whole extent, with the whole map's noise floor
(``PartitionTask.scale``, :func:`archivist.analysis.coverage.map_scale`).
A gap whose traced face reaches the region's edge inside the grid may go on
beyond it: far from the core its finding reaches off the marked cells and is
not trusted (its owner reports it); when such a face reaches the core (grown
by the reach), the partition cannot vouch for the gaps and every rule that
reads them there fails (:class:`archivist.analysis.coverage.CannotVouch`),
so the merge runs those rules on the whole map; the overlaps and the unit
area outside the extent do not depend on the gaps.

Whole map, and why:

- the metadata, crs, legend, structures and samples families: they judge
  files, labels, tables and attributes (counts over a layer, a CRS for the
  whole map, the n.d. note of a table); ``crs-axis-swap-suspected`` counts
  the features of a layer that fit only swapped; ``sample-unit-mismatch``
  names the nearest polygon of the recorded unit anywhere on the map.
- ``boundary-without-line`` on a map without an extent layer (see above).
- the coverage rules on a map without an extent layer: its extent is the
  outline of the units, joined over the whole map, which a partition's units
  do not give. The topology family then runs on the whole map (a family goes
  to the partitions only when all its running rules can).

How the map is cut
------------------
A grid of square cells, at least half the halo width ``h`` wide
(:func:`halo_width`), spans the partitioned layers (every layer of the
project but the extent, which every partition gets whole; tables go
whole). The cells are put in the order of the Hilbert distance of
their centres over those bounds (:meth:`geopandas.GeoSeries.hilbert_distance`)
and the order is cut into ``parts`` contiguous runs holding about the same
number of features (counted by the centre of their bounds). A partition's
*core* is its run of cells; its *marked* cells are those within ``h`` of the
core (grown by ``ceil(h / cell) + 1`` cells); it holds every feature whose
bounds touch a marked cell: its core features and its *halo*. Rows keep
their original order, so every index-ordered step of a rule sees the same
order as on the whole map. Features with no geometry go to the first
partition.

How findings are merged
-----------------------
A finding's place is its representative point, the ``x``, ``y`` the report
gives (the hit's own point, else its geometry's point, else a point on its
surface; :func:`archivist.engine.to_finding`). It is *owned* by the
partition whose core holds that point's cell, so each finding is reported
once, by one partition.

A partition *trusts* a finding when the bounds of its geometry and place,
grown by the rules' ``reach`` (:func:`rule_reach`: the farthest a partitioned
rule looks from a place it judges), lie on its marked cells (what of them
lies off the grid needs no cell: the grid spans every feature, so the whole
map holds nothing there either). Every feature over a marked cell is in the
partition (its bounds touch that cell), so the rule saw there exactly what
it sees on the whole map, and gives the same hit. A finding whose place lies in the core is trusted when it is no larger
than the halo less the reach (the halo is three times the larger features,
see :func:`halo_width`). The merge keeps each partition's owned findings,
and runs a rule on the whole map instead (its answer replaces the
partitions') when:

- a finding owned by a partition is not trusted by it (a finding larger than
  the halo allows: a gap as wide as a quarter of the map), or has no place;
- a trusted finding of one partition is missing from its owner's findings
  (a cross-check: the two saw different maps where both should see all);
- GEOS stopped the rule in a partition.

Then each rule with a settle step finishes its owned hits from the exact
sums of the partitions' tallies (:func:`settle`; GEOS stopping it sends the
rule to the whole map). So the merged findings are the whole map's findings;
the fallback costs time, never a finding. Findings of a rule are then put in one total order
(:func:`archivist.engine.finding_order`), the same in one process.

The interface
-------------
``run_partitioned(project, rules, executor, parts, step=None, left_out=())``
takes the project *as the partitioned rules read it* (the aligned view,
:meth:`archivist.analysis.context.CheckContext.view`, in the local frame when
the map is in longitude/latitude), the :class:`~archivist.registry.RuleInfo`
of the rules to run, any :class:`concurrent.futures.Executor` (a
``ThreadPoolExecutor``: shapely 2 releases the GIL; a ``ProcessPoolExecutor``;
a ``dask.distributed`` client's ``get_executor()``), the number of partitions,
and optionally a progress step advanced once per partition done. It returns a
:class:`Merged`: per rule id the owned hits (in the project's coordinates, as
the rule yielded them, in partition order; the engine turns them into
findings and orders them), the rule ids to run on the whole map instead, and
the report notes the partitions made. The work of one partition is
:func:`run_partition`, a top-level function of one picklable
:class:`PartitionTask` (the partition's project, rule ids, the grid, its
marked cells and the reach) returning a picklable
:class:`PartitionResult`; it imports the rule modules itself, so it runs in
a thread, a process or a remote worker alike. On ``KeyboardInterrupt`` (or
any error) pending partitions are cancelled before the exception goes on.

What this does not cover: a rule must be registered ``partitioned=True``
only if its findings are decided from what lies within :func:`rule_reach`
of them (or of their own geometry), to the last bit; the trust test cannot
see a rule that reads farther. ``line-dangle`` names the nearest line at any
distance: the link to it is the finding's geometry, so a far one is not
trusted; but an end with no other line within four times the partition's
size reads "no other line on the map" on the partition, a case only a map
with a lone line far from all others can meet. A family runs on partitions
only when every rule of it that runs is partitioned (the engine, see
:func:`archivist.engine.run_rules`): its rules share analyses that a rule
left in the calling process would build again for the whole map. The
families that go are sent together, one task per partition, so that a
partition builds the analyses they share once.
A settle step's tally must count each value from what the partition owning
its point sees exactly as the whole map does (an edge at its first vertex:
the polygons drawing it touch that cell); the map edge near a core is the
extent layer's there, and which edges lie along it is tested within the
tolerance plus 1e-9 of the extent's largest coordinate, the whole extent's
in a partition too.
"""

from __future__ import annotations

import os
from concurrent.futures import FIRST_COMPLETED, Executor, Future, wait
from dataclasses import dataclass, field, fields, replace
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from .collector import collector_paused
from .model import Hit
from .tally import ExactSum, totals

if TYPE_CHECKING:
    from .progress import Step
    from .project import MapProject
    from .registry import RuleInfo

__all__ = [
    "Merged",
    "PartitionResult",
    "PartitionTask",
    "default_jobs",
    "fork_parts",
    "halo_width",
    "make_executor",
    "plan_partitions",
    "rule_reach",
    "run_partition",
    "run_partitioned",
    "stop_executor",
]

# Layers every partition gets whole: the extent is one frame for the whole map.
WHOLE_LAYERS = ("extent",)
# The halo width over the largest feature: a finding as large as the larger features (a polygon left out,
# an overlap along a whole edge) is trusted by its owner whatever its place in the core.
HALO_FEATURES = 3.0
# The quantile of feature sizes taken as "the larger features" (a few huge polygons do not widen every halo;
# a finding larger than the halo allows makes its rule run on the whole map, see the module docstring).
SIZE_QUANTILE = 0.99


def default_jobs() -> int:
    """The cores this process may use (``os.sched_getaffinity`` where the system has it, else ``os.cpu_count()``)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def make_executor(jobs: int, kind: str = "process") -> Executor:
    """An executor of ``jobs`` workers: ``"process"`` (separate processes, the default), ``"thread"``, or
    ``"fork"`` (:class:`ForkPool`: processes forked once the map is loaded, which read it from their parent's
    memory; where the system cannot fork, ``"process"``)."""
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    if kind == "thread":
        return ThreadPoolExecutor(max_workers=jobs, thread_name_prefix="archivist")
    if kind == "fork":
        import multiprocessing

        if "fork" in multiprocessing.get_all_start_methods():
            return ForkPool(jobs)
        kind = "process"
    if kind == "process":
        import multiprocessing

        # fork where the system has it: the workers start with the rule modules already imported
        methods = multiprocessing.get_all_start_methods()
        context = multiprocessing.get_context("fork" if "fork" in methods else None)
        return ProcessPoolExecutor(max_workers=jobs, mp_context=context, initializer=_quiet_worker)
    raise ValueError(f"unknown executor kind {kind!r}")


def stop_executor(executor: Executor) -> None:
    """Stop an executor now: cancel what has not started and end the worker processes (a Ctrl-C, an error)."""
    terminate = getattr(executor, "terminate_workers", None)  # Python 3.14
    if terminate is not None:
        terminate()
        return
    # the worker processes, taken before shutting down: shutdown() lets go of them (Python 3.9 to 3.13)
    procs = list((getattr(executor, "_processes", None) or {}).values())
    executor.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        if proc.is_alive():
            proc.terminate()
    for proc in procs:
        proc.join(timeout=5)


FORK_FEATURES = 20_000
"""Features (of every partitioned layer) from which ``check --jobs N`` runs the partitioned families on N forked
processes rather than the families side by side on threads (measured with tests/benchmarks/bench_jobs.py: below it
the check takes about a second, and forking and merging cost what the partitions save)."""


def fork_parts(project: MapProject, rules: Sequence[RuleInfo], jobs: int) -> int | None:
    """The partitions ``check --jobs N`` cuts the map into: ``jobs`` where the system forks, the map has
    :data:`FORK_FEATURES` features or more and every family of the rules asked that holds a partitioned rule goes
    to the partitions whole; None (threads, no partitions) otherwise.

    A family goes to the partitions only when all its rules that run can (:func:`archivist.engine.run_rules`).
    Where one stays here (the topology family of a map with no extent layer), this process builds that family's
    analyses for the whole map while the workers build them again for their partitions, on the same cores: measured
    with tests/benchmarks/bench_jobs.py at 10^5 polygons and 1 % defects, forked partitions then took 0.80 times
    the time of one thread where threads gave 1.18 times.
    """
    import multiprocessing

    if jobs <= 1 or "fork" not in multiprocessing.get_all_start_methods():
        return None
    runnable = [r for r in rules if all(role in project.layers for role in r.needs)]
    can = {r.id: r.partitions(project) for r in runnable}
    families = {r.family for r in runnable if can[r.id]}
    if not families or any(r.family in families and not can[r.id] for r in runnable):
        return None
    features = sum(len(layer.frame) for role, layer in project.layers.items() if role not in WHOLE_LAYERS)
    return jobs if features >= FORK_FEATURES else None


# What the processes of a ForkPool find in their parent's memory: the projects shared before they were forked.
_SHARED: dict[str, Any] = {}


class ForkPool(Executor):
    """Worker processes forked from this one once the project is in memory; a partition task names it, not carries it.

    :meth:`share` puts a project where a forked process finds it; the
    processes are forked at :meth:`start` or the first task after it (again
    after a project not yet shared), so a task sends only the partition's rows and cells and
    the worker cuts its partition from the project it inherited
    (:func:`run_inherited`). Nothing of the map is pickled on the way out;
    the hits come back pickled. Only where the system forks (not Windows;
    macOS forks, though its system libraries may refuse in a forked child).
    """

    def __init__(self, jobs: int) -> None:
        self.workers = max(1, int(jobs))
        self._pool: Any = None
        self._forked_with: set[str] = set()
        self._mine: set[str] = set()

    def share(self, project: Any) -> str:
        """A key under which the processes forked from now on find ``project``."""
        key = f"{os.getpid()}-{id(project)}"
        _SHARED[key] = project
        self._mine.add(key)
        if key not in self._forked_with and self._pool is not None:  # forked before it was there: fork again
            self._pool.shutdown(wait=True)
            self._pool = None
        return key

    def start(self) -> None:
        """Fork the processes now (else at the first task), so that they start while this one plans their tasks."""
        if self._pool is None:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            release_free_memory()  # before the fork: see there
            # every process holds what is shared now (fork start method)
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("fork"),
                                             initializer=_quiet_worker)
            self._forked_with = set(_SHARED)
            # ProcessPoolExecutor forks every process at its first task: an empty one forks them now
            self._pool.submit(_nothing)

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Future:
        self.start()
        return self._pool.submit(fn, *args, **kwargs)

    def shutdown(self, wait: bool = True, *, cancel_futures: bool = False) -> None:
        pool, self._pool = self._pool, None
        for key in self._mine:
            _SHARED.pop(key, None)
        self._mine.clear()
        if pool is not None:
            if cancel_futures or not wait:
                stop_executor(pool)
            else:
                pool.shutdown(wait=True)


class Aside:
    """``fn(*args)`` run in one process forked from this one, while this one goes on with other work.

    The process finds ``fn`` and its arguments in the memory it inherited
    (nothing is pickled on the way out; the result comes back pickled), so
    it suits a task over large objects already in memory, such as writing a
    file from them. Where the system does not fork, the forked process dies,
    or ``fork`` is false (a task too small to be worth a process), the task
    runs here when :meth:`result` asks for it. Used as a
    context manager: leaving it on an error or a Ctrl-C ends the process.
    """

    def __init__(self, fn: Any, *args: Any, fork: bool = True) -> None:
        import multiprocessing

        self._task = (fn, args)
        self._pool: ForkPool | None = None
        self._future: Future | None = None
        if fork and "fork" in multiprocessing.get_all_start_methods():
            self._pool = ForkPool(1)
            self._future = self._pool.submit(_run_shared, self._pool.share(self._task))

    def result(self) -> Any:
        """The task's result (its exception raised here); run here when it could not run aside."""
        from concurrent.futures.process import BrokenProcessPool

        if self._future is not None:
            try:
                return self._future.result()
            except BrokenProcessPool:  # the forked process died (killed, or a library refused to run forked)
                pass
            finally:
                self.close()
        fn, args = self._task
        return fn(*args)

    def close(self, stop: bool = False) -> None:
        pool, self._pool, self._future = self._pool, None, None
        if pool is not None:
            pool.shutdown(wait=not stop, cancel_futures=stop)

    def __enter__(self) -> "Aside":
        return self

    def __exit__(self, kind: Any, *_: Any) -> None:
        self.close(stop=kind is not None)


def release_free_memory() -> None:
    """Give the memory pages the C allocator holds free back to the system (glibc's ``malloc_trim(0)``), before a fork.

    After a fork the parent and its workers share every page of the parent
    until one of them writes to it; the first write copies the page. The
    heap of a loaded map holds many pages free (the reader's buffers, the
    alignment's temporaries), and a worker's allocations land in them: each
    is then copied from the parent only to be overwritten. Released pages
    are given back zeroed on first use, which the kernel does faster than a
    copy: on the 10^5-polygon, 1 % benchmark map each of two forked
    partitions spent 0.34 to 0.58 s of system time, 0.27 to 0.33 s after
    this (about 65 000 page faults each either way;
    ``tests/benchmarks/bench_jobs.py --timeline`` shows the partitions'
    times). Only with glibc (Linux); elsewhere nothing is done. The pages
    are only released, never written: nothing held changes.
    """
    try:
        import ctypes

        libc = ctypes.CDLL(None)
        trim = libc.malloc_trim
    except (OSError, AttributeError):  # not glibc (musl, macOS): no malloc_trim
        return
    trim.argtypes = [ctypes.c_size_t]
    trim.restype = ctypes.c_int
    trim(0)


def _run_shared(key: str) -> Any:
    """Run the task a :class:`ForkPool` shared under ``key`` (``(fn, args)``), in a process forked with it."""
    fn, args = _SHARED[key]
    return fn(*args)


def _nothing() -> None:
    """A task that does nothing (it makes a pool start its processes)."""


def _quiet_worker() -> None:
    """A worker process leaves Ctrl-C to its parent, which cancels the work and stops it."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


# ---------------------------------------------------------------- the halo


def rule_reach(project: MapProject) -> float:
    """The farthest, in the project's units, a partitioned rule looks from a place it judges.

    The tolerance sets every search of the topology and linework rules; the
    farthest is the first radius of the search for the line nearest a free end
    (10 tolerances, ``line-dangle``), ahead of the junction zones of
    ``line-duplicate`` (5 tolerances) and the closing of the map extent (1).
    A sliver is judged by its own width (``sliver_width_mm`` on the ground),
    a sample by the polygon it falls in. Twice the largest, for margin.
    """
    from .analysis.polygons import sliver_thresholds

    reach = 10.0 * max(float(project.config.tolerance), 0.0)
    try:
        reach = max(reach, float(sliver_thresholds(project)[1]))
    except Exception:  # a scale or unit the sliver width cannot be read from: the tolerance alone  # noqa: BLE001
        pass
    return 2.0 * reach


def halo_width(project: MapProject, reach: float | None = None) -> float:
    """The halo width: the reach of the rules plus ``HALO_FEATURES`` times the size of the larger features.

    The size of a feature is the diagonal of its bounds; "the larger
    features" is the ``SIZE_QUANTILE`` quantile over every partitioned layer.
    A finding whose place lies in a partition's core is trusted there (see
    the module docstring) when it reaches no farther than the halo less the
    rules' reach from that place: up to three such features, which covers a
    polygon left out (a gap the size of the polygon), an overlap along a
    whole edge, a line's free end and the line it fails to reach. Larger
    findings make their rule run on the whole map.
    """
    import shapely

    from .analysis.arrays import present

    roles = _partitioned_layers(project)
    boxes = {role: shapely.bounds(project.layers[role].geometry) for role in roles}
    return _halo(project, reach, [boxes[r][present(project.layers[r].geometry)] for r in roles])


def _halo(project: MapProject, reach: float | None, boxes: list[np.ndarray]) -> float:
    """:func:`halo_width` from the bounds of the present features of every partitioned layer."""
    reach = rule_reach(project) if reach is None else reach
    sizes = [np.hypot(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1]) for b in boxes if len(b)]
    size = float(np.quantile(np.concatenate(sizes), SIZE_QUANTILE)) if sizes else 0.0
    return reach + HALO_FEATURES * size


# ---------------------------------------------------------------- the partitions


@dataclass(frozen=True)
class Grid:
    """Square cells over the partitioned layers: the unit of ownership and of the halo.

    Cells are at least half the halo wide and at most 1024 to a side of the
    map; ``reach`` is the halo in whole cells, rounded up, plus one.
    """

    x0: float
    y0: float
    cell: float
    nx: int
    ny: int
    reach: int

    @classmethod
    def over(cls, bounds: np.ndarray, halo: float) -> Grid:
        x0, y0, x1, y1 = (float(v) for v in bounds)
        span = max(x1 - x0, y1 - y0, 1e-9)
        cell = max(halo / 2.0, span / 1024.0, 1e-9)
        return cls(x0, y0, cell, int((x1 - x0) // cell) + 1, int((y1 - y0) // cell) + 1, int(np.ceil(halo / cell)) + 1)

    def ij(self, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The cell column and row of each point (points off the grid go to its edge cells)."""
        i = np.clip(np.floor((np.asarray(x, dtype=float) - self.x0) / self.cell), 0, self.nx - 1).astype(np.int64)
        j = np.clip(np.floor((np.asarray(y, dtype=float) - self.y0) / self.cell), 0, self.ny - 1).astype(np.int64)
        return i, j

    def boxes(self, bounds: np.ndarray) -> np.ndarray:
        """The cell range (i0, j0, i1, j1, inclusive) of each box (xmin, ymin, xmax, ymax)."""
        i0, j0 = self.ij(bounds[:, 0], bounds[:, 1])
        i1, j1 = self.ij(bounds[:, 2], bounds[:, 3])
        return np.c_[i0, j0, i1, j1]


def _table(mask: np.ndarray) -> np.ndarray:
    """A summed-area table of a cell mask (rows j, columns i), one row and column of zeros ahead."""
    sat = np.zeros((mask.shape[0] + 1, mask.shape[1] + 1), dtype=np.int64)
    sat[1:, 1:] = mask.astype(np.int64).cumsum(0).cumsum(1)
    return sat


def _marked_in(sat: np.ndarray, r: np.ndarray) -> np.ndarray:
    """How many marked cells each cell range (i0, j0, i1, j1) holds."""
    return sat[r[:, 3] + 1, r[:, 2] + 1] - sat[r[:, 1], r[:, 2] + 1] - sat[r[:, 3] + 1, r[:, 0]] + sat[r[:, 1], r[:, 0]]


@dataclass(frozen=True)
class Partition:
    """One partition: its cells (``core``), the cells within its halo (``marked``), and per layer the rows it holds."""

    index: int
    core: np.ndarray  # bool (ny, nx): the cells it owns
    marked: np.ndarray  # bool (ny, nx): the cells within the halo of its core; every feature over them is in ``rows``
    rows: dict[str, np.ndarray]  # per partitioned layer, sorted rows: the features whose bounds touch a marked cell
    region: Any = None  # the marked cells as one polygon


@dataclass(frozen=True)
class Plan:
    """The partitions of a project and the owner of every cell."""

    grid: Grid
    owner: np.ndarray  # int (ny, nx): the partition owning each cell
    partitions: tuple[Partition, ...]
    halo: float
    reach: float

    def owners(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The partition owning each place: the owner of its cell (the first partition for a place with no coordinates)."""
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        out = np.zeros(len(x), dtype=np.int64)
        ok = np.isfinite(x) & np.isfinite(y)
        if ok.any():
            i, j = self.grid.ij(x[ok], y[ok])
            out[ok] = self.owner[j, i]
        return out


def _partitioned_layers(project: MapProject) -> list[str]:
    return [role for role, layer in project.layers.items() if role not in WHOLE_LAYERS and len(layer.frame)]


def plan_partitions(project: MapProject, parts: int, halo: float | None = None, reach: float | None = None) -> Plan:
    """Cut ``project`` into ``parts`` partitions by Hilbert distance, each with its halo (see the module docstring)."""
    import geopandas as gpd
    import shapely

    from .analysis.arrays import present

    reach = rule_reach(project) if reach is None else reach
    roles = _partitioned_layers(project)
    bounds = {role: shapely.bounds(project.layers[role].geometry) for role in roles}
    drawn = {role: present(project.layers[role].geometry) for role in roles}
    halo = _halo(project, reach, [bounds[r][drawn[r]] for r in roles]) if halo is None else halo
    every = np.concatenate([bounds[r][drawn[r]] for r in roles] or [np.zeros((0, 4))])
    # the grid spans the whole layers too (an extent reaching past the features)
    spans = [every] + [shapely.bounds(layer.geometry)[present(layer.geometry)] for role, layer in project.layers.items()
                       if role in WHOLE_LAYERS]
    allb = np.concatenate(spans)
    total = ((allb[:, 0].min(), allb[:, 1].min(), allb[:, 2].max(), allb[:, 3].max()) if len(allb) else (0.0, 0.0, 1.0, 1.0))
    grid = Grid.over(np.array(total), halo)
    # features per cell, by the centre of their bounds
    weight = np.zeros((grid.ny, grid.nx), dtype=np.int64)
    if len(every):
        ci, cj = grid.ij((every[:, 0] + every[:, 2]) / 2.0, (every[:, 1] + every[:, 3]) / 2.0)
        np.add.at(weight, (cj, ci), 1)
    # every cell in Hilbert order over the total bounds; contiguous runs of about equal feature count
    jj, ii = np.mgrid[0:grid.ny, 0:grid.nx]
    centres = gpd.GeoSeries(shapely.points(grid.x0 + (ii.ravel() + 0.5) * grid.cell, grid.y0 + (jj.ravel() + 0.5) * grid.cell))
    order = np.argsort(np.asarray(centres.hilbert_distance(total_bounds=total)), kind="stable")
    parts = max(1, min(int(parts), int(weight.sum()) or 1))
    before = np.cumsum(weight.ravel()[order]) - weight.ravel()[order]  # features ahead of each cell along the curve
    flat = np.empty(grid.nx * grid.ny, dtype=np.int64)
    flat[order] = np.minimum((before * parts) // max(int(weight.sum()), 1), parts - 1)
    owner = flat.reshape(grid.ny, grid.nx)
    ranges = {role: grid.boxes(bounds[role][drawn[role]]) for role in roles}
    partitions = []
    r = grid.reach
    # the cells within r cells of each cell, for growing a core by the halo through a summed-area table
    around = np.c_[np.maximum(ii.ravel() - r, 0), np.maximum(jj.ravel() - r, 0),
                   np.minimum(ii.ravel() + r, grid.nx - 1), np.minimum(jj.ravel() + r, grid.ny - 1)]
    by_cell = {role: _CellIndex(grid, ranges[role]) for role in roles}
    for k in range(parts):
        core = owner == k
        marked = (_marked_in(_table(core), around) > 0).reshape(grid.ny, grid.nx)
        rows: dict[str, np.ndarray] = {}
        sat: np.ndarray | None = None
        for role in roles:
            index = by_cell[role]
            if len(index.large):  # the few features spanning more than two cells a side: their ranges against the cells
                sat = _table(marked) if sat is None else sat
                large = index.large[_marked_in(sat, ranges[role][index.large]) > 0]
            else:
                large = np.zeros(0, dtype=np.int64)
            found = index.features_on(marked, large)  # sorted, once each
            here = np.flatnonzero(drawn[role])[found]
            if k == 0 and not drawn[role].all():  # features with no geometry: the first partition's
                here = np.union1d(here, np.flatnonzero(~drawn[role]))
            rows[role] = here
        partitions.append(Partition(k, core, marked, rows, _cells_polygon(grid, marked)))
    return Plan(grid, owner, tuple(partitions), float(halo), float(reach))


class _CellIndex:
    """The features of a layer by the cells their boxes cover, for the features spanning at most two cells a side.

    A partition holds the features whose cell range meets its marked cells.
    Asked of every feature for every partition, that was partitions x
    features (290 partitions of 14 million features on a 4 x 10^6-polygon
    map: minutes before the first task went out); from the cells, each
    partition reads only the features of its own marked cells.
    ``large``: the features (positions in ``ranges``) spanning more cells,
    left to the caller.
    """

    def __init__(self, grid: Grid, ranges: np.ndarray) -> None:
        si = ranges[:, 2] - ranges[:, 0] + 1
        sj = ranges[:, 3] - ranges[:, 1] + 1
        small = (si <= 2) & (sj <= 2)
        self.large = np.flatnonzero(~small)
        feats, cells = [], []
        for di, dj in ((0, 0), (1, 0), (0, 1), (1, 1)):  # each cell of a range of up to 2 x 2
            f = np.flatnonzero(small & (di < si) & (dj < sj))
            feats.append(f)
            cells.append((ranges[f, 1] + dj) * grid.nx + ranges[f, 0] + di)
        feat, cell = np.concatenate(feats), np.concatenate(cells)
        order = np.argsort(cell, kind="stable")
        self.n = len(ranges)
        self.feature = feat[order]
        self.start = np.searchsorted(cell[order], np.arange(grid.nx * grid.ny + 1))

    def features_on(self, marked: np.ndarray, also: np.ndarray | None = None) -> np.ndarray:
        """The features (positions in the ranges, sorted, once each) with a cell among the ``marked`` ones, and
        those of ``also`` (positions the caller found: the large features)."""
        # per sorted (feature, cell) pair, whether its cell is marked: one pass over the pairs, no sort
        on = np.repeat(marked.ravel(), np.diff(self.start))
        hit = np.zeros(self.n, dtype=bool)
        hit[self.feature[on]] = True
        if also is not None:
            hit[also] = True
        return np.flatnonzero(hit)


def _cells_polygon(grid: Grid, marked: np.ndarray) -> Any:
    """Marked cells as one polygon: a rectangle per run of marked cells along a row, joined."""
    import shapely

    padded = np.zeros((grid.ny, grid.nx + 2), dtype=np.int8)
    padded[:, 1:-1] = marked
    step = np.diff(padded, axis=1)
    rs, cs = np.nonzero(step == 1)
    re, ce = np.nonzero(step == -1)
    order_s, order_e = np.lexsort((cs, rs)), np.lexsort((ce, re))
    rows, c0, c1 = rs[order_s], cs[order_s], ce[order_e]
    boxes = shapely.box(grid.x0 + c0 * grid.cell, grid.y0 + rows * grid.cell,
                        grid.x0 + c1 * grid.cell, grid.y0 + (rows + 1) * grid.cell)
    return shapely.union_all(boxes) if len(boxes) else None


def sub_project(project: MapProject, partition: Partition) -> MapProject:
    """The project of one partition: its core and halo rows of each partitioned layer; other layers and tables whole."""
    layers = {role: (layer.take(partition.rows[role]) if role in partition.rows else layer)
              for role, layer in project.layers.items()}
    # the extent stays whole: a partition's gaps are traced within its region, measured against the whole extent
    # (archivist.analysis.coverage.analyse_coverage)
    return replace(project, layers=layers, problems=[], notes=[])


# ---------------------------------------------------------------- the work of one partition


@dataclass(frozen=True)
class PartitionTask:
    """Everything one partition's work needs; picklable."""

    index: int
    project: MapProject
    rules: tuple[str, ...]
    grid: Grid
    marked: np.ndarray  # the cells within the halo of the partition's core (see Partition)
    reach: float
    left_out: tuple[str, ...] = ()
    core: np.ndarray | None = None  # the cells it owns: the values of the rules' tallies it counts (None: none)
    scale: float | None = None  # the whole map's coverage.map_scale (None: the partition's own)


@dataclass(frozen=True)
class PartitionResult:
    """What one partition found; picklable.

    ``hits``: (rule id, hit, x, y, trusted) for every hit, ``x``/``y`` its
    representative point (NaN when it has none). ``failed``: rules GEOS
    stopped here. ``notes``: the notes the partition's analyses made.
    ``tallies``: (rule id, name, exact sum) of the values of each settled
    rule's tallies whose point lies in the partition's core (see
    :class:`archivist.registry.Settle`).
    """

    index: int
    hits: tuple[tuple[str, Hit, float, float, bool], ...]
    failed: tuple[str, ...]
    notes: tuple[str, ...]
    tallies: tuple[tuple[str, str, ExactSum], ...] = ()

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        """Pickled with the hits' geometries as one array of WKB, written and read by shapely in one call each.

        A shapely geometry pickles as its own WKB, one Python call each way:
        the 11 330 hits of one of two partitions of a 10^5-polygon map with 1 %
        defects took 0.1 s to read back in the parent, which waits for it.
        WKB holds every coordinate's 64 bits, so the geometries come back the
        same to the last bit, as one at a time (with their SRID, as shapely
        pickles them).
        """
        import shapely

        geoms = np.array([h.geometry for _, h, _, _, _ in self.hits], dtype=object)
        wkb = shapely.to_wkb(geoms, include_srid=True) if len(geoms) else geoms
        rows = tuple((rid, _hit_fields(hit), x, y, t) for rid, hit, x, y, t in self.hits)
        return _result_from, (self.index, rows, wkb, self.failed, self.notes, self.tallies)


_HIT_FIELDS = tuple(f.name for f in fields(Hit) if f.name != "geometry")


def _hit_fields(hit: Hit) -> tuple[Any, ...]:
    return tuple(getattr(hit, name) for name in _HIT_FIELDS)


def _result_from(index: int, rows: tuple[Any, ...], wkb: np.ndarray, failed: tuple[str, ...], notes: tuple[str, ...],
                 tallies: tuple[Any, ...]) -> PartitionResult:
    """A :class:`PartitionResult` from what its ``__reduce__`` wrote."""
    import shapely

    geoms = shapely.from_wkb(wkb) if len(wkb) else wkb
    hits = tuple((rid, Hit(**dict(zip(_HIT_FIELDS, values)), geometry=g), x, y, t)
                 for (rid, values, x, y, t), g in zip(rows, geoms))
    return PartitionResult(index, hits, failed, notes, tallies)


def places_of(hits: Sequence[Hit]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each hit's representative point and the box around its geometry and that point, for all hits at once.

    The point is the one its finding takes (:func:`archivist.analysis.arrays.hit_points`).
    Returns x, y (NaN where the hit has neither a point nor a geometry that
    is not empty) and the boxes (xmin, ymin, xmax, ymax: the geometry's
    bounds grown to take in the point; NaN where there is neither).
    """
    import shapely

    from .analysis.arrays import hit_points

    geoms, shown, xs, ys = hit_points(hits)
    boxes = np.full((len(hits), 4), np.nan)
    if shown.any():
        boxes[shown] = shapely.bounds(geoms[shown])
    boxes[:, 0], boxes[:, 1] = np.fmin(boxes[:, 0], xs), np.fmin(boxes[:, 1], ys)
    boxes[:, 2], boxes[:, 3] = np.fmax(boxes[:, 2], xs), np.fmax(boxes[:, 3], ys)
    return xs, ys, boxes


def trusted(grid: Grid, marked: np.ndarray, boxes: np.ndarray, reach: float) -> np.ndarray:
    """Whether each box (xmin, ymin, xmax, ymax; NaN for none), grown by ``reach``, lies on marked cells only.

    The grid spans every feature of the map (:func:`plan_partitions`), so
    beyond it the whole map holds nothing, as the partition does: what of a
    box lies off the grid needs no cell (a finding along the map edge, whose
    reach runs off the map, is trusted by the partition holding the cells
    along it).
    """
    ok = np.isfinite(boxes).all(axis=1)
    if not ok.any():
        return ok
    b = boxes[ok] + np.array([-reach, -reach, reach, reach])
    r = grid.boxes(b)  # the cells of the part of each box on the grid
    cells = (r[:, 2] - r[:, 0] + 1) * (r[:, 3] - r[:, 1] + 1)
    out = ok.copy()
    out[ok] = _marked_in(_table(marked), r) == cells
    return out


@dataclass(frozen=True)
class InheritedTask:
    """A partition task for a :class:`ForkPool` process: the key of the project it inherited and the partition."""

    source: str
    part: Partition
    rules: tuple[str, ...]
    grid: Grid
    reach: float
    left_out: tuple[str, ...] = ()
    scale: float | None = None


def run_inherited(task: InheritedTask) -> PartitionResult:
    """:func:`run_partition` of the partition ``task`` names, cut from the project this process inherited."""
    project = _SHARED.get(task.source)
    if project is None:
        raise RuntimeError(f"this worker process was not forked with the project {task.source}")
    part = task.part
    return run_partition(PartitionTask(part.index, sub_project(project, part), task.rules, task.grid, part.marked,
                                       task.reach, task.left_out, part.core, task.scale))


@collector_paused()
def run_partition(task: PartitionTask) -> PartitionResult:
    """Run ``task.rules`` on one partition's project; every hit with its place and whether the partition can trust it."""
    from shapely.errors import GEOSException

    from .analysis.alignment import Alignment
    from .analysis.context import PART_KEY, CheckContext
    from .analysis.coverage import CannotVouch
    from .registry import get_rule

    project = task.project
    ctx = CheckContext(project)
    # the layers are already as the checks across layers see them (the caller's aligned view)
    ctx._cache["analysis.alignment"] = Alignment(layers=dict(project.layers), left_out=task.left_out)
    ctx._cache["analysis.view"] = project
    ctx._cache[PART_KEY] = part_of_map(task)  # the coverage of a partition traces its gaps within its region
    found: list[tuple[str, Hit]] = []
    failed: list[str] = []
    tallies: list[tuple[str, str, ExactSum]] = []
    for rid in task.rules:
        info = get_rule(rid)
        try:
            found.extend((rid, hit) for hit in (info.func(project, ctx) or ()))
            if info.settle is not None:
                owned = _owned_by(task.grid, task.core, task.index == 0)
                tallies += [(rid, name, t.total(owned)) for name, t in info.settle.tally(project, ctx).items()]
        except (GEOSException, CannotVouch):  # GEOS stopped, or a gap near the core runs past the region
            failed.append(rid)
            found = [(r, h) for r, h in found if r != rid]
            tallies = [t for t in tallies if t[0] != rid]
    xs, ys, boxes = places_of([h for _, h in found])
    trust = trusted(task.grid, task.marked, boxes, task.reach) & np.isfinite(xs)
    hits = tuple((rid, hit, x, y, t) for (rid, hit), x, y, t in zip(found, xs.tolist(), ys.tolist(), trust.tolist()))
    return PartitionResult(task.index, hits, tuple(failed), tuple(ctx.notes), tuple(tallies))


def part_of_map(task: PartitionTask) -> Any:
    """The :class:`~archivist.analysis.coverage.PartOfMap` of a partition: its marked cells, its core grown by the
    rules' reach, the whole map's scale."""
    import shapely

    from .analysis.coverage import PartOfMap, map_scale

    grid = task.grid
    core = task.core if task.core is not None else np.zeros_like(task.marked)
    owned = _cells_polygon(grid, core)
    grown = shapely.buffer(owned, task.reach, join_style="mitre") if owned is not None else shapely.Polygon()
    region = _cells_polygon(grid, task.marked)
    # the region's edge inside the grid: on the grid's outer edge the map holds nothing beyond (see trusted())
    frame = shapely.boundary(shapely.box(grid.x0, grid.y0, grid.x0 + grid.nx * grid.cell, grid.y0 + grid.ny * grid.cell))
    edge = shapely.difference(shapely.boundary(region), frame) if region is not None else shapely.LineString()
    scale = task.scale if task.scale is not None else map_scale(task.project)  # the whole map's when given
    return PartOfMap(region, edge, grown, float(scale))


def _owned_by(grid: Grid, core: np.ndarray | None, first: bool) -> Any:
    """Whether each point lies in a cell of ``core``, as :meth:`Plan.owners` reads them (a point with no
    coordinates: ``first``, the first partition's)."""

    def owned(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        ok = np.isfinite(x) & np.isfinite(y)
        out = ~ok if first else np.zeros(len(x), dtype=bool)
        if core is not None and ok.any():
            i, j = grid.ij(x[ok], y[ok])
            out[ok] = core[j, i]
        return out

    return owned


# ---------------------------------------------------------------- the merge


@dataclass(frozen=True)
class Merged:
    """The partitions' answer: per rule the owned hits; the rules to run on the whole map instead; the notes."""

    hits: dict[str, list[Hit]] = field(default_factory=dict)
    whole: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def _finding(hit: Hit) -> tuple:
    """What makes two hits the same finding for the merge's cross-check: the rule's sentence, layer, features
    and severity (the measure, place and geometry a partition computes may differ from its owner's in the last
    bits: GEOS's overlay of a line against fewer polygons nodes it differently, 3e-7 m in 62 m seen at 10^5)."""
    return (hit.message, hit.layer, tuple(str(f) for f in hit.features), None if hit.severity is None else hit.severity.value)


def merge(plan: Plan, rules: Sequence[str], results: Sequence[PartitionResult]) -> Merged:
    """Each hit once, from the partition owning its place; rules whose partitions disagree or cannot judge go whole."""
    results = sorted(results, key=lambda r: r.index)
    whole: set[str] = set()
    for res in results:
        whole.update(res.failed)
    owned: dict[int, dict[str, list[tuple[Hit, bool]]]] = {}
    elsewhere: list[tuple[int, str, Hit]] = []  # trusted hits a partition does not own: its owner must have them
    for res in results:
        if not res.hits:
            continue
        xy = np.array([(h[2], h[3]) for h in res.hits], dtype=float)
        owner = plan.owners(xy[:, 0], xy[:, 1])
        mine = owned.setdefault(res.index, {})
        for (rid, hit, x, y, trusted), o in zip(res.hits, owner.tolist()):
            if o == res.index:
                mine.setdefault(rid, []).append((hit, trusted and bool(np.isfinite(x))))
            elif trusted:
                elsewhere.append((o, rid, hit))
    for per in owned.values():
        for rid, hits in per.items():
            if not all(t for _, t in hits):
                whole.add(rid)
    keys: dict[tuple[int, str], set] = {}
    for o, rid, hit in elsewhere:
        if rid in whole:
            continue
        have = keys.get((o, rid))
        if have is None:
            have = keys[(o, rid)] = {_finding(h) for h, _ in owned.get(o, {}).get(rid, [])}
        if _finding(hit) not in have:  # the owner lacks a finding another partition can vouch for
            whole.add(rid)
    out: dict[str, list[Hit]] = {rid: [] for rid in rules if rid not in whole}
    for res in results:
        for rid, hits in owned.get(res.index, {}).items():
            if rid in out:
                out[rid].extend(h for h, _ in hits)
    notes: list[str] = []
    for res in results:
        notes += [n for n in res.notes if n not in notes]
    return Merged(out, tuple(r for r in rules if r in whole), tuple(notes))


def run_partitioned(
    project: MapProject,
    rules: Sequence[RuleInfo],
    executor: Executor,
    parts: int,
    step: Step | None = None,
    left_out: tuple[str, ...] = (),
    plan: Plan | None = None,
) -> Merged:
    """Run ``rules`` on ``parts`` partitions of ``project`` through ``executor`` and merge (see the module docstring).

    ``project`` is the project as the rules read it (the aligned view, in the
    local frame for a map in longitude/latitude); ``left_out`` the roles the
    alignment left out. ``step`` advances once per partition done.
    """
    return Sent(project, rules, executor, parts, left_out, plan).merged(step)


class Sent:
    """Partitions sent to an executor: the first wave goes out at once, :meth:`merged` waits for the rest and merges.

    So the calling process can do other work (the families that run on the
    whole map) while the workers run the partitions. Tasks go in waves: two
    per worker, the next one as one ends, so that the partitions' projects
    (each a copy of its rows, pickled on the way) are not all made and held
    at once. :meth:`cancel` drops what has not ended (an error, Ctrl-C).
    """

    def __init__(self, project: MapProject, rules: Sequence[RuleInfo], executor: Executor, parts: int,
                 left_out: tuple[str, ...] = (), plan: Plan | None = None) -> None:
        from .analysis.coverage import map_scale

        self.project, self.executor, self.left_out = project, executor, left_out
        # a settled rule the partitions cannot judge on this map goes whole before anything is sent
        self.ahead = {info.id for info in rules if info.settle is not None and info.settle.partitions_can is not None
                      and not info.settle.partitions_can(project)}
        self.asked = tuple(info.id for info in rules)
        self.rules = [info for info in rules if info.id not in self.ahead]
        self.ids = tuple(info.id for info in self.rules)
        self.key = None
        self.plan = (plan or plan_partitions(project, parts)) if self.ids else None
        # the whole map's scale: a partition's noise floor is the whole map's (archivist.analysis.coverage.map_scale)
        self.scale = map_scale(project) if self.ids and "units" in project.layers else None
        if self.ids and isinstance(executor, ForkPool):
            # forked once the plan is made: every page this process writes after the fork is copied first
            self.key = executor.share(project)
            executor.start()
        self.window = 2 * max(1, int(getattr(executor, "workers", 0) or getattr(executor, "_max_workers", 0) or default_jobs()))
        self.queue = list(self.plan.partitions) if self.plan is not None else []
        self.running: set[Future] = set()
        try:
            self._fill()
        except BaseException:
            self.cancel()
            raise

    def _submit(self, part: Partition) -> Future:
        plan = self.plan
        assert plan is not None
        if self.key is not None:
            return self.executor.submit(run_inherited, InheritedTask(self.key, part, self.ids, plan.grid, plan.reach,
                                                                     self.left_out, self.scale))
        return self.executor.submit(run_partition, PartitionTask(part.index, sub_project(self.project, part), self.ids,
                                                                 plan.grid, part.marked, plan.reach, self.left_out, part.core,
                                                                 self.scale))

    def _fill(self) -> None:
        while self.queue and len(self.running) < self.window:
            self.running.add(self._submit(self.queue.pop(0)))

    def merged(self, step: Step | None = None) -> Merged:
        """Wait for every partition (``step`` advances once per partition done) and merge their findings."""
        if self.plan is None:
            return Merged(whole=self.asked)
        results: list[PartitionResult] = []
        try:
            while self.queue or self.running:
                self._fill()
                # a timed wait: Ctrl-C reaches this thread at once (an untimed one holds it until a partition ends)
                done, self.running = wait(self.running, timeout=0.1, return_when=FIRST_COMPLETED)
                for fut in done:
                    results.append(fut.result())
                    if step is not None:
                        step.advance()
        except BaseException:
            self.cancel()
            raise
        merged = settle(self.project, self.rules, merge(self.plan, self.ids, results), results)
        return replace(merged, whole=tuple(r for r in self.asked if r in self.ahead or r in merged.whole))

    def cancel(self) -> None:
        """Cancel every partition not yet ended and send no more."""
        self.queue.clear()
        for fut in self.running:
            fut.cancel()


def settle(project: MapProject, rules: Sequence[RuleInfo], merged: Merged, results: Sequence[PartitionResult]) -> Merged:
    """The merged hits of each settled rule finished from the partitions' tallies (:class:`archivist.registry.Settle`).

    Each value of a tally was counted by the one partition owning its point,
    and the counts are exact sums (:class:`archivist.tally.ExactSum`), so the
    totals are the whole map's to the last bit, and ``finish`` (which does
    not depend on the order of the hits) gives what it gives in one process.
    A rule whose ``finish`` GEOS stops goes to the whole map.
    """
    from shapely.errors import GEOSException

    hits = dict(merged.hits)
    whole = list(merged.whole)
    for info in rules:
        if info.settle is None or info.id not in hits:
            continue
        sums: dict[str, ExactSum] = {}
        for res in sorted(results, key=lambda r: r.index):
            for rid, name, total in res.tallies:
                if rid == info.id:
                    sums[name] = sums.get(name, ExactSum()) + total
        try:
            hits[info.id] = info.settle.finish(project, list(hits[info.id]), totals(sums))
        except GEOSException:
            del hits[info.id]
            whole.append(info.id)
    return replace(merged, hits=hits, whole=tuple(whole))
