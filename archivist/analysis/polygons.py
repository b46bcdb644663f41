"""The unit polygons as the topology and linework checks see them."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING, Iterable, SupportsIndex

import numpy as np
import shapely

from .arrays import (
    COLLECTION,
    MULTIPOLYGON,
    POLYGON,
    collections_as,
    polygonal_parts,
    text_values,
)
from .messages import feature_name, join_words, metres_per_unit

if TYPE_CHECKING:
    from ..project import MapProject


def polygonal(geoms: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    """Polygonal geometries fit for coverage work; None where a feature has no area.

    Invalid polygons are repaired with GEOS ``make_valid`` (method
    'structure', which keeps the area the rings enclose) and non-polygonal
    parts are dropped: the metadata family reports those features themselves.
    ``valid`` is the layer's GEOS validity when already known (``Layer.valid``).
    """
    g = np.array(geoms, dtype=object, copy=True)
    t = shapely.get_type_id(g)
    g[~np.isin(t, (POLYGON, MULTIPOLYGON, COLLECTION))] = None
    g[shapely.is_empty(g)] = None
    t = shapely.get_type_id(g)
    poly = np.isin(t, (POLYGON, MULTIPOLYGON))
    bad = np.flatnonzero(poly & ~(shapely.is_valid(g) if valid is None else valid))
    if len(bad):
        g[bad] = shapely.make_valid(g[bad], method="structure", keep_collapsed=False)
    collections_as(g, polygonal_parts, shapely.multipolygons)
    g[shapely.is_empty(g)] = None
    return g


@dataclass(frozen=True)
class Units:
    """The unit polygons kept for the checks: polygonal, with coordinates a map can have."""

    rows: np.ndarray  # layer row of each polygon kept
    geoms: np.ndarray  # its polygonal geometry
    ids: np.ndarray  # feature ids as text
    codes: np.ndarray | None  # unit codes as text ('' when empty); None when the layer has no unit field
    source: str
    numbers: np.ndarray | None = None  # feature numbers as text, when ``ids`` are the mapper's own (id_field)

    def __len__(self) -> int:
        return len(self.geoms)

    @cached_property
    def tree(self) -> shapely.STRtree:
        """Spatial index of the polygons (built on first use)."""
        return shapely.STRtree(self.geoms)

    def code(self, k: SupportsIndex) -> str:
        if self.codes is None:
            return "?"
        return str(self.codes[k] or "no code")

    def label(self, k: SupportsIndex, *, code: bool = True) -> str:
        """``polygon 1 (Lst)``; with the mapper's own ids ``polygon P-7 (feature 1, Lst)``."""
        return "polygon " + self._name(k, code)

    def labels(self, ks: Iterable[SupportsIndex], *, code: bool = True) -> str:
        """``polygons 1 (Lst) and 2 (Sst)`` (``polygon 1 (Lst)`` for one)."""
        names = [self._name(k, code) for k in ks]
        return f"polygon{'' if len(names) == 1 else 's'} {join_words(names)}"

    def _name(self, k: SupportsIndex, code: bool) -> str:
        extra = (self.code(k),) if code else ()
        if self.numbers is None:
            return feature_name("", self.ids[k], None, *extra).strip()
        return feature_name("", self.numbers[k], self.ids[k], *extra).strip()


def read_units(project: MapProject) -> Units:
    """The project's unit polygons; features far outside any map are left to coordinates-implausible."""
    layer = project.layers["units"]
    geoms = polygonal(layer.geometry, layer.valid)
    rows = np.flatnonzero(~shapely.is_missing(geoms) & ~layer.far[0])
    codes = None
    values = text_values(layer, "unit_field")
    if values is not None:
        k, texts = values
        codes = np.array([t.strip() for t in texts], dtype=object)[k[rows]]
    numbers = None
    if layer.field("id_field") is not None:  # ids are the mapper's own: the feature number is named second
        numbers = np.asarray(layer.frame.index.astype(str), dtype=object)[rows]
    return Units(rows, geoms[rows], np.asarray(layer.ids, dtype=object)[rows], codes, layer.source, numbers)


def sliver_thresholds(project: MapProject) -> tuple[float, float]:
    """(smallest area, smallest width) in map units, from ``[checks]`` at map scale."""
    cfg = project.config
    m = metres_per_unit(project)
    ground_mm = cfg.scale / 1000.0  # metres of ground per millimetre of map
    return cfg.sliver_area_mm2 * ground_mm * ground_mm / (m * m), cfg.sliver_width_mm * ground_mm / m
