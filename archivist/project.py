"""The loaded map project: one loader turns a manifest into a :class:`MapProject`.

Loading never writes to the project folder. Problems found while loading
(a missing file, a missing field, a CSV that is not UTF-8) are kept as hits
on the project and reported by the metadata rule family; only a project that
cannot be read at all raises :class:`~archivist.errors.ArchivistError`.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field, replace
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
from .collector import collector_paused
from .analysis.arrays import same_objects
from .farcoords import far_out
from .model import Hit
from .progress import Progress
from .readers import TABLE_SUFFIXES, TableData, read_table, text_column
from .reference import CHART_VERSIONS, DEFAULT_CHART

LAYER_ROLES = ("units", "lines", "extent", "samples", "structures", "stations")
TABLE_ROLES = ("legend", "analyses", "references")
EXPECTED_GEOMETRY = {
    "units": ("Polygon", "MultiPolygon"),
    "extent": ("Polygon", "MultiPolygon"),
    "lines": ("LineString", "MultiLineString"),
    "samples": ("Point", "MultiPoint"),
    "structures": ("Point", "MultiPoint"),
    "stations": ("Point", "MultiPoint"),
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
    group: str = ""  # the role whose fields and geometry the layer has: "lines" for a layer of contacts; default its role
    parts: tuple["Layer", ...] = ()  # the mapper's own layers this one combines (several line layers), else empty
    origin: dict[str, tuple[str, str]] = field(default_factory=dict)  # combined id -> (own layer, own feature id)
    key: str = ""  # where the manifest declares it: "layers.units", "layers.lines[1]"
    files: tuple[Path, ...] = ()  # a layer read from a list of files (the season's hand-in): every file, in order
    source_column: str = ""  # with files: the column holding each row's file as the manifest writes it

    def __post_init__(self) -> None:
        self.group = self.group or self.role
        self.key = self.key or f"layers.{self.role}"

    @property
    def crs(self) -> pyproj.CRS | None:
        return self.frame.crs

    @property
    def paths(self) -> tuple[Path, ...]:
        """The file(s) the layer was read from: several for a list of files, else its one path."""
        return self.files or (self.path,)

    @property
    def row_files(self) -> np.ndarray | None:
        """Each row's file as the manifest writes it, for a layer read from a list of files; else None."""
        if not self.source_column or self.source_column not in self.frame.columns:
            return None
        return self.frame[self.source_column].to_numpy(dtype=object)

    @property
    def geometry(self) -> np.ndarray:
        """The geometries as a numpy object array (shapely 2 vectorised functions take it)."""
        return np.asarray(self.frame.geometry.array, dtype=object)

    @cached_property
    def valid(self) -> np.ndarray:
        """GEOS validity of every geometry (False where there is none), computed once per load."""
        return shapely.is_valid(self.geometry)

    @cached_property
    def far(self) -> tuple[np.ndarray, np.ndarray]:
        """:func:`archivist.farcoords.far_out` of the geometries (which have coordinates no map can have, and the
        largest of each), computed once per load: the metadata rule and every analysis that leaves them out ask."""
        return far_out(self.geometry, self.crs)

    def take(self, rows: np.ndarray) -> "Layer":
        """The layer of the features at positions ``rows`` (a spatial partition's), with the answers per feature
        already computed (:attr:`valid`, :attr:`far`) for those rows, not asked again."""
        sub = replace(self, frame=self.frame.iloc[rows], ids=np.asarray(self.ids)[rows], parts=())
        known = self.__dict__
        if "valid" in known:
            sub.__dict__["valid"] = known["valid"][rows]
        if "far" in known:
            sub.__dict__["far"] = (known["far"][0][rows], known["far"][1][rows])
        return sub

    def known_from(self, other: "Layer", equal: np.ndarray | None = None) -> "Layer":
        """This layer with the per-feature answers :attr:`valid` and :attr:`far` that ``other`` already has, for the
        geometries both hold (the same objects: a repair's working copy after a change to a few of them), asked
        only of the others. ``equal`` (per row, with as many rows as ``other``): the caller found the geometry
        equal to ``other``'s in the same row (GEOS ``equals_exact`` with no tolerance, a one-part multipolygon as
        its polygon: a repaired copy read back from its file), which takes that row's answers too. Returns self.

        Both layers are alive while their geometries are compared, so two equal object ids are one object.
        """
        known = other.__dict__
        todo = [k for k in ("valid", "far") if k in known and k not in self.__dict__]
        if "far" in todo and self.crs != other.crs:  # the limit of a plausible coordinate depends on the CRS
            todo.remove("far")
        if not todo:
            return self
        mine, theirs = self.geometry, other.geometry
        src = same_objects(theirs, mine)
        if equal is not None and len(equal) == len(mine) == len(theirs):
            src = np.where((src < 0) & equal, np.arange(len(mine)), src)
        have = src >= 0
        rest = np.flatnonzero(~have)
        if "valid" in todo:
            valid = np.zeros(len(mine), dtype=bool)
            valid[have] = known["valid"][src[have]]
            valid[rest] = shapely.is_valid(mine[rest])
            self.__dict__["valid"] = valid
        if "far" in todo:
            mask, largest = np.zeros(len(mine), dtype=bool), np.zeros(len(mine))
            mask[have], largest[have] = known["far"][0][src[have]], known["far"][1][src[have]]
            mask[rest], largest[rest] = far_out(mine[rest], self.crs)
            self.__dict__["far"] = (mask, largest)
        return self

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
    """A non-spatial table (legend, analyses) with its role and source.

    For analyses, ``data`` holds the sample rows only: the rows under the
    header that describe the columns (units, method, detection limits) and
    the quality-control rows are kept aside (``row_units``, ``qc``), and
    sample ids are restored as ``id_width``/``id_prefix`` say; the lab's
    file itself is never changed.
    """

    role: str
    path: Path
    source: str
    data: TableData
    spec: dict[str, Any]
    row_units: dict[str, str] = field(default_factory=dict)  # column -> unit as written in the units row
    qc: pd.DataFrame | None = None  # quality-control rows, indexed by their row in the file
    files: tuple[Path, ...] = ()  # a table read from a list of files (the season's hand-in): every file, in order
    source_column: str = ""  # with files: the column holding each row's file as the manifest writes it

    @property
    def paths(self) -> tuple[Path, ...]:
        """The file(s) the table was read from."""
        return self.files or (self.path,)

    @property
    def frame(self) -> pd.DataFrame:
        return self.data.frame

    def field(self, key: str) -> str | None:
        name = self.spec.get(key)
        return name if name in self.frame.columns else None


@dataclass
class CheckConfig:
    """Settings from ``[checks]`` with defaults derived from the map scale.

    ``tolerance`` is in map units in a projected CRS, and in metres when the
    map CRS is geographic (degrees are not a length; the checks of such a map
    run in a local metric frame, see :mod:`archivist.analysis.localframe`).
    """

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
    # Ground distance beyond which a sample or measurement is far from the station it names: our choice, about
    # the size of one outcrop area a mapper describes at one stop, several times a handheld GPS's error.
    station_distance_m: float = 100.0
    severity: dict[str, str] = field(default_factory=dict)
    chart: str = DEFAULT_CHART  # the ICS chart version legend ages are checked against
    photo_distance_m: float = 100.0  # farthest a geotagged photo may be from its station (common practice)

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
    local: Any = None  # the LocalFrame of the engine's working copy of a map in longitude/latitude (analysis/localframe.py)
    media: dict[str, Any] = field(default_factory=dict)  # "photos", "fieldbooks" -> archivist.photos.MediaSet ([files])

    @property
    def name(self) -> str:
        return str(self.manifest.get("map", {}).get("title") or self.root.name)

    @property
    def sources(self) -> dict[str, Layer]:
        """The layers as the mapper declared them: the combined lines replaced by its own line layers."""
        out: dict[str, Layer] = {}
        for role, layer in self.layers.items():
            if layer.parts:
                out.update((part.role, part) for part in layer.parts)
            else:
                out[role] = layer
        return out

    def own_names(self, hit: Hit) -> Hit:
        """A hit on the combined lines, named by the mapper's own layer and feature ids.

        A hit whose features all come from one line layer (``faults``) gets
        that layer and the features' own ids; a hit spanning several keeps
        ``lines`` and the combined ids (``faults:3``, ``contacts:12``).
        """
        lines = self.layers.get("lines")
        if hit.layer != "lines" or lines is None or not lines.origin or not hit.features:
            return hit
        found = [lines.origin.get(str(f)) for f in hit.features]
        if any(o is None for o in found) or len({o[0] for o in found if o is not None}) != 1:
            return hit
        own = [o for o in found if o is not None]
        return replace(hit, layer=own[0][0], features=tuple(o[1] for o in own))

    def has(self, role: str) -> bool:
        if role == "archive":
            return self.archive is not None
        return role in self.layers or role in self.tables or role in self.media


def crs_label(crs: pyproj.CRS | None) -> str | None:
    """A CRS as people read it: ``EPSG:32633 (WGS 84 / UTM zone 33N)``."""
    if crs is None:
        return None
    epsg = crs.to_epsg(min_confidence=70)
    return f"EPSG:{epsg} ({crs.name})" if epsg else crs.name


# Decimals a location keeps: 1e-8 degree is about 1.1 mm of latitude on the ground (WGS 84: 111.3 km per
# degree, pyproj Geod), as fine as 1e-3 (a millimetre) in a projected CRS in metres.
DEGREE_DIGITS = 8
LINEAR_DIGITS = 3


def location_digits(crs: pyproj.CRS | None) -> int:
    """Decimals kept in a location in ``crs``: 8 in degrees (about a millimetre), 3 in metres, feet and other linear units."""
    return DEGREE_DIGITS if crs is not None and crs.is_geographic else LINEAR_DIGITS


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
    # In a geographic CRS the tolerance stays in metres: the checks run in a local metric frame
    # (analysis/localframe.py), since no one factor turns metres into degrees in every direction.
    if crs is not None and not crs.is_geographic and crs.axis_info and crs.axis_info[0].unit_conversion_factor:
        metres /= crs.axis_info[0].unit_conversion_factor
    kw: dict[str, Any] = {"scale": float(scale), "tolerance": float(checks.get("tolerance", metres))}
    for key in ("sliver_area_mm2", "sliver_width_mm", "total_min", "total_max", "station_distance_m", "photo_distance_m"):
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


def load_layer(
    root: Path, role: str, spec: dict[str, Any], problems: list[Hit], *, key: str | None = None, group: str | None = None
) -> Layer | None:
    """One layer of the manifest; ``role`` names it in findings, ``key`` is its manifest key (default ``layers.<role>``),
    ``group`` the role whose fields and geometry it has (a line layer's is ``lines``)."""
    where = key or f"layers.{role}"
    group = group or role
    if isinstance(spec.get("path"), list):
        return _hand_in_layer(root, role, spec, problems, where, group)
    rel = spec["path"]
    path = _resolve(root, rel)
    source = f"{rel}:{spec['layer']}" if spec.get("layer") else rel
    if not path.exists():
        problems.append(Hit(f"{where}: file '{rel}' does not exist.", layer=role, rule="layer-missing"))
        return None
    if path.suffix.lower() in TABLE_SUFFIXES and spec.get("x_field"):
        return _layer_from_table(path, role, spec, rel, problems, where, group)
    try:
        names = [n for n, _ in vectorio.list_layers(path, label=rel)]
    except vectorio.VectorReadError as exc:
        problems.append(Hit(f"{where}: {exc}.", layer=role, rule="layer-unreadable"))
        return None
    name = spec.get("layer")
    if name is None:
        if len(names) != 1:
            problems.append(
                Hit(
                    f"{where}: '{rel}' holds {len(names)} layers ({', '.join(names)}); name one with {where}.layer.",
                    layer=role,
                    rule="layer-missing",
                )
            )
            return None
        name = names[0]
    elif name not in names:
        problems.append(
            Hit(f"{where}: '{rel}' has no layer '{name}' (layers: {', '.join(names) or 'none'}).", layer=role, rule="layer-missing")
        )
        return None
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UserWarning)
            frame = vectorio.read_dataframe(path, layer=name, label=rel, fid_as_index=True, on_invalid="ignore")
    except vectorio.VectorReadError as exc:
        problems.append(Hit(f"{where}: {exc}.", layer=role, rule="layer-unreadable"))
        return None
    if not isinstance(frame, gpd.GeoDataFrame):
        problems.append(Hit(f"{where}: '{source}' has no geometry column.", layer=role, rule="layer-unreadable"))
        return None
    frame = share_text(frame)
    attributes = True
    if path.suffix.lower() == ".shp":
        attributes = _shapefile_sidecars(role, path, rel, problems, where)
    layer = _finish_layer(role, path, source, frame, spec, problems, attributes=attributes, where=where, group=group)
    declared = False
    for w in caught:  # the warnings of one read, not of every feature
        if MEASURED_WARNING in str(w.message):
            declared = True
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    layer.measured = _measured_features(path, name, rel, frame, declared)
    return layer


def share_text(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with each text column's equal values held as one Python object (same values, same dtypes).

    GDAL's reader makes a new string object for every cell: a column of
    three words over 3 x 10^6 lines held 3 x 10^6 objects of about 60 bytes
    (180 MB). Here each distinct value is kept once and every cell refers to
    it (8 bytes a cell); columns where most values differ are left as read.
    Only columns of text (pandas' string dtype, or objects that are all
    text): values of other types that compare equal (1, 1.0, True) are never
    merged.
    """
    n = len(frame)
    if n < 2:
        return frame
    shared = {}
    for name in frame.columns:
        col = frame[name]
        if isinstance(col.dtype, gpd.array.GeometryDtype):
            continue
        if not (isinstance(col.dtype, pd.StringDtype) and col.dtype.storage == "python"):
            if col.dtype != object or pd.api.types.infer_dtype(col, skipna=True) != "string":
                continue
        codes, uniques = pd.factorize(col.array, use_na_sentinel=True)
        if len(uniques) * 2 > n:
            continue
        values = col.to_numpy(dtype=object, copy=True)  # missing cells keep their own marker
        have = codes >= 0
        values[have] = np.asarray(uniques, dtype=object)[codes[have]]
        array = pd.array(values, dtype=col.dtype) if isinstance(col.dtype, pd.StringDtype) else values
        shared[name] = pd.Series(array, index=frame.index, name=name, dtype=col.dtype)
    if not shared:
        return frame
    out = frame.copy(deep=False)
    for name, col in shared.items():
        out[name] = col
    return out


# pyogrio (0.13) reads no M values: it reads a layer whose GDAL geometry type is measured
# ("Measured LineString", a GeoPackage with gpkg_geometry_columns.m = 1 or 2, a PolyLineM
# shapefile) without them and says so with a UserWarning starting with these words.
MEASURED_WARNING = "Measured (M) geometry types are not supported"


def sql_name(name: str) -> str:
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
                sql=f"SELECT ST_IsMeasured({sql_name(column)}) AS m FROM {sql_name(layer)}",
                sql_dialect="SQLITE",
                read_geometry=False,
            )
        return int(pd.to_numeric(flags["m"], errors="coerce").fillna(0).astype(bool).sum())
    except (vectorio.VectorReadError, KeyError):
        return present


def _shapefile_sidecars(role: str, path: Path, rel: str, problems: list[Hit], where: str) -> bool:
    """Report a missing ``.dbf`` or an unusable ``.prj`` beside a shapefile; False when there are no attributes."""
    prj = vectorio.prj_problem(path)
    if prj:
        problems.append(Hit(f"{where}: {prj}; save the layer again from the GIS with its CRS.", layer=role, rule="layer-unreadable"))
    if vectorio.sidecar(path, ".dbf") is None:
        dbf = Path(rel).with_suffix(".dbf").as_posix()
        problems.append(
            Hit(
                f"{where}: '{dbf}' is missing beside '{rel}', so the attributes of its features (unit codes and every other field) "
                "cannot be read; copy the .dbf from where the shapefile came from.",
                layer=role,
                rule="layer-unreadable",
            )
        )
        return False
    return True


def _source_column(frames: list[pd.DataFrame]) -> str:
    """The name of the column recording each row's file: ``source_file``, followed by ``_`` while a file already has it."""
    name = mf.SOURCE_COLUMN
    while any(name in f.columns for f in frames):
        name += "_"
    return name


def _hand_in_layer(root: Path, role: str, spec: dict[str, Any], problems: list[Hit], where: str, group: str) -> Layer | None:
    """A layer read from a list of files (several mappers' files of one kind) as one layer.

    Each file is read as if it were declared alone (its problems name it as
    ``layers.<role>.path[i]``); the rows are put one after the other, each
    with its file, as the manifest writes it, in the column ``source_file``
    (:data:`archivist.manifest.SOURCE_COLUMN`). A row is named by its own
    row (or feature) number and its file: ``row 4 of stations_anna.csv``.
    Files in another CRS than the first file's are transformed to it.
    """
    parts: list[tuple[str, Layer]] = []
    for i, rel in enumerate(mf.spec_paths(spec)):
        part = load_layer(root, role, {**spec, "path": rel}, problems, key=f"{where}.path[{i}]", group=group)
        if part is not None:
            parts.append((rel, part))
    if not parts:
        return None
    target = next((p.crs for _, p in parts if p.crs is not None), None)
    column = _source_column([p.frame for _, p in parts])
    frames, ids, index = [], [], []
    for rel, part in parts:
        frame = part.frame
        if frame.crs is not None and target is not None and not frame.crs.equals(target, ignore_axis_order=True):
            with np.errstate(invalid="ignore", over="ignore"):
                frame = frame.to_crs(target)
        elif frame.crs is None and target is not None:
            frame = frame.set_crs(target)
        frame = frame.copy()
        frame[column] = rel
        index.append(np.char.add(frame.index.astype(str).to_numpy(dtype=str), f" of {rel}").astype(object))
        frames.append(frame.reset_index(drop=True))
        ids.append(np.asarray(part.ids, dtype=object))
    combined = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), geometry=frames[0].geometry.name, crs=target)
    tables = all(p.frame.index.name == "row" for _, p in parts)
    combined.index = pd.Index(np.concatenate(index), name="row" if tables else "feature")
    first = parts[0][1]
    return Layer(role, first.path, " + ".join(rel for rel, _ in parts), combined, np.concatenate(ids), spec,
                 measured=sum(p.measured for _, p in parts), group=group, key=where,
                 files=tuple(p.path for _, p in parts), source_column=column)


def _hand_in_table(root: Path, role: str, spec: dict[str, Any], problems: list[Hit], notes: list[str]) -> Table | None:
    """A table read from a list of files as one table; see :func:`_hand_in_layer`.

    Each file is read as if declared alone (header, units row and
    quality-control rows found in each); every cell keeps its own file,
    sheet and row for the findings (:meth:`archivist.readers.TableData.cell`).
    """
    parts: list[tuple[str, Table]] = []
    for rel in mf.spec_paths(spec):
        part = load_table(root, role, {**spec, "path": rel}, problems, notes)
        if part is not None:
            parts.append((rel, part))
    if not parts:
        return None
    column = _source_column([t.frame for _, t in parts])
    frames: list[pd.DataFrame] = []
    lines: list[int] = []
    which: list[int] = []
    for k, (rel, part) in enumerate(parts):
        frame = part.frame.copy()
        frame[column] = rel
        frames.append(frame)
        lines.extend(part.data.all_lines())
        which.extend([k] * len(frame))
    first = parts[0][1]
    sheets = {t.data.sheet for _, t in parts}
    data = replace(
        first.data,
        frame=pd.concat(frames, ignore_index=True),
        file=" + ".join(t.data.file for _, t in parts),
        sheet=first.data.sheet if len(sheets) == 1 else None,
        lines=tuple(lines),
        parts=tuple(t.data for _, t in parts),
        row_part=tuple(which),
    )
    qcs = [t.qc.assign(**{column: rel}) for rel, t in parts if t.qc is not None]
    units: dict[str, str] = {}
    for _, t in parts:
        units = {**t.row_units, **units}
    return Table(role, first.path, " + ".join(t.source for _, t in parts), data, spec, row_units=units,
                 qc=pd.concat(qcs) if qcs else None, files=tuple(t.path for _, t in parts), source_column=column)


def _layer_from_table(path: Path, role: str, spec: dict[str, Any], rel: str, problems: list[Hit], where: str, group: str) -> Layer | None:
    data, hits = read_table(path, rel, spec.get("sheet"))
    problems.extend(hits)
    if data is None:
        return None
    frame = data.frame
    xf, yf = spec.get("x_field"), spec.get("y_field")
    for key, col in (("x_field", xf), ("y_field", yf)):
        if col not in frame.columns:
            problems.append(Hit(f"{where}: field '{col}' ({key}) is not in '{rel}'.", layer=role, rule="field-missing"))
            return None
    x = pd.to_numeric(frame[xf], errors="coerce").to_numpy(dtype=float)
    y = pd.to_numeric(frame[yf], errors="coerce").to_numpy(dtype=float)
    geom = shapely.points(x, y)
    geom[np.isnan(x) | np.isnan(y)] = None
    crs = None
    if spec.get("crs"):
        crs, hit = parse_crs(spec["crs"], f"{where}.crs")
        if hit:
            problems.append(hit)
    gdf = gpd.GeoDataFrame(frame.drop(columns=[xf, yf]), geometry=geom, crs=crs)
    rows = np.asarray(data.lines, dtype=np.int64) if len(data.lines) == len(gdf) else np.arange(len(gdf)) + data.header_row + 1
    gdf.index = pd.Index(rows, name="row")  # the mapper's own row numbers, blank rows counted
    return _finish_layer(role, path, rel, gdf, spec, problems, where=where, group=group)


def _finish_layer(role, path, source, frame, spec, problems, *, attributes: bool = True, where: str = "", group: str = "") -> Layer:
    """A :class:`Layer` from a read frame; fields the manifest names but the data lacks become hits.

    ``attributes`` False (a shapefile without its .dbf) reports no missing field: the cause is reported once.
    """
    where = where or f"layers.{role}"
    group = group or role
    for key in mf.REQUIRED_FIELDS.get(group, ()) if attributes else ():
        col = spec.get(key)
        if col is not None and col not in frame.columns:
            problems.append(
                Hit(
                    f"{where}: field '{col}' ({key}) is not in '{source}' (fields: {', '.join(map(str, frame.columns.drop('geometry')))}).",
                    layer=role,
                    rule="field-missing",
                )
            )
    for key, col in spec.items() if attributes else ():
        if key.endswith("_field") and key not in mf.REQUIRED_FIELDS.get(group, ()) and key not in mf.LAYER_DEFAULTS.get(group, {}):
            if col not in frame.columns and key not in ("x_field", "y_field"):
                problems.append(Hit(f"{where}: field '{col}' ({key}) is not in '{source}'.", layer=role, rule="field-missing"))
    ids = None
    id_col = spec.get("id_field")
    if id_col and id_col in frame.columns:
        ids = text_column(frame[id_col])
    if ids is None:
        ids = np.asarray(frame.index.astype(str), dtype=object)
    return Layer(role, path, source, frame, ids, spec, group=group)


def load_table(root: Path, role: str, spec: dict[str, Any], problems: list[Hit], notes: list[str] | None = None) -> Table | None:
    """Read a legend or analyses table as the manifest describes it; what was found about its layout goes to ``notes``.

    The header is the first non-empty row, the row ``header_row`` names, or
    the one row near the top that holds the table's column names (legend
    spellings, analyte names) when the first rows are notes. Analyses also
    lose their units and other column-information rows, their
    quality-control rows and sheets, and get their ids restored
    (:func:`_analyses_rows`).
    """
    from .vocab import analytes as va
    from .vocab import legend as vl

    notes = notes if notes is not None else []
    if isinstance(spec.get("path"), list):
        return _hand_in_table(root, role, spec, problems, notes)
    rel = spec["path"]
    path = _resolve(root, rel)
    if not path.exists():
        problems.append(Hit(f"tables.{role}: file '{rel}' does not exist.", layer=role, rule="layer-missing"))
        return None
    header_row = spec.get("header_row") if isinstance(spec.get("header_row"), int) else None
    test = va.analyses_header_test(spec.get("sample_field")) if role == "analyses" else vl.header_test(spec) if role == "legend" else None
    skip = va.qc_sheet if role == "analyses" and not spec.get("sheet") else None
    data, hits = read_table(path, rel, spec.get("sheet"), header_row=header_row, looks_like_header=test, skip_sheet=skip)
    problems.extend(hits)
    if data is None:
        return None
    source = f"{rel}, sheet '{data.sheet}'" if data.sheet else rel
    notes.extend(_header_notes(role, source, data))
    if skip is not None and data.sheet is not None:
        others = [n for n in data.sheets if n != data.sheet and va.qc_sheet(n)]
        if others:
            names = ", ".join(f"'{n}'" for n in others)
            notes.append(f"{rel}: sheet{'s' if len(others) > 1 else ''} {names} (quality control) not read as samples; "
                         f"the analyses are read from sheet '{data.sheet}' (name another with [tables.analyses] sheet).")
    for key, col in spec.items():
        if key.endswith("_field") and col not in data.frame.columns:
            problems.append(
                Hit(
                    f"tables.{role}: column '{col}' ({key}) is not in '{source}' (columns: {', '.join(map(str, data.frame.columns))}).",
                    layer=role,
                    rule="field-missing",
                )
            )
    if role != "analyses":
        return Table(role, path, source, data, spec)
    return _analyses_rows(Table(role, path, source, data, spec), problems, notes)


def _header_notes(role: str, source: str, data: TableData) -> list[str]:
    """What the report says about where a table's header was taken from, when it was not plainly row 1."""
    key = f"[tables.{role}] header_row"
    if data.header_how == "manifest":
        return [f"{source}: header read from row {data.header_row}, as {key} says; the rows above it are not read."]
    if data.header_how == "found":
        above = "the row above it is" if data.header_row == 2 else f"the {data.header_row - 1} rows above it are"
        return [f"{source}: header read from row {data.header_row}, found by its column names; {above} not read "
                f"(set {key} to choose another row)."]
    if data.header_candidates:
        rows = ", ".join(map(str, data.header_candidates))
        return [f"{source}: rows {rows} each look like a header, so none was chosen and row {data.header_row} was read as "
                f"the header; set {key} to the row of the header."]
    return []


def _rows_text(lines: list[int], limit: int = 10) -> str:
    shown = ", ".join(map(str, lines[:limit]))
    return shown + (f" and {len(lines) - limit} more" if len(lines) > limit else "")


def _analyses_rows(table: Table, problems: list[Hit], notes: list[str]) -> Table:
    """The analyses table with only its sample rows, and its ids restored as the manifest says.

    - Column-information rows directly under the header (a units row, a
      method row, a detection-limit row) are taken out; the units row gives
      each analyte column its unit (:func:`archivist.vocab.analytes.info_rows`).
    - Rows whose sample id matches ``qc_pattern`` (default
      :data:`archivist.vocab.analytes.QC_PATTERN`, common practice) are kept
      aside in ``table.qc``.
    - With ``id_width``, an id made only of digits gets leading zeros up to
      that width; with ``id_prefix``, that text goes before it. Only ids made
      only of digits change, never silently: the report's notes count them.
    """
    from .vocab import analytes as va

    spec, data = table.spec, table.data
    frame = data.frame
    lines = list(data.all_lines())
    sample_col = spec.get("sample_field") if spec.get("sample_field") in frame.columns else None
    found = [a.column for a in va.analytes(table)]
    labels = ([sample_col] if sample_col else []) + [str(c) for c in frame.columns[:1]]
    info = va.info_rows(frame, found, labels)
    keep = np.ones(len(frame), dtype=bool)
    keep[: info.count] = False
    if info.count:
        units = ", ".join(dict.fromkeys(info.units.values()))
        kinds = [f"units ({units})" if k == "units" and units else k for k in dict.fromkeys(info.labels)]
        what = ", ".join(kinds[:-1]) + " and " + kinds[-1] if len(kinds) > 1 else kinds[0]
        rows = _rows_text(lines[: info.count])
        notes.append(f"{table.source}: row{'s' if info.count > 1 else ''} {rows} under the header read as the {what} "
                     "of the columns, not as samples.")
    qc = np.zeros(len(frame), dtype=bool)
    if sample_col is not None:
        ids = text_column(frame[sample_col])
        pattern = spec.get("qc_pattern")
        given = isinstance(pattern, str)
        try:
            qc = va.qc_rows(ids, pattern if isinstance(pattern, str) else va.QC_PATTERN) & keep
        except re.error as exc:
            problems.append(Hit(f"tables.analyses.qc_pattern: '{pattern}' is not a regular expression ({exc}).",
                                layer="analyses", rule="manifest-invalid"))
        if qc.any():
            picked = np.flatnonzero(qc)
            examples = ", ".join(dict.fromkeys(str(ids[i]).strip() for i in picked))
            how = "as [tables.analyses] qc_pattern says" if given else (
                "by the default qc_pattern (blanks, duplicates, standards, reference materials); "
                "set [tables.analyses] qc_pattern to change it")
            notes.append(f"{table.source}: {len(picked)} quality-control row{'s' if len(picked) > 1 else ''} "
                         f"({_trim(examples)}) in row{'s' if len(picked) > 1 else ''} {_rows_text([lines[i] for i in picked])} "
                         f"not read as samples, {how}.")
    taken = keep & ~qc
    out = frame[taken].reset_index(drop=True)
    width, prefix = spec.get("id_width"), spec.get("id_prefix")
    if sample_col is not None and (isinstance(width, int) or isinstance(prefix, str)):
        ids = text_column(out[sample_col])
        stripped = np.array([i.strip() for i in ids], dtype=object)
        digits = np.array([i.isdigit() and i.isascii() for i in stripped], dtype=bool)
        fixed = stripped.copy()
        if isinstance(width, int):
            fixed[digits] = [i.zfill(width) for i in stripped[digits]]
        if isinstance(prefix, str):
            fixed[digits] = [prefix + i for i in fixed[digits]]
        changed = digits & (fixed != ids)
        if changed.any():
            first = int(np.flatnonzero(changed)[0])
            out[sample_col] = np.where(changed, fixed, out[sample_col].to_numpy(dtype=object))
            setting = " and ".join(k for k, v in (("id_width", width), ("id_prefix", prefix)) if v is not None)
            notes.append(f"{table.source}: {int(changed.sum())} sample id{'s' if changed.sum() > 1 else ''} made only of digits "
                         f"restored as [tables.analyses] {setting} say{'s' if ' and ' not in setting else ''} "
                         f"(e.g. '{ids[first]}' read as '{fixed[first]}').")
    if taken.all() and out.equals(frame):
        return table
    table.data = replace(data, frame=out, lines=tuple(int(x) for x in np.asarray(lines)[taken]))
    table.row_units = info.units
    if qc.any():
        table.qc = frame[qc].set_axis(pd.Index(np.asarray(lines)[qc], name="row"))
    return table


def _trim(text: str, limit: int = 80) -> str:
    return text if len(text) <= limit else text[: limit - 1].rstrip(", ") + "…"


def load_lines(
    root: Path, layers: dict[str, Any], crs: pyproj.CRS | None, problems: list[Hit], notes: list[str], progress: Progress
) -> Layer | None:
    """The manifest's line layers as the one ``lines`` layer the checks read.

    One ``[layers.lines]`` with a kind field is read as it is. Several line
    layers (``[layers.contacts]``, ``[layers.faults]``, ``[layers.frame]``,
    ``[[layers.lines]]``...) are read one by one and combined: each line's
    kind is its layer's field or fixed ``kind``, its id is ``<layer>:<id>``
    (``faults:3``), and the layer keeps its parts, so CRS and metadata checks
    see each file and findings name the mapper's own layer and feature
    (:meth:`MapProject.own_names`). A part in another CRS than the map's is
    reprojected to the map CRS for the combined layer (crs-mismatch still
    reports the part).
    """
    declared = mf.line_sources(layers)
    if not declared:
        return None
    if len(declared) == 1 and declared[0].key == "layers.lines" and "kind" not in declared[0].spec:
        with progress.step(f"reading {_label(declared[0].spec)}"):
            return load_layer(root, "lines", declared[0].spec, problems)
    taken = {r for r in LAYER_ROLES if r != "lines" and r in layers}
    parts: list[Layer] = []
    for src in declared:
        if src.name in taken:
            problems.append(
                Hit(f"{src.key}: the name '{src.name}' is taken by another layer; give this one its own name = \"...\".",
                    layer="manifest", rule="manifest-invalid")
            )
            continue
        taken.add(src.name)
        with progress.step(f"reading {_label(src.spec)}"):
            part = load_layer(root, src.name, src.spec, problems, key=src.key, group="lines")
        if part is not None:
            part.key = src.key
            parts.append(part)
    if not parts:
        return None
    return combine_lines(parts, crs, notes)


def _kind_texts(part: Layer) -> np.ndarray:
    """Each line's kind as the part gives it: its kind field, empty cells filled by its fixed ``kind``."""
    fixed = part.spec.get("kind")
    values = part.text("kind_field")
    if values is None:
        if fixed is None:
            return np.full(len(part.frame), None, dtype=object)  # the missing field is reported as field-missing
        return np.full(len(part.frame), str(fixed), dtype=object)
    if fixed is not None:
        values = np.where(pd.Series(values, dtype=object).eq("").to_numpy(), str(fixed), values)
    return np.asarray(values, dtype=object)


def combine_lines(parts: list[Layer], crs: pyproj.CRS | None, notes: list[str]) -> Layer:
    """One ``lines`` layer from the mapper's line layers ``parts`` (see :func:`load_lines`)."""
    target = crs or next((p.crs for p in parts if p.crs is not None), None)
    named = {str(p.spec["kind_field"]) for p in parts if p.spec.get("kind_field")}
    kind_col = named.pop() if len(named) == 1 else "kind"
    certain = {str(p.spec["certainty_field"]) for p in parts if p.field("certainty_field")}
    cert_col = (certain.pop() if len(certain) == 1 else "certainty") if certain else None
    frames, ids, kinds = [], [], []
    certs: list[np.ndarray] = []
    origin: dict[str, tuple[str, str]] = {}
    for part in parts:
        frame = part.frame
        if part.crs is not None and target is not None and not part.crs.equals(target, ignore_axis_order=True):
            with np.errstate(invalid="ignore", over="ignore"):
                frame = frame.to_crs(target)
            notes.append(f"Line layer {part.role} ({part.source}) is in {crs_label(part.crs)}: reprojected to "
                         f"{crs_label(target)} to be checked with the other line layers.")
        attrs = pd.DataFrame(frame.drop(columns=frame.geometry.name))
        attrs.index = pd.RangeIndex(len(attrs))
        frames.append((attrs, np.asarray(frame.geometry.array, dtype=object)))
        own = np.asarray(part.ids, dtype=object)
        combined = np.char.add(f"{part.role}:", own.astype(str)).astype(object)
        origin.update(zip(combined.tolist(), ((part.role, str(i)) for i in own)))
        ids.append(combined)
        kinds.append(_kind_texts(part))
        cert = part.text("certainty_field")
        certs.append(cert if cert is not None else np.full(len(own), None, dtype=object))
    table = pd.concat([a for a, _ in frames], ignore_index=True) if frames else pd.DataFrame()
    table[kind_col] = np.concatenate(kinds)
    if cert_col is not None:
        table[cert_col] = np.concatenate(certs)
    geoms = np.concatenate([g for _, g in frames])
    gdf = gpd.GeoDataFrame(table, geometry=geoms, crs=target)
    spec: dict[str, Any] = {"kind_field": kind_col}
    if cert_col is not None:
        spec["certainty_field"] = cert_col
    return Layer(
        "lines",
        parts[0].path,
        " + ".join(p.source for p in parts),
        gdf,
        np.concatenate(ids),
        spec,
        measured=sum(p.measured for p in parts),
        parts=tuple(parts),
        origin=origin,
    )


def _label(spec: dict[str, Any]) -> str:
    """A file (and layer or sheet) as the mapper wrote it in the manifest; the files of a list joined by " + "."""
    inner = spec.get("layer") or spec.get("sheet")
    path = " + ".join(mf.spec_paths(spec)) or str(spec.get("path"))
    return f"{path}:{inner}" if inner else path


@collector_paused()
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
        if role == "lines":
            lines = load_lines(root, manifest["layers"], crs, problems, notes, progress)
            if lines is not None:
                layers[role] = lines
        elif mf.spec_paths(spec):
            with progress.step(f"reading {_label(spec)}"):
                layer = load_layer(root, role, spec, problems)
            if layer is not None:
                layers[role] = layer
    tables: dict[str, Table] = {}
    for role in TABLE_ROLES:
        spec = manifest["tables"].get(role)
        if mf.spec_paths(spec):
            with progress.step(f"reading {_label(spec)}"):
                table = load_table(root, role, spec, problems, notes)
            if table is not None:
                tables[role] = table
    media = {}
    if isinstance(manifest.get("files"), dict) and manifest["files"]:
        from .photos import load_media

        with progress.step("listing photos and scans"):
            media = load_media(root, manifest, problems)
    files = sorted({f for lay in layers.values() for p in (lay.parts or (lay,)) for f in p.paths}
                   | {f for t in tables.values() for f in t.paths})
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
        media=media,
    )
