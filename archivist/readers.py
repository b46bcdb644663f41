"""Read vector layers and tables without ever writing to the project folder.

Identifiers stay text: a CSV cell ``007`` is ``"007"``; a number typed into an
identifier column of a spreadsheet becomes ``"7"``, never ``"7.0"``.
Problems with the data itself come back as hits; only what stops the run
raises.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .model import Hit

VECTOR_SUFFIXES = {".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gdb", ".gml", ".kml", ".sqlite"}
TABLE_SUFFIXES = {".csv", ".tsv", ".txt", ".xlsx", ".xlsm"}


@dataclass(frozen=True)
class TableData:
    """A table as read: all cells as Python objects, plus where each came from."""

    frame: pd.DataFrame
    file: str
    sheet: str | None
    header_row: int  # 1-based row number of the header in the file or sheet
    letters: dict[str, str]  # column name -> spreadsheet column letter (XLSX only)

    def cell(self, row: int, column: str) -> str:
        """Where the cell of data row ``row`` (0-based) and ``column`` lives, as a mapper would name it."""
        line = self.header_row + 1 + row
        if self.sheet is not None:
            return f"{self.file}, sheet '{self.sheet}', cell {self.letters.get(column, '?')}{line}"
        return f"{self.file}, row {line}, column '{column}'"


def as_text(value: Any) -> str:
    """An identifier as text: None/NaN -> "", 7 -> "7", 7.0 -> "7", "007" -> "007"."""
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        if value.is_integer():
            return str(int(value))
        return repr(value)
    if isinstance(value, (np.integer,)):
        return str(int(value))
    if isinstance(value, np.floating):
        return as_text(float(value))
    return str(value)


def text_column(series: pd.Series) -> np.ndarray:
    """A column as an object array of text; each distinct value is converted once."""
    if pd.api.types.is_integer_dtype(series.dtype):
        return series.astype("int64").astype(str).to_numpy(dtype=object)
    codes, uniques = pd.factorize(series.to_numpy(dtype=object), use_na_sentinel=True)
    texts = np.array([as_text(v) for v in uniques] + [""], dtype=object)  # code -1 (missing) -> ""
    return texts[codes]


def decode_utf8(raw: bytes, name: str) -> tuple[str | None, Hit | None]:
    """Decode UTF-8 (a BOM is tolerated). On failure, a hit naming the byte offset and line."""
    try:
        return raw.decode("utf-8-sig"), None
    except UnicodeDecodeError as exc:
        offset = exc.start
        line = raw[:offset].count(b"\n") + 1
        bad = raw[offset : offset + 1].hex().upper()
        return None, Hit(
            f"{name} is not UTF-8: byte 0x{bad} at offset {offset} (line {line}); save it as UTF-8.",
            layer=name,
            rule="table-not-utf8",
        )


def read_csv(path: Path, name: str) -> tuple[TableData | None, list[Hit]]:
    raw = path.read_bytes()
    text, hit = decode_utf8(raw, name)
    if hit is not None:
        return None, [hit]
    sample = text[:4096]
    delimiter = "\t" if path.suffix.lower() == ".tsv" else ","
    if path.suffix.lower() != ".tsv":
        try:
            delimiter = csv.Sniffer().sniff(sample, delimiters=",;\t").delimiter
        except csv.Error:
            delimiter = ","
    if not text.strip():
        return TableData(pd.DataFrame(dtype=object), name, None, 1, {}), []
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, sep=delimiter)
    except pd.errors.ParserError as exc:
        return None, [Hit(f"{name} cannot be read as a table: {' '.join(str(exc).split())}.", layer=name, rule="layer-unreadable")]
    frame = frame.astype(object)
    frame.columns = [str(c).strip() for c in frame.columns]
    return TableData(frame, name, None, 1, {}), []


def read_xlsx(path: Path, name: str, sheet: str | None) -> tuple[TableData | None, list[Hit]]:
    import openpyxl
    from openpyxl.utils import get_column_letter

    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many kinds for a broken file
        return None, [Hit(f"{name} cannot be read as a spreadsheet: {exc}.", layer=name, rule="layer-unreadable")]
    try:
        if sheet is None:
            ws = wb.worksheets[0]
        elif sheet in wb.sheetnames:
            ws = wb[sheet]
        else:
            return None, [
                Hit(
                    f"{name} has no sheet '{sheet}' (sheets: {', '.join(wb.sheetnames)}).",
                    layer=name,
                    rule="layer-missing",
                )
            ]
        rows = ws.iter_rows(values_only=True)
        header = None
        header_row = 0
        for header_row, row in enumerate(rows, start=1):
            if any(v not in (None, "") for v in row):
                header = row
                break
        if header is None:
            return TableData(pd.DataFrame(), name, ws.title, 1, {}), []
        keep = [i for i, v in enumerate(header) if v not in (None, "")]
        columns = [str(header[i]).strip() for i in keep]
        data = []
        for row in rows:
            cells = [row[i] if i < len(row) else None for i in keep]
            if all(v in (None, "") for v in cells):
                continue
            data.append(cells)
        frame = pd.DataFrame(data, columns=columns, dtype=object)
        letters = {c: get_column_letter(i + 1) for c, i in zip(columns, keep)}
        return TableData(frame, name, ws.title, header_row, letters), []
    finally:
        wb.close()


def read_table(path: Path, name: str, sheet: str | None = None) -> tuple[TableData | None, list[Hit]]:
    """Read a CSV/TSV or XLSX table. Returns (table or None, hits)."""
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm"):
        return read_xlsx(path, name, sheet)
    if suffix == ".xls":
        return None, [Hit(f"{name}: the old binary .xls format is not read; save it as .xlsx or CSV.", layer=name, rule="layer-unreadable")]
    return read_csv(path, name)
