"""The repaired copy's GeoPackage layers edited in place: the table's definition and untouched rows kept.

Checked against the GeoPackage encoding standard (OGC 12-128r18): the
spatial index extension (``rtree_<table>_<column>``, one entry per row with
a non-empty geometry, the box of its envelope), ``gpkg_contents`` (the
table's extent) and GDAL's ``gpkg_ogr_contents`` feature count; against
SQLite's own checks (``PRAGMA integrity_check``, ``rtreecheck``); and
against GDAL reading the copy (pyogrio), with a spatial filter that goes
through the index, matched to GEOS's intersects.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from shapely.geometry import MultiPolygon, box

sys.path.insert(0, str(Path(__file__).resolve().parent))

from builders import edit_layer  # noqa: E402
from test_repair_run import five  # noqa: E402

from click.testing import CliRunner  # noqa: E402

from archivist.cli import cli  # noqa: E402
from archivist.engine import check  # noqa: E402
from archivist.repair.api import repair  # noqa: E402
from archivist.repair.inplace import NotInPlace, edit_table  # noqa: E402


def redefine(gpkg: Path, table: str, old: str, new: str) -> None:
    """Change a field's definition in the table's CREATE statement (SQLite's writable_schema: constraints and
    declared types only, the stored rows are as they were), as a GIS that sets a width, NOT NULL or a default
    leaves it."""
    con = sqlite3.connect(gpkg)
    sql = con.execute("SELECT sql FROM sqlite_master WHERE type = 'table' AND name = ?", (table,)).fetchone()[0]
    assert old in sql
    con.execute("PRAGMA writable_schema = ON")
    con.execute("UPDATE sqlite_master SET sql = ? WHERE type = 'table' AND name = ?", (sql.replace(old, new), table))
    con.commit()
    con.close()


def table_sql(gpkg: Path, table: str) -> str:
    with sqlite3.connect(gpkg) as con:
        return con.execute("SELECT sql FROM sqlite_master WHERE type = 'table' AND name = ?", (table,)).fetchone()[0]


def rows(gpkg: Path, table: str) -> dict[int, tuple]:
    with sqlite3.connect(gpkg) as con:
        return {r[0]: r for r in con.execute(f'SELECT * FROM "{table}"')}


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def assert_sound_geopackage(gpkg: Path, table: str) -> None:
    """The spatial index, extent and count of ``table`` agree with its rows (GeoPackage 1.2+ spatial index
    extension, gpkg_contents; SQLite's checks), and GDAL's spatial filter finds what GEOS finds."""
    frame = pyogrio.read_dataframe(gpkg, layer=table, fid_as_index=True)
    geoms = frame.geometry.values
    with sqlite3.connect(gpkg) as con:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert con.execute(f"SELECT rtreecheck('rtree_{table}_geom')").fetchone()[0] == "ok"
        index = {r[0]: r[1:] for r in con.execute(f"SELECT id, minx, maxx, miny, maxy FROM rtree_{table}_geom")}
        count = con.execute("SELECT feature_count FROM gpkg_ogr_contents WHERE table_name = ?", (table,)).fetchone()[0]
        extent = con.execute("SELECT min_x, min_y, max_x, max_y FROM gpkg_contents WHERE table_name = ?", (table,)).fetchone()
    have = ~shapely.is_empty(geoms)
    assert set(index) == set(frame.index[have].tolist())  # one entry per row with a geometry, no other
    for fid, (x0, y0, x1, y1) in zip(frame.index[have], shapely.bounds(geoms[have])):
        lo_x, hi_x, lo_y, hi_y = index[fid]  # 32-bit floats rounded outward (SQLite R*Tree)
        assert lo_x <= x0 and hi_x >= x1 and lo_y <= y0 and hi_y >= y1
        assert hi_x - lo_x <= (x1 - x0) + 1e-5 * max(1.0, abs(x1)) and hi_y - lo_y <= (y1 - y0) + 1e-5 * max(1.0, abs(y1))
    assert count == len(frame)
    assert tuple(extent) == pytest.approx(tuple(shapely.total_bounds(geoms)))
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    cx, cy, dx, dy = (x0 + x1) / 2, (y0 + y1) / 2, (x1 - x0) / 10, (y1 - y0) / 10
    window = (cx - dx, cy - dy, cx + dx, cy + dy)  # a tenth of the layer's width and height about its centre
    found = pyogrio.read_dataframe(gpkg, layer=table, bbox=window, fid_as_index=True)
    expected = set(frame.index[shapely.intersects(geoms, box(*window))])
    assert expected and set(found.index) == expected


def test_a_repaired_table_keeps_its_definition_and_every_row_no_repair_touched(tmp_path):
    # the units' code field set to at most 8 characters, never empty, 'X' by default, and a DATE field; GDAL
    # writing the layer anew would make both plain TEXT. The copy's table has the definition as the mapper's GIS
    # left it, and the rows no change names are the same bytes
    project = five(tmp_path)
    gpkg = project / "map.gpkg"
    edit_layer(project, "map.gpkg", "units", lambda f: f.assign(mapped_on=[f"2026-05-1{d}" for d in range(4, 9)]))
    redefine(gpkg, "units", '"unit" TEXT', '"unit" TEXT(8) NOT NULL DEFAULT \'X\'')
    redefine(gpkg, "units", '"mapped_on" TEXT', '"mapped_on" DATE')
    before_sql, before_rows = table_sql(gpkg, "units"), rows(gpkg, "units")
    lines_sql = table_sql(gpkg, "lines")
    result = repair(project, tmp_path / "out")
    copy = tmp_path / "out" / "map.gpkg"
    assert table_sql(copy, "units") == before_sql
    # the lines gain the field that marks generated lines (GeoPackage BOOLEAN, GDAL's type for it), at the end
    assert table_sql(copy, "lines") == lines_sql[:-1] + ', "generated" BOOLEAN)'
    touched = {int(f) for c in result.changes if c.layer == "units" for f in c.features_before + c.features_after}
    after_rows = rows(copy, "units")
    untouched = set(before_rows) - touched
    assert untouched and all(after_rows[f] == before_rows[f] for f in untouched)
    assert set(after_rows) == set(before_rows) - {f for f in touched if f not in after_rows}
    assert all(r[2:] == before_rows[f][2:] for f, r in after_rows.items())  # codes and dates as they were
    written = {w["layer"]: w for w in result.log["layers_written"]}
    assert written["units"]["how"] == written["lines"]["how"] == "edited"
    assert written["units"]["deleted"] == len(set(before_rows) - set(after_rows)) == 1  # the sliver E merged
    assert written["lines"]["fields_added"] == ["generated"]
    for table in ("units", "lines"):
        assert_sound_geopackage(copy, table)
    # GDAL reads the DATE field as a date, as in the project
    assert pyogrio.read_info(copy, layer="units")["ogr_types"][list(pyogrio.read_info(copy, layer="units")["fields"]).index("mapped_on")] == "OFTDate"
    generated = pyogrio.read_dataframe(copy, layer="lines", fid_as_index=True)["generated"]
    assert generated.astype(bool).sum() == written["lines"]["inserted"] > 0


def test_the_copy_read_back_is_the_map_the_rewrite_gave(tmp_path):
    # the same polygons and lines, feature for feature, as writing the layers anew (the repairs' results)
    project = five(tmp_path)
    result = repair(project, tmp_path / "out")
    dry = repair(project, None, dry_run=True)
    assert [c.after.wkt if c.after is not None else None for c in result.changes] == \
           [c.after.wkt if c.after is not None else None for c in dry.changes]
    units = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="units", fid_as_index=True)
    assert shapely.coverage_is_valid(units.geometry.values)  # GEOS
    assert sorted(units["unit"]) == ["A", "B", "C", "D"]


def test_a_table_that_cannot_take_the_rows_is_left_as_it_was(tmp_path):
    # a table of POLYGONs given a two-part polygon: the GeoPackage's one geometry type per table (GDAL) does not
    # allow it, so nothing is written and the caller writes the layer anew (MultiPolygon)
    gpkg = tmp_path / "map.gpkg"
    frame = gpd.GeoDataFrame({"unit": ["A", "B"]}, geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1)], crs="EPSG:32633")
    frame.index = frame.index + 1
    pyogrio.write_dataframe(frame.rename_axis("fid").reset_index(), gpkg, layer="units")
    original = pyogrio.read_dataframe(gpkg, layer="units", fid_as_index=True)
    before = digest(gpkg)
    work = original.copy()
    work.loc[2, "geometry"] = MultiPolygon([box(1, 0, 2, 1), box(3, 0, 4, 1)])
    with pytest.raises(NotInPlace, match="several parts"):
        edit_table(gpkg, "units", work, np.array([1, 2]), original, tmp_path / "scratch.gpkg")
    assert digest(gpkg) == before and not (tmp_path / "scratch.gpkg").exists()
    # a field named like the column the scratch file carries the feature ids in (GDAL's FID column name)
    with pytest.raises(NotInPlace, match="named fid"):
        edit_table(gpkg, "units", original.assign(FID=[7, 8]), np.array([1, 2]), original, tmp_path / "scratch.gpkg")
    assert digest(gpkg) == before


def test_a_not_null_field_a_new_row_leaves_empty_rolls_the_edit_back(tmp_path):
    # SQLite refuses the generated lines (no value for a NOT NULL field without default): the edit is rolled
    # back whole and the layer written anew, the log saying why
    project = five(tmp_path)
    gpkg = project / "map.gpkg"
    edit_layer(project, "map.gpkg", "lines", lambda f: f.assign(drawn_by="team"))
    redefine(gpkg, "lines", '"drawn_by" TEXT', '"drawn_by" TEXT NOT NULL')
    run = CliRunner().invoke(cli, ["repair", str(project), "--out", str(tmp_path / "out"), "--quiet"])
    assert run.exit_code == 0, run.output
    log = json.loads((tmp_path / "out" / "repair-log.json").read_text(encoding="utf-8"))
    written = {w["layer"]: w for w in log["layers_written"]}
    assert written["lines"]["how"] == "rewritten"
    assert "NOT NULL" in written["lines"]["reason"]
    assert f"Layer lines written anew in map.gpkg (field definitions as GDAL makes them): {written['lines']['reason']}." in run.output
    assert "Layer units" not in run.output
    assert written["units"]["how"] == "edited"
    lines = pyogrio.read_dataframe(tmp_path / "out" / "map.gpkg", layer="lines")
    assert lines["generated"].astype(bool).sum() > 0


def test_values_only_a_repair_changed_are_written_without_the_geometry(tmp_path):
    # a row whose geometry stayed but one value changed: the value is set, the geometry blob kept byte for byte
    gpkg = tmp_path / "map.gpkg"
    frame = gpd.GeoDataFrame({"kind": ["contact", "fault"]}, geometry=[box(0, 0, 1, 1).boundary, box(1, 0, 2, 1).boundary],
                             crs="EPSG:32633")
    frame.index = frame.index + 1
    pyogrio.write_dataframe(frame.rename_axis("fid").reset_index(), gpkg, layer="lines")
    original = pyogrio.read_dataframe(gpkg, layer="lines", fid_as_index=True)
    before = rows(gpkg, "lines")
    work = original.copy()
    work["generated"] = False
    work.loc[2, "kind"] = "contact"
    done = edit_table(gpkg, "lines", work, np.array([1, 2]), original, tmp_path / "scratch.gpkg")
    assert (done.deleted, done.updated, done.inserted, done.added_fields) == (0, 2, 0, ("generated",))
    after = rows(gpkg, "lines")
    assert after[1][:3] == before[1][:3] and after[2][:2] == before[2][:2]  # fid and geometry blob as they were
    assert (after[1][3], after[2][2], after[2][3]) == (0, "contact", 0)
    assert_sound_geopackage(gpkg, "lines")


def test_the_edited_copy_reads_back_as_the_copy_written_anew(tmp_path, monkeypatch):
    # a synthetic map with every kind of defect the check knows at 2 % (contacts 1 m off, lines and polygons
    # deleted, polygons grown into their neighbours, vertices moved): the copy edited in place and the copy
    # written anew (pyogrio, as before) hold the same features, FID for FID: the same geometry, coordinate for
    # coordinate (GEOS equals_identical), and the same values
    import archivist.repair.api as api
    from coverage_builders import synthetic_map, with_defect_density, write_map

    smap, _ = with_defect_density(synthetic_map(300, seed=3), 0.02, seed=3)
    project = write_map(smap, tmp_path / "map")
    edited = repair(project, tmp_path / "edited")
    monkeypatch.setattr(api, "_edit_in_place", lambda *a, **k: "written anew for the comparison")
    anew = repair(project, tmp_path / "anew")
    assert [w["how"] for w in edited.log["layers_written"]] == ["edited", "edited"]
    assert [w["how"] for w in anew.log["layers_written"]] == ["rewritten", "rewritten"]
    assert len(edited.changes) == len(anew.changes) > 0
    for layer in ("units", "lines"):
        a = pyogrio.read_dataframe(tmp_path / "edited" / "map.gpkg", layer=layer, fid_as_index=True)
        b = pyogrio.read_dataframe(tmp_path / "anew" / "map.gpkg", layer=layer, fid_as_index=True)
        assert a.index.tolist() == b.index.tolist()
        assert bool(np.all(shapely.equals_identical(a.geometry.values, b.geometry.values)))
        for c in b.columns.drop(b.geometry.name):
            x, y = a[c].to_numpy(dtype=object), b[c].to_numpy(dtype=object)
            assert all((u == v) or (u != u and v != v) or (u is None and v is None) for u, v in zip(x, y)), c
        assert_sound_geopackage(tmp_path / "edited" / "map.gpkg", layer)


@pytest.mark.parametrize("edited", [True, False])
def test_a_layer_the_manifest_does_not_name_is_written_in_the_files_only_layer(tmp_path, monkeypatch, edited):
    # the units in a GeoPackage of one layer, 'geology_polygons', the manifest giving only the path (as the loader
    # allows): the copy changes that layer, edited in place or written anew, and adds none named after the file
    # (a second layer made the copy's manifest ambiguous: 'layer-missing' on the copy)
    import archivist.repair.api as api
    from builders import edit_manifest

    project = five(tmp_path)
    units = pyogrio.read_dataframe(project / "map.gpkg", layer="units", fid_as_index=True)
    pyogrio.write_dataframe(units.reset_index(), project / "polys.gpkg", layer="geology_polygons")

    def units_alone(d):
        d["layers"]["units"]["path"] = "polys.gpkg"
        del d["layers"]["units"]["layer"]

    edit_manifest(project, units_alone)
    if not edited:
        monkeypatch.setattr(api, "_edit_in_place", lambda *a, **k: "written anew for the test")
    result = repair(project, tmp_path / "out")
    (written,) = [w for w in result.log["layers_written"] if w["layer"] == "units"]
    assert (written["how"], written["table"]) == ("edited" if edited else "rewritten", "geology_polygons")
    assert [(str(n), str(t)) for n, t in pyogrio.list_layers(tmp_path / "out" / "polys.gpkg")] == [("geology_polygons", "Polygon")]
    assert "layer-missing" not in {f.rule for f in check(tmp_path / "out").findings}
