"""The README stays in step with the registry and with .ci/run."""

import re
from pathlib import Path

from click.testing import CliRunner

from archivist.cli import cli
from archivist.cli.rules import rules_markdown, rules_reference
from archivist.docs import END, REFERENCE, START
from archivist.registry import all_rules

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_rule_list_is_generated_from_registry():
    body = README.split(START, 1)[1].split(END, 1)[0]
    assert body.strip() == rules_markdown(link=REFERENCE).strip(), "run: python -m archivist.docs"


def test_rule_reference_is_generated_from_registry():
    text = (ROOT / REFERENCE).read_text(encoding="utf-8")
    assert text == rules_reference(), "run: python -m archivist.docs"


def test_rules_markdown_command_is_the_reference():
    out = CliRunner().invoke(cli, ["rules", "--format", "markdown"]).output
    assert out == rules_reference()
    for info in all_rules():
        # every rule has its section with all four parts of its doc
        section = out.split(f"### `{info.id}`", 1)[1].split("\n### ", 1)[0]
        for name, _ in info.sections:
            assert f"**{name}.**" in section
        # and the list links to it
        assert f"[`{info.id}`](#{info.id})" in out


def test_ci_runs_the_readme_commands():
    blocks = re.findall(r"```\n(.*?)\n```", README, flags=re.S)
    install, tests = blocks[0].strip(), blocks[1].strip()
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert install in ci and tests in ci


def test_readme_opens_with_the_job_and_its_limits():
    first = README.split("\n\n")[1]
    assert "geolog" in first and "archivist" in first
    assert "What the checks do not cover" in README


def test_every_test_the_readme_cites_exists():
    """The promises point at tests by name (`tests/x.py::name`, or a file followed by names in brackets)."""
    import ast
    import re
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    text = (root / "README.md").read_text(encoding="utf-8")
    cited: list[tuple[str, str | None]] = []
    for m in re.finditer(r"`(tests/[\w/]+\.py)(?:::(\w+))?`(?:\s*\(([^)]*)\))?", text, re.S):
        path, name, group = m.group(1), m.group(2), m.group(3)
        cited.append((path, name))
        for inner in re.findall(r"`(test_\w+)`", group or ""):
            cited.append((path, inner))
    assert len(cited) > 20
    for path, name in cited:
        file = root / path
        assert file.is_file(), path
        if name:
            names = {n.name for n in ast.walk(ast.parse(file.read_text(encoding="utf-8"))) if isinstance(n, ast.FunctionDef)}
            assert name in names, f"README cites {path}::{name}, which does not exist"
