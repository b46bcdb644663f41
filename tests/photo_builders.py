"""Builders for projects with photos and field-book scans: small images made with Pillow, EXIF GPS tags written by Pillow.

``photo_project`` writes the tiny two-unit map moved to a place in UTM zone
33N (about 61.2 N, 14.6 E), a stations layer, photos taken at the stations
(``{station}_{n}.jpg``), a link table and one scanned field-book page.
"""

from __future__ import annotations

import csv
from fractions import Fraction
from pathlib import Path
from typing import Any, Iterable

import geopandas as gpd
import pyproj
from PIL import Image
from shapely import affinity
from shapely.geometry import Point

from builders import CRS, _merge, tiny_project, two_units, two_units_lines, write_layer

X0, Y0 = 480000.0, 6792000.0  # the tiny map's south-west corner, EPSG:32633
SCALE = 10.0  # the tiny map's 200 m x 100 m squares grown to 2 km x 1 km
STATIONS = {"ST01": (X0 + 400, Y0 + 500), "ST02": (X0 + 900, Y0 + 300), "ST03": (X0 + 1500, Y0 + 600), "ST04": (X0 + 1800, Y0 + 200)}
TO_LONLAT = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)


def lonlat(x: float, y: float) -> tuple[float, float]:
    lon, lat = TO_LONLAT.transform(x, y)
    return float(lon), float(lat)


def _dms(value: float) -> tuple[Fraction, Fraction, Fraction]:
    """Degrees as EXIF writes them: whole degrees, whole minutes, seconds to 1/10000."""
    value = abs(value)
    d = int(value)
    m = int((value - d) * 60)
    s = round((value - d - m / 60) * 3600 * 10000)
    return Fraction(d), Fraction(m), Fraction(s, 10000)


def jpeg(path: Path, lon: float | None = None, lat: float | None = None, taken: str | None = "2024:06:11 10:15:00",
         *, lon_ref: str | None = None, lat_ref: str | None = None, size: tuple[int, int] = (48, 32), seed: int = 0) -> Path:
    """A small JPEG whose EXIF GPS IFD and DateTimeOriginal are written by Pillow."""
    path.parent.mkdir(parents=True, exist_ok=True)
    im = Image.new("RGB", size, ((40 + 37 * seed) % 256, (90 + 53 * seed) % 256, (140 + 71 * seed) % 256))
    exif = Image.Exif()
    if taken:
        exif.get_ifd(0x8769)[0x9003] = taken
    if lon is not None and lat is not None:
        gps = exif.get_ifd(0x8825)
        gps[1] = lat_ref or ("N" if lat >= 0 else "S")
        gps[2] = _dms(lat)
        gps[3] = lon_ref or ("E" if lon >= 0 else "W")
        gps[4] = _dms(lon)
    im.save(path, "JPEG", exif=exif, quality=70)
    return path


def scan_png(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    im = Image.new("L", (60, 80), 235)
    for y in range(10, 75, 8):
        for x in range(6, 54):
            im.putpixel((x, y), 90)
    im.save(path, "PNG")
    return path


def stations_frame(stations: dict[str, tuple[float, float]] | None = None) -> gpd.GeoDataFrame:
    stations = STATIONS if stations is None else stations
    return gpd.GeoDataFrame({"station_id": list(stations)}, geometry=[Point(*xy) for xy in stations.values()], crs=CRS)


def write_links(path: Path, rows: Iterable[tuple[str, str]]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["photo", "station_id"])
        w.writerows(rows)
    return path


def photo_project(tmp_path: Path, *, photos: dict[str, tuple[float, float] | None] | None = None, links: list[tuple[str, str]] | None = None,
                  name_pattern: str | None = "{station}_*.jpg", extra: dict[str, Any] | None = None, name: str = "photos",
                  fieldbook: bool = True) -> Path:
    """The tiny map at (X0, Y0), its stations in ``map.gpkg`` layer ``stations``, and photos in ``photos/``.

    ``photos`` maps a file name to the (x, y) in the map CRS its EXIF
    location is written at (None: no GPS tag); by default two photos at
    each station. ``links`` writes ``photo_links.csv`` and declares it.
    """
    move = lambda g: affinity.translate(affinity.scale(g, SCALE, SCALE, origin=(0, 0)), X0, Y0)  # noqa: E731
    units = two_units()
    units["geometry"] = units.geometry.map(move)
    lines = two_units_lines()
    lines["geometry"] = lines.geometry.map(move)
    manifest: dict[str, Any] = {"files": {"photos": {"paths": ["photos"]}}}
    if name_pattern:
        manifest["files"]["photos"]["name_pattern"] = name_pattern
    if links is not None:
        manifest["files"]["photos"]["link_table"] = "photo_links.csv"
    if fieldbook:
        manifest["files"]["fieldbooks"] = {"paths": ["fieldbook/*.png"]}
    _merge(manifest, extra or {})
    root = tiny_project(tmp_path, units=units, lines=lines, manifest=manifest, name=name)
    write_layer(root / "map.gpkg", "stations", stations_frame())
    if photos is None:
        photos = {f"{sid}_{n}.jpg": xy for sid, xy in STATIONS.items() for n in (1, 2)}
    for k, (fname, xy) in enumerate(sorted(photos.items())):
        if xy is None:
            jpeg(root / "photos" / fname, seed=k)
        else:
            jpeg(root / "photos" / fname, *lonlat(*xy), seed=k)
    if links is not None:
        write_links(root / "photo_links.csv", links)
    if fieldbook:
        scan_png(root / "fieldbook" / "book1_p001.png")
    return root



def with_stations(project):
    """The loaded ``project`` with ``map.gpkg`` layer ``stations`` as ``project.layers["stations"]`` (id in station_id),
    when the manifest did not already load one."""
    from archivist.project import load_layer

    if "stations" not in project.layers:
        layer = load_layer(project.root, "stations", {"path": "map.gpkg", "layer": "stations", "id_field": "station_id"}, project.problems)
        assert layer is not None
        project.layers["stations"] = layer
    return project
