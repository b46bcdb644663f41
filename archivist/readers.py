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
from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd

from .errors import ArchivistError
from .model import Hit

VECTOR_SUFFIXES = {".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gdb", ".gml", ".kml", ".sqlite"}
TABLE_SUFFIXES = {".csv", ".tsv", ".txt", ".xlsx", ".xlsm"}
# How far down a sheet a header row is looked for when the first rows are a block of
# notes (a laboratory's name, job number, dates) above it.
HEADER_SEARCH_ROWS = 60

HeaderTest = Callable[[Sequence[Any]], bool]
"""Says whether a row of cells is the table's header (e.g. it holds analyte names)."""


@dataclass(frozen=True)
class TableData:
    """A table as read: all cells as Python objects, plus where each came from."""

    frame: pd.DataFrame
    file: str
    sheet: str | None
    header_row: int  # 1-based row number of the header in the file or sheet
    letters: dict[str, str]  # column name -> spreadsheet column letter (XLSX only)
    lines: tuple[int, ...] = ()  # 1-based row in the file of each data row, where blank rows were skipped
    header_how: str = "first"  # "first" (first non-empty row), "manifest" (header_row) or "found" (by its names)
    header_candidates: tuple[int, ...] = ()  # rows that looked like a header when more than one did
    sheets: tuple[str, ...] = ()  # every sheet of the workbook (XLSX only)
    parts: tuple["TableData", ...] = ()  # a table read from several files: each file as read
    row_part: tuple[int, ...] = ()  # with parts: the index in ``parts`` of each data row's file

    def line(self, row: int) -> int:
        """The 1-based row in the file or sheet of data row ``row`` (0-based)."""
        if 0 <= row < len(self.lines):
            return self.lines[row]
        return self.header_row + 1 + row

    def all_lines(self) -> tuple[int, ...]:
        """The 1-based row in the file of every data row."""
        return tuple(self.line(i) for i in range(len(self.frame)))

    def cell(self, row: int, column: str) -> str:
        """Where the cell of data row ``row`` (0-based) and ``column`` lives, as a mapper would name it."""
        line = self.line(row)
        src = self.parts[self.row_part[row]] if self.parts and 0 <= row < len(self.row_part) else self
        if src.sheet is not None:
            return f"{src.file}, sheet '{src.sheet}', cell {src.letters.get(column, '?')}{line}"
        return f"{src.file}, row {line}, column '{column}'"


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


def _empty_cell(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def choose_header(
    rows: Sequence[Sequence[Any]], name: str, *, header_row: int | None = None, looks_like_header: HeaderTest | None = None
) -> tuple[int | None, str, tuple[int, ...], Hit | None]:
    """Which row of ``rows`` is the header: (0-based index or None when all are empty, how, candidates, problem).

    ``header_row`` (1-based, from the manifest) wins. Otherwise the first
    non-empty row is the header, unless ``looks_like_header`` says it is not
    and exactly one other row among the first :data:`HEADER_SEARCH_ROWS` says
    it is ("found"); when several rows look like a header, the choice is not
    made and their 1-based numbers come back as candidates.
    """
    if header_row is not None:
        if header_row > len(rows):
            return None, "manifest", (), Hit(
                f"{name}: header_row = {header_row} is past the last row ({len(rows)}); "
                "give the row number of the header as a spreadsheet program shows it.",
                layer=name,
                rule="layer-unreadable",
            )
        return header_row - 1, "manifest", (), None
    filled = [i for i, r in enumerate(rows) if not all(_empty_cell(v) for v in r)]
    if not filled:
        return None, "first", (), None
    first = filled[0]
    if looks_like_header is None or looks_like_header(rows[first]):
        return first, "first", (), None
    candidates = [i for i in filled if i < HEADER_SEARCH_ROWS and looks_like_header(rows[i])]
    if len(candidates) == 1:
        return candidates[0], "found", (), None
    return first, "first", tuple(i + 1 for i in candidates) if len(candidates) > 1 else (), None


def read_csv(
    path: Path, name: str, *, header_row: int | None = None, looks_like_header: HeaderTest | None = None
) -> tuple[TableData | None, list[Hit]]:
    """Read a CSV/TSV as text cells; the delimiter is sniffed (``,``, ``;`` or tab).

    The header is the first line, or the row :func:`choose_header` picks
    (lines above it, such as a laboratory's notes, are skipped).

    Raises
    ------
    ArchivistError
        The file cannot be read (a folder, no permission).
    """
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise _os_error(name, exc) from None
    text, hit = decode_utf8(raw, name)
    if text is None:
        return None, [hit] if hit is not None else []
    sample = text[:4096]
    delimiter = "\t" if path.suffix.lower() == ".tsv" else ","
    if path.suffix.lower() != ".tsv":
        try:
            delimiter = csv.Sniffer().sniff(sample, delimiters=",;\t").delimiter
        except csv.Error:
            delimiter = ","
    if not text.strip():
        return TableData(pd.DataFrame(dtype=object), name, None, 1, {}), []
    skip, how = 0, "first"
    candidates: tuple[int, ...] = ()
    if header_row is not None or looks_like_header is not None:
        reader = csv.reader(io.StringIO(text), delimiter=delimiter)
        rows: list[list[str]] = []
        starts: list[int] = []  # lines read before each row
        try:
            while header_row is not None or len(rows) < HEADER_SEARCH_ROWS:
                before = reader.line_num
                row = next(reader, None)
                if row is None:
                    break
                rows.append(row)
                starts.append(before)
                if header_row is not None and len(rows) >= header_row:
                    break
        except csv.Error as exc:
            return None, [Hit(f"{name} cannot be read as a table: {_one_line(exc)}.", layer=name, rule="layer-unreadable")]
        index, how, candidates, problem = choose_header(rows, name, header_row=header_row, looks_like_header=looks_like_header)
        if problem is not None:
            return None, [problem]
        if index is not None and index > 0:
            skip = starts[index]
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, sep=delimiter, skiprows=skip)
    except pd.errors.ParserError as exc:
        return None, [Hit(f"{name} cannot be read as a table: {' '.join(str(exc).split())}.", layer=name, rule="layer-unreadable")]
    except pd.errors.EmptyDataError:
        frame = pd.DataFrame(dtype=object)
    frame = frame.astype(object)
    frame.columns = [str(c).strip() for c in frame.columns]
    return TableData(frame, name, None, skip + 1, {}, header_how=how, header_candidates=candidates), []


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


def _os_error(name: str, exc: OSError) -> ArchivistError:
    """One line for a table file the system will not let us read (a folder, no permission...)."""
    if isinstance(exc, IsADirectoryError):
        return ArchivistError(f"{name}: is a folder, not a table file; point the manifest at the file itself")
    return ArchivistError(f"{name}: cannot be read: {exc.strerror or _one_line(exc)}")


def _defused(exc: BaseException) -> BaseException | None:
    """The defusedxml refusal behind ``exc`` (openpyxl wraps it in a ValueError), if there is one."""
    from defusedxml import DefusedXmlException

    seen = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        if isinstance(current, DefusedXmlException):
            return current
        current = current.__cause__ or current.__context__
    return None


XML_REFUSAL = (
    "its XML declares a DTD or entities, which archivist does not expand (they can make a small file grow without "
    "bound or read other files); save the workbook again from a spreadsheet program"
)


def workbook_xml_problem(path: Path) -> str | None:
    """Why the XML inside the workbook at ``path`` must not be parsed (a DTD or entity declaration), or None.

    Each XML part is read with defusedxml only up to its root element, which
    is as far as a document type declaration may appear (XML 1.0, section 2.8).
    A file that is not a zip, or XML that does not parse, is left to the
    spreadsheet reader to report. ``OSError`` (no permission, a folder) is raised.
    """
    import zipfile
    from xml.etree.ElementTree import ParseError

    from defusedxml import DefusedXmlException
    from defusedxml.ElementTree import iterparse

    try:
        zf = zipfile.ZipFile(path)
    except zipfile.BadZipFile:
        return None
    with zf:
        for info in zf.infolist():
            if not info.filename.lower().endswith((".xml", ".rels", ".vml")):
                continue
            try:
                with zf.open(info) as fh:
                    for _ in iterparse(fh, events=("start",), forbid_dtd=True):
                        break
            except DefusedXmlException:
                return f"part '{info.filename}': {XML_REFUSAL}"
            except (ParseError, zipfile.BadZipFile, EOFError, RuntimeError, NotImplementedError):
                continue  # broken or encrypted: openpyxl says so when it reads the workbook
    return None


def _is_formula(value: Any) -> bool:
    """A cell as openpyxl gives it without ``data_only``: a formula is ``"=..."`` or an array/data-table formula object."""
    if isinstance(value, str):
        return value.startswith("=") and len(value) > 1
    return type(value).__name__ in ("ArrayFormula", "DataTableFormula")


def cell_ranges(column: str, rows: list[int], limit: int = 8) -> str:
    """Rows of one column as spreadsheet ranges: ``D2:D34, D40``; at most ``limit`` ranges, then a count."""
    runs: list[tuple[int, int]] = []
    for r in rows:
        if runs and r == runs[-1][1] + 1:
            runs[-1] = (runs[-1][0], r)
        else:
            runs.append((r, r))
    parts = [f"{column}{a}" if a == b else f"{column}{a}:{column}{b}" for a, b in runs[:limit]]
    if len(runs) > limit:
        parts.append(f"and {len(runs) - limit} more ranges")
    return ", ".join(parts)


def spreadsheet_errors() -> tuple[type[BaseException], ...]:
    """What openpyxl raises for a workbook it cannot read: a broken zip, a missing or malformed part.

    From openpyxl's reader (``openpyxl/reader/excel.py``, ``openpyxl/xml``):
    ``InvalidFileException`` and ``BadZipFile`` for the container, ``KeyError``
    for a part the workbook lists but lacks, ``ParseError`` for XML that is
    not well formed, and ``ValueError``/``TypeError``/``AttributeError``/
    ``IndexError`` from parts whose content is not what the format says
    (defusedxml's refusals are ValueErrors too).
    """
    import xml.etree.ElementTree as ET
    import zipfile
    import zlib

    from openpyxl.utils.exceptions import InvalidFileException

    return (InvalidFileException, zipfile.BadZipFile, zlib.error, EOFError, KeyError, ET.ParseError,
            ValueError, TypeError, AttributeError, IndexError)


def _load_rows(path: Path, name: str, sheet: str | None, data_only: bool, skip_sheet: Callable[[str], bool] | None = None):
    """((rows as tuples, sheet title, sheet names), hits) or (None, hits); refusals and OS errors raise ArchivistError.

    Without ``sheet``, the first sheet that ``skip_sheet`` does not refuse is read (the first sheet when it refuses all).
    """
    import openpyxl

    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=data_only)
    except OSError as exc:
        raise _os_error(name, exc) from None
    except spreadsheet_errors() as exc:
        if _defused(exc) is not None:
            raise ArchivistError(f"{name}: {XML_REFUSAL}") from None
        return None, [Hit(f"{name} cannot be read as a spreadsheet: {_one_line(exc)}.", layer=name, rule="layer-unreadable")]
    try:
        if sheet is None:
            kept = [w for w in wb.worksheets if skip_sheet is None or not skip_sheet(w.title)]
            ws = (kept or wb.worksheets)[0]
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
        try:
            rows = [tuple(r) for r in ws.iter_rows(values_only=True)]
        except OSError as exc:
            raise _os_error(name, exc) from None
        except spreadsheet_errors() as exc:  # the sheet's XML is broken
            if _defused(exc) is not None:
                raise ArchivistError(f"{name}: {XML_REFUSAL}") from None
            return None, [Hit(f"{name}, sheet '{ws.title}' cannot be read: {_one_line(exc)}.", layer=name, rule="layer-unreadable")]
        return (rows, ws.title, tuple(wb.sheetnames)), []
    finally:
        wb.close()


def _merged_headers(path: Path, title: str, header_row: int) -> dict[int, tuple[str, str]]:
    """0-based column -> (merged range, top-left value) for header cells covered by a merged cell.

    openpyxl does not read merged ranges in read-only mode, so the sheet is
    opened once more in full; this runs only when a column has data but no header.
    """
    import openpyxl

    wb = openpyxl.load_workbook(path, data_only=True)
    try:
        ws = wb[title]
        out: dict[int, tuple[str, str]] = {}
        for rng in ws.merged_cells.ranges:
            if not (rng.min_row <= header_row <= rng.max_row):
                continue
            top = ws.cell(row=rng.min_row, column=rng.min_col).value
            for col in range(rng.min_col, rng.max_col + 1):
                out[col - 1] = (rng.coord, "" if top is None else str(top).strip())
        return out
    finally:
        wb.close()


def read_xlsx(
    path: Path,
    name: str,
    sheet: str | None,
    *,
    header_row: int | None = None,
    looks_like_header: HeaderTest | None = None,
    skip_sheet: Callable[[str], bool] | None = None,
) -> tuple[TableData | None, list[Hit]]:
    """Read one sheet: the header row is chosen by :func:`choose_header` (by default the first non-empty row);
    every column with a header or data is kept, the rows above the header are not read.

    Without ``sheet``, the first sheet ``skip_sheet`` does not refuse is read.

    Hits: ``column-unnamed`` for a column with data but no header text (it is
    named after its merged header or its letter), ``formula-value-missing``
    for formula cells without a stored value (they read as empty).

    Raises
    ------
    ArchivistError
        The file cannot be read (a folder, no permission) or its XML declares a DTD or entities.
    """
    from openpyxl.utils import get_column_letter

    refusal = workbook_xml_problem(path) if path.is_file() else None
    if refusal:
        raise ArchivistError(f"{name}: {refusal}")
    loaded, hits = _load_rows(path, name, sheet, data_only=True, skip_sheet=skip_sheet)
    if loaded is None:
        return None, hits
    grid, title, sheets = loaded
    width = max((len(r) for r in grid), default=0)
    rows = [tuple(r) + (None,) * (width - len(r)) for r in grid]
    empty = _empty_cell
    where = f"{name}, sheet '{title}'"
    start, how, candidates, problem = choose_header(rows, where, header_row=header_row, looks_like_header=looks_like_header)
    if problem is not None:
        return None, [problem]
    if start is None:
        return TableData(pd.DataFrame(), name, title, 1, {}, sheets=sheets), []
    header_row = start + 1
    header, body = rows[start], rows[start + 1 :]

    problems: list[Hit] = []
    formulas: dict[int, list[int]] = {}  # column -> 1-based rows of formulas with no stored value
    if any(v is None for r in rows[start:] for v in r):
        raw, _ = _load_rows(path, name, title, data_only=False)
        if raw is not None:
            for i, r in enumerate(raw[0][start:], start=start):
                for j, v in enumerate(r):
                    if j < width and rows[i][j] is None and _is_formula(v):
                        formulas.setdefault(j, []).append(i + 1)
    if formulas:
        where = ", ".join(cell_ranges(get_column_letter(j + 1), formulas[j]) for j in sorted(formulas))
        problems.append(
            Hit(
                f"{name}, sheet '{title}': cells {where} hold formulas with no stored value, so they read as empty; "
                "open and save the workbook in a spreadsheet program so the values are stored.",
                layer=name,
                rule="formula-value-missing",
            )
        )

    has_data = [any(not empty(r[j]) for r in body) or j in formulas for j in range(width)]
    keep = [j for j in range(width) if not empty(header[j]) or has_data[j]]
    unnamed = [j for j in keep if empty(header[j])]
    merged = _merged_headers(path, title, header_row) if unnamed else {}
    columns: list[str] = []
    used = {str(header[j]).strip() for j in keep if not empty(header[j])}
    for j in keep:
        if not empty(header[j]):
            columns.append(str(header[j]).strip())
            continue
        letter = get_column_letter(j + 1)
        rng, top = merged.get(j, ("", ""))
        base = f"{top}, column {letter}" if top else f"column {letter}"
        label, n = base, 2
        while label in used:
            label, n = f"{base} {n}", n + 1
        used.add(label)
        columns.append(label)
        why = f"its header cell {letter}{header_row} is covered by the merged cell {rng} ('{top}')" if rng else f"its header cell {letter}{header_row} is empty"
        problems.append(
            Hit(
                f"{name}, sheet '{title}': column {letter} holds data but has no header of its own ({why}); "
                f"it is read and packed as '{label}'. Give every column a header in one cell.",
                layer=name,
                rule="column-unnamed",
            )
        )
    data, lines = [], []
    for i, row in enumerate(body, start=header_row + 1):
        cells = [row[j] for j in keep]
        if all(empty(v) for v in cells) and not any(i in formulas.get(j, ()) for j in keep):
            continue
        data.append(cells)
        lines.append(i)
    frame = pd.DataFrame(data, columns=columns, dtype=object)
    letters = {c: get_column_letter(j + 1) for c, j in zip(columns, keep)}
    return TableData(frame, name, title, header_row, letters, tuple(lines), how, candidates, sheets), problems


def read_table(
    path: Path,
    name: str,
    sheet: str | None = None,
    *,
    header_row: int | None = None,
    looks_like_header: HeaderTest | None = None,
    skip_sheet: Callable[[str], bool] | None = None,
) -> tuple[TableData | None, list[Hit]]:
    """Read a CSV/TSV or XLSX table. Returns (table or None, hits).

    ``header_row`` (1-based) names the header row; else ``looks_like_header``
    may find it below a block of notes (:func:`choose_header`). Without
    ``sheet``, the first sheet ``skip_sheet`` does not refuse is read.

    Raises
    ------
    ArchivistError
        The file cannot be read at all (a folder, no permission), or a
        workbook's XML declares a DTD or entities; one line naming the file.
    """
    suffix = path.suffix.lower()
    try:
        if suffix in (".xlsx", ".xlsm"):
            return read_xlsx(path, name, sheet, header_row=header_row, looks_like_header=looks_like_header, skip_sheet=skip_sheet)
        if suffix == ".xls":
            return None, [Hit(f"{name}: the old binary .xls format is not read; save it as .xlsx or CSV.", layer=name, rule="layer-unreadable")]
        return read_csv(path, name, header_row=header_row, looks_like_header=looks_like_header)
    except OSError as exc:
        raise _os_error(name, exc) from None
