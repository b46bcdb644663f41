"""Readers: identifiers stay text, encodings are named, cells are located."""


import numpy as np
import openpyxl
import pandas as pd
import pytest

from archivist.readers import as_text, read_table, text_column


@pytest.mark.parametrize("value, text", [("007", "007"), (7, "7"), (7.0, "7"), (7.25, "7.25"), (None, ""), (float("nan"), ""), (np.int64(12), "12")])
def test_as_text(value, text):
    assert as_text(value) == text


def test_integer_column_as_text():
    assert list(text_column(pd.Series([1, 20, 300]))) == ["1", "20", "300"]


def test_csv_keeps_leading_zeros_and_tolerates_bom(tmp_path):
    p = tmp_path / "t.csv"
    p.write_bytes("\ufeffsample_id,value\n007,1.5\n0100,NA\n".encode("utf-8"))
    data, hits = read_table(p, "t.csv")
    assert hits == []
    assert list(data.frame.columns) == ["sample_id", "value"]
    assert list(data.frame["sample_id"]) == ["007", "0100"]
    assert list(data.frame["value"]) == ["1.5", "NA"]  # "NA" is text, not a missing value
    assert data.cell(1, "value") == "t.csv, row 3, column 'value'"


def test_semicolon_csv(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("unit;name\nA;Alder\n", encoding="utf-8")
    data, _ = read_table(p, "t.csv")
    assert list(data.frame.columns) == ["unit", "name"]


def test_non_utf8_names_offset_and_line(tmp_path):
    p = tmp_path / "t.csv"
    raw = "unit,name\nA,Gneiß\n".encode("cp1252")
    p.write_bytes(raw)
    data, hits = read_table(p, "t.csv")
    assert data is None
    (hit,) = hits
    assert hit.rule == "table-not-utf8"
    assert f"offset {raw.index(0xDF)}" in hit.message and "line 2" in hit.message


def test_xlsx_cells_and_text_ids(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "majors"
    ws.append(["sample_id", "SiO2 (wt%)"])
    ws.append(["007", 51.2])
    ws.append([8, "<0.01"])
    ws.append([None, None])  # blank rows are skipped
    ws.append(["009", "#N/A"])
    wb.save(tmp_path / "a.xlsx")
    data, hits = read_table(tmp_path / "a.xlsx", "a.xlsx", "majors")
    assert hits == []
    assert list(text_column(data.frame["sample_id"])) == ["007", "8", "009"]
    assert data.frame["SiO2 (wt%)"].tolist() == [51.2, "<0.01", "#N/A"]
    assert data.cell(0, "SiO2 (wt%)") == "a.xlsx, sheet 'majors', cell B2"


def test_xlsx_missing_sheet(tmp_path):
    wb = openpyxl.Workbook()
    wb.active.title = "majors"
    wb.save(tmp_path / "a.xlsx")
    data, hits = read_table(tmp_path / "a.xlsx", "a.xlsx", "traces")
    assert data is None and hits[0].rule == "layer-missing" and "traces" in hits[0].message


def test_empty_csv_is_an_empty_table(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("", encoding="utf-8")
    data, hits = read_table(p, "t.csv")
    assert hits == [] and data.frame.empty


def test_malformed_csv_is_a_finding(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text('unit,name\nA,"unclosed\n', encoding="utf-8")
    data, hits = read_table(p, "t.csv")
    assert data is None and hits[0].rule == "layer-unreadable" and "t.csv" in hits[0].message
