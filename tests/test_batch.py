"""``archivist check FOLDER`` on a folder of map projects: each checked on its own, one summary table."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pyproj
from click.testing import CliRunner
from referencing import Registry, Resource

from archivist.batch import check_folder, project_folders
from archivist.cli import cli
from archivist.manifest import load_schema
from builders import tiny_project, tree_digest, two_units, two_units_lines

SWISS = "EPSG:2056"


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def two_projects(tmp_path: Path) -> Path:
    """maps/north in EPSG:32633 (clean) and maps/south in EPSG:2056 with one error (an unknown licence)."""
    maps = tmp_path / "maps"
    tiny_project(maps, name="north")
    shift = lambda df: df.set_geometry(df.geometry.translate(2_600_000, 1_200_000)).set_crs(SWISS, allow_override=True)  # noqa: E731
    tiny_project(maps / "region", name="south", units=shift(two_units()), lines=shift(two_units_lines()),
                 manifest={"map": {"crs": SWISS, "licence": "CC-BY"}})
    return maps


def validator():
    registry = Registry().with_resources(
        (load_schema(n)["$id"], Resource.from_contents(load_schema(n))) for n in ("report.schema.json", "batch-report.schema.json")
    )
    return jsonschema.Draft202012Validator(load_schema("batch-report.schema.json"), registry=registry)


def test_each_project_is_checked_on_its_own(tmp_path):
    maps = two_projects(tmp_path)
    before = tree_digest(maps)
    assert [p.relative_to(maps).as_posix() for p in project_folders(maps)] == ["north", "region/south"]
    result = check_folder(maps)
    north, south = result.runs
    # each report in its own CRS (names from pyproj's EPSG data), and no layer of one project compared with the other's CRS
    assert north.report.crs == f"EPSG:32633 ({pyproj.CRS('EPSG:32633').name})"
    assert south.report.crs == f"EPSG:2056 ({pyproj.CRS(SWISS).name})" == "EPSG:2056 (CH1903+ / LV95)"
    for r in result.runs:
        assert not [f for f in r.report.findings if f.rule == "crs-mismatch"]
        assert Path(r.report.project).parent == r.path
    assert (north.exit_code, south.exit_code, result.exit_code) == (0, 1, 1)
    assert [f.rule for f in south.report.findings if f.severity.value == "error"] == ["licence-unknown"]
    assert tree_digest(maps) == before


def test_the_command_prints_each_report_and_one_summary_table(tmp_path):
    maps = two_projects(tmp_path)
    result = run("check", maps)
    assert result.exit_code == 1  # the worst of 0 and 1
    out = result.output
    assert "=== north ===" in out and "=== region/south ===" in out
    table = out[out.index("2 projects in"):].splitlines()
    assert table[1].split() == ["project", "errors", "warnings", "notices", "exit"]
    assert table[2].split()[0] == "north" and table[2].split()[-1] == "0"
    assert table[3].split() == ["region/south", "1", "0", "0", "1"]


def test_json_holds_one_report_per_project(tmp_path):
    maps = two_projects(tmp_path)
    result = run("check", maps, "--format", "json")
    data = json.loads(result.output)
    validator().validate(data)
    assert [p["project"] for p in data["projects"]] == ["north", "region/south"]
    assert [p["report"]["crs"].split()[0] for p in data["projects"]] == ["EPSG:32633", "EPSG:2056"]
    assert data["exit_code"] == result.exit_code == 1


def test_a_project_that_cannot_be_read_does_not_stop_the_others(tmp_path):
    maps = two_projects(tmp_path)
    (maps / "north" / "archivist.toml").write_text("[map\n", encoding="utf-8")
    result = run("check", maps, "--format", "json")
    data = json.loads(result.output)
    validator().validate(data)
    north, south = data["projects"]
    assert north["exit_code"] == 2 and north["report"] is None and "not valid TOML" in north["error"]
    assert south["exit_code"] == 1 and south["report"]["summary"]["errors"] == 1
    assert result.exit_code == 2


def test_outputs_follow_the_usual_rules(tmp_path):
    maps = two_projects(tmp_path)
    inside = run("check", maps, "--output", maps / "north" / "report.txt")
    assert inside.exit_code == 2 and "inside the project folder" in inside.output
    assert not (maps / "north" / "report.txt").exists()
    out = tmp_path / "report.json"
    assert run("check", maps, "--format", "json", "--output", out).exit_code == 1
    validator().validate(json.loads(out.read_text()))
    again = run("check", maps, "--output", out)
    assert again.exit_code == 2 and "already exists; use --force" in again.output
    assert run("check", maps, "--output", out, "--force").exit_code == 1 and "2 projects in" in out.read_text()
    html = run("check", maps, "--html", tmp_path / "r.html")
    assert html.exit_code == 2 and len(html.output.strip().splitlines()) == 1


def test_one_project_folder_is_not_a_folder_of_projects(tmp_path):
    maps = two_projects(tmp_path)
    assert project_folders(maps / "north") == []
    assert project_folders(maps / "north" / "archivist.toml") == []


def test_jobs_reach_each_project_of_a_folder(tmp_path, monkeypatch):
    # --jobs is passed to each project's check in turn (it was dropped for a folder of projects)
    import archivist.engine as engine

    maps = two_projects(tmp_path)
    seen: list[int] = []
    real = engine.check

    def check(project, **kwargs):
        seen.append(kwargs.get("jobs", 1))
        return real(project, **kwargs)

    monkeypatch.setattr(engine, "check", check)
    one = run("check", maps, "--jobs", "1")
    two = run("check", maps, "--jobs", "2")
    assert seen == [1, 1, 2, 2]
    assert one.exit_code == two.exit_code == 1 and one.output == two.output  # the same reports whatever the threads
