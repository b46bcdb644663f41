"""Collects the failing/passing case of every rule from the family test modules.

Each ``tests/test_rules_<family>.py`` defines ``CASES``: rule id ->
``(make_failing, make_passing)``, two functions taking ``tmp_path`` and
returning a project folder. The registry test runs each rule alone on both.
"""

from __future__ import annotations

import importlib
from pathlib import Path

HERE = Path(__file__).resolve().parent


def all_cases() -> dict:
    cases: dict = {}
    for path in sorted(HERE.glob("test_rules_*.py")):
        module = importlib.import_module(path.stem)
        for rid, pair in getattr(module, "CASES", {}).items():
            assert rid not in cases, f"{rid} has cases in two modules"
            cases[rid] = pair
    return cases
