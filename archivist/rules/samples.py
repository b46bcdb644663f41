"""Family `samples`: are samples located, identified and tied to their analyses, and do the analyses read?

Samples are points (`[layers.samples]`, or a table with `x_field`/`y_field`)
with an id (`id_field`) and, optionally, the unit the mapper recorded
(`unit_field`). Analyses are a table (`[tables.analyses]`, CSV or XLSX)
with one row per analysis, the sample id in `sample_field` and one column
per analyte. The loader (`archivist.project`) reads a laboratory's sheet as
delivered: the header below a block of notes (`header_row`, or found by its
analyte names), the units, method and detection-limit rows under it, and
the quality-control rows (`qc_pattern`) and sheets are not read as samples;
ids made only of digits are restored by `id_width`/`id_prefix`.

An analyte column is a column whose header names a chemical species
("SiO2", "Fe2O3T", "Cu", "87Sr/86Sr"), "LOI" or "Total", or that has a unit
in `[tables.analyses.units]`. Its unit is read from the header ("SiO2
(wt%)", "SiO2_wt%", "Cu [ppm]") or from the manifest. Cells are read as
numbers, censored values ("<0.5", "<.01", "< 5 ppm", "bdl", "b.d.l.",
"trace", ">10000"), not-analysed marks ("n.a.", "-", empty), or unreadable
(Excel error cells such as "#N/A", text, dates); "n.d." as
`[tables.analyses] nd_means` says (not detected by default), and the
report's notes say which was assumed. Headers, units and cells are read by
`archivist.vocab.analytes`, which the package's Table Schemas also use.

These checks test the bookkeeping of samples and analyses, not the
geochemistry: a total inside the accepted range does not make an analysis
good, and the range itself is a convention the mapper may change.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import shapely

from ..analysis.arrays import present
from ..analysis.idmatch import SampleIndex, probable_samples, space_keys
from ..analysis.messages import plural, verb
from ..analysis.points import (
    map_extent,
    outside_hits,
    unit_mismatch_hit,
    unit_mismatches,
)
from ..analysis.stations import repeated_across_files
from ..model import Hit
from ..readers import text_column
from ..registry import rule
from ..vocab.analytes import IN_WT_PERCENT, O_EQUIVALENT, Analyte, Cells, analytes, classify
from ..vocab.literature import literature_rows

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject, Table

# ---------------------------------------------------------------- analyses

REQUIRED_MAJORS = ("SiO2", "Al2O3", "MgO", "CaO", "Na2O", "K2O")
VOLATILES = ("LOI", "H2O", "CO2", "H2O+", "H2O-")


@dataclass
class Analyses:
    table: Table
    sample_col: str | None
    sample_values: np.ndarray  # raw cell objects
    sample_text: np.ndarray  # as text (readers.text_column), not stripped
    analytes: list[Analyte]
    cells: dict[str, Cells]


def read_analyses(project: MapProject, ctx: CheckContext) -> Analyses:
    def compute():
        table = project.tables["analyses"]
        col = table.field("sample_field")
        raw = table.frame[col].to_numpy(dtype=object) if col else np.empty(0, dtype=object)
        text = text_column(table.frame[col]) if col else np.empty(0, dtype=object)
        found = analytes(table)
        nd_means = str(table.spec.get("nd_means") or "not-detected")
        cells = {a.column: classify(table.frame[a.column], nd_means) for a in found}
        nd = sum(int(c.nd.sum()) for c in cells.values())
        if nd:
            how = "as [tables.analyses] nd_means says" if table.spec.get("nd_means") else (
                "by default; set [tables.analyses] nd_means = \"not-determined\" if the laboratory meant not determined"
            )
            meaning = "not detected (below the detection limit)" if nd_means == "not-detected" else "not determined (not analysed)"
            cells_word = plural(nd, "'n.d.' cell")
            ctx.note(f"{table.source}: {cells_word} read as {meaning}, {how}.")
        return Analyses(table, col, raw, text, found, cells)

    return ctx.shared("samples:analyses", compute)


def _sample_points(project: MapProject, ctx: CheckContext) -> dict[str, Any]:
    """Sample id -> point (first one when ids repeat), for placing table findings on the map."""

    def compute():
        layer = ctx.layer("samples")  # placed in the map CRS
        if layer is None:
            return {}
        geoms = layer.geometry
        ok = present(geoms)
        out = {}
        for sid, g in zip(layer.ids[ok][::-1], geoms[ok][::-1]):
            out[sid] = g
        return out

    return ctx.shared("samples:points", compute)


def _header_ref(table, column: str) -> str:
    data = table.data
    if data.sheet is not None:
        return f"{data.file}, sheet '{data.sheet}', cell {data.letters.get(column, '?')}{data.header_row}"
    return f"{data.file}, header of column '{column}'"


# ---------------------------------------------------------------- sample rules

def _fid(layer, i) -> str:
    index = layer.frame.index
    label = "row" if index.name == "row" else "feature"
    return f"{label} {index[i]}"


@rule("sample-duplicate-id", family="samples", severity="error", needs=("samples",))
def sample_duplicate_id(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two samples share an id, or a sample has none.

    Catches
    -------
    Sample ids (`id_field`) used by more than one sample, including ids
    that differ only in case, spaces or dash characters ("TM24-0007" and
    "tm24-0007 "), and samples with an empty id. The finding gives the
    features and how far apart the samples lie: 0 m suggests a row entered
    twice, hundreds of metres two samples given one number.

    Why it matters
    --------------
    An analysis, a thin section or a stored specimen is tied to its sample by
    the id alone; with two samples under one id, results end up attached to
    the wrong rock and place.

    Fix
    ---
    Give each sample its own id from the field notebook or sample store;
    delete true duplicate rows.

    Example
    -------
    Two points numbered TM24-0012 gives "sample id 'TM24-0012' is used by 2
    samples (feature 5, feature 19), 2314.6 m apart".
    """
    layer = project.layers["samples"]
    ids = np.asarray(layer.ids, dtype=object)
    geoms = layer.geometry
    keys = space_keys(ids)
    blank = np.flatnonzero(keys.to_numpy() == "")
    if len(blank):
        yield Hit(
            f"{plural(len(blank), 'sample')} {verb(len(blank), 'has', 'have')} no id in {layer.spec.get('id_field')}: {', '.join(_fid(layer, i) for i in blank[:20])}.",
            layer="samples",
            geometry=shapely.multipoints([g for g in geoms[blank] if g is not None and not g.is_empty]) if len(blank) else None,
        )
    counts = keys[keys != ""].value_counts()
    # rows handed in twice, identical, in two files of a list of files: hand-in-row-repeated reports them
    repeated = ([set(r.tolist()) for r in repeated_across_files(layer.frame, layer.source_column, geoms)]
                if layer.row_files is not None else [])
    for key in sorted(counts[counts > 1].index):
        idx = np.flatnonzero(keys.to_numpy() == key)
        if any(set(idx.tolist()) <= rows for rows in repeated):
            continue
        written = list(dict.fromkeys(ids[idx]))
        pts = [g for g in geoms[idx] if g is not None and not g.is_empty]
        spread = None
        if len(pts) > 1:
            xy = shapely.get_coordinates(np.array(pts, dtype=object))
            spread = float(np.max(np.hypot(xy[:, None, 0] - xy[None, :, 0], xy[:, None, 1] - xy[None, :, 1])))
        where = ", ".join(_fid(layer, i) for i in idx)
        apart = f", {spread:.1f} m apart" if spread is not None else ""
        if len(written) == 1:
            text = f"sample id '{written[0]}' is used by {len(idx)} samples ({where}){apart}."
        else:
            text = f"sample ids {', '.join(repr(w) for w in written)} differ only in case, spaces or dashes ({where}){apart}."
        yield Hit(text, layer="samples", features=tuple(written), measure=spread,
                  geometry=shapely.multipoints(pts) if pts else None)


@rule("sample-missing-location", family="samples", severity="error", needs=("samples",))
def sample_missing_location(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A sample has no usable location.

    Catches
    -------
    Samples with no geometry (blank or non-numeric x/y cells in a coordinate
    table), an empty point, non-finite coordinates, or a point at exactly
    (0, 0) when the map does not reach the origin (the usual placeholder of
    a blank coordinate). Coordinates present but in the wrong place are
    reported by `sample-outside-extent`.

    Why it matters
    --------------
    A sample without a location cannot be revisited, plotted or related to
    the units it was taken from; its analyses lose most of their value.

    Fix
    ---
    Enter the coordinates from the field notebook or GPS log; if they are
    lost, say so in the sample's notes rather than leaving a placeholder.

    Example
    -------
    A row of `samples.csv` with an empty `easting` cell gives "sample
    TM24-0031 (row 32) has no location".
    """
    layer = project.layers["samples"]
    geoms = layer.geometry
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    xy = np.full((len(geoms), 2), np.nan)
    present = np.flatnonzero(~missing)
    if len(present):
        pts = shapely.centroid(geoms[present])
        xy[present, 0] = shapely.get_x(pts)
        xy[present, 1] = shapely.get_y(pts)
    nonfinite = ~missing & ~np.isfinite(xy).all(axis=1)
    origin = ~missing & (xy[:, 0] == 0) & (xy[:, 1] == 0)
    if origin.any():
        extent = map_extent(ctx)
        if extent is not None and extent.geometry.covers(shapely.Point(0, 0)):
            origin[:] = False
    source = layer.source
    for i in np.flatnonzero(missing | nonfinite | origin):
        sid = layer.ids[i] or "(no id)"
        if missing[i]:
            why = "has no location" + (" (its coordinate cells are blank or not numbers)" if layer.spec.get("x_field") else " (null or empty geometry)")
        elif nonfinite[i]:
            why = "has coordinates that are not finite numbers"
        else:
            why = "is at (0, 0), the usual placeholder for a blank coordinate"
        yield Hit(f"sample {sid} ({_fid(layer, i)} of {source}) {why}.", layer="samples", features=(layer.ids[i],) if layer.ids[i] else ())


@rule("sample-outside-extent", family="samples", severity="warning", needs=("samples",))
def sample_outside_extent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A sample lies outside the map's extent.

    Catches
    -------
    Sample points farther than the tolerance outside the extent layer (or,
    without one, outside the union of the unit polygons); the finding gives
    the distance. Samples without a location are left to
    `sample-missing-location`.

    Why it matters
    --------------
    A sample off the map is usually a typo in a coordinate, a sample from
    another project, or a CRS mix-up; if it really was collected beyond the
    sheet edge, the next user needs to know that its unit is not mapped here.

    Fix
    ---
    Correct the coordinates from the field record, remove samples that
    belong to another project, or accept the finding for samples
    deliberately taken beyond the sheet edge.

    Example
    -------
    A sample with a dropped digit in its northing gives "sample TM24-0044
    (feature 44) lies 612034.2 m south of the map extent". The direction
    (one of eight compass points) is that of the sample seen from the
    nearest point of the extent: grid north in a projected CRS, true north
    (pyproj `Geod`) in a geographic one.
    """
    # the samples layer in the map CRS, swapped axes put right: crs-* report those once
    yield from outside_hits(project, ctx, "samples", "sample")


@rule("sample-unit-mismatch", family="samples", severity="error", needs=("samples", "units"))
def sample_unit_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The unit recorded for a sample differs from the unit polygon it falls in.

    Catches
    -------
    Samples whose `unit_field` value is not the unit of any unit polygon
    containing (or touching) the point, found with one STRtree query. A
    notice instead of an error when the point is within the tolerance of the
    polygon's edge (the sample sits on a contact, within the accuracy of the
    linework), or when the polygon is a superficial unit in the legend
    (`kind` = superficial) and the sample a bedrock unit: samples are often
    taken from exposures beneath mapped drift. The finding gives the
    distance to the edge and to the nearest polygon of the recorded unit.
    Samples with no recorded unit, or outside every polygon, are skipped.

    Why it matters
    --------------
    Either the sample is labelled with the wrong unit, and its analysis will
    describe the wrong rock, or the contact is drawn in the wrong place; both
    mislead the next user.

    Fix
    ---
    Check the field record: correct the sample's unit, or move the contact
    if the sample shows the mapped boundary is wrong. The mapper's judgement
    decides which.

    Example
    -------
    A KES sample inside a MAR polygon gives "sample TM24-0007 (feature 7) is
    recorded as KES but lies in polygon 12 (MAR), 35.2 m inside its edge; the
    nearest KES polygon, polygon 9, is 35.4 m east". The direction (one of
    eight compass points) is that of the nearest polygon seen from the
    sample: grid north in a projected CRS, true north (pyproj `Geod`) in a
    geographic one.
    """
    samples, units = ctx.layer("samples"), ctx.layer("units")  # in the map CRS: crs-* report a CRS fault once
    if samples is None or units is None:
        return
    pts = samples.geometry
    for m in unit_mismatches(project, ctx, "samples"):
        yield unit_mismatch_hit(samples, units, m, ctx.tolerance, "sample", "samples", pts[m.index])


# ---------------------------------------------------------------- samples and analyses

def _orphans(project: MapProject, ctx: CheckContext) -> list[tuple[int, Any, str, list[tuple[str, str]]]]:
    """Analysis rows whose sample id matches no sample exactly: (row, raw value, text, probable matches)."""

    def compute():
        an = read_analyses(project, ctx)
        index = SampleIndex.of(project.layers["samples"].ids)
        out = []
        if an.sample_col is None:
            return out
        # rows compiled from publications are not the team's samples (archivist.vocab.literature): the literature family checks them
        unmatched = ~np.isin(an.sample_text.astype(str), list(index.exact)) & ~literature_rows(an.table)
        for i in np.flatnonzero(unmatched):
            raw, text = an.sample_values[i], an.sample_text[i]
            blank = isinstance(raw, str) and not raw.strip() or raw is None
            out.append((int(i), raw, text, [] if blank else probable_samples(raw, index)))
        return out

    return ctx.shared("samples:orphans", compute)


def _shown(raw, text) -> str:
    if isinstance(raw, (dt.datetime, dt.date)):
        d = raw.date() if isinstance(raw, dt.datetime) else raw
        return f"the date {d.isoformat()}"
    return repr(text)


@rule("analysis-orphan", family="samples", severity="error", needs=("samples", "analyses"))
def analysis_orphan(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An analysis names a sample id that matches no sample.

    Catches
    -------
    Rows of the analyses table whose `sample_field` value is not exactly the
    id of a sample, including blank ids. Rows compiled from publications
    (a `source_field` other than the team's own marker, or `origin_field`;
    see the `literature` family) are not the team's samples and are left
    out. When the id looks mangled by a
    spreadsheet, the sample it probably meant is named, with the mangling:
    leading zeros lost ("7" for "0007", "HV24-7" for "HV24-0007"), a trailing
    ".0", scientific notation ("1.2E+04" for "12000"), an id turned into a
    date ("3-1" or "MAR1" read as 1 March), case, stray or non-breaking
    spaces, typographic dashes, a leading apostrophe. The guess is a hint:
    only the lab's submission sheet can confirm it.

    Why it matters
    --------------
    An analysis that cannot be tied to its sample has no location and no
    unit: it is lost to every later user, and a silently wrong join attaches
    it to another rock.

    Fix
    ---
    Correct the id in the analyses table (format the id column as text
    before typing or pasting ids into a spreadsheet), or add the missing
    sample.

    Example
    -------
    `TM24-7` in the analyses gives "analyses.xlsx, sheet 'majors', cell
    A4: sample id 'TM24-7' matches no sample; probably TM24-0007 (leading
    zeros lost)".
    """
    an = read_analyses(project, ctx)
    if an.sample_col is None:  # no sample column: no orphans (see _orphans)
        return
    for i, raw, text, probable in _orphans(project, ctx):
        where = an.table.data.cell(i, an.sample_col)
        if not text.strip() and not isinstance(raw, (dt.date, dt.datetime)):
            yield Hit(f"{where}: the analysis has no sample id.", layer="analyses")
            continue
        if len(probable) == 1:
            sid, how = probable[0]
            hint = f"; probably {sid} ({how})"
        elif probable:
            hint = "; perhaps one of " + ", ".join(f"{sid} ({how})" for sid, how in probable[:5])
        else:
            hint = ""
        point = _sample_points(project, ctx).get(probable[0][0]) if len(probable) == 1 else None
        yield Hit(
            f"{where}: sample id {_shown(raw, text)} matches no sample{hint}.",
            layer="analyses",
            features=(text,) + tuple(sid for sid, _ in probable[:5]),
            geometry=point,
        )


@rule("sample-unanalysed", family="samples", severity="notice", needs=("samples", "analyses"))
def sample_unanalysed(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A sample has no analysis.

    Catches
    -------
    Samples whose id appears in no row of the analyses table. A notice: many
    samples are taken for thin sections, fossils or reference and are never
    analysed. A sample that an unmatched analysis row probably meant (one
    sample named by `analysis-orphan`, its id mangled by a spreadsheet) is
    not reported here: it has its analysis, under the mangled id, and the
    orphan finding names it.

    Why it matters
    --------------
    A missing analysis is often a broken join (see `analysis-orphan`) or a
    batch that never came back from the laboratory; the next user cannot tell
    which without this note.

    Fix
    ---
    Nothing, if the sample was not meant for analysis; otherwise correct the
    id in the analyses table or add the missing results.

    Example
    -------
    A sample TM24-0003 that appears in no row of the analyses table gives
    "sample TM24-0003 has no analysis"; a sample TM24-0007 whose analysis
    row reads `TM24-7` is named by `analysis-orphan` instead.
    """
    an = read_analyses(project, ctx)
    if an.sample_col is None:
        return
    layer = project.layers["samples"]
    analysed = set(an.sample_text.astype(str))
    claimed: set[str] = set()
    for i, raw, text, probable in _orphans(project, ctx):
        if len(probable) == 1:
            claimed.add(probable[0][0])
    geoms = layer.geometry
    for i in map(int, np.flatnonzero(~np.isin(layer.ids.astype(str), list(analysed)))):
        sid = layer.ids[i]
        if not str(sid).strip():
            continue
        if sid in claimed:  # analysis-orphan names it: one finding for one mangled id
            continue
        g = geoms[i]
        yield Hit(
            f"sample {sid} has no analysis.",
            layer="samples",
            features=(sid,),
            geometry=g if g is not None and not shapely.is_empty(g) else None,
        )


@rule("analysis-unit-undeclared", family="samples", severity="error", needs=("analyses",))
def analysis_unit_undeclared(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An analyte column has no unit, in its header, its units row or the manifest.

    Catches
    -------
    Analyte columns (headers naming a chemical species, LOI or Total) whose
    header carries no unit ("SiO2 (wt%)", "SiO2_wt%", "Cu [ppm]"), that have
    no unit in a units row under the header (a laboratory's row of "wt%",
    "ppm", "mg/kg"...) and that neither `[tables.analyses.units]` nor
    `[tables.analyses] unit` (one unit for all) covers; headers whose
    bracketed text is not a unit (e.g. "SiO2 (XRF)") and words of a units
    row that are not units; a header, a units row and the manifest that
    disagree; and manifest entries naming a column that is not in the table.
    Isotope ratios ("87Sr/86Sr") need no unit. Columns that do not look like
    analytes (dates, lab numbers, comments) are not checked.

    Why it matters
    --------------
    A number without its unit is useless or, worse, misread: ppm taken for
    wt% is off by ten thousand. Units in lab reports live in a header row
    that is easily cut off when tables are merged.

    Fix
    ---
    Put the unit in the header ("Cu (ppm)") or declare it in the manifest:
    `[tables.analyses.units]` then `"Cu" = "ppm"`, or `unit = "ppm"` under
    `[tables.analyses]` when every analyte of the sheet is in one unit.

    Example
    -------
    A column headed `Cu` gives "analyses.xlsx, sheet 'majors', cell N1:
    analyte column 'Cu' has no unit".
    """
    an = read_analyses(project, ctx)
    table = an.table
    for a in an.analytes:
        where = _header_ref(table, a.column)
        if a.problem:
            yield Hit(f"{where}: analyte column '{a.column}': {a.problem}.", layer="analyses")
        elif a.unit is None:
            yield Hit(
                f"{where}: analyte column '{a.column}' has no unit; write it in the header (e.g. '{a.name} (wt%)') "
                f"or declare it in [tables.analyses.units].",
                layer="analyses",
            )
    columns = {str(c) for c in table.frame.columns}
    for col in (table.spec.get("units") or {}):
        if str(col) not in columns:
            yield Hit(f"tables.analyses.units names column '{col}', which is not in {table.source}.", layer="analyses")


def _grouped(an, column, rows, describe, limit=10):
    """Per-cell hits, or one hit for the column when it has more than ``limit`` of them."""
    data = an.table.data
    if len(rows) <= limit:
        for r in rows:
            yield r, f"{data.cell(r, column)}", describe(r)
        return
    first = ", ".join(data.cell(r, column).rsplit(" ", 1)[-1] for r in rows[:5])
    yield None, f"{_header_ref(an.table, column).rsplit(',', 1)[0]}, column '{column}'", f"{len(rows)} cells ({first}, ...)"


def _sample_of(an, r):
    return an.sample_text[r] if an.sample_col is not None else ""


@rule("analysis-value-unreadable", family="samples", severity="error", needs=("analyses",))
def analysis_value_unreadable(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An analyte cell holds an Excel error, a date or text that is not a value.

    Catches
    -------
    Cells of analyte columns that are Excel error values (#N/A, #VALUE!,
    #DIV/0!, #REF!...), dates, or text that is neither a number, a censored
    value ("<0.5", "bdl", "b.d.l.", "n.d.", ">10000") nor a not-analysed
    mark ("n.a.", "-"); numbers written with a comma are reported rather
    than guessed (decimal comma or thousands separator?). Each finding names
    the cell; a column with more than ten gives one finding.

    Why it matters
    --------------
    An error value is a formula that broke in the spreadsheet: the number the
    lab reported is gone. Text in a number column stops every program that
    reads the table as numbers.

    Fix
    ---
    Replace the cell with the value from the laboratory's certificate;
    write below-detection values as "<" and the detection limit.

    Example
    -------
    A `#N/A` in the MgO column gives "analyses.xlsx, sheet 'majors', cell
    G5: '#N/A' is an Excel error value, not a result (sample TM24-0012)".
    """
    an = read_analyses(project, ctx)
    for a in an.analytes:
        c = an.cells[a.column]
        rows = np.flatnonzero(c.unreadable)

        def describe(r, c=c):
            t = c.text[r]
            if c.excel_error[r]:
                kind = "is an Excel error value, not a result"
            elif re.fullmatch(r"-?\d+,\d+", t):
                kind = "has a comma: decimal comma or thousands separator? write the number with a point"
            elif isinstance(an.table.frame[a.column].iloc[r], (dt.date, dt.datetime)):
                kind = "is a date, not a result"
            else:
                kind = "is neither a number, a censored value (e.g. '<0.01') nor a not-analysed mark"
            return f"'{t}' {kind} (sample {_sample_of(an, r)})"

        for r, where, what in _grouped(an, a.column, rows, describe):
            yield Hit(f"{where}: {what}.", layer="analyses", features=(_sample_of(an, r),) if r is not None else ())


@rule("analysis-negative-value", family="samples", severity="error", needs=("analyses",))
def analysis_negative_value(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An analyte value is negative.

    Catches
    -------
    Negative numbers in analyte columns, except LOI (a rock can gain mass on
    ignition, e.g. when ferrous iron oxidises) and values in per mil (delta
    notation is signed). Some laboratories write below-detection results as
    the negative detection limit ("-0.01" for "<0.01"); the finding says so.

    Why it matters
    --------------
    A concentration cannot be negative. Left as it is, a "-0.01" that meant
    "below 0.01" is summed, averaged and plotted as a real value.

    Fix
    ---
    If the laboratory uses negative numbers for below-detection results,
    rewrite them as "<" and the detection limit; otherwise correct the value
    from the certificate.

    Example
    -------
    `-0.01` in MnO gives "analyses.xlsx, sheet 'majors', cell F4: MnO is
    -0.01 wt% (sample TM24-0007): if the lab meant below detection, write '<0.01'".
    """
    an = read_analyses(project, ctx)
    for a in an.analytes:
        if a.may_be_negative:
            continue
        c = an.cells[a.column]
        with np.errstate(invalid="ignore"):
            rows = np.flatnonzero(c.value < 0)
        unit = f" {a.unit_text}" if a.unit_text else ""

        def describe(r, c=c, a=a, unit=unit):
            v = c.value[r]
            return f"{a.name} is {v:g}{unit} (sample {_sample_of(an, r)}): if the lab meant below detection, write '<{-v:g}'"

        for r, where, what in _grouped(an, a.column, rows, describe):
            hit_what = what if r is not None else f"{what} are negative; if the lab meant below detection, write '<' and the limit"
            yield Hit(
                f"{where}: {hit_what}.",
                layer="analyses",
                features=(_sample_of(an, r),) if r is not None else (),
                measure=float(-c.value[r]) if r is not None else None,
                geometry=_sample_points(project, ctx).get(_sample_of(an, r)) if r is not None else None,
            )


# Iron, in the order a sum takes it: total iron as Fe2O3, total iron as FeO, then FeO + Fe2O3 (common practice).
IRON_CHOICES = (("Fe2O3T",), ("FeOT",), ("FeO", "Fe2O3"))
# Volatiles: LOI, or the water and carbon dioxide determined one by one; never both (common practice).
VOLATILE_CHOICES = (("LOI",), ("H2O+", "H2O-", "H2O", "CO2"))
HALOGENS_AND_SULFUR = ("F", "Cl", "S")
ROUNDING = 0.005  # half the last place of a value reported to two decimals, per summand (common practice)


@dataclass(frozen=True)
class Totals:
    """The major-element totals of an analyses table, per row.

    ``lab`` is the table's Total column (NaN where its cell is not a number),
    ``summed`` the sum archivist computes from the analyte columns (None when
    the table lacks the usual major oxides), ``gone`` per row and summed
    column whether its cell was blank, unreadable or not analysed (counted
    as 0), ``allowance`` per row how far the two may differ by rounding alone.
    """

    lab: np.ndarray | None
    lab_column: str | None
    summed: np.ndarray | None
    gone: np.ndarray  # bool, rows x gone_columns
    gone_columns: tuple[str, ...]
    allowance: np.ndarray
    columns: tuple[str, ...]
    how: str
    unreadable: np.ndarray  # bool per row: a summed cell is unreadable (reported by analysis-value-unreadable)
    unitless: tuple[str, ...] = ()  # oxide and volatile columns left out of the sum for want of a unit

    def missing(self, r: int) -> tuple[str, ...]:
        """The summed columns of row ``r`` that had no reading."""
        return tuple(dict.fromkeys(col for col, gone in zip(self.gone_columns, self.gone[r]) if gone))

    def judged(self) -> np.ndarray:
        """Per row the total a range check judges: the lab's Total where it is a number, else the sum."""
        n = len(self.allowance)
        lab = self.lab if self.lab is not None else np.full(n, np.nan)
        summed = self.summed if self.summed is not None else np.full(n, np.nan)
        return np.where(np.isnan(lab), summed, lab)


def _pick(groups, by_name, n):
    """Per row, the first group (of the columns the table has) whose every column has a reading; else the first group."""
    present = [g for g in ([name for name in group if name in by_name] for group in groups) if g]
    if not present:
        return []
    chosen = np.full(n, -1)
    for k, g in enumerate(present):
        ok = np.logical_and.reduce([~np.isnan(by_name[name][1]) | by_name[name][2] for name in g])
        chosen[(chosen < 0) & ok] = k
    chosen[chosen < 0] = 0
    return [(name, chosen == k) for k, g in enumerate(present) for name in g]


def major_totals(an: Analyses) -> Totals:
    """The lab's Total column and the sum of the analyte columns, per row (see :class:`Totals`).

    The sum takes the oxides in wt%, ppm or ppb (converted to wt%: 1 wt% =
    10 000 ppm), one form of iron (:data:`IRON_CHOICES`), one form of the
    volatiles (:data:`VOLATILE_CHOICES`), and F, Cl and S reported as
    elements, each less its oxygen equivalent (S only when no SO3 column is
    given). Censored values count as 0 and widen the rounding allowance by
    their detection limit; blank, unreadable and not-analysed cells count as
    0 and are listed in ``missing``. Without SiO2, Al2O3, an iron oxide, MgO,
    CaO, Na2O and K2O there is no sum.
    """
    n = len(an.table.frame)
    wt = [a for a in an.analytes if a.unit in ("wt%", None)]
    total_col = next((a for a in wt if a.is_total), None)
    lab = an.cells[total_col.column].value.copy() if total_col is not None else None
    usable = [a for a in an.analytes if a.unit in IN_WT_PERCENT and not a.is_ratio and not a.is_total]
    oxides = [a for a in usable if a.is_oxide or a.is_volatile]
    names = {a.name for a in oxides}
    if not (set(REQUIRED_MAJORS) <= names and any(a.iron for a in oxides)):
        return Totals(lab, total_col.column if total_col else None, None, np.zeros((n, 0), dtype=bool), (), np.zeros(n), (), "", np.zeros(n, dtype=bool))
    by_name: dict[str, tuple[Analyte, np.ndarray, np.ndarray]] = {}
    for a in usable:  # the first column of each name
        key = a.iron or a.name
        if key not in by_name:
            c = an.cells[a.column]
            by_name[key] = (a, c.value * IN_WT_PERCENT[str(a.unit)], c.censored)
    chosen = _pick(IRON_CHOICES, by_name, n) + _pick(VOLATILE_CHOICES, by_name, n)
    grouped = {name for g in IRON_CHOICES + VOLATILE_CHOICES for name in g}
    others = [key for key, (a, _, _) in by_name.items() if key not in grouped and (a.is_oxide or a.is_volatile)]
    elements = [key for key in HALOGENS_AND_SULFUR if key in by_name and not (key == "S" and "SO3" in by_name)]
    everyone = np.ones(n, dtype=bool)
    parts = [(key, everyone) for key in others] + chosen + [(key, everyone) for key in elements]
    total = np.zeros(n)
    allowance = np.full(n, ROUNDING)  # the Total's own rounding
    gone: list[tuple[str, np.ndarray]] = []
    unreadable = np.zeros(n, dtype=bool)
    for key, rows in parts:  # one vectorised step per column
        a, value, censored = by_name[key]
        c = an.cells[a.column]
        factor = 1.0 - O_EQUIVALENT[key] if key in O_EQUIVALENT else 1.0
        total += np.where(rows & ~np.isnan(value), value * factor, 0.0)
        limit = np.nan_to_num(c.limit) * IN_WT_PERCENT[str(a.unit)]
        allowance += np.where(rows & ~np.isnan(value), ROUNDING, 0.0) + np.where(rows & censored, limit, 0.0)
        gone.append((a.column, rows & np.isnan(value) & ~censored))
        unreadable |= rows & c.unreadable
    flags = np.column_stack([g for _, g in gone]) if gone else np.zeros((n, 0), dtype=bool)
    used = tuple(dict.fromkeys(by_name[key][0].column for key, _ in parts))
    how = f"the sum of {len(used)} oxide and volatile columns" if not elements else (
        f"the sum of {len(used)} oxide, volatile, halogen and sulfur columns, less the oxygen equivalent of {', '.join(elements)}"
    )
    unitless = tuple(a.column for a in an.analytes if a.unit is None and (a.is_oxide or a.is_volatile))
    return Totals(lab, total_col.column if total_col else None, total, flags, tuple(col for col, _ in gone), allowance, used, how,
                  unreadable, unitless)


def _missing_text(an: Analyses, r: int, missing: tuple[str, ...]) -> str:
    if not missing:
        return ""
    what = []
    for col in missing:
        c = an.cells[col]
        kind = "not analysed" if c.not_analysed[r] else "blank" if c.blank[r] else "unreadable"
        what.append(f"{col}: {kind}")
    return f", without {'; '.join(what)}"


@rule("analysis-total-out-of-range", family="samples", severity="warning", needs=("analyses",))
def analysis_total_out_of_range(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A major-oxide analysis does not total 98.5-101.5 wt%.

    Catches
    -------
    Rows whose major-oxide total lies outside
    `checks.total_min`..`checks.total_max`, 98.5-101.5 wt% by default:
    common practice for whole-rock XRF analyses including LOI. The total is
    the "Total" column where its cell is a number; otherwise (no Total
    column, or a blank or unreadable Total cell) the sum of the analyte
    columns, taken as `analysis-total-disagrees` describes. A summed column
    whose cell is blank, unreadable or not analysed counts as 0 and the
    finding names it, so one bad cell never keeps a row from being judged.
    Tables without the usual major oxides are not totalled. The range is a
    convention, not a law: sulphide-, graphite- or fluorine-rich rocks and
    analyses reporting only some oxides total low for good reasons; the
    mapper judges.

    Why it matters
    --------------
    A total far from 100 % is the first sign of a missing oxide, a unit or
    transcription error, or a bad analysis; results from such rows can
    mislead every diagram they are plotted on.

    Fix
    ---
    Check the row against the laboratory certificate; correct transcription
    errors, add missing oxides, or flag the analysis as suspect. Set
    `total_min`/`total_max` in `[checks]` if your method warrants another range.

    Example
    -------
    A row totalling 96.2 wt% gives "analyses.xlsx, sheet 'majors', cell
    M7: total 96.20 wt% for sample TM24-0015 is below 98.5 wt% by 2.30".
    """
    an = read_analyses(project, ctx)
    t = major_totals(an)
    totals = t.judged()
    lo, hi = ctx.config.total_min, ctx.config.total_max
    with np.errstate(invalid="ignore"):
        rows = np.flatnonzero((totals < lo) | (totals > hi))
    for r in map(int, rows):
        v = totals[r]
        from_lab = t.lab is not None and t.lab_column is not None and not np.isnan(t.lab[r])
        where = an.table.data.cell(r, str(t.lab_column)) if from_lab else f"{an.table.source}, row {an.table.data.line(r)}"
        off, side = (lo - v, f"below {lo:g}") if v < lo else (v - hi, f"above {hi:g}")
        sid = _sample_of(an, r)
        via = "" if from_lab else f" ({t.how}{_missing_text(an, r, t.missing(r))})"
        yield Hit(
            f"{where}: total {v:.2f} wt%{via} for sample {sid} is {side} wt% by {off:.2f}.",
            layer="analyses",
            features=(sid,) if sid else (),
            measure=float(off),
            geometry=_sample_points(project, ctx).get(sid),
        )


@rule("analysis-total-disagrees", family="samples", severity="warning", needs=("analyses",))
def analysis_total_disagrees(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The Total column and the sum of the analyte columns differ by more than rounding.

    Catches
    -------
    Rows whose "Total" cell and the sum archivist computes from the analyte
    columns differ by more than rounding explains: half of 0.01 wt% per
    summed value and for the Total (values reported to two decimals, common
    practice), plus the detection limit of each censored value, which counts
    as 0. The sum takes, as laboratories do (common practice):
    the oxides in wt%, or in ppm or ppb converted to wt% (1 wt% = 10 000
    ppm); iron once, as Fe2O3T, else FeOT, else FeO + Fe2O3 (headers such
    as "Fe2O3T", "Fe2O3_T", "Fe2O3(T)", "ΣFe2O3", "FeOt"); the volatiles
    once, as LOI ("LOI", "LOI 1000°C"...), else H2O+, H2O- and CO2; and F,
    Cl and S reported as elements, less their oxygen equivalents
    (O ≡ F: F × O/2F = 0.421; O ≡ Cl: Cl × O/2Cl = 0.226; O ≡ S for sulfide
    sulfur: S × O/S = 0.499; from IUPAC standard atomic weights), S only when
    no SO3 column is given. Trace elements reported as elements (Cu, Zr...)
    are never summed, and ppm is never added to wt% unconverted. Both values
    are reported. Blank and not-analysed cells count as 0 and are named.
    Rows with an unreadable summed cell, and tables with an oxide column
    that has no unit, are left to `analysis-value-unreadable` and
    `analysis-unit-undeclared`. Not covered: a laboratory Total that
    includes oxides not given as columns (BaO, SrO from trace elements), or
    volatiles measured both in LOI and on their own.

    Why it matters
    --------------
    A value typed wrong ("7.25" for 72.50) hides behind a Total copied from
    the certificate, and a Total that no longer matches its row shows that
    one of them was edited after the laboratory sent them.

    Fix
    ---
    Compare the row with the laboratory certificate and correct the value
    that was mistyped; if the laboratory's Total includes oxides not in the
    table, add them as columns.

    Example
    -------
    SiO2 typed as 7.25 instead of 72.50 gives "analyses.xlsx, sheet
    'majors', cell M3: the Total column says 100.00 wt% but the analyte
    columns sum to 34.75 wt% (the sum of 11 oxide and volatile columns) for
    sample TM24-0005, 65.25 wt% apart".
    """
    an = read_analyses(project, ctx)
    t = major_totals(an)
    if t.lab is None or t.summed is None or t.lab_column is None or t.unitless:
        return
    with np.errstate(invalid="ignore"):
        diff = t.summed - t.lab
        rows = np.flatnonzero((np.abs(diff) > t.allowance + 1e-9) & ~t.unreadable)
    for r in map(int, rows):
        sid = _sample_of(an, r)
        yield Hit(
            f"{an.table.data.cell(r, t.lab_column)}: the Total column says {t.lab[r]:.2f} wt% but the analyte columns "
            f"sum to {t.summed[r]:.2f} wt% ({t.how}{_missing_text(an, r, t.missing(r))}) for sample {sid}, "
            f"{abs(diff[r]):.2f} wt% apart.",
            layer="analyses",
            features=(sid,) if sid else (),
            measure=float(abs(diff[r])),
            geometry=_sample_points(project, ctx).get(sid),
        )
