"""The package README, licence and citation files, generated from the metadata."""

import datetime as dt

import yaml

import archivist
from archivist.model import Finding, Report, Severity
from archivist.package.deposit import read_deposit
from archivist.package.readme import MAX_LISTED, citation_cff, licence_text, readme_text
from builders import tiny_project


def deposit(tmp_path, **map_keys):
    root = tiny_project(tmp_path, manifest={"map": map_keys} if map_keys else None)
    return read_deposit(archivist.load_project(root), dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc))


def report(n_errors):
    findings = tuple(
        Finding(rule="unit-gap", family="topology", severity=Severity.ERROR, message=f"Gap number {i}.", layer="units", x=1.0, y=2.0)
        for i in range(n_errors)
    )
    return Report(tool="archivist", version="0", project="archivist.toml", crs=None, findings=findings, rules_run=("unit-gap",))


def test_many_open_errors_are_listed_up_to_a_limit(tmp_path):
    text = readme_text(deposit(tmp_path), report(MAX_LISTED + 50), [], [], [], None, None, [])
    head = text.split("## The map")[0]
    assert "250 open errors" in head and "`unit-gap` (250)" in head
    assert head.count("- unit-gap: Gap number") == MAX_LISTED
    assert "and 50 more" in head and "[at 1.0, 2.0]" in head


def test_clean_readme_says_what_is_not_covered(tmp_path):
    text = readme_text(deposit(tmp_path), report(0), [], [], [], None, None, ["a note"])
    assert "open error" not in text and "Note: a note" in text
    assert "## What the checks do not cover" in text and "qualified geologist" in text


def test_licence_expression(tmp_path):
    text = licence_text(deposit(tmp_path, licence="CC-BY-4.0 OR ODbL-1.0"))
    assert "SPDX-License-Identifier: CC-BY-4.0 OR ODbL-1.0" in text
    assert "https://spdx.org/licenses/ODbL-1.0.html" in text and "Open Data Commons Open Database License v1.0" in text


def test_citation_cff(tmp_path):
    cff = yaml.safe_load(citation_cff(deposit(tmp_path, doi="10.5555/tiny.1", keywords=["a: b", "c"])))
    assert cff["doi"] == "10.5555/tiny.1" and cff["keywords"] == ["a: b", "c"]
    assert cff["authors"] == [{"family-names": "Mapper", "given-names": "Test", "orcid": "https://orcid.org/0000-0002-1825-0097"}]
    assert cff["date-released"] == "2026-01-01"


def test_own_licence_prints_no_empty_address(tmp_path):
    # a LicenseRef- id (SPDX specification, annex "SPDX License Expressions") has no page on the SPDX licence list
    d = deposit(tmp_path, licence="LicenseRef-Tarrow-Survey-Terms")
    text = licence_text(d)
    assert "Full text: with no public text at a standard address" in text
    assert "Full text: \n" not in text and not text.rstrip().endswith("Full text:")
    readme = readme_text(d, report(0), [], [], [], None, None, [])
    line = next(ln for ln in readme.splitlines() if "LicenseRef-Tarrow-Survey-Terms" in ln)
    assert not line.rstrip().endswith(",") and "no public text" in line
