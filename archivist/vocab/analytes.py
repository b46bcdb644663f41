"""Analyte columns: which headers name an analyte, in which unit, and how their cells read.

An analyte column is a column whose header names a chemical species
("SiO2", "Fe2O3T", "Cu", "87Sr/86Sr"), "LOI" or "Total", or that has a unit
in the manifest's `[tables.analyses.units]`. Its unit is read from the
header ("SiO2 (wt%)", "SiO2_wt%", "Cu [ppm]") or from the manifest, and
given in a canonical form (wt%, ppm, ppb, ppt, permil, mol%, ratio).

Total iron is written in many ways: "Fe2O3T", "Fe2O3t", "Fe2O3 (T)",
"Fe2O3(tot)", "Fe2O3tot", "Fe2O3_T", "ΣFe2O3", "FeOt", "FeO(T)", "Fe2O3*"
(common practice). The "T" marks total iron, never a unit: "Fe2O3 (T)" is
total iron as Fe2O3 with no unit in its header, "Fe2O3 (T) (wt%)" the same
in wt%. Loss on ignition is "LOI", "L.O.I.", "loss on ignition", also with
its ignition temperature ("LOI 1000°C", "LOI (950 °C)", "LOI@1000C").

Cells are read as numbers, censored values ("<0.5", "< 0.01", "<.01",
"<1e-3", "< 5 ppm", "bdl", "b.d.l.", "tr", "trace", ">10000"), not-analysed
marks ("n.a.", "-", empty), or unreadable (Excel error cells such as "#N/A",
text, dates). "n.d." is "not detected" in some laboratories and "not
determined" in others: :func:`classify` reads it as the caller says
(`[tables.analyses] nd_means`), censored or not analysed.

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
_TOTAL_IRON = re.compile(r"^(.*?)[\s_]*(?:\(\s*(?:t|tot|total)\s*\)|t|tot|total|\*)$", re.IGNORECASE)
_SIGMA_IRON = re.compile(r"^(?:Σ|∑)\s*(Fe2O3|FeO)$")  # "ΣFe2O3": total iron written with a summation sign
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
# LOI with the ignition temperature in its header: "LOI 1000°C", "LOI (950 °C)", "LOI@1000C", "L.O.I. 1000".
_LOI = re.compile(
    r"^(?:loi|l\.o\.i\.?|loss on ignition)\*?(?:[\s_@]*\(?\s*(?:at\s*)?\d{3,4}\s*(?:°|º|deg\.?)?\s*c?\s*\)?)?$",
    re.IGNORECASE,
)
_TEMPERATURE = re.compile(r"^(?:at\s*)?\d{3,4}\s*(?:°|º|deg\.?)?\s*c?$", re.IGNORECASE)
EXCEL_ERRORS = frozenset({"#N/A", "#VALUE!", "#DIV/0!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#SPILL!", "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#UNKNOWN!", "#CONNECT!", "#BUSY!"})
_LIMIT_NUMBER = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_LIMIT_UNIT = r"(?:\s*(?:ppm|ppb|ppt|wt\s?\.?\s?%|%|µg/g|μg/g|ug/g|mg/kg|g/t|ng/g))?"
_CENSORED = re.compile(
    rf"^(?:[<>≤≥]\s*=?\s*(?:{_LIMIT_NUMBER}{_LIMIT_UNIT}|lod|lld|dl|d\.l\.|mdl|loq)|b\.?d\.?l\.?|below detection(?: limit)?"
    r"|not detected|<?\s*lod|tr\.?|traces?)$",
    re.IGNORECASE,
)
# The detection limit of "<0.01", "< 5 ppm", "<1e-3" (the number after "<").
_BELOW = re.compile(rf"^[<≤]\s*=?\s*({_LIMIT_NUMBER}){_LIMIT_UNIT}$", re.IGNORECASE)
# "n.d.", "nd", "n. d.": not detected, or not determined, as the laboratory uses it.
_ND = re.compile(r"^n\.?\s?d\.?$", re.IGNORECASE)
ND_MEANINGS = ("not-detected", "not-determined")
# "<0.01" alone, the form a Table Schema column keeps as text, as reported (package/tables.py).
BELOW_LIMIT = re.compile(r"^<\s*(?:(?:0|[1-9]\d*)(?:\.\d+)?|\.\d+)(?:[eE][+-]?\d+)?$")
_NOT_ANALYSED = frozenset({"n.a.", "na", "n/a", "n.a", "not analysed", "not analyzed", "-", "--", "---", "—", "–", "n.m.", "nm"})


# IUPAC standard atomic weights, abridged to five significant figures (IUPAC/CIAAW, "Standard atomic
# weights of the elements 2021", Pure Appl. Chem. 2022; conventional values for S and Cl).
ATOMIC_WEIGHT = {"O": 15.999, "F": 18.998, "S": 32.06, "Cl": 35.45, "Fe": 55.845}
# Oxygen equivalent of a halogen or sulfide sulfur reported as the element (common practice: the
# element is summed as if it replaced oxygen in the oxides, so the oxygen it stands for is taken off):
# O = F: F x O/(2F) = 0.421; O = Cl: Cl x O/(2Cl) = 0.226; O = S (sulfide): S x O/S = 0.499.
O_EQUIVALENT = {
    "F": ATOMIC_WEIGHT["O"] / (2 * ATOMIC_WEIGHT["F"]),
    "Cl": ATOMIC_WEIGHT["O"] / (2 * ATOMIC_WEIGHT["Cl"]),
    "S": ATOMIC_WEIGHT["O"] / ATOMIC_WEIGHT["S"],
}
# Mass fraction units as a multiple of wt% (1 wt% = 10 000 ppm = 10^7 ppb = 10^10 ppt).
IN_WT_PERCENT = {"wt%": 1.0, "ppm": 1e-4, "ppb": 1e-7, "ppt": 1e-10}


def formula(name: str) -> tuple[bool, bool]:
    """(is a chemical species, is total iron) for a header name such as "SiO2", "Fe2O3T", "87Sr"."""
    text = name.strip()
    total = False
    sigma = _SIGMA_IRON.match(text)
    if sigma:
        return True, True
    m = _TOTAL_IRON.match(text)
    if m and m[1] and "Fe" in m[1]:
        text, total = m[1].strip(), True
    text = re.sub(r"^\d{1,3}", "", text)  # isotope mass number: "87Sr"
    text = text.rstrip("+-")  # "H2O+", "H2O-"
    if not text or not re.fullmatch(r"(?:[A-Z][a-z]?\d*)+", text):
        return False, False
    return all(sym in ELEMENTS for sym, _ in _TOKEN.findall(text)), total


def loi_header(name: str) -> bool:
    """True for a loss-on-ignition header name: "LOI", "L.O.I.", "LOI 1000°C", "LOI (950 °C)", "loss on ignition"."""
    text = " ".join(str(name).split())
    return text.upper() in LOI_NAMES or bool(_LOI.match(text))


def iron_base(name: str) -> str | None:
    """"Fe2O3" or "FeO" for a total-iron header name ("Fe2O3T", "Fe2O3_T", "ΣFe2O3", "FeO(T)"), else None."""
    text = name.strip()
    sigma = _SIGMA_IRON.match(text)
    if sigma:
        return sigma[1]
    m = _TOTAL_IRON.match(text)
    if m and m[1] and "Fe" in m[1] and formula(text)[1]:
        return m[1].strip()
    return None


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
    def iron(self) -> str | None:
        """How the column gives iron: "FeO", "Fe2O3", "Fe2O3T" or "FeOT" (total iron), or None."""
        if self.total_iron:
            base = iron_base(self.name)
            return f"{base}T" if base else None
        return self.name if self.name in ("FeO", "Fe2O3") else None

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
        if _TEMPERATURE.match(inner) and loi_header(h):
            return h, None, None  # "LOI (1000°C)": the ignition temperature, not a unit
        return m["name"].strip(), None, inner
    m = _HEADER_SUFFIX.match(h)
    if m:
        return m["name"].strip(" _"), UNIT_WORDS[m["u"].casefold()] if m["u"].casefold() in UNIT_WORDS else UNIT_WORDS.get(m["u"]), m["u"]
    return h, None, None


def canonical_unit(text: str) -> str | None:
    """The canonical form of a unit as written ("wt %" -> "wt%", "mg/kg" -> "ppm", "µg/g" -> "ppm"), or None."""
    t = " ".join(str(text).split()).strip()
    if len(t) > 2 and t[0] + t[-1] in ("()", "[]"):
        t = t[1:-1].strip()
    return UNIT_WORDS.get(t.casefold()) or UNIT_WORDS.get(t)


def is_analyte_header(header: object) -> bool:
    """True for a header that names an analyte, LOI or a ratio of species ("SiO2 (wt%)", "Cu", "LOI 1000°C")."""
    if not isinstance(header, str) or not header.strip():
        return False
    name = split_header(header)[0]
    if "/" in name:
        return all(formula(p)[0] for p in name.split("/"))
    return formula(name)[0] or loi_header(name)


def analyses_header_test(sample_field: str | None):
    """A test for the header row of a laboratory's sheet: it holds three analyte names, or the sample
    column's name and one analyte name. A laboratory's notes above the header (its name, a job number,
    dates) and the data rows below it (numbers) pass neither."""
    wanted = (sample_field or "").strip().casefold()

    def test(cells) -> bool:
        n = sum(is_analyte_header(c) for c in cells)
        named = bool(wanted) and any(isinstance(c, str) and c.strip().casefold() == wanted for c in cells)
        return n >= 3 or (named and n >= 1)

    return test


# Rows a laboratory puts between the header and the first sample, known by the word in their first
# cells (common practice of laboratory certificates): the units, the method, the detection limits.
_UNITS_LABELS = frozenset({"unit", "units", "uom", "unit of measure", "units of measure"})
_INFO_LABELS = {
    **dict.fromkeys(("method", "methods", "analytical method", "method code", "scheme", "technique"), "method"),
    **dict.fromkeys(("detection limit", "detection limits", "lod", "lor", "dl", "mdl", "lld", "ldl", "limit of detection",
                     "lower limit", "lower detection limit", "reporting limit"), "detection limits"),
    **dict.fromkeys(("analyte", "analytes", "element", "elements"), "analyte names"),
}


@dataclass(frozen=True)
class InfoRows:
    """Rows under the header that describe the columns: how many, and the units row's units by column."""

    count: int
    units: dict[str, str]  # column -> unit as written in the units row
    units_row: int | None  # 0-based data row of the units row
    labels: tuple[str, ...]  # what each row is: "units", "method", "detection limits", "analyte names"


def info_rows(frame: pd.DataFrame, analyte_columns: list[str], label_columns: list[str]) -> InfoRows:
    """The rows at the top of ``frame`` that describe its columns rather than hold a sample.

    A *units row* is one whose analyte cells hold no number and at least
    half of whose filled analyte cells are unit words (``wt%``, ``%``,
    ``ppm``, ``ppb``, ``mg/kg``, ``µg/g``...), or whose label cell reads
    "Units"; other rows are known by their label cell (the first of
    ``label_columns`` that is filled): "Method", "Detection limit", "LOD",
    "LOR"... Only rows directly under the header, before the first other
    row, are taken; a unit word is never a sample value, so a units row is
    unambiguous.
    """
    units: dict[str, str] = {}
    units_row = None
    labels: list[str] = []
    for r in range(min(len(frame), 6)):
        row = frame.iloc[r]
        label = ""
        for c in label_columns:
            if c in frame.columns and not _blank_cell(row[c]):
                label = " ".join(str(row[c]).split()).strip(" :").casefold()
                break
        cells = {c: row[c] for c in analyte_columns if not _blank_cell(row[c])}
        numbers = sum(_is_number(v) for v in cells.values())
        known = {c: str(v).strip() for c, v in cells.items() if canonical_unit(str(v)) is not None}
        by_content = bool(known) and not numbers and 2 * len(known) >= len(cells)
        if units_row is None and (by_content or (label in _UNITS_LABELS and not numbers)):
            units = {c: str(v).strip() for c, v in cells.items()}
            units_row = r
            labels.append("units")
        elif label in _INFO_LABELS or label in _UNITS_LABELS:
            labels.append(_INFO_LABELS.get(label, "units"))
        else:
            break
    return InfoRows(len(labels), units, units_row, tuple(labels))


def _blank_cell(value: object) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and np.isnan(value):
        return True
    return isinstance(value, str) and not value.strip()


def _is_number(value: object) -> bool:
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return True
    try:
        float(str(value).strip())
    except ValueError:
        return False
    return True


# ---------------------------------------------------------------- quality-control rows and sheets

# Sample ids of quality-control rows (common practice of geochemistry laboratories): blanks ("BLANK",
# "BLK", "Blank 2", "PREP BLANK"), duplicates and repeats ("DUP", "TM24-0012-DUP", "TM24-0012 DUP",
# "REP"), standards and certified reference materials named as such ("STD", "STD-3", "CRM", "SRM",
# "QC"), and the codes of some widely used reference materials (from memory: USGS rock powders such as
# BCR-2, BHVO-2, AGV-2, GSP-2, BIR-1a; NIST SRM numbers; OREAS, AMIS and GBM series). Searched in the
# id, case ignored, as whole words (a word ends at any character that is not a letter or digit; digits
# may follow the word: "BLK1", "DUP2"). Set ``[tables.analyses] qc_pattern`` to a regular expression of
# your own (also searched, case ignored), or to "" to read every row as a sample.
QC_PATTERN = (
    r"(?<![a-z0-9])(?:blank|blk|dup|dupl|duplicate|rep|repeat|replicate|std|standard|crm|srm|qc"
    r"|bcr-?[12]|bhvo-?[12]|agv-?[12]|gsp-?[12]|bir-?1a?|nist|oreas|amis|gbm)\d*(?![a-z])"
)
# Sheet names of quality-control sheets in a laboratory's workbook (common practice): "QC", "QA-QC",
# "QAQC", "QA/QC", "Standards", "Blanks", "Duplicates", "CRM", "Reference materials", "Control".
QC_SHEET = re.compile(
    r"^(?:qa\s*[-/_&]?\s*qc|qc(?:\s*data)?|quality\s*control|standards?|blanks?|duplicates?|repeats?|crms?"
    r"|reference\s*materials?|controls?|std)$",
    re.IGNORECASE,
)


def qc_sheet(name: str) -> bool:
    """True for the name of a quality-control sheet ("QC", "QA/QC", "Standards", "Blanks"...)."""
    return bool(QC_SHEET.match(" ".join(str(name).split())))


def qc_rows(ids: np.ndarray, pattern: str) -> np.ndarray:
    """Which sample ids (as text) name a quality-control row: ``pattern`` searched in each, case ignored.

    Raises ``re.error`` for a pattern that is not a regular expression. An
    empty pattern marks no row.
    """
    if not pattern:
        return np.zeros(len(ids), dtype=bool)
    compiled = re.compile(pattern, re.IGNORECASE)
    series = pd.Series(np.asarray(ids, dtype=object), dtype=object).fillna("").astype(str)
    return series.map(compiled.search).notna().to_numpy(dtype=bool)


def analytes(table: Table) -> list[Analyte]:
    """The analyte columns of the analyses table, with their units.

    A column's unit comes from its header ("SiO2 (wt%)"), else from the
    units row under the header, else from ``[tables.analyses.units]``, else
    from ``[tables.analyses] unit`` (one unit for every analyte column that
    has none; never for ratios). A header, units row and ``units`` entry that
    disagree are reported.
    """
    declared = {str(k): str(v) for k, v in (table.spec.get("units") or {}).items()}
    in_row = dict(getattr(table, "row_units", None) or {})
    everyone = table.spec.get("unit")
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
        is_loi = loi_header(name)
        if not (species or is_ratio or is_total or is_loi or col in declared):
            continue
        problem = None
        source = "header" if unit else None
        if unit is None and unit_text is not None:
            problem = f"'({unit_text})' in the header is not a unit archivist knows"
        if col in in_row:
            written = in_row[col]
            canon = canonical_unit(written)
            if canon is None:
                problem = f"'{written}' in the units row is not a unit archivist knows"
            elif unit is not None and canon != unit:
                problem = f"the header says {unit_text} but the units row says {written}"
            elif unit is None:
                unit, unit_text, source, problem = canon, written, "units row", None
        if col in declared:
            d = declared[col].strip()
            canon = UNIT_WORDS.get(d.casefold()) or UNIT_WORDS.get(d) or d
            if unit is not None and canon != unit:
                said = "the header" if source == "header" else "the units row"
                problem = f"{said} says {unit_text} but tables.analyses.units says {d}"
            elif unit is None:
                unit, unit_text, source, problem = canon, d, "manifest", None
        if is_ratio and unit is None and problem is None:
            unit, source = "ratio", "implied"
        if unit is None and problem is None and isinstance(everyone, str) and everyone.strip():
            d = everyone.strip()
            unit, unit_text, source = UNIT_WORDS.get(d.casefold()) or UNIT_WORDS.get(d) or d, d, "manifest"
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
    if species or is_ratio or is_total or loi_header(name):
        return ColumnUnit(iron_base(name) or name if total_iron else name, unit, total_iron)
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
    nd: np.ndarray  # "n.d." cells (censored or not analysed, as ``nd_means`` says)
    limit: np.ndarray  # float; the detection limit of "<0.01", "< 5 ppm", "<1e-3"; NaN otherwise


def classify(series: pd.Series, nd_means: str = "not-detected") -> Cells:
    """Classify the cells of one column in whole-column operations.

    ``nd_means`` says what "n.d." stands for: "not-detected" (a censored
    reading) or "not-determined" (not analysed).
    """
    if nd_means not in ND_MEANINGS:
        raise ValueError(f"nd_means must be one of {', '.join(ND_MEANINGS)}, not {nd_means!r}")
    obj = series.astype(object)
    is_date = obj.map(lambda v: isinstance(v, (dt.date, dt.datetime))).to_numpy(dtype=bool)
    missing = obj.isna().to_numpy(dtype=bool)
    text = obj.where(~obj.isna(), "").map(str).str.strip()
    blank = missing | (text == "").to_numpy(dtype=bool)
    numeric_text = text.where(~pd.Series(is_date, index=text.index), "")
    value = pd.to_numeric(numeric_text.where(~numeric_text.str.contains(",", regex=False), ""), errors="coerce").to_numpy(dtype=float, copy=True)
    value[~np.isfinite(value)] = np.nan
    folded = text.str.casefold()
    nd = text.str.match(_ND).to_numpy(dtype=bool) & ~blank
    censored = (text.str.match(_CENSORED).to_numpy(dtype=bool) & ~blank) | (nd if nd_means == "not-detected" else False)
    not_analysed = (folded.isin(_NOT_ANALYSED).to_numpy(dtype=bool) & ~censored) | (nd if nd_means == "not-determined" else False)
    excel_error = text.str.upper().isin(EXCEL_ERRORS).to_numpy(dtype=bool)
    unreadable = ~blank & np.isnan(value) & ~censored & ~not_analysed
    value[is_date] = np.nan
    limit = pd.to_numeric(text.str.extract(_BELOW, expand=False), errors="coerce").to_numpy(dtype=float, copy=True)
    limit[~censored] = np.nan
    return Cells(value, blank, censored, not_analysed, excel_error, unreadable, text.to_numpy(dtype=object), nd, limit)
