"""Photos and field-book scans: EXIF read as Pillow reads it, linking, packing, auditing and unpacking.

Outside references: Pillow's own EXIF reader (``Image.getexif()``, the GPS
IFD 0x8825) for every generated photo, ``hashlib`` for the checksums, the
``bagit`` library for the bag, and ``frictionless`` (through audit's
``package-data-invalid``) for the Data Package.
"""

from __future__ import annotations

import csv
import hashlib
import json
import shutil
from pathlib import Path

import pytest
from PIL import Image

import archivist
from archivist.photos import name_regex, package_paths, read_geotag
from archivist.project import load_project
from builders import BUNDLE, copy_bundle, edit_manifest
from photo_builders import STATIONS, jpeg, lonlat, photo_project


def pillow_lonlat(path: Path) -> tuple[float, float, str]:
    """Longitude, latitude and DateTimeOriginal as Pillow reads them: the reference."""
    with Image.open(path) as im:
        exif = im.getexif()
        gps = exif.get_ifd(0x8825)
        taken = exif.get_ifd(0x8769)[0x9003]
    lat = sum(float(v) / 60**k for k, v in enumerate(gps[2])) * (-1 if gps[1] == "S" else 1)
    lon = sum(float(v) / 60**k for k, v in enumerate(gps[4])) * (-1 if gps[3] == "W" else 1)
    return lon, lat, taken


def test_every_bundle_photo_reads_as_pillow_reads_it():
    project = load_project(BUNDLE)
    photos = project.media["photos"]
    assert len(photos.files) == 12 and len(project.media["fieldbooks"].files) == 1
    for f, tag in zip(photos.files, photos.geotags()):
        lon, lat, taken = pillow_lonlat(f.path)
        assert tag.lon == pytest.approx(lon, abs=1e-12) and tag.lat == pytest.approx(lat, abs=1e-12), f.rel
        assert tag.taken == taken.replace(":", "-", 2).replace(" ", "T")
        assert f.station == f.name.split("_")[0] and f.link == "name"
        assert f.media_type == "image/jpeg"
        assert f.path.stat().st_size < 10_000  # small generated files


def test_bundle_photos_lie_at_their_stations():
    """The photos were written at the first field stations; read back they lie within a few metres."""
    import pyproj

    project = load_project(BUNDLE)
    stations = project.layers["stations"]
    t = pyproj.Transformer.from_crs(stations.crs, "EPSG:4326", always_xy=True)
    ids = stations.frame["station_id"].astype(str).tolist()
    sites = {sid: t.transform(g.x, g.y) for sid, g in zip(ids, stations.frame.geometry)}
    geod = pyproj.Geod(ellps="WGS84")
    for f, tag in zip(project.media["photos"].files, project.media["photos"].geotags()):
        slon, slat = sites[str(f.station)]
        assert geod.inv(slon, slat, tag.lon, tag.lat)[2] < 5.0, f.rel


def test_generated_photos_read_as_pillow_reads_them(tmp_path):
    root = photo_project(tmp_path)
    lon, lat = lonlat(*STATIONS["ST02"])
    jpeg(root / "photos" / "ST02_1.jpg", lon, lat, lat_ref="S", lon_ref="W")  # every sign written by Pillow
    for f, tag in zip(load_project(root).media["photos"].files, load_project(root).media["photos"].geotags()):
        ref_lon, ref_lat, _ = pillow_lonlat(f.path)
        assert (tag.lon, tag.lat) == pytest.approx((ref_lon, ref_lat), abs=1e-12)


def test_exif_read_from_the_header_only(tmp_path):
    """A photo whose image data is cut off still gives its EXIF: the pixels are never decoded."""
    path = jpeg(tmp_path / "a.jpg", 14.5, 61.25, size=(400, 300))
    data = path.read_bytes()
    sos = data.index(b"\xff\xda")  # start of scan: the compressed pixels follow
    cut = tmp_path / "cut.jpg"
    cut.write_bytes(data[: sos + 20])
    tag = read_geotag(cut)
    assert tag.problem is None and tag.lon == pytest.approx(14.5, abs=1e-6) and tag.lat == pytest.approx(61.25, abs=1e-6)


def test_untrusted_size_cap_and_unreadable_files(tmp_path):
    path = jpeg(tmp_path / "a.jpg", 14.5, 61.25)
    capped = read_geotag(path, max_bytes=100)
    assert capped.lon is None and "larger than" in capped.problem
    junk = tmp_path / "junk.jpg"
    junk.write_bytes(b"\xff\xd8\xff\xe1\x00\x10Exif\x00\x00MM\x00*\x00\x00\x00\x08garbage")
    assert read_geotag(junk).lon is None and read_geotag(junk).problem
    pdf = tmp_path / "page.pdf"
    pdf.write_bytes(b"%PDF-1.4\n%%EOF\n")
    assert read_geotag(pdf).problem is None and not read_geotag(pdf).located


def test_name_pattern():
    rx = name_regex("{station}_*.jpg")
    assert rx.match("TM-ST01_outcrop.jpg").group("station") == "TM-ST01"
    assert rx.match("ST01_a_b.jpg").group("station") == "ST01"
    assert rx.match("ST01.jpg") is None and rx.match("ST01_a.png") is None


def test_package_paths_keep_subfolders_below_the_common_folder(tmp_path):
    root = photo_project(tmp_path, photos={"ST01_1.jpg": STATIONS["ST01"]}, fieldbook=False)
    jpeg(root / "photos" / "day2" / "ST02_1.jpg", *lonlat(*STATIONS["ST02"]))
    media = load_project(root).media["photos"]
    assert package_paths(media) == ["photos/ST01_1.jpg", "photos/day2/ST02_1.jpg"]


def test_missing_paths_entry_is_reported(tmp_path):
    root = photo_project(tmp_path, extra={"files": {"photos": {"paths": ["photos", "pictures/*.jpg"]}}})
    report = archivist.check(root)
    assert any(f.rule == "layer-missing" and "files.photos.paths[1]: 'pictures/*.jpg' names no file" in f.message for f in report.findings)


def test_bundle_packs_with_its_photos_and_scan(tmp_path):
    result = archivist.pack(BUNDLE, tmp_path / "out")
    data = result.path / "data"
    descriptor = json.loads((data / "datapackage.json").read_text())
    by_path = {r["path"]: r for r in descriptor["resources"]}
    photos = sorted(p for p in by_path if p.startswith("photos/"))
    assert len(photos) == 12 and "fieldbooks/tollivast_book1_p014.png" in by_path
    for rel in photos + ["fieldbooks/tollivast_book1_p014.png"]:
        r = by_path[rel]
        raw = (data / rel).read_bytes()
        assert r["hash"] == "sha256:" + hashlib.sha256(raw).hexdigest() and r["bytes"] == len(raw)
        assert r["mediatype"] == ("image/png" if rel.endswith(".png") else "image/jpeg") and r["type"] == "file"
        assert raw == (BUNDLE / ("fieldbook" + rel[len("fieldbooks"):] if rel.startswith("fieldbooks") else rel)).read_bytes()
    rows = list(csv.DictReader(open(data / "tables" / "photos.csv", encoding="utf-8")))
    assert [r["photo"] for r in rows] == photos
    assert all(r["station"] == Path(r["photo"]).name.split("_")[0] and r["link"] == "name pattern" for r in rows)
    assert by_path["tables/photos.csv"]["schema"]["primaryKey"] == ["photo"]
    readme = (data / "README.md").read_text()
    assert "12 photos in `photos/`, 12 tied to a station (by their names ({station}_*.jpg) in the project)" in readme
    assert "1 field-book scan in `fieldbooks/`, not tied to stations" in readme
    import bagit

    bagit.Bag(str(result.path)).validate()  # the bag library's own verification of every checksum
    report = archivist.audit(result.path)
    assert report.summary.errors == 0, [f.message for f in report.findings if f.severity.value == "error"]


def test_unpack_restores_photos_where_the_project_had_them(tmp_path):
    result = archivist.pack(BUNDLE, tmp_path / "out")
    out = archivist.unpack(result.path, tmp_path / "again")
    for p in (BUNDLE / "photos").iterdir():
        assert (out.path / "photos" / p.name).read_bytes() == p.read_bytes()
    assert (out.path / "fieldbook" / "tollivast_book1_p014.png").is_file()
    again = load_project(out.path)
    assert len(again.media["photos"].files) == 12 and archivist.check(out.path).summary.errors == 0


def test_unpack_of_the_packaged_manifest_keeps_package_places(tmp_path):
    """When the inputs' own manifest cannot be used, the package's places and link tables are kept."""
    root = copy_bundle(tmp_path)
    result = archivist.pack(root, tmp_path / "out")
    (result.path / "data" / "source" / "archivist.toml").unlink()
    from archives import rebag

    rebag(result.path)
    out = archivist.unpack(result.path, tmp_path / "again")
    assert out.origin == "package"
    assert (out.path / "photos" / "ST24-001_outcrop.jpg").is_file() and (out.path / "tables" / "photos.csv").is_file()
    assert len(load_project(out.path).media["photos"].files) == 12


def test_audit_refuses_a_files_path_leading_outside(tmp_path):
    result = archivist.pack(BUNDLE, tmp_path / "out")
    manifest = result.path / "data" / "archivist.toml"
    manifest.write_text(manifest.read_text().replace('paths = ["photos"]', 'paths = ["../../*"]'))
    from archives import rebag

    rebag(result.path)
    with pytest.raises(archivist.ArchivistError, match="leads outside the archive"):
        archivist.audit(result.path)


def test_broken_bundle_variant_photo_far_from_station(tmp_path):
    """The bundle's broken variant: one photo moved 400 m from its station."""
    import pyproj

    root = copy_bundle(tmp_path)
    project = load_project(root)
    stations = project.layers["stations"].frame
    assert not [f for f in archivist.check(root).findings if f.rule.startswith("photo-")]
    t = pyproj.Transformer.from_crs(project.crs, "EPSG:4326", always_xy=True)
    row = stations[stations["station_id"].astype(str) == "ST24-003"].iloc[0]
    g = row.geometry
    jpeg(root / "photos" / "ST24-003_detail.jpg", *t.transform(g.x + 400, g.y))
    found = [f for f in archivist.check(root).findings if f.rule.startswith("photo-")]
    assert [(f.rule, f.features) for f in found] == [("photo-far-from-station", ("photos/ST24-003_detail.jpg", "ST24-003"))]
    assert found[0].measure == pytest.approx(400, rel=0.01)


def test_init_places_photo_folders_and_scans(tmp_path):
    """init puts folders named for photos or field books into [files], and the manifest it writes parses to its guess."""
    import tomllib

    from archivist.scaffold import write_manifest

    root = tmp_path / "field"
    root.mkdir()
    for name in ("map.gpkg", "legend.csv"):
        shutil.copy2(BUNDLE / name, root / name)
    shutil.copytree(BUNDLE / "photos", root / "Field Photos")
    shutil.copytree(BUNDLE / "fieldbook", root / "notebooks")
    (root / "notebooks" / "page2.pdf").write_bytes(b"%PDF-1.4\n%%EOF\n")
    (root / "notes.txt").write_text("not a scan")
    path, inf = write_manifest(root)
    written = tomllib.loads(path.read_text(encoding="utf-8"))
    assert written["files"] == {"photos": {"paths": ["Field Photos"]}, "fieldbooks": {"paths": ["notebooks"]}} == inf.manifest["files"]
    assert not any(u.startswith(("Field Photos/", "notebooks/")) for u, _ in inf.unplaced)
    project = load_project(root)
    assert len(project.media["photos"].files) == 12 and len(project.media["fieldbooks"].files) == 2
