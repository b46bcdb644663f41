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
from archivist.analysis.coverage import _run_along, find_mismatches, gap_faces, local_gaps, mean_width, noise_floor, stretch_length
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


def test_an_edge_inside_a_polygon_matched_by_a_third_still_gives_both_overlaps(tmp_path):
    # A and B share their edge at x = 5 exactly; E lies over it. GEOS finds A's and B's edges
    # valid (matched by each other), only E's edges inside them invalid: the overlaps are asked
    # of the pairs of an implicated polygon, E with A and E with B (reference: GEOS's own
    # coverage_invalid_edges and intersection areas)
    e = box(4, 2, 6, 8)
    geoms = [box(0, 0, 5, 10), box(5, 0, 10, 10), e]
    invalid = shapely.coverage_invalid_edges(geoms)
    assert list(shapely.is_empty(invalid)) == [True, True, False]
    ctx = CheckContext(load_project(square_map(tmp_path, "matched", extra=[e])))
    found = sorted((p.units, round(p.area, 9)) for p in ctx.coverage().overlaps)
    assert found == [((0, 2), round(shapely.intersection(geoms[0], e).area, 9)),
                     ((1, 2), round(shapely.intersection(geoms[1], e).area, 9))]


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


# ---------------------------------------------------------------- gaps found around their own polygons, and the noise floor

X0, Y0 = 400000.0, 6500000.0  # UTM-sized coordinates (EPSG:32633 northings), where a double's unit in the last place is 9.3e-10 m


def strip_map(tmp_path, name, width):
    """Two units at UTM coordinates with a strip ``width`` wide left between them, inside a declared extent."""
    from builders import tiny_project
    from coverage_builders import line_frame, unit_frame
    from shapely.geometry import LineString

    a = box(X0, Y0, X0 + 5, Y0 + 10)
    b = box(X0 + 5 + width, Y0, X0 + 10, Y0 + 10)
    frame = LineString([(X0, Y0), (X0, Y0 + 10), (X0 + 10, Y0 + 10), (X0 + 10, Y0), (X0, Y0)])
    return tiny_project(tmp_path, name=name, units=unit_frame(a, b), extent=box(X0, Y0, X0 + 10, Y0 + 10),
                        lines=line_frame(("contact", LineString([(X0 + 5, Y0), (X0 + 5, Y0 + 10)])), ("map-boundary", frame)),
                        manifest={"map": {"scale": 1000}})


def test_noise_floor_is_sixteen_roundings_at_the_largest_coordinate():
    # IEEE 754 binary64: machine epsilon 2**-52 (numpy's finfo(float).eps)
    assert noise_floor(6.5e6) == pytest.approx(16 * 2.0 ** -52 * 6.5e6)
    assert mean_width(np.array([box(0, 0, 10, 0.5)], dtype=object))[0] == pytest.approx(2 * 5 / 21)


@pytest.mark.parametrize("times, kept", [(2.0, True), (0.5, False)])
def test_a_thin_gap_above_the_floor_stays_and_one_below_it_goes(tmp_path, times, kept):
    floor = noise_floor(Y0 + 10)
    width = times * floor
    ctx = CheckContext(load_project(strip_map(tmp_path, "thin", width)))
    cov = ctx.coverage()
    assert cov.failures == ()
    if kept:
        (gap,) = cov.gaps
        assert gap.units == (0, 1) and gap.area == pytest.approx(10 * width, rel=0.05)
        (misfit,) = find_mismatches(cov)
        assert misfit.units == (0, 1)
    else:
        assert cov.gaps == () and find_mismatches(cov) == ()


@pytest.fixture(scope="module")
def laden_map(tmp_path_factory):
    from coverage_builders import synthetic_map, with_defect_density, write_map

    smap, _ = with_defect_density(synthetic_map(600, seed=5, scale=5000), 0.05, seed=5)
    return write_map(smap, tmp_path_factory.mktemp("laden5") / "map")


def test_gaps_are_those_of_the_whole_map_overlay_above_the_noise_floor(laden_map):
    # reference: GEOS's overlay of the whole map, the extent less the union of every polygon. It leaves
    # slivers a fraction of a unit in the last place wide where buffered polygons overlap: below the floor.
    ctx = CheckContext(load_project(laden_map))
    cov, geoms = ctx.coverage(), ctx.units().geoms
    assert cov.extent_declared and cov.failures == ()
    ref = shapely.get_parts(shapely.difference(cov.extent, shapely.union_all(geoms)))
    ref = ref[shapely.area(ref) > 0]
    floor = noise_floor(float(np.abs(shapely.total_bounds(geoms)).max()))
    noise = mean_width(ref) < floor
    assert noise.sum() > 5  # the overlay does leave such slivers on this map
    assert all(mean_width(np.array([p.geom for p in cov.gaps], dtype=object)) >= floor)
    ours = np.array([p.geom for p in cov.gaps], dtype=object)
    assert len(ours) == int((~noise).sum())
    # each real gap matches one of ours: same place, same area
    oi, ri = shapely.STRtree(ref[~noise]).query(shapely.point_on_surface(ours), predicate="intersects")
    assert sorted(oi.tolist()) == list(range(len(ours))) and len(set(ri.tolist())) == len(ours)
    assert np.allclose(shapely.area(ours[oi]), shapely.area(ref[~noise][ri]), rtol=1e-6, atol=floor)


def gap_windows(folder):
    """The map's coverage, polygons, their index, the faces where gaps are, a point in each, and the margin."""
    ctx = CheckContext(load_project(folder))
    cov, geoms, tree = ctx.coverage(), ctx.units().geoms, ctx.units().tree
    faces, points = gap_faces(ctx.edges(), cov.extent, tree)
    margin = 1e3 * noise_floor(float(np.abs(shapely.total_bounds(geoms)).max()))
    return cov, geoms, tree, faces, points, margin


def test_a_gap_depends_only_on_the_polygons_around_it(laden_map, tmp_path):
    # the same gaps, to the bit, when polygons far from them are taken away
    cov, geoms, tree, faces, points, margin = gap_windows(laden_map)
    full, k, _ = local_gaps(faces, points, cov.extent, geoms, tree, margin)
    assert len(full) > 10
    for f in range(0, len(full), 7):
        g = full[f]
        near = np.sort(tree.query(shapely.buffer(g, 1.0), predicate="intersects"))
        sub = geoms[near]
        alone, _, _ = local_gaps(faces[k[f]:k[f] + 1], points[k[f]:k[f] + 1], cov.extent, sub, shapely.STRtree(sub), margin)
        assert len(alone) == 1 and shapely.to_wkb(alone[0]) == shapely.to_wkb(g)


def test_covers_answers_as_the_union_of_the_units(laden_map):
    # reference: shapely.covers against the union of every polygon (GEOS's whole-map overlay), its slivers filled
    ctx = CheckContext(load_project(laden_map))
    cov, geoms = ctx.coverage(), ctx.units().geoms
    assert cov.union is None  # a declared extent: the map is not joined
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    rng = np.random.default_rng(3)
    starts = rng.uniform((x0 - 50, y0 - 50), (x1 + 50, y1 + 50), size=(400, 2))
    ends = starts + rng.uniform(-80, 80, size=(400, 2))
    lines = shapely.linestrings(np.stack([starts, ends], axis=1))
    # and lines across the gaps and along the polygons' own edges
    lines = np.concatenate([lines, shapely.shortest_line(shapely.point_on_surface(np.array([p.geom for p in cov.gaps], dtype=object)),
                                                        shapely.centroid(geoms[:len(cov.gaps)])),
                            shapely.get_exterior_ring(geoms[:200])])
    union = shapely.union_all(geoms)
    # the overlay's rounding slivers (below the noise floor) count as covered
    slivers = shapely.get_parts(shapely.difference(cov.extent, union))
    slivers = slivers[mean_width(slivers) < noise_floor(float(np.abs(shapely.total_bounds(geoms)).max()))]
    assert len(slivers)
    expected = shapely.covers(shapely.union_all(np.concatenate([[union], slivers])), lines)
    assert 0 < expected.sum() < len(lines)
    assert (cov.covers(lines) == expected).all()


def test_the_polygons_along_each_gap_are_those_whose_edge_runs_with_its_edge(laden_map):
    # reference: a coarser measure in plain shapely, one gap and polygon at a time: the polygon's edge
    # comes within 1 micrometre of the gap's edge along more than 1 mm. Compared exactly, a gap's rounded
    # corners left some neighbours out, and a gap with none was dropped.
    ctx = CheckContext(load_project(laden_map))
    cov, geoms = ctx.coverage(), ctx.units().geoms
    assert len(cov.gaps) > 10
    for p in cov.gaps:
        edge = shapely.boundary(p.geom)
        touching = ctx.units().tree.query(p.geom, predicate="dwithin", distance=noise_floor(float(np.abs(shapely.total_bounds(geoms)).max())))
        clear = {int(u) for u in touching
                 if shapely.length(shapely.intersection(edge, shapely.buffer(shapely.boundary(geoms[u]), 1e-6))) > 1e-3}
        # none lost; the others touch the gap (at a thin gap's tip the two measures may differ)
        assert p.units and clear <= set(p.units) <= set(touching.tolist()), (p.area, p.units, clear)


def test_a_thin_gap_runs_along_the_polygons_whose_edges_it_follows_a_rounding_off():
    # a 0.001 m2 gap at a triple junction of a synthetic 1:5 000 map (a polygon there buffered 2 m into its
    # neighbours), as GEOS's overlay leaves it: its corners are rounded, so no stretch of its edge lies
    # exactly on a polygon's edge (shapely.intersection gives points only) and it was taken for a leftover
    # of the overlay; measured within the noise floor, it runs along all three.
    gap = shapely.from_wkt("POLYGON ((407171.51939640165 6500267.92285212, 407173.6173861819 6500272.255375109, "
                           "407173.6175612224 6500272.254814129, 407171.51939640165 6500267.92285212))")
    polys = shapely.from_wkt([
        "POLYGON ((407174.3698824685 6500259.72957621, 407171.51939640165 6500267.92285212, 407174.8964292202 6500274.895220416, "
        "407219.7422655235 6500304.66203079, 407273.07327243674 6500233.217725759, 407174.3698824685 6500259.72957621))",
        "POLYGON ((407154.2873250504 6500340.919839663, 407174.89149764826 6500274.886521013, 407171.51939640165 6500267.92285212, "
        "407115.2187488754 6500275.716452931, 407154.2873250504 6500340.919839663))",
        "POLYGON ((407151.9940638264 6500341.554917646, 407219.6278649704 6500302.185469241, 407173.77643678663 6500271.7456415, "
        "407151.9940638264 6500341.554917646))",
    ])
    floor = noise_floor(6500341.6)
    assert (shapely.length(shapely.intersection(shapely.boundary(gap), shapely.boundary(polys))) == 0).all()
    run = _run_along(np.full(3, gap, dtype=object), polys, floor)
    assert (run > 1e3 * floor).all() and run.max() < float(shapely.length(gap))
    # GEOS buffers a line by a few units in the last place into nothing, so the floor is measured by distance
    line = shapely.from_wkt("LINESTRING (406232.2116581286 6501565.205430902, 406241.29940312885 6501571.785973932, "
                            "406296.9513165317 6501549.529159497, 406291.61259351345 6501505.914055734, 406243.2414688141 6501505.40953292, "
                            "406231.55427800515 6501512.834147754, 406189.12436657446 6501503.694688359, 406169.033834544 6501557.967743834, "
                            "406187.28329813667 6501581.736579333, 406232.2116581286 6501565.205430902)")
    assert shapely.area(shapely.buffer(line, noise_floor(6510000.0), quad_segs=2)) == 0  # the map's largest coordinate


def test_gap_faces_traced_cluster_by_cluster_are_geos_faces_of_all_the_edges_at_once(laden_map, monkeypatch):
    # outside reference: GEOS's union (noding) and polygonize of every untwinned edge and the extent's edge in one
    # call each, a face a gap where its point on the surface lies in the extent and in no polygon. The faces found
    # cluster by cluster are those (their outer rings: a face holding another cluster has it as a hole in GEOS's),
    # and so are the gaps measured from them; in batches of a few clusters too
    import archivist.analysis.arrays as arrays

    ctx = CheckContext(load_project(laden_map))
    cov, edges, tree = ctx.coverage(), ctx.edges(), ctx.units().tree
    lines = np.concatenate([edges.lines(np.flatnonzero(~edges.twin)), shapely.get_parts(shapely.boundary(cov.extent))])
    every = shapely.get_parts(shapely.polygonize(shapely.get_parts(shapely.union_all(lines))))
    points = shapely.point_on_surface(every)
    gap = shapely.within(points, cov.extent)
    gap[tree.query(points, predicate="intersects")[0]] = False
    expected, at = every[gap], points[gap]

    def outer(faces):
        return sorted(shapely.to_wkb(shapely.normalize(shapely.polygons(shapely.get_exterior_ring(faces)))).tolist())

    faces, found = gap_faces(edges, cov.extent, tree)
    assert len(expected) > 20 and outer(faces) == outer(expected)
    assert shapely.contains_properly(faces, found).all()
    geoms, margin = ctx.units().geoms, 1e3 * noise_floor(float(np.abs(shapely.total_bounds(ctx.units().geoms)).max()))
    mine = local_gaps(faces, found, cov.extent, geoms, tree, margin)[0]
    theirs = local_gaps(expected, at, cov.extent, geoms, tree, margin)[0]
    assert outer(mine) == outer(theirs) and np.isclose(shapely.area(mine).sum(), shapely.area(theirs).sum(), rtol=1e-12)
    monkeypatch.setattr(arrays, "TABLE_CELLS", 7)
    small, found_small = gap_faces(edges, cov.extent, tree)
    assert shapely.to_wkb(small).tolist() == shapely.to_wkb(faces).tolist() and shapely.equals(found_small, found).all()


def test_gaps_joined_in_small_batches_are_the_same(laden_map, monkeypatch):
    import archivist.analysis.arrays as arrays

    cov, geoms, tree, faces, points, margin = gap_windows(laden_map)
    whole, k, _ = local_gaps(faces, points, cov.extent, geoms, tree, margin)
    monkeypatch.setattr(arrays, "TABLE_CELLS", 5)  # a few windows per batch
    small, k2, _ = local_gaps(faces, points, cov.extent, geoms, tree, margin)
    assert k.tolist() == k2.tolist() and shapely.to_wkb(whole).tolist() == shapely.to_wkb(small).tolist()


def test_the_map_scale_is_the_largest_coordinate_of_the_units_and_extent_as_geos_bounds_them(tmp_path):
    # map_scale reads each geometry's largest |x|, |y| from the layer's far-coordinate answer; outside
    # reference: GEOS's envelope of the same geometries (shapely.total_bounds), features far outside any map
    # (left to coordinates-implausible) and empty ones not counted
    import geopandas as gpd
    from builders import tiny_project

    from archivist.analysis.coverage import map_scale

    units = gpd.GeoDataFrame(
        {"unit": ["A", "B", "A", "B"]},
        geometry=[box(-350_000.25, 6_000_000, -349_990, 6_000_010), box(512_345.5, 6_400_000.75, 512_355.5, 6_400_010.75),
                  box(1e12, 1e12, 1e12 + 10, 1e12 + 10), Polygon()],
        crs="EPSG:32633",
    )
    root = tiny_project(tmp_path, units=units, extent=box(-400_000, 5_900_000, 600_000, 6_500_000.5))
    project = load_project(root)
    kept = [g for g in units.geometry[:2]] + [box(-400_000, 5_900_000, 600_000, 6_500_000.5)]
    x0, y0, x1, y1 = shapely.total_bounds(np.array(kept, dtype=object))
    assert map_scale(project) == max(abs(x0), abs(y0), abs(x1), abs(y1)) == 6_500_000.5
