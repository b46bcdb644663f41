"""Bounds of the polygon repairs on generated maps (hypothesis), held against GEOS.

Maps from tests/coverage_builders.py (GEOS Voronoi coverages at 1:10 000,
tolerance 1 m) with repairable defects injected: one polygon grown over its
neighbours and one shrunk away from them (round joins, by less than the
tolerance, and less where needed so that every overlap and gap made stays
within the repair's own bounds: see ``_repairable_growth`` and
``_repairable_shrink``), and one vertex moved off a shared edge by less than
the tolerance. After repair:

* ``shapely.coverage_is_valid`` (GEOS) holds on the copy's units, and
  ``check`` reports no overlap, gap or edge mismatch;
* no logged change moves a vertex further than the snapping distance (the
  tolerance; the gap width for a gap filled, the same by default), except a
  merge or dissolve; a polygon changed by two repairs (a gap filled, then its
  vertices snapped) can move by the sum, so against the input each polygon
  is held to twice the snapping distance (measured: 1.02 m at a 1 m
  tolerance on one generated map);
* each polygon's area changes by no more than the areas the log assigns it;
* unit codes change only by a logged merge;
* repairing the copy changes nothing.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pyogrio
import shapely
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).resolve().parent))

from coverage_builders import synthetic_map, with_units, write_map  # noqa: E402

from archivist.engine import check  # noqa: E402
from archivist.repair.api import repair  # noqa: E402

REPAIRED = {"unit-overlap", "unit-gap", "unit-edge-mismatch", "unit-same-neighbour"}


def _cut_shift(poly, piece) -> float:
    """How far cutting ``piece`` out of ``poly`` moves its boundary (GEOS Hausdorff distance)."""
    return float(shapely.hausdorff_distance(poly.boundary, shapely.difference(poly, piece).boundary))


def _repairable_growth(g, k: int, grow: float, smap) -> float:
    """``grow``, reduced until every overlap it makes is one the repair may give away within its bounds.

    Growing by less than the tolerance is not enough: where three polygons meet, cutting an overlap out of
    either polygon can move a boundary further than the growth (1.008 m for a 0.886 m growth on one generated
    map), and a long shared edge can make an overlap larger than the area a repair may give away (the sliver
    area, 1 mm² at map scale, 100 m² at 1:10 000). Such overlaps are left and listed by design, and the
    property is about maps whose defects are all within the repair's bounds.
    """
    limit = (smap.scale / 1000.0) ** 2  # 1 mm² at map scale (the default sliver area), in m²
    tol = smap.tolerance
    for _ in range(30):
        grown = shapely.intersection(shapely.buffer(g[k], grow, quad_segs=2), smap.extent)
        others = [j for j in range(len(g)) if j != k and shapely.intersects(grown, g[j])]
        ok = True
        for j in others:
            for piece in shapely.get_parts(shapely.intersection(grown, g[j])):
                if piece.area <= 0:
                    continue
                if piece.area > limit or min(_cut_shift(grown, piece), _cut_shift(g[j], piece)) > tol:
                    ok = False
        if ok:
            return grow
        grow *= 0.8
    return grow


def _repairable_shrink(g, j: int, shrink: float, smap) -> float:
    """``shrink``, reduced until the gap it opens is no wider than the gap width (the tolerance), as ``check`` measures it.

    A polygon shrunk by less than the tolerance opens a strip of that width, but wider where it meets the
    map edge or a corner (a circle fits in the corner of an L-shaped strip: 1.03 m wide for a 0.89 m shrink on
    one generated map); such a gap is left and listed by design.
    """
    tol = smap.tolerance
    for _ in range(30):
        gap = shapely.difference(g[j], shapely.buffer(g[j], -shrink, quad_segs=2))
        widest = max((2 * shapely.maximum_inscribed_circle(p).length for p in shapely.get_parts(gap)), default=0.0)
        if widest <= 0.95 * tol:
            return shrink
        shrink *= 0.8
    return shrink


def broken(n: int, seed: int, grow: float, shrink: float, nudge: float):
    smap = synthetic_map(n, seed=seed)
    g = smap.units.geometry.values.copy()
    rng = np.random.default_rng(seed)
    k, j, v = rng.choice(len(g), 3, replace=False)
    grow = _repairable_growth(g, k, grow, smap)
    g[k] = shapely.intersection(shapely.buffer(g[k], grow, quad_segs=2), smap.extent)
    shrink = _repairable_shrink(g, j, shrink, smap)
    g[j] = shapely.buffer(g[j], -shrink, quad_segs=2)
    xy = shapely.get_coordinates(g[v])
    xy[1] += nudge
    g[v] = shapely.set_coordinates(g[v], xy)
    return with_units(smap, g)


# A generated map where one polygon grown over two neighbours and a moved vertex make three polygons overlap at a
# corner, their choices going round (each keeps its overlap with the next); tests/test_repair_worked.py reads it too.
CORNER_GOING_ROUND = dict(n=19, seed=388, grow=0.5, shrink=0.5, nudge=0.5)


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(n=st.integers(12, 40), seed=st.integers(0, 10_000), grow=st.floats(0.05, 0.9), shrink=st.floats(0.05, 0.9),
       nudge=st.floats(0.01, 0.6))
# a thin leftover of a gap, past the reach of the shrunk polygon, lying along one neighbour and touching another
# at its end: it must go to the one it lies along, or snapping folds the spike away by more than the tolerance
@example(n=12, seed=1, grow=0.5, shrink=0.8087160013133655, nudge=0.5)
# the corner of a gap left by the shrunk polygon beyond its reach: what the shrunk polygon takes back and what remains
# must be cut by one overlay, or the remainder keeps hair-thin slivers along both neighbours' edges, one neighbour
# gains a spike 1 m long with a new vertex, and snapping folds the shrunk polygon's corner onto it (1.004 m)
@example(n=37, seed=4665, grow=0.2808388678287442, shrink=0.6767721449984323, nudge=0.05043429032558196)
# a gap along the shrunk polygon joined to the thin wedge a moved vertex opened between two other polygons: the shrunk
# polygon takes no more of the wedge than twice the gap's width, or snapping folds the spike it took away (1.001 m)
@example(n=22, seed=1231, grow=0.4338404428932123, shrink=0.05641629498264463, nudge=0.1869338879273492)
# a corner where the grown polygon meets two neighbours whose overlaps go round (each keeps its overlap with the next):
# the polygon keeping the ground under all three holds a finger 0.5 m wide between the other two, which GEOS's
# cleaning at the full snapping distance folds away (Hausdorff distance 1.148 m at a 1 m tolerance); cleaned again
# around it at half the distance, every polygon moves 0.611 m at most and the coverage is valid
@example(**CORNER_GOING_ROUND)
def test_repair_bounds_on_generated_maps(tmp_path_factory, n, seed, grow, shrink, nudge):
    tmp = tmp_path_factory.mktemp("bounds")
    smap = broken(n, seed, grow, shrink, nudge)
    project = write_map(smap, tmp / "map")
    tol = smap.tolerance
    result = repair(project, tmp / "out")
    before = pyogrio.read_dataframe(project / "map.gpkg", layer="units", fid_as_index=True)
    after = pyogrio.read_dataframe(tmp / "out" / "map.gpkg", layer="units", fid_as_index=True)
    assert shapely.coverage_is_valid(after.geometry.values)  # GEOS
    assert {f.rule for f in check(tmp / "out").findings} & REPAIRED == set()
    merged = {f for c in result.changes if c.repair in ("merge-slivers", "dissolve-same-unit") for f in c.features_before}
    assigned: dict[str, float] = {}
    for c in result.changes:
        for f in set(c.features_before) | set(c.features_after):
            assigned[f] = assigned.get(f, 0.0) + c.area_moved
    for c in result.changes:
        if c.repair not in ("merge-slivers", "dissolve-same-unit"):
            assert c.max_shift <= tol * (1 + 1e-6), c
    for fid in after.index:
        old, new = before.geometry.loc[fid], after.geometry.loc[fid]
        key = str(fid)
        if key not in merged:
            assert shapely.hausdorff_distance(old.boundary, new.boundary) <= 2 * tol * (1 + 1e-6)
        assert abs(new.area - old.area) <= assigned.get(key, 0.0) + 1e-6 * max(old.area, 1.0)
        if before.unit.loc[fid] != after.unit.loc[fid]:
            assert key in merged
    removed = set(map(str, before.index)) - set(map(str, after.index))
    assert removed <= merged
    again = repair(tmp / "out", tmp / "again")
    assert again.changes == ()


@pytest.mark.parametrize("seed", [0, 1, 4, 13, 26])
def test_an_overlap_left_for_the_geologist_stays_as_listed_and_a_second_run_changes_nothing(tmp_path, seed):
    # One polygon of a generated map grown by 0.5 m (round joins) over its neighbours, with the largest overlap a
    # repair may give away set 1 m² under its largest overlap: that one is left and listed, the others are given
    # away. GEOS's cleaning at the full snapping distance (1 m) moved the grown polygon's edges back by up to 0.5 m
    # and clipped the overlap left to 8 to 29 m² less (these seeds, before finer cleanings were tried around it), so
    # a second run found it under the limit and gave it away. Now the overlap stays larger than the limit (GEOS
    # intersection of the two polygons in the copy), and repairing the copy changes nothing.
    smap = synthetic_map(25, seed=seed)
    g = np.asarray(smap.units.geometry.values, dtype=object).copy()
    grown = shapely.intersection(shapely.buffer(g[12], 0.5, quad_segs=2), smap.extent)
    overlaps = [float(shapely.area(shapely.intersection(grown, g[q]))) for q in range(len(g)) if q != 12]
    limit = max(overlaps) - 1.0
    g[12] = grown
    project = write_map(with_units(smap, g), tmp_path / "map")
    manifest = project / "archivist.toml"
    manifest.write_text(manifest.read_text(encoding="utf-8") +
                        f"\n[repair]\noverlap_max_area_mm2 = {limit / (smap.scale / 1000.0) ** 2}\n", encoding="utf-8")
    only = ["resolve-overlaps", "fill-gaps", "snap-edges"]
    result = repair(project, tmp_path / "out", only=only)
    left = [x for x in result.left if x.repair == "resolve-overlaps"]
    assert len(left) == 1 and left[0].measure == pytest.approx(max(overlaps), rel=1e-9)
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units", fid_as_index=True).geometry
    a, b = (units.loc[int(f)] for f in left[0].features)
    assert float(shapely.area(shapely.intersection(a, b))) > limit  # GEOS: still more than a repair gives away
    assert repair(tmp_path / "out", tmp_path / "again", only=only).changes == ()


def _grown_with_a_misfit(smap, k: int, grow: float):
    """The units of ``smap`` with polygon ``k`` grown by ``grow`` over its neighbours (GEOS buffer, round joins) and
    one vertex a neighbour shares with k's drawn boundary moved (0.3, 0.3) m: a misfit, 0.42 m, where the edges
    the overlaps are cut along meet."""
    g = np.asarray(smap.units.geometry.values, dtype=object).copy()
    drawn = shapely.boundary(g[k])
    for q in range(len(g)):
        if q == k or not shapely.intersects(g[q], g[k]):
            continue
        c = shapely.get_coordinates(shapely.get_exterior_ring(g[q]))
        on = [i for i in range(len(c) - 1) if shapely.distance(shapely.Point(c[i]), drawn) < 1e-9]
        if len(on) >= 2:
            c[on[0]] += (0.3, 0.3)
            if on[0] == 0:
                c[-1] = c[0]
            if shapely.is_valid(shapely.Polygon(c)):
                g[q] = shapely.Polygon(c)
                break
    g[k] = shapely.intersection(shapely.buffer(g[k], grow), smap.extent)
    return g


@pytest.mark.parametrize("seed", [0, 1, 3, 5, 6])
def test_a_polygon_keeping_overlaps_left_is_snapped_with_them_and_a_second_run_changes_nothing(tmp_path, seed):
    # One polygon grown by 3 m over its neighbours at 1:10 000 (tolerance 1 m): its overlaps, most larger than the
    # 100 m² a repair may give away, are left and listed; a neighbour's vertex moved 0.42 m is a misfit the cleaning
    # snaps. An overlap left was cut out of one of its polygons for GEOS's cleaning and given back afterwards, as
    # listed, beside the polygon as cleaned: the cut edge had been snapped on one side only, and the seams left
    # between them put that polygon's boundary up to the overlap's width inside it. So at these seeds the grown
    # polygon was held as "moving" 2.99 to 4.28 m (and at four of them one more, 1.0 to 3.0 m), its misfits with the
    # neighbours stayed, and a second run changed 1 to 4 polygons. Now each overlap is cleaned as a polygon of its own with
    # both its polygons: nothing is held, no vertex of a snapped polygon moves further than the tolerance, every
    # overlap left is still more than a repair gives away (GEOS intersection in the copy), the copy has no misfit
    # left, and repairing the copy changes nothing.
    smap = synthetic_map(25, seed=seed)
    project = write_map(with_units(smap, _grown_with_a_misfit(smap, 12, 3.0)), tmp_path / "map")
    only = ["resolve-overlaps", "fill-gaps", "snap-edges"]
    result = repair(project, tmp_path / "out", only=only)
    limit = result.settings.overlap_max_area
    assert [x for x in result.left if x.repair == "snap-edges"] == []
    snapped = [c for c in result.changes if c.repair == "snap-edges"]
    assert snapped and max(c.max_shift for c in snapped) <= smap.tolerance
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units", fid_as_index=True).geometry
    left = [x for x in result.left if x.repair == "resolve-overlaps"]
    assert len(left) >= 4
    for x in left:
        a, b = (units.loc[int(f)] for f in x.features)
        assert float(shapely.area(shapely.intersection(a, b))) > limit  # GEOS
    assert "unit-edge-mismatch" not in {f.rule for f in check(tmp_path / "out").findings}
    assert repair(tmp_path / "out", tmp_path / "again", only=only).changes == ()


@pytest.mark.parametrize("seed", [0, 5, 9, 19, 20])
def test_a_second_run_is_not_set_off_by_the_rounding_of_an_overlap_cut_out(tmp_path, seed):
    # As above with GEOS's default round joins (8 segments a quarter circle) and every repair. Seeds 9 and 20: in
    # the copy the overlaps left are the only invalid edges (GEOS); cut out of their polygon for the validation,
    # they left a spike some units in the last place off the neighbour's edge, so the second run cleaned the region
    # again and rounded a neighbour's vertices (a change of no area and no shift). Now the region is asked as it
    # is: every invalid edge lies on an overlap left, so there is nothing to clean. Seed 5: a misfit beside the
    # overlap is cleaned again, and GEOS rounds the polygon between them by 10^-10 m without mending anything (its
    # validation finds as many invalid edges either way): the polygon keeps its input. Seeds 0 and 19: a segment of
    # the polygon keeping the overlap runs along the overlap and on past its corner, where the other polygon's edge
    # crosses it between two of its vertices; GEOS flags the whole segment, past the corner too (3.4 cm at seed
    # 19), so not every invalid edge lay on the overlap, and the second run cleaned the region again (seed 19: two
    # polygons moved 0.40 m, 5.3 m²). A segment flagged for a stretch of it along the overlap is now explained by it
    smap = synthetic_map(25, seed=seed)
    g = np.asarray(smap.units.geometry.values, dtype=object).copy()
    grown = shapely.intersection(shapely.buffer(g[12], 0.5), smap.extent)
    limit = max(float(shapely.area(shapely.intersection(grown, g[q]))) for q in range(len(g)) if q != 12) - 1.0
    g[12] = grown
    project = write_map(with_units(smap, g), tmp_path / "map")
    manifest = project / "archivist.toml"
    manifest.write_text(manifest.read_text(encoding="utf-8") +
                        f"\n[repair]\noverlap_max_area_mm2 = {limit / (smap.scale / 1000.0) ** 2}\n", encoding="utf-8")
    first = repair(project, tmp_path / "out")
    assert first.changes and any(x.repair == "resolve-overlaps" for x in first.left)
    assert repair(tmp_path / "out", tmp_path / "again").changes == ()
