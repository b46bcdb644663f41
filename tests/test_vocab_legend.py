"""Legend columns: one reader, every consumer (check, HTML, pack README, datapackage.json, audit, diff).

The header spellings tested are those mappers commonly give legend columns
(common practice): ``Code``, ``Unit name``, ``Color``, ``Min age (Ma)``, in
any case. Every spelling must give what the lower-case headers give.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

import archivist
from archivist.project import load_project
from archivist.report.html import render_html
from archivist.vocab import legend as vocab
from builders import edit_table, tiny_legend, tiny_project

CANONICAL = list(tiny_legend().columns)  # unit, name, description, age, min_age_ma, max_age_ma, order, colour, lithology, kind
CAPITALISED = {
    "unit": "Code", "name": "Unit name", "description": "Description", "age": "Age", "min_age_ma": "Min age (Ma)",
    "max_age_ma": "Max age (Ma)", "order": "Order", "colour": "Color", "lithology": "Lithology", "kind": "Kind",
}
VARIANTS = {
    "lower": {c: c for c in CANONICAL},
    "capitalised": CAPITALISED,
    "all-caps": {k: v.upper() for k, v in CAPITALISED.items()},
    "other words": {
        "unit": "Unit", "name": "Name", "description": "DESC", "age": "unit_age", "min_age_ma": "min age",
        "max_age_ma": "MAX_AGE", "order": "Legend order", "colour": "Colour", "lithology": "Lith", "kind": "Unit type",
    },
}
# A's colour is an RGB triple (legend-bad-colour) and B has no description (legend-incomplete-entry), so that
# the findings compared are not only the empty set.
BAD_COLOUR = "232,160,96"


def legend_frame(names: dict[str, str]) -> pd.DataFrame:
    frame = tiny_legend()
    frame.loc[0, "colour"] = BAD_COLOUR
    frame.loc[1, "description"] = ""
    return frame.rename(columns=names)


@pytest.fixture(scope="module")
def projects(tmp_path_factory) -> dict[str, Path]:
    base = tmp_path_factory.mktemp("variants")
    # one folder name for all, so that findings naming the archive compare equal
    return {v: tiny_project(base / v.replace(" ", "-"), legend=legend_frame(names), name="map") for v, names in VARIANTS.items()}


def comparable(findings, names: dict[str, str]) -> list[tuple]:
    """Findings with the variant's column names written back as the lower-case ones."""
    out = []
    for f in findings:
        message = f.message
        for canonical, written in names.items():
            message = message.replace(f"column '{written}'", f"column '{canonical}'")
        out.append((f.rule, f.severity.value, f.layer, f.features, f.measure, message))
    return sorted(out, key=repr)


# ---------------------------------------------------------------- the reader itself

@pytest.mark.parametrize("variant", list(VARIANTS))
def test_every_key_is_found_in_every_spelling(variant, projects):
    table = load_project(projects[variant]).tables["legend"]
    assert vocab.columns(table) == VARIANTS[variant]


def test_header_key_ignores_case_spaces_and_brackets():
    assert vocab.header_key(" Min age (Ma) ") == vocab.header_key("MIN_AGE_MA") == "min_age_ma"
    assert vocab.header_key("Unit name") == "unit_name"


def test_field_key_wins_over_a_spelling(tmp_path):
    """A legend with both `unit` and `Code`: the manifest's unit_field says which one is the key."""
    frame = tiny_legend().assign(Code=["X1", "X2"])
    guessed = load_project(tiny_project(tmp_path, legend=frame, name="guessed")).tables["legend"]
    assert vocab.column(guessed, "unit") == "unit"  # the first spelling of the list
    named = tiny_project(tmp_path, legend=frame, name="named", manifest={"tables": {"legend": {"unit_field": "Code"}}})
    assert vocab.column(load_project(named).tables["legend"], "unit") == "Code"


def test_field_keys_name_unusual_columns_and_a_missing_one_is_field_missing(tmp_path):
    frame = tiny_legend().rename(columns={"unit": "Key", "name": "Label", "description": "Words", "age": "Period"})
    keys = {"unit_field": "Key", "name_field": "Label", "description_field": "Words", "age_field": "Period", "colour_field": "Paint"}
    root = tiny_project(tmp_path, legend=frame, manifest={"tables": {"legend": keys}})
    table = load_project(root).tables["legend"]
    assert (vocab.column(table, "unit"), vocab.column(table, "name"), vocab.column(table, "colour")) == ("Key", "Label", None)
    report = archivist.check(root)
    rules = [f.rule for f in report.findings]
    assert "legend-incomplete-entry" not in rules and "manifest-invalid" not in rules
    missing = [f.message for f in report.findings if f.rule == "field-missing"]
    assert missing == ["tables.legend: column 'Paint' (colour_field) is not in 'legend.csv' (columns: Key, Label, Words, Period, "
                       "min_age_ma, max_age_ma, order, colour, lithology, kind)."]


def test_legend_with_no_unit_column_is_still_field_missing(tmp_path):
    root = tiny_project(tmp_path, legend=tiny_legend().rename(columns={"unit": "thing"}))
    messages = [f.message for f in archivist.check(root).findings if f.rule in ("field-missing", "legend-incomplete-entry")]
    assert any(m.startswith("tables.legend: column 'unit' (unit_field) is not in 'legend.csv'") for m in messages)
    assert any("legend.csv has no 'unit' column" in m for m in messages)


# ---------------------------------------------------------------- every consumer, every spelling

@pytest.fixture(scope="module")
def checked(projects):
    return {v: archivist.check(p) for v, p in projects.items()}


@pytest.mark.parametrize("variant", [v for v in VARIANTS if v != "lower"])
def test_check_findings_do_not_depend_on_header_spelling(variant, checked):
    lower = comparable(checked["lower"].findings, VARIANTS["lower"])
    assert {r for r, *_ in lower} >= {"legend-bad-colour", "legend-incomplete-entry"}
    assert comparable(checked[variant].findings, VARIANTS[variant]) == lower


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_html_map_and_legend_use_the_colours_names_and_ages(variant, projects, checked):
    page = render_html(checked[variant], load_project(projects[variant]))
    legend = page.split('<section id="legend">', 1)[1].split("</section>", 1)[0]
    assert "Alder Sandstone" in legend and "Birch Mudstone" in legend and "Red cross-bedded sandstone." in legend
    assert "Norian" in legend and "230–235 Ma" in legend
    assert "background:#9AA0B0" in legend  # B's colour as the legend gives it
    # the map fills B's polygons with the legend colour (A's triple is not #RRGGBB: a generated colour)
    assert re.search(r'<path[^>]*style="fill:#9AA0B0"', page)


@pytest.fixture(scope="module")
def packed(projects, tmp_path_factory):
    out = tmp_path_factory.mktemp("packed")
    return {v: archivist.pack(p, out / v.replace(" ", "-"), allow_errors=True).path for v, p in projects.items()}


def readme_legend(package: Path) -> list[str]:
    text = (package / "data" / "README.md").read_text(encoding="utf-8")
    return [line for line in text.splitlines() if line.startswith("| A |") or line.startswith("| B |")]


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_package_readme_lists_names_and_ages(variant, packed):
    rows = readme_legend(packed[variant])
    assert len(rows) == 2 and "Alder Sandstone" in rows[0] and "Norian" in rows[0] and "Carnian" in rows[1]
    assert rows == readme_legend(packed["lower"])


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_datapackage_describes_the_legend_columns_and_keys(variant, packed):
    names = VARIANTS[variant]
    descriptor = json.loads((packed[variant] / "data" / "datapackage.json").read_text(encoding="utf-8"))
    resources = {r["name"]: r for r in descriptor["resources"]}
    schema = resources["legend"]["schema"]
    fields = {f["name"]: f for f in schema["fields"]}
    assert schema["primaryKey"] == [names["unit"]]
    assert fields[names["colour"]]["description"] == "Display colour, #RRGGBB."
    assert fields[names["min_age_ma"]]["unit"] == fields[names["max_age_ma"]]["unit"] == "Ma"
    assert fields[names["unit"]]["type"] == "string"
    reference = {"resource": "legend", "fields": [names["unit"]]}
    assert {"fields": ["unit"], "reference": reference} in resources["units"]["schema"]["foreignKeys"]


@pytest.mark.parametrize("variant", [v for v in VARIANTS if v != "lower"])
def test_audit_reads_the_legend_in_every_spelling(variant, projects):
    lower = comparable(archivist.audit(projects["lower"]).findings, VARIANTS["lower"])
    assert any(r == "archive-legend-incomplete" and "B (description)" in m for r, *_, m in lower)
    assert comparable(archivist.audit(projects[variant]).findings, VARIANTS[variant]) == lower


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_diff_reads_the_legend_in_every_spelling(variant, projects, tmp_path):
    names = VARIANTS[variant]
    new = tmp_path / "new"
    shutil.copytree(projects[variant], new)

    def add_cedar(frame: pd.DataFrame) -> pd.DataFrame:
        row = {c: "" for c in frame.columns} | {names["unit"]: "C", names["name"]: "Cedar Shale"}
        return pd.concat([frame, pd.DataFrame([row])], ignore_index=True)

    edit_table(new, "legend.csv", add_cedar)
    messages = [c.message for c in archivist.diff(projects[variant], new).changes]
    assert "Unit C added (legend entry 'Cedar Shale'; not mapped)." in messages


# ---------------------------------------------------------------- more spellings, and the header row

@pytest.mark.parametrize("key, header", [
    ("unit", "CODE"), ("unit", "Map symbol"), ("unit", "UnitCode"), ("name", "Unit_Name"), ("name", "UnitName"),
    ("name", "Formation"), ("description", "DESCRIPTION"), ("age", "Period"), ("age", "Stage"), ("colour", "Colour code"),
    ("colour", "HEX"), ("min_age_ma", "Top age (Ma)"), ("min_age_ma", "MinAgeMa"), ("max_age_ma", "Base age"),
    ("max_age_ma", "BaseAgeMa"), ("order", "Legend position"), ("lithology", "Rock type"), ("kind", "Type"),
])
def test_more_spellings_of_the_trade(key, header, tmp_path):
    frame = tiny_legend().rename(columns={key: header})
    table = load_project(tiny_project(tmp_path, legend=frame)).tables["legend"]
    assert vocab.column(table, key) == header


def test_header_test_wants_the_unit_and_one_more_key():
    test = vocab.header_test({})
    assert test(["CODE", "Unit name", "Colour"]) and test(["Symbol", "Age"])
    assert not test(["Hollow Vale geological map: legend"]) and not test(["Name", "Age"]) and not test(["Code"])
    assert vocab.header_test({"unit_field": "Key"})(["Key", "Label", "Period"])
