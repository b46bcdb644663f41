"""Family `metadata`: the manifest, the files it names, deposit metadata, geometry validity."""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Any, Callable, Iterator

import numpy as np
import pandas as pd
import shapely

from ..analysis.messages import plural, verb
from ..farcoords import coordinate_limit
from ..identifiers import doi_problem, igsn_problem, orcid_problem
from ..model import Hit, Severity
from ..manifest import DEPOSIT_KEYS
from ..project import EXPECTED_GEOMETRY
from ..registry import all_rules, rule
from ..vocab.legend import unfound_unit
from ..vocab.licences import licence_cautions, licence_problem
from ..vocab.statements import measures_statement

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject
    from ..readers import TableData



def _loading(project, rule_id):
    return [h for h in project.problems if h.rule == rule_id]


@rule("manifest-invalid", family="metadata", severity="error")
def manifest_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The manifest breaks its schema: an unknown key, a missing required key, a value of the wrong type.

    Catches
    -------
    Keys of `archivist.toml` that `schemas/manifest.schema.json` does not
    allow (often a typo such as `unit_feild`), required keys that are absent,
    values of the wrong type, a `map.crs` that is not a CRS, and severity
    overrides naming a rule that does not exist. Each finding names the key path.

    Why it matters
    --------------
    A misspelt key is silently ignored by most tools, so a setting the mapper
    believes is in force is not. The next user reads the manifest to learn what
    each file is; a wrong manifest misleads them.

    Fix
    ---
    Correct the key named in the finding; `archivist rules` and the manifest
    reference in the README list the allowed keys.

    Example
    -------
    `[layers.units]` with `unit_feild = "code"` gives
    "archivist.toml: unknown key 'layers.units.unit_feild'".
    """
    yield from _loading(project, "manifest-invalid")
    known = {r.id for r in all_rules()}
    for rid in project.config.severity:
        if rid not in known:
            yield Hit(f"checks.severity: '{rid}' is not a rule id; 'archivist rules' lists them.", layer="manifest")


@rule("layer-missing", family="metadata", severity="error")
def layer_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A file, layer or sheet named in the manifest is not there.

    Catches
    -------
    A `path` that does not exist, a `layer` the file does not hold, a
    spreadsheet `sheet` that is absent, or a multi-layer file with no
    `layer` named.

    Why it matters
    --------------
    Every check of that layer is skipped, and a package made now would lack
    part of the map.

    Fix
    ---
    Correct the path (relative to the manifest) or the layer/sheet name, or
    remove the entry if the layer really is not part of the project.

    Example
    -------
    `[layers.lines] path = "lines.shp"` with no such file gives
    "layers.lines: file 'lines.shp' does not exist".
    """
    yield from _loading(project, "layer-missing")


@rule("layer-unreadable", family="metadata", severity="error")
def layer_unreadable(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A file named in the manifest exists but cannot be read as a layer or table.

    Catches
    -------
    Files that GDAL or the spreadsheet reader cannot open (corrupt, truncated,
    a format that needs a driver not available, an old binary `.xls`), with
    the reader's own reason.

    Why it matters
    --------------
    What cannot be read cannot be checked or archived, and the next user will
    hit the same wall without the original software.

    Fix
    ---
    Re-export the layer from the GIS to an open format (GeoPackage for
    vectors, CSV or XLSX for tables) and point the manifest at it.

    Example
    -------
    A zero-byte `units.gpkg` gives "layers.units: 'units.gpkg' cannot be opened: ...".
    """
    yield from _loading(project, "layer-unreadable")


@rule("table-not-utf8", family="metadata", severity="error")
def table_not_utf8(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A CSV table is not encoded as UTF-8.

    Catches
    -------
    CSV/TSV files with bytes that are not valid UTF-8 (typically a legacy
    Windows or Latin-1 export); the finding names the byte offset and line.
    A UTF-8 byte-order mark is accepted.

    Why it matters
    --------------
    Accented unit names, degree signs and micro signs turn into garbage on the
    next machine, and archives must be readable without guessing the encoding.

    Fix
    ---
    Re-save the file as "CSV UTF-8" from the spreadsheet, or convert it
    (`iconv -f WINDOWS-1252 -t UTF-8`) after checking which encoding it is.

    Example
    -------
    `legend.csv` written in Latin-1 with "Gneiß" gives
    "legend.csv is not UTF-8: byte 0xDF at offset 212 (line 5)".
    """
    yield from _loading(project, "table-not-utf8")


@rule("field-missing", family="metadata", severity="error")
def field_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A field the manifest names (or the default name for it) is not in the layer or table.

    Catches
    -------
    `unit_field`, `kind_field`, `id_field`, `azimuth_field`,
    `dip_field`, `sample_field` and the other `*_field` keys whose
    column is absent from the data. Defaults apply when a key is not given
    (`unit`, `kind`, `sample_id`, `azimuth`, `dip`).

    Why it matters
    --------------
    The checks that read the field cannot run, and the next user cannot tell
    which column carries the information.

    Fix
    ---
    Name the right column in the manifest (the finding lists the columns that
    are there) or rename the column in the data.

    Example
    -------
    Units with a `code` column and no `unit_field` key give
    "layers.units: field 'unit' (unit_field) is not in 'map.gpkg:units'".
    """
    legend = project.tables.get("legend")
    unfound = unfound_unit(legend) if legend is not None else None
    if unfound is not None:
        yield unfound
    yield from _loading(project, "field-missing")


@rule("metadata-incomplete", family="metadata", severity="warning")
def metadata_incomplete(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Metadata a deposit needs is missing from `[map]`.

    Catches
    -------
    An empty or absent `map.title`, `map.version`, `map.abstract`,
    `map.licence` or `map.authors` (each author needs a `name`).
    `archivist pack` refuses to run without them.

    Why it matters
    --------------
    A repository deposit without authors, licence or abstract cannot be cited,
    may not legally be reused, and tells a stranger nothing about the map.

    Fix
    ---
    Fill in the keys named in the finding in `archivist.toml`.

    Example
    -------
    No `licence` key gives "map.licence is missing: a deposit needs it".
    """
    m = project.manifest.get("map", {})
    for key in DEPOSIT_KEYS:
        value = m.get(key)
        empty = value is None or (isinstance(value, str) and not value.strip()) or (isinstance(value, list) and not value)
        if empty:
            yield Hit(f"map.{key} is missing: a deposit needs it.", layer="manifest")
    for i, author in enumerate(m.get("authors") or []):
        if isinstance(author, dict) and not str(author.get("name", "")).strip():
            yield Hit(f"map.authors[{i}].name is empty.", layer="manifest")


@rule("licence-unknown", family="metadata", severity="error")
def licence_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The licence is not a recognised SPDX licence identifier or expression.

    Catches
    -------
    `map.licence` values that are not on the SPDX licence list (checked with
    the `license-expression` package's copy of the list), such as
    `CC-BY` without a version, or free text like "open" (errors). Two valid
    forms are warnings: a `LicenseRef-...` id, the SPDX syntax for a licence
    not on the list (SPDX specification, annex "SPDX License Expressions"),
    since the id alone tells a reuser nothing; and a deprecated SPDX id such
    as `GPL-2.0`, named with the id that replaced it (`GPL-2.0-only`), as the
    `license-expression` package's licence index records it. Whether the
    licence suits data, or matches the text shipped with it, is not checked.

    Why it matters
    --------------
    Repositories and harvesters read the SPDX id to tell users what they may do
    with the data; an unrecognised licence makes the deposit legally unusable,
    and a licence of one's own or an outdated id leaves reusers guessing.

    Fix
    ---
    Use the exact SPDX id, e.g. `CC-BY-4.0`, `CC0-1.0` or `ODbL-1.0`
    (see the SPDX licence list); replace a deprecated id by the one named; for
    a `LicenseRef-` licence, ship its full text or choose a listed licence.

    Example
    -------
    `licence = "CC-BY"` gives "map.licence: 'CC-BY' is not on the SPDX licence list";
    `licence = "LicenseRef-tarrowmere"` gives a warning that reusers cannot
    tell what it allows.
    """
    value = project.manifest.get("map", {}).get("licence")
    if isinstance(value, str) and value.strip():
        why = licence_problem(value.strip())
        if why:
            yield Hit(f"map.licence: {why}.", layer="manifest")
            return
        for caution in licence_cautions(value.strip()):
            yield Hit(f"map.licence: {caution}.", layer="manifest", severity=Severity.WARNING)


@rule("identifier-invalid", family="metadata", severity="error")
def identifier_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A persistent identifier is malformed or fails its check digit.

    Catches
    -------
    Author ORCID iDs that are not 16 characters in four groups or whose last
    character is not the ISO 7064 MOD 11-2 check character of the other 15
    digits (the usual sign of a typo or transposed digits); the bare iD, the
    `https://orcid.org/`, `http://orcid.org/` and `orcid.org/` forms and a
    lower-case `x` check character are accepted (ORCID, "Structure of the
    ORCID Identifier"). A `map.doi` that is not a DOI by the DOI Handbook's
    syntax ("10." + registrant code, "/", suffix); the `doi:`, `info:doi/`,
    `https://doi.org/` and `http://dx.doi.org/` forms and percent-encoded
    characters (`10.5555%2Fabc`, as DOIs appear in URLs) are accepted. When
    `[layers.samples]` names an `igsn_field`, sample identifiers in it that
    are not an IGSN. An IGSN is a DOI registered by an IGSN allocating agent
    under its own prefix (DataCite IGSN FAQ; SESAR2 "IGSN changes"), written
    `https://doi.org/10.58052/CODE`, `igsn:10.58052/CODE` or `igsn:CODE`
    (DataCite, "Displaying IGSN IDs"), or a legacy IGSN (`IGSN:CODE`,
    `https://igsn.org/CODE`, Handle `10273/CODE`, from memory). A DOI under
    a prefix archivist does not know as an IGSN prefix is refused unless it
    is tagged `igsn:`, and so is a code with no tag (a local sample number
    looks the same). Blank IGSN cells are not reported: not every sample is
    registered. Only the syntax is checked: a well-formed identifier may
    still be unregistered or belong to another object, which only the
    registry can tell; the list of IGSN prefixes is not complete (agents
    receive new ones), hence the `igsn:` tag.

    Why it matters
    --------------
    A wrong ORCID credits someone else, or no one, in the repository and in
    every citation of the map; a malformed DOI or IGSN does not resolve, so the
    link from the map to its publication or to the physical sample is broken.

    Fix
    ---
    Copy the iD from the author's ORCID record, in the form `0000-0002-1825-0097`
    (with or without `https://orcid.org/`); copy DOIs and IGSNs from the
    registry's landing page rather than retyping them.

    Example
    -------
    `orcid = "0000-0002-1825-0098"` gives "map.authors[0].orcid ... has check
    digit 8 where ISO 7064 MOD 11-2 gives 7"; `doi = "10.1000 /tarrowmere.1"`
    gives "map.doi '10.1000 /tarrowmere.1' has prefix '10.1000 ' ...".
    """
    m = project.manifest.get("map", {})
    for i, author in enumerate(m.get("authors") or []):
        if isinstance(author, dict) and isinstance(author.get("orcid"), str):
            why = orcid_problem(author["orcid"])
            if why:
                yield Hit(f"map.authors[{i}].orcid '{author['orcid']}' ({author.get('name', '?')}) {why}.", layer="manifest")
    if isinstance(m.get("doi"), str):
        why = doi_problem(m["doi"])
        if why:
            yield Hit(f"map.doi '{m['doi']}' {why}.", layer="manifest")
    samples = project.layers.get("samples")
    values = samples.text("igsn_field") if samples is not None else None
    if samples is not None and values is not None:
        column = samples.field("igsn_field")
        present = np.array([bool(v.strip()) for v in values], dtype=bool)
        geoms = samples.geometry
        for i in map(int, np.flatnonzero(present)):
            why = igsn_problem(values[i])
            if why:
                sid = samples.ids[i]
                yield Hit(
                    f"samples: sample {sid} has '{values[i]}' in {column} (igsn_field), which {why}.",
                    layer="samples",
                    features=(sid,),
                    geometry=geoms[i] if geoms[i] is not None and not shapely.is_empty(geoms[i]) else None,
                )


_TYPE_KEY = {"Point": "POINT", "MultiPoint": "MULTIPOINT", "LineString": "LINESTRING",
             "MultiLineString": "MULTILINESTRING", "Polygon": "POLYGON", "MultiPolygon": "MULTIPOLYGON"}


def _empty_mask(geoms: np.ndarray) -> np.ndarray:
    return shapely.is_missing(geoms) | shapely.is_empty(geoms)


@rule("geometry-missing", family="metadata", severity="error")
def geometry_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A feature has no geometry (null or empty).

    Catches
    -------
    Features of any layer whose geometry is null or empty, typically rows
    left behind by an editing session or a failed import. Samples without a
    location are left to `sample-missing-location`, which says more about them.

    Why it matters
    --------------
    The feature's attributes are in the data but it is on no map; the next
    user cannot tell whether something was lost.

    Fix
    ---
    Redraw the feature from the field data, or delete the row if it is
    spurious.

    Example
    -------
    A unit row with a null geometry gives "units feature 12 has no geometry".
    """
    for role, layer in project.sources.items():
        if role == "samples":
            continue
        geoms = layer.geometry
        for i in np.flatnonzero(_empty_mask(geoms)):
            fid = layer.ids[i]
            yield Hit(f"{role} feature {fid} ({layer.source}) has no geometry.", layer=role, features=(fid,))


@rule("feature-id-duplicate", family="metadata", severity="error")
def feature_id_duplicate(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two features of a map layer share an id, or one has none.

    Catches
    -------
    In a layer whose manifest entry names an `id_field` (units, lines,
    structures, extent), an id given to more than one feature, and features
    whose id is empty. Ids are compared as text with surrounding spaces
    ignored. Samples and stations have rules of their own
    (`sample-duplicate-id`, `station-duplicate-id`).

    Why it matters
    --------------
    The id is how findings, the change log of `archivist repair`, `diff`
    and other people's notes point at a feature; with two features under one
    id they point at either, and `repair` refuses to run.

    Fix
    ---
    Give each feature its own id, or leave `id_field` out of the manifest
    entry to have features named by their feature id (FID).

    Example
    -------
    Two polygons numbered P-7 in `poly_id`, 80 m apart, give "units
    (map.gpkg:units): id 'P-7' in poly_id is given to 2 features (feature 4,
    feature 9), 80.0 m apart." The finding's geometry holds those features;
    its measure is how far apart they lie (0 m suggests a row entered twice).
    """
    for role, layer in project.sources.items():
        name = layer.field("id_field")
        if role in ("samples", "stations") or name is None:
            continue
        ids = np.char.strip(np.asarray(layer.text("id_field"), dtype=object).astype(str))
        fids = layer.frame.index
        geoms = layer.geometry
        drawn = ~_empty_mask(geoms)
        blank = np.flatnonzero(ids == "")
        if len(blank):
            shown = ", ".join(f"feature {fids[i]}" for i in blank[:20]) + (", ..." if len(blank) > 20 else "")
            yield Hit(f"{role} ({layer.source}): {plural(len(blank), 'feature')} {verb(len(blank), 'has', 'have')} no id "
                      f"in {name}: {shown}.", layer=role, features=tuple(str(fids[i]) for i in blank),
                      geometry=shapely.geometrycollections(geoms[blank[drawn[blank]]]) if drawn[blank].any() else None)
        values, inverse, counts = np.unique(ids, return_inverse=True, return_counts=True)
        grouped = np.argsort(inverse, kind="stable")  # rows by id, each id's rows in file order
        start = np.r_[0, np.cumsum(counts)[:-1]]
        for k in np.flatnonzero((counts > 1) & (values != "")):  # one per id given twice or more
            rows = grouped[start[k]:start[k] + counts[k]]
            placed = rows[drawn[rows]]
            spread = None
            if len(placed) > 1:  # the representative points of the features farthest apart (GEOS point on surface)
                xy = shapely.get_coordinates(shapely.point_on_surface(geoms[placed]))
                spread = float(np.max(np.hypot(xy[:, None, 0] - xy[None, :, 0], xy[:, None, 1] - xy[None, :, 1])))
            apart = f", {spread:.1f} m apart" if spread is not None else ""
            yield Hit(f"{role} ({layer.source}): id '{values[k]}' in {name} is given to {len(rows)} features "
                      f"({', '.join(f'feature {fids[i]}' for i in rows)}){apart}.", layer=role, features=(str(values[k]),),
                      measure=spread, geometry=shapely.geometrycollections(geoms[placed]) if len(placed) else None)


@rule("geometry-type-unexpected", family="metadata", severity="error")
def geometry_type_unexpected(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer holds geometries of the wrong type for its role.

    Catches
    -------
    Non-polygons in `units` or `extent`, non-lines in `lines`,
    non-points in `samples` or `structures`; counted per layer, with the
    first feature ids.

    Why it matters
    --------------
    A point in the unit layer or a polygon in the contacts is usually a layer
    mix-up; the topology checks ignore such features, so their problems hide.

    Fix
    ---
    Move the features to the right layer, or point the manifest at the right
    file.

    Example
    -------
    A line in the units layer gives "units: 1 feature is LineString where
    Polygon or MultiPolygon is expected".
    """
    for role, layer in project.sources.items():
        expected = EXPECTED_GEOMETRY.get(layer.group)
        if not expected:
            continue
        geoms = layer.geometry
        types = shapely.get_type_id(geoms)
        allowed = [shapely.GeometryType[_TYPE_KEY[e]].value for e in expected]
        bad = np.flatnonzero(~np.isin(types, allowed) & ~_empty_mask(geoms))
        if len(bad):
            names = ", ".join(sorted({geoms[i].geom_type for i in bad[:1000]}))
            ids = tuple(layer.ids[bad[:20]])
            yield Hit(
                f"{role}: {plural(len(bad), 'feature')} {verb(len(bad), 'is', 'are')} {names} where {' or '.join(expected)} is expected.",
                layer=role,
                features=ids,
                geometry=geoms[bad[0]],
            )


@rule("geometry-invalid", family="metadata", severity="error")
def geometry_invalid(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A geometry is invalid by the OGC Simple Features rules, with GEOS's reason.

    Catches
    -------
    Self-intersecting rings, bow-ties, rings with too few points, holes
    outside their shell and the other cases GEOS reports through
    `is_valid_reason`; the finding gives the reason and its location.

    Why it matters
    --------------
    Areas, overlaps and gaps of invalid polygons are undefined: every later
    check and every GIS that opens the map may compute something different.

    Fix
    ---
    Repair the geometry in the GIS (or with `shapely.make_valid`) and look
    at the result: an automatic repair can split or drop a sliver.

    Example
    -------
    A bow-tie unit polygon gives "units feature 7 is invalid: Self-intersection[5 5]".
    """
    for role, layer in project.sources.items():
        geoms = layer.geometry
        present = ~_empty_mask(geoms)
        valid = layer.valid
        for i in np.flatnonzero(present & ~valid):
            reason = shapely.is_valid_reason(geoms[i])
            where = None
            if "[" in reason and reason.endswith("]"):
                try:
                    x, y = map(float, reason[reason.rindex("[") + 1 : -1].split()[:2])
                    where = (x, y)
                except ValueError:
                    where = None
            fid = layer.ids[i]
            yield Hit(
                f"{role} feature {fid} is invalid: {reason}.",
                layer=role,
                features=(fid,),
                geometry=geoms[i],
                x=where[0] if where else None,
                y=where[1] if where else None,
            )


# ---------------------------------------------------------------- spreadsheets and published cells

@rule("column-unnamed", family="metadata", severity="warning")
def column_unnamed(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A spreadsheet column holds data but has no header of its own.

    Catches
    -------
    Columns of an XLSX sheet whose header cell is empty, typically because
    a header was merged across several columns ("Major elements" over B1:D1).
    The column is kept and named after the merged header and its letter
    (`Major elements, column C`) or its letter alone (`column C`); the
    finding says which name it got. Only the first non-empty row is read as
    the header: headers spread over two rows are not recognised.

    Why it matters
    --------------
    A reader that drops unnamed columns loses their data without a word; a
    name made up by software tells the next user nothing about the quantity
    or its unit.

    Fix
    ---
    Unmerge the header and give every column its own header in one cell,
    with the unit in brackets (`TiO2 (wt%)`).

    Example
    -------
    "Major elements" merged over B1:D1 gives "analyses.xlsx, sheet 'XRF':
    column C holds data but has no header of its own ... it is read and
    packed as 'Major elements, column C'".
    """
    yield from _loading(project, "column-unnamed")


def _feature_label(ids: np.ndarray) -> Callable[[int], str]:
    return lambda i: f"feature {ids[i]}"


def _row_label(data: TableData) -> Callable[[int], str]:
    return lambda i: f"row {data.line(i)}"


@rule("formula-value-missing", family="metadata", severity="error")
def formula_value_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Spreadsheet formula cells carry no stored value, so they read as empty.

    Catches
    -------
    Cells of an XLSX sheet that hold a formula but no cached result, as
    written by software that stores formulas without computing them (a
    script using a spreadsheet library, some exports). archivist reads the
    values a spreadsheet program stored and never evaluates formulas; the
    finding names the sheet and the cell ranges.

    Why it matters
    --------------
    The table as read, and the package made from it, would have empty cells
    where the spreadsheet shows numbers: analyses lost without a word.

    Fix
    ---
    Open the workbook in a spreadsheet program and save it, so the values are
    stored next to the formulas; or replace the formulas by their values.

    Example
    -------
    A sheet 'XRF' written by a script with `=B2*0.1` in D2:D34 gives
    "analyses.xlsx, sheet 'XRF': cells D2:D34 hold formulas with no stored value".
    """
    yield from _loading(project, "formula-value-missing")


# A cell a spreadsheet may run as a formula when it opens a CSV: it begins with one of these
# (common practice of CSV-injection guidance, from memory). Plain numbers such as -12.5 or +3 are data.
FORMULA_LEAD = re.compile(r"^[=+\-@\t\r]")
PLAIN_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")


def _formula_like(series: pd.Series) -> np.ndarray:
    """True where a cell is text that begins like a formula and is not a plain number.

    Each distinct value is read once (a column of 10^5 cells often holds a few dozen values).
    """
    codes, uniques = pd.factorize(series.astype(object), use_na_sentinel=True)
    values = pd.Series(np.asarray(uniques, dtype=object), dtype=object)
    text = values.where(values.map(type) == str)
    lead = text.str.match(FORMULA_LEAD).fillna(False).to_numpy(dtype=bool)
    out = np.zeros(len(series), dtype=bool)
    if not lead.any():
        return out
    number = text.str.match(PLAIN_NUMBER).fillna(False).to_numpy(dtype=bool)
    seen = codes >= 0
    out[seen] = (lead & ~number)[codes[seen]]
    return out


def _shown(value: str) -> str:
    text = value if len(value) <= 40 else value[:37] + "..."
    return repr(text)


@rule("formula-like-value", family="metadata", severity="warning")
def formula_like_value(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A text cell begins with `=`, `+`, `-`, `@`, a tab or a carriage return, so a spreadsheet may run it as a formula.

    Catches
    -------
    Text values in the attribute columns of every layer and in the legend
    and analyses tables that begin with one of those characters (the
    characters of CSV-injection guidance, common practice, from memory).
    Plain numbers written as text (`-12.5`, `+3`, `1e-3`) are not reported.
    The package keeps every value as given; this finding warns its readers.
    Text with the character later in the cell, and numbers stored as
    numbers, are not reported.

    Why it matters
    --------------
    The package publishes tables as CSV. A spreadsheet that opens such a CSV
    evaluates `=...` or `@...` as a formula: at best the value shown is not
    the value stored, at worst a crafted cell runs a command or sends data away.

    Fix
    ---
    If the value is meant as text (a note starting with "-", a code like
    "+A"), reword it so it does not begin with those characters, e.g. "minus
    ..." or a leading letter. If it came from a formula by mistake, replace
    it with the value.

    Example
    -------
    A legend name `=HYPERLINK("http://example.invalid","Alder")` gives
    "legend.csv, column 'name': 1 value begins like a formula (row 2) ...".
    """
    sources: list[tuple[str, str, pd.DataFrame, list[Any], Callable[[int], str], np.ndarray | None]] = []
    for role, layer in project.sources.items():
        frame = layer.frame
        columns = [c for c in frame.columns if c != frame.geometry.name]
        sources.append((role, layer.source, frame, columns, _feature_label(layer.ids), layer.ids))
    for role, table in project.tables.items():
        frame = table.frame
        sources.append((role, table.source, frame, list(frame.columns), _row_label(table.data), None))
    for role, source, frame, columns, where, ids in sources:
        for column in columns:
            series = frame[column]
            if not (pd.api.types.is_object_dtype(series.dtype) or pd.api.types.is_string_dtype(series.dtype)):
                continue
            hit = np.flatnonzero(_formula_like(series))
            if not len(hit):
                continue
            places = ", ".join(where(i) for i in hit[:10]) + (f" and {len(hit) - 10} more" if len(hit) > 10 else "")
            n = len(hit)
            yield Hit(
                f"{source}, column '{column}': {n} value{'s' if n != 1 else ''} begin{'s' if n == 1 else ''} like a formula "
                f"({places}), e.g. {_shown(str(series.iloc[hit[0]]))}; a spreadsheet opening the packaged CSV may run "
                f"{'them' if n != 1 else 'it'} as {'formulas' if n != 1 else 'a formula'}.",
                layer=role,
                features=tuple(str(ids[i]) for i in hit[:20]) if ids is not None else (),
            )


@rule("layer-empty", family="metadata", severity="warning")
def layer_empty(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer named in the manifest is there but holds no feature.

    Catches
    -------
    A layer of any role (units, lines, extent, samples, structures) with
    zero features, often a layer exported before it was filled, or the wrong
    one of two layers of similar name. An empty units layer is an error (a
    geological map without unit polygons has nothing to check or publish); an
    empty layer of another role is a warning. The checks that need the empty
    layer are not run, so this is the one finding about it. Empty tables
    (legend, analyses) are not covered by this rule; a layer whose features
    all lack geometry is `geometry-missing`.

    Why it matters
    --------------
    Every check of the layer passes trivially, and checks that compare other
    layers with it (contacts against unit boundaries, legend against units)
    report a flood of problems whose one cause is the empty layer.

    Fix
    ---
    Point the manifest at the layer that holds the features, or export the
    layer again from the GIS project.

    Example
    -------
    A units layer `map.gpkg:units` with no rows gives "units layer
    map.gpkg:units has no features; the checks that need it were not run".
    """
    for role, layer in project.sources.items():
        if len(layer.frame) == 0:
            yield Hit(
                f"{role} layer {layer.source} has no features; the checks that need it were not run.",
                layer=role,
                severity=Severity.ERROR if role == "units" else Severity.WARNING,
            )


@rule("coordinates-implausible", family="metadata", severity="error")
def coordinates_implausible(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A feature has a coordinate that is not a finite number, or lies far beyond any extent of its CRS.

    Catches
    -------
    Vertices that are infinite or not a number, and x or y values beyond
    ±720 degrees in a geographic CRS or beyond ±1e9 map units in any other
    (25 times the Earth's circumference in metres), usually a unit mix-up, a
    typed-in exponent or a broken import. The features are left out of the
    topology and linework checks, which report everything else. A place that
    is merely wrong but within these bounds is for `crs-outside-area-of-use`;
    Z and M values are not looked at.

    Why it matters
    --------------
    Areas and lengths of such a feature overflow to infinity, GEOS refuses to
    work on it, and a GIS zoomed to the layer shows nothing; the feature is
    effectively lost while its attributes remain.

    Fix
    ---
    Correct the vertex from the field data or the source file, or delete the
    feature if it is spurious.

    Example
    -------
    A unit polygon with a corner at 1e300 gives "units feature 3
    (map.gpkg:units) has a coordinate of 1e+300, far beyond ±1e+09 map units
    for its CRS".
    """
    for role, layer in project.sources.items():
        mask, largest = layer.far
        limit = coordinate_limit(layer.crs)
        unit = "degrees" if layer.crs is not None and layer.crs.is_geographic else "map units"
        for i in np.flatnonzero(mask):
            fid = layer.ids[i]
            value = "a coordinate that is not a finite number" if not np.isfinite(largest[i]) else f"a coordinate of {largest[i]:.4g}"
            yield Hit(
                f"{role} feature {fid} ({layer.source}) has {value}, far beyond ±{limit:.4g} {unit} for its CRS; "
                "it is left out of the topology and linework checks.",
                layer=role,
                features=(fid,),
            )


@rule("measures-source-only", family="metadata", severity="warning")
def measures_source_only(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer's geometries carry M (measure) values that the package's map files will not hold.

    Catches
    -------
    Layers whose geometries carry M values besides x, y (and z): a GeoPackage
    layer of type LineString M, Point ZM and the like
    (`gpkg_geometry_columns.m` 1 or 2), a PolyLineM or PointZ shapefile;
    route measures along a traverse, depths along a borehole trace. The
    finding names the layer and counts the features with M. archivist reads
    geometries through GDAL with pyogrio, which returns them without M, so
    the checks ignore the M values (their order along a line, gaps and
    duplicates are not looked at), and `archivist pack` writes
    `data/map.gpkg` and the GeoJSON copies without them. GeoJSON has no M
    coordinate at all (RFC 7946, section 3.1.1: a position holds longitude,
    latitude and optionally elevation). Z values are not affected.

    Why it matters
    --------------
    The packaged map silently differs from the mapper's: a user who opens
    `map.gpkg` finds lines without the measures the field work produced. The
    package does not lose them: `data/source/` keeps the input file byte for
    byte, and the package README says where they are.

    Fix
    ---
    Nothing is wrong with the map. If the M values matter to the next user,
    say so in the abstract, or also store them as attributes (a start and end
    measure per line, a depth per sample) so that every file of the package
    holds them; otherwise accept the finding or turn it off with
    `[checks.severity] measures-source-only = "off"`.

    Example
    -------
    A lines layer of type LineString M gives "lines layer map.gpkg:lines: 2
    features carry M (measure) values, which archivist does not read; a
    package made from it holds them only in source/ ...".
    """
    for role, layer in project.sources.items():
        if layer.measured:
            yield Hit(measures_statement(layer) + ".", layer=role)
