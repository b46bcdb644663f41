"""Element-wise work split into runs on the threads of a check (archivist/threads.py) gives the one call's answer.

The reference is the same GEOS function called once over the whole array
(shapely 2): an element-wise function computes each element alone, so the
runs joined in order must equal it element for element.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
import shapely
from shapely.errors import GEOSException

from archivist import threads
from archivist.analysis.guard import elementwise


def test_without_a_pool_the_work_is_one_run():
    seen = []
    assert threads.map_runs(lambda s: seen.append(s) or 1, 1000) == [1]
    assert seen == [slice(0, 1000)]
    assert not threads.splits(1000)


def test_runs_cover_every_element_once_in_order_and_several_threads_work():
    pool = threads.Pool(3)
    names = set()

    def work(s):
        names.add(threading.current_thread().name)
        time.sleep(0.005)  # long enough for the pool's threads to take runs
        return np.arange(s.start, s.stop)

    try:
        with threads.spreading(pool):
            assert threads.splits(1000)
            runs = threads.map_runs(work, 1000, min_run=10)
    finally:
        pool.close()
    assert len(runs) > 1
    assert np.array_equal(np.concatenate(runs), np.arange(1000))
    assert len(names) > 1


def test_few_elements_stay_one_run():
    pool = threads.Pool(2)
    try:
        with threads.spreading(pool):
            assert threads.map_runs(lambda s: (s.start, s.stop), 40, min_run=32) == [(0, 40)]
    finally:
        pool.close()


def test_the_first_error_in_run_order_is_raised():
    pool = threads.Pool(2)

    def work(s):
        if s.start >= 500:
            raise ValueError(f"run {s.start}")
        return s.start

    try:
        with threads.spreading(pool), pytest.raises(ValueError, match="run 500"):
            threads.map_runs(work, 1000, min_run=100)
    finally:
        pool.close()


def test_a_run_is_not_split_again():
    pool = threads.Pool(2)
    inner = []

    def work(s):
        inner.append(threads.splits(10_000))
        return s

    try:
        with threads.spreading(pool):
            threads.map_runs(work, 1000, min_run=10)
    finally:
        pool.close()
    assert inner and not any(inner)


def test_elementwise_on_threads_is_the_one_geos_call():
    # GEOS's largest inscribed circle of each polygon (shapely.maximum_inscribed_circle), one call over the whole
    # array, is the reference; a call over polygons holding one with a NaN coordinate stops (as GEOS stops on a
    # geometry it cannot process), and that polygon alone is filled and named alike in both
    rng = np.random.default_rng(0)
    polys = shapely.buffer(shapely.points(rng.random((600, 2)) * 1000), rng.random(600) * 20 + 1)
    polys[77] = polys[411] = shapely.Polygon([(0, 0), (1, np.nan), (1, 1), (0, 0)])

    def func(g):
        if np.isnan(shapely.get_coordinates(g)).any():
            raise GEOSException("a NaN coordinate")
        return shapely.length(shapely.maximum_inscribed_circle(g, 0.01))

    one = elementwise(func, polys, fill=np.nan)
    pool = threads.Pool(3)
    try:
        with threads.spreading(pool):
            many = elementwise(func, polys, fill=np.nan)
    finally:
        pool.close()
    assert np.array_equal(one[0], many[0], equal_nan=True)
    assert np.array_equal(one[1], many[1])
    assert one[2] == many[2] == ["a NaN coordinate"] * 2
    assert np.flatnonzero(one[1]).tolist() == [77, 411]
