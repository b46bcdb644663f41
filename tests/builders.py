"""Small builders for test projects: geometries made in code, written to a tmp folder.

``tiny_project`` writes a minimal, clean project (two units side by side, a
contact between them, a map boundary, a legend). ``copy_bundle`` copies the
example bundle; ``edit_manifest``, ``edit_layer`` and ``edit_table`` make a
broken variant of either with one defect.
"""

from __future__ import annotations

import hashlib
import shutil
import tomllib
from pathlib import Path
from typing import Any, Callable

import geopandas as gpd
import pandas as pd
import pyogrio
from shapely.geometry import LineString, Point, Polygon, box

from archivist.tomltext import dump_toml

REPO = Path(__file__).resolve().parent.parent
BUNDLE = REPO / "example_bundle"
CRS = "EPSG:32633"


def tree_digest(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> hex), to prove nothing was written."""
    return {
        str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(Path(root).rglob("*"))
        if p.is_file()
    }


def read_manifest(project: Path) -> dict[str, Any]:
    return tomllib.loads((Path(project) / "archivist.toml").read_text(encoding="utf-8"))


def write_manifest(project: Path, data: dict[str, Any]) -> None:
    (Path(project) / "archivist.toml").write_text(dump_toml(data), encoding="utf-8")


def edit_manifest(project: Path, change: Callable[[dict[str, Any]], None]) -> Path:
    """Apply ``change`` to the parsed manifest in place and write it back."""
    data = read_manifest(project)
    change(data)
    write_manifest(project, data)
    return Path(project)


def read_layer(project: Path, file: str, layer: str) -> gpd.GeoDataFrame:
    return pyogrio.read_dataframe(Path(project) / file, layer=layer, fid_as_index=True)


def edit_layer(project: Path, file: str, layer: str, change: Callable[[gpd.GeoDataFrame], gpd.GeoDataFrame | None]) -> Path:
    """Read a layer, let ``change`` edit (or return) the frame, write it back in place of the layer.

    Feature ids are kept: the frame's index is written as the GeoPackage fid.
    """
    path = Path(project) / file
    frame = read_layer(project, file, layer)
    out = change(frame)
    frame = frame if out is None else out
    others = {str(n): pyogrio.read_dataframe(path, layer=str(n), fid_as_index=True) for n, _ in pyogrio.list_layers(path) if str(n) != layer}
    path.unlink()
    for name, other in {**others, layer: frame}.items():
        write_layer(path, name, other)
    return Path(project)


def write_layer(path: Path, layer: str, frame: gpd.GeoDataFrame) -> None:
    frame = frame.copy()
    if frame.index.name == "fid":
        frame = frame.reset_index()
    pyogrio.write_dataframe(frame, path, layer=layer, driver="GPKG" if str(path).endswith(".gpkg") else None)


def edit_table(project: Path, file: str, change: Callable[[pd.DataFrame], pd.DataFrame | None]) -> Path:
    """Read a CSV table as text, let ``change`` edit it, write it back as UTF-8."""
    path = Path(project) / file
    frame = pd.read_csv(path, dtype=str, keep_default_na=False).astype(object)
    out = change(frame)
    frame = frame if out is None else out
    frame.to_csv(path, index=False, lineterminator="\n")
    return Path(project)


def copy_bundle(tmp_path: Path, name: str = "bundle") -> Path:
    """A private copy of the example bundle to break."""
    dest = Path(tmp_path) / name
    shutil.copytree(BUNDLE, dest, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    return dest


# ---------------------------------------------------------------- tiny projects

def two_units() -> gpd.GeoDataFrame:
    """Two 100 m x 100 m squares side by side: unit A west of x=100, unit B east of it."""
    return gpd.GeoDataFrame(
        {"unit": ["A", "B"]},
        geometry=[box(0, 0, 100, 100), box(100, 0, 200, 100)],
        crs=CRS,
    )


def two_units_lines() -> gpd.GeoDataFrame:
    """The contact between the two squares and the map boundary around them."""
    return gpd.GeoDataFrame(
        {"kind": ["contact", "map-boundary"], "certainty": ["certain", "certain"]},
        geometry=[
            LineString([(100, 0), (100, 100)]),
            LineString([(100, 0), (0, 0), (0, 100), (100, 100), (200, 100), (200, 0), (100, 0)]),
        ],
        crs=CRS,
    )


def tiny_legend() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "unit": ["A", "B"],
            "name": ["Alder Sandstone", "Birch Mudstone"],
            "description": ["Red cross-bedded sandstone.", "Grey laminated mudstone."],
            "age": ["Norian", "Carnian"],
            "min_age_ma": ["210", "230"],
            "max_age_ma": ["220", "235"],
            "order": ["1", "2"],
            "colour": ["#E8A060", "#9AA0B0"],
            "lithology": ["sandstone", "mudstone"],
            "kind": ["sedimentary", "sedimentary"],
        }
    )


def tiny_project(
    tmp_path: Path,
    *,
    units: gpd.GeoDataFrame | None = None,
    lines: gpd.GeoDataFrame | None = None,
    extent: Polygon | None = None,
    samples: gpd.GeoDataFrame | None = None,
    structures: gpd.GeoDataFrame | None = None,
    legend: pd.DataFrame | None = None,
    manifest: dict[str, Any] | None = None,
    name: str = "tiny",
) -> Path:
    """Write a small project to ``tmp_path/name`` and return its folder.

    Defaults give a clean two-unit map at 1:10 000 (tolerance 1 m). Pass
    frames to replace a layer, or ``False``-y empty frames to leave one out
    by editing ``manifest`` afterwards.
    """
    root = Path(tmp_path) / name
    root.mkdir(parents=True, exist_ok=False)
    units = two_units() if units is None else units
    lines = two_units_lines() if lines is None else lines
    gpkg = root / "map.gpkg"
    write_layer(gpkg, "units", units)
    write_layer(gpkg, "lines", lines)
    data: dict[str, Any] = {
        "map": {
            "title": "Tiny test map",
            "version": "1.0.0",
            "scale": 10000,
            "crs": CRS,
            "licence": "CC-BY-4.0",
            "abstract": "Two invented units for tests.",
            "keywords": ["test"],
            "authors": [{"name": "Test Mapper", "orcid": "0000-0002-1825-0097"}],
        },
        "layers": {
            "units": {"path": "map.gpkg", "layer": "units", "unit_field": "unit"},
            "lines": {"path": "map.gpkg", "layer": "lines", "kind_field": "kind", "certainty_field": "certainty"},
        },
        "tables": {"legend": {"path": "legend.csv"}},
    }
    if extent is not None:
        write_layer(gpkg, "extent", gpd.GeoDataFrame(geometry=[extent], crs=units.crs))
        data["layers"]["extent"] = {"path": "map.gpkg", "layer": "extent"}
    if samples is not None:
        write_layer(gpkg, "samples", samples)
        data["layers"]["samples"] = {"path": "map.gpkg", "layer": "samples", "id_field": "sample_id", "unit_field": "unit"}
    if structures is not None:
        write_layer(gpkg, "structures", structures)
        data["layers"]["structures"] = {"path": "map.gpkg", "layer": "structures"}
    (tiny_legend() if legend is None else legend).to_csv(root / "legend.csv", index=False, lineterminator="\n")
    if manifest:
        _merge(data, manifest)
    write_manifest(root, data)
    return root


def _merge(base: dict, extra: dict) -> None:
    for k, v in extra.items():
        if isinstance(v, dict) and isinstance(base.get(k), dict):
            _merge(base[k], v)
        else:
            base[k] = v


def point(x: float, y: float) -> Point:
    return Point(x, y)


# ---------------------------------------------------------------- samples, analyses, structures (issue 4)

def tiny_samples(ids=("S-0001", "S-0002"), units=("A", "B"), xy=((50, 50), (150, 50))) -> gpd.GeoDataFrame:
    """Sample points for the tiny two-unit map: by default one in each unit, 50 m from the contact."""
    return gpd.GeoDataFrame(
        {"sample_id": list(ids), "unit": list(units)},
        geometry=[Point(x, y) for x, y in xy],
        crs=CRS,
    )


def tiny_structures(kinds=("bedding", "lineation"), azimuths=(130.0, 215.0), dips=(24.0, 18.0)) -> gpd.GeoDataFrame:
    """Structural measurements for the tiny map."""
    n = len(kinds)
    return gpd.GeoDataFrame(
        {"kind": list(kinds), "azimuth": list(azimuths), "dip": list(dips)},
        geometry=[Point(20 + 40 * i, 30) for i in range(n)],
        crs=CRS,
    )


MAJOR_HEADER = ["sample_id", "SiO2 (wt%)", "TiO2 (wt%)", "Al2O3 (wt%)", "Fe2O3T (wt%)", "MnO (wt%)", "MgO (wt%)",
                "CaO (wt%)", "Na2O (wt%)", "K2O (wt%)", "P2O5 (wt%)", "LOI (wt%)", "Total (wt%)"]
# An invented granite-like analysis that totals 100.00 wt%.
MAJOR_ROW = [72.50, 0.28, 14.00, 2.30, 0.05, 0.55, 1.50, 3.50, 4.60, 0.10, 0.62]


def write_xlsx(path: Path, sheet: str, header: list, rows: list[list]) -> Path:
    """Write one sheet of a workbook with openpyxl (values as given: numbers stay numbers)."""
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = sheet
    ws.append(list(header))
    for row in rows:
        ws.append(list(row))
    wb.save(path)
    return Path(path)


def major_rows(ids) -> list[list]:
    """One clean major-element row per sample id, with its Total."""
    return [[sid, *MAJOR_ROW, round(sum(MAJOR_ROW), 2)] for sid in ids]


def tiny_with_analyses(tmp_path: Path, *, ids=("S-0001", "S-0002"), header=None, rows=None, samples=None,
                       manifest=None, **kw) -> Path:
    """The tiny project with samples and an analyses workbook (sheet 'majors')."""
    samples = tiny_samples() if samples is None else samples
    extra = {"tables": {"analyses": {"path": "analyses.xlsx", "sheet": "majors", "sample_field": "sample_id"}}}
    if manifest:
        _merge(extra, manifest)
    root = tiny_project(tmp_path, samples=samples, manifest=extra, **kw)
    write_xlsx(root / "analyses.xlsx", "majors", header or MAJOR_HEADER, major_rows(ids) if rows is None else rows)
    return root


def edit_xlsx(project: Path, file: str, sheet: str, change: Callable[[Any], None]) -> Path:
    """Open a workbook with openpyxl, let ``change`` edit the worksheet ``sheet``, save it in place."""
    import openpyxl

    path = Path(project) / file
    wb = openpyxl.load_workbook(path)
    change(wb[sheet])
    wb.save(path)
    return Path(project)


def xlsx_cell(ws, sample_id: str, header: str):
    """The openpyxl cell of the row whose first column is ``sample_id`` and the column headed ``header``."""
    headers = [c.value for c in ws[1]]
    col = headers.index(header) + 1
    for row in ws.iter_rows(min_row=2):
        if row[0].value == sample_id:
            return ws.cell(row=row[0].row, column=col)
    raise KeyError(sample_id)


# ---------------------------------------------------------------- SQLite write-ahead log

# SQLite file format, section 4.1: a WAL file starts with a 32-byte header whose magic number is
# 0x377f0682 or 0x377f0683; each frame is a 24-byte frame header and one page.
WAL_MAGIC = (0x377F0682, 0x377F0683)


def wal_frames(wal: Path) -> int:
    """Number of frames in a ``-wal`` file, read from its raw bytes (SQLite file format section 4.1)."""
    data = Path(wal).read_bytes()
    if len(data) < 32 or int.from_bytes(data[:4], "big") not in WAL_MAGIC:
        return 0
    page_size = int.from_bytes(data[8:12], "big")
    return (len(data) - 32) // (24 + page_size)


def leave_in_wal(gpkg: Path, *statements: str) -> Path:
    """Switch ``gpkg`` to WAL mode and commit ``statements`` so they stay in its ``-wal``, not checkpointed.

    As a GIS that still has the file open (or crashed) leaves it: a child
    process opens the file with the ``sqlite3`` module, sets
    ``journal_mode=WAL`` and ``wal_autocheckpoint=0``, runs the statements,
    commits and ends with ``os._exit`` without closing, so SQLite neither
    checkpoints nor deletes the ``-wal``. The GeoPackage's R-tree triggers
    name SQL functions GDAL provides; they are declared here so the
    statements compile, and fail if a statement ever makes them run
    (statements must not change geometries).
    """
    import os
    import sqlite3

    gpkg = Path(gpkg)
    pid = os.fork()
    if pid == 0:  # pragma: no cover - runs in the child
        code = 1
        try:
            con = sqlite3.connect(gpkg)

            def refuse(*_):
                raise sqlite3.OperationalError("geometry functions are not available in this builder")

            for name in ("ST_IsEmpty", "ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY"):
                con.create_function(name, 1, refuse)
            assert con.execute("PRAGMA journal_mode=WAL").fetchone()[0] == "wal"
            con.execute("PRAGMA wal_autocheckpoint=0")
            for sql in statements:
                con.execute(sql)
            con.commit()
            code = 0
        finally:
            os._exit(code)
    _, status = os.waitpid(pid, 0)
    assert status == 0, "the child writing the WAL failed"
    assert wal_frames(Path(f"{gpkg}-wal")) > 0, "the -wal holds no frames"
    return gpkg


def folder_state(root: Path) -> dict[str, tuple]:
    """Every entry under ``root`` (and ``root`` itself): kind, SHA-256 of files, and mtime in ns."""
    out: dict[str, tuple] = {".": ("dir", None, Path(root).stat().st_mtime_ns)}
    for p in sorted(Path(root).rglob("*")):
        st = p.lstat()
        rel = p.relative_to(root).as_posix()
        if p.is_file() and not p.is_symlink():
            out[rel] = ("file", hashlib.sha256(p.read_bytes()).hexdigest(), st.st_mtime_ns)
        else:
            out[rel] = ("dir" if p.is_dir() else "other", None, st.st_mtime_ns)
    return out


# ---------------------------------------------------------------- measures (M) on GeoPackage geometries

def add_measures(gpkg: Path, layer: str, measures: dict[int, list[float]], *, with_z: bool = False, optional: bool = False) -> Path:
    """Give the features of ``layer`` M values (one per vertex, by fid), as a GIS that stores route measures does.

    pyogrio 0.13 writes no M geometry types, so the file is edited with
    ``sqlite3``: each geometry becomes a GeoPackage binary (GeoPackage 1.4,
    OGC 12-128r19, section 2.1.3: "GP", version 0, flags byte with bit 0 =
    little endian and bits 1-3 = 1 for an [minx, maxx, miny, maxy] envelope,
    srs_id int32, the envelope, then ISO WKB) whose WKB is of ISO type 2002
    (LineString M) or 3002 (LineString ZM), 2001/3001 for points (OGC Simple
    Features 1.2.1 / ISO 19125-1, WKB geometry type codes); ``gpkg_geometry_columns.m``
    becomes 1 ("mandatory", section 2.1.5, table 7), or 2 ("optional") with
    ``optional`` (then features left out of ``measures`` keep plain x, y),
    and ``z`` too with ``with_z`` (Z = 0 then). ``geometry_type_name`` keeps its base name
    (LINESTRING, POINT): the GeoPackage gives the dimensions in ``z`` and ``m``.
    The R-tree triggers call GDAL's SQL functions; they are given here from the envelope.
    """
    import sqlite3
    import struct

    import shapely

    con = sqlite3.connect(gpkg)
    envelope = lambda blob: struct.unpack("<4d", blob[8:40])
    con.create_function("ST_IsEmpty", 1, lambda blob: 0)
    for i, name in enumerate(("ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY")):
        con.create_function(name, 1, lambda blob, i=i: envelope(blob)[i])
    (column,) = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?", (layer,)).fetchone()
    for fid, ms in measures.items():
        blob = con.execute(f'SELECT "{column}" FROM "{layer}" WHERE fid = ?', (fid,)).fetchone()[0]
        srs_id = struct.unpack("<i" if blob[3] & 1 else ">i", blob[4:8])[0]
        envelope_bytes = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}[(blob[3] >> 1) & 7]
        geom = shapely.from_wkb(blob[8 + envelope_bytes:])
        xy = shapely.get_coordinates(geom)
        assert len(xy) == len(ms), f"fid {fid}: {len(xy)} vertices, {len(ms)} measures"
        dims = "ZM" if with_z else "M"
        vertices = ", ".join(" ".join(repr(float(v)) for v in ((x, y, 0.0, m) if with_z else (x, y, m))) for (x, y), m in zip(xy, ms))
        kind = shapely.get_type_id(geom)
        text = f"POINT {dims} ({vertices})" if kind == 0 else f"LINESTRING {dims} ({vertices})"
        wkb = shapely.to_wkb(shapely.from_wkt(text), flavor="iso", output_dimension=4, byte_order=1)
        assert int.from_bytes(wkb[1:5], "little") == (3000 if with_z else 2000) + (1 if kind == 0 else 2)
        minx, miny, maxx, maxy = shapely.bounds(geom)
        new = b"GP" + bytes([0, 0b0000_0011]) + struct.pack("<i4d", srs_id, minx, maxx, miny, maxy) + wkb
        con.execute(f'UPDATE "{layer}" SET "{column}" = ? WHERE fid = ?', (new, fid))
    con.execute("UPDATE gpkg_geometry_columns SET m = ?, z = ? WHERE table_name = ?", (2 if optional else 1, 1 if with_z else 0, layer))
    con.commit()
    con.close()
    return Path(gpkg)


def measures_of(gpkg: Path, layer: str) -> dict[int, list[float]]:
    """The M value of every vertex by fid, read from the GeoPackage binaries with ``sqlite3`` and shapely (not GDAL)."""
    import sqlite3

    import shapely

    con = sqlite3.connect(f"file:{gpkg}?mode=ro", uri=True)
    (column,) = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?", (layer,)).fetchone()
    out = {}
    for fid, blob in con.execute(f'SELECT fid, "{column}" FROM "{layer}" ORDER BY fid'):
        envelope_bytes = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}[(blob[3] >> 1) & 7]
        geom = shapely.from_wkb(blob[8 + envelope_bytes:])
        out[fid] = shapely.get_coordinates(geom, include_m=True)[:, -1].tolist() if shapely.has_m(geom) else []
    con.close()
    return out


# Route measures along the two lines of the tiny map (fids 1 and 2), in metres from each line's start.
LINE_MEASURES = {1: [0.0, 100.0], 2: [0.0, 100.0, 200.0, 300.0, 400.0, 500.0, 600.0]}


def tiny_with_measures(tmp_path: Path, *, with_z: bool = False, **kw) -> Path:
    """The tiny project whose lines carry M values (``LINE_MEASURES``), as LineString M or ZM."""
    root = tiny_project(tmp_path, **kw)
    add_measures(root / "map.gpkg", "lines", LINE_MEASURES, with_z=with_z)
    return root
