"""The tiled synthetic map (tests/coverage_builders.py: write_tiled_map), the generator of the largest benchmark maps.

A map built tile by tile must be what the one-piece generator makes: a valid
coverage (checked by GEOS, ``shapely.coverage_is_valid``), lines made of the
polygons' own edges, and no finding at all from a whole check when clean.
The maps here span several tiles, so the seams between tiles are tested.
"""

from __future__ import annotations

import numpy as np
import pyogrio
import pytest
import shapely

import archivist
from archivist.project import load_project
from coverage_builders import TiledGrid, write_tiled_map


def read(folder, layer):
    return pyogrio.read_dataframe(folder / "map.gpkg", layer=layer, fid_as_index=True)


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tiled") / "clean"
    made = write_tiled_map(folder, 600, tile_cells=12, scale=5000)  # 43 x 43 cells: 16 tiles, 3 of them cut short
    return folder, made


def test_a_tiled_map_spans_several_tiles_and_is_a_valid_coverage(clean):
    folder, made = clean
    units = read(folder, "units")
    assert made["tiles"] == 16
    assert made["polygons"] == len(units) and 500 < len(units) < 700
    assert list(units.index) == list(range(1, len(units) + 1))  # fids in order, as write_map writes them
    geoms = units.geometry.values
    assert shapely.is_valid(geoms).all()
    assert shapely.coverage_is_valid(geoms)  # GEOS: no overlap, edges matched vertex for vertex, seams included
    extent = read(folder, "extent").geometry.values[0]
    assert shapely.equals(shapely.coverage_union_all(geoms), extent)  # no gap: the polygons fill the map sheet


def test_the_lines_of_a_tiled_map_lie_on_the_polygons_edges(clean):
    folder, _ = clean
    units, lines = read(folder, "units"), read(folder, "lines")
    edges = shapely.union_all(shapely.boundary(units.geometry.values))
    on_edges = lines.geometry.values[lines["kind"].to_numpy() != "fault"]
    assert shapely.covered_by(on_edges, edges).all()
    kinds = lines["kind"].value_counts().to_dict()
    assert kinds["map-boundary"] == 1 and kinds["contact"] > 500 and kinds["fault"] > 0
    frame = lines.geometry.values[lines["kind"].to_numpy() == "map-boundary"][0]
    assert shapely.equals(shapely.polygons(shapely.get_coordinates(frame)), read(folder, "extent").geometry.values[0])


def test_a_clean_tiled_map_gives_no_finding(clean):
    folder, _ = clean
    report = archivist.check(load_project(folder), jobs=1)
    assert [(f.rule, f.features) for f in report.findings] == []


def test_a_tiled_map_with_defects_lists_each_kind_and_is_found(tmp_path):
    made = write_tiled_map(tmp_path / "messy", 600, tile_cells=12, density=0.01, scale=5000)
    kinds = {d["kind"] for d in made["defects"]}
    assert kinds == {"buffered", "vertex-moved", "polygon-deleted", "contact-shifted", "fault-crossing", "line-deleted"}
    report = archivist.check(load_project(tmp_path / "messy"), jobs=1)
    rules = {f.rule for f in report.findings}
    assert {"unit-overlap", "unit-gap", "line-off-boundary"} <= rules


def test_tiles_agree_on_their_common_vertices():
    """Two tiles compute the vertices of their seam from the grid position alone: exactly the same numbers."""
    grid = TiledGrid(40, 40, 57.7, (400_000.0, 6_500_000.0), seed=3)
    west, east = grid.vertices(0, 20, 0, 20), grid.vertices(0, 20, 20, 40)
    assert np.array_equal(west[:, -1], east[:, 0])
    whole = grid.vertices(0, 40, 0, 40)
    assert np.array_equal(whole[:21, :21], west)
    assert (whole[:, 0, 0] == 400_000.0).all() and (whole[0, :, 1] == 6_500_000.0).all()  # straight map edges


def test_the_same_seed_makes_the_same_map(tmp_path):
    a = write_tiled_map(tmp_path / "a", 200, tile_cells=10, seed=4, density=0.02)
    b = write_tiled_map(tmp_path / "b", 200, tile_cells=10, seed=4, density=0.02)
    assert a == b
    for layer in ("units", "lines"):
        ga, gb = read(tmp_path / "a", layer), read(tmp_path / "b", layer)
        assert shapely.equals_exact(ga.geometry.values, gb.geometry.values, 0).all()


@pytest.mark.slow
def test_partitions_name_the_same_nearest_line_as_the_whole_map(tmp_path):
    """A contact shifted 1 m off a node of the jittered grid is as far from the two lines meeting there: the
    dangle's message must name the same one (the first in the layer) on the whole map and on every partition,
    whatever order each partition's spatial index returns them in. Four such ends differed on this map."""
    from concurrent.futures import ThreadPoolExecutor

    from archivist import engine
    from archivist.registry import all_rules

    folder = tmp_path / "messy"
    write_tiled_map(folder, 10_000, density=0.01, scale=5000)
    project = load_project(folder)
    rules = tuple(info.id for info in all_rules() if info.partitioned)
    whole = archivist.check(project, rules=rules, jobs=1)
    with ThreadPoolExecutor(2) as pool:
        parts = engine.check(project, rules=rules, executor=pool, parts=2)
    assert any(f.rule == "line-dangle" for f in whole.findings)
    assert parts.findings == whole.findings
