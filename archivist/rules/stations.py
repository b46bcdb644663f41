"""Family `stations`: field stations, the samples and measurements that name them, and files handed in together.

Stations are points (`[layers.stations]`, or a table with
`x_field`/`y_field`/`crs`) with an id (`id_field`, default `station_id`), and
optionally the date, the observer, the free-text observation and the unit
recorded there. Samples and structural measurements name their station in
`station_field` (default: a field called `station` or `station_id`).

A layer or table may be read from a list of files (`path = [...]`: the
season's hand-in, one file per mapper); each row keeps its file in the
column `source_file`, and the findings name the file and row.

These checks test the bookkeeping between stations and what was taken
there; they do not judge the observations' text, dates or observers.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Iterator

import numpy as np
import shapely

from ..analysis.idmatch import SampleIndex, probable_samples, space_keys
from ..analysis.messages import join_words, layer_feature, plural
from ..analysis.points import (
    outside_hits,
    unit_mismatch_hit,
    unit_mismatches,
)
from ..analysis.stations import (
    LINKED_ROLES,
    ground_distances,
    identical_rows,
    repeated_across_files,
    row_place,
    station_links,
    table_place,
)
from ..model import Hit, Severity
from ..registry import rule

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import Layer, MapProject

NOUNS = {"samples": "sample", "structures": "measurement", "stations": "station", "analyses": "analysis"}
LISTED = 10  # rows named in one finding before "and N more"


def _places(layer: Layer, rows: np.ndarray) -> str:
    return join_words(row_place(layer, int(i)) for i in rows)


@rule("station-duplicate-id", family="stations", severity="error", needs=("stations",))
def station_duplicate_id(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two stations share an id, or a station has none.

    Catches
    -------
    Station ids (`id_field`) used by more than one row, including ids that
    differ only in case, spaces or dash characters, and stations with an
    empty id. The finding names each row by its file and row, so a conflict
    between two mappers' files names both files, and says what differs
    (position, in ground metres, and the other fields). Rows identical in
    every field and position (the same row handed in twice, or entered
    twice) are a notice saying so.

    Why it matters
    --------------
    Samples, measurements and photos find their station by its id alone;
    with two stations under one id they are tied to the wrong place and
    observation.

    Fix
    ---
    Agree the station numbering between the mappers (a prefix per person
    is common practice), renumber one of the two, and delete rows handed in
    twice.

    Example
    -------
    "station KV-12 is in stations_anna.csv row 4 and stations_ben.csv row 9
    with different positions (35.2 m apart) and observations".
    """
    layer = project.layers["stations"]
    ids = np.asarray(layer.ids, dtype=object)
    keys = space_keys(ids).to_numpy()
    geoms = layer.geometry
    blank = np.flatnonzero(keys == "")
    if len(blank):
        shown = _places(layer, blank[:LISTED]) + (f" and {len(blank) - LISTED} more" if len(blank) > LISTED else "")
        yield Hit(f"{plural(len(blank), 'station')} {'has' if len(blank) == 1 else 'have'} no id in "
                  f"{layer.spec.get('id_field')}: {shown}.", layer="stations")
    skip = {layer.source_column, layer.frame.geometry.name} - {""}
    same = identical_rows(layer.frame, layer.source_column, geoms)
    counts = {k: int(n) for k, n in zip(*np.unique(keys[keys != ""], return_counts=True))}
    id_col = layer.field("id_field")
    for key in sorted(k for k, n in counts.items() if n > 1):
        idx = np.flatnonzero(keys == key)
        written = list(dict.fromkeys(str(ids[i]) for i in idx))
        name = written[0] if len(written) == 1 else " / ".join(repr(w) for w in written)
        pts = [g for g in geoms[idx] if g is not None and not g.is_empty]
        files = layer.row_files
        across = files is not None and len(set(files[idx])) > 1
        if (same[idx] >= 0).all() and len(set(same[idx])) == 1:
            how = "handed in twice" if across else "entered twice"
            yield Hit(f"station {name} is {how}, identical in every field and position: {_places(layer, idx)}; "
                      "keep one row.", layer="stations", features=tuple(written), measure=0.0,
                      geometry=pts[0] if pts else None, severity=Severity.NOTICE)
            continue
        differs = []
        spread = None
        if len(pts) > 1:
            a = np.array([pts[0]] * (len(pts) - 1), dtype=object)
            d = ground_distances(project, a, np.array(pts[1:], dtype=object))
            spread = float(np.nanmax(d)) if np.isfinite(d).any() else None
            if spread is not None and spread > 0:
                differs.append(f"different positions ({spread:.1f} m apart)")
        elif len(pts) != len(idx):
            differs.append("a position in one and none in another")
        for col in [c for c in layer.frame.columns if c not in skip and c != id_col]:
            values = {str(v) for v in layer.frame[col].iloc[idx].fillna("").astype(str)}
            if len(values) > 1:
                differs.append(f"different {col}")
        if len(written) > 1:
            differs.append("ids differing only in case, spaces or dashes")
        what = join_words(differs) if differs else "the same fields"
        yield Hit(f"station {name} is in {_places(layer, idx)} with {what}.", layer="stations",
                  features=tuple(written), measure=spread,
                  geometry=shapely.multipoints(pts) if pts else None)


@rule("station-unknown", family="stations", severity="error", needs=("stations",))
def station_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A sample or structural measurement names a station that does not exist.

    Catches
    -------
    Rows of the samples and structures layers whose station (`station_field`,
    default a field called `station` or `station_id`) is not exactly the id
    of a station. When the id looks mangled (leading zeros lost, case,
    spaces, dashes, a spreadsheet's date or scientific notation, as
    `analysis-orphan` reads them) the station it probably meant is named.
    Up to three rows of a layer give one finding each; more give one
    finding per layer listing them. Rows with an empty station are not
    reported: not every sample is taken at a station.

    Why it matters
    --------------
    A sample tied to a station that is not in the data has lost its
    observation: the outcrop description, the date and the observer.

    Fix
    ---
    Correct the station id in the sample or measurement, or add the
    missing station (often a mapper's file left out of the hand-in).

    Example
    -------
    "sample TM24-0007 (feature 7) names station ST24-7, which is not a
    station; probably ST24-007 (leading zeros lost)".
    """
    stations = project.layers["stations"]
    index = SampleIndex.of([str(i).strip() for i in stations.ids])
    for role in LINKED_ROLES:
        links = station_links(project, role)
        if links is None or not len(links.unknown):
            continue
        layer = project.layers[role]
        noun = NOUNS[role]
        guesses = [probable_samples(links.named[i], index) for i in links.unknown]

        def hint(found: list[tuple[str, str]]) -> str:
            if len(found) == 1:
                return f"probably {found[0][0]} ({found[0][1]})"
            return "perhaps one of " + ", ".join(f"{sid} ({how})" for sid, how in found[:5]) if found else ""

        if len(links.unknown) <= 3:
            for i, found in zip(links.unknown, guesses):
                tail = f"; {hint(found)}" if found else ""
                yield Hit(f"{layer_feature(layer, int(i), noun)} names station {links.named[i]!r} in "
                          f"'{links.column}', which is not a station{tail}.", layer=role,
                          features=(str(layer.ids[i]), str(links.named[i])), geometry=layer.geometry[i])
            continue
        shown = []
        for i, found in list(zip(links.unknown, guesses))[:LISTED]:
            shown.append(f"{links.named[i]!r} ({row_place(layer, int(i))}" + (f"; {hint(found)})" if found else ")"))
        more = f" and {len(links.unknown) - LISTED} more" if len(links.unknown) > LISTED else ""
        names = sorted(set(links.named[links.unknown]))
        pts = [g for g in layer.geometry[links.unknown] if g is not None and not g.is_empty]
        yield Hit(f"{plural(len(links.unknown), noun)} of {layer.source} name {plural(len(names), 'station')} "
                  f"that {'is' if len(names) == 1 else 'are'} not in the stations ({links.column}): "
                  f"{', '.join(shown)}{more}.", layer=role, features=tuple(names[:LISTED]),
                  geometry=shapely.multipoints(pts) if pts else None)


@rule("station-outside-extent", family="stations", severity="warning", needs=("stations",))
def station_outside_extent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A station lies outside the map's extent.

    Catches
    -------
    Stations farther than the tolerance outside the extent layer (or,
    without one, the union of the unit polygons), as `sample-outside-extent`
    judges samples; the finding gives the distance and direction. Stations
    without a location are skipped.

    Why it matters
    --------------
    A station off the map is usually a typo in a coordinate, a GPS set to
    another datum, or a station of another project; its observation cannot
    be read against the map.

    Fix
    ---
    Correct the coordinates from the field book or GPS log, or remove the
    stations that belong to another project.

    Example
    -------
    A station with a dropped digit in its northing gives "station ST24-031
    (row 32 of stations_ben.csv) lies 540012.3 m south of the map extent".
    """
    yield from outside_hits(project, ctx, "stations", "station")


@rule("station-unit-mismatch", family="stations", severity="error", needs=("stations", "units"))
def station_unit_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The unit recorded at a station differs from the unit polygon it falls in.

    Catches
    -------
    Stations whose `unit_field` value is not the unit of any polygon
    containing the point, judged as `sample-unit-mismatch` judges samples:
    a notice within the tolerance of the polygon's edge or under a
    superficial unit; the finding gives the distance to the edge and to the
    nearest polygon of the recorded unit. Stations with no recorded unit,
    or outside every polygon, are skipped.

    Why it matters
    --------------
    The station's observation describes another rock than the map shows
    there: either the record or the contact is wrong, and the next mapper
    cannot tell which.

    Fix
    ---
    Check the field book: correct the recorded unit, or move the contact if
    the observation shows the mapped boundary is wrong.

    Example
    -------
    "station ST24-004 (row 4 of stations_anna.csv) is recorded as KES but
    lies in polygon 12 (MAR), 35.2 m inside its edge; the nearest KES
    polygon, polygon 9, is 35.4 m east".
    """
    stations, units = ctx.layer("stations"), ctx.layer("units")
    if stations is None or units is None:
        return
    pts = stations.geometry
    for m in unit_mismatches(project, ctx, "stations"):
        yield unit_mismatch_hit(stations, units, m, ctx.tolerance, "station", "stations", pts[m.index])


@rule("station-link-distant", family="stations", severity="warning", needs=("stations",))
def station_link_distant(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A sample or structural measurement lies far from the station it names.

    Catches
    -------
    Samples and measurements whose ground distance to their station is
    more than `[checks] station_distance_m` (default 100 m: our choice,
    about the outcrop area described at one stop and several times a
    handheld GPS's error). Distances are in metres: grid distance in a
    projected CRS, the geodesic on the CRS's ellipsoid (pyproj `Geod`) in a
    geographic one. Rows naming no station or an unknown one
    (`station-unknown`) and rows without a location are skipped.

    Why it matters
    --------------
    A sample far from its station is usually a wrong station number or a
    wrong coordinate; either way the sample is described by another
    outcrop's observation.

    Fix
    ---
    Correct the station number or the coordinates from the field book; for
    a sample deliberately taken away from the station, give it a station of
    its own, or raise `station_distance_m`.

    Example
    -------
    "sample TM24-0012 (feature 5) is 412.7 m from its station ST24-003
    (row 3 of stations_anna.csv); more than station_distance_m (100 m)".
    """
    stations = ctx.layer("stations")  # in the map CRS, as every layer of these checks
    limit = float(ctx.config.station_distance_m)
    for role in LINKED_ROLES:
        links = station_links(project, role)
        layer = ctx.layer(role)
        if links is None or layer is None or stations is None:
            continue
        rows = np.flatnonzero(links.station >= 0)
        if not len(rows):
            continue
        d = ground_distances(project, layer.geometry[rows], stations.geometry[links.station[rows]])
        for k in np.flatnonzero(np.nan_to_num(d, nan=0.0) > limit):
            i, s = int(rows[k]), int(links.station[rows[k]])
            yield Hit(f"{layer_feature(layer, i, NOUNS[role])} is {d[k]:.1f} m from its station {links.named[i]} "
                      f"({row_place(stations, s)}); more than station_distance_m ({limit:g} m).", layer=role,
                      features=(str(layer.ids[i]), str(links.named[i])), measure=float(d[k]),
                      geometry=shapely.multipoints([layer.geometry[i], stations.geometry[s]]))


@rule("hand-in-row-repeated", family="stations", severity="notice")
def hand_in_row_repeated(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The same row is in two of the files handed in together.

    Catches
    -------
    Rows of samples, structures or analyses read from a list of files
    (`path = [...]`) that are identical in every field (and position) to a
    row of another of those files: the same row handed in twice. Stations
    are judged by `station-duplicate-id`. Rows that share an id but differ
    are left to the id checks of their layer (`sample-duplicate-id`); two
    rows repeated within one file are not reported here.

    Why it matters
    --------------
    A row counted twice doubles a sample or a measurement in every
    statistic drawn from the data, and the next user cannot tell which copy
    is the record.

    Fix
    ---
    Keep the row in one file: the file of the mapper who collected it.

    Example
    -------
    "sample TM24-0031 is handed in twice, identical: samples_anna.csv row
    12 and samples_ben.csv row 3".
    """
    for role in ("samples", "structures"):
        layer = project.layers.get(role)
        if layer is None or layer.row_files is None:
            continue
        for rows in repeated_across_files(layer.frame, layer.source_column, layer.geometry):
            pts = [g for g in layer.geometry[rows] if g is not None and not g.is_empty]
            own = layer.ids[rows[0]] if layer.field("id_field") is not None else None
            name = f"{NOUNS[role]} {own}" if own else f"a {NOUNS[role]}"
            yield Hit(f"{name} is handed in twice, identical: {_places(layer, rows)}.", layer=role,
                      features=tuple(dict.fromkeys(str(layer.ids[i]) for i in rows)),
                      geometry=pts[0] if pts else None)
    table = project.tables.get("analyses")
    if table is not None and table.source_column and table.source_column in table.frame.columns:
        col = table.field("sample_field")
        for rows in repeated_across_files(table.frame, table.source_column):
            sid = str(table.frame[col].iloc[rows[0]]) if col else ""
            name = f"the analysis of {sid}" if sid else "an analysis"
            yield Hit(f"{name} is handed in twice, identical: {join_words(table_place(table, int(i)) for i in rows)}.",
                      layer="analyses", features=(sid,) if sid else ())
