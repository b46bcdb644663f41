"""archivist.analysis.guard: one geometry GEOS cannot process does not stop the others.

Outside reference: GEOS through shapely (the areas of intersections
computed one by one).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from shapely.errors import GEOSException
from shapely.geometry import box

from archivist.analysis.guard import by_cluster, clusters, elementwise


def fragile_area(bad):
    """shapely.area, but GEOS "stops" on any array holding a geometry equal to ``bad``."""

    def area(geoms):
        if any(g.equals(bad) for g in geoms):
            raise GEOSException("TopologyException: side location conflict")
        return shapely.area(geoms)

    return area


def test_elementwise_isolates_the_failing_element():
    geoms = np.array([box(0, 0, i + 1, 1) for i in range(9)], dtype=object)
    result, failed, reasons = elementwise(fragile_area(geoms[6]), geoms, fill=np.nan)
    assert failed.tolist() == [i == 6 for i in range(9)]
    assert reasons == ["TopologyException: side location conflict"]
    expected = [float(shapely.area(g)) for g in geoms]  # GEOS, one geometry at a time
    assert [r for i, r in enumerate(result.tolist()) if i != 6] == [e for i, e in enumerate(expected) if i != 6]
    assert np.isnan(result[6])


def test_elementwise_without_failure_is_one_call():
    calls = []

    def counted(geoms):
        calls.append(len(geoms))
        return shapely.area(geoms)

    geoms = np.array([box(0, 0, 1, 1)] * 5, dtype=object)
    result, failed, reasons = elementwise(counted, geoms)
    assert calls == [5] and not failed.any() and reasons == [] and result.tolist() == [1.0] * 5


def test_clusters_are_connected_components():
    labels = clusters(6, np.array([0, 1, 4]), np.array([1, 2, 5]))
    assert len(set(labels[[0, 1, 2]])) == 1 and len(set(labels[[4, 5]])) == 1
    assert len(set(labels[[0, 3, 4]])) == 3


def test_by_cluster_keeps_the_clusters_geos_could_process():
    a, b, c, d = box(0, 0, 1, 1), box(1, 0, 2, 1), box(10, 0, 11, 1), box(11, 0, 12, 1)
    geoms = np.array([a, b, c, d], dtype=object)
    result, failed = by_cluster(fragile_area(c), geoms, lambda: (np.array([0, 2]), np.array([1, 3])))
    assert result[:2].tolist() == [1.0, 1.0] and result[2] is None and result[3] is None
    ((members, reason),) = failed
    assert members.tolist() == [2, 3] and "TopologyException" in reason


def test_other_errors_pass_through():
    def broken(geoms):
        raise ValueError("not GEOS")

    with pytest.raises(ValueError):
        elementwise(broken, np.array([box(0, 0, 1, 1)], dtype=object))
