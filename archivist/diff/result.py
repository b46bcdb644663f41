"""What ``diff`` returns: one :class:`Change` per changed feature, gathered in a :class:`DiffReport`.

JSON shape: ``schemas/diff.schema.json``.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely

from .._version import __version__
from ..project import location_digits

LAYER_ORDER = ("map", "legend", "units", "lines", "extent", "samples", "structures", "analyses")


@dataclass
class Change:
    """One changed feature (or unit, legend entry, analysis) between OLD and NEW.

    ``features`` are the ids in NEW (in OLD for a removal); ``old_features`` and
    ``new_features`` give both sides. ``fields`` maps each changed attribute to
    ``{"old": text, "new": text}``. Areas are in m², ``distance`` in map units
    (metres in a projected CRS; metres too when the old map is in
    longitude/latitude, compared in its local metric frame). ``x``/``y`` are a point of the change in the
    old map's CRS; ``geometry`` is the changed area (or the feature), in the
    same CRS.
    """

    change: str
    layer: str
    features: tuple[str, ...]
    message: str
    x: float | None = None
    y: float | None = None
    old_features: tuple[str, ...] = ()
    new_features: tuple[str, ...] = ()
    fields: dict[str, dict[str, str]] = field(default_factory=dict)
    area_gained: dict[str, float] = field(default_factory=dict)
    area_lost: dict[str, float] = field(default_factory=dict)
    distance: float | None = None
    polygons: tuple[str, ...] = ()
    geometry: Any = None
    pieces: list[tuple[Any, str, str]] = field(default_factory=list)  # (area geometry, old unit, new unit)
    old_geometry: Any = None
    new_geometry: Any = None
    old_unit: str = field(default="", repr=False)  # a recoded polygon's codes, for the unit-level changes
    new_unit: str = field(default="", repr=False)
    generated: bool = field(default=False, repr=False)  # an added line marked as drawn from the polygons (field "generated")

    def to_dict(self, digits: int = 3) -> dict[str, Any]:
        """The change as the JSON object of ``schemas/diff.schema.json``.

        Locations and WKT keep ``digits`` decimals (the old map CRS's:
        :func:`archivist.project.location_digits`, 8 in degrees, 3 in
        metres); areas and distances are rounded to 0.001 m² and 1 mm.
        """
        wkt = None
        if self.geometry is not None and not shapely.is_empty(self.geometry):
            wkt = shapely.to_wkt(self.geometry, rounding_precision=digits, trim=True)
        return {
            "change": self.change,
            "layer": self.layer,
            "features": list(self.features),
            "message": self.message,
            "x": _r(self.x, digits),
            "y": _r(self.y, digits),
            "old_features": list(self.old_features),
            "new_features": list(self.new_features),
            "fields": self.fields,
            "area_gained": {k: _r(v) for k, v in sorted(self.area_gained.items())},
            "area_lost": {k: _r(v) for k, v in sorted(self.area_lost.items())},
            "distance": _r(self.distance),
            "polygons": list(self.polygons),
            "wkt": wkt,
        }


def _r(v: float | None, digits: int = 3) -> float | None:
    if v is None or not np.isfinite(v):
        return None
    return float(round(float(v), digits))


@dataclass(frozen=True)
class DiffReport:
    """Every change from OLD to NEW, ordered by layer, kind and place."""

    old: str
    new: str
    crs: str | None
    changes: tuple[Change, ...]
    notes: tuple[str, ...] = ()
    tool: str = "archivist"
    version: str = __version__
    crs_object: Any = field(default=None, compare=False, repr=False)  # the old map's pyproj CRS, for the GeoPackage

    @property
    def counts(self) -> dict[str, int]:
        """How many changes of each kind, by kind name."""
        out: dict[str, int] = defaultdict(int)
        for c in self.changes:
            out[c.change] += 1
        return dict(sorted(out.items()))

    def to_dict(self) -> dict[str, Any]:
        """The report as the JSON document of ``schemas/diff.schema.json``."""
        return {
            "tool": self.tool,
            "version": self.version,
            "old": self.old,
            "new": self.new,
            "crs": self.crs,
            "notes": list(self.notes),
            "counts": self.counts,
            "changes": [c.to_dict(location_digits(self.crs_object)) for c in self.changes],
        }
