"""Analyte headers: species, units and total-iron marks, read one way for the checks and the package."""

from __future__ import annotations

import pytest

from archivist.vocab.analytes import UNIT_WORDS, column_unit, formula, split_header

# Total-iron notations found in lab reports and geochemical databases (common practice).
TOTAL_IRON = ["Fe2O3T", "Fe2O3t", "Fe2O3 (T)", "Fe2O3(T)", "Fe2O3tot", "Fe2O3 (tot)", "Fe2O3*", "FeOt", "FeOT", "FeO(T)", "FeO (total)"]


@pytest.mark.parametrize("header", TOTAL_IRON)
def test_total_iron_marks_are_never_a_unit(header):
    name, unit, text = split_header(header)
    assert unit is None and text is None
    assert formula(name) == (True, True)
    read = column_unit(header)
    assert read.total_iron and read.unit is None and read.quantity in ("Fe2O3", "FeO")


@pytest.mark.parametrize("header", TOTAL_IRON)
@pytest.mark.parametrize("written, unit", [(" (wt%)", "wt%"), ("_wt%", "wt%"), (" [ppm]", "ppm"), (" (wt.%)", "wt%")])
def test_total_iron_takes_the_unit_its_header_gives(header, written, unit):
    read = column_unit(header + written)
    assert (read.unit, read.total_iron) == (unit, True)


def test_iron_that_is_not_total_stays_plain():
    assert formula("Fe2O3") == (True, False) and formula("FeO") == (True, False)
    assert column_unit("Fe2O3 (wt%)").total_iron is False


def test_unit_words_are_canonical():
    # every canonical form maps to itself, so a unit read twice does not change
    assert all(UNIT_WORDS.get(v, v) == v for v in set(UNIT_WORDS.values()) if v in UNIT_WORDS)
    assert column_unit("Cu (µg/g)").unit == "ppm" and column_unit("Au [ng/g]").unit == "ppb"
