"""The check context: what a rule may use besides the project, and the shared analyses, once per check."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Callable, TypeVar

import numpy as np

from .coverage import Coverage, Mismatch, analyse_coverage, find_mismatches
from .halfedges import Edges, build_edges
from .lines import LineNetwork, build_line_network
from .placement import Placement, SwapSuspects, place_layers, swap_suspects
from .polygons import Units, read_units
from .zones import ZoneEvidence, zone_evidence

if TYPE_CHECKING:
    from ..project import CheckConfig, MapProject

T = TypeVar("T")


@dataclass
class CheckContext:
    """What a rule may use besides the project: settings, notes for the report and the shared analyses.

    Several rules share one expensive analysis (the unit polygons, their
    half-edge table, the coverage analysis, the line network); each typed
    accessor below computes its analysis on first use and returns the same
    value to every later rule of the check. The values are frozen: a rule
    reads them, it never changes them. ``shared(key, compute)`` caches any
    other value a family computes for several of its rules.
    """

    project: MapProject
    notes: list[str] = field(default_factory=list)
    _cache: dict[str, Any] = field(default_factory=dict)

    @property
    def config(self) -> CheckConfig:
        return self.project.config

    @property
    def tolerance(self) -> float:
        return float(self.project.config.tolerance)

    def shared(self, key: str, compute: Callable[[], T]) -> T:
        """``compute()`` once per check under ``key``; the same value afterwards."""
        if key not in self._cache:
            self._cache[key] = compute()
        return self._cache[key]

    def note(self, text: str) -> None:
        """A note for the report (once, however many rules add it)."""
        if text not in self.notes:
            self.notes.append(text)

    # ------------------------------------------------------------ the unit polygons

    def units(self) -> Units:
        """The unit polygons as the topology and linework checks see them (needs a units layer)."""
        return self.shared("analysis.units", lambda: read_units(self.project))

    def edges(self) -> Edges:
        """The half-edge table of :meth:`units`."""
        return self.shared("analysis.edges", lambda: build_edges(self.units().geoms))

    def coverage(self) -> Coverage:
        """Gaps, overlaps, misfits and the map extent of :meth:`units`; notes what the extent is."""

        def compute() -> Coverage:
            cov = analyse_coverage(self.project, self.units(), self.edges(), self.tolerance)
            self.note(cov.extent_note)
            return cov

        return self.shared("analysis.coverage", compute)

    def mismatches(self) -> tuple[Mismatch, ...]:
        """Neighbours whose common edge nearly coincides, grouped per pair, from :meth:`coverage`."""
        return self.shared("analysis.mismatches", lambda: find_mismatches(self.coverage()))

    # ------------------------------------------------------------ the lines

    def line_network(self) -> LineNetwork:
        """The lines layer as a network of parts and segments (needs a lines layer)."""
        return self.shared("analysis.lines", lambda: build_line_network(self.project))

    def segment_edges(self) -> np.ndarray:
        """For every segment of :meth:`line_network`, the edge of :meth:`edges` with exactly its endpoints, or -1."""
        return self.shared("analysis.segment-edges", lambda: self.line_network().match(self.edges()))

    def edges_drawn(self, roles: tuple[str, ...] | None = None) -> np.ndarray:
        """A mask over :meth:`edges`: True where a line segment (of the given roles) draws the edge exactly."""
        return self.line_network().edges_drawn(self.segment_edges(), len(self.edges()), roles)

    # ------------------------------------------------------------ the globe

    def placements(self) -> dict[str, Placement]:
        """Every layer with a usable CRS placed on the globe."""
        return self.shared("analysis.placements", lambda: place_layers(self.project))

    def swap_suspects(self) -> dict[str, SwapSuspects]:
        """Per layer, the features that fit where the map can be only with x and y swapped."""
        return self.shared("analysis.swap-suspects", lambda: swap_suspects(self.placements()))

    def zone_evidence(self) -> ZoneEvidence:
        """What the project holds besides the CRS labels (longitude/latitude columns, a declared extent, layers in
        other CRSs) about the CRS each layer's coordinates are really in."""
        return self.shared("analysis.zone-evidence", lambda: zone_evidence(self.project, self.placements(), self.swap_suspects()))
