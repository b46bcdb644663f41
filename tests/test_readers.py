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


# ---------------------------------------------------------------- hostile XML, unreadable files, data kept whole

import builtins
import io
import zipfile

from click.testing import CliRunner

from archivist.cli import cli
from archivist.errors import ArchivistError
from archivist.readers import workbook_xml_problem
from builders import edit_manifest, tiny_project, tree_digest, write_xlsx

# The classic "billion laughs" shape (nested internal entities; Python's XML documentation, "XML vulnerabilities"),
# kept small so that a parser that expands it still finishes, and an external entity naming a local file.
NESTED = (
    '<!DOCTYPE d [<!ENTITY a "lol"><!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">'
    '<!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;"><!ENTITY d "&c;&c;&c;&c;&c;&c;&c;&c;&c;&c;">]>'
)
EXTERNAL = '<!DOCTYPE d [<!ENTITY d SYSTEM "file:///etc/hostname">]>'


def hostile_workbook(path, part, doctype):
    """A workbook written by openpyxl, then a DOCTYPE put in front of one XML part and '&d;' in one cell."""
    plain = path.with_name("plain-" + path.name)
    write_xlsx(plain, "legend", ["unit", "name"], [["A", "Alder"], ["B", "Birch"]])
    with zipfile.ZipFile(plain) as zin, zipfile.ZipFile(path, "w") as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            if info.filename == part:
                text = data.decode("utf-8")
                if text.startswith("<?xml"):
                    text = text[text.index("?>") + 2 :]
                data = ('<?xml version="1.0"?>' + doctype + text.replace("Alder", "&d;")).encode("utf-8")
            zout.writestr(info, data)
    plain.unlink()
    return path


@pytest.mark.parametrize("part", ["xl/worksheets/sheet1.xml", "xl/workbook.xml", "[Content_Types].xml"])
@pytest.mark.parametrize("doctype", [NESTED, EXTERNAL], ids=["nested", "external"])
def test_xml_declarations_in_a_workbook_are_refused(part, doctype, tmp_path):
    book = hostile_workbook(tmp_path / "legend.xlsx", part, doctype)
    assert part in workbook_xml_problem(book)
    with pytest.raises(ArchivistError) as caught:
        read_table(book, "legend.xlsx")
    assert str(caught.value).startswith("legend.xlsx: part ") and "\n" not in str(caught.value)


def test_plain_workbook_has_no_xml_problem(tmp_path):
    assert workbook_xml_problem(write_xlsx(tmp_path / "a.xlsx", "s", ["unit"], [["A"]])) is None


def test_openpyxl_parses_sheets_with_defusedxml():
    # The second fence: openpyxl switches to defusedxml when it is installed (openpyxl/xml/__init__.py, DEFUSEDXML).
    from openpyxl.xml import DEFUSEDXML

    assert DEFUSEDXML is True


def legend_project(tmp_path, table):
    root = tiny_project(tmp_path)
    return edit_manifest(root, lambda m: m["tables"]["legend"].update(path=table))


def run_cli(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.mark.parametrize("command", ["check", "pack"])
def test_cli_refuses_a_workbook_with_entities_in_one_line(command, tmp_path):
    root = legend_project(tmp_path, "legend.xlsx")
    hostile_workbook(root / "legend.xlsx", "xl/worksheets/sheet1.xml", NESTED)
    before = tree_digest(root)
    args = [command, root] + (["--out", tmp_path / "out"] if command == "pack" else [])
    result = run_cli(*args)
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output and "lollol" not in result.output
    assert "legend.xlsx" in result.output and "DTD or entities" in result.output
    assert tree_digest(root) == before


def _refuse_open(monkeypatch, target):
    """Make opening ``target`` fail as it does for a file without read permission (tests may run as root)."""
    real = io.open

    def guarded(file, *args, **kwargs):
        if str(file) == str(target):
            raise PermissionError(13, "Permission denied", str(file))
        return real(file, *args, **kwargs)

    monkeypatch.setattr(io, "open", guarded)
    monkeypatch.setattr(builtins, "open", guarded)


@pytest.mark.parametrize("table", ["legend.csv", "legend.xlsx"])
def test_unreadable_table_is_one_line_exit_2(table, tmp_path, monkeypatch):
    root = legend_project(tmp_path, table)
    if table.endswith(".xlsx"):
        write_xlsx(root / table, "legend", ["unit", "name"], [["A", "Alder"], ["B", "Birch"]])
    _refuse_open(monkeypatch, root / table)
    result = run_cli("check", root)
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    (line,) = [ln for ln in result.output.splitlines() if ln.strip()]
    assert table in line and "Permission denied" in line


@pytest.mark.parametrize("table", ["legend.csv", "legend.xlsx"])
def test_table_path_that_is_a_folder_is_one_line_exit_2(table, tmp_path):
    root = legend_project(tmp_path, table.replace("legend", "units-legend"))
    table = table.replace("legend", "units-legend")
    (root / table).mkdir()
    result = run_cli("check", root)
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    assert f"{table}: is a folder" in result.output


def test_blank_rows_keep_cell_references(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["sample_id", "SiO2"])
    ws.append(["A", 1.0])
    ws.append([None, None])
    ws.append(["B", 2.0])
    wb.save(tmp_path / "a.xlsx")
    data, _ = read_table(tmp_path / "a.xlsx", "a.xlsx")
    assert data.cell(1, "SiO2") == "a.xlsx, sheet 'Sheet', cell B4"


def test_unnamed_column_without_merge_is_named_by_its_letter(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["sample_id", None, "SiO2"])
    ws.append(["A", "field note", 1.0])
    wb.save(tmp_path / "a.xlsx")
    data, hits = read_table(tmp_path / "a.xlsx", "a.xlsx")
    assert list(data.frame.columns) == ["sample_id", "column B", "SiO2"]
    assert data.frame["column B"].tolist() == ["field note"]
    (hit,) = hits
    assert hit.rule == "column-unnamed" and "header cell B1 is empty" in hit.message
    assert data.cell(0, "column B") == "a.xlsx, sheet 'Sheet', cell B2"


def test_row_with_only_a_formula_is_kept(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["sample_id", "total"])
    ws.append(["A", 1.0])
    ws.append([None, "=1+1"])  # openpyxl stores no value for it
    wb.save(tmp_path / "a.xlsx")
    data, hits = read_table(tmp_path / "a.xlsx", "a.xlsx")
    assert len(data.frame) == 2
    (hit,) = hits
    assert hit.rule == "formula-value-missing" and "cells B3 " in hit.message


def test_audit_holds_a_workbook_with_entities_as_a_finding(tmp_path):
    # The same screen runs on an archive before openpyxl sees it: the workbook is not opened,
    # layer-unreadable names it, and the rest of the map is still audited.
    import archivist

    root = legend_project(tmp_path, "legend.xlsx")
    hostile_workbook(root / "legend.xlsx", "xl/worksheets/sheet1.xml", EXTERNAL)
    report = archivist.audit(root)
    held = [f for f in report.findings if f.rule == "layer-unreadable"]
    assert any("legend.xlsx" in f.message and "DTD or entities" in f.message for f in held), [f.message for f in report.findings]


# ---------------------------------------------------------------- the header row

from archivist.readers import choose_header  # noqa: E402

NOTES_THEN_HEADER = [("Lab report",), ("Job", "J-1"), (None, None), ("id", "SiO2"), ("S-1", 72.5)]


def test_header_is_the_first_row_unless_a_test_finds_one_other():
    is_header = lambda row: "SiO2" in row  # noqa: E731
    assert choose_header(NOTES_THEN_HEADER, "t")[:2] == (0, "first")
    assert choose_header(NOTES_THEN_HEADER, "t", looks_like_header=is_header)[:2] == (3, "found")
    assert choose_header(NOTES_THEN_HEADER[3:], "t", looks_like_header=is_header)[:2] == (0, "first")
    twice = NOTES_THEN_HEADER + [("id", "SiO2")]
    assert choose_header(twice, "t", looks_like_header=is_header)[:3] == (0, "first", (4, 6))
    assert choose_header(twice, "t", header_row=4, looks_like_header=is_header)[:2] == (3, "manifest")
    index, _, _, problem = choose_header(twice, "t", header_row=9)
    assert index is None and problem.rule == "layer-unreadable" and "header_row = 9 is past the last row (6)" in problem.message


def test_csv_header_below_notes_keeps_row_numbers(tmp_path):
    p = tmp_path / "lab.csv"
    p.write_text('Lab report,,\n"Job, with a comma",J-1,\n,,\nid,SiO2,MgO\nS-1,72.5,<0.01\n', encoding="utf-8")
    data, hits = read_table(p, "lab.csv", header_row=4)
    assert hits == [] and list(data.frame.columns) == ["id", "SiO2", "MgO"] and data.header_row == 4
    assert data.frame.loc[0, "MgO"] == "<0.01" and data.cell(0, "MgO") == "lab.csv, row 5, column 'MgO'"
    found, _ = read_table(p, "lab.csv", looks_like_header=lambda row: "SiO2" in row)
    assert found.header_how == "found" and found.frame.equals(data.frame)


def test_xlsx_header_below_notes_keeps_cell_addresses(tmp_path):
    p = tmp_path / "lab.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Results"
    for row in (["Lab report"], ["Job", "J-1"], [], ["id", "SiO2"], ["S-1", "<0.01"]):
        ws.append(row)
    qc = wb.create_sheet("QC", 0)  # first in the workbook
    qc.append(["id", "SiO2"])
    wb.save(p)
    data, hits = read_table(p, "lab.xlsx", header_row=4, skip_sheet=lambda name: name == "QC")
    assert hits == [] and data.sheet == "Results" and data.sheets == ("QC", "Results")
    assert data.cell(0, "SiO2") == "lab.xlsx, sheet 'Results', cell B5"
    assert openpyxl.load_workbook(p)["Results"]["B5"].value == "<0.01"  # the address, as openpyxl reads it
