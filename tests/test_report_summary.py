"""The grouping behind the text summary: pure functions of a Report."""

from archivist.model import Finding, Report, Severity
from archivist.report.summary import group_findings, measure_text, worst_features, worst_layers
from archivist.report.text import render_text

E, W, N = Severity.ERROR, Severity.WARNING, Severity.NOTICE


def f(rule, sev, layer, features=(), measure=None, message="m.", x=None, y=None, family="topology"):
    return Finding(rule, family, sev, message, layer, tuple(features), x, y, measure)


def report(*findings):
    return Report("archivist", "0", "p", None, tuple(findings), rules_run=("a", "b"))


def test_groups_by_rule_severity_and_layer_worst_first():
    r = report(
        f("unit-sliver", W, "units", ("1",)),
        f("unit-gap", E, "units", ("2",), 5.0),
        f("unit-gap", E, "units", ("3",), 50.0),
        f("line-dangle", E, "lines", ("7",), 1.0),
        f("line-dangle", E, "lines", ("8",), 2.0),
        f("line-dangle", E, "lines", ("9",), 3.0),
        f("unit-gap", W, "units", ("4",), 500.0),  # a milder hit of the same rule is its own group
    )
    groups = group_findings(r)
    assert [(g.rule, g.severity, g.layer, g.count) for g in groups] == [
        ("line-dangle", E, "lines", 3),
        ("unit-gap", E, "units", 2),
        ("unit-gap", W, "units", 1),
        ("unit-sliver", W, "units", 1),
    ]
    assert groups[0].largest.features == ("9",) and groups[1].largest.features == ("3",)
    assert sum(g.count for g in groups) == len(r.findings)


def test_largest_without_measures_is_the_first():
    r = report(f("licence-unknown", E, "manifest", message="first."), f("licence-unknown", E, "manifest", message="second."))
    (g,) = group_findings(r)
    assert g.largest.message == "first."


def test_worst_layers_and_features():
    r = report(
        f("unit-overlap", E, "units", ("1", "2")),
        f("unit-sliver", W, "units", ("2",)),
        f("line-dangle", E, "lines", ("2",)),
        f("north-undeclared", N, "structures"),
    )
    assert [(p.layer, p.errors, p.warnings, p.notices) for p in worst_layers(r)] == [
        ("units", 1, 1, 0), ("lines", 1, 0, 0), ("structures", 0, 0, 1)]
    # feature 2 of units is named twice; feature 2 of lines is another feature
    assert [(p.layer, p.feature, p.total) for p in worst_features(r)] == [("units", "2", 2)]


def test_measure_text_takes_the_unit_the_message_prints():
    assert measure_text(f("g", E, "units", measure=1.0, message="Gap of 1.00 m² (up to 0.50 m wide).")) == "1.00 m²"
    assert measure_text(f("d", E, "lines", measure=0.5, message="Gap of 1.00 m² (up to 0.50 m wide).")) == "0.50 m"
    assert measure_text(f("s", E, "samples", measure=12.34, message="sample 3 lies 12.3 m outside the map.")) == "12.3 m"
    # a measure the message does not print has no unit to show
    assert measure_text(f("x", E, "units", measure=2.0, message="Polygon 12 is odd.")) is None
    # digits inside a longer number are not the measure
    assert measure_text(f("x", E, "units", measure=2.0, message="Polygon 12.00 m² wide.")) is None


def test_summary_line_per_group_and_pluralisation():
    r = report(
        f("line-dangle", E, "lines", ("7",), 1.0, "Line 7 ends free, 1.00 m short of line 3.", 1.0, 2.0, "linework"),
        f("line-dangle", E, "lines", ("8",), 4.0, "Line 8 ends free, 4.00 m short of line 3.", 10.0, 20.0, "linework"),
        f("north-undeclared", N, "structures", message="No north.", family="structures"),
    )
    lines = render_text(r).splitlines()
    assert "2 errors, 0 warnings, 1 notice from 2 rules." in lines
    assert "  error   line-dangle on lines: 2 places, largest 4.00 m at 10.0, 20.0" in lines
    assert "  notice  north-undeclared: No north." in lines
    assert "Most findings by layer: lines (2 errors), structures (1 notice)." in lines
    assert "Every finding: --details (text) or --format json (3 findings)." in lines
    details = render_text(r, details=True)
    assert "  error   line-dangle: Line 7 ends free, 1.00 m short of line 3.  [at 1.0, 2.0]" in details.splitlines()
