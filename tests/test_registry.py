"""The registry: unique kebab-case ids, complete docs, a failing and a passing case for every rule."""

import re

import pytest

import archivist
from archivist import registry
from rule_cases import all_cases

RULES = registry.all_rules()
CASES = all_cases()


def test_ids_unique_and_kebab_case():
    ids = [r.id for r in RULES]
    assert len(ids) == len(set(ids))
    for rid in ids:
        assert re.fullmatch(r"[a-z][a-z0-9]*(-[a-z0-9]+)+", rid), rid
        assert not rid.startswith(("must-", "should-")), rid


@pytest.mark.parametrize("info", RULES, ids=lambda r: r.id)
def test_doc_complete(info):
    assert info.title and info.title.endswith("."), info.id
    names = [n for n, _ in info.sections]
    assert names == list(registry.SECTIONS), f"{info.id}: sections {names}"
    for name, body in info.sections:
        assert len(body) >= 20, f"{info.id}: section {name!r} too short"


def test_every_rule_has_cases():
    assert sorted(CASES) == sorted(r.id for r in RULES)


@pytest.mark.parametrize("rule_id", sorted(CASES))
def test_rule_fails_and_passes(rule_id, tmp_path):
    make_failing, make_passing = CASES[rule_id]
    # rules of the archive family judge an archive: their cases return an archive, which goes through audit
    run = archivist.audit if registry.get_rule(rule_id).family == "archive" else archivist.check
    bad = run(make_failing(tmp_path / "fail"), rules=[rule_id])
    assert any(f.rule == rule_id for f in bad.findings), f"{rule_id} silent on its failing case"
    good = run(make_passing(tmp_path / "pass"), rules=[rule_id])
    assert not [f for f in good.findings if f.rule == rule_id], [f.message for f in good.findings]


def test_severity_override_off_and_unknown(tmp_path):
    from builders import tiny_project

    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}, "checks": {"severity": {"licence-unknown": "off", "no-such-rule": "warning"}}})
    report = archivist.check(root)
    assert "licence-unknown" not in {f.rule for f in report.findings}
    assert any(f.rule == "manifest-invalid" and "no-such-rule" in f.message for f in report.findings)


def test_severity_override_changes_level(tmp_path):
    from builders import tiny_project

    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}, "checks": {"severity": {"licence-unknown": "notice"}}})
    report = archivist.check(root)
    found = [f for f in report.findings if f.rule == "licence-unknown"]
    assert found and all(f.severity.value == "notice" for f in found)


def test_report_schema_knows_every_family():
    from archivist.manifest import load_schema

    enum = load_schema("report.schema.json")["$defs"]["finding"]["properties"]["family"]["enum"]
    assert enum == list(registry.FAMILIES)


@pytest.mark.parametrize("info", RULES, ids=lambda r: r.id)
def test_every_rule_is_typed(info):
    """The rule interface is typed, so mypy checks every rule body: (project: MapProject, ctx: CheckContext) -> Iterator[Hit]."""
    import inspect

    func = inspect.unwrap(info.func)
    hints = func.__annotations__
    assert list(inspect.signature(func).parameters) == ["project", "ctx"], info.id
    assert str(hints.get("project")).endswith("MapProject"), (info.id, hints)
    assert str(hints.get("ctx")).endswith("CheckContext"), (info.id, hints)
    assert str(hints.get("return")).replace("typing.", "") in ("Iterator[Hit]", "Iterable[Hit]"), (info.id, hints)
