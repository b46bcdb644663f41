"""Reading the mapper's own ``archivist.toml``: anything unreadable is one line and exit 2, never a traceback."""

from click.testing import CliRunner

from archivist.cli import cli
from builders import tiny_project


def _one_line(result):
    assert result.exit_code == 2, result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    (line,) = result.stderr.strip().splitlines()
    return line


def test_deeply_nested_toml_manifest(tmp_path):
    """tomllib recurses once per nested array (Python's recursion limit is 1000 frames): 100 000 levels."""
    root = tiny_project(tmp_path)
    manifest = root / "archivist.toml"
    manifest.write_text(manifest.read_text() + "\n[checks]\nx = " + "[" * 100_000 + "]" * 100_000 + "\n")
    line = _one_line(CliRunner().invoke(cli, ["check", str(root)]))
    assert str(manifest) in line and "nested more than 128 levels deep" in line


def test_deep_dotted_table_in_manifest(tmp_path):
    """Dotted keys build deep tables without recursion in the parser; the depth is measured after parsing."""
    root = tiny_project(tmp_path)
    manifest = root / "archivist.toml"
    manifest.write_text(manifest.read_text() + "\n[" + ".".join(["k"] * 5_000) + "]\nx = 1\n")
    line = _one_line(CliRunner().invoke(cli, ["check", str(root)]))
    assert "archivist.toml: nested more than 128 levels deep" in line



# ---------------------------------------------------------------- scale as mappers write it

import pytest  # noqa: E402

from archivist.manifest import did_you_mean, parse_scale, validate_manifest, with_defaults, usable  # noqa: E402
from archivist.project import load_project  # noqa: E402
from builders import edit_manifest  # noqa: E402


@pytest.mark.parametrize(
    "written, denominator",
    [
        (10000, 10000.0),
        (2.5e4, 25000.0),
        ("10000", 10000.0),
        ("1:10000", 10000.0),
        ("1:10 000", 10000.0),
        ("1 : 10 000", 10000.0),
        ("1/10000", 10000.0),
        ("1:10,000", 10000.0),
        ("1:10.000", 10000.0),  # a dot groups thousands in German and other languages
        ("1:10\u00a0000", 10000.0),  # no-break space, as word processors put it
        ("1:1 000 000", 1_000_000.0),
    ],
)
def test_scale_written_as_a_ratio_is_the_denominator(written, denominator, tmp_path):
    root = edit_manifest(tiny_project(tmp_path), lambda m: m["map"].update(scale=written))
    project = load_project(root)
    assert project.config.scale == denominator
    assert [h.message for h in project.problems if h.rule == "manifest-invalid"] == []


@pytest.mark.parametrize("written", ["1:ten thousand", "1:10 00", "1:2.5", "0", "1:0", "-5000", "1:10000:1", ""])
def test_a_scale_that_is_not_one_is_one_finding_naming_the_key(written):
    data = {"map": {"title": "t", "version": "1", "scale": written, "crs": "EPSG:32633"},
            "layers": {"units": {"path": "map.gpkg"}}}
    (hit,) = validate_manifest(data, "archivist.toml")
    assert hit.message == (f"archivist.toml: key 'map.scale': {written!r} is not a scale; write the denominator "
                           "(25000) or a ratio (\"1:25000\", \"1:25 000\").")
    assert parse_scale(written) is None
    assert "scale" not in with_defaults(usable(data))["map"]  # the default applies


def test_near_miss_keys_get_a_suggestion():
    data = {"map": {"title": "t", "version": "1", "scale": 10000, "crs": "EPSG:32633", "license": "CC-BY-4.0"},
            "layers": {"units": {"path": "map.gpkg", "unit_feild": "unit"}, "sample": {"path": "s.csv"}},
            "chekcs": {}}
    messages = [h.message for h in validate_manifest(data, "archivist.toml")]
    assert messages == [
        "archivist.toml: unknown key 'chekcs'; did you mean 'checks'?",
        "archivist.toml: unknown key 'layers.sample'; did you mean 'samples'?",
        "archivist.toml: unknown key 'layers.units.unit_feild'; did you mean 'unit_field'?",
        "archivist.toml: unknown key 'map.license'; did you mean 'licence'?",
    ]


def test_no_suggestion_for_a_key_like_none_known():
    assert did_you_mean("colour_scheme", ["title", "version", "scale"]) == ""
    assert did_you_mean("Licence", ["licence", "title"]) == "; did you mean 'licence'?"
