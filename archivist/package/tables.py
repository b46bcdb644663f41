"""Tables as UTF-8 CSV text with a Frictionless Table Schema for each.

Every cell is written as text the way Table Schema reads it back
(Frictionless Table Schema, "Field types"): integers without a decimal
point, numbers in the shortest form that reads back the same float, dates
``YYYY-MM-DD``, datetimes ``YYYY-MM-DDThh:mm:ss``, booleans ``true``/``false``,
a missing value as an empty cell. Identifiers stay text (``007`` stays
``007``). A column's type is taken from the layer's own field type when the
GIS stored one, else inferred from the cells; a column that mixes numbers
with below-detection-limit values such as ``<0.01`` stays text, as written.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass, field
from typing import AbstractSet, Any

import numpy as np
import pandas as pd

from ..readers import as_text
from ..vocab.analytes import BELOW_LIMIT, ColumnUnit, column_unit

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


def text_table(
    name: str,
    frame: pd.DataFrame,
    *,
    identifiers: AbstractSet[str] = frozenset(),
    descriptions: dict[str, str] | None = None,
    units: dict[str, str] | None = None,
    header_units: bool = False,
) -> TextTable:
    """Convert ``frame`` to text and describe each column as a Table Schema field.

    ``identifiers`` are columns kept as text; ``descriptions`` and ``units``
    give a column's description and unit; with ``header_units`` the unit a
    header carries (``SiO2 (wt%)``, ``Cu [ppm]``, ``FeOt_wt%``) is read as the
    checks read it (:func:`archivist.vocab.analytes.column_unit`): a total-iron
    mark such as ``(T)`` is never a unit, and the column is described as total
    iron.
    """
    descriptions = descriptions or {}
    units = units or {}
    cols: dict[str, pd.Series] = {}
    fields: list[dict[str, Any]] = []
    for column in frame.columns:
        col = str(column)
        text, kind, censored = column_text(frame[column], identifier=col in identifiers)
        cols[col] = text
        spec: dict[str, Any] = {"name": col, "type": kind}
        read = column_unit(col) if header_units else ColumnUnit(col, None, False)
        quantity = f"{read.quantity} (total iron)" if read.total_iron else read.quantity
        unit = units.get(col, read.unit)
        desc = descriptions.get(col)
        if unit and not desc:
            desc = f"{quantity}, in {unit}."
        elif read.total_iron and not desc:
            desc = f"{quantity}."
        if censored:
            desc = (desc + " " if desc else "") + "Values below the detection limit are written '<limit', as reported."
        if desc:
            spec["description"] = desc
        if unit:
            spec["unit"] = unit
        fields.append(spec)
    out = pd.DataFrame(cols, index=frame.index) if cols else pd.DataFrame(index=frame.index)
    return TextTable(name=name, frame=out, fields=fields)


def write_csv(table: TextTable, path) -> None:
    """UTF-8 CSV, comma-separated, ``\\n`` line ends, quotes only where needed (RFC 4180 quoting)."""
    table.frame.to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
