"""The expensive rules on spatial partitions of the map, run side by side and merged into one answer.

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

How the map is cut
------------------
The features of every partitioned layer (every layer of the project but the
extent, which every partition gets whole; tables go whole too) are put in one
order by the Hilbert distance of the centre of their bounds over the total
bounds of those layers (:meth:`geopandas.GeoSeries.hilbert_distance`), and the
order is cut into ``parts`` contiguous ranges of about equal feature count.
A partition's *core* is the features of its range; its *halo* is every
feature of another range within the halo width ``h`` of a core feature
(:func:`halo_width`). A partition's project holds its core and its halo,
rows in their original order, so every index-ordered step of a rule sees the
same order as on the whole map. Features with no geometry go to the core of
the first partition.

How findings are merged
-----------------------
A finding's place is its representative point, the ``x``, ``y`` the report
gives (the hit's own point, else its geometry's point, else a point on its
surface; :func:`archivist.engine.to_finding`). It is *owned* by the partition
holding the feature nearest to that point (one spatial index over every
feature of the partitioned layers, in the calling process), so each finding
is reported once, by one partition.

A finding is *trusted* by a partition when everything it rests on lies within
``h`` of that partition's core: with ``d0`` the distance from its point to
the nearest core feature, ``diag`` the diagonal of its geometry's bounds and
``reach`` the farthest a partitioned rule looks from a place it judges
(:func:`rule_reach`), ``d0 + diag + reach <= h``. Every point of such a
finding's geometry, and every point a rule looked at to decide it, is then
within ``h`` of a core feature, so every feature touching those points is in
the partition (the halo holds every feature within ``h`` of the core): the
rule sees there exactly what it sees on the whole map, and gives the same
hit. The merge keeps each partition's owned findings, and runs a rule on the
whole map instead (its answer replaces the partitions') when:

- a finding owned by a partition is not trusted by it (a finding larger than
  the halo allows: a gap as wide as a quarter of the map), or has no place;
- a trusted finding of one partition is missing from its owner's findings
  (a cross-check: the two saw different maps where both should see all);
- GEOS stopped the rule in a partition.

So the merged findings are the whole map's findings; the fallback costs time,
never a finding.

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
:class:`PartitionTask` (the partition's project, rule ids, its core
geometries, the halo width and reach) returning a picklable
:class:`PartitionResult`; it imports the rule modules itself, so it runs in
a thread, a process or a remote worker alike. On ``KeyboardInterrupt`` (or
any error) pending partitions are cancelled before the exception goes on.

What this does not cover: a rule must be registered ``partitioned=True``
only if its findings are decided from what lies within :func:`rule_reach`
of them (or of their own geometry); the trust test cannot see a rule that
reads farther.
"""

from __future__ import annotations

import os
from concurrent.futures import Executor, Future, as_completed
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from .model import Hit

if TYPE_CHECKING:
    from .progress import Step
    from .project import MapProject
    from .registry import RuleInfo

__all__ = [
    "Merged",
    "PartitionResult",
    "PartitionTask",
    "default_jobs",
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
    """An executor of ``jobs`` workers: ``"process"`` (separate processes, the default) or ``"thread"``."""
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    if kind == "thread":
        return ThreadPoolExecutor(max_workers=jobs, thread_name_prefix="archivist")
    if kind == "process":
        import multiprocessing

        # fork where the system has it: the workers start with the rule modules already imported
        methods = multiprocessing.get_all_start_methods()
        context = multiprocessing.get_context("fork" if "fork" in methods else None)
        return ProcessPoolExecutor(max_workers=jobs, mp_context=context, initializer=_quiet_worker)
    raise ValueError(f"unknown executor kind {kind!r}")


def stop_executor(executor: Executor) -> None:
    """Stop an executor now: cancel what has not started and end the worker processes (a Ctrl-C, an error)."""
    executor.shutdown(wait=False, cancel_futures=True)
    terminate = getattr(executor, "terminate_workers", None)  # Python 3.14
    if terminate is not None:
        terminate()
        return
    for proc in list((getattr(executor, "_processes", None) or {}).values()):
        if proc.is_alive():
            proc.terminate()
    for proc in list((getattr(executor, "_processes", None) or {}).values()):
        proc.join(timeout=5)


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


def _present(geoms: np.ndarray) -> np.ndarray:
    import shapely

    return ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))


def halo_width(project: MapProject, reach: float | None = None) -> float:
    """The halo width: the reach of the rules plus ``HALO_FEATURES`` times the size of the larger features.

    The size of a feature is the diagonal of its bounds; "the larger
    features" is the ``SIZE_QUANTILE`` quantile over every partitioned layer.
    A finding trusted with this halo (see the module docstring) can be as
    large as ``HALO_FEATURES - 1`` such features, with its place up to one
    feature from the nearest core feature: a polygon left out (a gap the size
    of the polygon), an overlap along a whole edge, a line's free end and the
    line it fails to reach.
    """
    import shapely

    reach = rule_reach(project) if reach is None else reach
    sizes = []
    for role, layer in project.layers.items():
        if role in WHOLE_LAYERS or not len(layer.frame):
            continue
        g = layer.geometry
        g = g[_present(g)]
        if len(g):
            b = shapely.bounds(g)
            sizes.append(np.hypot(b[:, 2] - b[:, 0], b[:, 3] - b[:, 1]))
    size = float(np.quantile(np.concatenate(sizes), SIZE_QUANTILE)) if sizes else 0.0
    return reach + HALO_FEATURES * size


# ---------------------------------------------------------------- the partitions


@dataclass(frozen=True)
class Partition:
    """One partition: per partitioned layer the rows of its core and the rows it holds (core and halo), sorted."""

    index: int
    core: dict[str, np.ndarray]
    rows: dict[str, np.ndarray]


@dataclass(frozen=True)
class Plan:
    """The partitions of a project, and the owner of every place (the partition of the nearest feature)."""

    partitions: tuple[Partition, ...]
    halo: float
    reach: float
    tree: Any  # shapely.STRtree over every present feature of the partitioned layers
    owner_of_feature: np.ndarray  # partition of each geometry in ``tree``

    def owners(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The partition owning each place (-1 for a place with no coordinates: the first partition's)."""
        import shapely

        out = np.zeros(len(x), dtype=np.int64)
        ok = np.isfinite(x) & np.isfinite(y)
        if ok.any() and len(self.owner_of_feature):
            pts = shapely.points(x[ok], y[ok])
            _, near = self.tree.query_nearest(pts, all_matches=False)
            out[ok] = self.owner_of_feature[near]
        return out


def _partitioned_layers(project: MapProject) -> list[str]:
    return [role for role, layer in project.layers.items() if role not in WHOLE_LAYERS and len(layer.frame)]


def plan_partitions(project: MapProject, parts: int, halo: float | None = None, reach: float | None = None) -> Plan:
    """Cut ``project`` into ``parts`` partitions by Hilbert distance, each with its halo (see the module docstring)."""
    import geopandas as gpd
    import shapely

    reach = rule_reach(project) if reach is None else reach
    halo = halo_width(project, reach) if halo is None else halo
    roles = _partitioned_layers(project)
    geoms = {role: project.layers[role].geometry for role in roles}
    present = {role: _present(g) for role, g in geoms.items()}
    # one order over every present feature of every partitioned layer
    role_of = np.concatenate([np.full(int(present[r].sum()), i, dtype=np.int64) for i, r in enumerate(roles)] or [np.zeros(0, np.int64)])
    row_of = np.concatenate([np.flatnonzero(present[r]) for r in roles] or [np.zeros(0, np.int64)])
    allg = np.concatenate([geoms[r][present[r]] for r in roles] or [np.zeros(0, dtype=object)])
    parts = max(1, min(int(parts), len(allg)))
    part_of = np.zeros(len(allg), dtype=np.int64)
    if len(allg):
        bounds = shapely.total_bounds(allg)
        hd = gpd.GeoSeries(allg).hilbert_distance(total_bounds=bounds)
        order = np.argsort(np.asarray(hd), kind="stable")
        part_of[order] = (np.arange(len(allg)) * parts) // len(allg)
    tree = shapely.STRtree(allg)
    partitions = []
    for i in range(parts):
        mine = np.flatnonzero(part_of == i)
        core: dict[str, np.ndarray] = {}
        rows: dict[str, np.ndarray] = {}
        for k, role in enumerate(roles):
            own = row_of[mine[role_of[mine] == k]]
            if i == 0:  # features with no geometry: the first partition's
                own = np.union1d(own, np.flatnonzero(~present[role]))
            core[role] = np.sort(own)
            rows[role] = core[role]
        if len(mine):
            _, near = tree.query(allg[mine], predicate="dwithin", distance=halo)
            near = np.unique(near)
            for k, role in enumerate(roles):
                rows[role] = np.union1d(rows[role], row_of[near[role_of[near] == k]])
        partitions.append(Partition(i, core, rows))
    return Plan(tuple(partitions), float(halo), float(reach), tree, part_of)


def _sub_layer(layer: Any, rows: np.ndarray) -> Any:
    frame = layer.frame.iloc[rows]
    sub = replace(layer, frame=frame, ids=np.asarray(layer.ids)[rows], parts=())
    return sub


def sub_project(project: MapProject, partition: Partition) -> MapProject:
    """The project of one partition: its core and halo rows of each partitioned layer; other layers and tables whole."""
    layers = {role: (_sub_layer(layer, partition.rows[role]) if role in partition.rows else layer)
              for role, layer in project.layers.items()}
    return replace(project, layers=layers, problems=[], notes=[])


# ---------------------------------------------------------------- the work of one partition


@dataclass(frozen=True)
class PartitionTask:
    """Everything one partition's work needs; picklable."""

    index: int
    project: MapProject
    rules: tuple[str, ...]
    core: np.ndarray  # the geometries of the core features (the trust distances are measured to them)
    halo: float
    reach: float
    left_out: tuple[str, ...] = ()


@dataclass(frozen=True)
class PartitionResult:
    """What one partition found; picklable.

    ``hits``: (rule id, hit, x, y, trusted) for every hit, ``x``/``y`` its
    representative point (NaN when it has none). ``failed``: rules GEOS
    stopped here. ``notes``: the notes the partition's analyses made.
    """

    index: int
    hits: tuple[tuple[str, Hit, float, float, bool], ...]
    failed: tuple[str, ...]
    notes: tuple[str, ...]


def place_of(hit: Hit) -> tuple[float, float, float]:
    """A hit's representative point (as :func:`archivist.engine.to_finding` takes it) and its geometry's diagonal."""
    import shapely

    x, y = hit.x, hit.y
    g = hit.geometry
    diag = 0.0
    if g is not None and not shapely.is_empty(g):
        b = shapely.bounds(g)
        diag = float(np.hypot(b[2] - b[0], b[3] - b[1]))
        if x is None or y is None:
            p = g if g.geom_type == "Point" else shapely.point_on_surface(g)
            x, y = p.x, p.y
    if x is None or y is None:
        return np.nan, np.nan, diag
    return float(x), float(y), diag


def run_partition(task: PartitionTask) -> PartitionResult:
    """Run ``task.rules`` on one partition's project; every hit with its place and whether the partition can trust it."""
    import shapely
    from shapely.errors import GEOSException

    from .analysis.alignment import Alignment
    from .analysis.context import CheckContext
    from .registry import get_rule

    project = task.project
    ctx = CheckContext(project)
    # the layers are already as the checks across layers see them (the caller's aligned view)
    ctx._cache["analysis.alignment"] = Alignment(layers=dict(project.layers), left_out=task.left_out)
    ctx._cache["analysis.view"] = project
    found: list[tuple[str, Hit]] = []
    failed: list[str] = []
    for rid in task.rules:
        info = get_rule(rid)
        try:
            found.extend((rid, hit) for hit in (info.func(project, ctx) or ()))
        except GEOSException:
            failed.append(rid)
            found = [(r, h) for r, h in found if r != rid]
    places = np.array([place_of(h) for _, h in found], dtype=float).reshape(-1, 3)
    x, y, diag = places[:, 0], places[:, 1], places[:, 2]
    trusted = np.zeros(len(found), dtype=bool)
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.any() and len(task.core):
        _, d0 = shapely.STRtree(task.core).query_nearest(shapely.points(x[ok], y[ok]), all_matches=False, return_distance=True)
        trusted[ok] = d0 + diag[ok] + task.reach <= task.halo
    hits = tuple((rid, hit, float(x[k]), float(y[k]), bool(trusted[k])) for k, (rid, hit) in enumerate(found))
    return PartitionResult(task.index, hits, tuple(failed), tuple(ctx.notes))


# ---------------------------------------------------------------- the merge


@dataclass(frozen=True)
class Merged:
    """The partitions' answer: per rule the owned hits; the rules to run on the whole map instead; the notes."""

    hits: dict[str, list[Hit]] = field(default_factory=dict)
    whole: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def _key(hit: Hit) -> tuple:
    import shapely

    g = None if hit.geometry is None else shapely.to_wkt(hit.geometry, rounding_precision=-1)
    return (hit.message, hit.layer, tuple(str(f) for f in hit.features), hit.measure, g, hit.x, hit.y,
            None if hit.severity is None else hit.severity.value)


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
            have = keys[(o, rid)] = {_key(h) for h, _ in owned.get(o, {}).get(rid, [])}
        if _key(hit) not in have:
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
    ids = tuple(info.id for info in rules)
    if not ids:
        return Merged()
    plan = plan or plan_partitions(project, parts)
    tasks = []
    for part in plan.partitions:
        core = np.concatenate([project.layers[r].geometry[part.core[r]] for r in part.core] or [np.zeros(0, dtype=object)])
        core = core[_present(core)]
        tasks.append(PartitionTask(part.index, sub_project(project, part), ids, core, plan.halo, plan.reach, left_out))
    futures: list[Future] = [executor.submit(run_partition, t) for t in tasks]
    results: list[PartitionResult] = []
    try:
        for fut in as_completed(futures):
            results.append(fut.result())
            if step is not None:
                step.advance()
    except BaseException:
        for fut in futures:
            fut.cancel()
        raise
    return merge(plan, ids, results)
