"""Family `crs`: is every layer georeferenced, in the declared CRS, and where that CRS is meant to be used?

The reference for "where a CRS is meant to be used" is the area of use
recorded for it in the EPSG dataset, as pyproj reads it from PROJ's database
(`CRS.area_of_use`). CRSs are compared as CRSs (`CRS.equals`), never as
strings, and reported to people as "EPSG:code (name)".

A wrong UTM zone, hemisphere or datum is caught only where something tells:
coordinates that leave the labelled CRS's area of use
(`crs-outside-area-of-use`), or evidence inside the project independent of
the label: longitude/latitude columns, a declared geographic extent, layers
in another CRS (`crs-zone-evidence`). A map labelled consistently with a
neighbouring zone, still inside that zone's area of use, with nothing else
to compare with, is consistent with itself and cannot be told from a right one.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Iterator

import numpy as np
import pyproj
from shapely.geometry import box

from ..analysis.messages import box_words, distance_words, join_words, plural, verb
from ..analysis.placement import area_of_use, overshoot, suggest_projected
from ..model import Hit, Severity
from ..project import crs_label
from ..registry import rule
from ..vectorio import sidecar

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
    from ..analysis.zones import Candidate, ClusterEvidence, ColumnEvidence
    from ..project import MapProject


def _label(crs: pyproj.CRS | None) -> str:
    return crs_label(crs) or "no CRS"


# ---------------------------------------------------------------- rules

@rule("crs-missing", family="crs", severity="error")
def crs_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer has no coordinate reference system.

    Catches
    -------
    Layers whose file carries no CRS: a shapefile without its `.prj`, a
    GeoJSON or GeoPackage written without one, or a table of sample
    coordinates (`x_field`/`y_field`) with no `crs` key in its manifest
    entry. The other checks then assume the map CRS for that layer; this rule
    says that it is an assumption.

    Why it matters
    --------------
    Coordinates without a CRS are numbers without meaning: the next user's
    GIS will guess (often wrongly, or not at all), and the layer may land in
    the wrong place or the wrong hemisphere.

    Fix
    ---
    Assign the CRS the coordinates were captured in (not a reprojection) in
    the GIS and re-save the layer, or give `crs = "EPSG:..."` in the layer's
    manifest entry for a coordinate table.

    Example
    -------
    `samples.csv` with `x_field`/`y_field` and no `crs` gives
    "layers.samples (samples.csv) has no CRS: add crs = "EPSG:..." to [layers.samples]".
    """
    for role, layer in project.sources.items():
        if layer.crs is not None:
            continue
        assumed = f"; the checks assume the map CRS {_label(project.crs)}" if project.crs is not None else ""
        if layer.spec.get("x_field"):
            how = f': add crs = "EPSG:..." to [layers.{role}]'
        elif layer.path.suffix.lower() == ".shp" and sidecar(layer.path, ".prj") is not None:
            how = " (its .prj is there but could not be read or understood: see layer-unreadable)"
        elif layer.path.suffix.lower() == ".shp":
            how = " (is the .prj file missing beside the .shp?)"
        else:
            how = ": assign the CRS in the GIS and save the layer again"
        geometry = None
        if project.crs is not None:  # where the layer lands if the map CRS is right for it
            bounds = layer.frame.total_bounds if len(layer.frame) else None
            if bounds is not None and np.isfinite(bounds).all():
                geometry = box(*bounds)
        yield Hit(f"layers.{role} ({layer.source}) has no CRS{how}{assumed}.", layer=role, geometry=geometry)


@rule("crs-mismatch", family="crs", severity="error")
def crs_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer's CRS differs from the map CRS declared in `[map] crs`.

    Catches
    -------
    Layers whose CRS is not the same CRS as `map.crs`, compared with pyproj's
    `CRS.equals` (axis order ignored, as GIS files store easting/longitude
    first): the same CRS written two ways (an EPSG code and an ESRI `.prj`,
    say) is not reported. When both CRSs are projected, the finding says how
    far apart the two put the same coordinate pair at the layer's centre. A
    layer whose coordinates the project's own evidence shows to be in the map
    CRS already (only its label differs) is left to `crs-zone-evidence`.

    Why it matters
    --------------
    A map whose layers are in different CRSs only lines up in software that
    reprojects on the fly; in a package, a database or another GIS, the layers
    fall apart, and every check of contacts against polygons is meaningless.

    Fix
    ---
    Reproject the layer to the map CRS in the GIS (a real transformation, not
    "assign CRS"), or, if the layer's coordinates are really in the map CRS
    and only its label is wrong, assign the map CRS to it.

    Example
    -------
    Samples in EPSG:32632 on a map in EPSG:32633 give "layers.samples is
    EPSG:32632 (WGS 84 / UTM zone 32N) where map.crs is EPSG:32633
    (WGS 84 / UTM zone 33N); at the layer's centre the two place the same
    coordinates 321.5 km apart".
    """
    target = project.crs
    if target is None:
        return
    true = ctx.zone_evidence().true_crs()
    for role, layer in project.sources.items():
        crs = layer.crs
        if crs is None or crs.equals(target, ignore_axis_order=True):
            continue
        if role in true and true[role].equals(target, ignore_axis_order=True):
            continue  # only the label differs: crs-zone-evidence says so, once
        extra, measure = "", None
        placed = ctx.placements().get(role)
        if crs.is_projected and target.is_projected and placed is not None and placed.present.any():
            b = placed.bounds[placed.present]
            cx, cy = (np.nanmin(b[:, 0]) + np.nanmax(b[:, 2])) / 2, (np.nanmin(b[:, 1]) + np.nanmax(b[:, 3])) / 2
            try:
                tx, ty = pyproj.Transformer.from_crs(crs, target, always_xy=True).transform(cx, cy, errcheck=False)
            except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
                tx = ty = np.nan
            if np.isfinite(tx) and np.isfinite(ty):
                metres = float(np.hypot(tx - cx, ty - cy)) * (target.axis_info[0].unit_conversion_factor or 1.0)
                measure = metres
                extra = (
                    f"; at the layer's centre the two place the same coordinates {distance_words(metres)} apart"
                    if metres >= 1
                    else "; they place the layer's centre less than 1 m apart, but they are not the same CRS"
                )
        geometry = None
        if placed is not None and placed.present.any():
            b = placed.bounds[placed.present]
            try:
                tb = pyproj.Transformer.from_crs(crs, target, always_xy=True).transform_bounds(
                    np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3]), densify_pts=21
                )
                geometry = box(*tb) if np.isfinite(tb).all() else None
            except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError):
                geometry = None
        yield Hit(
            f"layers.{role} ({layer.source}) is {_label(crs)} where map.crs is {_label(target)}{extra}.",
            layer=role,
            measure=measure,
            geometry=geometry,
        )


@rule("crs-outside-area-of-use", family="crs", severity="warning")
def crs_outside_area_of_use(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A layer's extent lies outside the area of use of its CRS.

    Catches
    -------
    Layers whose features, transformed to longitude/latitude, reach beyond
    the area of use recorded for their CRS in the EPSG dataset (pyproj's
    `CRS.area_of_use`), the classic sign of the wrong UTM zone, the wrong
    hemisphere or the wrong datum's grid. A layer without a CRS is tested
    against the map CRS. Layers sharing a CRS are reported together. The
    finding says by how far (geodesic distance on the WGS 84 ellipsoid) and in
    which direction; features whose coordinates the CRS cannot place on the
    globe at all are counted. It does not know where the map should be: a map
    inside the area of use but in the wrong place is not caught here (see
    `crs-zone-evidence`, which also reports, alone, the layers whose true CRS
    the project's own evidence shows; they are left out here).

    Why it matters
    --------------
    Outside its area of use a projected CRS distorts lengths and areas beyond
    its design limits, and a map placed in the wrong zone or datum lands
    hundreds of kilometres from the ground it shows; the next user overlays it
    on other data and it does not fit.

    Fix
    ---
    If the coordinates were captured in another CRS, assign that one; if the
    map really spans the edge of a zone, this is common practice and the
    finding can be accepted (or the severity lowered in `[checks.severity]`)
    when the overshoot is small. Local practice and national grids take
    precedence over this rule.

    Example
    -------
    A map in EPSG:32633 (UTM zone 33N, 12°E to 18°E) whose coordinates
    belong to zone 32 gives "layers units, lines, extent, samples, structures
    (EPSG:32633 (WGS 84 / UTM zone 33N)) reach 2.79° (about 149.5 km) east
    of the CRS's area of use (12.00°E to 18.00°E, 0.00°N to 84.00°N); ...".
    """
    groups: list[tuple[pyproj.CRS, list]] = []
    for placed in ctx.placements().values():
        for crs, members in groups:
            if crs.equals(placed.crs, ignore_axis_order=True):
                members.append(placed)
                break
        else:
            groups.append((placed.crs, [placed]))
    swaps = ctx.swap_suspects()
    explained = ctx.zone_evidence().true_crs()  # layers whose true CRS the project shows: reported once, by crs-zone-evidence
    for crs, every in groups:
        members = [p for p in every if p.role not in explained]
        area = area_of_use(crs)
        if area is None or not members:
            continue
        known = ctx.zone_evidence().known_rows()  # features shown to be in another CRS: reported by crs-zone-evidence
        members = [p if p.role not in known else replace(p, present=p.present & ~known[p.role]) for p in members]
        names = ", ".join(p.role for p in members)
        layer = members[0].role if len(members) == 1 else None
        # per member, its present features that cannot be placed and those placed outside the area
        rows = [np.flatnonzero(p.present) for p in members]
        bad = [p.failed()[r] for p, r in zip(members, rows)]
        out_rows = [r[~p.inside(area)[r] & ~f] for p, r, f in zip(members, rows, bad)]
        failed = int(sum(int(f.sum()) for f in bad))
        outside = sum(len(r) for r in out_rows)
        hint = ""
        if any(p.role in swaps for p in members):
            hint = "; x and y look swapped (see crs-axis-swap-suspected)"
        where = f"layers {names}" if len(members) > 1 else f"layers.{names}"
        geometry = None
        if project.crs is None or crs.equals(project.crs, ignore_axis_order=True):
            b = np.concatenate([p.bounds[p.present] for p in members])
            if len(b):
                geometry = box(np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3]))
        if outside:
            b = np.concatenate([p.boxes(r) for p, r in zip(members, out_rows)])
            full = np.array([b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max()])
            metres, deg, direction = overshoot(full, area)
            yield Hit(
                f"{where} ({_label(crs)}) reach {deg:.2f}° (about {distance_words(metres)}) {direction} of the CRS's "
                f"area of use ({box_words(area)}); {plural(outside, 'feature')} {verb(outside, 'lies', 'lie')} outside it, spanning {box_words(full)}{hint}.",
                layer=layer,
                measure=metres,
                geometry=geometry,
            )
        if failed:
            yield Hit(
                f"{where} ({_label(crs)}): {plural(failed, 'feature')} {verb(failed, 'has', 'have')} coordinates the CRS cannot place on the globe "
                f"(outside the projection's domain){hint}.",
                layer=layer,
                geometry=geometry,
            )


def _short(crs: pyproj.CRS) -> str:
    epsg = crs.to_epsg(min_confidence=70)
    return f"EPSG:{epsg}" if epsg else crs.name


_HOW = {
    "zone": "a neighbouring zone",
    "hemisphere": "the other hemisphere",
    "zone and hemisphere": "a neighbouring zone in the other hemisphere",
    "datum": "the same zone on another datum",
}


def _within(metres: float) -> str:
    """How close readings agree: decimetres below 10 m, never "0 m"."""
    if metres < 0.1:
        return "0.1 m"
    return f"{metres:.1f} m" if metres < 10 else distance_words(metres)


def _layers_words(roles: tuple[str, ...]) -> str:
    return f"layers.{roles[0]}" if len(roles) == 1 else f"layers {', '.join(roles)}"


def _columns_words(ev: ColumnEvidence) -> str:
    return f"the longitude/latitude columns of layers.{ev.role} ({ev.columns.lon}, {ev.columns.lat})"


def _left_out(ev: ColumnEvidence) -> str:
    return f"; {ev.left_out} row(s) without a usable reading were left out" if ev.left_out else ""


# Datum shifts between the geodetic datums in use are metres to about a kilometre (from memory): a
# disagreement that small may be columns written on another datum than they are read in.
DATUM_SHIFT_M = 2000.0


def _datum_hint(ev: ColumnEvidence, fit: Candidate | None, median: float | None = None) -> str:
    if (fit is None or fit.how != "datum") and not (fit is None and median is not None and median < DATUM_SHIFT_M):
        return ""
    return (f" (the columns are read as {_label(ev.lonlat_crs)}; if they were written on another datum, "
            f"name it with lonlat_crs in [layers.{ev.role}])")


def _guessed(ev: ColumnEvidence) -> str:
    if ev.columns.named:
        return ""
    return f" (the columns were found by their headers: if they hold something else, name the right ones with lon_field/lat_field in [layers.{ev.role}])"


def _column_clue(ev: ColumnEvidence, fit: Candidate | None) -> str:
    n, m = int(ev.disagree.sum()), len(ev.rows)
    median = float(np.nanmedian(ev.offsets[ev.disagree])) if np.isfinite(ev.offsets[ev.disagree]).any() else None
    away = f"a median {distance_words(median)} away" if median is not None else "where the CRS cannot place them"
    share = f"all {m}" if n == m else f"{n} of {m}"
    if ev.swapped_columns:
        k = int(ev.explained.sum())
        return (f"{_columns_words(ev)} put {share} features {away} from their positions, and agree with {'all' if k == n else k} of them to within "
                f"{_within(float(ev.fit_offsets.max()))} with longitude and latitude exchanged: the two columns look swapped{_left_out(ev)}")
    if ev.fit is not None and fit is not None and ev.fit.crs.equals(fit.crs):
        k = int(ev.explained.sum())
        return (f"{_columns_words(ev)} agree with {'all ' + str(k) if k == m else f'{k} of {m}'} positions to within "
                f"{_within(float(ev.fit_offsets.max()))} under {_short(fit.crs)}, and put {share} features {away} from "
                f"their positions under {_short(ev.crs)}{_datum_hint(ev, fit)}{_left_out(ev)}")
    return (f"{_columns_words(ev)} put {share} features {away} from their positions under {_short(ev.crs)}, and no neighbouring "
            f"zone, the other hemisphere or the same zone on another datum explains it{_datum_hint(ev, None, median)}{_guessed(ev)}{_left_out(ev)}")


def _cluster_geometry(project: MapProject, ctx: CheckContext, roles: tuple[str, ...], crs: pyproj.CRS):
    if project.crs is not None and not crs.equals(project.crs, ignore_axis_order=True):
        return None
    placed = ctx.placements()
    b = np.concatenate([placed[r].bounds[placed[r].present] for r in roles])
    if not len(b) or not np.isfinite(b).any():
        return None
    return box(np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3]))


def _cluster_hit(project: MapProject, ctx: CheckContext, ce: ClusterEvidence) -> Hit:
    c = ce.cluster
    label = _label(c.crs)
    names = ", ".join(c.roles)
    where = f"layers {names}" if len(c.roles) > 1 else f"layers.{names} ({project.sources[names].source})"
    fit = ce.fit
    clues: list[str] = [_column_clue(ev, fit) for ev in ce.columns]
    measure: float | None = None
    for ev in ce.columns:
        if measure is None and np.isfinite(ev.offsets[ev.disagree]).any():
            measure = float(np.nanmedian(ev.offsets[ev.disagree]))
    if ce.extent is not None:
        x = ce.extent
        declared = f"the declared geographic extent (map.geographic_extent: {box_words(x.declared)})"
        if x.fit is not None and fit is not None and x.fit.crs.equals(fit.crs):
            clues.append(f"{declared} holds them under {_short(fit.crs)}, while under {_short(c.crs)} they lie {distance_words(x.metres)} {x.direction} of it")
        else:
            clues.append(f"they lie {distance_words(x.metres)} {x.direction} of {declared}, and no neighbouring zone or the other hemisphere puts them inside it")
        measure = x.metres if measure is None else measure
    if ce.layers is not None:
        lv = ce.layers
        text = f"they line up with {_layers_words(lv.others)} only when read in {_short(lv.fit.crs)} (as labelled they lie {distance_words(lv.metres)} apart)"
        if lv.alternative is not None:
            roles, alt = lv.alternative
            text += (f"; reading {_layers_words(roles)} in {_short(alt.crs)} would line them up too, and the layers alone cannot "
                     "tell which label is wrong")
        clues.append(text)
        measure = lv.metres if measure is None else measure
    geometry = _cluster_geometry(project, ctx, c.roles, c.crs)
    if fit is not None:
        verb = "are" if len(c.roles) > 1 else "is"
        them = "these layers" if len(c.roles) > 1 else "the layer"
        labelled_alike = {r for r, p in ctx.placements().items() if p.crs.equals(c.crs, ignore_axis_order=True)}
        if project.crs is not None and fit.crs.equals(project.crs, ignore_axis_order=True):
            fix = f"Assign {_short(fit.crs)}, the map CRS, to {them} (assign the CRS, do not reproject: the numbers are right, the label is wrong)."
        elif set(c.roles) >= labelled_alike and (project.crs is None or project.crs.equals(c.crs, ignore_axis_order=True)):
            fix = f"Assign {_short(fit.crs)} to {them} and set map.crs to it (assign the CRS, do not reproject: the numbers are right, the label is wrong)."
        else:
            fix = f"Assign {_short(fit.crs)} to {them} (assign the CRS, do not reproject), then reproject {'them' if len(c.roles) > 1 else 'it'} to the map CRS."
        return Hit(
            f"{where} {verb} labelled {label} but the coordinates are in {_label(fit.crs)}, {_HOW[fit.how]}: {'; '.join(clues)}. {fix}",
            layer=c.roles[0] if len(c.roles) == 1 else None,
            measure=measure,
            geometry=geometry,
        )
    return Hit(
        f"{where} ({label}): {'; '.join(clues)}.",
        layer=c.roles[0] if len(c.roles) == 1 else None,
        measure=measure,
        geometry=geometry,
        severity=Severity.WARNING,
    )


def _partial_hit(project: MapProject, ev: ColumnEvidence) -> Hit:
    layer = project.sources[ev.role]
    bad = ev.rows[ev.disagree]
    n, m = len(bad), len(ev.rows)
    offs = ev.offsets[ev.disagree]
    median = f"median {distance_words(float(np.nanmedian(offs)))}" if np.isfinite(offs).any() else "the CRS cannot place them"
    ids = tuple(str(i) for i in layer.ids[bad][:20])
    shown = ", ".join(ids) + (f" and {n - len(ids)} more" if n > len(ids) else "")
    text = (f"layers.{ev.role} ({layer.source}): the longitude/latitude columns ({ev.columns.lon}, {ev.columns.lat}) of {n} of {m} "
            f"features disagree with their positions by more than {distance_words(ev.agree_m)} ({median}): {shown}")
    severity = Severity.WARNING
    if ev.fit is not None and ev.explained.any():
        k = int(ev.explained.sum())
        text += (f"; {'all' if k == n else f'{k}'} of them agree to within {_within(float(ev.fit_offsets.max()))} under "
                 f"{_label(ev.fit.crs)}, {_HOW[ev.fit.how]}: that part of the layer was captured in that CRS; reproject those features "
                 f"from {_short(ev.fit.crs)} to {_short(ev.crs)}")
        severity = Severity.ERROR
    elif ev.swapped_columns:
        text += f"; {int(ev.explained.sum())} of them agree with longitude and latitude exchanged: those cells look swapped"
    else:
        text += _guessed(ev)
    b = layer.frame.geometry.values[bad].total_bounds if n else None
    same = project.crs is None or layer.crs is None or layer.crs.equals(project.crs, ignore_axis_order=True)
    geometry = box(*b) if same and b is not None and np.isfinite(b).all() else None
    return Hit(text + _left_out(ev) + ".", layer=ev.role, features=ids, measure=float(np.nanmedian(offs)) if np.isfinite(offs).any() else None,
               geometry=geometry, severity=severity)


@rule("crs-zone-evidence", family="crs", severity="error")
def crs_zone_evidence(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The project's own evidence puts the coordinates in another zone, hemisphere or datum than the CRS label says.

    Catches
    -------
    A map labelled throughout with a neighbouring UTM zone (EPSG:32632 on
    coordinates captured in zone 33), the other hemisphere (326xx for 327xx),
    or another datum's grid, wherever the project holds evidence independent
    of the label:

    - *longitude/latitude columns* beside a layer's coordinates (sample,
      station or structure tables: headers such as `lon`, `long`,
      `longitude`, `lng`, `x_wgs84`, `lat`, `latitude`, or the columns
      named by `lon_field`/`lat_field`; read as WGS 84 unless `lonlat_crs`
      says otherwise; decimal degrees or degrees-minutes-seconds). Each
      reading is transformed into the layer's CRS with pyproj and compared
      with the feature's position (geodesic metres on the WGS 84 ellipsoid).
      When they disagree, the neighbouring zones (two either side), the
      other hemisphere and the same zone on every other datum of the EPSG
      dataset whose area of use holds the features are tried, and the one
      under which they agree is named;
    - a *declared geographic extent* (`[map] geographic_extent = [west,
      south, east, north]`, degrees): the layers' extent in
      longitude/latitude must fall inside it;
    - *layers in another CRS* (one layer in EPSG:4326 or another zone): when
      the layers line up only if one group of them is read in a neighbouring
      zone or the other hemisphere, that reading is named (both readings,
      when either lines them up).

    One finding per group of layers that share a CRS and lie together,
    giving the count of features and the median offset. Readings agree
    within 20 m (common practice: handheld GNSS is good to 5-10 m, four
    decimals of a degree to about 11 m), or 1 mm at the map scale (common
    practice for plotting), or the rounding step of the columns, whichever is
    more. When only some rows of a layer disagree, one finding lists them
    (an error when they fit a neighbouring zone: a map straddling two zones;
    a warning otherwise). A disagreement that no candidate explains is a
    warning: the columns or the declared extent may be what is wrong. A group
    explained here is not also reported by `crs-outside-area-of-use`.

    Not caught: a map labelled consistently with the wrong zone and nothing
    else to compare with is internally consistent and cannot be told apart
    from a right one (unless its coordinates leave the zone's area of use:
    `crs-outside-area-of-use`); a declared place *name* is not looked up (no
    gazetteer is consulted); datum errors are found only from
    longitude/latitude columns (a few hundred metres do not show against an
    extent); rows suspected of swapped x and y are left to
    `crs-axis-swap-suspected`; longitude/latitude kept only in the analyses
    table, not in a layer, are not compared.

    Why it matters
    --------------
    A wrong zone puts the map hundreds of kilometres away, the wrong
    hemisphere thousands, yet the map looks right on its own: every layer
    lines up with the others and the checks of the map itself pass. The
    next user overlays it on other data and nothing fits.

    Fix
    ---
    Assign the CRS the evidence names to the layers (set the CRS, do not
    reproject: the numbers are right, the label is wrong) and set `map.crs`
    to it. If the evidence itself is wrong (longitude/latitude columns that
    hold something else, a declared extent copied from another project),
    correct it or name the right columns with `lon_field`/`lat_field`.

    Example
    -------
    Samples with `lon`/`lat` columns around 14.7°E 61.3°N, digitised in UTM
    zone 33N, on a map whose layers and `map.crs` say EPSG:32632, give
    "layers units, lines, samples are labelled EPSG:32632 (WGS 84 / UTM zone
    32N) but the coordinates are in EPSG:32633 (WGS 84 / UTM zone 33N), a
    neighbouring zone: the longitude/latitude columns of layers.samples (lon,
    lat) agree with all 8 positions to within 0.1 m under EPSG:32633, and put
    all 8 features a median 321.4 km away from their positions under
    EPSG:32632. Assign EPSG:32633 to these layers and set map.crs to it
    (assign the CRS, do not reproject: ...)".
    """
    evidence = ctx.zone_evidence()
    for ce in evidence.clusters:
        yield _cluster_hit(project, ctx, ce)
    for ev in evidence.partial:
        yield _partial_hit(project, ev)


@rule("crs-axis-swap-suspected", family="crs", severity="error")
def crs_axis_swap_suspected(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Coordinates make sense only with x and y (or longitude and latitude) swapped.

    Catches
    -------
    Features that, read as their CRS says, fall outside where the map can be,
    but fall inside it with x and y exchanged: a projected layer whose
    northings were loaded as eastings, or a geographic layer with latitude in
    the longitude column. "Where the map can be" is the CRS's area of use
    from the EPSG dataset (with a 1° margin); when that area spans more than
    20° of longitude or latitude ("World" for EPSG:4326, or the 84° height
    of a UTM zone) it is the extent of the other layers, padded by their own
    size. A whole layer swapped (or more than 20 features) gives one finding;
    a few swapped features in an otherwise good layer give one finding each.
    It cannot tell a swap when both orders fit (a small map near the 45°
    line in a geographic CRS with no other layer to compare with).

    Why it matters
    --------------
    Swapped axes put the data in another continent or ocean; a reader, a
    database or a repository harvester that trusts the CRS shows it there.
    It is one of the commonest mistakes when a coordinate table is imported.

    Fix
    ---
    Re-import the table with x and y (or longitude and latitude) columns the
    right way round, or swap them in the manifest (`x_field`/`y_field`); for
    a GIS layer, check the axis order option of the import.

    Example
    -------
    Sample points at (6797815, 487880) in EPSG:32633 on a map whose other
    layers lie around (484000, 6795000) give "layers.samples
    (map.gpkg:samples): all 33 features fit where the other layers are only
    with x and y swapped".
    """
    placed_all = ctx.placements()
    for role, (suspect, ref, from_layers) in ctx.swap_suspects().items():
        placed = placed_all[role]
        layer = project.sources[role]
        n, total = int(suspect.sum()), int(placed.present.sum())
        where = "where the other layers are" if from_layers else f"the area of use of {_label(placed.crs)} ({box_words(ref)})"
        if n == total or n > 20:
            b = placed.bounds[suspect]
            geometry = box(np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3]))
            ids = tuple(layer.ids[suspect][:20])
            yield Hit(
                f"layers.{role} ({layer.source}): {f'all {n} features' if n == total else f'{n} of {total} features'} fit {where} "
                f"only with x and y swapped (the layer's x runs {np.nanmin(b[:, 0]):.6g} to {np.nanmax(b[:, 2]):.6g}, "
                f"y {np.nanmin(b[:, 1]):.6g} to {np.nanmax(b[:, 3]):.6g}).",
                layer=role,
                features=ids,
                geometry=geometry,
            )
            continue
        geoms = layer.geometry
        for i in np.flatnonzero(suspect):
            x0, y0, x1, y1 = placed.bounds[i]
            yield Hit(
                f"layers.{role} feature {layer.ids[i]} at ({x0:.6g}, {y0:.6g}) fits {where} only with x and y swapped.",
                layer=role,
                features=(layer.ids[i],),
                geometry=geoms[i],
            )


@rule("crs-geographic", family="crs", severity="warning")
def crs_geographic(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """The map CRS is geographic (degrees) where area and length checks need a projected one.

    Catches
    -------
    A `map.crs` in longitude/latitude (EPSG:4326, EPSG:4258...). The finding
    suggests a UTM CRS from the EPSG dataset (pyproj's
    `query_utm_crs_info`) whose area of use holds the centre of the map,
    on the map's own datum where the dataset has UTM zones for it, and says
    when the map spans more than one zone.

    Why it matters
    --------------
    Degrees are not a length: a degree of longitude is 111 km at the equator
    and half that at 60°. Sliver areas, widths, tolerances and distances in
    map units then mean different things across the map, and the printed
    scale cannot be honoured.

    Fix
    ---
    Reproject the project to a projected CRS suited to the area (the
    suggested UTM zone, or the national grid that is local practice) and set
    `map.crs` to it. The suggestion is a starting point; the mapper and local
    practice decide.

    Example
    -------
    A map in EPSG:4326 around 14.7°E 61.3°N gives "map.crs EPSG:4326 (WGS 84)
    is geographic ...; EPSG:32633 (WGS 84 / UTM zone 33N) covers the map's
    centre".
    """
    crs = project.crs
    if crs is None or not crs.is_geographic:
        return
    boxes = [p.box() for p in ctx.placements().values()]
    boxes = [b for b in boxes if b is not None]
    text = f"map.crs {_label(crs)} is geographic (degrees): areas, lengths and tolerances need a projected CRS"
    if not boxes:
        yield Hit(text + ".", layer="manifest")
        return
    b = np.array(boxes)
    full = (b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max())
    suggestion, zones = suggest_projected(full, crs)
    if suggestion is None:
        yield Hit(f"{text}; no UTM zone covers the map ({box_words(full)}): use a polar or national projected CRS.", layer="manifest")
        return
    span = f"; the map spans {zones} UTM zones" if zones > 1 else ""
    yield Hit(
        f"{text}; for the map's extent ({box_words(full)}) {_label(suggestion)} covers the map's centre{span}.",
        layer="manifest",
    )
