"""What a repair works on and what it reports: :class:`RepairState`, :class:`RepairSettings`, :class:`Change`, :class:`Left`.

A repair is a function ``(state, settings) -> (changes, left)`` registered
with :func:`archivist.repair.registry.repair`. It edits the working copies
held by the :class:`RepairState` in place (never the project's own frames)
and returns one :class:`Change` per change it made and one :class:`Left` per
defect it saw and deliberately left for the geologist.

Feature identity: every working frame carries the column :data:`FEATURE_ID`
(the feature's id as text, as in findings: the ``id_field`` value, else the
file's feature id; for the combined lines, the combined id such as
``faults:3`` when several line layers are declared). A repair that creates a
feature takes a fresh id from :meth:`RepairState.new_id`; a repair that
merges features keeps the id of the feature that absorbs the others and
lists all of them in ``features_before``. Line frames also carry
:data:`SOURCE_LAYER` (the mapper's own line layer each line is written back
to, ``lines``, ``faults``...).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Callable, TypeVar, cast

if TYPE_CHECKING:
    import geopandas as gpd

    from ..analysis.halfedges import EdgeBasis
    from ..project import CheckConfig, Layer, MapProject
    from ..vocab.ages import AgeSpan

T = TypeVar("T")

FEATURE_ID = "_repair_id"  # column of every working frame: the feature id as text
SOURCE_LAYER = "_repair_layer"  # column of the line frame: the mapper's own line layer of each line
GENERATED_FIELD = "generated"  # field written on lines a repair creates (true), false on the others when the field is added

OVERLAP_RULES = ("longest-border", "larger", "younger", "older")


@dataclass(frozen=True)
class Change:
    """One change a repair made to the working copy.

    ``features_before`` are the ids of the features the change read (a
    merge lists every feature merged, the survivor first), ``features_after``
    the ids they have afterwards (empty when a feature is removed, a fresh id
    for a created one). ``units`` are the unit codes involved, in the same
    order as ``features_before`` where there is one per feature.
    ``area_moved`` is the area (m², map units squared) that changed hands,
    0 for lines; ``max_shift`` the largest distance any vertex moved (map
    units; the Hausdorff distance between before and after where vertices are
    added or removed). ``before``/``after`` are the changed area or line
    before and after (None when there is none, e.g. ``before`` of a created
    line).
    """

    repair: str
    layer: str
    features_before: tuple[str, ...]
    features_after: tuple[str, ...]
    units: tuple[str, ...]
    area_moved: float
    max_shift: float
    before: Any = None  # shapely geometry or None
    after: Any = None  # shapely geometry or None
    note: str = ""


@dataclass(frozen=True)
class Left:
    """A defect seen and deliberately left as it is: only the geologist can decide it.

    ``reason`` is one sentence saying why (too wide, too large, two labels...).
    """

    repair: str
    layer: str
    features: tuple[str, ...]
    reason: str
    geometry: Any = None  # shapely geometry or None
    measure: float = 0.0  # its size: m² for areas, m for lengths


@dataclass(frozen=True)
class RepairSettings:
    """Thresholds of one run, in map units (metres in a projected CRS), read from ``[checks]`` and ``[repair]``.

    ``tolerance``: the snapping distance, ``[checks] tolerance`` (no vertex
    moves further except where a polygon is merged or dissolved).
    ``gap_width``: gaps no wider than this are filled; the width at which
    ``check`` reports a thin gap as a misfit rather than a gap, i.e. the
    tolerance, unless ``[repair] gap_width_mm`` sets it at map scale.
    ``overlap``: who gets an overlap (``[repair] overlap``).
    ``overlap_by_lines``: a contact or fault drawn along one of an overlap's
    two edges, and not along the other, decides who gets it before that rule
    (``[repair] overlap_by_lines``, default true).
    ``overlap_max_area``: overlaps larger than this (m²) are left
    (``[repair] overlap_max_area_mm2`` at map scale).
    ``sliver_area``/``sliver_width``: the sliver thresholds of ``[checks]``
    at map scale, as ``check`` uses them.
    ``generated_certainty``: the certainty written on generated contact
    lines (``[repair] generated_certainty``).
    """

    tolerance: float
    gap_width: float
    overlap: str = "longest-border"
    overlap_max_area: float = 0.0
    sliver_area: float = 0.0
    sliver_width: float = 0.0
    generated_certainty: str = "inferred"
    build_polygons: bool = False
    overlap_by_lines: bool = True

    def record(self) -> dict[str, Any]:
        """The settings as plain values, for the change log and the provenance record."""
        return {
            "tolerance": self.tolerance,
            "gap_width": self.gap_width,
            "overlap": self.overlap,
            "overlap_max_area": self.overlap_max_area,
            "sliver_area": self.sliver_area,
            "sliver_width": self.sliver_width,
            "generated_certainty": self.generated_certainty,
            "build_polygons": self.build_polygons,
            "overlap_by_lines": self.overlap_by_lines,
        }


def _edge_basis() -> "EdgeBasis":
    from ..analysis.halfedges import EdgeBasis

    return EdgeBasis()


@dataclass
class RepairState:
    """The working copies a run edits, and what repairs need to know about the project.

    ``units``/``lines`` are copies of the project's layers (``None`` when
    the project has none) with the columns :data:`FEATURE_ID` (and
    :data:`SOURCE_LAYER` on lines); ``points`` the point layers by role
    (samples, structures), never changed by the polygon and line repairs but
    read by ``build-polygons`` (label points are a units-role point layer,
    ``points["labels"]`` when declared). ``unit_field``/``kind_field``/
    ``certainty_field`` are the column names the manifest gives (None when the
    layer has no such column). ``ages`` maps a unit code to its age span read
    from the legend (codes without a readable age are absent). ``extent`` is
    the declared map extent (one polygon), or None.
    """

    project: MapProject
    config: CheckConfig
    units: gpd.GeoDataFrame | None = None
    lines: gpd.GeoDataFrame | None = None
    points: dict[str, gpd.GeoDataFrame] = field(default_factory=dict)
    unit_field: str | None = None
    kind_field: str | None = None
    certainty_field: str | None = None
    ages: dict[str, AgeSpan] = field(default_factory=dict)
    extent: Any = None  # shapely polygon or None
    _counter: dict[str, int] = field(default_factory=dict)
    # analyses of the working units, each kept with the units frame it was computed from (a repair that changes
    # the units puts a new frame in place, so a later repair recomputes what it needs; the line repairs share one)
    analyses: dict[str, tuple[Any, Any]] = field(default_factory=dict)
    # the overlaps resolve-overlaps saw and left (ids of the two polygons, the piece, and whether it was left for
    # the geologist: larger than a repair may give away, or one polygon wholly inside the other, rather than a
    # cut GEOS failed to make); None when it did not run
    overlaps_left: list[tuple[str, str, Any, bool]] | None = None
    # the last layer each repair's view of the working copy was given, by role: the next one takes over its
    # per-feature answers (GEOS validity, far coordinates) for the geometries no repair replaced since
    built: dict[str, "Layer"] = field(default_factory=dict)
    # the check before the repairs placed every layer with the map as it is (no CRS moved, no axes swapped): the
    # working copies, whose vertices move within the tolerance, are placed the same way without asking again
    aligned: bool = False
    # the half-edges of the working units last built, lent to the next build (only the polygons replaced since
    # are taken apart again)
    edge_basis: "EdgeBasis" = field(default_factory=_edge_basis)

    def carry(self, role: str, layer: "Layer") -> "Layer":
        """``layer``, a view of the working copy of ``role``, with the per-feature answers of the last view (and of
        the project's own layer, which the check before the repairs asked) for the same geometries; kept as the last."""
        for prev in (self.built.get(role), self.project.layers.get(role)):
            if prev is not None and prev is not layer:
                layer.known_from(prev)
        self.built[role] = layer
        return layer

    def analysis(self, key: str, compute: Callable[[], T]) -> T:
        """``compute()`` once for the current working units; the same value until a repair replaces them."""
        hit = self.analyses.get(key)
        if hit is not None and hit[0] is self.units:
            return cast(T, hit[1])
        value = compute()
        self.analyses[key] = (self.units, value)
        return value

    @property
    def tolerance(self) -> float:
        return float(self.config.tolerance)

    def new_id(self, layer: str) -> str:
        """A fresh feature id for ``layer`` ("units" or "lines"): one past the largest id that is a number (1 when none is),
        so never one a feature has: an id that reads as that number would be the largest."""
        frame = self.units if layer == "units" else self.lines
        if layer not in self._counter:
            top = 0
            if frame is not None and len(frame):
                import numpy as np

                nums = id_numbers(frame[FEATURE_ID].tolist())
                nums = nums[np.isfinite(nums)]
                top = int(nums.max()) if len(nums) else 0
            self._counter[layer] = top
        self._counter[layer] += 1
        return str(self._counter[layer])


def id_numbers(ids: Any) -> Any:
    """The number each feature id ends in (the text after its last colon, as ``str.rsplit(":", 1)[-1]`` gives it),
    as a numpy array: whole numbers as int64 when every id has one (read by numpy), else floats, NaN where the
    text is not a number (pandas ``to_numeric``)."""
    import numpy as np
    import pandas as pd

    texts = [str(v) for v in ids]
    tails = [t.rpartition(":")[2] for t in texts] if ":" in "".join(texts) else texts  # most ids have no colon
    try:
        return np.asarray(tails, dtype=str).astype(np.int64)
    except (ValueError, OverflowError):
        return pd.to_numeric(pd.Series(tails, dtype=object), errors="coerce").to_numpy(dtype=float)
