"""The findings GeoPackage: one layer per geometry type, one feature per finding at its place.

Read back with pyogrio (GDAL's GeoPackage driver) as the outside reference.
"""

from __future__ import annotations

import json
from pathlib import Path

import pyogrio
import pytest
import shapely
from click.testing import CliRunner
from shapely.geometry import LineString, box

import archivist
from archivist.cli import cli
from archivist.project import load_project
from archivist.report.gpkg import LAYERS, TABLE, write_findings_gpkg
from builders import tree_digest
from coverage_builders import FRAME, square_map


def broken_map(tmp_path):
    """Findings of every kind of place: an overlap (area), a dangle (line + end point),
    a self-intersection (point) and a bad licence (no place)."""
    rows = [
        ("contact", LineString([(5, 0), (5, 10.5)])),  # overshoots the frame by 0.5 m
        ("map-boundary", FRAME),
        ("fault", LineString([(1, 1), (3, 3), (3, 1), (1, 3)])),  # crosses itself at (2, 2)
    ]
    root = square_map(tmp_path, "broken", a=box(0, 0, 5.2, 10), line_rows=rows, tolerance=0.01)
    text = (root / "archivist.toml").read_text(encoding="utf-8").replace('licence = "CC-BY-4.0"', 'licence = "CC-BY"')
    (root / "archivist.toml").write_text(text, encoding="utf-8")
    return root


def read_all(path: Path) -> dict:
    return {str(name): pyogrio.read_dataframe(path, layer=str(name)) for name, _ in pyogrio.list_layers(path)}


def test_one_feature_per_finding_at_its_place(tmp_path):
    root = broken_map(tmp_path)
    project = load_project(root)
    report = archivist.check(project, only=["topology", "linework", "metadata"])
    kinds = {f.rule for f in report.findings}
    assert {"unit-overlap", "line-dangle", "line-self-intersection", "licence-unknown"} <= kinds
    out = tmp_path / "findings.gpkg"
    counts = write_findings_gpkg(report, out, crs=project.crs)
    layers = read_all(out)
    types = {str(n): t for n, t in pyogrio.list_layers(out)}
    assert types == {"findings_points": "MultiPoint", "findings_lines": "MultiLineString",
                     "findings_polygons": "MultiPolygon", "findings_unlocated": None}
    assert sum(len(df) for df in layers.values()) == len(report.findings)
    assert counts == {name: len(df) for name, df in layers.items()}
    assert pyogrio.read_info(out, layer="findings_polygons")["crs"] == "EPSG:32633"
    rows = [(name, row) for name, df in layers.items() for _, row in df.iterrows()]
    for f in report.findings:
        match = [(name, row) for name, row in rows if row["rule"] == f.rule and row["message"] == f.message]
        assert len(match) == 1, f.message
        name, row = match[0]
        assert row["severity"] == f.severity.value and row["family"] == f.family
        assert row["features"] == ",".join(f.features)
        assert (row["measure"] == f.measure) or (f.measure is None and row["measure"] != row["measure"])  # NaN for none
        if f.wkt is None and f.x is None:
            assert name == TABLE
            continue
        geom = row["geometry"]
        if f.wkt is not None:
            assert shapely.equals(geom, shapely.from_wkt(f.wkt)), f.rule
        else:
            assert shapely.equals(geom, shapely.MultiPoint([(f.x, f.y)]))
        if f.x is not None:
            assert row["x"] == f.x and row["y"] == f.y
    overlap = next(row for name, row in rows if row["rule"] == "unit-overlap")
    assert shapely.equals(overlap["geometry"], shapely.MultiPolygon([box(5, 0, 5.2, 10)]))  # 0.2 m x 10 m
    assert overlap["measure"] == 2.0
    dangle = next((name, row) for name, row in rows if row["rule"] == "line-dangle")
    assert dangle[0] == LAYERS["lines"] and (dangle[1]["x"], dangle[1]["y"]) == (5.0, 10.5)
    cross = next((name, row) for name, row in rows if row["rule"] == "line-self-intersection")
    assert cross[0] == LAYERS["points"] and shapely.equals(cross[1]["geometry"], shapely.MultiPoint([(2, 2)]))
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".findings")] == []  # no temporary left


def test_clean_report_gives_three_empty_layers(tmp_path):
    root = square_map(tmp_path)
    project = load_project(root)
    report = archivist.check(project, only=["topology", "linework"])
    assert report.findings == ()
    out = tmp_path / "none.gpkg"
    write_findings_gpkg(report, out, crs=project.crs)
    assert {str(n): t for n, t in pyogrio.list_layers(out)} == {
        "findings_points": "MultiPoint", "findings_lines": "MultiLineString", "findings_polygons": "MultiPolygon"}
    assert all(len(df) == 0 for df in read_all(out).values())


def test_cli_writes_beside_never_inside(tmp_path):
    root = broken_map(tmp_path)
    before = tree_digest(root)
    runner = CliRunner()
    out = tmp_path / "out.gpkg"
    rep = tmp_path / "report.json"
    result = runner.invoke(cli, ["check", str(root), "--only", "topology", "--format", "json", "-o", str(rep), "--findings-gpkg", str(out), "-q"])
    assert result.exit_code == 1, result.output  # the map has errors
    findings = json.loads(rep.read_text(encoding="utf-8"))["findings"]
    assert findings and sum(len(df) for df in read_all(out).values()) == len(findings)
    # inside the project: refused, nothing written there
    result = runner.invoke(cli, ["check", str(root), "--findings-gpkg", str(root / "f.gpkg")])
    assert result.exit_code == 2 and "inside the project folder" in result.output
    # over an existing file: refused without --force, replaced with it
    result = runner.invoke(cli, ["check", str(root), "--findings-gpkg", str(out)])
    assert result.exit_code == 2 and "already exists; use --force" in result.output
    result = runner.invoke(cli, ["check", str(root), "--only", "linework", "--findings-gpkg", str(out), "--force", "-q"])
    assert result.exit_code == 1
    assert {r for df in read_all(out).values() for r in df["rule"]} <= {
        "line-dangle", "line-off-boundary", "line-self-intersection", "boundary-without-line", "line-duplicate"}
    # not a GeoPackage name
    result = runner.invoke(cli, ["check", str(root), "--findings-gpkg", str(tmp_path / "f.shp")])
    assert result.exit_code == 2 and "must end in .gpkg" in result.output
    assert tree_digest(root) == before


@pytest.mark.parametrize("fmt", ["text", "json"])
def test_gpkg_and_report_outputs_together(tmp_path, fmt):
    root = broken_map(tmp_path)
    out, rep = tmp_path / "f.gpkg", tmp_path / f"report.{fmt}"
    result = CliRunner().invoke(cli, ["check", str(root), "--format", fmt, "-o", str(rep), "--findings-gpkg", str(out), "-q"])
    assert result.exit_code == 1 and out.exists() and rep.exists()
    result = CliRunner().invoke(cli, ["check", str(root), "-o", str(out), "--findings-gpkg", str(out), "--force"])
    assert result.exit_code == 2 and "same file" in result.output
