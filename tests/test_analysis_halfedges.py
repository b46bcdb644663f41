"""archivist.analysis.halfedges: every boundary segment and who draws it on which side.

Outside reference: GEOS through shapely (``coverage_invalid_edges`` agrees
that two squares sharing an edge are a valid coverage; ring orientation by
``shapely.is_ccw``).
"""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import Polygon, box

from archivist.analysis.halfedges import build_edges, polygon_half_edges


def test_interior_on_the_left():
    cw = Polygon([(0, 0), (0, 1), (1, 1), (1, 0)])  # drawn clockwise
    assert not shapely.is_ccw(cw.exterior)
    x0, y0, x1, y1, owner = polygon_half_edges(np.array([cw], dtype=object))
    # counter-clockwise around the interior: the signed area of the directed segments is positive
    assert float(np.sum(x0 * y1 - x1 * y0)) / 2 == 1.0 and owner.tolist() == [0] * 4


def test_shared_edge_is_twinned():
    geoms = np.array([box(0, 0, 5, 10), box(5, 0, 10, 10)], dtype=object)
    assert shapely.is_empty(shapely.coverage_invalid_edges(geoms)).all()  # GEOS: a valid coverage
    edges = build_edges(geoms)
    assert len(edges) == 7 and int(edges.twin.sum()) == 1
    (k,) = np.flatnonzero(edges.twin)
    assert (edges.px[k], edges.py[k], edges.qx[k], edges.qy[k]) == (5.0, 0.0, 5.0, 10.0)
    assert {int(edges.left[k]), int(edges.right[k])} == {0, 1}
    assert edges.suspects.tolist() == [0, 1]  # the outer edges have no twin


def test_misfit_leaves_untwinned_edges():
    geoms = np.array([box(0, 0, 5, 10), Polygon([(5, 0), (10, 0), (10, 10), (5, 10), (5.02, 5)])], dtype=object)
    edges = build_edges(geoms)
    assert not edges.twin.any()
    assert edges.find(edges.h[:1], edges.px[:1], edges.py[:1], edges.qx[:1], edges.qy[:1]).tolist() == [0]
