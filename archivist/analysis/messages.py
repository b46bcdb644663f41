"""How finding messages write sizes and lists, and the ground metres behind one map unit."""

from __future__ import annotations

from typing import TYPE_CHECKING, Iterable, Sequence

if TYPE_CHECKING:
    import numpy as np

    from ..project import MapProject

# "Longer (wider) than the tolerance" allows for floating-point noise: a stretch
# of exactly the tolerance, computed as 9.9 - 9.8, is not longer than 0.1.
ABOVE = 1.0 + 1e-6


def num(value: float) -> str:
    """A size as printed in messages: two decimals."""
    return f"{value:.2f}"


def join_words(words: Iterable[str]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def metres_per_unit(project: MapProject) -> float:
    """Ground metres per map unit of the project's CRS (1 for metres; near-equator degrees for geographic CRSs)."""
    crs = project.crs
    if crs is None and "units" in project.layers:
        crs = project.layers["units"].crs
    if crs is None:
        return 1.0
    if crs.is_geographic:
        return 111_320.0
    factor = crs.axis_info[0].unit_conversion_factor if crs.axis_info else None
    return float(factor) if factor else 1.0


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
