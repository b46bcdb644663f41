"""Analyte columns: which headers name an analyte, in which unit, and how their cells read.

An analyte column is a column whose header names a chemical species
("SiO2", "Fe2O3T", "Cu", "87Sr/86Sr"), "LOI" or "Total", or that has a unit
in the manifest's `[tables.analyses.units]`. Its unit is read from the
header ("SiO2 (wt%)", "SiO2_wt%", "Cu [ppm]") or from the manifest, and
given in a canonical form (wt%, ppm, ppb, ppt, permil, mol%, ratio).

Total iron is written in many ways: "Fe2O3T", "Fe2O3t", "Fe2O3 (T)",
"Fe2O3(tot)", "Fe2O3tot", "FeOt", "FeO(T)", "Fe2O3*" (common practice). The
"T" marks total iron, never a unit: "Fe2O3 (T)" is total iron as Fe2O3 with
no unit in its header, "Fe2O3 (T) (wt%)" the same in wt%.

Cells are read as numbers, censored values ("<0.5", "< 0.01", "bdl",
"b.d.l.", "n.d.", ">10000"), not-analysed marks ("n.a.", "-"), or unreadable
(Excel error cells such as "#N/A", text, dates).

The checks (`archivist.rules.samples`) and the package's Table Schemas
(`archivist.package.tables`) both read headers through this module.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from ..project import Table

ELEMENTS = frozenset(
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As Se Br Kr "
    "Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb "
    "Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu".split()
)
_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)")
_TOTAL_IRON = re.compile(r"^(.*?)(?:\(\s*(?:t|tot|total)\s*\)|t|tot|total|\*)$", re.IGNORECASE)
UNIT_WORDS = {
    "wt%": "wt%", "wt.%": "wt%", "wt %": "wt%", "wt. %": "wt%", "%": "wt%", "weight%": "wt%", "weight percent": "wt%",
    "mass%": "wt%", "% m/m": "wt%", "pct": "wt%",
    "ppm": "ppm", "µg/g": "ppm", "μg/g": "ppm", "ug/g": "ppm", "mg/kg": "ppm", "g/t": "ppm",
    "ppb": "ppb", "ng/g": "ppb", "µg/kg": "ppb", "μg/kg": "ppb", "ug/kg": "ppb", "mg/t": "ppb",
    "ppt": "ppt", "pg/g": "ppt",
    "‰": "permil", "permil": "permil", "per mil": "permil", "per mille": "permil",
    "mol%": "mol%", "ratio": "ratio", "1": "ratio",
}
_UNIT_ALT = "|".join(sorted((re.escape(u) for u in UNIT_WORDS), key=len, reverse=True))
_HEADER_BRACKET = re.compile(r"^(?P<name>.+?)\s*(?:\((?P<p>[^()]*)\)|\[(?P<b>[^\[\]]*)\])\s*$")
_HEADER_SUFFIX = re.compile(rf"^(?P<name>.+?)[\s_]+(?P<u>{_UNIT_ALT})$", re.IGNORECASE)
TOTAL_NAMES = ("total", "sum", "total oxides", "sum of oxides")
LOI_NAMES = ("LOI", "L.O.I.", "LOI*")
EXCEL_ERRORS = frozenset({"#N/A", "#VALUE!", "#DIV/0!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#SPILL!", "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#UNKNOWN!", "#CONNECT!", "#BUSY!"})
_CENSORED = re.compile(
    r"^(?:[<>≤≥]\s*=?\s*(?:\d+(?:\.\d+)?|lod|lld|dl|d\.l\.|mdl|loq)|b\.?d\.?l\.?|n\.?d\.?|below detection(?: limit)?|not detected|<?\s*lod)$",
    re.IGNORECASE,
)
# "<0.01" alone, the form a Table Schema column keeps as text, as reported (package/tables.py).
BELOW_LIMIT = re.compile(r"^<\s*(?:(?:0|[1-9]\d*)(?:\.\d+)?|\.\d+)(?:[eE][+-]?\d+)?$")
_NOT_ANALYSED = frozenset({"n.a.", "na", "n/a", "n.a", "not analysed", "not analyzed", "-", "--", "---", "—", "–", "n.m.", "nm"})


def formula(name: str) -> tuple[bool, bool]:
    """(is a chemical species, is total iron) for a header name such as "SiO2", "Fe2O3T", "87Sr"."""
    text = name.strip()
    total = False
    m = _TOTAL_IRON.match(text)
    if m and m[1] and "Fe" in m[1]:
        text, total = m[1].strip(), True
    text = re.sub(r"^\d{1,3}", "", text)  # isotope mass number: "87Sr"
    text = text.rstrip("+-")  # "H2O+", "H2O-"
    if not text or not re.fullmatch(r"(?:[A-Z][a-z]?\d*)+", text):
        return False, False
    return all(sym in ELEMENTS for sym, _ in _TOKEN.findall(text)), total


@dataclass(frozen=True)
class Analyte:
    """An analyte column: its header, species name, unit (canonical) and where the unit came from."""

    column: str
    name: str
    unit: str | None
    unit_text: str | None
    source: str | None  # "header", "manifest" or None
    is_ratio: bool
    is_total: bool
    total_iron: bool
    problem: str | None = None  # a unit question to report (unknown unit word, conflict)

    @property
    def is_volatile(self) -> bool:
        return self.name.upper().rstrip("+-") in ("LOI", "H2O", "CO2")

    @property
    def is_oxide(self) -> bool:
        return not self.is_ratio and not self.is_total and "O" in re.findall(r"[A-Z][a-z]?", self.name) and self.name != "O"

    @property
    def may_be_negative(self) -> bool:
        """LOI is negative when a rock gains mass on ignition; delta values in per mil are signed."""
        return self.name.upper() == "LOI" or self.unit == "permil"


def split_header(header: str) -> tuple[str, str | None, str | None]:
    """(name, canonical unit or None, unit text as written or None) of a column header."""
    h = " ".join(str(header).split())
    m = _HEADER_BRACKET.match(h)
    if m:
        inner = (m["p"] if m["p"] is not None else m["b"]).strip()
        canon = UNIT_WORDS.get(inner.casefold()) or UNIT_WORDS.get(inner)
        if canon:
            return m["name"].strip(), canon, inner
        if re.fullmatch(r"(?:t|tot|total)", inner, re.IGNORECASE):
            return h, None, None  # "Fe2O3 (T)": total iron, not a unit
        return m["name"].strip(), None, inner
    m = _HEADER_SUFFIX.match(h)
    if m:
        return m["name"].strip(" _"), UNIT_WORDS[m["u"].casefold()] if m["u"].casefold() in UNIT_WORDS else UNIT_WORDS.get(m["u"]), m["u"]
    return h, None, None


def analytes(table: Table) -> list[Analyte]:
    """The analyte columns of the analyses table, with their units from the header or the manifest."""
    declared = {str(k): str(v) for k, v in (table.spec.get("units") or {}).items()}
    sample_col = table.spec.get("sample_field")
    out = []
    for col in table.frame.columns:
        col = str(col)
        if col == sample_col:
            continue
        name, unit, unit_text = split_header(col)
        is_ratio = "/" in name and all(formula(p)[0] for p in name.split("/"))
        species, total_iron = formula(name)
        is_total = name.strip().casefold() in TOTAL_NAMES
        is_loi = name.strip().upper() in LOI_NAMES
        if not (species or is_ratio or is_total or is_loi or col in declared):
            continue
        problem = None
        source = "header" if unit else None
        if unit is None and unit_text is not None:
            problem = f"'({unit_text})' in the header is not a unit archivist knows"
        if col in declared:
            d = declared[col].strip()
            canon = UNIT_WORDS.get(d.casefold()) or UNIT_WORDS.get(d) or d
            if unit is not None and canon != unit:
                problem = f"the header says {unit_text} but tables.analyses.units says {d}"
            elif unit is None:
                unit, unit_text, source, problem = canon, d, "manifest", None
        if is_ratio and unit is None and problem is None:
            unit, source = "ratio", "implied"
        out.append(Analyte(col, "LOI" if is_loi else name.strip(), unit, unit_text, source, is_ratio, is_total, total_iron, problem))
    return out


@dataclass(frozen=True)
class ColumnUnit:
    """What a header says about its column's quantity and unit, for describing the column."""

    quantity: str  # the header without its unit or total-iron mark ("SiO2", "Fe2O3", "Depth")
    unit: str | None  # canonical for analytes ("wt%"); as written for other columns ("m"); None when not given
    total_iron: bool


def column_unit(header: str) -> ColumnUnit:
    """The quantity and unit a column header declares, read as the checks read it.

    Analyte headers go through :func:`split_header`: a known unit word is
    given in its canonical form, a total-iron mark ("(T)", "t", "tot") is
    never a unit, and bracketed text that is not a unit ("SiO2 (XRF)") gives
    no unit. Other headers ("Depth (m)") keep the bracketed text as written.
    """
    name, unit, text = split_header(header)
    species, total_iron = formula(name)
    is_ratio = "/" in name and all(formula(p)[0] for p in name.split("/"))
    is_total = name.strip().casefold() in TOTAL_NAMES
    is_loi = name.strip().upper() in LOI_NAMES
    if species or is_ratio or is_total or is_loi:
        m = _TOTAL_IRON.match(name.strip()) if total_iron else None
        return ColumnUnit(m[1].strip() if m else name, unit, total_iron)
    return ColumnUnit(name, unit or text, False)


# ---------------------------------------------------------------- cells

@dataclass
class Cells:
    """One analyte column's cells, classified (all arrays aligned with the table rows)."""

    value: np.ndarray  # float; NaN unless a plain number
    blank: np.ndarray
    censored: np.ndarray
    not_analysed: np.ndarray
    excel_error: np.ndarray
    unreadable: np.ndarray  # neither number, censored, not-analysed nor blank (includes Excel errors)
    text: np.ndarray


def classify(series: pd.Series) -> Cells:
    """Classify the cells of one column in whole-column operations."""
    obj = series.astype(object)
    is_date = obj.map(lambda v: isinstance(v, (dt.date, dt.datetime))).to_numpy(dtype=bool)
    missing = obj.isna().to_numpy(dtype=bool)
    text = obj.where(~obj.isna(), "").map(str).str.strip()
    blank = missing | (text == "").to_numpy(dtype=bool)
    numeric_text = text.where(~pd.Series(is_date, index=text.index), "")
    value = pd.to_numeric(numeric_text.where(~numeric_text.str.contains(",", regex=False), ""), errors="coerce").to_numpy(dtype=float, copy=True)
    value[~np.isfinite(value)] = np.nan
    folded = text.str.casefold()
    censored = text.str.match(_CENSORED).to_numpy(dtype=bool) & ~blank
    not_analysed = folded.isin(_NOT_ANALYSED).to_numpy(dtype=bool) & ~censored
    excel_error = text.str.upper().isin(EXCEL_ERRORS).to_numpy(dtype=bool)
    unreadable = ~blank & np.isnan(value) & ~censored & ~not_analysed
    value[is_date] = np.nan
    return Cells(value, blank, censored, not_analysed, excel_error, unreadable, text.to_numpy(dtype=object))
