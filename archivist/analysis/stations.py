"""Field stations and what names them: the station of each sample and measurement, ground distances, files handed in together.

A sample or a structural measurement names its station in ``station_field``
(default: a field called ``station`` or ``station_id`` when there is one).
Distances between a point and its station are ground metres: in a
projected CRS the grid distance times the metres per map unit (grid, not
ellipsoidal: within a UTM zone the two differ by the scale factor, under
0.1 %, from memory); in a geographic CRS the geodesic on the CRS's own
ellipsoid (pyproj ``Geod.inv``), taken between the points in longitude and
latitude (a map checked in its local frame is carried back first).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import shapely

from .. import manifest as mf
from .messages import metres_per_unit

if TYPE_CHECKING:
    from ..project import Layer, MapProject, Table

LINKED_ROLES = ("samples", "structures")


def station_field(layer: Layer) -> str | None:
    """The column naming each row's station: ``station_field`` when the data has it, else ``station`` or ``station_id``."""
    named = layer.spec.get("station_field")
    if isinstance(named, str):
        return named if named in layer.frame.columns else None
    return next((c for c in mf.STATION_FIELDS if c in layer.frame.columns), None)


@dataclass(frozen=True)
class Links:
    """The stations named by one layer's rows.

    ``named`` is each row's station as text (stripped; "" when none),
    ``station`` the row of that station in the stations layer (-1 when it
    names none or one that does not exist), ``unknown`` the rows naming a
    station that does not exist.
    """

    role: str
    column: str
    named: np.ndarray
    station: np.ndarray
    unknown: np.ndarray


def station_links(project: MapProject, role: str) -> Links | None:
    """How the rows of layer ``role`` name their stations; None without stations, without the layer or without a station column."""
    stations, layer = project.layers.get("stations"), project.layers.get(role)
    if stations is None or layer is None:
        return None
    column = station_field(layer)
    if column is None:
        return None
    from ..readers import text_column

    named = np.array([t.strip() for t in text_column(layer.frame[column])], dtype=object)
    ids = np.array([str(t).strip() for t in stations.ids], dtype=object)
    first: dict[str, int] = {}
    for i, sid in enumerate(ids):  # the first row of each id (a repeated id is station-duplicate-id's finding)
        if sid and sid not in first:
            first[sid] = i
    where = pd.Series(named).map(first)
    station = where.fillna(-1).to_numpy(dtype=np.int64)
    unknown = np.flatnonzero((named != "") & (station < 0))
    return Links(role, column, named, station, unknown)


def ground_distances(project: MapProject, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Ground distance in metres between the points ``a[k]`` and ``b[k]`` (coordinates in the project's CRS or local frame).

    See the module docstring for how; NaN where either point is missing or empty.
    """
    a = np.asarray(a, dtype=object)
    b = np.asarray(b, dtype=object)
    out = np.full(len(a), np.nan)
    ok = ~(shapely.is_missing(a) | shapely.is_empty(a) | shapely.is_missing(b) | shapely.is_empty(b))
    if not ok.any():
        return out
    pa, pb = shapely.centroid(a[ok]), shapely.centroid(b[ok])
    frame = getattr(project, "local", None)
    crs = frame.map_crs if frame is not None else project.crs
    if frame is not None or (crs is not None and crs.is_geographic):
        if frame is not None:
            pa, pb = frame.to_map(pa), frame.to_map(pb)
        out[ok] = geodesic(crs, shapely.get_x(pa), shapely.get_y(pa), shapely.get_x(pb), shapely.get_y(pb))
        return out
    out[ok] = shapely.distance(pa, pb) * metres_per_unit(project)
    return out


def geodesic(crs: Any, lon0: np.ndarray, lat0: np.ndarray, lon1: np.ndarray, lat1: np.ndarray) -> np.ndarray:
    """Geodesic distances in metres on ``crs``'s ellipsoid (pyproj ``Geod.inv``), WGS 84 when it names none."""
    import pyproj

    ellipsoid = getattr(crs, "ellipsoid", None)
    geod = pyproj.Geod(a=ellipsoid.semi_major_metre, b=ellipsoid.semi_minor_metre) if ellipsoid else pyproj.Geod(ellps="WGS84")
    _, _, dist = geod.inv(lon0, lat0, lon1, lat1)
    return np.asarray(dist, dtype=float)


# ---------------------------------------------------------------- files handed in together

def row_place(layer: Layer, i: int) -> str:
    """Where row ``i`` of a layer is in the mapper's files: ``stations_anna.csv row 4``, ``map.gpkg:stations feature 7``."""
    index = layer.frame.index
    word = "row" if index.name == "row" else "feature"
    files = layer.row_files
    if files is not None:
        own = str(index[i]).split(" of ", 1)[0]
        return f"{files[i]} {word} {own}"
    return f"{layer.source} {word} {index[i]}"


def table_place(table: Table, i: int) -> str:
    """Where data row ``i`` of a table is: ``analyses_ben.xlsx, sheet 'majors', row 12``."""
    data = table.data
    src = data.parts[data.row_part[i]] if data.parts else data
    sheet = f", sheet '{src.sheet}'" if src.sheet is not None else ""
    return f"{src.file}{sheet} row {data.line(i)}"


def _row_keys(frame: pd.DataFrame, skip: str, geometry: np.ndarray | None) -> pd.Series:
    """One text per row holding every cell but ``skip`` (and the geometry as WKB), for finding identical rows."""
    from ..readers import text_column

    geo = frame.geometry.name if hasattr(frame, "geometry") and geometry is not None else None
    cols = [c for c in frame.columns if c != skip and c != geo]

    parts = [pd.Series(text_column(frame[c]), index=frame.index, dtype=object) for c in cols]
    if geometry is not None:
        wkb = shapely.to_wkb(geometry, hex=True)
        parts.append(pd.Series(np.where(pd.isna(wkb), "", wkb), index=frame.index, dtype=object))
    if not parts:
        return pd.Series([""] * len(frame), index=frame.index, dtype=object)
    out = parts[0].astype(str)
    for p in parts[1:]:
        out = out + "\x1f" + p.astype(str)
    return out.reset_index(drop=True)


def identical_rows(frame: pd.DataFrame, source_column: str, geometry: np.ndarray | None = None) -> np.ndarray:
    """A group number per row: rows equal in every cell but the source column (and in geometry) share one; -1 for a row alone."""
    keys = _row_keys(frame, source_column, geometry)
    codes, _ = pd.factorize(keys)
    counts = np.bincount(codes, minlength=codes.max() + 1 if len(codes) else 0)
    return np.where(counts[codes] > 1, codes, -1) if len(codes) else codes


def repeated_across_files(frame: pd.DataFrame, source_column: str, geometry: np.ndarray | None = None) -> list[np.ndarray]:
    """Groups of rows identical in every cell (and geometry) that come from two or more of the files handed in."""
    groups = identical_rows(frame, source_column, geometry)
    files = frame[source_column].to_numpy(dtype=object)
    out = []
    for g in np.unique(groups[groups >= 0]):
        rows = np.flatnonzero(groups == g)
        if len(set(files[rows])) > 1:
            out.append(rows)
    return out
