"""archivist.analysis.arrays: hashing, grouping and parts of geometries on whole arrays.

Outside reference: GEOS through shapely (the parts and areas of geometries)
and numpy's own float bit patterns.
"""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString, Point, box

from archivist.analysis.arrays import (
    canonical,
    coord_hash,
    group_sorted,
    linear_parts,
    merge_by_group,
    polygonal_parts,
)


def test_coordinate_hash_equal_rows_equal_hashes():
    a = np.array([1.0, -0.0, 3.5])
    b = np.array([2.0, 0.0, 3.5])
    h1 = coord_hash(a, b)
    h2 = coord_hash(a.copy(), np.array([2.0, -0.0, 3.5]))
    assert (h1 == h2).all()
    assert len(set(coord_hash(np.arange(1000.0), np.zeros(1000)).tolist())) == 1000


def test_canonical_segments_run_west_to_east():
    px, py, qx, qy, fwd = canonical(np.array([5.0, 0.0]), np.array([0.0, 0.0]), np.array([0.0, 5.0]), np.array([0.0, 0.0]))
    assert px.tolist() == [0.0, 0.0] and qx.tolist() == [5.0, 5.0]
    assert fwd.tolist() == [False, True]


def test_group_sorted_groups_identical_rows():
    x = np.array([1.0, 2.0, 1.0, 3.0, 2.0])
    order, gid, starts = group_sorted(coord_hash(x), x)
    assert len(starts) == 3
    groups = {}
    for row, g in zip(order, gid):
        groups.setdefault(int(g), []).append(float(x[row]))
    assert sorted(sorted(v) for v in groups.values()) == [[1.0, 1.0], [2.0, 2.0], [3.0]]


def test_parts_of_an_overlay_collection():
    # GEOS returns a collection for the intersection of two boxes meeting in an area and a line
    a = shapely.union(box(0, 0, 2, 2), box(3, 0, 4, 2))
    b = box(1, 1, 3, 3)
    overlay = shapely.intersection(a, b)
    parts, idx = polygonal_parts(np.array([overlay, Point(0, 0)], dtype=object))
    assert len(parts) == 1 and idx.tolist() == [0] and shapely.area(parts[0]) == 1.0
    lines, k = linear_parts(np.array([overlay], dtype=object))
    assert [round(float(shapely.length(g)), 9) for g in lines] == [1.0] and k.tolist() == [0]


def test_merge_by_group_joins_pieces_of_each_group():
    pieces = np.array([LineString([(0, 0), (1, 0)]), LineString([(1, 0), (2, 0)]), LineString([(5, 5), (6, 5)])], dtype=object)
    merged = merge_by_group(pieces, np.array([0, 0, 1]), 3)
    assert merged[0].equals(LineString([(0, 0), (2, 0)]))
    assert merged[1].equals(pieces[2]) and merged[2] is None
