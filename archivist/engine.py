"""Run the registered rules over a :class:`MapProject` and build a :class:`Report`."""

from __future__ import annotations

import math
import threading
from concurrent.futures import Executor
from itertools import groupby
from pathlib import Path
from typing import Any, Callable, Iterable

import numpy as np
import shapely
from shapely.errors import GEOSException

from ._version import __version__
from .analysis.arrays import hit_points
from .analysis.context import CheckContext
from .analysis.localframe import LocalFrame, frame_for, in_frame
from .collector import collector_paused
from .errors import ArchivistError
from .model import Finding, Hit, Report, Severity
from .progress import Progress, Step
from .project import LINEAR_DIGITS, MapProject, crs_label, load_project, location_digits
from .reference import chart_credit
from .registry import RuleInfo, select

# The families that judge the files, the manifest, the CRS and the coordinates as written: on a map in
# longitude/latitude they run on the project as read; the others run in its local metric frame.
AS_READ_FAMILIES = {"metadata", "crs", "archive"}
# Families whose every rule compares layers through the shared analyses (the unit polygons, the line
# network): they do not run on a layer that cannot be placed with the map (CheckContext.left_out), whose
# own CRS finding is the one finding about it. Other rules that compare layers read CheckContext.layer.
ACROSS_LAYER_FAMILIES = {"topology", "linework"}

# The rules that read legend ages on the ICS chart: when one runs, the report names the chart version.
CHART_RULES = {"legend-age-unknown", "legend-age-order"}

__all__ = ["CheckContext", "check", "run_rules", "to_finding", "rule_failed", "empty_layers", "finding_order"]


def _round(v: float | None, digits: int = LINEAR_DIGITS) -> float | None:
    """A location to ``digits`` decimals of map units (:func:`archivist.project.location_digits`); see :func:`_measure` for sizes.

    ``math.isfinite``, not numpy's: this runs for every finding's x and y, and numpy's scalar call costs ten times more.
    """
    if v is None or not math.isfinite(v):
        return None
    return float(round(v, digits))


def _measure(v: float | None) -> float | None:
    """A size to 1e-3 from 1 up, and to three significant digits below 1 (a 1e-6 m² overlap stays 1e-6)."""
    if v is None or not math.isfinite(v):
        return None
    if v == 0.0 or abs(v) >= 0.9995:
        return float(round(v, 3))
    return float(f"{v:.3g}")


def to_finding(info: RuleInfo, hit: Hit, severity: Severity, forced: bool = False, digits: int = LINEAR_DIGITS) -> Finding:
    """A hit as a finding; ``forced`` (a manifest override) wins over the hit's own severity.

    ``digits``: the decimals its location and WKT keep, from the map CRS
    (:func:`archivist.project.location_digits`: 8 in degrees, 3 in metres).
    """
    return to_findings(info, [hit], severity, forced, digits)[0]


def to_findings(info: RuleInfo, hits: list[Hit], severity: Severity, forced: bool = False,
                digits: int = LINEAR_DIGITS) -> list[Finding]:
    """:func:`to_finding` of every hit, with the geometry work (WKT, a point on the surface) done for all at once."""
    geoms, shown, xs, ys = hit_points(hits)
    wkts = np.full(len(hits), None, dtype=object)
    if shown.any():
        wkts[shown] = shapely.to_wkt(geoms[shown], rounding_precision=digits, trim=True)
    out = []
    for hit, wkt, x, y in zip(hits, wkts.tolist(), xs.tolist(), ys.tolist()):
        given = hit.x is not None and hit.y is not None
        out.append(Finding(
            rule=info.id,
            family=info.family,
            severity=severity if forced else (hit.severity or severity),
            message=hit.message,
            layer=hit.layer,
            features=tuple(str(f) for f in hit.features),
            x=_round(hit.x if given or wkt is None else x, digits),
            y=_round(hit.y if given or wkt is None else y, digits),
            measure=_measure(hit.measure),
            wkt=wkt,
        ))
    return out


def empty_layers(project: MapProject) -> set[str]:
    """Roles whose layer is there but holds no feature; ``layer-empty`` reports them."""
    return {role for role, layer in project.layers.items() if len(layer.frame) == 0}


def rule_failed(info: RuleInfo, exc: GEOSException) -> Finding:
    """The finding for a rule that GEOS stopped: the rule could not finish, and why."""
    reason = " ".join(str(exc).split()) or type(exc).__name__
    return Finding(
        rule=info.id,
        family=info.family,
        severity=Severity.ERROR,
        message=f"The check {info.id} could not finish: GEOS stopped with \"{reason}\"; "
                "its findings are incomplete. A geometry the other checks report is the likely cause.",
        layer=None,
        features=(),
        x=None,
        y=None,
        measure=None,
        wkt=None,
    )


def finding_order(f: Finding) -> tuple[Any, ...]:
    """The order of one rule's findings: by layer, features, place (y, then x), measure, message and geometry.

    The report orders findings by severity, family, rule, layer and features
    (:class:`archivist.model.Report`); this key also orders the findings
    those leave tied, so a run on partitions of the map, whose findings come
    in another order, gives them in the same order as a run in one process.
    """
    return (f.layer or "", f.features, f.y is None, f.y or 0.0, f.x is None, f.x or 0.0,
            f.measure is None, f.measure or 0.0, f.message, f.wkt or "", f.severity.rank)


@collector_paused()
def run_rules(project: MapProject, selected: Iterable[RuleInfo], progress: Progress | None = None, *,
              executor: Executor | None = None, parts: int = 1, threads: int = 1,
              context: CheckContext | None = None) -> Report:
    """Run ``selected`` rules over ``project`` (severity overrides applied).

    ``progress`` gets one step per rule family and one item per rule run.
    A rule that needs a layer with no features is not run (``layer-empty``
    says so once), nor a topology or linework rule that needs a layer that
    cannot be placed with the map (``crs-mismatch`` says so once; see
    :meth:`CheckContext.alignment`). A rule that GEOS stops (``GEOSException``) keeps the
    findings it had made and adds one error finding saying it could not finish;
    the other rules run as usual.

    On a map whose CRS is geographic, the rules outside
    ``AS_READ_FAMILIES`` run on the project projected to its local metric
    frame (:mod:`archivist.analysis.localframe`), so that tolerances, widths,
    distances and areas are judged in metres alike in every direction; their
    findings are carried back to the map CRS.

    ``threads`` > 1 runs the families side by side on that many threads
    (:func:`_run_side_by_side`; shapely 2 releases the GIL in its GEOS
    calls); ``executor`` and ``parts`` > 1 send the families whose every rule
    is partitioned to spatial partitions (:mod:`archivist.parallel`). The
    report is the same either way: findings, their order, the notes.
    ``context`` (a :class:`CheckContext` of this very project, made by the
    caller) lets the caller keep the analyses of the check, or hand in ones
    it computed for this project already.
    """
    if context is not None and context.project is not project:
        raise ValueError("run_rules: the context given is of another project")
    ctx = context if context is not None else CheckContext(project)
    frame: LocalFrame | None = frame_for(project)
    local = CheckContext(in_frame(project, frame)) if frame is not None else ctx
    progress = progress or Progress()
    overrides = project.config.severity
    empty = empty_layers(project)
    digits = location_digits(frame.map_crs if frame is not None else project.crs)
    partition = executor is not None and parts > 1

    def skipped(info: RuleInfo) -> bool:
        return overrides.get(info.id, info.severity.value) == "off" or any(
            not project.has(role) or role in empty for role in info.needs) or (
            info.family in ACROSS_LAYER_FAMILIES and bool(set(info.needs) & set(ctx.left_out())))

    def contexts(info: RuleInfo) -> tuple[bool, MapProject, CheckContext]:
        as_read = frame is None or info.family in AS_READ_FAMILIES
        return as_read, *((project, ctx) if as_read else (local.project, local))

    def run_one(info: RuleInfo, step: Step, hits_from: Iterable[Hit] | None = None) -> list[Finding]:
        """One rule's findings, in their total order (see :func:`finding_order`)."""
        level = overrides.get(info.id, info.severity.value)
        severity = Severity.parse(level)
        forced = info.id in overrides
        as_read, run_on, run_ctx = contexts(info)
        mine: list[Finding] = []
        with step.item(info.id):
            got: list[Hit] = []
            try:
                hits = hits_from if hits_from is not None else (info.func(run_on, run_ctx) or ())
                if hits_from is None and info.settle is not None:  # on partitions, the merge settles them
                    hits = info.settle.hits(run_ctx.view(), run_ctx, hits)
                for hit in hits:
                    if not as_read:
                        assert frame is not None
                        hit = frame.hit_to_map(hit)
                    got.append(project.own_names(hit))
            except GEOSException as exc:
                mine.append(rule_failed(info, exc))
            try:
                mine[:0] = to_findings(info, got, severity, forced, digits)
            except GEOSException:  # one geometry GEOS cannot write: the others still are, one at a time
                for hit in got:
                    try:
                        mine.append(to_finding(info, hit, severity, forced, digits))
                    except GEOSException as exc:
                        mine.append(rule_failed(info, exc))
        return sorted(mine, key=finding_order)

    groups = [(family, list(members)) for family, members in groupby(selected, key=lambda i: i.family)]
    if threads > 1 and not partition:
        findings, ran, notes, local_notes = _run_side_by_side(groups, skipped, contexts, run_one, ctx, local,
                                                              progress, threads)
    else:
        findings, ran, notes, local_notes = _run_in_turn(groups, skipped, contexts, run_one, ctx, local, progress,
                                                         executor if partition else None, parts)
    chart = [chart_credit(project.config.chart)] if set(ran) & CHART_RULES else []
    framed = frame is not None and any(not contexts(info)[0] for info in _infos(groups, ran))  # a rule ran in the local frame
    if framed:
        assert frame is not None
        notes += [frame.note] + [n for n in local_notes if n not in notes]
    return Report(
        tool="archivist",
        version=__version__,
        project=str(project.manifest_path or project.map_file or project.root),
        crs=crs_label(project.crs),
        findings=tuple(findings),
        notes=tuple(project.notes + notes + chart),
        rules_run=tuple(ran),
        place_decimals=6 if digits > LINEAR_DIGITS else 1,
    )


def _run_in_turn(
    groups: list[tuple[str, list[RuleInfo]]],
    skipped: Callable[[RuleInfo], bool],
    contexts: Callable[[RuleInfo], tuple[bool, MapProject, CheckContext]],
    run_one: Callable[[RuleInfo, Step, Iterable[Hit] | None], list[Finding]],
    ctx: CheckContext,
    local: CheckContext,
    progress: Progress,
    executor: Executor | None,
    parts: int,
) -> tuple[list[Finding], list[str], list[str], list[str]]:
    """Run the rule families one after another in this thread; the findings, rules run and notes.

    With an executor, the families whose every running rule is partitioned
    are sent to the partitions first (:func:`_batches`, :class:`archivist.parallel.Sent`),
    and the other families run here first, while the workers run those;
    then the partitions' findings are merged. Findings and the rules run are
    given in the order of the families whatever order they ran in. Notes are recorded per rule and given in the order of a run in
    one thread (:meth:`CheckContext.ordered_notes`), whichever computation
    made them first.
    """
    logs: dict[str, tuple[list[Any], list[Any]]] = {info.id: ([], []) for _, group in groups for info in group}
    ahead = _validity_ahead(ctx.project) if executor is not None else None
    try:
        batches = _batches(groups, skipped, contexts) if executor is not None else {}
    finally:
        if ahead is not None:  # before any worker is forked: no thread of ours inside GEOS then
            ahead.join()
    sent: dict[bool, Any] = {}
    merged: dict[bool, Any] = {}  # per batch (as read, or in the local frame): the partitions' answer
    try:
        for as_read, batch in batches.items():
            from .parallel import Sent

            assert executor is not None
            _, _, run_ctx = contexts(batch[0])
            with ctx.recording([]), run_ctx.recording([]):  # its notes come with the rules that read it, in their turn
                sent[as_read] = Sent(run_ctx.view(), batch, executor, parts, run_ctx.left_out())
        # the families that stay here run first, while the workers run the partitions; the findings and rules
        # run are then given in the order of the families
        batched = {info.family for b in batches.values() for info in b}
        turns = [k for k, (family, _) in enumerate(groups) if family not in batched] + \
                [k for k, (family, _) in enumerate(groups) if family in batched]
        found: dict[int, list[Finding]] = {}
        ran_in: dict[int, list[str]] = {}
        for k in turns:
            family, group = groups[k]
            key = next((side for side, b in batches.items() if any(i.family == family for i in b)), None)
            batch = batches[key] if key is not None else []
            mine, ran_here = found.setdefault(k, []), ran_in.setdefault(k, [])
            with progress.step(f"{family} rules", total=len(group) + (parts if key is not None and key not in merged else 0)) as step:
                for info in group:
                    with ctx.recording(logs[info.id][0]):  # skipping reads the alignment: its notes come at this rule
                        if skipped(info):
                            step.advance()
                            continue
                    ran_here.append(info.id)
                    _, _, run_ctx = contexts(info)
                    with run_ctx.recording(logs[info.id][0] if run_ctx is ctx else logs[info.id][1]):
                        if info in batch and key is not None and key not in merged:
                            merged[key] = sent[key].merged(step)
                            for text in merged[key].notes:
                                run_ctx.note(text)
                        answer = merged.get(key) if info in batch and key is not None else None
                        given = answer.hits[info.id] if answer is not None and info.id in answer.hits else None
                        mine += run_one(info, step, given)
        findings = [f for k in range(len(groups)) for f in found.get(k, [])]
        ran = [rid for k in range(len(groups)) for rid in ran_in.get(k, [])]
    except BaseException:
        for job in sent.values():
            job.cancel()
        raise
    order = [info.id for _, group in groups for info in group]
    notes = ctx.ordered_notes(logs[rid][0] for rid in order)
    local_notes = local.ordered_notes(logs[rid][1] for rid in order) if local is not ctx else notes
    return findings, ran, notes, local_notes


def _validity_ahead(project: MapProject) -> threading.Thread:
    """A thread asking GEOS the validity of every layer (``Layer.valid``) while the calling one aligns the layers.

    Before the partitions are sent the calling thread aligns the layers, on
    one core. A partitioned check asks every layer's validity anyway (the
    metadata rule ``geometry-invalid``, the polygons of the topology family),
    and GEOS answers without the GIL, so the other core answers it then; the
    partitions get their rows' answers with their rows
    (:func:`archivist.parallel.sub_project`). The caller joins the thread
    before it forks. A GEOS error here is left for the rule that asks again.
    """
    from .threads import busy

    layers = list(project.sources.values())  # an answer already known is read back at once

    def work() -> None:
        with busy():
            for layer in layers:
                try:
                    layer.valid
                except Exception:  # noqa: BLE001 - asked again, and reported, where a rule reads it
                    pass

    thread = threading.Thread(target=work, name="archivist-validity", daemon=True)
    thread.start()
    return thread


def _batches(groups: list[tuple[str, list[RuleInfo]]], skipped: Callable[[RuleInfo], bool],
             contexts: Callable[[RuleInfo], tuple[bool, MapProject, CheckContext]]) -> dict[bool, list[RuleInfo]]:
    """The rules sent to the partitions, in one batch per context (as read, or in the local frame).

    A family goes to the partitions only when every rule of it that runs can: the rules of a family share
    analyses (the half-edge table, the coverage, the line network) that one rule left here would build again
    for the whole map. The families that go are sent together, so that a partition builds the analyses they
    share (the topology and linework families: the unit polygons, their half-edges, the coverage) once.
    """
    out: dict[bool, list[RuleInfo]] = {}
    for _, group in groups:
        runnable = [info for info in group if not skipped(info)]
        # whether a rule may be partitioned may depend on the map (the coverage rules need an extent layer):
        # asked of the project as the partitions get it (the aligned view)
        if runnable and all(info.partitions(_view_of(contexts(info)[2])) for info in runnable):
            for info in runnable:
                out.setdefault(contexts(info)[0], []).append(info)
    return out


def _view_of(run_ctx: CheckContext) -> MapProject:
    """The project as the partitions get it; its notes come with the rules that read it, in their turn."""
    with run_ctx.recording([]):
        return run_ctx.view()


def _infos(groups: list[tuple[str, list[RuleInfo]]], ran: list[str]) -> list[RuleInfo]:
    """The rules that ran, in order."""
    done = set(ran)
    return [info for _, group in groups for info in group if info.id in done]


def _run_side_by_side(
    groups: list[tuple[str, list[RuleInfo]]],
    skipped: Callable[[RuleInfo], bool],
    contexts: Callable[[RuleInfo], tuple[bool, MapProject, CheckContext]],
    run_one: Callable[[RuleInfo, Step], list[Finding]],
    ctx: CheckContext,
    local: CheckContext,
    progress: Progress,
    threads: int,
) -> tuple[list[Finding], list[str], list[str], list[str]]:
    """Run the rule families side by side on ``threads`` threads; the findings, rules run and notes of one thread.

    Each family runs its rules in their order on one thread (its rules share
    analyses); the families are taken in their order by the first free
    thread. The analyses two families share (the unit polygons and their
    half-edges for topology and linework) are computed once: the second
    family to ask waits for the first's value (:meth:`CheckContext.shared`).
    The report is then put together in the order of one thread: each rule's
    findings in their place, the notes in the order each was first made
    (:meth:`CheckContext.ordered_notes`).

    Inside a family, an analysis may cut its element-wise GEOS work into runs
    that the same number of threads compute side by side
    (:mod:`archivist.threads`).

    Threads are daemons and a stop flag is checked before every rule: on
    Ctrl-C (or any error) the calling thread raises at once, no further rule
    starts, and a rule already running ends its current GEOS call unseen.
    """
    import threading

    plan = groups
    logs: dict[str, tuple[list[Any], list[Any]]] = {info.id: ([], []) for _, group in groups for info in group}
    results: dict[str, list[Finding]] = {}
    failures: list[BaseException] = []
    stop = threading.Event()
    done = threading.Condition()
    pending = list(range(len(plan)))
    finished = [0]
    display = threading.Lock()  # a progress display starts and ends its bars one at a time

    from .threads import Pool, busy, spreading

    pool = Pool(threads)  # element-wise runs of one analysis side by side (archivist.threads)

    def family_task(k: int) -> None:
        family, group = plan[k]
        with display:
            stepper = progress.step(f"{family} rules", total=len(group))
            step = stepper.__enter__()
        try:
            for info in group:
                if stop.is_set():
                    return
                with ctx.recording(logs[info.id][0]):  # skipping reads the alignment: its notes come at this rule
                    if skipped(info):
                        step.advance()
                        continue
                _, _, run_ctx = contexts(info)
                log = logs[info.id][0] if run_ctx is ctx else logs[info.id][1]
                with run_ctx.recording(log):
                    results[info.id] = run_one(info, step)
        finally:
            with display:
                stepper.__exit__(None, None, None)

    def worker() -> None:
        with spreading(pool):
            serve()

    def serve() -> None:
        while not stop.is_set():
            with done:
                if not pending:
                    return
                k = pending.pop(0)
            try:
                with busy():
                    family_task(k)
            except BaseException as exc:  # noqa: BLE001 - handed to the calling thread
                failures.append(exc)
                stop.set()
            with done:
                finished[0] += 1
                done.notify_all()

    workers = [threading.Thread(target=worker, name=f"archivist-check-{i}", daemon=True)
               for i in range(min(threads, len(plan)))]
    try:
        for t in workers:
            t.start()
        with done:
            while finished[0] < len(plan) and not stop.is_set():
                done.wait(0.1)  # a timed wait: Ctrl-C reaches this thread at once
    except BaseException:
        stop.set()
        raise
    finally:
        pool.close()
    if failures:
        raise failures[0]
    findings: list[Finding] = []
    ran: list[str] = []
    for _, group in plan:
        for info in group:
            if info.id in results:
                ran.append(info.id)
                findings += results[info.id]
    order = [info.id for _, group in plan for info in group]
    notes = ctx.ordered_notes(logs[rid][0] for rid in order)
    local_notes = local.ordered_notes(logs[rid][1] for rid in order) if local is not ctx else notes
    return findings, ran, notes, local_notes


def check(
    project: MapProject | str | Path,
    *,
    only: Iterable[str] = (),
    rules: Iterable[str] = (),
    progress: Progress | None = None,
    jobs: int = 1,
    executor: Executor | None = None,
    parts: int | None = None,
    context: CheckContext | None = None,
) -> Report:
    """Check a map project and return its report.

    Parameters
    ----------
    project
        A loaded :class:`MapProject`, or the path of a project folder or manifest.
    only
        Families to run (e.g. ``["topology"]``); all when empty.
    rules
        Rule ids to run; combined with ``only`` as a union.
    progress
        A :class:`archivist.progress.Progress` told about each step (loading,
        each rule family); silent when None.
    jobs
        Threads that run the rule families side by side (shapely 2 releases
        the GIL in its GEOS calls); 1 (the default) runs everything in this
        thread, 0 means every core this process may use. The report is the
        same whatever the number.
    executor
        Run the rules that can on spatial partitions of the map
        (:mod:`archivist.parallel`) through this
        :class:`concurrent.futures.Executor` (threads, processes, a
        ``dask.distributed`` client's executor); the caller shuts it down.
    parts
        With ``jobs`` > 1: run the partitioned rules on this many partitions
        in ``jobs`` worker processes instead of threads; the processes are
        forked from this one where the system can
        (:class:`archivist.parallel.ForkPool`: they read the map from its
        memory). By default, :func:`archivist.parallel.fork_parts` decides:
        ``jobs`` partitions on a map large enough where the system forks,
        else threads without partitions. With an executor, the number of
        partitions (default 2).
    context
        A :class:`CheckContext` of ``project`` (a loaded one): the check
        reads and keeps its analyses there (no partitions; with ``jobs`` > 1
        the families side by side on threads, which share it).

    Raises
    ------
    ArchivistError
        The project cannot be read, or an unknown family or rule was asked for.

    Examples
    --------
    >>> report = check("example_bundle")  # doctest: +SKIP
    >>> report.summary.errors  # doctest: +SKIP
    0
    """
    if not isinstance(project, MapProject):
        project = load_project(project, progress=progress)
    try:
        selected = select(only, rules)
    except KeyError as exc:
        raise ArchivistError(f"unknown {exc.args[0]}; 'archivist rules' lists them") from None
    if executor is not None and context is None:
        return run_rules(project, selected, progress, executor=executor, parts=parts or 2)
    from .parallel import default_jobs

    if jobs < 0:
        raise ArchivistError(f"jobs must be 0 (every core) or a positive number of workers, not {jobs}")
    jobs = default_jobs() if jobs == 0 else jobs
    if context is not None:
        return run_rules(project, selected, progress, context=context, threads=jobs)
    if parts is None and jobs > 1:
        from .parallel import fork_parts

        parts = fork_parts(project, selected, jobs)
    if parts is None:
        return run_rules(project, selected, progress, threads=jobs)
    if jobs == 1 and parts <= 1:
        return run_rules(project, selected, progress)
    from .parallel import make_executor, stop_executor

    pool = make_executor(jobs, "fork")  # forked once the map is loaded: the workers read it from this process
    try:
        report = run_rules(project, selected, progress, executor=pool, parts=parts or jobs)
    except BaseException:
        stop_executor(pool)
        raise
    pool.shutdown()
    return report
