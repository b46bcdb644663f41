"""The map's data in open formats: one GeoPackage, GeoJSON per layer, CSV per layer and table.

Every layer is written in the map CRS to ``map.gpkg`` (the editable master)
with its feature ids kept, and as RFC 7946 GeoJSON in WGS 84 (GDAL's GeoJSON
driver with ``RFC7946=YES`` reprojects and writes lon/lat order, 7 decimals).
Every attribute is kept, with the mapper's field names. Identifiers stay text.
M (measure) values are not carried: pyogrio reads geometries without them
(and writes none from a GeoDataFrame), and RFC 7946 GeoJSON has no M
(section 3.1.1); a layer that had them gets a note saying so, and the input
file in ``source/`` keeps them byte for byte.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import shapely

from ..analysis.stations import station_field
from ..errors import ArchivistError
from ..project import LAYER_ROLES, TABLE_ROLES, MapProject
from ..vocab.analytes import analytes, is_analyte_header
from ..vocab.legend import column as legend_column
from ..vocab.legend import columns as legend_columns
from ..vocab import structures as structure_vocab
from ..vocab.statements import measures_statement
from .determinism import gdal_date
from .tables import TextTable, column_text, text_table

LAYER_TITLES = {
    "units": "Map units",
    "lines": "Contacts, faults and other map lines",
    "contacts": "Contacts",
    "faults": "Faults",
    "frame": "Map frame",
    "extent": "Map extent",
    "samples": "Sample locations",
    "structures": "Structural measurements",
    "stations": "Field stations and observations",
    "legend": "Legend",
    "analyses": "Analyses",
    "references": "References",
}
LAYER_DESCRIPTIONS = {
    "units": "Polygons of the mapped units; together they tile the map.",
    "lines": "Geological lines: contacts, faults, the map boundary.",
    "contacts": "Geological contacts between map units.",
    "faults": "Faults.",
    "frame": "The lines of the map frame (map boundary).",
    "extent": "The map's outer boundary.",
    "samples": "Where each sample was taken, with its attributes.",
    "structures": "Orientation measurements at stations.",
    "stations": "Where the mappers stopped and observed: one point per station, with the observation made there.",
    "legend": "One row per map unit: code, name, description, age.",
    "analyses": "Laboratory analyses, one row per analysed sample.",
    "references": "The works that analyses compiled from publications cite: one row per work, with its key, DOI and citation.",
}
FIELD_DESCRIPTIONS = {
    ("units", "unit_field"): "Map unit code; every code is a unit of the legend.",
    ("lines", "kind_field"): "Kind of line (contact, fault, map boundary...).",
    ("lines", "certainty_field"): "How certain the line's position is (certain, approximate, inferred, concealed...).",
    ("samples", "id_field"): "Sample identifier, unique in the map; the analyses refer to it.",
    ("samples", "unit_field"): "Map unit the sample was taken from; a unit of the legend.",
    ("structures", "kind_field"): "Kind of measurement (bedding, foliation, joint, lineation...).",
    ("stations", "id_field"): "Station identifier, unique in the map; samples and measurements refer to it.",
    ("stations", "date_field"): "Date of the visit.",
    ("stations", "observer_field"): "Who made the observation.",
    ("stations", "observation_field"): "The observation, as written in the field.",
    ("stations", "unit_field"): "Map unit recorded at the station; a unit of the legend.",
    ("samples", "station_field"): "The station the sample was taken at; a station of the stations layer.",
    ("structures", "station_field"): "The station the measurement was made at; a station of the stations layer.",
    ("structures", "dip_field"): "Dip, in degrees below the horizontal.",
    ("legend", "unit_field"): "Map unit code (the key the layers refer to).",
    ("analyses", "sample_field"): "Sample identifier; a sample of the samples layer.",
}


def layer_title(role: str) -> str:
    """A layer's title in the package; a line layer of the mapper's own name (``[[layers.lines]]``) is titled by it."""
    return LAYER_TITLES.get(role) or f"Map lines: {role}"


def layer_description(role: str) -> str:
    return LAYER_DESCRIPTIONS.get(role) or f"Geological lines of the project's layer '{role}'."


AZIMUTH = {
    "dip-direction": "Dip direction, in degrees clockwise from north.",
    "right-hand-rule": "Strike, in degrees clockwise from north; the dip is to the right looking along the strike (right-hand rule).",
}
LEGEND_COLUMNS = {  # key of archivist.vocab.legend -> (description, unit)
    "unit": (FIELD_DESCRIPTIONS[("legend", "unit_field")], None),
    "name": ("Name of the unit.", None),
    "description": ("Description of the unit.", None),
    "age": ("Age, as named on the International Chronostratigraphic Chart.", None),
    "min_age_ma": ("Youngest age of the unit.", "Ma"),
    "max_age_ma": ("Oldest age of the unit.", "Ma"),
    "order": ("Position in the legend, 1 at the top.", None),
    "colour": ("Display colour, #RRGGBB.", None),
    "lithology": ("Main lithology.", None),
    "kind": ("Kind of unit (sedimentary, volcanic, intrusive, metamorphic, superficial...).", None),
}


GEOMETRY_NAMES = {
    0: "Point", 1: "LineString", 2: "LinearRing", 3: "Polygon", 4: "MultiPoint",
    5: "MultiLineString", 6: "MultiPolygon", 7: "GeometryCollection",
}


@dataclass
class PreparedLayer:
    """A layer ready to write: in the map CRS, with a ``fid`` column first."""

    role: str
    frame: gpd.GeoDataFrame
    source: str
    note: str | None
    geometry_type: str
    conventions: str = ""  # structures: the orientation conventions and north reference, for the README
    group: str = ""  # the role whose fields the layer has ("lines" for a layer of contacts); default its role

    def __post_init__(self) -> None:
        self.group = self.group or self.role

    @property
    def count(self) -> int:
        return len(self.frame)

    @property
    def bounds(self) -> tuple[float, float, float, float] | None:
        geoms = np.asarray(self.frame.geometry.array, dtype=object)
        present = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
        if not present.any():
            return None
        b = shapely.total_bounds(geoms[present])
        return (float(b[0]), float(b[1]), float(b[2]), float(b[3]))


def _fids(frame: gpd.GeoDataFrame) -> np.ndarray:
    """The feature ids to keep: the file's own when they are whole, unique numbers, else 1..n."""
    idx = frame.index
    if idx.name == "fid" and pd.api.types.is_integer_dtype(idx.dtype) and idx.is_unique and (len(idx) == 0 or idx.min() >= 0):
        return idx.to_numpy(dtype=np.int64)
    return np.arange(1, len(frame) + 1, dtype=np.int64)


def _require_finite(geoms: np.ndarray, source: str, target: str) -> None:
    """Stop with one line naming the layer when some coordinates could not be transformed."""
    coords, idx = shapely.get_coordinates(geoms, return_index=True)
    bad = ~np.isfinite(coords).all(axis=1)
    if bad.any():
        n = len(np.unique(idx[bad]))
        raise ArchivistError(
            f"{source}: {n} feature(s) cannot be transformed to {target}; their coordinates do not fit the layer's CRS "
            "(see the crs findings of 'archivist check')"
        )


def _map_crs(project: MapProject) -> pyproj.CRS:
    """The declared map CRS (``read_deposit`` refuses a project without one before any layer is prepared)."""
    if project.crs is None:
        raise ArchivistError("map.crs is missing or not understood; a package needs the map CRS")
    return project.crs


def prepare_layers(project: MapProject) -> list[PreparedLayer]:
    """The project's layers in role order, each in the map CRS with a ``fid`` column."""
    out = []
    target = _map_crs(project)
    sources = project.sources
    for role in [r for g in LAYER_ROLES for r, lay in sources.items() if lay.group == g]:
        layer = sources[role]
        frame = layer.frame
        note = None
        if frame.crs is None:
            frame = frame.set_crs(target)
            note = f"{role}: the layer declared no CRS; written in the map CRS as declared in the manifest."
        elif not frame.crs.equals(target):
            note = f"{role}: reprojected from {frame.crs.name} to the map CRS."
            with np.errstate(invalid="ignore"):
                frame = frame.to_crs(target)
            _require_finite(np.asarray(frame.geometry.array, dtype=object), layer.source, f"the map CRS ({target.name})")
        else:
            frame = frame.set_crs(target, allow_override=True)
        if layer.measured:
            # pyogrio reads and writes no M values: say what map.gpkg and the GeoJSON lack, and where the values are.
            measures = measures_statement(layer) + "."
            note = f"{note} {measures}" if note else measures
        geo_name = frame.geometry.name
        attrs = [c for c in frame.columns if c != geo_name]
        data = {"fid": _fids(frame)}
        for c in attrs:
            data[c] = frame[c].to_numpy() if not isinstance(frame[c].dtype, pd.api.extensions.ExtensionDtype) else frame[c].array
        prepared = gpd.GeoDataFrame(data, geometry=np.asarray(frame.geometry.array, dtype=object), crs=target)
        types = sorted(set(shapely.get_type_id(prepared.geometry.array).tolist()) - {-1})
        gtype = ", ".join(GEOMETRY_NAMES[t] for t in types) or "none"
        conventions = structure_vocab.convention_statement(layer) if role == "structures" else ""
        out.append(PreparedLayer(role, prepared, layer.source, note, gtype, conventions, group=layer.group))
    return out


def write_geopackage(layers: list[PreparedLayer], path: Path, created: dt.datetime) -> None:
    """All layers into one GeoPackage, in role order, stamped with ``created`` (byte-stable)."""
    with gdal_date(created):
        for pl in layers:
            pyogrio.write_dataframe(
                pl.frame,
                path,
                layer=pl.role,
                driver="GPKG",
                layer_options={"IDENTIFIER": layer_title(pl.role), "DESCRIPTION": layer_description(pl.role)},
            )


def _plain(value):
    """A distinct cell value as JSON can hold it (numpy scalars as Python ones, others as text)."""
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value if isinstance(value, (str, int, float, bool)) or value is None else str(value)


def _json_column(series: pd.Series) -> np.ndarray:
    """A column as JSON values (text), one per row, without a Python loop over the rows.

    Numbers come from numpy (integers; floats in the shortest form that reads
    back the same value, NaN and infinities as null); text, dates and other
    values are JSON-encoded once per distinct value and spread by code.
    """
    dtype = series.dtype
    n = len(series)
    if pd.api.types.is_bool_dtype(dtype) and not series.isna().any():
        return np.where(series.to_numpy(dtype=bool), "true", "false").astype(object)
    if pd.api.types.is_integer_dtype(dtype):
        present = series.notna().to_numpy()
        text = series.astype("Int64").astype(str).to_numpy(dtype=object)
        return np.where(present, text, "null").astype(object)
    if pd.api.types.is_float_dtype(dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        return np.where(np.isfinite(values), values.astype(str), "null").astype(object)
    if pd.api.types.is_datetime64_any_dtype(dtype):
        text, _, _ = column_text(series)
        series = text.where(text != "", None)
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    encoded = np.array(
        [json.dumps(_plain(v), ensure_ascii=False) for v in uniques] + ["null"],
        dtype=object,
    )
    return encoded[codes] if n else np.array([], dtype=object)


def _features_json(frame: gpd.GeoDataFrame, geometry_json: np.ndarray) -> np.ndarray:
    """``{"type":"Feature","id":..,"properties":{..},"geometry":..}`` per row, assembled column by column."""
    props = frame.drop(columns=frame.geometry.name)
    out = np.full(len(frame), '{"type":"Feature","id":', dtype=object) + props["fid"].astype("int64").astype(str).to_numpy(dtype=object)
    out = out + ',"properties":{'
    for i, col in enumerate(props.columns):
        key = json.dumps(str(col), ensure_ascii=False) + ":"
        out = out + ("," if i else "") + key + _json_column(props[col])
    return out + '},"geometry":' + geometry_json + "}"


def write_geojson(pl: PreparedLayer, path: Path) -> None:
    """One layer as RFC 7946 GeoJSON: WGS 84 longitude/latitude, 7 decimals, exterior rings counterclockwise.

    The ``fid`` is the feature's ``id`` and a property. Built with whole-array
    operations (pyproj, shapely, pandas); a layer that crosses the
    antimeridian, or whose attributes pandas cannot write as JSON, goes
    through GDAL's GeoJSON driver with ``RFC7946=YES``, which splits such
    geometries.
    """
    to_wgs84 = pyproj.Transformer.from_crs(pl.frame.crs, "EPSG:4326", always_xy=True)

    def project_and_round(xy: np.ndarray) -> np.ndarray:
        out = np.array(xy, dtype=float)  # heights, if any, stay as they are
        lon, lat = to_wgs84.transform(xy[:, 0], xy[:, 1])
        out[:, 0] = np.round(lon, 7)
        out[:, 1] = np.round(lat, 7)
        return out

    geoms = np.asarray(pl.frame.geometry.array, dtype=object)
    rounded = shapely.transform(geoms, project_and_round, include_z=None if shapely.has_z(geoms).any() else False)
    _require_finite(rounded, pl.source, "WGS 84 for the GeoJSON copy")
    present = ~(shapely.is_missing(rounded) | shapely.is_empty(rounded))
    bounds = shapely.bounds(rounded)
    crosses = bool(np.any((bounds[present, 2] - bounds[present, 0]) > 180.0)) if present.any() else False
    if crosses or not pl.frame.columns.is_unique:
        pyogrio.write_dataframe(pl.frame, path, layer=pl.role, driver="GeoJSON", layer_options={"RFC7946": "YES"})
        return
    polygons = np.isin(shapely.get_type_id(rounded), [3, 6])  # Polygon, MultiPolygon
    if polygons.any():
        rounded = rounded.copy()
        rounded[polygons] = shapely.orient_polygons(rounded[polygons], exterior_cw=False)
    geojson = shapely.to_geojson(rounded).astype(object)
    geojson[shapely.is_missing(rounded)] = "null"
    features = _features_json(pl.frame, geojson)
    head: dict[str, Any] = {"type": "FeatureCollection", "name": pl.role}
    if present.any():
        b = shapely.total_bounds(rounded[present])
        head["bbox"] = [round(float(v), 7) for v in b]
    opening = json.dumps(head, ensure_ascii=False, separators=(",", ":"))[:-1] + ',"features":[\n'
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(opening)
        fh.write(",\n".join(features.tolist()))
        fh.write("\n]}\n")


def _axis_unit(crs: pyproj.CRS) -> str | None:
    info = crs.axis_info
    return info[0].unit_name if info else None


def layer_table(project: MapProject, pl: PreparedLayer) -> TextTable:
    """The attributes of a layer as a table (no geometry; points get their coordinates)."""
    role, group = pl.role, pl.group
    spec = project.sources[role].spec
    frame = pd.DataFrame(pl.frame.drop(columns=pl.frame.geometry.name))
    descriptions = {"fid": f"Feature id in map.gpkg (layer '{role}') and geojson/{role}.geojson."}
    units: dict[str, str] = {}
    identifiers = set()
    for key, col in spec.items():
        if not key.endswith("_field") or not isinstance(col, str):
            continue
        if (group, key) in FIELD_DESCRIPTIONS:
            descriptions[col] = FIELD_DESCRIPTIONS[(group, key)]
        if key in ("id_field", "unit_field"):
            identifiers.add(col)
        if role == "structures" and key == "azimuth_field":
            azimuth = AZIMUTH.get(spec.get("convention", "dip-direction"), AZIMUTH["dip-direction"])
            descriptions[col] = f"{azimuth} {structure_vocab.north_statement(spec)}"
            units[col] = "degree"
        if role == "structures" and key == "dip_field":
            units[col] = "degree"
        if role == "structures" and key == "rake_field":
            descriptions[col] = structure_vocab.RAKE_TEXT[0].upper() + structure_vocab.RAKE_TEXT[1:]
            units[col] = "degree"
        if role == "structures" and key == "overturned_field":
            descriptions[col] = "Overturned bedding: yes where the bed's top faces down (its dip stays 0-90)."
    hand_in = project.sources[role].source_column
    if hand_in and hand_in in frame.columns:
        descriptions[hand_in] = "The file this row was handed in in (the layer was read from several files, one per mapper)."
    for key in ("station_field",) if group in ("samples", "structures") else ():
        column = station_field(project.sources[role])
        if column is not None:
            descriptions.setdefault(column, FIELD_DESCRIPTIONS[(group, key)])
            identifiers.add(column)
    if role in ("samples", "structures", "stations") and pl.geometry_type == "Point":
        xname = spec.get("x_field") or "x"
        yname = spec.get("y_field") or "y"
        if xname in frame.columns or yname in frame.columns:
            xname, yname = "map_x", "map_y"
        geoms = np.asarray(pl.frame.geometry.array, dtype=object)
        frame[xname] = shapely.get_x(geoms)
        frame[yname] = shapely.get_y(geoms)
        crs = _map_crs(project)
        descriptions[xname] = f"Easting of the point in the map CRS ({crs.name})."
        descriptions[yname] = f"Northing of the point in the map CRS ({crs.name})."
        unit = _axis_unit(crs)
        if unit:
            units[xname] = units[yname] = unit
    # Assay columns of a sample layer ("Au_ppb", "Cu (ppm)") hold laboratory readings as the analyses table does.
    analyte_columns = set()
    if group == "samples":
        taken = identifiers | {str(c) for k, c in spec.items() if k.endswith("_field") and isinstance(c, str)} | set(descriptions)
        analyte_columns = {str(c) for c in frame.columns if str(c) not in taken and is_analyte_header(str(c))}
    nd_means, nd_declared = _nd_setting(project)
    table = text_table(
        role, frame, identifiers=identifiers, descriptions=descriptions, units=units,
        analyte_columns=analyte_columns, nd_means=nd_means, nd_declared=nd_declared,
    )
    table.title = layer_title(role) + " (attributes)"
    table.description = layer_description(role) + " Attributes only; the geometries are in map.gpkg and the GeoJSON file."
    if pl.conventions:
        table.description += " " + pl.conventions
    if table.readings:
        table.description += " " + table.readings_statement()
    if group == "lines" and spec.get("kind"):
        what = "Its lines are" if not spec.get("kind_field") else f"Lines with an empty '{spec['kind_field']}' are"
        table.description += f" {what} of kind '{spec['kind']}', as declared in archivist.toml."
    return table


def project_table(project: MapProject, role: str) -> TextTable:
    """A legend or analyses table as text, with units read from the headers for analyses."""
    t = project.tables[role]
    spec = t.spec
    identifiers = set()
    descriptions: dict[str, str] = {}
    units: dict[str, str] = {}
    for key, col in spec.items() if role != "legend" else ():
        if key.endswith("_field") and isinstance(col, str):
            identifiers.add(col)
            if (role, key) in FIELD_DESCRIPTIONS:
                descriptions[col] = FIELD_DESCRIPTIONS[(role, key)]
    if role == "legend":  # its columns as the checks find them (archivist.vocab.legend)
        for key, col in legend_columns(t).items():
            if col is None:
                continue
            desc, unit = LEGEND_COLUMNS[key]
            descriptions.setdefault(col, desc)
            if unit:
                units[col] = unit
            if key == "unit":
                identifiers.add(col)
    if role == "references":  # the key and DOI columns as the checks find them stay text
        from ..vocab.literature import column as reference_column

        identifiers |= {c for c in (reference_column(t, "key"), reference_column(t, "doi")) if c is not None}
    analyte_columns: set[str] = set()
    if role == "analyses":  # units from a units row or [tables.analyses] unit, as the checks read them
        found = analytes(t)
        units.update({a.column: a.unit_text for a in found if a.source in ("units row", "manifest") and a.unit_text})
        units.update({str(k): str(v) for k, v in (spec.get("units") or {}).items()})
        analyte_columns = {a.column for a in found}
    nd_means, nd_declared = _nd_setting(project)
    table = text_table(
        role, t.frame, identifiers=identifiers, descriptions=descriptions, units=units, header_units=role == "analyses",
        analyte_columns=analyte_columns, nd_means=nd_means, nd_declared=nd_declared,
    )
    table.title = LAYER_TITLES[role]
    table.description = f"{LAYER_DESCRIPTIONS[role]} From {t.source}."
    if table.readings:
        table.description += " " + table.readings_statement()
    return table


def _nd_setting(project: MapProject) -> tuple[str, bool]:
    """What "n.d." means in the laboratory's cells (``[tables.analyses] nd_means``), and whether the manifest said it."""
    spec = project.tables["analyses"].spec if "analyses" in project.tables else {}
    declared = spec.get("nd_means")
    return (str(declared), True) if isinstance(declared, str) and declared else ("not-detected", False)


def all_tables(project: MapProject, layers: list[PreparedLayer]) -> list[TextTable]:
    """Layer attribute tables and project tables, with the keys that link them."""
    tables = {pl.role: layer_table(project, pl) for pl in layers}
    for role in TABLE_ROLES:
        if role in project.tables:
            tables[role] = project_table(project, role)
    for role, table in tables.items():
        if role in project.sources:
            table.primary_key = ["fid"]
    legend = tables.get("legend")
    legend_unit = legend_column(project.tables["legend"], "unit") if "legend" in project.tables else None
    if legend is not None and legend_unit is not None and legend.has(legend_unit):
        legend.primary_key = [legend_unit]
    samples = tables.get("samples")
    sample_id = project.layers["samples"].spec.get("id_field") if "samples" in project.layers else None
    if samples is not None and sample_id is not None and samples.has(sample_id):
        samples.primary_key = [sample_id]
    stations = tables.get("stations")
    station_id = project.layers["stations"].spec.get("id_field") if "stations" in project.layers else None
    if stations is not None and station_id is not None and stations.has(station_id):
        stations.primary_key = [station_id]
        for role in ("samples", "structures"):
            linked = tables.get(role)
            column = station_field(project.layers[role]) if role in project.layers else None
            if linked is not None and column is not None and linked.has(column):
                linked.foreign_keys.append({"fields": [column], "reference": {"resource": "stations", "fields": [station_id]}})
    for role in ("units", "samples", "stations"):
        linked = tables.get(role)
        unit = project.layers[role].spec.get("unit_field") if role in project.layers else None
        if linked is not None and legend is not None and linked.has(unit) and legend.has(legend_unit):
            linked.foreign_keys.append({"fields": [unit], "reference": {"resource": "legend", "fields": [legend_unit]}})
    analyses = tables.get("analyses")
    sample_field = project.tables["analyses"].spec.get("sample_field") if "analyses" in project.tables else None
    if analyses is not None and samples is not None and analyses.has(sample_field) and samples.has(sample_id):
        analyses.foreign_keys.append({"fields": [sample_field], "reference": {"resource": "samples", "fields": [sample_id]}})
    from .literature import link

    link(project, tables)  # compiled analyses: the references table and its keys
    order = [pl.role for pl in layers] + list(TABLE_ROLES)
    order += [r for r in tables if r not in order]  # tables the packager adds (archivist.package.literature)
    return [tables[r] for r in order if r in tables]
