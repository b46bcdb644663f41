"""The repair run as a whole: the copy, the log against `diff`, the example bundle, the CLI, provenance."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import jsonschema
import pyogrio
import pytest
import shapely
from click.testing import CliRunner
from shapely.geometry import box

sys.path.insert(0, str(Path(__file__).resolve().parent))

from builders import copy_bundle, edit_layer, edit_manifest, tree_digest  # noqa: E402
from test_repair_worked import TOPOLOGY, square  # noqa: E402

from archivist.cli import cli  # noqa: E402
from archivist.diff import diff  # noqa: E402
from archivist.engine import check  # noqa: E402
from archivist.manifest import load_schema  # noqa: E402
from archivist.repair.api import repair  # noqa: E402

# tolerance 0.05 m so that the overlap (0.1 m wide) and the sliver are beyond what diff lets pass
FIVE = [box(0, 0, 5.1, 5), box(5, 0, 10, 5), box(0, 5, 5, 10), box(5.3, 5, 10, 10), box(5, 5, 5.3, 10)]


def five(tmp_path: Path, name: str = "five") -> Path:
    return square(tmp_path, FIVE, ["A", "B", "C", "D", "E"], checks={"tolerance": 0.05}, name=name)


def test_diff_lists_exactly_the_changes_of_the_log(tmp_path):
    # every repair on: the contacts draw-missing-lines adds along reshaped boundaries are their own entries in
    # diff (lines marked generated explain no polygon change), as they are in the log
    project = five(tmp_path)
    result = repair(project, tmp_path / "out")
    tol = 0.05
    assert {c.repair for c in result.changes} >= {"resolve-overlaps", "merge-slivers", "draw-missing-lines"}
    # what diff can see: changes that remove a feature, or move a boundary further than the tolerance
    removed = {f: c for c in result.changes if c.layer == "units" for f in c.features_before if f not in c.features_after}
    reshaped = {c.features_before[-1] if c.repair == "resolve-overlaps" else c.features_after[0]: c
                for c in result.changes if c.repair in ("resolve-overlaps", "fill-gaps") and c.max_shift > tol}
    added = {c.features_after[0]: c for c in result.changes if c.repair == "draw-missing-lines"}
    # the overlap of A and B (0.1 m wide, wider than the tolerance) lies between A's edge x = 5.1 and B's edge x = 5,
    # which the contact draws: B keeps it and A is cut back to the contact ([repair] overlap_by_lines)
    assert set(removed) == {"5"} and set(reshaped) == {"1"} and added
    report = diff(project, tmp_path / "out")
    polygons = [c for c in report.changes if c.layer == "units" and c.change.startswith("polygon-")]
    assert sorted(c.old_features[0] for c in polygons) == sorted(set(removed) | set(reshaped))
    for c in polygons:
        fid = c.old_features[0]
        if fid in removed:
            assert c.change in ("polygon-removed", "polygon-merged")
            assert sum(c.area_lost.values()) == pytest.approx(removed[fid].area_moved)  # 0.3 m x 5 m = 1.5 m²
            assert sum(c.area_gained.values()) == pytest.approx(removed[fid].area_moved)
        else:
            assert c.change == "polygon-reshaped"
            assert sum(c.area_lost.values()) == pytest.approx(reshaped[fid].area_moved)  # 0.1 m x 5 m = 0.5 m²
    # each line the log adds is one line-added of diff, the same line, with no polygon area folded into it
    lines = [c for c in report.changes if c.layer == "lines" and c.change.startswith("line-")]
    assert sorted(c.new_features[0] for c in lines if c.change == "line-added") == sorted(added)
    for c in lines:
        assert c.change == "line-added" and not c.area_gained and not c.area_lost
        assert shapely.equals(c.new_geometry, shapely.get_parts(added[c.new_features[0]].after)[0]) or shapely.equals(
            c.new_geometry, added[c.new_features[0]].after)
    # the only other changes diff names: the field that marks the generated lines, new with them, and the unit no
    # longer mapped, E, merged away by a logged merge
    others = [c for c in report.changes if c not in polygons and c not in lines]
    assert sorted((c.layer, c.change, c.features, c.message) for c in others) == [
        ("legend", "unit-removed", ("E",), "Unit E removed (no legend entry; was mapped in 1 polygon(s), 1.5 m²)."),
        ("lines", "column-added", (), "lines: column 'generated' added.")]
    # every change diff does not see moved no vertex further than the tolerance
    seen = set(removed) | set(reshaped) | set(added)
    assert all(c.max_shift <= tol for c in result.changes if not (set(c.features_before) | set(c.features_after)) & seen)


def test_the_log_follows_its_schema_and_the_gpkg_holds_every_change(tmp_path):
    project = five(tmp_path)
    repair(project, tmp_path / "out")
    log = json.loads((tmp_path / "out" / "repair-log.json").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(load_schema("repair-log.schema.json")).validate(log)
    assert "do not judge the geological interpretation" in log["caution"]
    before = pyogrio.read_dataframe(tmp_path / "out" / "repair-changes.gpkg", layer="before")
    after = pyogrio.read_dataframe(tmp_path / "out" / "repair-changes.gpkg", layer="after")
    numbers = [c["change"] for c in log["changes"]]
    assert sorted(set(before.change) | set(after.change)) == numbers
    manifest = (tmp_path / "out" / "archivist.toml").read_text(encoding="utf-8")
    assert 'record = "repair-log.json"' in manifest
    # one line per change and per defect left, and the text is the JSON of the document (Python's json reads it back)
    from archivist.repair.log import dump_log

    text = (tmp_path / "out" / "repair-log.json").read_text(encoding="utf-8")
    assert text == dump_log(log)
    lines = text.splitlines()
    assert log["changes"]
    for entry in log["changes"] + log["left"]:
        assert "    " + json.dumps(entry, ensure_ascii=False) in {line.rstrip(",") for line in lines}


@pytest.mark.parametrize("aside", [False, True], ids=["here", "forked"])
def test_the_log_written_by_a_forked_process_is_the_log_written_here(tmp_path, monkeypatch, recwarn, aside):
    # a large log's GeoPackage and entries are written by a forked process while the copy is checked
    # (archivist.parallel.Aside); the threshold lowered here so that the small map takes that road too
    import multiprocessing

    import archivist.repair.api as api

    if aside and "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("this system cannot fork")
    import archivist.engine as engine

    project = five(tmp_path)
    repair(project, tmp_path / "ref")
    monkeypatch.setattr(api, "ASIDE_ENTRIES", 0 if aside else 10**9)
    seen: list[set[str]] = []
    check_ = engine.check

    def check(proj, **kw):  # what the copy's folder holds while the copy is checked
        seen.append({f.name for f in Path(proj.root).iterdir()})
        return check_(proj, **kw)

    monkeypatch.setattr(engine, "check", check)
    result = repair(project, tmp_path / "out", jobs=2)
    assert seen[1] == {"archivist.toml", "map.gpkg", "legend.csv"}  # no log yet, not even half-written
    assert {f.name for f in tmp_path.iterdir()} == {"five", "ref", "out"}  # nothing left beside it
    # GDAL warns of a GeoPackage whose name does not end in .gpkg (a staging name): none here
    assert not [str(w.message) for w in recwarn if "gpkg" in str(w.message).lower()]
    ref, out = (json.loads((tmp_path / d / "repair-log.json").read_text(encoding="utf-8")) for d in ("ref", "out"))
    ref.pop("project"), out.pop("project")
    assert out == ref and out["changes"] and out["findings_after"] == dict(sorted(result.after.items()))
    for layer in ("before", "after", "left"):
        a = pyogrio.read_dataframe(tmp_path / "ref" / "repair-changes.gpkg", layer=layer)
        b = pyogrio.read_dataframe(tmp_path / "out" / "repair-changes.gpkg", layer=layer)
        assert a.drop(columns="geometry").equals(b.drop(columns="geometry"))
        assert list(shapely.to_wkb(a.geometry.values)) == list(shapely.to_wkb(b.geometry.values))


def test_repair_on_threads_writes_the_copy_and_log_of_one_thread(tmp_path, monkeypatch):
    # jobs > 1: the checks before and after run their families side by side on threads sharing the context the
    # repairs read, and the log is written by a forked process (the threshold lowered for this small map)
    import archivist.repair.api as api

    project = five(tmp_path)
    one = repair(project, tmp_path / "one", jobs=1)
    monkeypatch.setattr(api, "ASIDE_ENTRIES", 0)
    many = repair(project, tmp_path / "many", jobs=4)
    assert many.changes == one.changes and many.left == one.left
    assert many.before == one.before and many.after == one.after
    a, b = (json.loads((tmp_path / d / "repair-log.json").read_text(encoding="utf-8")) for d in ("one", "many"))
    assert a == b
    assert pyogrio.read_dataframe(tmp_path / "one" / "map.gpkg", layer="units").equals(
        pyogrio.read_dataframe(tmp_path / "many" / "map.gpkg", layer="units"))


def test_repair_refuses_a_negative_number_of_jobs(tmp_path):
    from archivist.errors import ArchivistError

    with pytest.raises(ArchivistError, match="jobs must be 0"):
        repair(five(tmp_path), tmp_path / "out", jobs=-1)
    result = CliRunner().invoke(cli, ["repair", str(tmp_path / "five"), "--out", str(tmp_path / "out"), "--jobs", "-1"])
    assert result.exit_code == 2 and "-1" in result.output


def test_a_repair_interrupted_while_the_copy_is_checked_leaves_nothing(tmp_path, monkeypatch):
    import archivist.engine as engine
    import archivist.repair.api as api

    project = five(tmp_path)
    monkeypatch.setattr(api, "ASIDE_ENTRIES", 0)  # the log written by a forked process, where the system forks
    calls = []
    check_ = engine.check

    def check(proj, **kw):
        calls.append(proj)
        if len(calls) == 2:  # the copy's check: Ctrl-C
            raise KeyboardInterrupt
        return check_(proj, **kw)

    monkeypatch.setattr(engine, "check", check)
    with pytest.raises(KeyboardInterrupt):
        repair(project, tmp_path / "out", jobs=2)
    assert {f.name for f in tmp_path.iterdir()} == {"five"}


def test_example_bundle_is_unchanged_by_repair(tmp_path):
    bundle = copy_bundle(tmp_path)
    digest = tree_digest(bundle)
    result = repair(bundle, tmp_path / "out")
    assert result.changes == () and result.left == ()
    assert tree_digest(bundle) == digest
    assert result.after == result.before == {}


def test_broken_bundle_is_repaired_back_to_a_clean_check(tmp_path):
    bundle = copy_bundle(tmp_path)

    def nudge(frame):
        # three defects of the repairable kinds, each below the tolerance (0.5 m at 1:25 000):
        # a polygon grown 0.3 m over its neighbours, one shrunk 0.2 m away from them (round joins: no corner moves
        # further), a vertex moved 0.3 m
        g = frame.geometry.values.copy()
        g[2] = shapely.intersection(shapely.buffer(g[2], 0.3, quad_segs=2), shapely.union_all(frame.geometry.values))
        g[5] = shapely.buffer(g[5], -0.2, quad_segs=2)
        xy = shapely.get_coordinates(g[8])
        xy[3] += 0.3
        g[8] = shapely.set_coordinates(g[8], xy)
        frame = frame.copy()
        frame["geometry"] = g
        return frame

    edit_layer(bundle, "map.gpkg", "units", nudge)
    edit_manifest(bundle, lambda d: d.setdefault("repair", {}).update({"overlap_max_area_mm2": 10}))
    found = {f.rule for f in check(bundle).findings}
    assert found & TOPOLOGY
    result = repair(bundle, tmp_path / "out")
    assert result.changes
    assert {f.rule for f in check(tmp_path / "out").findings} == set()
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units")
    assert shapely.coverage_is_valid(units.geometry.values)  # GEOS


def test_the_copy_keeps_the_geometry_type_of_each_layer_it_rewrites(tmp_path):
    # a layer of Polygons or LineStrings rewritten stays one, as GDAL reads the GeoPackage's geometry type: the copy
    # is the mapper's map with the changes of the log, not one a style or script made for it no longer reads
    project = five(tmp_path)
    result = repair(project, tmp_path / "out")
    assert {c.layer for c in result.changes} == {"units", "lines"}  # both layers rewritten
    kinds = dict(pyogrio.list_layers(project / "map.gpkg"))
    assert (kinds["units"], kinds["lines"]) == ("Polygon", "LineString")
    assert {str(n): str(t) for n, t in pyogrio.list_layers(tmp_path / "out" / "map.gpkg")} == kinds


def test_a_layer_given_a_multipart_geometry_is_written_multipart(tmp_path):
    # a GeoPackage layer holds one geometry type (GDAL): where a repaired polygon has two parts, the layer of
    # Polygons becomes MultiPolygon rather than lose a part, and a MultiPolygon layer stays one
    import geopandas as gpd
    from shapely.geometry import MultiPolygon

    from archivist.repair.api import _write_layer

    for first in ("Polygon", "MultiPolygon"):
        dest = tmp_path / f"{first}.gpkg"
        start = box(0, 0, 1, 1) if first == "Polygon" else MultiPolygon([box(0, 0, 1, 1)])
        gpd.GeoDataFrame({"unit": ["A"]}, geometry=[start], crs="EPSG:32633").to_file(dest, layer="units", engine="pyogrio")
        assert dict(pyogrio.list_layers(dest))["units"] == first
        two = MultiPolygon([box(0, 0, 1, 1), box(2, 0, 3, 1)])
        frame = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 1, 1), two], crs="EPSG:32633")
        _write_layer(frame, dest, {"layer": "units"}, "units", {"path": dest.name, "layer": "units"}, None)
        assert dict(pyogrio.list_layers(dest))["units"] == "MultiPolygon"
        back = pyogrio.read_dataframe(dest, layer="units")
        assert shapely.equals(back.geometry.values[1], two) and shapely.area(back.geometry.values).sum() == 3.0


def test_the_check_of_the_copy_reuses_the_repairs_analyses_and_finds_what_a_fresh_check_finds(tmp_path, monkeypatch):
    # the copy's check is handed the half-edges and coverage analysis of the working units (the same polygons,
    # read back from the file): its findings per rule are those of a check of the copy from scratch
    from collections import Counter

    import archivist.repair.api as api

    handed: list[set[str]] = []
    made = api._copy_context

    def spy(copy, state, settings):
        ctx = made(copy, state, settings)
        handed.append(set(ctx._cache))
        return ctx

    monkeypatch.setattr(api, "_copy_context", spy)
    project = five(tmp_path)
    result = repair(project, tmp_path / "out")
    assert handed and {"analysis.edges", "analysis.coverage"} <= handed[0]
    fresh = check(tmp_path / "out")
    assert result.after == dict(Counter(f.rule for f in fresh.findings))


def test_cli_dry_run_prints_the_log_and_writes_nothing(tmp_path):
    project = five(tmp_path)
    digest = tree_digest(tmp_path)
    res = CliRunner().invoke(cli, ["repair", str(project), "--dry-run"])
    assert res.exit_code == 0, res.output
    assert "resolve-overlaps" in res.output and "merge-slivers" in res.output and "Dry run" in res.output
    assert "unit-sliver" in res.output  # the counts before -> after
    assert tree_digest(tmp_path) == digest
    from archivist.repair.log import CAUTION

    assert res.output.rstrip().endswith(CAUTION)  # what the repairs do not cover, last (and in the log: "caution")


def test_cli_refuses_an_output_inside_the_project_or_existing(tmp_path):
    project = five(tmp_path)
    res = CliRunner().invoke(cli, ["repair", str(project), "--out", str(project / "fixed")])
    assert res.exit_code == 2 and "inside the project" in res.output
    (tmp_path / "taken").mkdir()
    res = CliRunner().invoke(cli, ["repair", str(project), "--out", str(tmp_path / "taken")])
    assert res.exit_code == 2 and "--force" in res.output
    res = CliRunner().invoke(cli, ["repair", str(project), "--out", str(tmp_path / "taken"), "--force", "--only", "merge-slivers"])
    assert res.exit_code == 0, res.output
    assert "merge-slivers" in res.output and "resolve-overlaps" not in res.output.split("Changes by repair:")[1]
    res = CliRunner().invoke(cli, ["repair", str(project), "--dry-run", "--skip", "no-such-repair"])
    assert res.exit_code == 2 and "unknown repair 'no-such-repair'" in res.output


def test_force_replaces_only_a_copy_repair_wrote_and_nothing_changed_since(tmp_path):
    # --force replaced any folder: a folder of the mapper's own named by mistake, or a repaired copy edited since,
    # was deleted whole. Now only an empty folder or a copy repair wrote (its mark), untouched, is replaced
    project = five(tmp_path)

    def run(out, *extra):
        return CliRunner().invoke(cli, ["repair", str(project), "--out", str(out), "-q", *extra])

    mine = tmp_path / "thesis"
    mine.mkdir()
    (mine / "chapter1.txt").write_text("keep me")
    for extra in ((), ("--force",)):
        res = run(mine, *extra)
        assert res.exit_code == 2 and "not made by 'archivist repair'" in res.output, res.output
        assert [p.name for p in mine.iterdir()] == ["chapter1.txt"] and (mine / "chapter1.txt").read_text() == "keep me"
    out = tmp_path / "fixed"
    assert run(out).exit_code == 0
    mark = json.loads((out / ".archivist-repair.json").read_text())
    assert set(mark["files"]) == {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()} - {".archivist-repair.json"}
    res = run(out)
    assert res.exit_code == 2 and "made by an earlier 'archivist repair', unchanged" in res.output and "--force" in res.output
    assert run(out, "--force").exit_code == 0  # unchanged: replaced
    edit_layer(out, "map.gpkg", "units", lambda f: f.assign(unit=["A"] * len(f)))  # the mapper works on the copy
    res = run(out, "--force")
    assert res.exit_code == 2 and "'map.gpkg' was changed after 'archivist repair' wrote it" in res.output
    assert set(pyogrio.read_dataframe(out / "map.gpkg", layer="units").unit) == {"A"}  # the edit is still there
    (tmp_path / "empty").mkdir()
    assert run(tmp_path / "empty", "--force").exit_code == 0


def test_the_copy_holds_the_edits_a_gis_left_in_the_write_ahead_log(tmp_path):
    # a GIS still has map.gpkg open: polygon 4 recoded to Q sits in the -wal, not yet in the database file. The check
    # reads it (vectorio's private copy); the repaired copy holds it too, in one file, and the project is only read
    # (the copy took the database file alone, without the edit, where no repair touched the row)
    from builders import folder_state, leave_in_wal

    project = five(tmp_path)
    leave_in_wal(project / "map.gpkg", "UPDATE units SET unit = 'Q' WHERE fid = 4")
    before = folder_state(project)
    result = repair(project, tmp_path / "out")
    assert "4" not in {f for c in result.changes for f in c.features_before}  # a row no repair touched
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units", fid_as_index=True)
    assert units.loc[4, "unit"] == "Q"
    assert not [p.name for p in (tmp_path / "out").iterdir() if p.name.endswith(("-wal", "-shm", "-journal"))]
    assert folder_state(project) == before


def test_cli_refuses_units_handed_in_as_several_files(tmp_path):
    # units read from a list of files (a season's hand-in, which the manifest allows) would have each row go back
    # to its own file: refused with one line naming the layer and its files, exit 2, nothing written (it stopped as
    # an internal error, a TypeError, asking to be reported)
    role = "units"
    project = five(tmp_path)
    frame = pyogrio.read_dataframe(project / "map.gpkg", layer=role, fid_as_index=True)
    half = len(frame) // 2
    pyogrio.write_dataframe(frame.iloc[:half].reset_index(), project / "west.gpkg", layer=role)
    pyogrio.write_dataframe(frame.iloc[half:].reset_index(), project / "east.gpkg", layer=role)
    edit_manifest(project, lambda d: d["layers"][role].update({"path": ["west.gpkg", "east.gpkg"]}))
    digest = tree_digest(project)
    for extra in (["--out", str(tmp_path / "out")], ["--dry-run"]):
        res = CliRunner().invoke(cli, ["repair", str(project), *extra])
        assert res.exit_code == 2, res.output
        assert f"layers.{role} is read from 2 files (west.gpkg, east.gpkg)" in res.output
        assert "Traceback" not in res.output and len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists() and tree_digest(project) == digest


@pytest.mark.parametrize("ids, said", [
    # the centres of [5, 10] x [0, 5] and [0, 5] x [5, 10], by hand: sqrt(50) = 7.07 m apart
    (["P-1", "P-2", "P-2", "P-4", "P-5"], "id 'P-2' in poly_id is given to 2 features (feature 2, feature 3), 7.1 m apart"),
    (["P-1", None, "P-3", "P-4", "P-5"], "1 feature has no id in poly_id: feature 2"),
])
def test_repair_refuses_units_whose_id_field_does_not_name_each_feature_once(tmp_path, ids, said):
    # the change log and diff name features by the id_field: two polygons named P-2 stopped the run with an internal
    # error (pandas: "Reindexing only valid with uniquely valued Index objects"), and an empty id was logged as ''
    project = five(tmp_path)
    edit_layer(project, "map.gpkg", "units", lambda f: f.assign(poly_id=ids))
    edit_manifest(project, lambda d: d["layers"]["units"].update({"id_field": "poly_id"}))
    digest = tree_digest(project)
    res = CliRunner().invoke(cli, ["repair", str(project), "--out", str(tmp_path / "out")])
    assert res.exit_code == 2, res.output
    assert f"units (map.gpkg:units): {said} (see feature-id-duplicate)" in res.output and "leave id_field out" in res.output
    assert "Traceback" not in res.output and len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists() and tree_digest(project) == digest
    edit_layer(project, "map.gpkg", "units", lambda f: f.assign(poly_id=[f"P-{k}" for k in range(1, 6)]))
    assert repair(project, tmp_path / "out").changes  # unique ids: repaired, the log naming them
    assert {f for c in json.loads((tmp_path / "out" / "repair-log.json").read_text())["changes"]
            for f in c["features_before"] if c["layer"] == "units"} <= {f"P-{k}" for k in range(1, 6)}


def test_repair_runs_on_a_generated_map_with_defects_beyond_its_bounds(tmp_path):
    # tests/benchmarks/topology_maps.py's map of 3 000 polygons at 2 % defects (contacts 1 m off, lines and polygons
    # deleted, polygons grown 2 m into their neighbours, vertices moved 1 cm) at 1:5 000 (tolerance 0.5 m): most
    # overlaps are left for the geologist. Cutting two of them out of a polygon for snap-edges left a line beside
    # its area (GEOS's difference gave a collection), and GEOS's cleaning stopped the run ("One of the Geometry
    # inputs is of incorrect geometry type")
    sys.path.insert(0, str(Path(__file__).resolve().parent / "benchmarks"))
    from topology_maps import make

    project = tmp_path / "map"
    make(project, 3000, seed=0, density=0.02, scale=5000)
    result = repair(project, tmp_path / "out")
    assert {x.repair for x in result.left} >= {"resolve-overlaps", "fill-gaps"}
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units", fid_as_index=True)
    assert set(units.geometry.geom_type.dropna()) <= {"Polygon", "MultiPolygon"}
    gone = {str(f) for f in pyogrio.read_dataframe(project / "map.gpkg", layer="units", fid_as_index=True).index} - \
        {str(f) for f in units.index}
    assert gone == {f for c in result.changes if c.layer == "units" for f in c.features_before if f not in c.features_after}


def _to_zone_32(frame):
    return frame.to_crs("EPSG:32632")  # the neighbouring UTM zone: a real transformation, the layer still on the map


def _xy_exchanged(frame):
    frame = frame.copy()
    frame["geometry"] = shapely.transform(frame.geometry.values, lambda xy: xy[:, ::-1])
    return frame


@pytest.mark.parametrize("role, edit, said", [
    ("units", _to_zone_32, "is in EPSG:32632 (WGS 84 / UTM zone 32N), not in the map's EPSG:32633 (WGS 84 / UTM zone 33N)"),
    ("lines", _to_zone_32, "is in EPSG:32632 (WGS 84 / UTM zone 32N), not in the map's EPSG:32633 (WGS 84 / UTM zone 33N)"),
    ("units", _xy_exchanged, "has x and y exchanged in"),
])
def test_repair_refuses_a_layer_the_check_reads_moved_into_place(tmp_path, role, edit, said):
    # the check reads such a layer transformed to the map CRS, or its axes exchanged back (crs-mismatch,
    # crs-axis-swap-suspected); the repairs measured that layer and edited the one in the file, in another frame. Here
    # the clean bundle's copy got 82 contacts drawn beside the units as filed (116 with the lines in zone 32), and its
    # check 33 dangles and 82 lines off their boundary; an overlap of units filed in WGS 84 was logged as moved, its
    # area in metres, and kept in the copy. The CRS names are pyproj's, from the EPSG data
    bundle = copy_bundle(tmp_path)
    edit_layer(bundle, "map.gpkg", role, edit)
    digest = tree_digest(bundle)
    for extra in (["--out", str(tmp_path / "out")], ["--dry-run"]):
        res = CliRunner().invoke(cli, ["repair", str(bundle), *extra])
        assert res.exit_code == 2, res.output
        assert f"layers.{role} (map.gpkg:{role}) {said}" in res.output
        assert "Traceback" not in res.output and len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists() and tree_digest(bundle) == digest


def test_repair_runs_where_only_a_layer_it_does_not_edit_is_in_another_crs(tmp_path):
    bundle = copy_bundle(tmp_path)
    edit_layer(bundle, "map.gpkg", "samples", _to_zone_32)
    assert "crs-mismatch" in {f.rule for f in check(bundle).findings}
    result = repair(bundle, tmp_path / "out")
    assert result.changes == () and result.after == result.before


def test_units_only_labelled_with_another_crs_are_repaired_as_filed(tmp_path):
    # coordinates in the map's zone 33, the label zone 32: the check reads them as they are (crs-mismatch says so),
    # and so do the repairs; the copy keeps the file's label
    bundle = copy_bundle(tmp_path)

    def moved_vertex_mislabelled(frame):
        g = frame.geometry.values.copy()
        xy = shapely.get_coordinates(g[8])
        xy[3] += 0.3  # within the bundle's tolerance (0.5 m at 1:25 000)
        g[8] = shapely.set_coordinates(g[8], xy)
        frame = frame.copy()
        frame["geometry"] = g
        return frame.set_crs("EPSG:32632", allow_override=True)

    edit_layer(bundle, "map.gpkg", "units", moved_vertex_mislabelled)
    assert {"crs-mismatch", "unit-edge-mismatch"} <= {f.rule for f in check(bundle).findings}
    result = repair(bundle, tmp_path / "out")
    assert result.changes
    assert not {f.rule for f in check(tmp_path / "out").findings} & TOPOLOGY
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units")
    assert units.crs.to_epsg() == 32632 and shapely.coverage_is_valid(units.geometry.values)  # GEOS


def test_package_of_a_repaired_copy_records_the_run(tmp_path):
    from archivist.package import pack

    project = five(tmp_path)
    repair(project, tmp_path / "out")
    result = pack(tmp_path / "out", tmp_path / "pkg", allow_errors=True)
    prov = json.loads((result.path / "data" / "metadata" / "provenance.json").read_text(encoding="utf-8"))
    run = prov["activity"]["pkg:run/repair"]
    assert run["prov:label"] == "archivist repair"
    assert run["archivist:repairs"].startswith("resolve-overlaps")
    assert json.loads(run["archivist:settings"])["tolerance"] == 0.05
    assert any(r.get("prov:activity") == "pkg:run/repair" for r in prov["wasGeneratedBy"].values())
    # a package of the project itself records no repair
    plain = pack(project, tmp_path / "pkg2", allow_errors=True)
    assert "pkg:run/repair" not in json.loads((plain.path / "data" / "metadata" / "provenance.json").read_text(encoding="utf-8"))["activity"]


def test_contexts_over_the_same_lines_share_the_line_network_of_the_check_before(tmp_path, monkeypatch):
    # the line network depends on the lines alone: the check contexts the polygon repairs make for new units over
    # the lines as read take over the network the check before the repairs built (a context over other lines builds
    # its own), and the run's changes and counts are those of a run where every context builds its own
    import archivist.repair.polygons as polygons

    real = polygons._new_context
    made: list[tuple[object, object]] = []

    def spy(state):
        ctx = real(state)
        made.append((state.lines, ctx))
        return ctx

    def entries(result):
        return [(c.repair, c.layer, c.features_before, c.features_after, c.area_moved, c.max_shift,
                 None if c.after is None else shapely.to_wkb(c.after)) for c in result.changes]

    project = five(tmp_path)
    monkeypatch.setattr(polygons, "_new_context", spy)
    shared = repair(project, tmp_path / "out")
    first = made[0][0]
    networks = [ctx.computed(polygons.NETWORK) for lines, ctx in made if lines is first]
    networks = [n[0] for n in networks if n is not None]
    assert len(networks) >= 2 and all(n is networks[0] for n in networks)  # one network, handed from context to context
    made.clear()
    monkeypatch.setattr(polygons, "NETWORK", "analysis.none")  # nothing handed on: each context builds its own
    own = repair(project, tmp_path / "own")
    built = [ctx.computed("analysis.lines") for _, ctx in made]
    built = [n[0] for n in built if n is not None]
    assert len(built) >= 2 and len({id(n) for n in built}) == len(built)
    assert entries(shared) == entries(own)
    assert (shared.before, shared.after) == (own.before, own.after)
