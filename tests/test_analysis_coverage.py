"""archivist.analysis.coverage: the coverage analysis as a value, and GEOS failures kept to their part of the map.

Outside reference: GEOS through shapely (the overlap areas are
``shapely.intersection`` areas; the failures are GEOS's own exception type,
``shapely.errors.GEOSException``, raised on purpose for one cluster of
polygons).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import shapely
from coverage_builders import square_map
from shapely.errors import GEOSException
from shapely.geometry import Polygon, box

import archivist
from archivist.analysis.context import CheckContext
from archivist.analysis.coverage import find_mismatches, stretch_length
from archivist.model import Severity
from archivist.project import load_project

A, B = box(0, 0, 5.1, 10), box(5, 0, 10, 10)  # A reaches 0.1 m into B: 1 m²
C, D = box(20, 0, 25.1, 10), box(25, 0, 30, 10)  # the same defect 20 m away, not touching A or B


def two_defects(tmp_path):
    return square_map(tmp_path, "two", a=A, b=B, extra=[C, D], tolerance=0.01)


def refuse(real, bad):
    """``real`` (a shapely function), except that GEOS "stops" on any input holding a polygon equal to ``bad``."""

    def fragile(geoms, *args, **kwargs):
        flat = np.atleast_1d(np.asarray(geoms, dtype=object)).ravel()
        if any(isinstance(g, Polygon) and g.equals(bad) for g in flat):
            raise GEOSException("TopologyException: side location conflict at 25 5")
        return real(geoms, *args, **kwargs)

    return fragile


def by_rule(report, rule):
    return sorted((f for f in report.findings if f.rule == rule), key=lambda f: f.features)


def test_stretch_length_of_a_rectangle_is_its_long_side():
    assert stretch_length(box(0, 0, 10, 0.1)) == pytest.approx(10.0)
    assert stretch_length(box(0, 0, 0.5, 2)) == pytest.approx(2.0)


def test_coverage_is_a_frozen_value_with_the_outline(tmp_path):
    ctx = CheckContext(load_project(square_map(tmp_path, "clean")))
    cov = ctx.coverage()
    assert ctx.coverage() is cov and ctx.edges() is ctx.edges()
    with pytest.raises(dataclasses.FrozenInstanceError):
        cov.outline = None  # type: ignore[misc]
    assert not hasattr(ctx.edges(), "outline")
    # the frame of the 10 m square: four sides of 10 m, each drawn by one unit, on the map's outer edge
    edges = ctx.edges()
    assert float(edges.length[cov.outline].sum()) == pytest.approx(40.0)
    assert cov.failures == () and find_mismatches(cov) == ()
    assert ctx.notes == ["Map extent: no extent layer, so the outer boundary of the unit polygons was used; gaps open to the map edge are found only where no wider than the tolerance."]


def test_both_defects_found_without_failure(tmp_path):
    report = archivist.check(two_defects(tmp_path), only=["topology"])
    overlaps = by_rule(report, "unit-overlap")
    assert [f.features for f in overlaps] == [("1", "2"), ("3", "4")]
    assert [f.measure for f in overlaps] == [round(shapely.intersection(A, B).area, 3), round(shapely.intersection(C, D).area, 3)]


def test_geos_stopping_on_one_pair_is_a_finding_on_that_pair(tmp_path, monkeypatch):
    root = two_defects(tmp_path)
    monkeypatch.setattr(shapely, "intersection", refuse(shapely.intersection, C))
    report = archivist.check(root, only=["topology"])  # a report, not an error
    overlaps = by_rule(report, "unit-overlap")
    assert [f.features for f in overlaps] == [("1", "2"), ("3", "4")]
    kept, lost = overlaps
    assert kept.message == "Polygons 1 (A) and 2 (B) overlap by 1.00 m² (up to 0.10 m wide)."
    assert lost.severity is Severity.ERROR
    assert lost.message.startswith("Overlaps among polygons 3 (C) and 4 (D) could not be checked: GEOS stopped with "
                                   "\"TopologyException: side location conflict at 25 5\" while intersecting them.")
    assert lost.wkt is not None and shapely.from_wkt(lost.wkt).equals(box(20, 0, 30, 10))
    misfits = by_rule(report, "unit-edge-mismatch")
    assert [f.features for f in misfits] == [("3", "4")] and misfits[0].message.startswith("Misfitting edges among polygons 3 (C) and 4 (D) could not be checked")
    assert by_rule(report, "unit-gap") == []


def test_geos_stopping_in_coverage_validation_loses_only_that_cluster(tmp_path, monkeypatch):
    root = two_defects(tmp_path)
    monkeypatch.setattr(shapely, "coverage_invalid_edges", refuse(shapely.coverage_invalid_edges, C))
    report = archivist.check(root, only=["topology"])
    # every intersecting pair is still intersected, so both overlaps are found
    assert [f.features for f in by_rule(report, "unit-overlap")] == [("1", "2"), ("3", "4")]
    assert all("overlap by 1.00 m²" in f.message for f in by_rule(report, "unit-overlap"))
    (misfit,) = by_rule(report, "unit-edge-mismatch")
    assert misfit.features == ("3", "4") and "while validating them as a coverage" in misfit.message


def test_geos_stopping_on_the_union_leaves_the_other_checks(tmp_path, monkeypatch):
    root = two_defects(tmp_path)
    real = shapely.union_all

    def stopped(geoms, *args, **kwargs):
        raise GEOSException("TopologyException: found non-noded intersection")

    monkeypatch.setattr(shapely, "union_all", stopped)
    report = archivist.check(root, only=["topology"])
    monkeypatch.setattr(shapely, "union_all", real)
    (gap,) = by_rule(report, "unit-gap")
    assert gap.features == ("1", "2", "3", "4") and "while joining them into one area" in gap.message
    assert [f.features for f in by_rule(report, "unit-overlap")] == [("1", "2"), ("3", "4")]


# ---------------------------------------------------------------- bulk steps against plain loops, on a map full of defects

@pytest.fixture(scope="module")
def defect_laden(tmp_path_factory):
    """About 600 polygons at 1:5 000 (tolerance 0.5 m), 5 % of the features carrying each kind of editing defect."""
    from coverage_builders import synthetic_map, with_defect_density, write_map

    smap, _ = with_defect_density(synthetic_map(600, seed=11, scale=5000), 0.05, seed=11)
    return CheckContext(load_project(write_map(smap, tmp_path_factory.mktemp("laden") / "map")))


def test_overlaps_are_those_of_a_loop_over_every_pair(defect_laden):
    # reference: every pair of polygons of the whole map whose bounding boxes meet, one GEOS call per pair
    cov, geoms = defect_laden.coverage(), defect_laden.units().geoms
    assert cov.failures == ()
    expected = set()
    for i in range(len(geoms)):
        for j in shapely.STRtree(geoms).query(geoms[i]).tolist():
            if i < j and shapely.relate_pattern(geoms[i], geoms[j], "T********"):
                for part in shapely.get_parts(shapely.intersection(geoms[i], geoms[j])):
                    if shapely.get_type_id(part) == 3 and shapely.area(part) > 0:
                        expected.add(((i, j), round(float(shapely.area(part)), 9)))
    found = {(p.units, round(p.area, 9)) for p in cov.overlaps}
    assert len(found) > 10 and found == expected


def test_widths_of_every_gap_and_overlap_within_the_stated_precision(defect_laden):
    # reference: GEOS's MaximumInscribedCircle (through shapely), one piece at a time, at 1e-5 of the radius.
    # On a long thin strip GEOS stops at its iteration cap short of the widest circle (a circle of the
    # width found does fit: see test_analysis_arrays), so the width may also exceed it by the precision.
    cov = defect_laden.coverage()
    pieces = [p for p in cov.overlaps + cov.gaps if p.width > 0]
    assert len(pieces) > 20
    for p in pieces:
        ref = 2.0 * float(shapely.length(shapely.maximum_inscribed_circle(p.geom, max(p.width * 5e-6, 1e-9))))
        slack = 2.0 * max(p.width * 5e-6, 1e-9) + 1e-9 * ref
        allowed = 2.0 * min(cov.tol / 20.0, 0.02 * ref / 2.0)
        assert ref - allowed - slack <= p.width <= ref + allowed + slack, (p.units, p.width, ref)
