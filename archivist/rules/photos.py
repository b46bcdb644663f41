"""Family `photos`: are the photos and field-book scans there, tied to their stations, and where their EXIF says?

Photos and scans are declared in `[files.photos]` and `[files.fieldbooks]`
(folders or glob patterns) and tied to field stations (`[layers.stations]`)
by a link table or a naming pattern (:mod:`archivist.photos`). A photo's
location and time are read from its EXIF tags with Pillow, header only.
Distances between a photo and its station are geodesic, in metres, on the
WGS 84 ellipsoid (pyproj `Geod`).

Nothing about what an image shows is judged: these checks test the
bookkeeping (the file is there, it is linked, its geotag agrees with its
station and the map), not the photo.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import shapely

from ..analysis.arrays import present
from ..analysis.messages import plural
from ..model import Hit
from ..photos import KIND_WORDS, MediaSet, media_sets
from ..registry import rule

if TYPE_CHECKING:
    from ..engine import CheckContext
    from ..project import MapProject

WGS84 = "EPSG:4326"


def _photos(project: MapProject) -> MediaSet | None:
    media = project.media.get("photos")
    return media if isinstance(media, MediaSet) else None


def _station_ids(project: MapProject, ctx: CheckContext) -> set[str] | None:
    layer = ctx.layer("stations") or project.layers.get("stations")
    if layer is None:
        return None
    return {str(i).strip() for i in layer.ids if str(i).strip()}


def _where(media: MediaSet, i: int) -> str:
    f = media.files[i]
    return f"{KIND_WORDS[media.kind][0]} {f.rel}"


def _map_box(project: MapProject, ctx: CheckContext) -> tuple[Any, Any, tuple[float, float, float, float] | None]:
    """(extent geometry, its CRS, its bounds in WGS 84 longitude/latitude): the extent layer, else the unit polygons."""

    def compute() -> tuple[Any, Any, tuple[float, float, float, float] | None]:
        import pyproj

        for role in ("extent", "units"):
            layer = ctx.layer(role)
            if layer is None or layer.crs is None:
                continue
            geoms = layer.geometry
            ok = present(geoms) & shapely.is_valid(geoms)
            if not ok.any():
                continue
            geom = shapely.union_all(geoms[ok])
            shapely.prepare(geom)
            try:
                t = pyproj.Transformer.from_crs(layer.crs, WGS84, always_xy=True)
                minx, miny, maxx, maxy = geom.bounds
                box = t.transform_bounds(minx, miny, maxx, maxy, densify_pts=21)
            except (pyproj.exceptions.ProjError, ValueError):
                return geom, layer.crs, None
            return geom, layer.crs, (box if all(np.isfinite(box)) else None)
        return None, None, None

    return ctx.shared("photos:map-box", compute)


def _to_crs(lon: np.ndarray, lat: np.ndarray, crs: Any) -> tuple[np.ndarray, np.ndarray]:
    """Longitudes and latitudes (WGS 84) in ``crs``; NaN everywhere when PROJ has no way between them
    (an engineering CRS, say: crs-* rules report such a map)."""
    import pyproj

    try:
        t = pyproj.Transformer.from_crs(WGS84, crs, always_xy=True)
    except pyproj.exceptions.ProjError:
        return np.full(len(lon), np.nan), np.full(len(lat), np.nan)
    with np.errstate(invalid="ignore"):
        x, y = t.transform(lon, lat, errcheck=False)
    return np.asarray(x, dtype=float), np.asarray(y, dtype=float)


def _flipped(media: MediaSet, project: MapProject, ctx: CheckContext) -> tuple[np.ndarray, np.ndarray]:
    """Per file: whether its longitude sign, and its latitude sign, is the opposite of the map's while the turned sign puts it at the map.

    The map must lie wholly in one hemisphere for a sign to be judged. "At
    the map" means inside the map's longitude/latitude box grown by its own
    larger side on every edge (at least 0.01 degree, about 1 km), which a
    lost sign lands in and a photo from elsewhere seldom does (common practice).
    """

    def compute() -> tuple[np.ndarray, np.ndarray]:
        lon, lat = media.lonlat()
        none = np.zeros(len(lon), dtype=bool)
        box = _map_box(project, ctx)[2]
        if box is None:
            return none, none.copy()
        w, s, e, n = box
        grow = max(e - w, n - s, 0.01)
        W, S, E, N = w - grow, s - grow, e + grow, n + grow

        def near(x: np.ndarray, y: np.ndarray) -> np.ndarray:
            return (x >= W) & (x <= E) & (y >= S) & (y <= N)

        with np.errstate(invalid="ignore"):
            lon_other = ((w > 0) & (lon < 0)) | ((e < 0) & (lon > 0))
            lat_other = ((s > 0) & (lat < 0)) | ((n < 0) & (lat > 0))
            here = near(lon, lat)
            lon_bad = lon_other & ~here & (near(-lon, lat) | (lat_other & near(-lon, -lat)))
            lat_bad = lat_other & ~here & (near(lon, -lat) | (lon_other & near(-lon, -lat)))
        return lon_bad, lat_bad

    return ctx.shared(f"photos:flipped:{media.kind}", compute)


@rule("photo-missing", family="photos", severity="error")
def photo_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A photo or field-book scan named in the link table is not among the files.

    Catches
    -------
    Each row of a `[files.photos]` or `[files.fieldbooks]` `link_table` whose
    file is in none of the declared `paths`: matched by the path relative to
    the manifest, or by the file name when one file alone bears it. In an
    audit, `archive-fieldwork-missing` reports these instead.

    Why it matters
    --------------
    The table says the photo of that station exists; the next mapper who
    looks for it finds nothing, and a photo left behind on a memory card or
    a laptop is lost when the project is archived.

    Fix
    ---
    Copy the file into a declared folder, correct its name in the link
    table, or take the row out if the photo was never taken.

    Example
    -------
    `photo_links.csv` row 7 names `ST14_outcrop.jpg` for station ST14, but
    `photos/` holds no such file: "photo ST14_outcrop.jpg (photo_links.csv
    row 7, station ST14) is named in the link table but is not in
    files.photos.paths".
    """
    if project.archive is not None:
        return  # archive-fieldwork-missing
    for kind, word, media in media_sets(project):
        for m in media.missing:
            station = f", station {m.station}" if m.station else ""
            yield Hit(
                f"{word} {m.name} ({media.link_source} row {m.row}{station}) is named in the link table but is not in files.{kind}.paths.",
                layer=kind,
                features=(m.name,),
            )


@rule("photo-unlinked", family="photos", severity="warning", needs=("photos",))
def photo_unlinked(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A photo is tied to no station, or to a station that does not exist.

    Catches
    -------
    Each photo of `[files.photos]` that neither the `link_table` nor the
    `name_pattern` ties to a station, and each photo tied to a station id
    that is not in `[layers.stations]` (when that layer is declared; in an
    audit, a link table's rows naming such a station are left to
    `archive-fieldwork-missing`). When
    the manifest declares neither a link table nor a naming pattern, one
    finding says so for all the photos. Field-book scans are not judged:
    a page often covers many stations.

    Why it matters
    --------------
    A field photo is evidence for an observation at a place; without its
    station nobody can tell which outcrop it shows or check the map
    against it.

    Fix
    ---
    Add a row for the photo to the link table, rename the file to follow
    the naming pattern, or correct the station id.

    Example
    -------
    `photos/IMG_0412.jpg` does not match `{station}_*.jpg` and is not in
    the link table: "photo photos/IMG_0412.jpg is tied to no station
    (files.photos: by their names ({station}_*.jpg))".
    """
    media = _photos(project)
    if media is None or not media.files:
        return
    if not media.link_source and not media.spec.get("name_pattern"):
        yield Hit(
            f"files.photos declares neither a link_table nor a name_pattern: {plural(len(media.files), 'photo')} "
            "are tied to no station.",
            layer="photos",
        )
        return
    known = _station_ids(project, ctx)
    for i, f in enumerate(media.files):
        if f.station is None:
            yield Hit(f"{_where(media, i)} is tied to no station (files.photos: {media.linked_by}).", layer="photos", features=(f.rel,))
        elif known is not None and f.station not in known and not (project.archive is not None and f.link == "table"):
            how = f"{media.link_source} row {f.row}" if f.link == "table" else "its name"
            yield Hit(
                f"{_where(media, i)} is tied by {how} to station {f.station}, which is not in layers.stations.",
                layer="photos",
                features=(f.rel,),
            )


@rule("photo-hemisphere-mismatch", family="photos", severity="error", needs=("photos",))
def photo_hemisphere_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A photo's EXIF location is in the other hemisphere from the map: a lost sign.

    Catches
    -------
    Geotagged photos and scans whose EXIF longitude is west where the map
    lies east (or east where it lies west), or whose latitude is south
    where the map lies north (or the reverse), when turning that sign puts
    the photo at the map: inside the map's longitude/latitude box grown by
    its own larger side (at least 0.01 degree) on every edge (common
    practice). The finding says which sign. A map that straddles the
    Greenwich meridian or the equator is not judged in that coordinate.
    These photos are left out of `photo-outside-extent` and
    `photo-far-from-station`.

    Why it matters
    --------------
    A GPS reference letter (`GPSLongitudeRef` W instead of E) lost or set
    wrong by a phone, a camera or an editing program puts the photo on
    another continent; a map of the photos, or a search by place in a
    repository, then shows it there.

    Fix
    ---
    Correct the reference tag (`GPSLongitudeRef`, `GPSLatitudeRef`) of the
    photo with an EXIF editor, or drop its GPS tags and rely on its station.

    Example
    -------
    A photo tagged 15.263 W at a map near 15.26 E: "photo ST05_a.jpg:
    EXIF longitude 15.263000 W, but the map lies east of Greenwich: the sign
    of the longitude (GPSLongitudeRef) was lost; as 15.263000 E it lies at
    the map".
    """
    for kind, _, media in media_sets(project):
        if not media.files:
            continue
        lon_bad, lat_bad = _flipped(media, project, ctx)
        lon, lat = media.lonlat()
        for i in map(int, np.flatnonzero(lon_bad | lat_bad)):
            parts = []
            if lon_bad[i]:
                side, right = ("W", "E") if lon[i] < 0 else ("E", "W")
                where = "east" if right == "E" else "west"
                parts.append(f"EXIF longitude {abs(lon[i]):.6f} {side}, but the map lies {where} of Greenwich: the sign of the "
                             f"longitude (GPSLongitudeRef) was lost or set wrong")
            if lat_bad[i]:
                side, right = ("S", "N") if lat[i] < 0 else ("N", "S")
                where = "north" if right == "N" else "south"
                parts.append(f"EXIF latitude {abs(lat[i]):.6f} {side}, but the map lies {where} of the equator: the sign of the "
                             f"latitude (GPSLatitudeRef) was lost or set wrong")
            fixed_lon = -lon[i] if lon_bad[i] else lon[i]
            fixed_lat = -lat[i] if lat_bad[i] else lat[i]
            yield Hit(
                f"{_where(media, i)}: {'; '.join(parts)}; at {abs(fixed_lon):.6f} {'E' if fixed_lon >= 0 else 'W'}, "
                f"{abs(fixed_lat):.6f} {'N' if fixed_lat >= 0 else 'S'} it lies at the map.",
                layer=kind,
                features=(media.files[i].rel,),
            )


@rule("photo-outside-extent", family="photos", severity="warning", needs=("photos",))
def photo_outside_extent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A geotagged photo lies outside the map's extent.

    Catches
    -------
    Photos and scans whose EXIF location lies farther than the tolerance
    outside the extent layer (without one, outside the unit polygons); the
    finding gives the distance in metres. Photos whose location has a lost
    sign are left to `photo-hemisphere-mismatch`; files without a GPS tag
    are not judged.

    Why it matters
    --------------
    A photo off the map is a photo of another project, a camera whose GPS
    had no fix yet (it keeps the last position), or a photo taken on the
    way; the record then puts evidence where there is no map.

    Fix
    ---
    Check the photo's EXIF location against the field book; correct or
    remove the GPS tags, or take the photo out of the map's files.

    Example
    -------
    A photo tagged at the field base 12 km from the sheet: "photo
    photos/ST02_a.jpg is 11873.2 m outside the map extent by its EXIF
    location".
    """
    geom, crs, _ = _map_box(project, ctx)
    if geom is None:
        return
    for kind, _, media in media_sets(project):
        if not media.files:
            continue
        lon, lat = media.lonlat()
        lon_bad, lat_bad = _flipped(media, project, ctx)
        ok = np.isfinite(lon) & np.isfinite(lat) & ~lon_bad & ~lat_bad
        idx = np.flatnonzero(ok)
        if not len(idx):
            continue
        x, y = _to_crs(lon[idx], lat[idx], crs)
        pts = shapely.points(x, y)
        dist = shapely.distance(geom, pts)
        what = "the map extent" if ctx.layer("extent") is not None else "the unit polygons (no extent layer)"
        for k in np.flatnonzero(np.isfinite(dist) & (dist > ctx.tolerance)):
            i = int(idx[k])
            yield Hit(
                f"{_where(media, i)} is {dist[k]:.1f} m outside {what} by its EXIF location.",
                layer=kind,
                features=(media.files[i].rel,),
                measure=float(dist[k]),
                geometry=pts[k],
            )


@rule("photo-far-from-station", family="photos", severity="warning", needs=("photos", "stations"))
def photo_far_from_station(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A geotagged photo was taken far from the station it is tied to.

    Catches
    -------
    Photos whose EXIF location is farther from their station than
    `[checks] photo_distance_m` (default 100 m), measured along the WGS 84
    ellipsoid (pyproj `Geod`). The default is common practice: a photo is
    taken at the outcrop the station records, within tens of metres, and a
    phone's GPS is good to about 5 m under open sky (from memory), so 100 m
    leaves room for walking round an outcrop and for a poor fix under
    trees. Photos with a lost sign are left to `photo-hemisphere-mismatch`;
    photos without a GPS tag, or tied to no known station, are not judged.

    Why it matters
    --------------
    A photo far from its station is usually tied to the wrong station (a
    typo in the link table, a renamed file), so the evidence for one
    outcrop is filed under another.

    Fix
    ---
    Correct the station in the link table or the file name, or raise
    `photo_distance_m` when stations are large (a traverse, a quarry).

    Example
    -------
    A photo tied to ST03 but tagged 640 m from it: "photo photos/ST03_b.jpg
    is 640.2 m from its station ST03 by its EXIF location (at most 100 m,
    [checks] photo_distance_m)".
    """
    import pyproj

    stations = ctx.layer("stations") or project.layers.get("stations")
    media = _photos(project)
    if stations is None or media is None or stations.crs is None:
        return
    geoms = stations.geometry
    ok = present(geoms)
    pos: dict[str, int] = {}
    for j in np.flatnonzero(ok):
        pos.setdefault(str(stations.ids[j]).strip(), int(j))
    lon, lat = media.lonlat()
    lon_bad, lat_bad = _flipped(media, project, ctx)
    idx = np.array([i for i, f in enumerate(media.files) if f.station in pos], dtype=int)
    if not len(idx):
        return
    idx = idx[np.isfinite(lon[idx]) & np.isfinite(lat[idx]) & ~lon_bad[idx] & ~lat_bad[idx]]
    if not len(idx):
        return
    sj = np.array([pos[str(media.files[i].station)] for i in idx], dtype=int)
    xy = shapely.get_coordinates(shapely.centroid(geoms[sj]))
    try:
        t = pyproj.Transformer.from_crs(stations.crs, WGS84, always_xy=True)
    except pyproj.exceptions.ProjError:
        return  # no way from the stations' CRS to longitude/latitude: crs-* rules report the CRS
    slon, slat = t.transform(xy[:, 0], xy[:, 1], errcheck=False)
    _, _, dist = pyproj.Geod(ellps="WGS84").inv(np.asarray(slon), np.asarray(slat), lon[idx], lat[idx])
    dist = np.asarray(dist, dtype=float)
    limit = project.config.photo_distance_m
    px, py = _to_crs(lon[idx], lat[idx], stations.crs)
    for k in np.flatnonzero(np.isfinite(dist) & (dist > limit)):
        i = int(idx[k])
        yield Hit(
            f"{_where(media, i)} is {dist[k]:.1f} m from its station {media.files[i].station} by its EXIF location "
            f"(at most {limit:g} m, [checks] photo_distance_m).",
            layer="photos",
            features=(media.files[i].rel, str(media.files[i].station)),
            measure=float(dist[k]),
            geometry=shapely.points(px[k], py[k]),
        )
