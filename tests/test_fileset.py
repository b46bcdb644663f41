"""Which files make up one dataset (archivist.fileset), checked against GDAL reading the copies."""

import shutil
from pathlib import Path

import pyogrio
import pytest
from pyogrio.errors import DataSourceError

from archivist.fileset import SIDE_FILE_SUFFIXES, dataset_files, is_part_of
from archivist.infer import scan
from builders import two_units


def write_shapefile(folder: Path, name: str = "units") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    units = two_units()
    units["note"] = ["Grès rouge", "Schiste à ciment"]
    pyogrio.write_dataframe(units, folder / f"{name}.shp", encoding="UTF-8")
    return folder / f"{name}.shp"


def test_a_shapefile_is_its_parts_whatever_their_case(tmp_path):
    shp = write_shapefile(tmp_path)
    (tmp_path / "units.shx").rename(tmp_path / "units.SHX")
    (tmp_path / "units.dbf").rename(tmp_path / "Units.Dbf")
    for extra in ("units.shp.xml", "units.sbn", "units.sbx", "units.qix", "units.unit.atx", "units.shp.aux.xml"):
        (tmp_path / extra).write_bytes(b"x")
    # neighbours that only look alike
    for other in ("units2.dbf", "units_old.prj", "unitsx.shx", "lines.prj", "units.txt", "units.shp.bak"):
        (tmp_path / other).write_bytes(b"x")
    names = [p.name for p in dataset_files(shp)]
    assert names[0] == "units.shp"
    # ESRI "Shapefile file extensions" (ArcGIS Desktop help): .shp/.shx/.dbf required, .prj, .cpg, .sbn/.sbx,
    # .atx (one per indexed column), .shp.xml; GDAL "ESRI Shapefile / DBF" driver page: .qix; GDAL PAM: .aux.xml
    assert sorted(names[1:]) == sorted(
        ["units.SHX", "Units.Dbf", "units.prj", "units.cpg", "units.shp.xml", "units.sbn", "units.sbx", "units.qix",
         "units.unit.atx", "units.shp.aux.xml"]
    )


def test_gdal_reads_a_copy_of_the_parts_as_it_reads_the_original(tmp_path):
    shp = write_shapefile(tmp_path / "a")
    whole, alone = tmp_path / "whole", tmp_path / "alone"
    whole.mkdir()
    alone.mkdir()
    for p in dataset_files(shp):
        shutil.copyfile(p, whole / p.name)
    shutil.copyfile(shp, alone / shp.name)
    a = pyogrio.read_dataframe(shp)
    b = pyogrio.read_dataframe(whole / "units.shp")
    assert a.equals(b) and a.crs == b.crs and list(b["note"]) == ["Grès rouge", "Schiste à ciment"]
    # the .shp alone cannot be opened: GDAL needs the .shx (ESRI Shapefile Technical Description: the index file is required)
    with pytest.raises(DataSourceError, match=r"(?i)\.shx"):
        pyogrio.read_dataframe(alone / "units.shp")


def test_a_file_geodatabase_is_every_file_in_its_folder(tmp_path):
    gdb = tmp_path / "map.gdb"
    pyogrio.write_dataframe(two_units(), gdb, layer="units", driver="OpenFileGDB")
    (tmp_path / "map.gdb.xml").write_text("<metadata/>")
    (tmp_path / "other.gdbtable").write_bytes(b"x")
    files = dataset_files(gdb)
    inside = sorted(p for p in gdb.rglob("*") if p.is_file())
    assert files == inside + [tmp_path / "map.gdb.xml"]
    copy = tmp_path / "copy" / "map.gdb"
    for p in files[: len(inside)]:
        (copy / p.relative_to(gdb)).parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(p, copy / p.relative_to(gdb))
    assert pyogrio.read_dataframe(copy, layer="units").equals(pyogrio.read_dataframe(gdb, layer="units"))


def test_single_file_formats_take_only_their_metadata_sidecars(tmp_path):
    gpkg = tmp_path / "map.gpkg"
    pyogrio.write_dataframe(two_units(), gpkg, layer="units", driver="GPKG")
    for name in ("map.gpkg.aux.xml", "map.gpkg.xml", "map.prj", "map.dbf", "map.gpkg-wal"):
        (tmp_path / name).write_bytes(b"x")
    assert [p.name for p in dataset_files(gpkg)] == ["map.gpkg", "map.gpkg.aux.xml", "map.gpkg.xml"]
    assert dataset_files(tmp_path / "missing.shp") == []


def test_part_names_are_matched_on_the_whole_name():
    assert is_part_of("Units.SHP", "units.shx") and is_part_of("units.shp", "UNITS.CPG")
    assert not is_part_of("units.shp", "units.shp") and not is_part_of("units.shp", "xunits.shx")
    assert not is_part_of("a.b.shp", "a.shx") and is_part_of("a.b.shp", "a.b.dbf")
    assert not is_part_of("units.gpkg", "units.prj")


def test_role_guessing_takes_parts_for_parts_not_sources(tmp_path):
    write_shapefile(tmp_path)
    (tmp_path / "units.shx").rename(tmp_path / "units.SHX")
    (tmp_path / "units.shp.xml").write_text("<metadata/>")
    (tmp_path / "units.qix").write_bytes(b"x")
    sources, other = scan(tmp_path)
    assert [s.rel for s in sources] == ["units.shp"]
    assert other == []
    assert {".shx", ".dbf", ".prj", ".cpg", ".xml", ".qix"} <= SIDE_FILE_SUFFIXES and ".shp" not in SIDE_FILE_SUFFIXES
