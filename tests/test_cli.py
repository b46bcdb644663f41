"""The command line: exit codes, formats, one-line errors, outputs never in the project."""

import json

import jsonschema
import pytest
from click.testing import CliRunner

from archivist.cli import cli
from archivist.manifest import load_schema
from builders import tiny_project, tree_digest

COMMANDS = sorted(cli.commands)


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


@pytest.mark.parametrize("command", COMMANDS)
def test_help_for_every_command(command):
    result = run(command, "--help")
    assert result.exit_code == 0
    assert "Usage:" in result.output


def test_clean_project_exits_0_and_json_validates(tmp_path):
    root = tiny_project(tmp_path)
    result = run("check", root, "--format", "json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["summary"]["errors"] == 0


def test_errors_exit_1(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}})
    result = run("check", root)
    assert result.exit_code == 1
    assert "licence-unknown" in result.output


def test_strict_makes_warnings_fail(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"abstract": ""}})
    assert run("check", root, "--only", "metadata").exit_code == 0
    assert run("check", root, "--only", "metadata", "--strict").exit_code == 1


@pytest.mark.parametrize(
    "args, words",
    [
        (["check", "no/such/place"], "no/such/place"),
        (["check", "{root}", "--only", "geology"], "family 'geology'"),
        (["check", "{root}", "--rule", "no-such-rule"], "rule 'no-such-rule'"),
        (["rules", "no-such-rule"], "no-such-rule"),
    ],
)
def test_cannot_run_is_one_line_exit_2(args, words, tmp_path):
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, [a.format(root=root) for a in args])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "Traceback" not in result.output


def test_toml_syntax_error_is_one_line_exit_2(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").write_text('[map]\ntitle = "unclosed\n', encoding="utf-8")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root)])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "archivist.toml" in line and "line 2" in line
    assert tree_digest(root) == before


def test_output_file_written_atomically_and_not_overwritten(tmp_path):
    root = tiny_project(tmp_path)
    out = tmp_path / "report.json"
    assert run("check", root, "--format", "json", "--output", out).exit_code == 0
    assert json.loads(out.read_text())["tool"] == "archivist"
    again = CliRunner().invoke(cli, ["check", str(root), "--output", str(out)])
    assert again.exit_code == 2 and "--force" in again.stderr
    assert run("check", root, "--output", out, "--force").exit_code == 0
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".report")] == []


def test_output_inside_project_refused(tmp_path):
    root = tiny_project(tmp_path)
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root), "--output", str(root / "report.txt")])
    assert result.exit_code == 2 and "inside the project" in result.stderr
    assert tree_digest(root) == before


def test_text_report_layout(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY", "abstract": ""}})
    out = run("check", root, "--only", "metadata").output
    assert "\x1b[" not in out
    assert out.index("error") < out.index("warning")
    assert "1 error, 1 warning, 0 notices" in out
    assert out.rstrip().endswith("under local rules.")


def test_no_manifest_says_so_first(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").unlink()
    out = run("check", root).output
    assert out.splitlines()[0].startswith("Note: No archivist.toml")


def test_rules_lists_every_rule_with_doc():
    from archivist.registry import all_rules

    out = run("rules").output
    for info in all_rules():
        assert info.id in out and info.title in out
    one = run("rules", "unit-overlap" if "unit-overlap" in out else "licence-unknown").output
    assert "Why it matters" in one and "Fix" in one


def test_example_bundle_json_is_valid_and_clean():
    from builders import BUNDLE

    before = tree_digest(BUNDLE)
    result = run("check", BUNDLE, "--format", "json")
    data = json.loads(result.output)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["summary"] == {"errors": 0, "warnings": 0, "notices": 0}, [f["message"] for f in data["findings"]]
    assert result.exit_code == 0
    assert tree_digest(BUNDLE) == before


@pytest.mark.parametrize(
    "toml, key",
    [
        ('map = "x"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "'map'"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = "big"\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "map.scale"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n'
         '[checks]\ntolerance = "a"\n', "checks.tolerance"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n'
         '[checks.severity]\nunit-overlap = "loud"\n', "checks.severity.unit-overlap"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[[map.authors]]\naffiliation = "nobody"\n'
         '[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "map.authors[0].name"),
    ],
)
def test_wrongly_typed_manifest_values_are_findings_not_crashes(toml, key, tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").write_text(toml, encoding="utf-8")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root), "--format", "json"])
    assert isinstance(result.exception, SystemExit), result.exception  # an uncaught error would show here
    assert result.exit_code == 1
    found = [f for f in json.loads(result.output)["findings"] if f["rule"] == "manifest-invalid"]
    assert any(key in f["message"] for f in found), [f["message"] for f in found]
    packed = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out")])
    assert isinstance(packed.exception, SystemExit) and packed.exit_code in (1, 2), packed.exception
    assert tree_digest(root) == before
