"""The coverage rules (topology family) on spatial partitions give the findings of one process.

Checked against: the same check in one process (:func:`archivist.engine.check`
without an executor), which reads the whole map; GEOS (through shapely) for
where the gap of the fallback test lies. The maps are the synthetic maps of
tests/coverage_builders.py (10^4 polygons at 1:5 000, the defects of
``with_defect_density`` at densities 0, 0.001, 0.01 and 0.05).

Not covered here: maps without an extent layer (their coverage rules stay on
the whole map, tests/test_parallel.py), maps in longitude/latitude, and maps of
10^5 polygons and more (tests/benchmarks/partition_identity.py).
"""

from __future__ import annotations

import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
import shapely

import archivist
from archivist import engine, parallel
from archivist.analysis.context import PART_KEY, CheckContext
from archivist.analysis.coverage import CannotVouch, map_scale
from archivist.project import load_project
from archivist.registry import all_rules

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE / "benchmarks"))

from test_parallel import _sent_to_partitions  # noqa: E402
from topology_maps import make  # noqa: E402

COVERAGE_RULES = ("unit-overlap", "unit-gap", "unit-edge-mismatch", "unit-same-neighbour", "unit-outside-extent")
# the families sent together: a partition builds the coverage they share once
RULES = [r.id for r in all_rules() if r.family in ("topology", "linework")]
DENSITIES = (0.0, 0.001, 0.01, 0.05)


def same_report(a: archivist.Report, b: archivist.Report) -> None:
    # same rules, features, places, measures, messages, in the same order; same notes
    assert [f.to_dict() for f in b.findings] == [f.to_dict() for f in a.findings]
    assert b.notes == a.notes
    assert b.rules_run == a.rules_run


@pytest.fixture(scope="module")
def density_maps(tmp_path_factory):
    root = tmp_path_factory.mktemp("coverage-maps")
    for d in DENSITIES:
        make(root / f"d{d}", 10_000, seed=7, density=d, scale=5000)
    return root


@pytest.mark.parametrize("density", DENSITIES)
def test_coverage_rules_on_partitions_give_the_findings_of_one_process(density_maps, density, monkeypatch):
    project = load_project(density_maps / f"d{density}")
    reference = engine.check(project, rules=RULES)
    found = {f.rule for f in reference.findings}
    if density >= 0.01:  # the defects reach every coverage rule but the outside one (the builder clips to the extent)
        assert found >= {"unit-overlap", "unit-gap", "unit-edge-mismatch"}
    merged = _sent_to_partitions(monkeypatch)
    # the partitions built in this process and sent to threads (PartitionTask)
    with ThreadPoolExecutor(2) as pool:
        for parts in (2, 4):
            merged.clear()
            same_report(reference, engine.check(project, rules=RULES, executor=pool, parts=parts))
            (answer,) = merged
            sent = set(answer.hits) | set(answer.whole)
            assert set(COVERAGE_RULES) <= sent, "the topology family went to the partitions"
    # cut by worker processes forked with the map (InheritedTask: the scale travels with the partition)
    merged.clear()
    same_report(reference, archivist.check(project, rules=RULES, jobs=2, parts=4))
    assert set(COVERAGE_RULES) <= set(merged[0].hits) | set(merged[0].whole)


def _band_map(tmp_path: Path) -> Path:
    """A map with one gap across its whole width: the polygons whose centre lies in a band 400 m high deleted."""
    from coverage_builders import synthetic_map, write_map

    smap = synthetic_map(2000, seed=5, scale=5000)
    y0, y1 = shapely.bounds(smap.extent)[1::2]
    mid = (y0 + y1) / 2.0
    cy = shapely.get_coordinates(shapely.centroid(smap.units.geometry.values))[:, 1]
    keep = np.abs(cy - mid) > 200.0
    from dataclasses import replace

    return write_map(replace(smap, units=smap.units[keep]), tmp_path / "band")


def test_a_gap_cut_by_a_partition_edge_near_its_core_sends_the_rules_to_the_whole_map(tmp_path, monkeypatch):
    project = load_project(_band_map(tmp_path))
    reference = engine.check(project, rules=RULES)
    gaps = [f for f in reference.findings if f.rule == "unit-gap"]
    # GEOS: the extent less the union of the units is one piece, the band, as wide as the map
    ctx = CheckContext(project)
    view = ctx.view()
    left = shapely.difference(view.layers["extent"].geometry[0], shapely.union_all(view.layers["units"].geometry))
    band = max(shapely.get_parts(left), key=lambda g: g.area)
    assert len(gaps) >= 1 and max(f.measure for f in gaps) == pytest.approx(band.area, rel=1e-9)
    # the band is far larger than a partition's halo: each partition sees it cut by the edge of its region,
    # next to its core, and cannot vouch for the coverage there
    plan = parallel.plan_partitions(view, 2)
    assert shapely.length(band) > 4 * plan.halo
    for part in plan.partitions:
        sub = parallel.sub_project(view, part)
        task = parallel.PartitionTask(part.index, sub, (), plan.grid, part.marked, plan.reach, (), part.core, map_scale(view))
        sub_ctx = CheckContext(sub)
        sub_ctx._cache[PART_KEY] = parallel.part_of_map(task)
        cov = sub_ctx.coverage()
        assert cov.unvouched and cov.overlaps == () and cov.outside == ()
        with pytest.raises(CannotVouch):
            cov.gaps  # noqa: B018
    # so the rules reading the gaps run on the whole map, and the report is the one process's
    merged = _sent_to_partitions(monkeypatch)
    with ThreadPoolExecutor(2) as pool:
        same_report(reference, engine.check(project, rules=RULES, executor=pool, parts=2))
    (answer,) = merged
    assert {"unit-gap", "unit-edge-mismatch", "unit-same-neighbour"} <= set(answer.whole)
    # the overlaps and the unit area outside the extent do not depend on the gaps: they stay on the partitions
    assert {"unit-overlap", "unit-outside-extent", "unit-sliver"} <= set(answer.hits)


def test_the_partitions_are_given_the_whole_maps_scale(density_maps):
    # the noise floor (archivist.analysis.coverage.noise_floor) of a partition is the whole map's, both ways a
    # partition is sent
    project = load_project(density_maps / "d0.01")
    view = CheckContext(project).view()
    whole = map_scale(view)
    sent: list = []

    class Recording(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            sent.append(args[0])
            return super().submit(fn, *args, **kwargs)

    with Recording(2) as pool:
        parallel.Sent(view, [r for r in all_rules() if r.id in COVERAGE_RULES], pool, 2).merged()
    assert len(sent) == 2 and all(task.scale == whole for task in sent)
    plan = parallel.plan_partitions(view, 2)
    task = parallel.PartitionTask(0, parallel.sub_project(view, plan.partitions[0]), (), plan.grid,
                                  plan.partitions[0].marked, plan.reach, (), plan.partitions[0].core, whole)
    assert parallel.part_of_map(task).scale == whole
