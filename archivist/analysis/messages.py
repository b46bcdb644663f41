"""How finding messages write sizes and lists, and the ground metres behind one map unit."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Iterable, Sequence

if TYPE_CHECKING:
    import numpy as np

    from ..project import MapProject

# "Longer (wider) than the tolerance" allows for floating-point noise: a stretch
# of exactly the tolerance, computed as 9.9 - 9.8, is not longer than 0.1.
ABOVE = 1.0 + 1e-6


def num(value: float) -> str:
    """A size as printed in messages: two decimals, or three significant digits below 0.1.

    A small measure keeps its digits (``0.0512``, ``1e-06``) instead of
    printing as ``0.05`` or ``0.00``; exactly zero prints as ``0.00``.
    """
    v = float(value)
    if v == 0.0 or not (abs(v) < 0.0995):
        return f"{v:.2f}"
    return f"{v:.3g}"


def plural(n: int, word: str, many: str | None = None) -> str:
    """``1 notice``, ``2 notices``, ``0 notices``; ``many`` for an irregular plural (``analysis``/``analyses``)."""
    return f"{n} {word if n == 1 else (many or word + 's')}"


def verb(n: int, one: str, many: str) -> str:
    """The verb agreeing with a count: ``verb(1, "has", "have")`` is ``has``."""
    return one if n == 1 else many


def join_words(words: Iterable[str]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def metres_per_unit(project: MapProject) -> float:
    """Ground metres per map unit of the project's projected CRS (1 for metres, 0.3048 for feet...).

    A geographic CRS has no such factor (a degree of longitude is half a degree
    of latitude on the ground at 60°N): the engine checks such a map in a
    local metric frame (:mod:`.localframe`), so the rules never see one;
    asked for one, this raises ``ValueError``.
    """
    crs = project.crs
    if crs is None and "units" in project.layers:
        crs = project.layers["units"].crs
    if crs is None:
        return 1.0
    if crs.is_geographic:
        raise ValueError(f"{crs.name} is geographic: no one factor turns its degrees into metres; measure in a local frame")
    factor = crs.axis_info[0].unit_conversion_factor if crs.axis_info else None
    return float(factor) if factor else 1.0


class Ground:
    """Ground measures (metres, square metres) of geometries in the project's CRS.

    In a projected CRS a map unit is a fixed number of metres (``factor``).
    In a geographic CRS degrees are not a length: geometries are projected to
    a conformal oblique stereographic projection centred on the map, on the
    CRS's own ellipsoid (:func:`.localframe.local_crs`), where lengths, widths
    and areas are within a few parts per million over a map tens of km
    across (the scale error grows with the square of the distance from the
    centre). The engine runs the geometric rules on a map in longitude/latitude
    in its local frame (:mod:`.localframe`); their measures go from that frame
    to the same projection.
    """

    def __init__(self, factor: float, to_local: Any = None) -> None:
        self.factor = factor
        self._to_local = to_local

    @property
    def geographic(self) -> bool:
        return self._to_local is not None

    def local(self, geoms: Any) -> Any:
        """The geometries with metre coordinates (geographic CRS) or unchanged (projected)."""
        if self._to_local is None:
            return geoms
        import numpy as np
        import shapely

        tr = self._to_local

        def fwd(xy: np.ndarray) -> np.ndarray:
            x, y = tr.transform(xy[:, 0], xy[:, 1])
            return np.column_stack([x, y])

        return shapely.transform(geoms, fwd)

    def areas(self, geoms: Any) -> Any:
        """Area in m² of each geometry."""
        import shapely

        f = self.factor
        return shapely.area(self.local(geoms)) * (f * f)

    def lengths(self, geoms: Any) -> Any:
        """Length in m of each geometry."""
        import shapely

        return shapely.length(self.local(geoms)) * self.factor

    def widths(self, geoms: Any, in_map_units: Any) -> Any:
        """Width in m (largest inscribed circle) of each polygon; ``in_map_units`` its width already known in map units."""
        import numpy as np

        if self._to_local is None:
            return np.asarray(in_map_units, dtype=float) * self.factor
        from .arrays import widths

        g = np.atleast_1d(np.asarray(self.local(geoms), dtype=object))
        return widths(g, 0.0)


def ground(project: MapProject, near: Any = None) -> Ground:
    """How to measure the project's geometries on the ground; ``near`` (geometries) places the local projection."""
    from .localframe import LocalFrame, map_crs

    if getattr(project, "local", None) is not None:  # the engine's working copy of a map in longitude/latitude
        return Ground(1.0, project.local)
    crs = map_crs(project)
    if crs is None or not crs.is_geographic:
        return Ground(metres_per_unit(project))
    if near is None and "units" in project.layers:
        near = project.layers["units"].geometry
    return Ground(1.0, LocalFrame.around(crs, *([] if near is None else [near])).measure)


def lon_words(v: float) -> str:
    """A longitude as 12.50°E (wrapped to -180..180)."""
    v = (v + 180.0) % 360.0 - 180.0
    return f"{abs(v):.2f}°{'E' if v >= 0 else 'W'}"


def lat_words(v: float) -> str:
    """A latitude as 47.10°N."""
    return f"{abs(v):.2f}°{'N' if v >= 0 else 'S'}"


def box_words(b: Sequence[float] | np.ndarray) -> str:
    """A lon/lat box (west, south, east, north) in words."""
    return f"{lon_words(b[0])} to {lon_words(b[2])}, {lat_words(b[1])} to {lat_words(b[3])}"


def distance_words(metres: float) -> str:
    """A ground distance in km from 1 km up, else in m."""
    return f"{metres / 1000:.1f} km" if metres >= 1000 else f"{metres:.0f} m"


# ---------------------------------------------------------------- names and directions in messages
# Kept apart from the ground measures above: these only word what a rule found.

COMPASS = ("north", "north-east", "east", "south-east", "south", "south-west", "west", "north-west")


def compass(azimuth: float) -> str:
    """The nearest of the eight compass points to ``azimuth`` (degrees clockwise from north).

    Each point covers 45°, centred on it: 22.5° is already north-east.
    """
    a = float(azimuth) % 360.0
    return COMPASS[int((a + 22.5) // 45.0) % 8]


def grid_azimuth(dx: float, dy: float) -> float:
    """Azimuth in degrees clockwise from grid north (+y) of the displacement (``dx`` east, ``dy`` north)."""
    import math

    return math.degrees(math.atan2(dx, dy)) % 360.0


def offset(crs: Any, x0: float, y0: float, x1: float, y1: float, factor: float = 1.0) -> tuple[float, str]:
    """Ground distance (m) and compass direction of (x1, y1) seen from (x0, y0).

    In a geographic CRS both come from the geodesic between the two points
    on the CRS's own ellipsoid (pyproj ``Geod.inv``): true north. In a
    projected CRS the distance is the map distance times ``factor`` (metres
    per map unit) and the direction is from grid north, which departs from
    true north by the meridian convergence (under 3° within a UTM zone
    below 60° latitude; from memory), much less than the 22.5° either side
    of a compass point.
    """
    import math

    if crs is not None and getattr(crs, "is_geographic", False):
        import pyproj

        ellipsoid = crs.ellipsoid
        geod = pyproj.Geod(a=ellipsoid.semi_major_metre, b=ellipsoid.semi_minor_metre) if ellipsoid else pyproj.Geod(ellps="WGS84")
        az, _, dist = geod.inv(x0, y0, x1, y1)
        return float(dist), compass(az)
    dx, dy = x1 - x0, y1 - y0
    return math.hypot(dx, dy) * factor, compass(grid_azimuth(dx, dy))


def feature_name(noun: str, number: object, own: object = None, *details: str, number_word: str = "feature") -> str:
    """How a message names one feature: the mapper's own id first, the feature number second.

    ``feature_name("sample", 12, "KV-023")`` is ``sample KV-023 (feature 12)``;
    ``feature_name("polygon", 1, None, "Lst")`` is ``polygon 1 (Lst)``;
    ``feature_name("polygon", 1, "P-7", "Lst")`` is ``polygon P-7 (feature 1, Lst)``.
    Without an own id (or when it is the feature number), the number names it.
    ``number_word`` is ``row`` for a table's row number (``sample KV-023 (row 14)``).
    """
    own_text = "" if own is None else str(own).strip()
    inside = [f"{number_word} {number}"] if own_text and own_text != str(number) else []
    inside += [d for d in details if d]
    name = own_text or str(number)
    return f"{noun} {name}" + (f" ({', '.join(inside)})" if inside else "")


def layer_feature(layer: Any, i: int, noun: str, *details: str) -> str:
    """:func:`feature_name` of row ``i`` of a loaded layer: its ``id_field`` value first when the manifest names one.

    The number is the file's feature id, or the row number of a coordinate table.
    """
    index = layer.frame.index
    own = layer.ids[i] if layer.field("id_field") is not None else None
    word = "row" if index.name == "row" else "feature"
    return feature_name(noun, index[i], own, *details, number_word=word)


def capital(text: str) -> str:
    """``text`` with its first letter in capitals (a name opening a sentence)."""
    return text[:1].upper() + text[1:]
