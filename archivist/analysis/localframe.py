"""A local metric frame for maps in longitude/latitude: where geometric tests are judged in metres.

Degrees are not a length. At 60°N a degree of longitude is about 55.8 km on
the ground and a degree of latitude about 111.4 km (WGS 84, pyproj's ``Geod``),
so a tolerance, a distance, a width or a sliver threshold turned into degrees
with one factor is judged twice as strictly east-west as north-south; and
GEOS (buffers, ``coverage_is_valid(gap_width=...)``, distances) knows one
isotropic tolerance only, so no pair of tolerances "per direction" could be
handed to it.

So a map whose CRS is geographic is checked in a **local frame**, in metres:

* **Coordinates** go through an affine map, ``x = (lon - lon0) * kx`` and
  ``y = (lat - lat0) * ky``, where ``kx`` and ``ky`` are the ground metres per
  degree of longitude and of latitude at the map's central latitude, from the
  radii of curvature of the CRS's own ellipsoid (``kx = N cos(lat0) pi/180``,
  ``ky = M pi/180``; EPSG Guidance Note 7-2, from memory; checked against
  ``Geod.inv`` in the tests). The map is thus true to scale in every direction
  at its central latitude, a gap at 45° as well as one east-west. An affine
  map keeps straight segments straight, so the map's topology (vertices on
  edges, shared edges, a unit edge along a parallel) is exactly the topology
  of the data as drawn in degrees: no gap or misfit appears or disappears by
  the change of frame. Its price is a scale error east-west that grows with
  the distance from the central latitude, about ``tan(lat0) * dlat`` (dlat in
  radians): 0.27 % 10 km north or south of the centre at 60°N, 0.7 % at 25 km.
  Tolerance decisions (is this gap thinner than the tolerance?) carry that
  error.
* **Measures** (the areas, lengths and widths printed in findings) are taken
  from the same geometries in a conformal oblique stereographic projection
  (EPSG method 9809) centred on the map, on the CRS's own datum (pyproj/PROJ),
  whose scale is 1 at the centre and grows as about (d / 2R)² with the
  distance d from it: 1.5e-5 at 50 km, 6e-4 at 300 km (areas twice that). See
  :func:`archivist.analysis.messages.ground`.

The engine runs the geometric families (topology, linework, samples,
structures, legend) on the project in this frame, with the tolerance in
metres, and carries every finding's geometry and location back to the map CRS
(the affine map inverts exactly, to floating-point rounding). The families
that judge the files, the manifest, the CRS and the coordinates as written
(metadata, crs, archive) run on the project as read. ``diff`` compares two
maps in the old map's frame.

Not covered: a map that spans the antimeridian is centred by its longitude box
(the frame's centre may then lie half a world away); a map hundreds of km
north to south gets tolerance decisions off by several per cent at its
northern and southern edges (its measures stay true).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pyproj
import shapely

from ..farcoords import far_out

if TYPE_CHECKING:
    from ..model import Hit
    from ..project import MapProject


def map_crs(project: MapProject) -> pyproj.CRS | None:
    """The CRS the map's coordinates are read in: ``map.crs``, else the units layer's own CRS."""
    crs = project.crs
    if crs is None and "units" in project.layers:
        crs = project.layers["units"].crs
    return crs


def local_crs(crs: pyproj.CRS, lon: float, lat: float) -> pyproj.CRS:
    """The projection measures are taken in: an oblique stereographic projection (EPSG method 9809, scale 1) centred at ``lon``, ``lat`` on ``crs``'s datum."""
    from pyproj.crs import CoordinateOperation, ProjectedCRS

    def param(name: str, code: int, value: float, unit: str) -> dict[str, Any]:
        return {"name": name, "value": value, "unit": unit, "id": {"authority": "EPSG", "code": code}}

    conversion = CoordinateOperation.from_json_dict({
        "type": "Conversion",
        "name": "local oblique stereographic",
        "method": {"name": "Oblique Stereographic", "id": {"authority": "EPSG", "code": 9809}},
        "parameters": [
            param("Latitude of natural origin", 8801, float(lat), "degree"),
            param("Longitude of natural origin", 8802, float(lon), "degree"),
            param("Scale factor at natural origin", 8805, 1.0, "unity"),
            param("False easting", 8806, 0.0, "metre"),
            param("False northing", 8807, 0.0, "metre"),
        ],
    })
    return ProjectedCRS(conversion, name="archivist local frame", geodetic_crs=crs.geodetic_crs)


def centre_of(crs: pyproj.CRS, arrays: list[np.ndarray]) -> tuple[float, float]:
    """The centre of the lon/lat box of the first array with usable coordinates; (0, 0) when none has any."""
    for geoms in arrays:
        g = np.atleast_1d(np.asarray(geoms, dtype=object))
        if not len(g):
            continue
        g = g[~shapely.is_missing(g) & ~far_out(g, crs)[0]]
        xy = shapely.get_coordinates(g)
        xy = xy[np.abs(xy[:, 1]) <= 90.0] if len(xy) else xy
        if len(xy):
            lon = (xy[:, 0].min() + xy[:, 0].max()) / 2
            lat = (xy[:, 1].min() + xy[:, 1].max()) / 2
            return (lon + 180.0) % 360.0 - 180.0, float(lat)
    return 0.0, 0.0


def metres_per_degree(crs: pyproj.CRS, lat: float) -> tuple[float, float]:
    """Ground metres per degree of longitude and of latitude at ``lat`` on ``crs``'s ellipsoid.

    From the radii of curvature: ``N = a / w`` (prime vertical) and
    ``M = a (1 - e²) / w³`` (meridian), ``w = sqrt(1 - e² sin² lat)``.
    """
    ell = crs.ellipsoid
    a = float(ell.semi_major_metre) if ell is not None else 6_378_137.0
    inv_f = float(ell.inverse_flattening) if ell is not None else 298.257223563
    f = 1.0 / inv_f if inv_f else 0.0
    e2 = f * (2.0 - f)
    phi = np.radians(lat)
    w = np.sqrt(1.0 - e2 * np.sin(phi) ** 2)
    n, m = a / w, a * (1.0 - e2) / w**3
    return float(n * np.cos(phi) * np.pi / 180.0), float(m * np.pi / 180.0)


def _engineering_crs(lon: float, lat: float) -> pyproj.CRS:
    """The frame as a CRS: Cartesian, east and north axes in metres, origin at the map centre."""
    return pyproj.CRS.from_json_dict({
        "type": "EngineeringCRS",
        "name": f"archivist local frame at {lon:.6f} {lat:.6f}",
        "datum": {"name": "map centre"},
        "coordinate_system": {"subtype": "Cartesian", "axis": [
            {"name": "Easting", "abbreviation": "E", "direction": "east", "unit": "metre"},
            {"name": "Northing", "abbreviation": "N", "direction": "north", "unit": "metre"},
        ]},
    })


@dataclass(frozen=True)
class LocalFrame:
    """The map CRS (geographic), its local metric frame, and the maps between them."""

    map_crs: pyproj.CRS
    crs: pyproj.CRS  # the frame as a CRS (engineering, metres)
    lon: float
    lat: float
    kx: float  # metres per degree of longitude at ``lat``
    ky: float  # metres per degree of latitude at ``lat``
    measure: pyproj.Transformer  # map CRS to the conformal projection measures are taken in

    @classmethod
    def around(cls, crs: pyproj.CRS, *arrays: np.ndarray) -> LocalFrame:
        """The frame of ``crs`` centred on the first of ``arrays`` (geometries in ``crs``) that has coordinates."""
        lon, lat = centre_of(crs, list(arrays))
        kx, ky = metres_per_degree(crs, lat)
        conformal = pyproj.Transformer.from_crs(crs, local_crs(crs, lon, lat), always_xy=True)
        return cls(crs, _engineering_crs(lon, lat), lon, lat, kx, ky, conformal)

    def _forward(self, xy: np.ndarray) -> np.ndarray:
        return np.column_stack([(xy[:, 0] - self.lon) * self.kx, (xy[:, 1] - self.lat) * self.ky])

    def _back(self, xy: np.ndarray) -> np.ndarray:
        return np.column_stack([xy[:, 0] / self.kx + self.lon, xy[:, 1] / self.ky + self.lat])

    def to_local(self, geoms: Any) -> Any:
        """Geometries (a geometry or an array) from the map CRS into the frame (metres)."""
        return shapely.transform(geoms, self._forward)

    def to_map(self, geoms: Any) -> Any:
        """Geometries from the frame back into the map CRS."""
        return shapely.transform(geoms, self._back)

    def point_to_map(self, x: float | None, y: float | None) -> tuple[float | None, float | None]:
        """A point of the frame in the map CRS (None stays None)."""
        if x is None or y is None:
            return x, y
        return float(x) / self.kx + self.lon, float(y) / self.ky + self.lat

    def hit_to_map(self, hit: Hit) -> Hit:
        """A hit found in the frame, with its geometry and location in the map CRS."""
        geometry = hit.geometry
        if geometry is not None:
            geometry = self.to_map(geometry)
        x, y = self.point_to_map(hit.x, hit.y)
        return replace(hit, geometry=geometry, x=x, y=y)

    def transform(self, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Frame coordinates to the conformal projection measures are taken in (the ``Ground`` interface)."""
        lon, lat = np.asarray(x, dtype=float) / self.kx + self.lon, np.asarray(y, dtype=float) / self.ky + self.lat
        return self.measure.transform(lon, lat, errcheck=False)

    @property
    def note(self) -> str:
        return (f"The map CRS is in longitude/latitude: tolerances, distances, widths and areas were judged in metres "
                f"on its ellipsoid, around {abs(self.lon):.4f}°{'E' if self.lon >= 0 else 'W'} "
                f"{abs(self.lat):.4f}°{'N' if self.lat >= 0 else 'S'}; locations are reported in the map CRS.")


def frame_for(project: MapProject) -> LocalFrame | None:
    """The local frame of a project whose map CRS is geographic; None for any other project."""
    crs = map_crs(project)
    if crs is None or not crs.is_geographic:
        return None
    order = ["units", "extent", "lines", "samples", "structures"]
    arrays = [project.layers[r].geometry for r in order if r in project.layers]
    arrays += [lay.geometry for r, lay in project.layers.items() if r not in order]
    return LocalFrame.around(crs, *arrays)


def in_frame(project: MapProject, frame: LocalFrame) -> MapProject:
    """A copy of ``project`` whose layers hold coordinates in ``frame`` (metres) and whose CRS is the frame's.

    Every layer's coordinates are read as in the map CRS, as the checks
    assume (``crs-mismatch`` reports a layer declared otherwise). The copy
    shares the tables, the settings (the tolerance is in metres for a map
    in longitude/latitude) and the problems list with ``project``.
    """
    import geopandas as gpd

    layers = {}
    for role, layer in project.layers.items():
        f = layer.frame
        geoms = gpd.GeoSeries(frame.to_local(layer.geometry), index=f.index, crs=frame.crs).rename(f.geometry.name)
        layers[role] = replace(layer, frame=f.set_geometry(geoms))
    return replace(project, crs=frame.crs, layers=layers, local=frame)
