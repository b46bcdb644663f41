"""Which files make up one dataset, so that a multi-file format always travels whole.

A layer named by one path can be stored in several files:

* a shapefile: ``units.shp`` with ``units.shx``, ``units.dbf`` and the
  optional parts beside it that share its name (``units.prj``,
  ``units.cpg``, spatial and attribute indexes, ``units.shp.xml``). The
  parts are matched case-insensitively (``UNITS.SHX`` belongs to
  ``units.shp``), since files made on Windows often differ in case;
* a folder format (a File Geodatabase, ``map.gdb/``): every file inside the
  folder;
* any dataset file with a metadata sidecar named after the whole file name:
  ``<name>.xml`` (ArcGIS metadata, e.g. ``units.shp.xml``) and
  ``<name>.aux.xml`` (GDAL's auxiliary metadata, e.g. ``map.gpkg.aux.xml``).

:func:`dataset_files` is the one place that says this; ``pack`` (what goes
into ``data/source/``), ``unpack`` (what comes back out) and role guessing
(what is a side file, not a source of its own) ask it.

Sources of the part lists: ESRI, "Shapefile file extensions" (ArcGIS Desktop
help, "Manage data > Shapefiles") for .shp .shx .dbf (required), .sbn .sbx
.fbn .fbx .ain .aih .atx .ixs .mxs .prj .xml .cpg; the GDAL "ESRI Shapefile /
DBF" driver page for .qix (its own spatial index); ``.qmd`` (QGIS layer
metadata) and ``.qpj`` (the projection file of older QGIS) are common practice.
GDAL's PAM ``.aux.xml`` is from the GDAL documentation (GDAL_PAM_ENABLED).

What this does not cover: parts named after another stem (a shapefile whose
``.dbf`` was renamed), formats whose parts are listed inside the data (a VRT
pointing at other files: those are never opened from an untrusted archive),
and side files of tools not listed here (a QGIS ``.qml`` style travels only
when the manifest names it).
"""

from __future__ import annotations

import re
from pathlib import Path

SHAPEFILE_PARTS: tuple[str, ...] = (
    ".shp", ".shx", ".dbf", ".prj", ".cpg", ".sbn", ".sbx", ".fbn", ".fbx", ".ain", ".aih", ".ixs", ".mxs",
    ".qix", ".qmd", ".qpj", ".shp.xml",
)
"""Suffixes that, after a shapefile's stem, name one of its parts (see the module docstring for sources)."""

METADATA_SIDECARS: tuple[str, ...] = (".xml", ".aux.xml")
"""Suffixes that, after a dataset's whole file name, name its metadata sidecar."""

FOLDER_FORMATS: tuple[str, ...] = (".gdb",)
"""Suffixes of folders that are one dataset (every file inside belongs to it)."""

SIDE_FILE_SUFFIXES: frozenset[str] = frozenset(
    {"." + p.rsplit(".", 1)[-1] for p in SHAPEFILE_PARTS if p != ".shp"} | {".xml", ".atx"}
)
"""The last suffix (lower case) of every side file: such a file is never a source of its own."""


def _part_pattern(main_name: str) -> re.Pattern[str]:
    """Names (lower case) of the files that belong to the dataset file ``main_name``."""
    low = main_name.lower()
    alternatives = [re.escape(low + s) for s in METADATA_SIDECARS]
    if low.endswith(".shp"):
        stem = re.escape(low[: -len(".shp")])
        alternatives += [stem + re.escape(s) for s in SHAPEFILE_PARTS if s != ".shp"]
        alternatives.append(stem + r"\.[^./]+\.atx")  # attribute index per column: <stem>.<column>.atx
    return re.compile("^(?:" + "|".join(alternatives) + ")$")


def is_part_of(main_name: str, name: str) -> bool:
    """True when the file ``name`` (a bare file name) is a side file of the dataset file ``main_name`` in the same folder.

    >>> is_part_of("units.shp", "UNITS.SHX"), is_part_of("units.shp", "units.shp.xml"), is_part_of("units.shp", "units2.dbf")
    (True, True, False)
    >>> is_part_of("map.gpkg", "map.gpkg.aux.xml"), is_part_of("map.gpkg", "map.dbf")
    (True, False)
    """
    return name.lower() != main_name.lower() and _part_pattern(main_name).match(name.lower()) is not None


def is_folder_format(path: Path) -> bool:
    """True for a folder that is one dataset (a File Geodatabase ``*.gdb``)."""
    return path.suffix.lower() in FOLDER_FORMATS


def dataset_files(path: Path) -> list[Path]:
    """Every file that makes up the dataset at ``path``: the file itself first, then its side files, sorted.

    ``path`` is a file (a shapefile's ``.shp``, a GeoPackage, a CSV...) or a
    folder format (``map.gdb``). Side files are looked for in the same folder
    only; files that do not exist are left out (``[]`` when ``path`` itself
    does not exist). Links to folders are not followed inside a folder format.

    >>> dataset_files(Path("no/such/units.shp"))
    []
    """
    path = Path(path)
    out: list[Path] = []
    if path.is_dir():
        out = sorted(p for p in path.rglob("*") if p.is_file())
    elif path.is_file():
        out = [path]
    else:
        return out
    pattern = _part_pattern(path.name)
    try:
        siblings = sorted(path.parent.iterdir(), key=lambda p: p.name)
    except OSError:
        return out
    out += [s for s in siblings if s.name != path.name and s.is_file() and pattern.match(s.name.lower())]
    return out


def is_side_file(path: Path) -> bool:
    """True for a file whose suffix marks it as a side file of some dataset (``.shx``, ``.dbf``, ``.shp.xml``...).

    Judged by the name alone; used where files are sorted into sources and
    others, so that a shapefile's parts are not taken for sources of their own.
    """
    return path.suffix.lower() in SIDE_FILE_SUFFIXES
