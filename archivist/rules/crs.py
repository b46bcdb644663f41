"""Family `crs`: is every layer georeferenced, in the declared CRS, and where that CRS is meant to be used?

The reference for "where a CRS is meant to be used" is the area of use
recorded for it in the EPSG dataset, as pyproj reads it from PROJ's database
(`CRS.area_of_use`). CRSs are compared as CRSs (`CRS.equals`), never as
strings, and reported to people as "EPSG:code (name)".
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Iterator

import numpy as np
import pyproj
from shapely.geometry import box

from ..analysis.messages import box_words, distance_words, plural, verb
from ..analysis.placement import area_of_use, overshoot, suggest_projected, within
from ..model import Hit
from ..project import crs_label
from ..registry import rule
from ..vectorio import sidecar

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
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
    for role, layer in project.layers.items():
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
    far apart the two put the same coordinate pair at the layer's centre.

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
    for role, layer in project.layers.items():
        crs = layer.crs
        if crs is None or crs.equals(target, ignore_axis_order=True):
            continue
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
    inside the area of use but in the wrong place is not caught.

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
    for crs, members in groups:
        area = area_of_use(crs)
        if area is None:
            continue
        names = ", ".join(p.role for p in members)
        layer = members[0].role if len(members) == 1 else None
        lonlat = np.concatenate([p.lonlat[p.present] for p in members])
        failed = int((~np.isfinite(lonlat).all(axis=1)).sum())
        inside = within(lonlat, area)
        outside = ~inside & np.isfinite(lonlat).all(axis=1)
        hint = ""
        if any(p.role in swaps for p in members):
            hint = "; x and y look swapped (see crs-axis-swap-suspected)"
        where = f"layers {names}" if len(members) > 1 else f"layers.{names}"
        geometry = None
        if project.crs is None or crs.equals(project.crs, ignore_axis_order=True):
            b = np.concatenate([p.bounds[p.present] for p in members])
            if len(b):
                geometry = box(np.nanmin(b[:, 0]), np.nanmin(b[:, 1]), np.nanmax(b[:, 2]), np.nanmax(b[:, 3]))
        if outside.any():
            b = lonlat[outside]
            full = np.array([b[:, 0].min(), b[:, 1].min(), b[:, 2].max(), b[:, 3].max()])
            metres, deg, direction = overshoot(full, area)
            yield Hit(
                f"{where} ({_label(crs)}) reach {deg:.2f}° (about {distance_words(metres)}) {direction} of the CRS's "
                f"area of use ({box_words(area)}); {plural(int(outside.sum()), 'feature')} {verb(int(outside.sum()), 'lies', 'lie')} outside it, spanning {box_words(full)}{hint}.",
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
        layer = project.layers[role]
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
