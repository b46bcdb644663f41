"""archivist.analysis.lines: the lines layer as a network of kinds, parts and segments.

Outside reference: GEOS through shapely (segment lengths, the edges of the
polygons the lines are drawn on).
"""

from __future__ import annotations

import pytest
from coverage_builders import FRAME, square_map
from shapely.geometry import LineString

from archivist.analysis.context import CheckContext
from archivist.analysis.lines import build_line_network, kind_role, parse_kind
from archivist.project import load_project


def test_kind_vocabulary():
    kinds, certs = ("contact", "fault", "map-boundary"), ("certain", "approximate", "inferred", "concealed")
    assert parse_kind("Contact", kinds, certs) == ("contact", None)
    assert parse_kind("contact, inferred", kinds, certs) == ("contact", "inferred")
    assert parse_kind("fault (concealed)", kinds, certs) == ("fault", "concealed")
    assert parse_kind("inferred contact", kinds, certs) == ("contact", "inferred")
    assert parse_kind("map_boundary", kinds, certs) == ("map-boundary", None)
    assert parse_kind("contcat", kinds, certs) is None
    assert parse_kind("contact, probable", kinds, certs) is None
    assert parse_kind("", kinds, certs) is None
    assert [kind_role(k) for k in ("contact", "fault", "map-boundary", "thrust", "intrusive contact", "unconformity", "fold axis")] == [
        "contact", "fault", "boundary", "fault", "contact", "contact", "other"]


def test_network_segments_found_on_the_unit_edges(tmp_path):
    rows = [("contact", LineString([(5, 0), (5, 10)])), ("map-boundary", FRAME), ("fault", LineString([(1, 1), (2, 2)]))]
    project = load_project(square_map(tmp_path, "net", line_rows=rows))
    net = build_line_network(project)
    assert net.ids.tolist() == ["1", "2", "3"] and net.roles.tolist() == ["contact", "boundary", "fault"]
    assert float(net.seg_length.sum()) == pytest.approx(10 + 40 + 2 ** 0.5)
    ctx = CheckContext(project)
    se = ctx.segment_edges()
    # the contact and the frame lie on polygon edges exactly, except the frame's top side, which
    # runs over two polygon edges (A's and B's, split at x = 5); the fault inside unit A is on none
    assert (se >= 0).tolist() == [True, True, True, False, True, True, False]
    assert net.seg_roles.tolist() == ["contact"] + ["boundary"] * 5 + ["fault"]
    drawn = ctx.edges_drawn(("contact",))
    edges = ctx.edges()
    assert float(edges.length[drawn].sum()) == pytest.approx(10.0) and edges.twin[drawn].all()
