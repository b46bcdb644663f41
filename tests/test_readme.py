"""The README stays in step with the registry and with .ci/run."""

import re
from pathlib import Path

from archivist.cli.rules import rules_markdown
from archivist.docs import END, START

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_rule_list_is_generated_from_registry():
    body = README.split(START, 1)[1].split(END, 1)[0]
    assert body.strip() == rules_markdown().strip(), "run: python -m archivist.docs"


def test_ci_runs_the_readme_commands():
    blocks = re.findall(r"```\n(.*?)\n```", README, flags=re.S)
    install, tests = blocks[0].strip(), blocks[1].strip()
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert install in ci and tests in ci


def test_readme_opens_with_the_job_and_its_limits():
    first = README.split("\n\n")[1]
    assert "geolog" in first and "archivist" in first
    assert "What the checks do not cover" in README
