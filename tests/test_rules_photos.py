"""Rules of the `photos` family: each broken variant found at its place; CASES for the registry test.

Locations are written into the photos' EXIF by Pillow and read back by
archivist through Pillow; distances are checked against pyproj's `Geod` on
the WGS 84 ellipsoid (the outside reference for geodesic distances).
"""

from __future__ import annotations

from pathlib import Path

import pyproj
import pytest

import archivist
from archivist.project import load_project
from photo_builders import STATIONS, jpeg, lonlat, photo_project, with_stations

STATIONS_SPEC = {"layers": {"stations": {"path": "map.gpkg", "layer": "stations", "id_field": "station_id"}}}


def _findings(root: Path, rule: str):
    return [f for f in archivist.check(with_stations(load_project(root)), rules=[rule]).findings if f.rule == rule]


# ---------------------------------------------------------------- CASES: rule id -> (failing, passing)

def _missing_bad(tmp_path: Path) -> Path:
    return photo_project(tmp_path, links=[("ST01_1.jpg", "ST01"), ("ST05_1.jpg", "ST05")])


def _missing_good(tmp_path: Path) -> Path:
    return photo_project(tmp_path, links=[("ST01_1.jpg", "ST01"), ("photos/ST02_1.jpg", "ST02")])


def _unlinked_bad(tmp_path: Path) -> Path:
    return photo_project(tmp_path, photos={"ST01_1.jpg": STATIONS["ST01"], "IMG0412.jpg": STATIONS["ST02"]})


def _unlinked_good(tmp_path: Path) -> Path:
    return photo_project(tmp_path, photos={"ST01_1.jpg": STATIONS["ST01"], "IMG0412.jpg": STATIONS["ST02"]},
                         links=[("IMG0412.jpg", "ST02")])


def _flip_bad(tmp_path: Path) -> Path:
    root = photo_project(tmp_path)
    lon, lat = lonlat(*STATIONS["ST03"])
    jpeg(root / "photos" / "ST03_2.jpg", lon, lat, lon_ref="W")
    return root


def _flip_good(tmp_path: Path) -> Path:
    return photo_project(tmp_path)


def _outside_bad(tmp_path: Path) -> Path:
    x, y = STATIONS["ST01"]
    return photo_project(tmp_path, photos={"ST01_1.jpg": (x - 5000, y)})


def _outside_good(tmp_path: Path) -> Path:
    return photo_project(tmp_path, photos={"ST01_1.jpg": STATIONS["ST01"]})


def _far_bad(tmp_path: Path) -> Path:
    x, y = STATIONS["ST02"]
    return photo_project(tmp_path, photos={"ST02_1.jpg": (x + 600, y)}, extra=STATIONS_SPEC)


def _far_good(tmp_path: Path) -> Path:
    x, y = STATIONS["ST02"]
    return photo_project(tmp_path, photos={"ST02_1.jpg": (x + 40, y)}, extra=STATIONS_SPEC)


CASES = {
    "photo-missing": (_missing_bad, _missing_good),
    "photo-unlinked": (_unlinked_bad, _unlinked_good),
    "photo-hemisphere-mismatch": (_flip_bad, _flip_good),
    "photo-outside-extent": (_outside_bad, _outside_good),
    "photo-far-from-station": (_far_bad, _far_good),
}


# ---------------------------------------------------------------- each broken variant found at its place

def test_missing_photo_named_with_its_row_and_station(tmp_path):
    found = _findings(_missing_bad(tmp_path), "photo-missing")
    assert [f.message for f in found] == [
        "photo ST05_1.jpg (photo_links.csv row 3, station ST05) is named in the link table but is not in files.photos.paths."]
    assert found[0].features == ("ST05_1.jpg",)


def test_unlinked_photo_named(tmp_path):
    found = _findings(_unlinked_bad(tmp_path), "photo-unlinked")
    assert [f.features for f in found] == [("photos/IMG0412.jpg",)]
    assert "tied to no station" in found[0].message


def test_photo_tied_to_unknown_station(tmp_path):
    root = photo_project(tmp_path, photos={"ST09_1.jpg": STATIONS["ST01"]})
    found = _findings(root, "photo-unlinked")
    assert [f.features for f in found] == [("photos/ST09_1.jpg",)]
    assert "station ST09, which is not in layers.stations" in found[0].message


def test_no_link_declared_is_one_finding(tmp_path):
    root = photo_project(tmp_path, name_pattern=None)
    found = _findings(root, "photo-unlinked")
    assert len(found) == 1 and "8 photos" in found[0].message


def test_sign_flipped_longitude_names_the_sign(tmp_path):
    found = _findings(_flip_bad(tmp_path), "photo-hemisphere-mismatch")
    assert [f.features for f in found] == [("photos/ST03_2.jpg",)]
    assert "longitude" in found[0].message and " W," in found[0].message and "east of Greenwich" in found[0].message
    assert "GPSLongitudeRef" in found[0].message and "latitude" not in found[0].message


def test_sign_flipped_latitude_names_the_sign(tmp_path):
    root = photo_project(tmp_path)
    lon, lat = lonlat(*STATIONS["ST01"])
    jpeg(root / "photos" / "ST01_1.jpg", lon, lat, lat_ref="S")
    found = _findings(root, "photo-hemisphere-mismatch")
    assert [f.features for f in found] == [("photos/ST01_1.jpg",)]
    assert "latitude" in found[0].message and " S" in found[0].message and "north of the equator" in found[0].message


def test_flipped_photo_is_one_finding(tmp_path):
    """A lost sign is reported once: not also as outside the extent and far from its station."""
    root = _flip_bad(tmp_path)
    report = archivist.check(with_stations(load_project(root)), only=["photos"])
    assert [f.rule for f in report.findings] == ["photo-hemisphere-mismatch"]


def test_photo_from_elsewhere_is_not_a_lost_sign(tmp_path):
    """A photo west of Greenwich whose turned sign lands nowhere near the map is outside the extent, not a lost sign."""
    root = photo_project(tmp_path, photos={"ST01_1.jpg": STATIONS["ST01"]})
    jpeg(root / "photos" / "ST01_1.jpg", -3.2, 55.9)
    assert not _findings(root, "photo-hemisphere-mismatch")
    assert _findings(root, "photo-outside-extent")


def test_outside_extent_distance(tmp_path):
    found = _findings(_outside_bad(tmp_path), "photo-outside-extent")
    assert len(found) == 1 and found[0].features == ("photos/ST01_1.jpg",)
    # 5000 m west of ST01, which is 400 m inside the west edge: 4600 m out (EXIF seconds to 1e-4: a few mm)
    assert found[0].measure == pytest.approx(4600, abs=0.5)


def test_far_from_station_distance_matches_geod(tmp_path):
    root = photo_project(tmp_path, photos={"ST02_1.jpg": (STATIONS["ST02"][0] + 600, STATIONS["ST02"][1])})
    found = _findings(root, "photo-far-from-station")
    assert len(found) == 1 and found[0].features == ("photos/ST02_1.jpg", "ST02")
    from PIL import Image

    with Image.open(root / "photos" / "ST02_1.jpg") as im:  # the reference: Pillow's own reading of the tags
        gps = im.getexif().get_ifd(0x8825)
    lat = sum(float(v) / 60**k for k, v in enumerate(gps[2]))
    lon = sum(float(v) / 60**k for k, v in enumerate(gps[4]))
    slon, slat = lonlat(*STATIONS["ST02"])
    _, _, expected = pyproj.Geod(ellps="WGS84").inv(slon, slat, lon, lat)
    assert found[0].measure == pytest.approx(expected, abs=5e-4)  # the engine keeps a measure to 1 mm
    assert 590 < expected < 610  # 600 m of grid east, scaled by the UTM scale factor here


def test_distance_threshold_from_checks(tmp_path):
    root = photo_project(tmp_path, photos={"ST02_1.jpg": (STATIONS["ST02"][0] + 600, STATIONS["ST02"][1])},
                         extra={"checks": {"photo_distance_m": 1000}})
    assert not _findings(root, "photo-far-from-station")


# ---------------------------------------------------------------- the archive family: what the map cites, the archive holds

def _packed(tmp_path: Path) -> Path:
    root = photo_project(tmp_path, links=[("ST01_1.jpg", "ST01")], extra=STATIONS_SPEC)
    return archivist.pack(root, tmp_path / "out").path


def _archive_bad(tmp_path: Path) -> Path:
    from archives import rebag

    bag = _packed(tmp_path)
    (bag / "data" / "photos" / "ST03_1.jpg").unlink()
    return rebag(bag)  # the bag is whole again: only the photos table still cites the photo


def _archive_good(tmp_path: Path) -> Path:
    return _packed(tmp_path)


CASES["archive-fieldwork-missing"] = (_archive_bad, _archive_good)


def test_archive_missing_photo_named_with_its_row(tmp_path):
    report = archivist.audit(_archive_bad(tmp_path))
    found = [f for f in report.findings if f.rule == "archive-fieldwork-missing"]
    assert [f.features for f in found] == [("photos/ST03_1.jpg",)]
    assert "tables/photos.csv row 6 (station ST03)" in found[0].message
    assert not [f for f in report.findings if f.rule == "photo-missing"]  # one cause, one finding
