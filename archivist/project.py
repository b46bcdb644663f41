"""The loaded map project: one loader turns a manifest into a :class:`MapProject`.

Loading never writes to the project folder. Problems found while loading
(a missing file, a missing field, a CSV that is not UTF-8) are kept as hits
on the project and reported by the metadata rule family; only a project that
cannot be read at all raises :class:`~archivist.errors.ArchivistError`.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from . import manifest as mf
from . import vectorio
from .model import Hit
from .progress import Progress
from .readers import TABLE_SUFFIXES, TableData, read_table, text_column
from .reference import CHART_VERSIONS, DEFAULT_CHART

LAYER_ROLES = ("units", "lines", "extent", "samples", "structures")
TABLE_ROLES = ("legend", "analyses")
EXPECTED_GEOMETRY = {
    "units": ("Polygon", "MultiPolygon"),
    "extent": ("Polygon", "MultiPolygon"),
    "lines": ("LineString", "MultiLineString"),
    "samples": ("Point", "MultiPoint"),
    "structures": ("Point", "MultiPoint"),
}


@dataclass
class Layer:
    """A vector layer with its role, source and settings from the manifest.

    ``ids`` are the feature ids as text (the ``id_field`` when the manifest
    names one, else the file's feature id), aligned with ``frame``.
    """

    role: str
    path: Path
    source: str  # how the mapper wrote it: "map.gpkg:units"
    frame: gpd.GeoDataFrame
    ids: np.ndarray
    spec: dict[str, Any]
    measured: int = 0  # features whose geometry carries M (measure) values in the file; GDAL's reader drops them

    @property
    def crs(self) -> pyproj.CRS | None:
        return self.frame.crs

    @property
    def geometry(self) -> np.ndarray:
        """The geometries as a numpy object array (shapely 2 vectorised functions take it)."""
        return np.asarray(self.frame.geometry.array, dtype=object)

    @cached_property
    def valid(self) -> np.ndarray:
        """GEOS validity of every geometry (False where there is none), computed once per load."""
        return shapely.is_valid(self.geometry)

    def field(self, key: str) -> str | None:
        """The attribute column named by manifest key ``key`` (e.g. ``unit_field``), if it is in the data."""
        name = self.spec.get(key)
        return name if name in self.frame.columns else None

    def text(self, key: str) -> np.ndarray | None:
        """The column named by manifest key ``key`` as text (identifiers, codes), or None."""
        name = self.field(key)
        return None if name is None else text_column(self.frame[name])


@dataclass
class Table:
    """A non-spatial table (legend, analyses) with its role and source."""

    role: str
    path: Path
    source: str
    data: TableData
    spec: dict[str, Any]

    @property
    def frame(self) -> pd.DataFrame:
        return self.data.frame

    def field(self, key: str) -> str | None:
        name = self.spec.get(key)
        return name if name in self.frame.columns else None


@dataclass
class CheckConfig:
    """Settings from ``[checks]`` with defaults derived from the map scale."""

    scale: float
    tolerance: float
    sliver_area_mm2: float = 1.0
    sliver_width_mm: float = 0.5
    total_min: float = 98.5
    total_max: float = 101.5
    line_kinds: tuple[str, ...] = ("contact", "fault", "map-boundary")
    certainties: tuple[str, ...] = ("certain", "approximate", "inferred", "concealed")
    structure_kinds: tuple[str, ...] = (
        "bedding", "foliation", "cleavage", "joint", "vein", "fault plane", "lineation", "fold axis",
    )
    severity: dict[str, str] = field(default_factory=dict)
    chart: str = DEFAULT_CHART  # the ICS chart version legend ages are checked against

    @property
    def metres_per_map_mm(self) -> float:
        """Ground metres covered by one millimetre of the printed map."""
        return self.scale / 1000.0


@dataclass
class MapProject:
    """Everything a check needs: layers, tables, declared CRS, settings.

    Attributes
    ----------
    root
        The project folder.
    manifest
        The manifest with default field names filled in.
    manifest_path
        The manifest file, or None when roles were inferred from the data.
    crs
        The declared map CRS, or None when it is missing or not understood.
    problems
        Hits found while loading; the metadata family reports them.
    notes
        Statements about how the project was read, printed atop the report.
    """

    root: Path
    manifest: dict[str, Any]
    manifest_path: Path | None
    crs: pyproj.CRS | None
    layers: dict[str, Layer]
    tables: dict[str, Table]
    config: CheckConfig
    problems: list[Hit] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    files: list[Path] = field(default_factory=list)
    map_file: Path | None = None  # the one vector file checked without a manifest, if that is what was given
    archive: Any = None  # set by ``archivist audit``: what it found about the archive (rules of family ``archive`` read it)

    @property
    def name(self) -> str:
        return str(self.manifest.get("map", {}).get("title") or self.root.name)

    def has(self, role: str) -> bool:
        if role == "archive":
            return self.archive is not None
        return role in self.layers or role in self.tables


def crs_label(crs: pyproj.CRS | None) -> str | None:
    """A CRS as people read it: ``EPSG:32633 (WGS 84 / UTM zone 33N)``."""
    if crs is None:
        return None
    epsg = crs.to_epsg(min_confidence=70)
    return f"EPSG:{epsg} ({crs.name})" if epsg else crs.name


def parse_crs(text: str, where: str) -> tuple[pyproj.CRS | None, Hit | None]:
    try:
        return pyproj.CRS.from_user_input(text), None
    except pyproj.exceptions.CRSError:
        return None, Hit(f"{where}: '{text}' is not a CRS pyproj understands.", layer="manifest", rule="manifest-invalid")


def make_config(manifest: dict[str, Any], crs: pyproj.CRS | None) -> CheckConfig:
    m = manifest.get("map", {})
    checks = manifest.get("checks", {})
    scale = m.get("scale") if isinstance(m.get("scale"), (int, float)) and m.get("scale") > 0 else 25000.0
    metres = scale * 1e-4  # 0.1 mm at map scale
    if crs is not None and crs.is_geographic:
        metres /= 111_320.0  # metres to degrees near the equator; crs-geographic warns
    elif crs is not None and crs.axis_info and crs.axis_info[0].unit_conversion_factor:
        metres /= crs.axis_info[0].unit_conversion_factor
    kw: dict[str, Any] = {"scale": float(scale), "tolerance": float(checks.get("tolerance", metres))}
    for key in ("sliver_area_mm2", "sliver_width_mm", "total_min", "total_max"):
        if key in checks:
            kw[key] = float(checks[key])
    for key in ("line_kinds", "certainties", "structure_kinds"):
        if key in checks:
            kw[key] = tuple(str(v) for v in checks[key])
    kw["severity"] = {str(k): str(v) for k, v in (checks.get("severity") or {}).items()}
    if str(checks.get("chart")) in CHART_VERSIONS:  # another value is reported as manifest-invalid
        kw["chart"] = str(checks["chart"])
    return CheckConfig(**kw)


def _resolve(root: Path, rel: str) -> Path:
    return (root / rel).resolve() if not Path(rel).is_absolute() else Path(rel)


def load_layer(root: Path, role: str, spec: dict[str, Any], problems: list[Hit]) -> Layer | None:
    rel = spec["path"]
    path = _resolve(root, rel)
    source = f"{rel}:{spec['layer']}" if spec.get("layer") else rel
    if not path.exists():
        problems.append(Hit(f"layers.{role}: file '{rel}' does not exist.", layer=role, rule="layer-missing"))
        return None
    if path.suffix.lower() in TABLE_SUFFIXES and spec.get("x_field"):
        return _layer_from_table(path, role, spec, rel, problems)
    try:
        names = [n for n, _ in vectorio.list_layers(path, label=rel)]
    except vectorio.VectorReadError as exc:
        problems.append(Hit(f"layers.{role}: {exc}.", layer=role, rule="layer-unreadable"))
        return None
    name = spec.get("layer")
    if name is None:
        if len(names) != 1:
            problems.append(
                Hit(
                    f"layers.{role}: '{rel}' holds {len(names)} layers ({', '.join(names)}); name one with layers.{role}.layer.",
                    layer=role,
                    rule="layer-missing",
                )
            )
            return None
        name = names[0]
    elif name not in names:
        problems.append(
            Hit(f"layers.{role}: '{rel}' has no layer '{name}' (layers: {', '.join(names) or 'none'}).", layer=role, rule="layer-missing")
        )
        return None
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UserWarning)
            frame = vectorio.read_dataframe(path, layer=name, label=rel, fid_as_index=True, on_invalid="ignore")
    except vectorio.VectorReadError as exc:
        problems.append(Hit(f"layers.{role}: {exc}.", layer=role, rule="layer-unreadable"))
        return None
    if not isinstance(frame, gpd.GeoDataFrame):
        problems.append(Hit(f"layers.{role}: '{source}' has no geometry column.", layer=role, rule="layer-unreadable"))
        return None
    attributes = True
    if path.suffix.lower() == ".shp":
        attributes = _shapefile_sidecars(role, path, rel, problems)
    layer = _finish_layer(role, path, source, frame, spec, problems, attributes=attributes)
    declared = False
    for w in caught:  # the warnings of one read, not of every feature
        if MEASURED_WARNING in str(w.message):
            declared = True
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    layer.measured = _measured_features(path, name, rel, frame, declared)
    return layer


# pyogrio (0.13) reads no M values: it reads a layer whose GDAL geometry type is measured
# ("Measured LineString", a GeoPackage with gpkg_geometry_columns.m = 1 or 2, a PolyLineM
# shapefile) without them and says so with a UserWarning starting with these words.
MEASURED_WARNING = "Measured (M) geometry types are not supported"


def _sql_name(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _measured_features(path: Path, layer: str, rel: str, frame: gpd.GeoDataFrame, declared: bool) -> int:
    """How many features of the layer carry M values in the file.

    From the geometries when the reader kept M; otherwise, when the layer's
    type is measured, by GDAL's ``ST_IsMeasured`` in its SQLite SQL dialect
    (one query, no Python loop); every feature with a geometry when that
    query cannot run.
    """
    geoms = np.asarray(frame.geometry.array, dtype=object)
    kept = int(shapely.has_m(geoms).sum())
    if kept or not declared:
        return kept
    present = int((~(shapely.is_missing(geoms) | shapely.is_empty(geoms))).sum())
    try:
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message=re.escape(MEASURED_WARNING), category=UserWarning)
            column = vectorio.read_info(path, layer=layer, label=rel).get("geometry_name") or "GEOMETRY"
            flags = vectorio.read_dataframe(
                path,
                label=rel,
                sql=f"SELECT ST_IsMeasured({_sql_name(column)}) AS m FROM {_sql_name(layer)}",
                sql_dialect="SQLITE",
                read_geometry=False,
            )
        return int(pd.to_numeric(flags["m"], errors="coerce").fillna(0).astype(bool).sum())
    except (vectorio.VectorReadError, KeyError):
        return present


def _shapefile_sidecars(role: str, path: Path, rel: str, problems: list[Hit]) -> bool:
    """Report a missing ``.dbf`` or an unusable ``.prj`` beside a shapefile; False when there are no attributes."""
    prj = vectorio.prj_problem(path)
    if prj:
        problems.append(Hit(f"layers.{role}: {prj}; save the layer again from the GIS with its CRS.", layer=role, rule="layer-unreadable"))
    if vectorio.sidecar(path, ".dbf") is None:
        dbf = Path(rel).with_suffix(".dbf").as_posix()
        problems.append(
            Hit(
                f"layers.{role}: '{dbf}' is missing beside '{rel}', so the attributes of its features (unit codes and every other field) "
                "cannot be read; copy the .dbf from where the shapefile came from.",
                layer=role,
                rule="layer-unreadable",
            )
        )
        return False
    return True


def _layer_from_table(path: Path, role: str, spec: dict[str, Any], rel: str, problems: list[Hit]) -> Layer | None:
    data, hits = read_table(path, rel, spec.get("sheet"))
    problems.extend(hits)
    if data is None:
        return None
    frame = data.frame
    xf, yf = spec.get("x_field"), spec.get("y_field")
    for key, col in (("x_field", xf), ("y_field", yf)):
        if col not in frame.columns:
            problems.append(Hit(f"layers.{role}: field '{col}' ({key}) is not in '{rel}'.", layer=role, rule="field-missing"))
            return None
    x = pd.to_numeric(frame[xf], errors="coerce").to_numpy(dtype=float)
    y = pd.to_numeric(frame[yf], errors="coerce").to_numpy(dtype=float)
    geom = shapely.points(x, y)
    geom[np.isnan(x) | np.isnan(y)] = None
    crs = None
    if spec.get("crs"):
        crs, hit = parse_crs(spec["crs"], f"layers.{role}.crs")
        if hit:
            problems.append(hit)
    gdf = gpd.GeoDataFrame(frame.drop(columns=[xf, yf]), geometry=geom, crs=crs)
    rows = np.asarray(data.lines, dtype=np.int64) if len(data.lines) == len(gdf) else np.arange(len(gdf)) + data.header_row + 1
    gdf.index = pd.Index(rows, name="row")  # the mapper's own row numbers, blank rows counted
    return _finish_layer(role, path, rel, gdf, spec, problems)


def _finish_layer(role, path, source, frame, spec, problems, *, attributes: bool = True) -> Layer:
    """A :class:`Layer` from a read frame; fields the manifest names but the data lacks become hits.

    ``attributes`` False (a shapefile without its .dbf) reports no missing field: the cause is reported once.
    """
    for key in mf.REQUIRED_FIELDS.get(role, ()) if attributes else ():
        col = spec.get(key)
        if col is not None and col not in frame.columns:
            problems.append(
                Hit(
                    f"layers.{role}: field '{col}' ({key}) is not in '{source}' (fields: {', '.join(map(str, frame.columns.drop('geometry')))}).",
                    layer=role,
                    rule="field-missing",
                )
            )
    for key, col in spec.items() if attributes else ():
        if key.endswith("_field") and key not in mf.REQUIRED_FIELDS.get(role, ()) and key not in mf.LAYER_DEFAULTS.get(role, {}):
            if col not in frame.columns and key not in ("x_field", "y_field"):
                problems.append(Hit(f"layers.{role}: field '{col}' ({key}) is not in '{source}'.", layer=role, rule="field-missing"))
    ids = None
    id_col = spec.get("id_field")
    if id_col and id_col in frame.columns:
        ids = text_column(frame[id_col])
    if ids is None:
        ids = np.asarray(frame.index.astype(str), dtype=object)
    return Layer(role, path, source, frame, ids, spec)


def load_table(root: Path, role: str, spec: dict[str, Any], problems: list[Hit]) -> Table | None:
    rel = spec["path"]
    path = _resolve(root, rel)
    if not path.exists():
        problems.append(Hit(f"tables.{role}: file '{rel}' does not exist.", layer=role, rule="layer-missing"))
        return None
    data, hits = read_table(path, rel, spec.get("sheet"))
    problems.extend(hits)
    if data is None:
        return None
    source = f"{rel}, sheet '{data.sheet}'" if data.sheet else rel
    for key, col in spec.items():
        if key.endswith("_field") and col not in data.frame.columns:
            problems.append(
                Hit(
                    f"tables.{role}: column '{col}' ({key}) is not in '{source}' (columns: {', '.join(map(str, data.frame.columns))}).",
                    layer=role,
                    rule="field-missing",
                )
            )
    return Table(role, path, source, data, spec)


def _label(spec: dict[str, Any]) -> str:
    """A file (and layer or sheet) as the mapper wrote it in the manifest."""
    inner = spec.get("layer") or spec.get("sheet")
    return f"{spec['path']}:{inner}" if inner else str(spec["path"])


def load_project(path: str | Path, *, progress: Progress | None = None, manifest: dict[str, Any] | None = None) -> MapProject:
    """Load a map project from its folder or its ``archivist.toml``.

    Without a manifest, the roles of the folder's files are inferred from
    their geometry types and field names, and the project's notes say so.
    ``progress`` (an :class:`archivist.progress.Progress`) gets one step per
    file read. ``manifest``, when given, is used instead of the folder's
    ``archivist.toml`` (already read and validated by the caller).

    Raises
    ------
    ArchivistError
        The path does not exist or the manifest is not readable TOML.

    Examples
    --------
    >>> project = load_project("example_bundle")  # doctest: +SKIP
    >>> sorted(project.layers)  # doctest: +SKIP
    ['extent', 'lines', 'samples', 'structures', 'units']
    """
    root, manifest_path = mf.find_manifest(path)
    alone = mf.map_file(path) if manifest is None else None
    with vectorio.reading():  # private copies of changing SQLite inputs live until the load ends
        return _load(root, manifest_path, progress or Progress(), manifest, alone)


def _load(root: Path, manifest_path: Path | None, progress: Progress, given: dict[str, Any] | None,
          alone: Path | None = None) -> MapProject:
    problems: list[Hit] = []
    notes: list[str] = []
    if given is not None:  # read, screened and validated by the caller (an audited archive's manifest)
        raw = given
    elif manifest_path is not None:
        raw = mf.read_manifest(manifest_path)
        problems.extend(mf.validate_manifest(raw, manifest_path.name))
    else:
        from .infer import infer_manifest

        raw, infer_notes = infer_manifest(alone or root)
        if alone is not None:
            notes.append(f"{alone} checked without a manifest: the roles of its layers were guessed from the data; "
                         f"'archivist init {alone}' writes them into an {mf.MANIFEST_NAME} to confirm.")
        else:
            notes.append(f"No {mf.MANIFEST_NAME} in {root}: the roles of its files were inferred from the data; confirm them with 'archivist init'.")
        notes.extend(infer_notes)
        if "units" not in (raw.get("layers") or {}):
            problems.append(
                Hit(
                    f"{root}: no polygon layer with unit codes was found, so there is no map to check; "
                    f"name the units layer in {mf.MANIFEST_NAME} ('archivist init' writes one to complete).",
                    layer="units",
                    rule="layer-missing",
                )
            )
    manifest = mf.with_defaults(mf.usable(raw))
    crs = None
    crs_text = manifest["map"].get("crs")
    if isinstance(crs_text, str) and crs_text.strip():
        crs, hit = parse_crs(crs_text, "map.crs")
        if hit:
            problems.append(hit)
    layers: dict[str, Layer] = {}
    for role in LAYER_ROLES:
        spec = manifest["layers"].get(role)
        if isinstance(spec, dict) and isinstance(spec.get("path"), str):
            with progress.step(f"reading {_label(spec)}"):
                layer = load_layer(root, role, spec, problems)
            if layer is not None:
                layers[role] = layer
    tables: dict[str, Table] = {}
    for role in TABLE_ROLES:
        spec = manifest["tables"].get(role)
        if isinstance(spec, dict) and isinstance(spec.get("path"), str):
            with progress.step(f"reading {_label(spec)}"):
                table = load_table(root, role, spec, problems)
            if table is not None:
                tables[role] = table
    files = sorted({lay.path for lay in layers.values()} | {t.path for t in tables.values()})
    return MapProject(
        root=root,
        manifest=manifest,
        manifest_path=manifest_path,
        crs=crs,
        layers=layers,
        tables=tables,
        config=make_config(manifest, crs),
        problems=problems,
        notes=notes,
        files=files,
        map_file=alone,
    )
