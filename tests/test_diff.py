"""``archivist diff``: what changed between two versions, matched by geometry and attributes, not by id.

Expected areas are computed independently with shapely (GEOS) from the
edited geometries; the diff must agree to the millimetre-square.
"""

import json
import shutil
from pathlib import Path

import jsonschema
import numpy as np
import pyogrio
import pytest
import shapely
from click.testing import CliRunner
from shapely.geometry import LineString, box

import archivist
from archivist.cli import cli
from archivist.manifest import load_schema
from archives import package_zip
from builders import (
    BUNDLE,
    edit_layer,
    edit_table,
    edit_xlsx,
    read_layer,
    tiny_project,
    tiny_structures,
    tiny_with_analyses,
    tree_digest,
    xlsx_cell,
)

SCHEMA = load_schema("diff.schema.json")


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def kinds(report):
    return sorted(c.change for c in report.changes)


def copy(root: Path, dest: Path) -> Path:
    shutil.copytree(root, dest, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    return dest


# ---------------------------------------------------------------- the example bundle with two known edits

def two_edits(dest: Path) -> dict:
    """Copy the example bundle; recode one polygon; move the longest contact 15 m (a sine bump, ends fixed)
    and reshape the two polygons either side of it to match. Returns what was done."""
    copy(BUNDLE, dest)
    units = read_layer(dest, "map.gpkg", "units")
    lines = read_layer(dest, "map.gpkg", "lines")
    geoms = np.asarray(units.geometry.array, dtype=object)
    codes = units["unit"].to_numpy()
    tree = shapely.STRtree(geoms)
    contacts = lines[lines["kind"] == "contact"]
    fid_line = contacts.geometry.length.idxmax()
    old_line = contacts.geometry[fid_line]
    a, b = (int(i) for i in tree.query(old_line.interpolate(0.5, normalized=True).buffer(1), predicate="intersects"))
    # a polygon 500 m or more from the contact, recoded to a unit none of its neighbours has
    for i in range(len(geoms)):
        if geoms[i].distance(old_line) < 500:
            continue
        used = {codes[j] for j in tree.query(geoms[i], predicate="touches")} | {codes[i]}
        options = sorted(set(codes) - used)
        if options:
            rec, new_code = i, options[0]
            break
    xy = shapely.get_coordinates(old_line)
    d = np.r_[0, np.cumsum(np.hypot(*np.diff(xy, axis=0).T))]
    tangent = np.gradient(xy, axis=0)
    tangent /= np.hypot(*tangent.T)[:, None]
    normal = np.c_[-tangent[:, 1], tangent[:, 0]]
    new_line = LineString(np.round(xy + normal * (15 * np.sin(np.pi * d / d[-1]))[:, None], 2))
    faces = shapely.get_parts(shapely.polygonize(shapely.get_parts(shapely.union_all([old_line, new_line]))))
    A, B = geoms[a], geoms[b]
    to_b = shapely.union_all([f for f in faces if A.contains(f.representative_point())])
    to_a = shapely.union_all([f for f in faces if B.contains(f.representative_point())])
    A2 = shapely.union(shapely.difference(A, to_b, grid_size=0.01), to_a, grid_size=0.01)
    B2 = shapely.union(shapely.difference(B, to_a, grid_size=0.01), to_b, grid_size=0.01)

    def change_units(frame):
        frame.loc[frame.index[a], "geometry"] = A2
        frame.loc[frame.index[b], "geometry"] = B2
        frame.loc[frame.index[rec], "unit"] = new_code

    def change_lines(frame):
        frame.loc[fid_line, "geometry"] = new_line

    edit_layer(dest, "map.gpkg", "units", change_units)
    edit_layer(dest, "map.gpkg", "lines", change_lines)
    gained, lost = {}, {}
    for old, new, unit in ((A, A2, codes[a]), (B, B2, codes[b])):
        gained[unit] = gained.get(unit, 0) + shapely.difference(new, old).area
        lost[unit] = lost.get(unit, 0) + shapely.difference(old, new).area
    return {
        "recoded": (str(units.index[rec]), codes[rec], new_code, geoms[rec]),
        "line": (str(fid_line), old_line, new_line),
        "gained": {u: v for u, v in gained.items() if v > 1e-6},
        "lost": {u: v for u, v in lost.items() if v > 1e-6},
        "sides": {str(units.index[a]), str(units.index[b])},
    }


@pytest.mark.slow
def test_two_known_edits_exactly_at_their_places(tmp_path):
    edited = two_edits(tmp_path / "remap")
    result = run("diff", BUNDLE, tmp_path / "remap", "--format", "json", "--gpkg", tmp_path / "changes.gpkg")
    assert result.exit_code == 1, result.output
    data = json.loads(result.stdout)
    jsonschema.validate(data, SCHEMA)
    changes = data["changes"]
    assert sorted(c["change"] for c in changes) == ["line-moved", "polygon-recoded"], [c["message"] for c in changes]
    recoded = next(c for c in changes if c["change"] == "polygon-recoded")
    fid, old_code, new_code, polygon = edited["recoded"]
    assert recoded["features"] == [fid] and recoded["layer"] == "units"
    assert recoded["fields"]["unit"] == {"old": old_code, "new": new_code}
    assert polygon.contains(shapely.Point(recoded["x"], recoded["y"]))
    assert recoded["area_lost"] == {old_code: pytest.approx(polygon.area, abs=1e-3)}
    moved = next(c for c in changes if c["change"] == "line-moved")
    line_fid, old_line, new_line = edited["line"]
    assert moved["features"] == [line_fid] and moved["layer"] == "lines"
    assert moved["distance"] == pytest.approx(shapely.hausdorff_distance(old_line, new_line), abs=1e-3)
    assert moved["distance"] == pytest.approx(15.0, abs=0.05)
    where = shapely.Point(moved["x"], moved["y"])
    assert where.distance(old_line) <= 15.01 and where.distance(new_line) <= 15.01
    # the two polygons either side are folded into the move, with the area each unit gained and lost (GEOS overlay)
    assert set(moved["polygons"]) == edited["sides"]
    assert moved["area_gained"] == {u: pytest.approx(v, abs=1e-2) for u, v in edited["gained"].items()}
    assert moved["area_lost"] == {u: pytest.approx(v, abs=1e-2) for u, v in edited["lost"].items()}
    # the changed areas as a layer, in the map CRS
    areas = pyogrio.read_dataframe(tmp_path / "changes.gpkg", layer="changed_areas")
    assert areas.crs.to_epsg() == 32633
    assert sorted(set(areas["change"])) == ["line-moved", "polygon-recoded"]
    swept = areas[areas["change"] == "line-moved"]
    assert swept.geometry.area.sum() == pytest.approx(sum(edited["gained"].values()) + sum(edited["lost"].values()), abs=1e-2)
    lines = pyogrio.read_dataframe(tmp_path / "changes.gpkg", layer="changed_lines")
    assert sorted(lines["side"]) == ["new", "old"]


@pytest.mark.slow
def test_two_known_edits_text(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    edited = two_edits(tmp_path / "remap")
    out = run("diff", BUNDLE, tmp_path / "remap").stdout
    fid, old_code, new_code, _ = edited["recoded"]
    assert "polygon-recoded" in out and f"Polygon {fid} recoded {old_code} -> {new_code}" in out
    assert f"Contact {edited['line'][0]} moved by up to 15.0 m" in out
    assert "2 changes: 1 line-moved, 1 polygon-recoded." in out


def test_unchanged_gives_an_empty_list(tmp_path):
    result = run("diff", BUNDLE, copy(BUNDLE, tmp_path / "same"), "--format", "json")
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    jsonschema.validate(data, SCHEMA)
    assert data["changes"] == []


@pytest.mark.slow
def test_package_against_its_project_is_unchanged(tmp_path):
    archive = package_zip(tmp_path, "bundle")
    report = archivist.diff(archive, BUNDLE)
    assert report.changes == (), [c.message for c in report.changes]


@pytest.mark.slow
def test_ids_are_not_what_matches(tmp_path):
    """An editor renumbered every feature: no change."""
    new = copy(BUNDLE, tmp_path / "renumbered")
    for layer in ("units", "lines", "structures"):
        edit_layer(new, "map.gpkg", layer, lambda f: f.iloc[::-1].set_axis(f.index, axis=0))
    report = archivist.diff(BUNDLE, new)
    assert report.changes == (), [c.message for c in report.changes]


def test_diff_never_writes_into_either_side(tmp_path):
    new = copy(BUNDLE, tmp_path / "new")
    before = tree_digest(new), tree_digest(BUNDLE)
    refused = run("diff", BUNDLE, new, "--output", new / "changes.txt")
    assert refused.exit_code == 2 and "inside the project" in refused.stderr
    assert run("diff", BUNDLE, new, "--gpkg", tmp_path / "c.gpkg").exit_code == 0
    again = run("diff", BUNDLE, new, "--gpkg", tmp_path / "c.gpkg")
    assert again.exit_code == 2 and "--force" in again.stderr
    assert (tree_digest(new), tree_digest(BUNDLE)) == before


def test_no_such_side_is_exit_2(tmp_path):
    result = run("diff", BUNDLE, tmp_path / "nowhere")
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "nowhere" in line


# ---------------------------------------------------------------- each kind of change, on the tiny map

@pytest.fixture
def tiny(tmp_path):
    return tiny_project(tmp_path, name="old")


def variant(tiny, tmp_path):
    return copy(tiny, tmp_path / "new")


def test_line_reclassified(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def change(f):
        f.loc[f["kind"] == "contact", "certainty"] = "inferred"

    edit_layer(new, "map.gpkg", "lines", change)
    (c,) = archivist.diff(tiny, new).changes
    assert c.change == "line-reclassified" and c.fields == {"certainty": {"old": "certain", "new": "inferred"}}
    assert (c.x, c.y) == (100.0, 50.0)


def test_line_added_and_removed(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def change(f):
        f.loc[99] = {"kind": "fault", "certainty": "inferred", "geometry": LineString([(20, 20), (60, 70)])}

    edit_layer(new, "map.gpkg", "lines", change)
    (c,) = archivist.diff(tiny, new).changes
    assert c.change == "line-added" and c.features == ("99",) and "Fault 99" in c.message
    (d,) = archivist.diff(new, tiny).changes
    assert d.change == "line-removed" and d.features == ("99",)


def test_polygon_split_is_one_change(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def change(f):
        f.loc[f.index[0], "geometry"] = box(0, 0, 50, 100)
        f.loc[7] = {"unit": "A", "geometry": box(50, 0, 100, 100)}

    edit_layer(new, "map.gpkg", "units", change)
    (c,) = archivist.diff(tiny, new).changes
    assert c.change == "polygon-split" and c.area_gained == {"A": 5000.0} and c.area_lost == {"A": 5000.0}


def test_new_polygon_carved_out_of_another(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def change(f):
        hole = box(20, 20, 40, 40)
        f.loc[f.index[0], "geometry"] = box(0, 0, 100, 100).difference(hole)
        f.loc[7] = {"unit": "B", "geometry": hole}

    edit_layer(new, "map.gpkg", "units", change)
    (c,) = archivist.diff(tiny, new).changes
    assert c.change == "polygon-added" and c.area_gained == {"B": 400.0} and c.area_lost == {"A": 400.0}
    assert "taking A 400.0 m²" in c.message


def test_unit_recoded_everywhere(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def units(f):
        f.loc[f["unit"] == "A", "unit"] = "AS"

    def legend(f):
        f.loc[f["unit"] == "A", "unit"] = "AS"

    edit_layer(new, "map.gpkg", "units", units)
    edit_table(new, "legend.csv", legend)
    (c,) = archivist.diff(tiny, new).changes
    assert c.change == "unit-recoded" and c.fields == {"unit": {"old": "A", "new": "AS"}}
    assert c.area_gained == {"AS": 10000.0} and c.area_lost == {"A": 10000.0}


def test_unit_added_and_legend_entry_changed(tiny, tmp_path):
    new = variant(tiny, tmp_path)

    def legend(f):
        f.loc[f["unit"] == "B", "name"] = "Birch Shale"
        f.loc[len(f)] = ["C", "Cedar Limestone", "Pale limestone.", "Rhaetian", "201", "208", "0", "#80C0F0", "limestone", "sedimentary"]

    edit_table(new, "legend.csv", legend)
    report = archivist.diff(tiny, new)
    assert kinds(report) == ["legend-entry-changed", "unit-added"]
    changed = next(c for c in report.changes if c.change == "legend-entry-changed")
    assert changed.features == ("B",) and changed.fields == {"name": {"old": "Birch Mudstone", "new": "Birch Shale"}}
    added = next(c for c in report.changes if c.change == "unit-added")
    assert added.features == ("C",) and "not mapped" in added.message


def test_samples_and_analyses(tmp_path):
    old = tiny_with_analyses(tmp_path, name="old")
    new = copy(old, tmp_path / "new")

    def samples(f):
        f.loc[f["sample_id"] == "S-0001", "geometry"] = shapely.Point(58, 56)  # moved 10 m (6, 8: a 3-4-5 triangle)
        f.loc[f["sample_id"] == "S-0002", "unit"] = "A"

    edit_layer(new, "map.gpkg", "samples", samples)
    edit_xlsx(new, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, "S-0002", "SiO2 (wt%)"), "value", 71.9))
    report = archivist.diff(old, new)
    assert kinds(report) == ["analysis-changed", "sample-changed", "sample-moved"]
    by = {c.change: c for c in report.changes}
    assert by["sample-moved"].features == ("S-0001",) and by["sample-moved"].distance == pytest.approx(10.0)
    assert by["sample-changed"].fields == {"unit": {"old": "B", "new": "A"}}
    assert by["analysis-changed"].fields == {"SiO2 (wt%)": {"old": "72.5", "new": "71.9"}}
    assert (by["analysis-changed"].x, by["analysis-changed"].y) == (150.0, 50.0)


def test_sample_renamed_is_one_change_per_table(tmp_path):
    old = tiny_with_analyses(tmp_path, name="old")
    new = copy(old, tmp_path / "new")
    edit_layer(new, "map.gpkg", "samples", lambda f: f.replace({"sample_id": {"S-0001": "S-0101"}}))
    edit_xlsx(new, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, "S-0001", "sample_id"), "value", "S-0101"))
    report = archivist.diff(old, new)
    assert kinds(report) == ["analysis-changed", "sample-changed"]
    for c in report.changes:
        assert c.fields == {"sample_id": {"old": "S-0001", "new": "S-0101"}}


def test_sample_and_its_analysis_removed(tmp_path):
    old = tiny_with_analyses(tmp_path, name="old")
    new = copy(old, tmp_path / "new")
    edit_layer(new, "map.gpkg", "samples", lambda f: f[f["sample_id"] != "S-0002"])

    def drop(ws):
        ws.delete_rows(xlsx_cell(ws, "S-0002", "sample_id").row)

    edit_xlsx(new, "analyses.xlsx", "majors", drop)
    report = archivist.diff(old, new)
    assert kinds(report) == ["analysis-removed", "sample-removed"]
    assert all(c.features == ("S-0002",) for c in report.changes)


def test_structure_changed(tmp_path):
    old = tiny_project(tmp_path, name="old", structures=tiny_structures())
    new = copy(old, tmp_path / "new")

    def change(f):
        f.loc[f.index[0], "dip"] = 31.0

    edit_layer(new, "map.gpkg", "structures", change)
    (c,) = archivist.diff(old, new).changes
    assert c.change == "structure-changed" and c.fields == {"dip": {"old": "24", "new": "31"}}


def test_cli_json_shape_for_each_kind(tiny, tmp_path):
    new = variant(tiny, tmp_path)
    edit_layer(new, "map.gpkg", "lines", lambda f: f.assign(certainty="approximate"))
    result = run("diff", tiny, new, "--format", "json")
    assert result.exit_code == 1
    data = json.loads(result.stdout)
    jsonschema.validate(data, SCHEMA)
    assert {"change", "layer", "features", "message", "x", "y"} <= set(data["changes"][0])


def test_layer_and_column_changes_of_every_layer_are_reported(tmp_path):
    """A samples column added, an analyses column removed, a structures layer and an extent layer added:
    each is one change, like the same edits to the units, lines and legend."""
    old = tiny_with_analyses(tmp_path, name="old")
    new = tiny_with_analyses(tmp_path, name="new", structures=tiny_structures(), extent=box(0, 0, 200, 100))
    edit_layer(new, "map.gpkg", "samples", lambda f: f.assign(collector="Test Mapper"))
    edit_xlsx(new, "analyses.xlsx", "majors", lambda ws: ws.delete_cols(ws.max_column))
    report = archivist.diff(old, new)
    found = {(c.change, c.layer) for c in report.changes}
    assert {("column-added", "samples"), ("column-removed", "analyses"), ("layer-added", "structures"), ("layer-added", "extent")} <= found
    jsonschema.validate(json.loads(json.dumps(report.to_dict())), SCHEMA)


def test_folding_reshapes_leaves_the_changes_given_untouched(tiny, tmp_path):
    """The contact moved 5 m east and both squares reshaped to follow it: the fold returns a completed copy of
    the line move (A gained and B lost 5 m x 100 m = 500 m², plane geometry) and leaves the changes given unchanged."""
    from archivist.diff.common import start
    from archivist.diff.lines import match_lines
    from archivist.diff.polygons import match_polygons
    from archivist.diff.reshapes import fold_reshapes

    new = variant(tiny, tmp_path)

    def move_contact(f):
        f.loc[f.index[0], "geometry"] = LineString([(105, 0), (105, 100)])

    def follow(f):
        f.loc[f.index[0], "geometry"] = box(0, 0, 105, 100)
        f.loc[f.index[1], "geometry"] = box(105, 0, 200, 100)

    edit_layer(new, "map.gpkg", "lines", move_contact)
    edit_layer(new, "map.gpkg", "units", follow)
    cmp, _ = start(archivist.load_project(tiny), archivist.load_project(new))
    polygons, lines = match_polygons(cmp), match_lines(cmp)
    assert polygons.found.changes == [] and len(polygons.reshapes) == 2
    (moved,) = lines.changes
    before = (moved.message, dict(moved.area_gained), dict(moved.area_lost), len(moved.pieces))
    folded = fold_reshapes(polygons.reshapes, polygons.found.changes, lines.changes, cmp.tol)
    assert (moved.message, moved.area_gained, moved.area_lost, len(moved.pieces)) == before
    (done,) = folded.lines
    assert done.change == "line-moved" and folded.reshaped == []
    assert done.area_gained == {"A": pytest.approx(500.0)} and done.area_lost == {"B": pytest.approx(500.0)}
    again = fold_reshapes(polygons.reshapes, polygons.found.changes, lines.changes, cmp.tol)
    assert [c.message for c in again.lines] == [done.message]


@pytest.mark.parametrize("generated", [False, True])
def test_line_drawn_from_the_polygons_explains_no_reshape(tiny, tmp_path, generated):
    # The boundary between A and B moves 3 m west (A loses the strip 97 <= x <= 100, 300 m², to B), and a contact
    # is added along x = 97 (the one at x = 100 stays as drawn). Drawn by a mapper, the new contact explains the
    # strip (within twice the tolerance of it: 104 m of the strip's 206 m outline, by hand). Drawn from the polygons
    # (field generated true, as archivist repair marks the contacts it draws), it explains nothing: the reshape is a
    # change of its own.
    new = variant(tiny, tmp_path)

    def units(f):
        f.loc[f["unit"] == "A", "geometry"] = box(0, 0, 97, 100)
        f.loc[f["unit"] == "B", "geometry"] = box(97, 0, 200, 100)

    def lines(f):
        f.loc[99] = {"kind": "contact", "certainty": "inferred", "geometry": LineString([(97, 0), (97, 100)])}
        if generated:
            f["generated"] = [False] * (len(f) - 1) + [True]

    edit_layer(new, "map.gpkg", "units", units)
    edit_layer(new, "map.gpkg", "lines", lines)
    report = archivist.diff(tiny, new)
    (added,) = [c for c in report.changes if c.change == "line-added"]
    reshaped = [c for c in report.changes if c.change == "polygon-reshaped"]
    if generated:
        assert not added.area_gained and not added.area_lost
        assert sum(sum(c.area_lost.values()) for c in reshaped) == pytest.approx(300.0)  # 3 m x 100 m, by hand
    else:
        assert added.area_lost == {"A": pytest.approx(300.0)} and added.area_gained == {"B": pytest.approx(300.0)}
        assert not reshaped
