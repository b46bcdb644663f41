"""The engine: a rule that GEOS stops is one finding, the other rules' findings stay."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from shapely.errors import GEOSException
from shapely.geometry import LineString, Point, box

from dataclasses import replace

from archivist import registry
from archivist.engine import run_rules
from archivist.project import load_project
from archivist.farcoords import GEOGRAPHIC_LIMIT, PROJECTED_LIMIT, far_out
from builders import tiny_project


# A square at 1e300: GEOS 3.14 stops with "CGAlgorithmsDD::orientationIndex encountered NaN/Inf numbers".
FAR_SQUARE = box(1e300, 1e300, 1.0000001e300, 1.0000001e300)


def with_rule(rule_id, func):
    """Every rule, with ``rule_id`` replaced by ``func``."""
    return [replace(i, func=func) if i.id == rule_id else i for i in registry.select((), ())]


def test_a_rule_stopped_by_geos_is_one_finding_and_the_rest_stay(tmp_path):
    project = load_project(tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}}))
    before = run_rules(project, registry.select((), ()))

    def stopped(project, ctx):
        # what shapely raises when GEOS refuses an input (shapely.errors.GEOSException)
        shapely.maximum_inscribed_circle(FAR_SQUARE, 0.1)
        yield from ()

    after = run_rules(project, with_rule("unit-overlap", stopped))
    failed = [f for f in after.findings if f.rule == "unit-overlap"]
    assert len(failed) == 1 and failed[0].severity.value == "error"
    assert "could not finish" in failed[0].message and "NaN/Inf" in failed[0].message  # GEOS's own words
    assert [f for f in after.findings if f.rule != "unit-overlap"] == list(before.findings)
    assert "licence-unknown" in {f.rule for f in after.findings}


def test_geos_refuses_non_finite_input():
    """The premise of the test above, checked against GEOS itself."""
    with pytest.raises(GEOSException, match="NaN/Inf"):
        shapely.maximum_inscribed_circle(FAR_SQUARE, 0.1)


def test_other_errors_are_not_swallowed(tmp_path):
    project = load_project(tiny_project(tmp_path))

    def buggy(project, ctx):
        raise KeyError("a bug, not a GEOS failure")

    with pytest.raises(KeyError):
        run_rules(project, with_rule("unit-overlap", buggy))


def test_far_out_bounds():
    import pyproj

    geoms = np.array([
        box(0, 0, 100, 100),
        Point(PROJECTED_LIMIT * 1.01, 0),
        LineString([(0, 0), (1e300, 1e300)]),
        Point(np.nan, 0),
        None,
        Point(-PROJECTED_LIMIT * 0.99, 0),
    ], dtype=object)
    mask, largest = far_out(geoms, pyproj.CRS("EPSG:32633"))
    assert mask.tolist() == [False, True, True, True, False, False]
    assert largest[2] == 1e300 and np.isnan(largest[3]) and largest[4] == 0
    # geographic: degrees, twice the longitude range
    deg = np.array([Point(359.0, 10.0), Point(GEOGRAPHIC_LIMIT + 1, 0.0), Point(10.0, -GEOGRAPHIC_LIMIT - 1)], dtype=object)
    assert far_out(deg, pyproj.CRS("EPSG:4326"))[0].tolist() == [False, True, True]
    assert far_out(np.array([], dtype=object), None)[0].tolist() == []


def test_a_context_handed_in_keeps_the_analyses_and_the_report_is_the_same(tmp_path):
    from archivist.analysis.context import CheckContext
    from archivist.engine import check

    project = load_project(tiny_project(tmp_path))
    ctx = CheckContext(project)
    with_ctx = check(project, context=ctx)
    assert "analysis.coverage" in ctx._cache  # the caller keeps what the check computed
    plain = check(project)
    assert with_ctx.findings == plain.findings and with_ctx.notes == plain.notes
    with pytest.raises(ValueError):
        run_rules(load_project(tiny_project(tmp_path / "other")), registry.select(), context=ctx)
