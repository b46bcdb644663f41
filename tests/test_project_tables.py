"""Legend and analyses tables as mappers and laboratories deliver them, read with no edit of the file.

A laboratory's workbook is built in code with openpyxl: a block of notes
above the header (laboratory, job number, dates), a units row under it, a
detection-limit row, censored values (``<0.01``), quality-control rows
(blank, duplicate, standard) and a QC sheet, and sample ids whose leading
zeros the spreadsheet dropped. The manifest settings (``sample_field``,
``id_width``, ``header_row``, ``qc_pattern``, ``unit``) read it as it is;
the defects planted in it are still found, and nothing else is.

Cell addresses in the findings are checked against the workbook as openpyxl
(the reference reader of the Office Open XML format in Python) reads it.
Unit equivalences (mg/kg = µg/g = ppm, a mass fraction of 10^-6) are the
SI's (BIPM, The International System of Units, 9th edition, 2019: ppm as
10^-6; from memory).
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

import archivist
from archivist.package import pack
from archivist.project import load_project
from archivist.vocab import legend as legend_vocab
from archivist.vocab.analytes import analytes, classify
from builders import edit_manifest, tiny_legend, tiny_project, tiny_samples, tree_digest

OXIDES = ["SiO2", "TiO2", "Al2O3", "Fe2O3T", "MnO", "MgO", "CaO", "Na2O", "K2O", "P2O5", "LOI"]
# An invented granite-like analysis that totals 100.00 wt%.
ROW = [72.50, 0.28, 14.00, 2.30, 0.05, 0.55, 1.50, 3.50, 4.60, 0.10, 0.62]
NOTES = [["Brackwater Analytical (an invented laboratory)"], ["Job number:", "BW-24-118"],
         ["Client:", "Hollow Vale mapping"], ["Date received:", "2024-05-02"], ["Date reported:", "2024-05-20"], []]
HEADER_ROW = len(NOTES) + 1  # 7


def _row(sid, values=ROW, cu=12, au="<0.5"):
    total = round(sum(v for v in values if isinstance(v, float)), 2)
    return [sid, *values, total, cu, au]


def lab_workbook(path: Path, *, qc_sheet_first: bool = True) -> Path:
    """The laboratory's workbook: sheet 'QC' and sheet 'Results' (notes, header in row 7, units row, LOD row, data)."""
    wb = openpyxl.Workbook()
    first = wb.active
    qc = first if qc_sheet_first else wb.create_sheet("QC")
    results = wb.create_sheet("Results") if qc_sheet_first else first
    qc.title, results.title = "QC", "Results"
    qc.append(["Sample ID", *OXIDES, "Total"])
    qc.append(["STD-1", *ROW, 100.0])
    qc.append(["BLK", *["<0.01"] * len(OXIDES), None])
    for line in NOTES:
        results.append(line)
    results.append(["Sample ID", *OXIDES, "Total", "Cu", "Au"])
    results.append(["", *["wt%"] * len(OXIDES), "%", "mg/kg", "ppb"])  # row 8: units
    results.append(["LOD", *[0.01] * len(OXIDES), None, 1, 0.5])  # row 9: detection limits
    censored = list(ROW)
    censored[OXIDES.index("MnO")] = "<0.01"
    results.append(_row(1, censored))  # row 10: sample 00001, typed as a number
    results.append(_row(2))  # row 11
    typo = list(ROW)
    typo[0] = 7.25  # 72.50 typed as 7.25, hidden by the lab's Total of 100.00 (a real defect)
    results.append([3, *typo, 100.0, 8, 2.1])  # row 12
    results.append(_row(9))  # row 13: no sample 00009 (a real defect)
    results.append(["BLK", *["<0.01"] * len(OXIDES), None, "<1", "<0.5"])  # row 14: quality control
    results.append(_row("2-DUP"))  # row 15
    results.append(_row("STD-1"))  # row 16
    wb.save(path)
    return path


def lab_project(tmp_path: Path, name: str = "lab", **analyses) -> Path:
    samples = tiny_samples(ids=("00001", "00002", "00003", "00004"), units=("A", "A", "B", "B"),
                           xy=((30, 50), (60, 50), (130, 50), (160, 50)))
    spec = {"path": "lab.xlsx", "sample_field": "Sample ID", **analyses}
    root = tiny_project(tmp_path, name=name, samples=samples, manifest={"tables": {"analyses": spec}})
    lab_workbook(root / "lab.xlsx")
    return root


def table_findings(report) -> list[tuple[str, str]]:
    return sorted((f.rule, f.message) for f in report.findings if f.family in ("samples", "metadata"))


def cell_value(path: Path, sheet: str, message: str):
    """The value openpyxl reads in the cell a finding names ("..., cell A13: ...")."""
    address = re.search(r"cell ([A-Z]+\d+)", message)[1]
    return openpyxl.load_workbook(path)[sheet][address].value


# ---------------------------------------------------------------- the laboratory's workbook, unedited

@pytest.mark.parametrize("header_row", [None, HEADER_ROW], ids=["header found", "header_row set"])
def test_lab_workbook_checks_as_delivered(header_row, tmp_path):
    settings = {"id_width": 5} | ({"header_row": header_row} if header_row else {})
    root = lab_project(tmp_path, **settings)
    before = tree_digest(root)
    report = archivist.check(root)
    assert tree_digest(root) == before  # the lab's file and the project are untouched
    found = table_findings(report)
    # Only the planted defects: the analysis of a sample that does not exist, the typed 7.25 behind a Total of
    # 100.00, and the sample nobody analysed (a notice). No finding about the notes, the units row, the
    # detection-limit row, the censored values, the QC rows or the QC sheet.
    assert [rule for rule, _ in found] == ["analysis-orphan", "analysis-total-disagrees", "sample-unanalysed"]
    orphan, total, unanalysed = (m for _, m in found)
    assert orphan.startswith("lab.xlsx, sheet 'Results', cell A13: sample id '00009' matches no sample")
    assert cell_value(root / "lab.xlsx", "Results", orphan) == 9  # the address is where the lab wrote it
    assert "cell M12" in total and "for sample 00003" in total
    assert cell_value(root / "lab.xlsx", "Results", total) == 100.0
    assert unanalysed == "sample 00004 has no analysis."
    notes = "\n".join(report.notes)
    how = "as [tables.analyses] header_row says" if header_row else "found by its column names"
    assert f"lab.xlsx, sheet 'Results': header read from row 7, {how}" in notes
    assert "rows 8, 9 under the header read as the units (wt%, %, mg/kg, ppb) and detection limits" in notes
    assert "3 quality-control rows (BLK, 2-DUP, STD-1) in rows 14, 15, 16 not read as samples" in notes
    assert "sheet 'QC' (quality control) not read as samples" in notes
    assert "4 sample ids made only of digits restored as [tables.analyses] id_width says (e.g. '1' read as '00001')" in notes


def test_lab_workbook_units_and_censored_values(tmp_path):
    table = load_project(lab_project(tmp_path, id_width=5)).tables["analyses"]
    assert table.data.sheet == "Results" and table.data.header_row == HEADER_ROW
    assert table.frame["Sample ID"].tolist() == ["00001", "00002", "00003", "00009"]
    assert table.data.lines == (10, 11, 12, 13)
    units = {a.column: (a.unit, a.unit_text, a.source) for a in analytes(table)}
    assert units["SiO2"] == ("wt%", "wt%", "units row")
    assert units["Total"] == ("wt%", "%", "units row")
    assert units["Cu"] == ("ppm", "mg/kg", "units row")  # 1 mg/kg = 10^-6 = 1 ppm (SI, from memory)
    assert units["Au"] == ("ppb", "ppb", "units row")
    mno = classify(table.frame["MnO"])
    assert mno.censored.tolist() == [True, False, False, False] and mno.limit[0] == pytest.approx(0.01)
    assert classify(table.frame["Au"]).censored.tolist() == [True, True, False, True]
    assert table.qc is not None and table.qc.index.tolist() == [14, 15, 16]
    assert table.qc["Sample ID"].tolist() == ["BLK", "2-DUP", "STD-1"]


def test_without_id_width_the_lost_zeros_are_reported_not_restored(tmp_path):
    report = archivist.check(lab_project(tmp_path))
    orphans = [f.message for f in report.findings if f.rule == "analysis-orphan"]
    assert "lab.xlsx, sheet 'Results', cell A10: sample id '1' matches no sample; probably 00001 (leading zeros lost)." in orphans
    assert len(orphans) == 4
    assert not any("restored" in n for n in report.notes)


def test_id_prefix_restores_the_number_a_lab_kept(tmp_path):
    root = lab_project(tmp_path, id_width=4, id_prefix="HV24-")
    table = load_project(root).tables["analyses"]
    assert table.frame["Sample ID"].tolist() == ["HV24-0001", "HV24-0002", "HV24-0003", "HV24-0009"]


def test_an_id_with_letters_is_never_changed(tmp_path):
    root = lab_project(tmp_path, id_width=5)
    wb = openpyxl.load_workbook(root / "lab.xlsx")
    wb["Results"]["A11"] = "S2"
    wb.save(root / "lab.xlsx")
    assert load_project(root).tables["analyses"].frame["Sample ID"].tolist() == ["00001", "S2", "00003", "00009"]


def test_qc_sheet_named_in_the_manifest_is_read(tmp_path):
    root = lab_project(tmp_path, sheet="QC", qc_pattern="")
    table = load_project(root).tables["analyses"]
    assert table.data.sheet == "QC" and table.frame["Sample ID"].tolist() == ["STD-1", "BLK"]


def test_qc_sheet_after_the_results_is_named_in_the_notes(tmp_path):
    root = lab_project(tmp_path, id_width=5)
    lab_workbook(root / "lab.xlsx", qc_sheet_first=False)
    project = load_project(root)
    assert project.tables["analyses"].data.sheet == "Results"
    assert any("sheet 'QC' (quality control) not read as samples" in n for n in project.notes)


def test_qc_pattern_of_the_mapper_and_none(tmp_path):
    own = load_project(lab_project(tmp_path, name="own", qc_pattern=r"^(BLK|STD-\d+)$")).tables["analyses"]
    assert own.frame["Sample ID"].tolist()[-1] == "2-DUP"  # a duplicate the pattern does not name is a sample
    assert any("as [tables.analyses] qc_pattern says" in n for n in load_project(lab_project(tmp_path, name="own2", qc_pattern="^BLK$")).notes)
    none = load_project(lab_project(tmp_path, name="none", qc_pattern="")).tables["analyses"]
    assert none.qc is None and len(none.frame) == 7


def test_qc_pattern_that_is_not_a_regular_expression_is_a_finding(tmp_path):
    report = archivist.check(lab_project(tmp_path, qc_pattern="(BLK"), rules=["manifest-invalid"])
    assert [f.message.split(" (")[0] for f in report.findings] == ["tables.analyses.qc_pattern: '(BLK' is not a regular expression"]


def test_header_row_past_the_end_is_one_finding(tmp_path):
    report = archivist.check(lab_project(tmp_path, header_row=400), only=["metadata"])
    messages = [f.message for f in report.findings if f.rule == "layer-unreadable"]
    assert messages == ["lab.xlsx, sheet 'Results': header_row = 400 is past the last row (16); give the row number of the "
                        "header as a spreadsheet program shows it."]


def test_two_rows_that_look_like_headers_are_not_guessed_between(tmp_path):
    root = lab_project(tmp_path)
    wb = openpyxl.load_workbook(root / "lab.xlsx")
    ws = wb["Results"]
    ws.append([])
    ws.append(["Sample ID", *OXIDES, "Total", "Cu", "Au"])  # a second batch with its own header, row 18
    wb.save(root / "lab.xlsx")
    project = load_project(root)
    assert project.tables["analyses"].data.header_row == 1
    assert any("rows 7, 18 each look like a header, so none was chosen" in n and "set [tables.analyses] header_row" in n
               for n in project.notes)
    edit_manifest(root, lambda m: m["tables"]["analyses"].update(header_row=7))
    assert load_project(root).tables["analyses"].data.header_row == 7


def test_lab_csv_with_notes_units_row_and_one_unit_for_the_rest(tmp_path):
    """A CSV export: notes padded with commas, a header in line 4, a units row that gives only some units."""
    root = tiny_project(tmp_path, samples=tiny_samples(), manifest={"tables": {"analyses": {
        "path": "lab.csv", "sample_field": "Sample", "unit": "ppm"}}})
    (root / "lab.csv").write_text(
        "Brackwater Analytical,,,\nJob BW-24-119,,,\n,,,\n"
        "Sample,Cu,Zn,Pb,87Sr/86Sr\n"
        "Units,,ppb,,\n"
        "S-0001,<0.5,12,3,0.7051\n"
        "S-0002,14,9,<2,0.7062\n"
        "DUP S-0002,15,9,<2,0.7061\n",
        encoding="utf-8",
    )
    project = load_project(root)
    table = project.tables["analyses"]
    assert table.data.header_row == 4 and table.frame["Sample"].tolist() == ["S-0001", "S-0002"]
    units = {a.column: (a.unit, a.source) for a in analytes(table)}
    assert units == {"Cu": ("ppm", "manifest"), "Zn": ("ppb", "units row"), "Pb": ("ppm", "manifest"),
                     "87Sr/86Sr": ("ratio", "implied")}  # a ratio never takes the unit of the rest
    assert table.data.cell(1, "Sample") == "lab.csv, row 7, column 'Sample'"
    report = archivist.check(root)
    assert table_findings(report) == []
    assert any("lab.csv: row 5 under the header read as the units (ppb)" in n for n in report.notes)


def test_unknown_word_in_the_units_row_is_a_unit_question(tmp_path):
    root = lab_project(tmp_path, id_width=5)
    wb = openpyxl.load_workbook(root / "lab.xlsx")
    wb["Results"]["N8"] = "cps"  # Cu
    wb["Results"]["B8"] = "ppm"  # SiO2: the units row may disagree with the header only where the header has a unit
    wb.save(root / "lab.xlsx")
    report = archivist.check(root, rules=["analysis-unit-undeclared"])
    assert [f.message for f in report.findings] == [
        "lab.xlsx, sheet 'Results', cell N7: analyte column 'Cu': 'cps' in the units row is not a unit archivist knows."]


def test_packed_lab_workbook_checks_the_same(tmp_path, monkeypatch):
    """The package's analyses CSV has its header in row 1 and no units row: its manifest carries the units instead."""
    root = lab_project(tmp_path, id_width=5, header_row=HEADER_ROW)
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    result = pack(root, tmp_path / "out", allow_errors=True)
    data = result.path / "data"
    again = archivist.check(data)
    assert [r for r, _ in table_findings(again)] == ["analysis-orphan", "analysis-total-disagrees", "sample-unanalysed"]
    manifest = tomllib.loads((data / "archivist.toml").read_text(encoding="utf-8"))["tables"]["analyses"]
    assert "header_row" not in manifest and manifest["units"]["Cu"] == "mg/kg" and manifest["units"]["SiO2"] == "wt%"
    packed = pd.read_csv(data / "tables" / "analyses.csv", dtype=str, keep_default_na=False)
    assert packed["Sample ID"].tolist() == ["00001", "00002", "00003", "00009"]
    assert packed.loc[0, "MnO"] == "<0.01"
    assert (data / "source" / "lab.xlsx").read_bytes() == (root / "lab.xlsx").read_bytes()


# ---------------------------------------------------------------- the mapper's legend

MAPPER_HEADERS = {"unit": "CODE", "name": "Unit_Name", "description": "Description", "age": "Age",
                  "min_age_ma": "Top age (Ma)", "max_age_ma": "BaseAgeMa", "order": "Legend position",
                  "colour": "Color", "lithology": "Rock type", "kind": "Type"}


def test_legend_workbook_with_a_title_and_the_mappers_headers(tmp_path):
    plain = archivist.check(tiny_project(tmp_path, name="plain"))
    root = tiny_project(tmp_path, name="mapper", manifest={"tables": {"legend": {"path": "legend.xlsx"}}})
    frame = tiny_legend().rename(columns=MAPPER_HEADERS)
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Legend"
    ws.append(["Hollow Vale geological map: legend"])
    ws.append([])
    ws.append(list(frame.columns))
    for row in frame.itertuples(index=False):
        ws.append(list(row))
    wb.save(root / "legend.xlsx")
    project = load_project(root)
    table = project.tables["legend"]
    assert table.data.header_row == 3
    assert legend_vocab.columns(table) == MAPPER_HEADERS
    assert any("legend.xlsx, sheet 'Legend': header read from row 3" in n for n in project.notes)
    assert sorted(f.rule for f in archivist.check(root).findings) == sorted(f.rule for f in plain.findings)


def test_legend_header_row_and_field_keys_name_every_column(tmp_path):
    frame = tiny_legend().rename(columns={"unit": "Key", "name": "Label", "colour": "Paint"})
    root = tiny_project(tmp_path, legend=frame, manifest={"tables": {"legend": {
        "unit_field": "Key", "name_field": "Label", "colour_field": "Paint", "header_row": 2}}})
    text = (root / "legend.csv").read_text(encoding="utf-8")
    (root / "legend.csv").write_text("Legend of an invented map,,,,,,,,,\n" + text, encoding="utf-8")
    table = load_project(root).tables["legend"]
    assert table.data.header_row == 2
    assert (legend_vocab.column(table, "unit"), legend_vocab.column(table, "colour")) == ("Key", "Paint")
    assert table.data.cell(0, "Key") == "legend.csv, row 3, column 'Key'"
