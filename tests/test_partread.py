"""Partition tasks that read their own features (archivist/partread.py): the same task, rebuilt from the files.

No cluster is needed: the executor here is a thread pool; what a Dask
worker runs is the same top-level function.
"""

from __future__ import annotations

import dataclasses
import pickle
import sys
from concurrent.futures import Executor, Future, ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pyogrio
import pytest
import shapely
from pandas.testing import assert_frame_equal

from archivist import parallel
from archivist.partread import ReadingExecutor, ReadMismatch, read_task, run_slim_partition, slim_task
from archivist.project import load_project
from archivist.registry import select

sys.path.insert(0, str(Path(__file__).resolve().parent / "benchmarks"))
from topology_maps import make  # noqa: E402

PARTS = 4


@pytest.fixture(scope="module")
def synthetic(tmp_path_factory):
    """A synthetic map of about 2 000 polygons with a few overlaps, gaps and dangles (tests/benchmarks/topology_maps.py)."""
    folder = tmp_path_factory.mktemp("partread") / "map"
    make(folder, 2000, seed=3, defects=4)
    return folder


class Recording(Executor):
    """Runs each call at once, and keeps the partition tasks it was given."""

    def __init__(self) -> None:
        self.tasks: list = []

    def submit(self, fn, /, *args, **kwargs):
        if fn is parallel.run_partition:
            self.tasks.extend(args)
        future: Future = Future()
        future.set_result(fn(*args, **kwargs))
        return future


def tasks_of(project):
    """The partition tasks the engine sends for the partitioned rules (archivist.parallel.run_partitioned)."""
    recording = Recording()
    parallel.run_partitioned(project, [r for r in select((), ()) if r.partitioned], recording, PARTS)
    assert recording.tasks
    return recording.tasks


def assert_same_task(read, sent):
    assert set(read.project.layers) == set(sent.project.layers)
    for role, layer in sent.project.layers.items():
        got = read.project.layers[role]
        assert_frame_equal(got.frame, layer.frame, check_exact=True)  # geometry compared by GeoPandas' equality
        assert shapely.to_wkb(got.geometry).tolist() == shapely.to_wkb(layer.geometry).tolist()
        assert got.frame.crs == layer.frame.crs
        assert got.ids.tolist() == layer.ids.tolist()
    for name in {f.name for f in dataclasses.fields(sent)} - {"project"}:
        a, b = getattr(read, name), getattr(sent, name)
        if isinstance(b, np.ndarray) and b.dtype == object:  # geometries
            assert shapely.to_wkb(a).tolist() == shapely.to_wkb(b).tolist(), name
        else:
            assert pickle.dumps(a) == pickle.dumps(b), name


def test_a_slim_task_read_back_is_the_task(synthetic):
    project = load_project(synthetic)
    for task in tasks_of(project):
        slim = slim_task(task, project)
        assert slim is not None and {"units", "lines"} <= set(slim.reads)
        assert all(len(layer.frame) == 0 for role, layer in slim.task.project.layers.items() if role in slim.reads)
        assert len(pickle.dumps(slim)) < len(pickle.dumps(task)) / 3  # the features stay in the files
        assert_same_task(read_task(slim), task)


def test_findings_through_the_reading_executor_are_the_partitions_findings(synthetic):
    project = load_project(synthetic)
    tasks = tasks_of(project)
    with ThreadPoolExecutor(2) as pool:
        executor = ReadingExecutor(pool)
        executor.reading(project)
        got = [executor.submit(parallel.run_partition, t).result() for t in tasks]
        assert executor.sent_slim == len(tasks) and executor.fell_back == 0
    assert got == [parallel.run_partition(t) for t in tasks]


def test_a_file_changed_after_the_client_read_it_sends_the_features(synthetic, tmp_path):
    """The worker's read does not match the client's fingerprint: ReadMismatch, and the whole task is sent instead."""
    import shutil

    folder = tmp_path / "map"
    shutil.copytree(synthetic, folder)
    project = load_project(folder)
    task = tasks_of(project)[0]
    slim = slim_task(task, project)
    assert slim is not None
    units = pyogrio.read_dataframe(folder / "map.gpkg", layer="units", fid_as_index=True)
    fid = int(task.project.layers["units"].frame.index[0])
    units.loc[fid, "geometry"] = shapely.affinity.translate(units.loc[fid, "geometry"], 0.001, 0.0)
    pyogrio.write_dataframe(units.reset_index(), folder / "map.gpkg", layer="units", driver="GPKG")
    with pytest.raises(ReadMismatch, match=r"units: the features differ from the client's"):
        run_slim_partition(slim)
    with ThreadPoolExecutor(1) as pool:
        executor = ReadingExecutor(pool)
        executor.reading(project)
        result = executor.submit(parallel.run_partition, task).result()
    assert executor.fell_back == 1
    assert result == parallel.run_partition(task)


def test_layers_not_read_as_they_are_travel_with_the_task(synthetic):
    """A layer whose geometries are not the ones loaded from its file (as when the alignment transforms a layer in
    another CRS or swaps axes back) is sent with the task, not read by the worker; the others are read."""
    from dataclasses import replace

    project = load_project(synthetic)
    lines = project.layers["lines"]
    moved = lines.frame.copy()
    moved[moved.geometry.name] = shapely.transform(lines.geometry, lambda xy: xy)  # new objects, same coordinates
    view = replace(project, layers={**project.layers, "lines": replace(lines, frame=moved)})
    for task in tasks_of(view):
        slim = slim_task(task, project)
        assert slim is not None and "lines" not in slim.reads and "units" in slim.reads
        assert len(slim.task.project.layers["lines"].frame) == len(task.project.layers["lines"].frame)
        assert_same_task(read_task(slim), task)
