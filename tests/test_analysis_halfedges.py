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


def _same_table(a, b) -> bool:
    import dataclasses

    return all(np.array_equal(getattr(a, f.name), getattr(b, f.name)) for f in dataclasses.fields(a))


def test_a_table_built_from_the_last_one_equals_a_build_from_scratch():
    # a repair's working copy, changed a few polygons at a time: polygons replaced (grown over a neighbour, a
    # vertex moved, a multipolygon, a hole), rows dropped, reordered and added; each table built from the one
    # before (EdgeBasis) must be the one a build from scratch gives, array for array
    from archivist.analysis.halfedges import EdgeBasis

    rng = np.random.default_rng(2)
    pts = shapely.multipoints(rng.uniform(0, 100, (80, 2)))
    cells = shapely.intersection(shapely.get_parts(shapely.voronoi_polygons(pts, extend_to=box(0, 0, 100, 100))), box(0, 0, 100, 100))
    basis = EdgeBasis()
    geoms = cells.copy()
    assert _same_table(build_edges(geoms, basis), build_edges(geoms))
    for step in range(6):
        geoms = geoms.copy()
        k = rng.choice(len(geoms), 5, replace=False)
        geoms[k[0]] = shapely.buffer(geoms[k[0]], 0.7, quad_segs=2)  # an overlap
        xy = shapely.get_coordinates(geoms[k[1]])
        xy[1] += 0.3
        geoms[k[1]] = shapely.set_coordinates(shapely.from_wkb(shapely.to_wkb(geoms[k[1]])), xy)
        geoms[k[2]] = shapely.multipolygons(list(shapely.get_parts(geoms[k[2]])) + [box(200 + step, 0, 201 + step, 1)])
        geoms[k[3]] = shapely.difference(geoms[k[3]], shapely.buffer(shapely.centroid(geoms[k[3]]), 0.5))  # a hole
        if step % 2:
            geoms = np.r_[geoms[::-1][1:], [box(300, 300, 301, 302)]]  # reordered, one dropped, one added
        fresh = build_edges(geoms)
        assert _same_table(build_edges(geoms, basis), fresh), step
        assert len(fresh.suspects)  # the changes leave traces: the comparison is not of clean tables only


def test_polygons_taken_apart_in_batches_give_the_rows_of_one_pass_and_geos_outline(monkeypatch):
    # a grid of squares, every fourth one with a hole, some as one-part multipolygons, one of two parts: cut into
    # batches of a few coordinates (a batch boundary inside a multipolygon never: a polygon is never split)
    from shapely.geometry import MultiPolygon

    from archivist.analysis import halfedges

    cells = []
    for i in range(12):
        for j in range(9):
            b = box(i, j, i + 1, j + 1)
            if (i + j) % 4 == 0:
                b = b.difference(box(i + 0.25, j + 0.25, i + 0.75, j + 0.75))
            cells.append(MultiPolygon([b]) if (i * j) % 5 == 1 else b)
    cells.append(MultiPolygon([box(20, 0, 21, 1), box(22, 0, 23, 1)]))
    geoms = np.array(cells, dtype=object)
    one = halfedges.half_edge_rows(geoms)
    monkeypatch.setattr(halfedges, "BATCH_COORDS", 7)
    batched = halfedges.half_edge_rows(geoms)
    for name in ("px", "py", "qx", "qy", "fwd", "h", "owner"):
        a, b = getattr(one, name), getattr(batched, name)
        assert a.dtype == b.dtype and np.array_equal(a, b), name
    edges = build_edges(geoms)
    # outside reference: the edges drawn once are the outline GEOS's coverage union gives (holes included)
    outline = shapely.length(shapely.boundary(shapely.coverage_union_all(geoms)))
    assert float(edges.length[~edges.twin].sum()) == outline == 2 * (12 + 9) + 27 * 2 + 8
