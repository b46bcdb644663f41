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


# ---------------------------------------------------------------- laboratory sheets: units rows, QC rows

from archivist.vocab.analytes import QC_PATTERN, analyses_header_test, canonical_unit, info_rows, qc_rows, qc_sheet  # noqa: E402


@pytest.mark.parametrize("written, unit", [
    # mass fractions: 1 mg/kg = 1 µg/g = 10^-6 (ppm), 1 µg/kg = 1 ng/g = 10^-9 (ppb) (SI mass fraction, from memory)
    ("wt%", "wt%"), ("wt %", "wt%"), ("WT%", "wt%"), ("%", "wt%"), ("ppm", "ppm"), ("PPM", "ppm"), ("mg/kg", "ppm"),
    ("µg/g", "ppm"), ("μg/g", "ppm"), ("(ppm)", "ppm"), ("[ppb]", "ppb"), ("ppb", "ppb"), ("ng/g", "ppb"), ("g/t", "ppm"),
])
def test_units_as_a_units_row_writes_them(written, unit):
    assert canonical_unit(written) == unit


@pytest.mark.parametrize("written", ["cps", "counts", "ICP-MS", "0.01", ""])
def test_not_units(written):
    assert canonical_unit(written) is None


def test_header_test_needs_three_analytes_or_the_sample_column_and_one():
    test = analyses_header_test("Sample ID")
    assert test(["Sample ID", "SiO2", "Al2O3"]) and test(["Sample ID", "Cu (ppm)"]) and test(["x", "SiO2", "MgO", "LOI"])
    # a laboratory's notes and a data row are not headers (a single symbol-like word is not enough)
    assert not test(["Brackwater Analytical"]) and not test(["Job number:", "BW-24-118"]) and not test(["In", "No", None])
    assert not test(["S-0001", 72.5, 0.28, "<0.01"]) and not test(["Sample ID", "Date"])


def test_units_row_detection_takes_units_and_info_rows_only_at_the_top():
    frame = pd.DataFrame({"id": ["", "LOD", "Method", "S-1", "Units"], "SiO2": ["wt%", 0.01, "XRF", 72.5, "wt%"],
                          "Cu": ["mg/kg", 1, "ICP-MS", "<1", "ppm"]}, dtype=object)
    info = info_rows(frame, ["SiO2", "Cu"], ["id"])
    assert (info.count, info.units, info.units_row, info.labels) == (3, {"SiO2": "wt%", "Cu": "mg/kg"}, 0, ("units", "detection limits", "method"))
    # a first row of numbers is a sample, whatever follows
    assert info_rows(frame.iloc[3:].reset_index(drop=True), ["SiO2", "Cu"], ["id"]).count == 0
    # a row labelled Units with a word archivist does not know is still the units row (the unit is then questioned)
    labelled = pd.DataFrame({"id": ["Units"], "Cu": ["cps"]}, dtype=object)
    assert info_rows(labelled, ["Cu"], ["id"]).units == {"Cu": "cps"}
    # a row of unit words among numbers is not a units row
    mixed = pd.DataFrame({"id": [""], "SiO2": [72.5], "Cu": ["ppm"]}, dtype=object)
    assert info_rows(mixed, ["SiO2", "Cu"], ["id"]).count == 0


# Quality-control ids as laboratories write them (common practice).
QC_IDS = ["BLANK", "Blank 2", "BLK", "BLK1", "PREP BLANK", "DUP", "DUP2", "TM24-0012-DUP", "TM24-0012 DUP", "TM24-0012_dup",
          "REP", "TM24-0012 Rep", "Repeat", "STD", "STD-3", "Std OREAS 45e", "CRM", "SRM", "QC", "BHVO-2", "BCR-2", "AGV-2",
          "NIST 610", "Standard 1"]
SAMPLE_IDS = ["TM24-0007", "00012", "12", "BLANKET-3", "DUPONT-1", "STANDING-4", "HV-REPT", "Crmx", "W-2", "RM-001", "S-BLK-A"]


def test_default_qc_pattern_marks_quality_control_ids_only():
    import numpy as np

    assert qc_rows(np.array(QC_IDS, dtype=object), QC_PATTERN).all()
    marked = qc_rows(np.array(SAMPLE_IDS, dtype=object), QC_PATTERN)
    assert dict(zip(SAMPLE_IDS, marked)) == {i: i == "S-BLK-A" for i in SAMPLE_IDS}  # "BLK" as a word is a blank
    assert not qc_rows(np.array(QC_IDS, dtype=object), "").any()


@pytest.mark.parametrize("name, qc", [("QC", True), ("QA-QC", True), ("QA/QC", True), ("QAQC", True), ("Standards", True),
                                      ("Blanks", True), ("Duplicates", True), ("CRM", True), ("Reference materials", True),
                                      ("Results", False), ("Majors", False), ("Sheet1", False), ("QC notes 2", False)])
def test_qc_sheet_names(name, qc):
    assert qc_sheet(name) is qc
