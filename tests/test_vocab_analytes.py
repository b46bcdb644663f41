"""Analyte headers: species, units and total-iron marks, read one way for the checks and the package."""

from __future__ import annotations

import pandas as pd
import pytest

from archivist.vocab.analytes import (
    IN_WT_PERCENT,
    O_EQUIVALENT,
    UNIT_WORDS,
    analytes,
    classify,
    column_unit,
    formula,
    iron_base,
    loi_header,
    split_header,
)

# Total-iron notations found in lab reports and geochemical databases (common practice).
TOTAL_IRON = ["Fe2O3T", "Fe2O3t", "Fe2O3 (T)", "Fe2O3(T)", "Fe2O3tot", "Fe2O3 (tot)", "Fe2O3*", "FeOt", "FeOT", "FeO(T)", "FeO (total)",
              "Fe2O3_T", "Fe2O3_tot", "ΣFe2O3", "Σ Fe2O3", "ΣFeO"]


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


@pytest.mark.parametrize("header, base", [("Fe2O3_T", "Fe2O3"), ("Fe2O3(T)", "Fe2O3"), ("ΣFe2O3", "Fe2O3"), ("FeOt", "FeO"), ("Fe2O3", None)])
def test_total_iron_names_its_oxide(header, base):
    assert iron_base(header) == base


# Loss on ignition as laboratories head it, with or without the ignition temperature (common practice).
@pytest.mark.parametrize("header", ["LOI", "L.O.I.", "LOI*", "LOI 1000°C", "LOI (1000°C)", "LOI (950 °C)", "LOI@1000C", "LOI_1000", "L.O.I. 1000 °C", "loss on ignition"])
def test_loi_headers(header):
    assert loi_header(split_header(header)[0])
    assert split_header(header + " (wt%)")[1] == "wt%"


@pytest.mark.parametrize("header", ["LOIX", "Li", "LOI 10", "LOI 1000 K"])
def test_not_loi(header):
    assert not loi_header(split_header(header)[0])


def test_bracketed_text_after_loi_that_is_not_a_temperature_stays_a_unit_question():
    assert split_header("LOI (XRF)") == ("LOI", None, "XRF")


def test_loi_temperature_is_not_a_unit_question():
    class Spec:
        pass

    table = Spec()
    table.spec = {}  # type: ignore[attr-defined]
    table.frame = pd.DataFrame({"LOI (1000°C)": [1.0], "LOI 1000°C (wt%)": [1.0]})  # type: ignore[attr-defined]
    found = analytes(table)  # type: ignore[arg-type]
    assert [(a.name, a.unit, a.problem) for a in found] == [("LOI", None, None), ("LOI", "wt%", None)]


# Censored readings as laboratories write them (common practice): a reading below (or above) a limit.
CENSORED = ["<0.01", "<.01", "< 5 ppm", "<1e-3", "<0.5 wt%", "< 0.01", "bdl", "BDL", "b.d.l.", "tr", "tr.", "trace", "Trace", ">10000", "<LOD"]
NOT_ANALYSED = ["-", "n.a.", "N.A.", "n/a", "--", "—"]


@pytest.mark.parametrize("cell", CENSORED)
def test_censored_forms_are_readings(cell):
    c = classify(pd.Series([cell], dtype=object))
    assert c.censored[0] and not c.unreadable[0] and not c.not_analysed[0]


@pytest.mark.parametrize("cell, limit", [("<0.01", 0.01), ("<.01", 0.01), ("< 5 ppm", 5.0), ("<1e-3", 0.001), ("bdl", None), (">10000", None)])
def test_detection_limit_is_read(cell, limit):
    got = classify(pd.Series([cell], dtype=object)).limit[0]
    assert (got != got) if limit is None else got == pytest.approx(limit)


@pytest.mark.parametrize("cell", [*NOT_ANALYSED, "", None])
def test_not_analysed_and_empty_are_not_readings(cell):
    c = classify(pd.Series([cell], dtype=object))
    assert not c.censored[0] and not c.unreadable[0]
    assert c.not_analysed[0] or c.blank[0]


@pytest.mark.parametrize("cell", ["n.d.", "nd", "N.D.", "n. d."])
def test_nd_follows_the_stated_meaning(cell):
    # "n.d." is "not detected" in some laboratories and "not determined" in others (common practice).
    detected = classify(pd.Series([cell], dtype=object), "not-detected")
    determined = classify(pd.Series([cell], dtype=object), "not-determined")
    assert detected.censored[0] and not detected.not_analysed[0] and detected.nd[0]
    assert determined.not_analysed[0] and not determined.censored[0] and determined.nd[0]
    with pytest.raises(ValueError):
        classify(pd.Series([cell], dtype=object), "unknown")


def test_one_column_is_classified_in_one_pass():
    c = classify(pd.Series(["72.5", "<.01", "#N/A", "x", "n.a.", None, 3], dtype=object))
    assert c.censored.tolist() == [False, True, False, False, False, False, False]
    assert c.unreadable.tolist() == [False, False, True, True, False, False, False]
    assert c.value[0] == 72.5 and c.value[6] == 3.0


def test_oxygen_equivalents_from_atomic_weights():
    # IUPAC standard atomic weights, abridged (CIAAW 2021): O 15.999, F 18.998, S 32.06, Cl 35.45.
    # Oxygen equivalents quoted in common practice: O = F 0.421, O = Cl 0.226, O = S 0.499.
    o, f, s, cl = 15.999, 18.998403162, 32.06, 35.45
    assert O_EQUIVALENT["F"] == pytest.approx(o / (2 * f), rel=1e-4) and round(O_EQUIVALENT["F"], 3) == 0.421
    assert O_EQUIVALENT["Cl"] == pytest.approx(o / (2 * cl), rel=1e-4) and round(O_EQUIVALENT["Cl"], 3) == 0.226
    assert O_EQUIVALENT["S"] == pytest.approx(o / s, rel=1e-4) and round(O_EQUIVALENT["S"], 3) == 0.499


def test_mass_fractions_in_wt_percent():
    # 1 wt% = 1 g/100 g = 10 000 µg/g (ppm) = 10^7 ng/g (ppb) (SI definitions of the mass fraction).
    assert 1 / IN_WT_PERCENT["ppm"] == pytest.approx(1e4)
    assert 1 / IN_WT_PERCENT["ppb"] == pytest.approx(1e7)
