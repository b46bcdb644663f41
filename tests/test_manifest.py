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

