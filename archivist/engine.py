"""Run the registered rules over a :class:`MapProject` and build a :class:`Report`."""

from __future__ import annotations

from concurrent.futures import Executor
from itertools import groupby
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import shapely
from shapely.errors import GEOSException

from ._version import __version__
from .analysis.context import CheckContext
from .analysis.localframe import LocalFrame, frame_for, in_frame
from .errors import ArchivistError
from .model import Finding, Hit, Report, Severity
from .progress import Progress
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
    """A location to ``digits`` decimals of map units (:func:`archivist.project.location_digits`); see :func:`_measure` for sizes."""
    if v is None or not np.isfinite(v):
        return None
    return float(round(v, digits))


def _measure(v: float | None) -> float | None:
    """A size to 1e-3 from 1 up, and to three significant digits below 1 (a 1e-6 m² overlap stays 1e-6)."""
    if v is None or not np.isfinite(v):
        return None
    if v == 0.0 or abs(v) >= 0.9995:
        return float(round(v, 3))
    return float(f"{v:.3g}")


def to_finding(info: RuleInfo, hit: Hit, severity: Severity, forced: bool = False, digits: int = LINEAR_DIGITS) -> Finding:
    """A hit as a finding; ``forced`` (a manifest override) wins over the hit's own severity.

    ``digits``: the decimals its location and WKT keep, from the map CRS
    (:func:`archivist.project.location_digits`: 8 in degrees, 3 in metres).
    """
    x, y, wkt = hit.x, hit.y, None
    g = hit.geometry
    if g is not None and not shapely.is_empty(g):
        wkt = shapely.to_wkt(g, rounding_precision=digits, trim=True)
        if x is None or y is None:
            p = g if g.geom_type == "Point" else shapely.point_on_surface(g)
            x, y = p.x, p.y
    return Finding(
        rule=info.id,
        family=info.family,
        severity=severity if forced else (hit.severity or severity),
        message=hit.message,
        layer=hit.layer,
        features=tuple(str(f) for f in hit.features),
        x=_round(x, digits),
        y=_round(y, digits),
        measure=_measure(hit.measure),
        wkt=wkt,
    )


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


def run_rules(project: MapProject, selected: Iterable[RuleInfo], progress: Progress | None = None, *,
              executor: Executor | None = None, parts: int = 1) -> Report:
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
    """
    ctx = CheckContext(project)
    frame: LocalFrame | None = frame_for(project)
    local = CheckContext(in_frame(project, frame)) if frame is not None else ctx
    progress = progress or Progress()
    overrides = project.config.severity
    findings: list[Finding] = []
    ran: list[str] = []
    empty = empty_layers(project)
    framed = False  # a rule ran in the local frame
    digits = location_digits(frame.map_crs if frame is not None else project.crs)
    partition = executor is not None and parts > 1

    def skipped(info: RuleInfo) -> bool:
        return overrides.get(info.id, info.severity.value) == "off" or any(
            not project.has(role) or role in empty for role in info.needs) or (
            info.family in ACROSS_LAYER_FAMILIES and bool(set(info.needs) & set(ctx.left_out())))

    for family, members in groupby(selected, key=lambda i: i.family):
        group = list(members)
        # a family goes to the partitions only when every rule of it that runs can: the rules of a family share
        # analyses (the half-edge table, the coverage, the line network) that one rule left here would build again
        runnable = [info for info in group if not skipped(info)] if partition else []
        batch = runnable if runnable and all(info.partitioned for info in runnable) else []
        merged: Any = None
        with progress.step(f"{family} rules", total=len(group) + (parts if batch else 0)) as step:
            for info in group:
                if skipped(info):
                    step.advance()
                    continue
                level = overrides.get(info.id, info.severity.value)
                severity = Severity.parse(level)
                ran.append(info.id)
                forced = info.id in overrides
                as_read = frame is None or info.family in AS_READ_FAMILIES
                framed = framed or not as_read
                run_on, run_ctx = (project, ctx) if as_read else (local.project, local)
                mine: list[Finding] = []
                if info in batch and merged is None:  # the family's partitioned rules, all at once
                    from .parallel import run_partitioned

                    assert executor is not None
                    view = run_ctx.view()
                    merged = run_partitioned(view, batch, executor, parts, step, run_ctx.left_out())
                    for text in merged.notes:
                        run_ctx.note(text)
                with step.item(info.id):
                    try:
                        if info in batch and info.id in merged.hits:
                            hits: Iterable[Hit] = merged.hits[info.id]
                        else:
                            hits = info.func(run_on, run_ctx) or ()
                        for hit in hits:
                            if not as_read:
                                assert frame is not None
                                hit = frame.hit_to_map(hit)
                            mine.append(to_finding(info, project.own_names(hit), severity, forced, digits))
                    except GEOSException as exc:
                        mine.append(rule_failed(info, exc))
                findings += sorted(mine, key=finding_order)
    chart = [chart_credit(project.config.chart)] if set(ran) & CHART_RULES else []
    notes = list(ctx.notes)
    if framed:
        assert frame is not None
        notes += [frame.note] + [n for n in local.notes if n not in notes]
    return Report(
        tool="archivist",
        version=__version__,
        project=str(project.manifest_path or project.root),
        crs=crs_label(project.crs),
        findings=tuple(findings),
        notes=tuple(project.notes + notes + chart),
        rules_run=tuple(ran),
    )


def check(
    project: MapProject | str | Path,
    *,
    only: Iterable[str] = (),
    rules: Iterable[str] = (),
    progress: Progress | None = None,
    jobs: int = 1,
    executor: Executor | None = None,
    parts: int | None = None,
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
        Worker processes for the rules that run on spatial partitions of the
        map (:mod:`archivist.parallel`); 1 (the default) runs everything in
        this process, 0 means every core this process may use. The findings
        are the same whatever the number.
    executor
        Run the partitions through this :class:`concurrent.futures.Executor`
        instead (threads, processes, a ``dask.distributed`` client's
        executor); the caller shuts it down.
    parts
        Partitions of the map (default: ``jobs``, or 2 with an executor).

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
    if executor is not None:
        return run_rules(project, selected, progress, executor=executor, parts=parts or 2)
    from .parallel import default_jobs, worth_partitioning

    if jobs < 0:
        raise ArchivistError(f"jobs must be 0 (every core) or a positive number of workers, not {jobs}")
    jobs = default_jobs() if jobs == 0 else jobs
    if parts is None and jobs > 1 and not worth_partitioning(project, jobs):
        jobs = 1  # a small map: starting workers would cost more than they save (the findings are the same)
    if jobs == 1 and (parts is None or parts <= 1):
        return run_rules(project, selected, progress)
    from .parallel import make_executor, stop_executor

    pool = make_executor(jobs)
    try:
        report = run_rules(project, selected, progress, executor=pool, parts=parts or jobs)
    except BaseException:
        stop_executor(pool)
        raise
    pool.shutdown()
    return report
