"""Tables as UTF-8 CSV text with a Frictionless Table Schema for each.

Every cell is written as text the way Table Schema reads it back
(Frictionless Table Schema, "Field types"): integers without a decimal
point, numbers in the shortest form that reads back the same float, dates
``YYYY-MM-DD``, datetimes ``YYYY-MM-DDThh:mm:ss``, booleans ``true``/``false``,
a missing value as an empty cell. Identifiers stay text (``007`` stays
``007``). A column's type is taken from the layer's own field type when the
GIS stored one, else inferred from the cells.

Analyte columns keep the laboratory's readings exactly as written
(``<0.01``, ``<.01``, ``< 5 ppm``, ``<1e-3``, ``bdl``, ``b.d.l.``, ``tr``,
``trace``, ``n.d.``, ``n.a.``, ``-``, empty) and are still typed ``number``
(or ``integer``): each reading that is not a plain number is listed in the
field's own ``missingValues`` with a ``label`` saying what it means, so a
Table Schema reader gets every plain value as a number and these cells as
missing (Frictionless Table Schema v2, "missingValues" at field level
replaces the schema-level list; objects with ``value`` and ``label``). The
custom field property ``censoring`` gives the same readings for a program:
``{"value": "<0.01", "kind": "below-detection-limit", "limit": 0.01}``
(kinds ``below-detection-limit``, ``above-upper-limit``, ``trace``,
``not-detected``), and the field's description says how "n.d." was read
(``[tables.analyses] nd_means``). An analyte column holding anything else
(a word, a spreadsheet error, a date) stays ``string``, cells as written.
Other columns that mix numbers with ``<0.01`` stay ``string`` too.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass, field
from typing import AbstractSet, Any

import numpy as np
import pandas as pd

from ..readers import as_text
from ..vocab.analytes import BELOW_LIMIT, ND_MEANINGS, ColumnUnit, canonical_unit, classify, column_unit

INTEGER = re.compile(r"^[+-]?(?:0|[1-9]\d*)$")
NUMBER = re.compile(r"^[+-]?(?:(?:0|[1-9]\d*)(?:\.\d+)?|\.\d+)(?:[eE][+-]?\d+)?$")
DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
DATETIME = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(?:\.\d+)?(?:Z|[+-]\d{2}:\d{2})?$")


@dataclass
class TextTable:
    """A table ready to write: text cells, Table Schema fields and keys."""

    name: str
    frame: pd.DataFrame
    fields: list[dict[str, Any]]
    primary_key: list[str] = field(default_factory=list)
    foreign_keys: list[dict[str, Any]] = field(default_factory=list)
    title: str = ""
    description: str = ""
    readings: bool = False  # some analyte column keeps laboratory readings (censored, not analysed) as written
    nd: bool = False  # some analyte column holds "n.d." cells
    nd_text: str = ""  # how they were read (:func:`nd_statement`)

    def readings_statement(self) -> str:
        """One or two sentences for the table's description: readings kept as written, and how "n.d." was read."""
        if not self.readings:
            return ""
        out = "Laboratory readings that are not plain numbers are kept as written (see each column's missingValues)."
        return out + (" " + self.nd_text if self.nd else "")

    def schema(self) -> dict[str, Any]:
        out: dict[str, Any] = {"fields": self.fields, "missingValues": [""]}
        if self.primary_key:
            out["primaryKey"] = list(self.primary_key)
        if self.foreign_keys:
            out["foreignKeys"] = self.foreign_keys
        return out

    def has(self, column: str | None) -> bool:
        return column is not None and column in self.frame.columns


def _cell_text(value: Any) -> str:
    if isinstance(value, bool) or isinstance(value, np.bool_):
        return "true" if value else "false"
    if isinstance(value, dt.datetime):
        return value.isoformat(timespec="seconds") if value.microsecond == 0 else value.isoformat()
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    if value is pd.NA or value is pd.NaT:
        return ""
    return as_text(value)


def _infer(texts: pd.Series) -> tuple[str, bool]:
    """(Table Schema type, holds below-detection-limit values) of a text column."""
    values = texts[texts != ""]
    if values.empty:
        return "string", False
    if values.isin(["true", "false"]).all():
        return "boolean", False
    if values.str.match(INTEGER).all():
        return "integer", False
    numeric = values.str.match(NUMBER)
    if numeric.all():
        return "number", False
    if values.str.match(DATE).all():
        return "date", False
    if values.str.match(DATETIME).all():
        return "datetime", False
    censored = values.str.match(BELOW_LIMIT)
    if (numeric | censored).all() and censored.any():
        return "string", True
    return "string", False


def _datetime_text(series: pd.Series) -> tuple[pd.Series, str]:
    s = series
    if getattr(s.dt, "tz", None) is not None:
        s = s.dt.tz_convert("UTC")
        suffix = "Z"
    else:
        suffix = ""
    present = s.notna()
    midnight = (s[present].dt.hour == 0) & (s[present].dt.minute == 0) & (s[present].dt.second == 0) & (s[present].dt.microsecond == 0)
    if not suffix and bool(midnight.all()):
        return s.dt.strftime("%Y-%m-%d").where(present, ""), "date"
    return (s.dt.strftime("%Y-%m-%dT%H:%M:%S") + suffix).where(present, ""), "datetime"


def column_text(series: pd.Series, *, identifier: bool = False) -> tuple[pd.Series, str, bool]:
    """A column as text cells, its Table Schema type, and whether it holds ``<limit`` values."""
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype):
        out = series.map({True: "true", False: "false"}).fillna("").astype(object)
        return out, ("string" if identifier else "boolean"), False
    if pd.api.types.is_integer_dtype(dtype):
        present = series.notna()
        out = series.astype("Int64").astype(str).where(present, "").astype(object)
        return out, ("string" if identifier else "integer"), False
    if pd.api.types.is_float_dtype(dtype):
        present = series.notna()
        values = series.to_numpy(dtype=float, na_value=np.nan)
        if identifier:
            out = pd.Series([as_text(v) for v in values], index=series.index, dtype=object)
            return out, "string", False
        out = pd.Series(values.astype(str).astype(object), index=series.index)
        return out.where(present, "").astype(object), "number", False
    if pd.api.types.is_datetime64_any_dtype(dtype):
        out, kind = _datetime_text(series)
        return out.astype(object), ("string" if identifier else kind), False
    if isinstance(dtype, pd.StringDtype) or pd.api.types.is_string_dtype(dtype) and not pd.api.types.is_object_dtype(dtype):
        return series.astype(object).where(series.notna(), "").astype(object), "string", False
    out = pd.Series([_cell_text(v) for v in series.to_numpy(dtype=object)], index=series.index, dtype=object)
    if identifier:
        return out, "string", False
    kind, censored = _infer(out.astype(str))
    if kind == "datetime" and out[out != ""].str.endswith("T00:00:00").all():
        out = out.where(out == "", out.str.slice(0, 10))
        kind = "date"
    return out, kind, censored


# A plain value of an analyte column: the lexical form of a Table Schema number (XML Schema decimal with an
# optional exponent; Frictionless Table Schema, "Field types: number"). "5." and "007" are numbers here.
DECIMAL = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")
# The limit in a censored reading: "<0.01", "< 5 ppm", "<1e-3", ">10000", "≤ .5" (the unit, if any, after it).
_LIMIT = re.compile(r"^\s*([<>≤≥])\s*=?\s*((?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")
_TRACE = re.compile(r"^\s*(?:tr\.?|traces?)\s*$", re.IGNORECASE)
_NOT_DETECTED_WORDS = re.compile(r"^\s*not\s+detected\s*$", re.IGNORECASE)


def nd_statement(nd_means: str, declared: bool) -> str:
    """How "n.d." cells were read, and on whose word: the same wording as the check's note."""
    meaning = "not detected (below the detection limit)" if nd_means == "not-detected" else "not determined (not analysed)"
    how = (
        "as [tables.analyses] nd_means says"
        if declared
        else "by default (some laboratories mean not determined: [tables.analyses] nd_means says which)"
    )
    return f"'n.d.' is read as {meaning}, {how}."


@dataclass(frozen=True)
class Readings:
    """An analyte column's cells that are not plain numbers, as Table Schema describes them."""

    kind: str  # "number" or "integer": the type of the plain values
    missing_values: list[dict[str, str]]  # field-level missingValues: every such reading as written, labelled
    censoring: list[dict[str, Any]]  # the censored readings for a program: value, kind, limit, unit
    has_nd: bool  # an "n.d." cell is among them


def _reading(token: str, censored: bool, not_analysed: bool, nd: bool, nd_means: str) -> tuple[str, dict[str, Any] | None]:
    """(label, censoring entry or None) of one distinct reading as written."""
    written = f"written '{token}'"
    if not token.strip():  # spaces only ("" itself is the first entry of every list)
        return f"not analysed (blank cell, {written})", None
    if nd:
        if nd_means == "not-detected":
            return f"not detected, below the detection limit ({written})", {"value": token, "kind": "not-detected"}
        return f"not determined, not analysed ({written})", None
    if not_analysed:
        return f"not analysed ({written})", None
    if not censored:
        raise ValueError(f"{token!r} is neither censored nor not analysed")
    m = _LIMIT.match(token)
    if m:
        limit = float(m[2])
        entry: dict[str, Any] = {"value": token, "limit": int(limit) if limit.is_integer() and abs(limit) < 2**53 else limit}
        unit = canonical_unit(m[3]) if m[3] else None
        if unit:
            entry["unit"] = unit
        if m[1] in "<≤":
            entry["kind"] = "below-detection-limit"
            what = f"below the detection limit of {m[2]}{' ' + m[3] if m[3] else ''}"
        else:
            entry["kind"] = "above-upper-limit"
            what = f"above the upper limit of the method, {m[2]}{' ' + m[3] if m[3] else ''}"
        return f"{what} ({written})", {k: entry[k] for k in ("value", "kind", "limit", "unit") if k in entry}
    if _TRACE.match(token):
        return f"trace: detected, too little to quantify ({written})", {"value": token, "kind": "trace"}
    if _NOT_DETECTED_WORDS.match(token):
        return f"not detected, below the detection limit ({written})", {"value": token, "kind": "not-detected"}
    if token.lstrip().startswith((">", "≥")):
        return f"above the upper limit of the method, limit not given ({written})", {"value": token, "kind": "above-upper-limit"}
    return f"below the detection limit, limit not given ({written})", {"value": token, "kind": "below-detection-limit"}


def analyte_readings(texts: pd.Series, nd_means: str = "not-detected") -> Readings | None:
    """The readings of one analyte column written as text, or None when it needs none or has other text.

    Cells are classified by :func:`archivist.vocab.analytes.classify` (the
    checks' own reading). A column qualifies when every cell is a plain
    number in Table Schema's lexical form, a censored reading, a
    not-analysed mark or empty, and at least one cell is not a plain number
    or empty. The readings are listed as written (``"< 0.01"`` and
    ``"<0.01"`` are two entries), empty first: a field-level
    ``missingValues`` replaces the schema-level ``[""]`` (Frictionless Table
    Schema v2), and the first entry is what a writer uses for null.
    """
    if nd_means not in ND_MEANINGS:
        raise ValueError(f"nd_means must be one of {', '.join(ND_MEANINGS)}, not {nd_means!r}")
    raw = texts.astype(object).where(texts.notna(), "").astype(str)
    cells = classify(raw, nd_means)
    plain = ~(cells.blank | cells.censored | cells.not_analysed)
    if cells.unreadable.any() or not (cells.censored | cells.not_analysed).any():
        return None
    values = raw[plain]
    if not values.str.match(DECIMAL).all():
        return None
    kind = "integer" if len(values) and values.str.match(INTEGER).all() else "number"
    others = pd.DataFrame(
        {"token": raw.to_numpy(dtype=object), "censored": cells.censored, "not_analysed": cells.not_analysed, "nd": cells.nd}
    )[~plain]
    distinct = others.drop_duplicates("token")
    missing: list[dict[str, str]] = [{"value": "", "label": "not analysed (empty cell)"}]
    censoring: list[dict[str, Any]] = []
    for token, censored, not_analysed, nd in distinct.itertuples(index=False):  # one per distinct reading
        if token == "":
            continue
        label, entry = _reading(token, bool(censored), bool(not_analysed), bool(nd), nd_means)
        missing.append({"value": token, "label": label})
        if entry is not None:
            censoring.append(entry)
    return Readings(kind, missing, censoring, bool(cells.nd.any()))


def text_table(
    name: str,
    frame: pd.DataFrame,
    *,
    identifiers: AbstractSet[str] = frozenset(),
    descriptions: dict[str, str] | None = None,
    units: dict[str, str] | None = None,
    header_units: bool = False,
    analyte_columns: AbstractSet[str] = frozenset(),
    nd_means: str = "not-detected",
    nd_declared: bool = False,
) -> TextTable:
    """Convert ``frame`` to text and describe each column as a Table Schema field.

    ``identifiers`` are columns kept as text; ``descriptions`` and ``units``
    give a column's description and unit; with ``header_units`` the unit a
    header carries (``SiO2 (wt%)``, ``Cu [ppm]``, ``FeOt_wt%``) is read as the
    checks read it (:func:`archivist.vocab.analytes.column_unit`): a total-iron
    mark such as ``(T)`` is never a unit, and the column is described as total
    iron. ``analyte_columns`` hold laboratory readings: censored and
    not-analysed cells are described by :func:`analyte_readings`, "n.d." read
    as ``nd_means`` says (``nd_declared``: the manifest said so).
    """
    descriptions = descriptions or {}
    units = units or {}
    cols: dict[str, pd.Series] = {}
    fields: list[dict[str, Any]] = []
    any_nd = False
    for column in frame.columns:
        col = str(column)
        text, kind, censored = column_text(frame[column], identifier=col in identifiers)
        cols[col] = text
        readings = None
        if col in analyte_columns and col not in identifiers and kind == "string":
            readings = analyte_readings(text, nd_means)
        spec: dict[str, Any] = {"name": col, "type": readings.kind if readings else kind}
        read = column_unit(col) if header_units else ColumnUnit(col, None, False)
        quantity = f"{read.quantity} (total iron)" if read.total_iron else read.quantity
        unit = units.get(col, read.unit)
        desc = descriptions.get(col)
        if unit and not desc:
            desc = f"{quantity}, in {unit}."
        elif read.total_iron and not desc:
            desc = f"{quantity}."
        if readings:
            desc = (desc + " " if desc else "") + (
                "Readings that are not plain numbers are kept as the laboratory wrote them; missingValues says what "
                "each means, censoring gives the kind and limit of the censored ones."
            )
            if readings.has_nd:
                desc += " " + nd_statement(nd_means, nd_declared)
                any_nd = True
        elif censored:
            desc = (desc + " " if desc else "") + "Values below the detection limit are written '<limit', as reported."
        if desc:
            spec["description"] = desc
        if unit:
            spec["unit"] = unit
        if readings:
            spec["missingValues"] = readings.missing_values
            if readings.censoring:
                spec["censoring"] = readings.censoring
        fields.append(spec)
    out = pd.DataFrame(cols, index=frame.index) if cols else pd.DataFrame(index=frame.index)
    table = TextTable(name=name, frame=out, fields=fields)
    table.readings = any("missingValues" in f for f in fields)
    table.nd = any_nd
    table.nd_text = nd_statement(nd_means, nd_declared)
    return table


def write_csv(table: TextTable, path) -> None:
    """UTF-8 CSV, comma-separated, ``\\n`` line ends, quotes only where needed (RFC 4180 quoting)."""
    table.frame.to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
