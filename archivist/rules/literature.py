"""Family `literature`: analyses compiled from publications: is each one cited, located and described?

An analyses table may mix the team's own analyses with values taken from
publications. `[tables.analyses] source_field` names the column that says
where each row comes from: a DOI, or a key into the references table
(`[tables.references]`: one row per work with its key, DOI and citation).
Which rows are from the literature is decided by
:mod:`archivist.vocab.literature`, never guessed: the rows whose source is
not blank and not the team's own marker (`own_source`, default "this study"
or "this work"), or, with `origin_field`, the rows that column marks as
literature. Such rows are not the team's samples: `analysis-orphan` leaves
them alone, and they carry their own location (`lon_field`/`lat_field` in
degrees, or `x_field`/`y_field` in the map CRS) and, when known, their
analytical method (`method_field`).

These checks test the bookkeeping of the citations: that each compiled row
names a work, that DOIs are well formed by the DOI Handbook's syntax and
that keys resolve in the references table. They do not look the DOIs up
(no network), nor judge whether the cited work holds the values.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Iterator

import numpy as np
import shapely

from ..analysis.messages import offset, plural
from ..analysis.points import map_extent
from ..farcoords import far_out
from ..identifiers import doi_problem
from ..model import Hit
from ..registry import rule
from ..vocab import literature as vl
from ..vocab.coordinates import DEFAULT_LONLAT_CRS, degrees, lonlat_columns

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject, Table

NEEDS = ("analyses",)


def _comp(project: MapProject, ctx: CheckContext) -> vl.Compilation:
    return ctx.shared("literature:compilation", lambda: vl.compilation(project.tables["analyses"]))


def _row(table: Table, i: int, column: str | None) -> str:
    """Where row ``i`` lives: its cell in ``column`` (else in the first column)."""
    col = column if column is not None else str(table.frame.columns[0])
    return table.data.cell(i, col)


def _sample(table: Table, i: int) -> str:
    col = table.field("sample_field")
    if col is None:
        return ""
    from ..readers import as_text

    sid = as_text(table.frame[col].iloc[i]).strip()
    return f" (sample {sid})" if sid else ""


def _features(table: Table, i: int) -> tuple[str, ...]:
    col = table.field("sample_field")
    if col is None:
        return ()
    from ..readers import as_text

    sid = as_text(table.frame[col].iloc[i]).strip()
    return (sid,) if sid else ()


# ---------------------------------------------------------------- locations of compiled rows

def _locations(project: MapProject, ctx: CheckContext) -> tuple[np.ndarray, str]:
    """Each compiled row's point in the CRS the rule runs in (None where it has none), and where it was read from."""

    def compute() -> tuple[np.ndarray, str]:
        table = project.tables["analyses"]
        comp = _comp(project, ctx)
        n = len(table.frame)
        out = np.full(n, None, dtype=object)
        spec = table.spec
        xcol, ycol = table.field("x_field"), table.field("y_field")
        if xcol is not None and ycol is not None:
            import pandas as pd

            x = pd.to_numeric(table.frame[xcol], errors="coerce").to_numpy(dtype=float)
            y = pd.to_numeric(table.frame[ycol], errors="coerce").to_numpy(dtype=float)
            ok = np.isfinite(x) & np.isfinite(y) & comp.literature
            pts = shapely.points(x[ok], y[ok])
            if project.local is not None:  # the map is in degrees: the rule runs in its local metric frame
                pts = project.local.to_local(pts)
            out[ok] = pts
            return out, f"columns '{xcol}'/'{ycol}' in the map CRS"
        cols = lonlat_columns(list(table.frame.columns), spec)
        if cols is None:
            return out, "no coordinate columns"
        lon = degrees(table.frame[cols.lon].to_numpy(dtype=object), "lon")
        lat = degrees(table.frame[cols.lat].to_numpy(dtype=object), "lat")
        ok = np.isfinite(lon) & np.isfinite(lat) & comp.literature
        where = f"columns '{cols.lon}'/'{cols.lat}'"
        target = project.local.map_crs if project.local is not None else project.crs
        if not ok.any() or target is None:
            return out, where
        import pyproj

        source = spec.get("lonlat_crs") if isinstance(spec.get("lonlat_crs"), str) else DEFAULT_LONLAT_CRS
        try:
            tr = pyproj.Transformer.from_crs(pyproj.CRS.from_user_input(source), target, always_xy=True)
        except pyproj.exceptions.CRSError:
            return out, where  # a lonlat_crs that is not a CRS is reported as manifest-invalid
        with np.errstate(invalid="ignore", over="ignore"):
            x, y = tr.transform(lon[ok], lat[ok])
        good = np.isfinite(x) & np.isfinite(y)
        idx = np.flatnonzero(ok)[good]
        pts = shapely.points(np.asarray(x)[good], np.asarray(y)[good])
        if project.local is not None:  # the map is in degrees: the rule runs in its local metric frame
            pts = project.local.to_local(pts)
        out[idx] = pts
        return out, where

    return ctx.shared("literature:locations", compute)


def _has_coordinates(project: MapProject) -> tuple[np.ndarray, str | None]:
    """Bool per row: the row's coordinate cells hold a readable pair; and a description of the columns (None if none)."""
    table = project.tables["analyses"]
    n = len(table.frame)
    xcol, ycol = table.field("x_field"), table.field("y_field")
    if xcol is not None and ycol is not None:
        import pandas as pd

        x = pd.to_numeric(table.frame[xcol], errors="coerce").to_numpy(dtype=float)
        y = pd.to_numeric(table.frame[ycol], errors="coerce").to_numpy(dtype=float)
        return np.isfinite(x) & np.isfinite(y), f"'{xcol}'/'{ycol}'"
    cols = lonlat_columns(list(table.frame.columns), table.spec)
    if cols is None:
        return np.zeros(n, dtype=bool), None
    lon = degrees(table.frame[cols.lon].to_numpy(dtype=object), "lon")
    lat = degrees(table.frame[cols.lat].to_numpy(dtype=object), "lat")
    return np.isfinite(lon) & np.isfinite(lat), f"'{cols.lon}'/'{cols.lat}'"


# ---------------------------------------------------------------- rules

@rule("literature-source-missing", family="literature", severity="error", needs=NEEDS)
def literature_source_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A row marked as taken from the literature names no source.

    Catches
    -------
    Rows of the analyses table that `[tables.analyses] origin_field` marks
    as compiled from a publication (a cell reading literature, published,
    compiled...) whose `source_field` cell is blank, or any such row when
    the manifest names no `source_field` at all. Without `origin_field` a
    row with a blank source is the team's own analysis by definition
    (`archivist.vocab.literature`), so this rule cannot fire there: such a
    row is joined to the samples and `analysis-orphan` reports it if it
    matches none.

    Why it matters
    --------------
    A value copied from a publication without its reference cannot be
    checked against the original, credited, or weighed against its method
    and era; the next user cannot tell it from a number typed by hand.

    Fix
    ---
    Write the work's DOI, or its key in the references table, into the
    source column of the row.

    Example
    -------
    A row whose origin reads "literature" and whose source cell is empty
    gives "analyses.xlsx, sheet 'majors', cell N31: compiled analysis
    (sample VF-12) names no source: give its DOI or reference key in
    column 'source'".
    """
    comp = _comp(project, ctx)
    table = project.tables["analyses"]
    rows = np.flatnonzero(comp.literature & (comp.source == ""))
    where_col = comp.source_col or comp.origin_col
    want = f"column '{comp.source_col}'" if comp.source_col else "a column named by [tables.analyses] source_field"
    for i in map(int, rows):
        yield Hit(
            f"{_row(table, i, where_col)}: compiled analysis{_sample(table, i)} names no source: give its DOI or "
            f"reference key in {want}.",
            layer="analyses",
            features=_features(table, i),
        )


@rule("literature-doi-malformed", family="literature", severity="error", needs=NEEDS)
def literature_doi_malformed(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A cited DOI is not written as a DOI can be.

    Catches
    -------
    Source cells of compiled rows, and DOI cells of the references table,
    that are written as a DOI (they start with `10.`, `doi:` or
    `info:doi/`, or hold `doi.org/`) but break the DOI syntax of the DOI
    Handbook (section 2.2): no `/` between prefix and suffix, a registrant
    code that is not digits, an empty suffix, white space inside the suffix
    (a line break pasted in). Resolver forms (`https://doi.org/...`,
    `http://dx.doi.org/...`), `doi:` and percent-encoded slashes (`%2F`)
    are read as the DOI they carry (`archivist.identifiers`). Whether the
    DOI is registered is not checked (archivist works offline).

    Why it matters
    --------------
    A broken DOI resolves nowhere: the value loses its link to the work it
    came from, and the package's DataCite record cannot list the work.

    Fix
    ---
    Copy the DOI again from the publication's landing page (it starts with
    "10." and has a "/" after the prefix).

    Example
    -------
    A source cell `10.5555 tarrow.2011.004` gives "analyses.xlsx, sheet
    'majors', cell N32: DOI '10.5555 tarrow.2011.004' has no "/" between
    prefix and suffix".
    """
    comp = _comp(project, ctx)
    table = project.tables["analyses"]
    for i in map(int, np.flatnonzero(comp.literature & comp.doi)):
        why = doi_problem(str(comp.source[i]))
        if why is not None:
            yield Hit(f"{_row(table, i, comp.source_col)}: DOI '{comp.source[i]}' {why}.", layer="analyses",
                      features=_features(table, i))
    refs = project.tables.get("references")
    col = vl.column(refs, "doi") if refs is not None else None
    if refs is None or col is None:
        return
    for r in vl.references(refs):
        why = doi_problem(r.doi) if r.doi else None
        if why is not None:
            yield Hit(f"{refs.data.cell(r.row, col)}: DOI '{r.doi}' of reference {r.key or r.row + 1} {why}.",
                      layer="references", features=(r.key,) if r.key else ())


@rule("literature-reference-unknown", family="literature", severity="error", needs=NEEDS)
def literature_reference_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A compiled row cites a reference key that the references table does not hold.

    Catches
    -------
    Source cells of compiled rows that are not written as a DOI (so they
    are reference keys) and match no key of `[tables.references]` exactly
    (edge spaces ignored), or any such key when the manifest declares no
    references table. A key differing only in case is named as the likely
    one. A cell that is really the team's own marker spelled otherwise
    ("own", "new") is reported too: `own_source` declares it.

    Why it matters
    --------------
    A key that resolves to no work is a citation to nothing: the value can
    no longer be traced to its publication, and the Data Package's foreign
    key from the analyses to the references table breaks.

    Fix
    ---
    Add the work to the references table, correct the key, or declare the
    team's own marker with `[tables.analyses] own_source`.

    Example
    -------
    A source `Vell2011` with no such key gives "analyses.xlsx, sheet
    'majors', cell N33: reference key 'Vell2011' is not in references.csv".
    """
    comp = _comp(project, ctx)
    table = project.tables["analyses"]
    refs = project.tables.get("references")
    keys = vl.reference_keys(refs) if refs is not None else set()
    folded = {k.casefold(): k for k in keys}
    for i in map(int, np.flatnonzero(comp.keyed)):
        key = str(comp.source[i])
        if key in keys:
            continue
        if refs is None:
            tail = "; no references table is declared ([tables.references])"
        else:
            tail = f"; probably '{folded[key.casefold()]}' (case differs)" if key.casefold() in folded else ""
        where = f" is not in {refs.source}" if refs is not None else " names no work"
        yield Hit(f"{_row(table, i, comp.source_col)}: reference key '{key}'{where}{tail}.", layer="analyses",
                  features=_features(table, i) + (key,))


@rule("literature-location-missing", family="literature", severity="error", needs=NEEDS)
def literature_location_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A compiled row has no coordinates of its own.

    Catches
    -------
    Compiled rows whose coordinate cells are blank or unreadable: the
    `x_field`/`y_field` pair (map CRS) when the manifest names one, else
    the longitude/latitude pair (`lon_field`/`lat_field`, or columns headed
    lon/longitude and lat/latitude; decimal degrees or
    degrees-minutes-seconds), and every compiled row when the table has no
    coordinate columns at all (one finding). The team's own rows take their
    location from their sample and are not concerned.

    Why it matters
    --------------
    A compiled analysis is not one of the team's samples, so nothing else
    places it: without coordinates it cannot be shown on the map or tied to
    a unit.

    Fix
    ---
    Copy the location the publication gives (its table or map) into the
    coordinate columns, with `lonlat_crs` when it is not WGS 84.

    Example
    -------
    A compiled row with empty lon/lat cells gives "analyses.xlsx, sheet
    'majors', cell P31: compiled analysis (sample VF-12) has no
    coordinates in 'lon'/'lat'".
    """
    comp = _comp(project, ctx)
    if not comp.any:
        return
    table = project.tables["analyses"]
    has, columns = _has_coordinates(project)
    if columns is None:
        yield Hit(
            f"{table.source}: {plural(int(comp.literature.sum()), 'compiled analysis', 'compiled analyses')} but no coordinate "
            "columns: add longitude/latitude columns (lon_field/lat_field) or x/y in the map CRS (x_field/y_field).",
            layer="analyses",
        )
        return
    col = table.field("x_field") or table.field("lon_field") or lonlat_columns(list(table.frame.columns), table.spec)
    first = col if isinstance(col, str) else (col.lon if col is not None else None)
    for i in map(int, np.flatnonzero(comp.literature & ~has)):
        yield Hit(f"{_row(table, i, first)}: compiled analysis{_sample(table, i)} has no coordinates in {columns}.",
                  layer="analyses", features=_features(table, i))


@rule("literature-outside-extent", family="literature", severity="warning", needs=NEEDS)
def literature_outside_extent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A compiled analysis lies outside the map's extent, beyond the margin allowed.

    Catches
    -------
    Compiled rows whose own location lies farther outside the extent layer
    (or, without one, the union of the unit polygons) than
    `[checks] literature_margin` (metres; default the map's tolerance, the
    same test as `sample-outside-extent`). A compilation of regional data
    around the sheet sets the margin to its radius. Rows with implausible
    coordinates are left to the crs checks' reading of far coordinates;
    rows without coordinates to `literature-location-missing`.

    Why it matters
    --------------
    A compiled value far off the map is usually a copying slip: a lost
    minus sign, swapped longitude and latitude, a point from another
    district of the same publication. Read against the map's units it
    would mislead.

    Fix
    ---
    Check the location against the publication; correct it, remove the row
    if it belongs elsewhere, or widen `literature_margin` for a regional
    compilation.

    Example
    -------
    A compiled row with its longitude's minus sign lost gives
    "analyses.xlsx, sheet 'majors', cell P32: compiled analysis (sample
    VF-14) lies 1902345.0 m east of the map extent".
    """
    comp = _comp(project, ctx)
    if not comp.any:
        return
    found = map_extent(ctx)
    if found is None:
        return
    extent, role = found.geometry, found.role
    table = project.tables["analyses"]
    points, _ = _locations(project, ctx)
    idx = np.flatnonzero(np.array([p is not None for p in points], dtype=bool))
    if not len(idx):
        return
    geoms = points[idx].astype(object)
    crs = project.crs
    plausible = ~far_out(geoms, crs)[0] if crs is not None else np.ones(len(idx), dtype=bool)
    margin = project.manifest.get("checks", {}).get("literature_margin")
    limit = float(margin) if isinstance(margin, (int, float)) and not isinstance(margin, bool) else ctx.tolerance
    dist = shapely.distance(extent, geoms)
    what = "the map extent" if role == "extent" else "the unit polygons (no extent layer)"
    col = lonlat_columns(list(table.frame.columns), table.spec)
    cell_col = table.field("x_field") or (col.lon if col is not None else None)
    for k in np.flatnonzero((dist > limit) & plausible):
        i = int(idx[k])
        (x0, y0), (x1, y1) = shapely.get_coordinates(shapely.shortest_line(extent, geoms[k]))
        towards = offset(crs, x0, y0, x1, y1)[1]
        yield Hit(
            f"{_row(table, i, cell_col)}: compiled analysis{_sample(table, i)} lies {dist[k]:.1f} m {towards} of {what}.",
            layer="analyses",
            features=_features(table, i),
            measure=float(dist[k]),
            geometry=geoms[k],
        )


@rule("literature-method-missing", family="literature", severity="notice", needs=NEEDS)
def literature_method_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A compiled row does not say by what method it was analysed.

    Catches
    -------
    Compiled rows whose `method_field` cell is blank, and, when the manifest
    names no `method_field`, the table once (the method of every compiled
    row is then unknown). A notice: older publications do not always state
    the method, and the team's own rows are described by the laboratory's
    sheet instead.

    Why it matters
    --------------
    Values from different methods (XRF on fused beads, ICP-OES, wet
    chemistry) differ in detection limits and accuracy; compiled without
    the method they cannot be weighed against the team's own.

    Fix
    ---
    Add a method column (`method_field`) and copy the method from each
    publication's methods section; leave it blank only where the
    publication does not say.

    Example
    -------
    A compiled row with an empty method cell gives "analyses.xlsx, sheet
    'majors', cell O31: compiled analysis (sample VF-12) does not name its
    analytical method".
    """
    comp = _comp(project, ctx)
    if not comp.any:
        return
    table = project.tables["analyses"]
    if comp.method_col is None:
        n = int(comp.literature.sum())
        yield Hit(f"{table.source}: {plural(n, 'compiled analysis', 'compiled analyses')} and no method column: name it with "
                  "[tables.analyses] method_field.", layer="analyses")
        return
    from ..readers import text_column

    method = np.array([s.strip() for s in text_column(table.frame[comp.method_col])], dtype=object)
    for i in map(int, np.flatnonzero(comp.literature & (method == ""))):
        yield Hit(f"{_row(table, i, comp.method_col)}: compiled analysis{_sample(table, i)} does not name its analytical method.",
                  layer="analyses", features=_features(table, i))
