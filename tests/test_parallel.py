"""Checks on spatial partitions (archivist/parallel.py) give the findings of the check in one process.

The reference is the check in one process (``jobs=1``): same findings (rule,
severity, layer, features, message, place, measure, geometry), same order,
same notes, whatever the number of partitions and however the partition
borders cut the defects.
"""

from __future__ import annotations

import contextlib
import pickle
import sys
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
import shapely

import archivist
from archivist import engine, parallel
from archivist.model import Hit
from archivist.project import load_project
from archivist.registry import all_rules, get_rule, select

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE / "benchmarks"))

from rule_cases import all_cases  # noqa: E402
from topology_maps import make  # noqa: E402

PARTITIONED = [r.id for r in all_rules() if r.partitioned]
PARTITIONED_FAMILIES = {r.family for r in all_rules() if r.partitioned}


def same_report(a: archivist.Report, b: archivist.Report) -> None:
    assert [f.to_dict() for f in b.findings] == [f.to_dict() for f in a.findings]
    assert b.notes == a.notes
    assert b.rules_run == a.rules_run


# ---------------------------------------------------------------- the registry


def test_partitioned_rules_are_the_local_topology_and_linework_rules():
    # the rules deciding each finding from its surroundings; every other rule needs the whole map (see the registry)
    assert {r.id for r in all_rules() if r.partitioned is True} == {
        "unit-sliver", "unit-code-missing",
        "line-off-boundary", "line-dangle", "line-same-unit-contact", "line-self-intersection", "line-duplicate",
        "line-kind-unknown", "boundary-without-line",
    }
    # the coverage rules: only on a map with an extent layer (else the extent is the units' outline, a whole-map thing)
    from archivist.analysis.coverage import extent_is_declared

    assert {r.id for r in all_rules() if r.partitioned is extent_is_declared} == {
        "unit-overlap", "unit-gap", "unit-edge-mismatch", "unit-same-neighbour", "unit-outside-extent",
    }
    assert {r.id for r in all_rules() if r.partitioned} == {r.id for r in all_rules() if r.partitioned is not False}


def test_whether_a_coverage_rule_is_partitioned_depends_on_the_extent_layer(tmp_path):
    from coverage_builders import square_map

    gap = get_rule("unit-gap")
    assert not gap.partitions(load_project(square_map(tmp_path, "no-extent")))
    assert gap.partitions(load_project(square_map(tmp_path, "extent", extent=shapely.box(0, 0, 10, 10))))
    assert get_rule("unit-code-missing").partitions(load_project(square_map(tmp_path, "plain")))


# ---------------------------------------------------------------- the partitions


def _grid_project(tmp_path: Path, n: int = 12):
    import geopandas as gpd

    boxes = [shapely.box(i * 10.0, j * 10.0, i * 10.0 + 10.0, j * 10.0 + 10.0) for i in range(n) for j in range(n)]
    folder = tmp_path / "grid"
    folder.mkdir()
    gpd.GeoDataFrame({"unit": ["A"] * len(boxes)}, geometry=boxes, crs="EPSG:32633").to_file(folder / "map.gpkg", layer="units")
    (folder / "archivist.toml").write_text(
        '[map]\ntitle = "Grid"\ncrs = "EPSG:32633"\nscale = 10000\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n',
        encoding="utf-8")
    return load_project(folder)


def test_cells_have_one_owner_and_the_halo_holds_every_feature_near_a_core(tmp_path):
    project = _grid_project(tmp_path)
    geoms = project.layers["units"].geometry
    centres = shapely.get_coordinates(shapely.centroid(geoms))
    tree = shapely.STRtree(geoms)
    for parts in (2, 3, 5):
        plan = parallel.plan_partitions(project, parts, halo=15.0, reach=1.0)
        cores = np.sum([p.core for p in plan.partitions], axis=0)
        assert (cores == 1).all()  # every cell owned once
        owner = plan.owners(centres[:, 0], centres[:, 1])
        assert set(owner.tolist()) == set(range(parts))
        for p in plan.partitions:
            assert np.all(np.diff(p.rows["units"]) > 0)  # rows kept in their order
            mine = np.flatnonzero(owner == p.index)
            assert set(mine.tolist()) <= set(p.rows["units"].tolist())
            _, near = tree.query(geoms[mine], predicate="dwithin", distance=15.0)
            assert set(near.tolist()) <= set(p.rows["units"].tolist())  # GEOS distances: the halo misses none
            # every unit over a marked cell is in the partition
            over = tree.query(p.region, predicate="intersects")
            assert set(over.tolist()) <= set(p.rows["units"].tolist())


def test_features_read_from_their_cells_are_those_whose_range_meets_the_marked_cells():
    # features of every size: within one cell, across two, across many (read against the cells' summed-area
    # table), and with no cell at all; a partition holds exactly those whose cell range meets its marked cells
    # (reference: every range counted against the table, partition by partition, as the plan did before)
    rng = np.random.default_rng(5)
    grid = parallel.Grid(0.0, 0.0, 10.0, 30, 20, 2)
    x0, y0 = rng.uniform(0, 300, 400), rng.uniform(0, 200, 400)
    size = np.where(rng.random(400) < 0.1, rng.uniform(20, 150, 400), rng.uniform(0, 12, 400))
    ranges = grid.boxes(np.c_[x0, y0, x0 + size, y0 + size * rng.uniform(0.2, 1.5, 400)])
    index = parallel._CellIndex(grid, ranges)
    assert 0 < len(index.large) < 100
    for seed in range(6):
        marked = np.random.default_rng(seed).random((grid.ny, grid.nx)) < 0.15 * (seed + 1)
        expected = np.flatnonzero(parallel._marked_in(parallel._table(marked), ranges) > 0)
        small = np.setdiff1d(expected, index.large)
        assert index.features_on(marked).tolist() == small.tolist()


def test_a_place_is_owned_by_the_partition_of_its_cell(tmp_path):
    project = _grid_project(tmp_path)
    plan = parallel.plan_partitions(project, 4, halo=15.0, reach=1.0)
    g = plan.grid
    x, y = g.x0 + 2.5 * g.cell, g.y0 + 1.5 * g.cell
    assert plan.owners(np.array([x]), np.array([y])).tolist() == [plan.owner[1, 2]]
    assert plan.owners(np.array([np.nan]), np.array([np.nan])).tolist() == [0]


def test_a_finding_is_trusted_only_over_marked_cells():
    grid = parallel.Grid(0.0, 0.0, 10.0, 4, 4, 1)
    marked = np.zeros((4, 4), dtype=bool)
    marked[:2, :2] = True  # x and y from 0 to 20
    boxes = np.array([[5, 5, 12, 12], [5, 5, 25, 12], [np.nan] * 4, [-5, 5, 5, 5], [-5, 5, 5, 15]], dtype=float)
    # off the grid the whole map holds nothing, as the partition does: a box reaching off the map's edge is trusted
    # when its cells on the grid are marked
    assert parallel.trusted(grid, marked, boxes, 1.0).tolist() == [True, False, False, True, True]
    assert parallel.trusted(grid, marked, boxes[:1], 9.0).tolist() == [False]  # its reach runs off the marked cells
    # off the grid on one side, over an unmarked cell on the other
    assert parallel.trusted(grid, marked, np.array([[-5, 5, 5, 25]], dtype=float), 1.0).tolist() == [False]


def test_a_task_and_its_result_cross_process_boundaries(tmp_path):
    project = _grid_project(tmp_path)
    plan = parallel.plan_partitions(project, 2)
    part = plan.partitions[1]
    task = parallel.PartitionTask(1, parallel.sub_project(project, part), ("unit-sliver",), plan.grid, part.marked, plan.reach)
    result = parallel.run_partition(pickle.loads(pickle.dumps(task)))
    assert pickle.loads(pickle.dumps(result)).index == 1


def _plan_of_two() -> parallel.Plan:
    # two cells side by side, x 0-10 owned by partition 0, x 10-20 by partition 1
    grid = parallel.Grid(0.0, 0.0, 10.0, 2, 1, 1)
    owner = np.array([[0, 1]])
    parts = tuple(parallel.Partition(i, owner == i, np.ones((1, 2), bool), {}) for i in range(2))
    return parallel.Plan(grid, owner, parts, 5.0, 1.0)


def test_a_partition_result_pickles_its_geometries_in_bulk_and_back_the_same_to_the_last_bit():
    # the parent reads each partition's hits back: every field of every hit as sent, geometries bit for bit (WKB
    # holds the 64 bits of each coordinate; the SRID and Z as shapely pickles one geometry)
    from archivist.model import Severity
    from archivist.tally import ExactSum

    line = shapely.set_srid(shapely.LineString([(0.1, 1 / 3), (2e5 + 1e-7, 7.0)]), 32633)
    hits = (
        ("unit-gap", Hit("a gap", layer="units", features=("1", "2"), measure=0.1 + 0.2,
                         geometry=shapely.Polygon([(0, 0), (1, 0), (0, 1 / 7)])), 0.5, np.nan, True),
        ("line-dangle", Hit("an end", layer="lines", geometry=line, severity=Severity.parse("warning"), detail=(1, "x")),
         1.0, 2.0, False),
        ("unit-code-missing", Hit("no code", features=("9",), x=3.0, y=4.0), 3.0, 4.0, True),
        ("line-duplicate", Hit("z", geometry=shapely.Point(1.0, 2.0, 3.5)), 1.0, 2.0, True),
        ("line-duplicate", Hit("empty", geometry=shapely.LineString()), np.nan, np.nan, False),
    )
    result = parallel.PartitionResult(3, hits, ("unit-overlap",), ("a note",), (("boundary-without-line", "n", ExactSum()),))
    back = pickle.loads(pickle.dumps(result, protocol=pickle.HIGHEST_PROTOCOL))
    assert (back.index, back.failed, back.notes, back.tallies) == (3, ("unit-overlap",), ("a note",), result.tallies)
    assert len(back.hits) == len(hits)
    for (rid, hit, x, y, t), (rid2, hit2, x2, y2, t2) in zip(hits, back.hits):
        assert (rid, t) == (rid2, t2) and np.array_equal([x, y], [x2, y2], equal_nan=True)
        assert {k: v for k, v in vars(hit).items() if k != "geometry"} == {k: v for k, v in vars(hit2).items() if k != "geometry"}
        if hit.geometry is None:
            assert hit2.geometry is None
        else:
            assert shapely.to_wkb(hit2.geometry, include_srid=True) == shapely.to_wkb(hit.geometry, include_srid=True)
            assert shapely.get_srid(hit2.geometry) == shapely.get_srid(hit.geometry)
    assert shapely.has_z(back.hits[3][1].geometry) and back.hits[4][1].geometry.is_empty
    empty = pickle.loads(pickle.dumps(parallel.PartitionResult(0, (), (), ())))
    assert empty == parallel.PartitionResult(0, (), (), ())


def test_merge_keeps_owned_hits_and_sends_a_rule_the_partitions_cannot_judge_to_the_whole_map():
    plan = _plan_of_two()
    near0, near1 = Hit("at 0", x=0.5, y=0.5), Hit("at 1", x=10.5, y=0.5)
    results = [
        parallel.PartitionResult(0, (("r", near0, 0.5, 0.5, True), ("r", near1, 10.5, 0.5, False)), (), ("note",)),
        parallel.PartitionResult(1, (("r", near1, 10.5, 0.5, True),), (), ("note",)),
    ]
    merged = parallel.merge(plan, ["r"], results)
    assert merged.hits == {"r": [near0, near1]} and merged.whole == () and merged.notes == ("note",)
    # owned but not trusted: the whole map decides
    untrusted = [results[0], parallel.PartitionResult(1, (("r", near1, 10.5, 0.5, False),), (), ())]
    assert parallel.merge(plan, ["r"], untrusted).whole == ("r",)
    # trusted by one partition, missing from its owner: the whole map decides
    missing = [results[0], parallel.PartitionResult(1, (), (), ())]
    missing[0] = parallel.PartitionResult(0, (("r", near0, 0.5, 0.5, True), ("r", near1, 10.5, 0.5, True)), (), ())
    assert parallel.merge(plan, ["r"], missing).whole == ("r",)
    # GEOS stopped the rule in a partition
    assert parallel.merge(plan, ["r"], [results[0], parallel.PartitionResult(1, (), ("r",), ())]).whole == ("r",)
    # another partition measured the owner's finding a few bits apart (its overlay saw fewer polygons): the same
    # finding, the owner's is reported; a different sentence for the same features is not the same finding
    noisy = Hit("at 1", x=10.5, y=0.5, measure=61.66608150143114)
    owner = Hit("at 1", x=10.5, y=0.5, measure=61.6660812134566)
    bits = [parallel.PartitionResult(0, (("r", near0, 0.5, 0.5, True), ("r", noisy, 10.5, 0.5, True)), (), ()),
            parallel.PartitionResult(1, (("r", owner, 10.5, 0.5, True),), (), ())]
    assert parallel.merge(plan, ["r"], bits).hits == {"r": [near0, owner]}
    other = [bits[0], parallel.PartitionResult(1, (("r", Hit("at 1, wider", x=10.5, y=0.5), 10.5, 0.5, True),), (), ())]
    assert parallel.merge(plan, ["r"], other).whole == ("r",)


def test_an_interrupt_cancels_the_partitions_not_started(tmp_path):
    project = _grid_project(tmp_path)
    submitted: list[Future] = []

    class Interrupting(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            fut: Future = Future()
            submitted.append(fut)
            if len(submitted) == 1:
                fut.set_exception(KeyboardInterrupt())
            return fut

    with pytest.raises(KeyboardInterrupt):
        parallel.run_partitioned(project, select(rules=["unit-sliver"]), Interrupting(1), 3)
    # the second was sent (a wave is two per worker) and is cancelled; the third is never sent
    assert len(submitted) == 2 and all(f.cancelled() for f in submitted[1:])


def test_partitions_are_sent_in_waves_of_two_per_worker(tmp_path):
    project = _grid_project(tmp_path)
    outstanding: list[int] = []
    live: set[Future] = set()

    class Watching(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            fut = super().submit(fn, *args, **kwargs)
            live.add(fut)
            outstanding.append(sum(not f.done() for f in live))
            return fut

    with Watching(2) as pool:
        merged = parallel.run_partitioned(project, select(rules=["unit-sliver"]), pool, 9)
    assert len(outstanding) == 9 and max(outstanding) <= 4
    assert merged.whole == ()


def test_forked_workers_read_the_map_from_their_parent_and_find_what_one_process_finds(tmp_path):
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")  # Windows: --jobs uses threads there
    project = _grid_project(tmp_path)
    sent: list[object] = []
    pool = parallel.make_executor(2, "fork")
    assert isinstance(pool, parallel.ForkPool)
    real = pool.submit

    def watched(fn, /, *args, **kwargs):  # type: ignore[no-untyped-def]
        sent.append(args[0])
        return real(fn, *args, **kwargs)

    pool.submit = watched  # type: ignore[method-assign]
    try:
        report = engine.check(project, rules=["unit-sliver"], executor=pool, parts=3)
    finally:
        pool.shutdown()
    assert report.findings == engine.check(project, rules=["unit-sliver"]).findings
    # what goes to a worker is the partition, not its features: a few hundred bytes, not the layer
    assert all(isinstance(t, parallel.InheritedTask) for t in sent) and len(sent) == 3
    assert max(len(pickle.dumps(t)) for t in sent) < len(pickle.dumps(project.layers["units"].frame))
    assert not parallel._SHARED  # shutting the pool down lets go of the project


def test_a_fork_pool_started_ahead_forks_its_processes_before_any_task(tmp_path):
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")
    project = _grid_project(tmp_path)
    before = len(multiprocessing.active_children())
    pool = parallel.make_executor(2, "fork")
    assert isinstance(pool, parallel.ForkPool)
    try:
        key = pool.share(project)
        pool.start()
        assert len(multiprocessing.active_children()) == before + 2  # forked now, holding the project shared
        plan = parallel.plan_partitions(project, 2)
        part = plan.partitions[1]
        got = pool.submit(parallel.run_inherited, parallel.InheritedTask(key, part, ("unit-sliver",), plan.grid,
                                                                          plan.reach)).result()
        assert got.index == 1
    finally:
        pool.shutdown()


class _NoPickle:
    """An argument that refuses to be pickled: a task given it runs where it finds it in memory."""

    value = 41

    def __reduce__(self):
        raise TypeError("not to be pickled")


def _pid_plus(x: _NoPickle) -> tuple[int, int]:
    import os

    return os.getpid(), x.value + 1


def _fails() -> None:
    raise ValueError("bad cell B7")


def _dies_if_forked(parent: int) -> int:
    import os

    if os.getpid() != parent:
        os._exit(3)  # the forked process dies without a word
    return os.getpid()


def _sleeps() -> None:
    time.sleep(60)


def _needs_fork() -> None:
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")


def test_a_task_aside_runs_in_a_forked_process_on_what_it_finds_in_memory():
    import os

    _needs_fork()
    with parallel.Aside(_pid_plus, _NoPickle()) as aside:
        pid, value = aside.result()
    assert pid != os.getpid() and value == 42


def test_a_task_aside_raises_its_error_here():
    _needs_fork()
    with parallel.Aside(_fails) as aside:
        with pytest.raises(ValueError, match="bad cell B7"):
            aside.result()


def test_a_task_not_forked_runs_here_when_its_result_is_asked():
    import os

    assert parallel.Aside(_pid_plus, _NoPickle(), fork=False).result() == (os.getpid(), 42)


def test_a_task_whose_forked_process_dies_runs_here():
    import os

    _needs_fork()
    with parallel.Aside(_dies_if_forked, os.getpid()) as aside:
        assert aside.result() == os.getpid()


def test_leaving_a_task_aside_on_an_error_ends_its_process():
    import multiprocessing

    _needs_fork()
    before = set(multiprocessing.active_children())
    t = time.perf_counter()
    with pytest.raises(KeyboardInterrupt):
        with parallel.Aside(_sleeps):
            time.sleep(0.2)
            raise KeyboardInterrupt
    for proc in set(multiprocessing.active_children()) - before:
        proc.join(timeout=10)
    assert not set(multiprocessing.active_children()) - before
    assert time.perf_counter() - t < 30  # not left to sleep its minute


def test_a_partition_gets_the_answers_its_layer_holds_for_its_rows(tmp_path):
    from archivist.farcoords import far_out

    project = _grid_project(tmp_path)
    layer = project.layers["units"]
    plan = parallel.plan_partitions(project, 2)
    part = plan.partitions[1]
    fresh = parallel.sub_project(project, part).layers["units"]
    assert "valid" not in fresh.__dict__ and "far" not in fresh.__dict__  # nothing known: nothing carried
    layer.valid, layer.far
    sub = parallel.sub_project(project, part).layers["units"]
    assert "valid" in sub.__dict__ and "far" in sub.__dict__
    # the rows' answers, as GEOS and far_out give them for the partition's own geometries
    assert sub.valid.tolist() == shapely.is_valid(sub.geometry).tolist() == layer.valid[part.rows["units"]].tolist()
    mask, largest = far_out(sub.geometry, sub.crs)
    assert sub.far[0].tolist() == mask.tolist() and np.array_equal(sub.far[1], largest)


def test_the_validity_asked_ahead_is_geos_answer_for_every_source_layer(tmp_path):
    project = _grid_project(tmp_path)
    engine._validity_ahead(project).join()
    for layer in project.sources.values():
        assert "valid" in layer.__dict__
        assert layer.valid.tolist() == shapely.is_valid(layer.geometry).tolist()


def test_a_family_runs_on_partitions_only_when_each_of_its_rules_can(tmp_path):
    project = _grid_project(tmp_path)
    sent = []

    class Counting(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            sent.append(args[0].rules)
            return super().submit(fn, *args, **kwargs)

    with Counting(2) as pool:
        engine.check(project, rules=["unit-sliver"], executor=pool, parts=3)
        assert sent == [("unit-sliver",)] * 3
        sent.clear()
        # unit-gap needs the whole map; unit-sliver stays with it (they share the unit polygons)
        engine.check(project, rules=["unit-sliver", "unit-gap"], executor=pool, parts=3)
        assert sent == []


def test_the_partitioned_families_go_together_so_a_partition_builds_their_shared_analyses_once(tmp_path):
    import geopandas as gpd

    project = _grid_project(tmp_path)
    folder = tmp_path / "grid"
    lines = [shapely.LineString([(0, j * 10.0), (120, j * 10.0)]) for j in range(13)]
    gpd.GeoDataFrame({"kind": ["contact"] * len(lines)}, geometry=lines, crs="EPSG:32633").to_file(folder / "map.gpkg", layer="lines")
    with open(folder / "archivist.toml", "a", encoding="utf-8") as f:
        f.write('[layers.lines]\npath = "map.gpkg"\nlayer = "lines"\n')
    project = load_project(folder)
    sent = []
    built = []

    class Counting(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            sent.append(args[0].rules)
            return super().submit(fn, *args, **kwargs)

    from archivist.analysis import context

    real = context.read_units

    def counted(project):  # type: ignore[no-untyped-def]
        built.append(project)
        return real(project)

    rules = ["unit-sliver", "line-same-unit-contact"]  # one rule of each family, both reading the unit polygons
    with Counting(2) as pool, pytest.MonkeyPatch.context() as mp:
        mp.setattr(context, "read_units", counted)
        report = engine.check(project, rules=rules, executor=pool, parts=3)
    assert sent == [tuple(rules)] * 3
    assert len(built) == 3  # the unit polygons once per partition, not once per family and partition
    assert report.findings == engine.check(project, rules=rules).findings


def test_the_partitions_are_sent_before_the_families_of_the_whole_map_run_here(tmp_path):
    from archivist.progress import Progress

    project = _grid_project(tmp_path)
    events: list[str] = []

    class Watching(Progress):
        def _begin(self, step) -> None:  # type: ignore[no-untyped-def]
            events.append(step.label)

    class Counting(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            events.append("partition sent")
            return super().submit(fn, *args, **kwargs)

    with Counting(2) as pool:
        report = engine.check(project, rules=["layer-empty", "unit-sliver"], executor=pool, parts=3, progress=Watching())
    # the workers run the partitions while this process runs the metadata family
    assert events == ["partition sent"] * 3 + ["metadata rules", "topology rules"]
    assert report.findings == engine.check(project, rules=["layer-empty", "unit-sliver"]).findings


def test_default_jobs_are_the_cores_this_process_may_use(monkeypatch):
    monkeypatch.setattr(parallel.os, "sched_getaffinity", lambda pid: {0, 3, 5}, raising=False)
    assert parallel.default_jobs() == 3


def test_jobs_must_not_be_negative(tmp_path):
    with pytest.raises(archivist.ArchivistError, match="jobs"):
        archivist.check(_grid_project(tmp_path), jobs=-1)


# ---------------------------------------------------------------- the rule cases, cut into partitions


def quilt(tmp_path: Path, name: str = "quilt", *, n: int = 20, drawn: float = 0.0, frame: bool = True, seed: int = 0) -> Path:
    """An n x n quilt of 10 m cells at 1:1 000 (tolerance 0.1 m), units A and B in a checkerboard, inner vertices
    jittered up to 2 m (lengths that add up differently in another order), an extent layer, a map-boundary line
    around it when ``frame``, and a contact on a random share ``drawn`` of the boundaries between cells."""
    import geopandas as gpd

    from builders import tiny_project
    from coverage_builders import CRS

    rng = np.random.default_rng(seed)
    vx, vy = np.meshgrid(np.arange(n + 1) * 10.0, np.arange(n + 1) * 10.0, indexing="ij")
    inner = (slice(1, n), slice(1, n))
    vx[inner] += rng.uniform(-2, 2, (n - 1, n - 1))
    vy[inner] += rng.uniform(-2, 2, (n - 1, n - 1))
    v = np.stack([vx, vy], axis=-1)
    cells = [shapely.Polygon([v[i, j], v[i + 1, j], v[i + 1, j + 1], v[i, j + 1]]) for i in range(n) for j in range(n)]
    codes = ["A" if (i + j) % 2 == 0 else "B" for i in range(n) for j in range(n)]
    between = [shapely.LineString([v[i, j], v[i, j + 1]]) for i in range(1, n) for j in range(n)]
    between += [shapely.LineString([v[i, j], v[i + 1, j]]) for i in range(n) for j in range(1, n)]
    rows = [("contact", g) for g in np.array(between, dtype=object)[rng.random(len(between)) < drawn]]
    ring = np.r_[v[:, 0], v[-1, 1:], v[-2::-1, -1], v[0, -2::-1]]
    if frame:
        rows.append(("map-boundary", shapely.LineString(ring)))
    lines = gpd.GeoDataFrame({"kind": [r[0] for r in rows], "certainty": ["certain"] * len(rows)},
                             geometry=[r[1] for r in rows], crs=CRS)
    units = gpd.GeoDataFrame({"unit": codes}, geometry=cells, crs=CRS)
    return tiny_project(tmp_path, name=name, units=units, lines=lines, extent=shapely.box(0, 0, 10.0 * n, 10.0 * n),
                        manifest={"map": {"scale": 1000}})


def no_contact_in_a_frame(tmp_path: Path) -> Path:
    from coverage_builders import FRAME, square_map

    return square_map(tmp_path, "nocontact-extent", line_rows=[("map-boundary", FRAME)], extent=shapely.box(0, 0, 10, 10))


CASES = {rid: pair for rid, pair in all_cases().items() if rid in PARTITIONED}
# boundary-without-line goes to partitions only with an extent layer (else the map edge is the units' outline):
# one stretch; every boundary undrawn (one summary from stretches all over the map); a third of them drawn
# (stretches listed); a frame with no line (one summary of the map edge, the boundaries listed)
CASES["boundary-without-line"] = (*CASES["boundary-without-line"], no_contact_in_a_frame, quilt,
                                  lambda p: quilt(p, "some", drawn=0.7, seed=1), lambda p: quilt(p, "frameless", drawn=0.8, frame=False))


@pytest.mark.parametrize("tight", [False, True], ids=["halo", "tight-halo"])
@pytest.mark.parametrize("rid", sorted(CASES))
def test_rule_cases_on_partitions_give_the_findings_of_one_process(rid, tight, tmp_path, monkeypatch):
    # the cases are a few features each: 2, 3 and 5 partitions put partition borders through every defect;
    # with a halo narrower than a feature ("tight"), the partitions cannot judge most findings and the merge
    # must notice it
    if tight:
        monkeypatch.setattr(parallel, "HALO_FEATURES", 0.3)
    with ThreadPoolExecutor(2) as pool:
        for k, make_case in enumerate(CASES[rid]):
            folder = make_case(tmp_path / f"case{k}")
            project = load_project(folder)
            # the rule alone: its family then runs on the partitions
            reference = engine.check(project, rules=[rid])
            for parts in (2, 3, 5):
                same_report(reference, engine.check(project, rules=[rid], executor=pool, parts=parts))


def _sent_to_partitions(monkeypatch) -> list:
    """Record what each run on partitions merged (the engine sends them with parallel.Sent and merges when needed)."""
    merged: list = []
    run = parallel.Sent.merged

    def recording(self, *args, **kwargs):  # type: ignore[no-untyped-def]
        merged.append(run(self, *args, **kwargs))
        return merged[-1]

    monkeypatch.setattr(parallel.Sent, "merged", recording)
    return merged


def test_missing_linework_at_the_threshold_is_judged_on_partitions_as_in_one_process(tmp_path, monkeypatch):
    # The share of undrawn boundary between units is set at the threshold to the last bit: one double below it
    # (a summary) and at it (stretch by stretch). The totals are over 760 edges of lengths that add up
    # differently in another order (checked below), counted by the partition owning each edge.
    import math

    from archivist.analysis.context import CheckContext
    from archivist.rules import linework

    project = load_project(quilt(tmp_path, drawn=0.5, seed=2))
    info = get_rule("boundary-without-line")
    ctx = CheckContext(project)
    stretches = [h for h in info.func(ctx.view(), ctx) if h.detail[0] == "between"]
    tally = info.settle.tally(ctx.view(), ctx)["between"]
    # the reference sums: math.fsum, the correctly rounded sum of the values (Python documentation, math.fsum)
    missing, total = math.fsum(h.measure for h in stretches), math.fsum(tally.values.tolist())
    plan = parallel.plan_partitions(ctx.view(), 3)
    owner = plan.owners(tally.x, tally.y)
    in_parts = sum(float(np.sum(tally.values[owner == k])) for k in range(3))
    assert in_parts != total  # summed partition by partition the total would differ in its last bits
    over = under = missing / total
    while over * total >= missing:
        over = float(np.nextafter(over, 0.0))
    while under * total < missing:
        under = float(np.nextafter(under, 1.0))
    assert len(stretches) > linework.SYSTEMATIC_STRETCHES and float(np.nextafter(over, 1.0)) == under
    merged = _sent_to_partitions(monkeypatch)
    with ThreadPoolExecutor(2) as pool:
        for share, summary in ((over, True), (under, False)):
            monkeypatch.setattr(linework, "SYSTEMATIC_SHARE", share)
            reference = engine.check(project, rules=["boundary-without-line"])
            assert (len(reference.findings) == 1) is summary, share
            for parts in (2, 3, 5):
                merged.clear()
                same_report(reference, engine.check(project, rules=["boundary-without-line"], executor=pool, parts=parts))
                assert merged[0].whole == () and "boundary-without-line" in merged[0].hits


def test_a_summary_of_stretches_owned_by_different_partitions(tmp_path, monkeypatch):
    project = load_project(quilt(tmp_path))
    reference = engine.check(project, rules=["boundary-without-line"])
    (summary,) = reference.findings
    assert summary.message.startswith("No line draws 760 stretches of the boundaries between units")
    merged = _sent_to_partitions(monkeypatch)
    with ThreadPoolExecutor(2) as pool:
        same_report(reference, engine.check(project, rules=["boundary-without-line"], executor=pool, parts=4))
    # each partition owned some of the stretches the summary counts
    from archivist.analysis.context import CheckContext

    ctx = CheckContext(project)
    xs, ys, _ = parallel.places_of(list(get_rule("boundary-without-line").func(ctx.view(), ctx)))
    places = np.c_[xs, ys]
    plan = parallel.plan_partitions(ctx.view(), 4)
    assert set(plan.owners(places[:, 0], places[:, 1]).tolist()) == {0, 1, 2, 3}
    assert merged[0].whole == ()


def test_a_hits_place_is_the_findings_place_and_its_box_takes_in_geometry_and_point():
    # what a partition owns a hit by must be where the finding will stand: archivist.engine.to_findings places it
    # (rounded there to the map's digits); the box is GEOS's bounds of the geometry, grown to the point
    info = get_rule("unit-overlap")
    tri = shapely.Polygon([(0, 0), (4, 0), (0, 3)])
    hits = [
        Hit("own point", geometry=tri, x=10.0, y=-2.0),  # its own point, outside its geometry
        Hit("polygon", geometry=tri),
        Hit("point", geometry=shapely.Point(2.5, 7.25)),
        Hit("line", geometry=shapely.LineString([(0, 0), (2, 2), (6, 2)])),
        Hit("empty", geometry=shapely.Polygon()),
        Hit("nothing"),
        Hit("point only", x=1.5, y=2.5),
    ]
    xs, ys, boxes = parallel.places_of(hits)
    findings = engine.to_findings(info, hits, info.severity, digits=9)
    for f, x, y in zip(findings, xs.tolist(), ys.tolist()):
        assert (f.x, f.y) == ((round(x, 9), round(y, 9)) if np.isfinite(x) else (None, None)), f.message
    on = shapely.point_on_surface(tri)
    assert (xs[1], ys[1]) == (on.x, on.y) and (xs[2], ys[2]) == (2.5, 7.25)
    assert boxes[0].tolist() == [0.0, -2.0, 10.0, 3.0]
    assert boxes[1].tolist() == list(shapely.bounds(tri)) and boxes[3].tolist() == [0.0, 0.0, 6.0, 2.0]
    assert boxes[6].tolist() == [1.5, 2.5, 1.5, 2.5]
    assert np.isnan(boxes[4]).all() and np.isnan(boxes[5]).all() and np.isnan(xs[4]) and np.isnan(xs[5])
    assert [len(a) for a in parallel.places_of([])] == [0, 0, 0]


def test_missing_linework_without_an_extent_layer_stays_whole(tmp_path):
    # the map edge is then the outline of the units, which a partition's units do not give: the rule is not sent
    from coverage_builders import FRAME, square_map

    sent = []

    class Counting(ThreadPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
            sent.append(args[0].rules)
            return super().submit(fn, *args, **kwargs)

    rules = ["boundary-without-line", "line-dangle"]
    for extent, expected in ((None, ("line-dangle",)), (shapely.box(0, 0, 10, 10), ("line-dangle", "boundary-without-line"))):
        root = square_map(tmp_path, f"extent-{extent is not None}", line_rows=[("map-boundary", FRAME)], extent=extent)
        project = load_project(root)
        sent.clear()
        with Counting(2) as pool:
            same_report(engine.check(project, rules=rules), engine.check(project, rules=rules, executor=pool, parts=2))
        assert sent and all(set(r) == set(expected) for r in sent)


# ---------------------------------------------------------------- synthetic maps of 10^4 polygons


@pytest.fixture(scope="module")
def maps(tmp_path_factory):
    root = tmp_path_factory.mktemp("maps")
    make(root / "clean", 10_000, seed=3)
    make(root / "defects", 10_000, seed=4, defects=40)
    return root


@pytest.mark.slow
@pytest.mark.parametrize("name", ["clean", "defects"])
def test_jobs_1_2_and_4_give_the_same_findings_on_a_map_of_ten_thousand_polygons(maps, name):
    project = load_project(maps / name)
    reference = archivist.check(project, jobs=1)
    assert name == "clean" or len(reference.findings) > 100
    for jobs in (2, 4):
        same_report(reference, archivist.check(project, jobs=jobs))  # threads, families side by side
        same_report(reference, archivist.check(project, jobs=jobs, parts=jobs))  # processes, partitions
    # the partitioned rules alone: topology and linework run on the partitions
    reference = archivist.check(project, rules=PARTITIONED, jobs=1)
    assert name == "clean" or {f.rule for f in reference.findings} >= {"line-dangle"}
    for jobs in (2, 4):
        same_report(reference, archivist.check(project, rules=PARTITIONED, jobs=jobs, parts=jobs))


@pytest.fixture(scope="module")
def density_maps(tmp_path_factory):
    # the benchmark's maps with defect density as a second axis (tests/benchmarks/topology_maps.py), at 1:5 000
    root = tmp_path_factory.mktemp("density")
    for density in (0.0, 0.01):
        make(root / f"density{density}", 10_000, seed=6, density=density, scale=5000)
    return root


@pytest.mark.slow
@pytest.mark.parametrize("density", [0.0, 0.01])
def test_the_linework_family_on_partitions_gives_the_findings_of_one_process(density_maps, density, monkeypatch):
    project = load_project(density_maps / f"density{density}")
    reference = archivist.check(project, only=["linework"])
    rules = {r.id for r in all_rules() if r.family == "linework"}
    assert set(reference.rules_run) == rules
    assert density == 0.0 or {"boundary-without-line", "line-dangle", "line-off-boundary"} <= {f.rule for f in reference.findings}
    merged = _sent_to_partitions(monkeypatch)
    with ThreadPoolExecutor(2) as pool:
        for parts in (2, 4):
            merged.clear()
            same_report(reference, archivist.check(project, only=["linework"], executor=pool, parts=parts))
            # the whole family ran on the partitions, no rule of it on the whole map
            (run,) = merged
            assert run.whole == () and set(run.hits) == rules


@pytest.mark.slow
def test_the_command_line_gives_the_same_report_with_jobs(maps, tmp_path):
    from click.testing import CliRunner

    from archivist.cli import cli as main

    outs = []
    for jobs in ("1", "2"):
        out = tmp_path / f"jobs{jobs}.json"
        result = CliRunner().invoke(main, ["check", str(maps / "defects"), "--jobs", jobs, "-q", "--format", "json", "-o", str(out)])
        assert result.exit_code == 1, result.output
        outs.append(out.read_bytes())
    assert outs[0] == outs[1]


# ---------------------------------------------------------------- families side by side on threads


def test_a_shared_analysis_asked_by_many_threads_at_once_is_computed_once(tmp_path):
    from archivist.analysis.context import CheckContext

    ctx = CheckContext(_grid_project(tmp_path, 3))
    calls = []
    start = threading.Barrier(8)

    def compute():
        calls.append(1)
        time.sleep(0.05)
        ctx.note("computed")
        return object()

    got = []

    def ask():
        start.wait()
        got.append(ctx.shared("k", compute))

    workers = [threading.Thread(target=ask) for _ in range(8)]
    for t in workers:
        t.start()
    for t in workers:
        t.join()
    assert len(calls) == 1 and len({id(v) for v in got}) == 1 and ctx.notes == ["computed"]


def test_notes_come_in_the_order_of_one_thread_whichever_rule_computed_the_analysis(tmp_path):
    from archivist.analysis.context import CheckContext

    ctx = CheckContext(_grid_project(tmp_path, 3))

    def analysis():
        ctx.note("analysis")
        return 1

    first, second = [], []
    with ctx.recording(second):  # the later rule happens to compute it
        ctx.note("second's own")
        ctx.shared("k", analysis)
    with ctx.recording(first):  # the earlier rule reads the value already there
        ctx.note("first's own")
        ctx.shared("k", analysis)
    assert ctx.ordered_notes([first, second]) == ["first's own", "analysis", "second's own"]


@pytest.mark.slow
def test_every_rule_case_on_threads_gives_the_report_of_one_thread(tmp_path):
    # every rule's failing and passing case (geographic maps, left-out layers, empty layers, notes of the
    # shared analyses) checked whole with three threads and with one
    for rid, pair in sorted(all_cases().items()):
        if get_rule(rid).family == "archive":
            continue
        for k, make_case in enumerate(pair):
            folder = make_case(tmp_path / f"{rid}-{k}")
            project = load_project(folder)
            same_report(archivist.check(project, jobs=1), archivist.check(project, jobs=3))


def test_progress_shows_each_family_once_with_its_rules_on_threads(tmp_path):
    from archivist.progress import Progress

    class Recording(Progress):
        def __init__(self):
            super().__init__()
            self.begun, self.ended, self.advanced = [], [], {}

        def _begin(self, step):
            self.begun.append((step.label, step.total))

        def _advance(self, step, n):
            self.advanced[step.label] = self.advanced.get(step.label, 0) + n

        def _end(self, step):
            self.ended.append(step.label)

    project = _grid_project(tmp_path)
    one, many = Recording(), Recording()
    archivist.check(project, jobs=1, progress=one)
    archivist.check(project, jobs=2, progress=many)
    assert sorted(many.begun) == sorted(one.begun) and sorted(many.ended) == sorted(one.ended)
    assert many.advanced == one.advanced == {label: total for label, total in one.begun if total}


def test_ctrl_c_on_threads_stops_the_check_at_once_and_no_further_rule_starts(tmp_path):
    import _thread
    from dataclasses import replace

    project = _grid_project(tmp_path)
    started = threading.Event()
    release = threading.Event()
    ran = []

    def blocking(project, ctx):
        started.set()
        release.wait(10)
        return iter(())

    def later(project, ctx):
        ran.append("later")
        return iter(())

    rules = [replace(get_rule("unit-gap"), func=blocking), replace(get_rule("unit-overlap"), func=later)]
    threading.Timer(0.2, lambda: started.wait(5) and _thread.interrupt_main()).start()
    t0 = time.perf_counter()
    with pytest.raises(KeyboardInterrupt):
        engine.run_rules(project, rules, threads=2)
    assert time.perf_counter() - t0 < 5  # the rule still blocks: the check did not wait for it
    release.set()
    time.sleep(0.2)
    assert ran == []  # the family's next rule never started


def test_an_error_in_a_family_on_a_thread_reaches_the_caller(tmp_path):
    from dataclasses import replace

    def broken(project, ctx):
        raise RuntimeError("broken rule")

    with pytest.raises(RuntimeError, match="broken rule"):
        engine.run_rules(_grid_project(tmp_path), [replace(get_rule("unit-gap"), func=broken)], threads=2)


DRIVER = """
import sys
from dataclasses import replace

import numpy as np
import shapely

from archivist import registry
from archivist.cli import main


def busy_in_geos(project, ctx):
    polys = shapely.buffer(shapely.points(np.random.default_rng(0).random((20000, 2))), 0.01, quad_segs=64)
    print("inside", flush=True)
    while True:  # GEOS work (the GIL released) until the process ends
        shapely.union_all(shapely.buffer(polys, 0.001))


registry._RULES["unit-gap"] = replace(registry.get_rule("unit-gap"), func=busy_in_geos)
sys.argv = ["archivist", "check", sys.argv[1], "-q", "--jobs", "2"]
main()
"""


@contextlib.contextmanager
def _driver(source: str, root: Path):
    """A driver script run in a session of its own; whatever the test asserts, nothing of it outlives the test
    (a failed assertion before the Ctrl-C once left its forked workers spinning in GEOS)."""
    import os
    import signal
    import subprocess

    proc = subprocess.Popen([sys.executable, "-c", source, str(root)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True)
    try:
        yield proc
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
        try:
            proc.communicate(timeout=10)
        except Exception:
            pass


@pytest.mark.slow
def test_ctrl_c_while_a_thread_is_inside_geos_leaves_the_command_line_with_130(tmp_path):
    # the interpreter must not shut down under a thread still inside a GEOS call (it crashed with SIGSEGV)
    import signal
    import subprocess

    project = _grid_project(tmp_path)
    for attempt in range(3):
        with _driver(DRIVER, project.root) as proc:
            assert proc.stdout is not None
            assert proc.stdout.readline().strip() == "inside"
            time.sleep(0.3 * attempt)
            proc.send_signal(signal.SIGINT)
            _, err = proc.communicate(timeout=60)
            assert proc.returncode == 130, err
            assert err.strip().splitlines()[-1] == "archivist: interrupted (Ctrl-C); an output not yet complete was not written"


FORK_DRIVER = """
import os
import sys
from dataclasses import replace

import numpy as np
import shapely

from archivist import parallel, registry
from archivist.cli import main


def busy_in_geos(project, ctx):
    polys = shapely.buffer(shapely.points(np.random.default_rng(0).random((20000, 2))), 0.01, quad_segs=64)
    os.write(1, f"inside {os.getpid()}\\n".encode())  # one write: two workers' lines never interleave in the pipe
    while True:  # GEOS work in a forked worker until it is stopped
        shapely.union_all(shapely.buffer(polys, 0.001))


registry._RULES["unit-sliver"] = replace(registry.get_rule("unit-sliver"), func=busy_in_geos)
parallel.FORK_FEATURES = 0  # this small map on forked workers, as a large one would be
sys.argv = ["archivist", "check", sys.argv[1], "-q", "--jobs", "2", "--rule", "unit-sliver"]
main()
"""


@pytest.mark.slow
def test_ctrl_c_while_forked_workers_run_leaves_no_worker_and_exits_130(tmp_path):
    import multiprocessing
    import os
    import signal
    import subprocess

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")
    project = _grid_project(tmp_path)
    with _driver(FORK_DRIVER, project.root) as proc:
        assert proc.stdout is not None
        word, pid = proc.stdout.readline().split()
        assert word == "inside" and int(pid) != proc.pid  # the rule runs in a worker process
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
        assert proc.returncode == 130, err
        assert err.strip().splitlines()[-1] == "archivist: interrupted (Ctrl-C); an output not yet complete was not written"
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:
            try:
                os.kill(int(pid), 0)
            except ProcessLookupError:
                break
            time.sleep(0.1)
        else:
            pytest.fail(f"worker {pid} still runs after the check stopped")


def test_jobs_fork_partitions_only_when_every_partitioned_family_goes_whole(tmp_path, monkeypatch):
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")
    from dataclasses import replace

    make(tmp_path / "map", 300, seed=1)
    framed = load_project(tmp_path / "map")
    assert "extent" in framed.layers
    # without its extent layer the coverage rules stay on the whole map: the topology family is split
    project = replace(framed, layers={role: layer for role, layer in framed.layers.items() if role != "extent"})
    monkeypatch.setattr(parallel, "FORK_FEATURES", 0)
    families = {info.family for info in all_rules()}
    split = [f for f in sorted(families) if {i.partitions(project) for i in all_rules() if i.family == f} == {True, False}]
    whole = [f for f in sorted(families) if {i.partitions(project) for i in all_rules() if i.family == f} == {True}]
    assert "topology" in split and whole
    # with the extent layer the topology family goes to the partitions whole
    assert parallel.fork_parts(framed, select(["topology"], []), 2) == 2
    # every rule of a family partitioned: the family goes to the partitions, the workers are forked
    assert parallel.fork_parts(project, select([whole[0]], []), 2) == 2
    one = [i for i in all_rules() if i.partitions(project) and i.family == split[0]][:1]
    assert parallel.fork_parts(project, one, 2) == 2
    # a family with a rule that stays on the whole map: that family runs here, so threads, not forked partitions
    assert parallel.fork_parts(project, select([split[0]], []), 2) is None
    assert parallel.fork_parts(project, select([whole[0]], []), 1) is None
    monkeypatch.setattr(parallel, "FORK_FEATURES", 10**9)
    assert parallel.fork_parts(project, select([whole[0]], []), 2) is None


def test_free_memory_is_released_before_the_workers_fork_and_nothing_held_changes(tmp_path, monkeypatch):
    # glibc's malloc_trim only gives free pages back to the system; where there is no glibc nothing is done
    import ctypes

    _needs_fork()
    project = _grid_project(tmp_path)
    before = [g.wkb for g in project.layers["units"].geometry]
    parallel.release_free_memory()
    assert [g.wkb for g in project.layers["units"].geometry] == before
    calls: list[int] = []
    real = parallel.release_free_memory
    monkeypatch.setattr(parallel, "release_free_memory", lambda: calls.append(1) or real())
    pool = parallel.ForkPool(1)
    try:
        pool.share(project)
        pool.start()
        assert calls == [1]
    finally:
        pool.shutdown()

    def no_libc(*args, **kwargs):
        raise OSError("no C library here")

    monkeypatch.setattr(ctypes, "CDLL", no_libc)
    assert real() is None
