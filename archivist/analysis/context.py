"""The check context: what a rule may use besides the project, and the shared analyses, once per check."""

from __future__ import annotations

import threading
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Callable, Iterable, Iterator, TypeVar

import numpy as np

from .alignment import Alignment, align_layers
from .coverage import Coverage, Mismatch, analyse_coverage, find_mismatches
from .halfedges import EdgeBasis, Edges, build_edges
from .lines import LineNetwork, build_line_network
from .placement import Placement, SwapSuspects, place_layers, swap_suspects
from .polygons import Units, read_units
from .zones import ZoneEvidence, zone_evidence

if TYPE_CHECKING:
    from ..project import CheckConfig, Layer, MapProject

T = TypeVar("T")
PART_KEY = "analysis.part"
"""The cache key under which a spatial partition's context holds its :class:`~.coverage.PartOfMap`."""

# What one rule (or one analysis) said, in the order it said it: a note (text), or an analysis it read (the log
# of that analysis's computation). Flattened over the rules in their order, these logs give the notes in the
# order a run in one thread gives them, however the rules ran side by side (see CheckContext.ordered_notes).
Log = list[Any]


@dataclass
class CheckContext:
    """What a rule may use besides the project: settings, notes for the report and the shared analyses.

    Several rules share one expensive analysis (the unit polygons, their
    half-edge table, the coverage analysis, the line network); each typed
    accessor below computes its analysis on first use and returns the same
    value to every later rule of the check. The values are frozen: a rule
    reads them, it never changes them. ``shared(key, compute)`` caches any
    other value a family computes for several of its rules.

    Rules may run side by side on threads (``check --jobs N``): each shared
    value is computed exactly once, under a lock of its own key (a rule
    asking for it while another computes it waits for that value), and
    :meth:`ordered_notes` gives the notes in the order one thread gives them.
    """

    project: MapProject
    notes: list[str] = field(default_factory=list)
    _cache: dict[str, Any] = field(default_factory=dict)
    _logs: dict[str, Log] = field(default_factory=dict, repr=False)
    _locks: dict[str, threading.Lock] = field(default_factory=dict, repr=False)
    _guard: threading.Lock = field(default_factory=threading.Lock, repr=False)
    _local: threading.local = field(default_factory=threading.local, repr=False)
    # the half-edges last built for polygons most of which are these (a repair's working copy before its last
    # change): the table is built from them (see EdgeBasis), the same table a build from scratch gives
    edge_basis: EdgeBasis | None = field(default=None, repr=False)

    @property
    def config(self) -> CheckConfig:
        return self.project.config

    @property
    def tolerance(self) -> float:
        return float(self.project.config.tolerance)

    def shared(self, key: str, compute: Callable[[], T]) -> T:
        """``compute()`` once per check under ``key``; the same value afterwards (thread-safe: computed once).

        A computation that raises is not kept: the next rule asking computes again, as in one thread.
        """
        log = self._log()
        if key in self._cache:
            log.append(self._logs.get(key, []))
            return self._cache[key]
        with self._guard:
            lock = self._locks.setdefault(key, threading.Lock())
        with lock:
            if key in self._cache:
                log.append(self._logs.get(key, []))
                return self._cache[key]
            mine: Log = []
            log.append(mine)  # what this computation notes, at the place of the rule that asked
            with self.recording(mine):
                value = compute()
            self._logs[key] = mine
            self._cache[key] = value
            return value

    def provide(self, key: str, value: Any, notes: Iterable[str] = ()) -> None:
        """Hand in ``value`` for ``key``, computed elsewhere for this very project; ``notes``: what computing it notes."""
        with self._guard:
            self._cache[key] = value
            self._logs[key] = list(notes)

    def computed(self, key: str) -> tuple[Any, list[str]] | None:
        """The value under ``key`` and what computing it noted, when it has been computed or handed in; else None
        (nothing is computed)."""
        with self._guard:
            if key not in self._cache:
                return None
            return self._cache[key], list(self._logs.get(key, []))

    def note(self, text: str) -> None:
        """A note for the report (once, however many rules add it)."""
        self._log().append(text)
        with self._guard:
            if text not in self.notes:
                self.notes.append(text)

    # ------------------------------------------------------------ rules side by side

    def _stack(self) -> list[Log]:
        """This thread's logs, innermost recording last; at the bottom, outside any recording, a log of its own."""
        stack = getattr(self._local, "logs", None)
        if stack is None:
            stack = self._local.logs = [[]]
        return stack

    def _log(self) -> Log:
        return self._stack()[-1]

    @contextmanager
    def recording(self, log: Log) -> Iterator[Log]:
        """While inside, what this thread notes and reads through the context is written to ``log`` (one rule's run)."""
        stack = self._stack()
        stack.append(log)
        try:
            yield log
        finally:
            stack.pop()

    @staticmethod
    def ordered_notes(logs: Iterable[Log]) -> list[str]:
        """The notes of the rules' logs (:meth:`recording`), taken in the rules' order: the order of one thread.

        In one thread, an analysis notes when the first rule that reads it
        computes it; a later rule reads the value and notes nothing. Here each
        rule's log holds the log of every analysis it read, computed by it or
        by another rule at the same time, so the first rule in order that read
        it gives its notes their place, whichever rule computed it.
        """
        out: list[str] = []
        seen: set[str] = set()
        done: set[int] = set()

        def walk(log: Log) -> None:
            for item in log:
                if isinstance(item, str):
                    if item not in seen:
                        seen.add(item)
                        out.append(item)
                elif id(item) not in done:
                    done.add(id(item))
                    walk(item)

        for log in logs:
            walk(log)
        return out

    # ------------------------------------------------------------ the layers across layers

    def alignment(self) -> Alignment:
        """The layers as the checks across layers see them: in the map CRS, swapped axes put right.

        A layer in another CRS is transformed to the map CRS, features whose
        x and y are swapped are exchanged back, and a layer that cannot be
        placed with the map is left out; each of these is one note in the
        report. The CRS family reads the layers as they are; every other
        check that compares a layer with another reads them from here, so a
        CRS fault is reported once, by its own rule.
        """

        def compute() -> Alignment:
            found = align_layers(self.project, self.swap_suspects())
            for text in found.notes:
                self.note(text)
            return found

        return self.shared("analysis.alignment", compute)

    def layer(self, role: str) -> Layer | None:
        """The layer of ``role`` as the checks across layers see it (see :meth:`alignment`); None when absent or left out."""
        return self.alignment().layers.get(role)

    def left_out(self) -> tuple[str, ...]:
        """Roles whose layer cannot be placed with the map and is left out of the checks across layers."""
        return self.alignment().left_out

    def view(self) -> MapProject:
        """The project with its layers as the checks across layers see them (the same project when nothing changed)."""

        def compute() -> MapProject:
            found = self.alignment()
            return replace(self.project, layers=found.layers) if found.changed else self.project

        return self.shared("analysis.view", compute)

    # ------------------------------------------------------------ the unit polygons

    def units(self) -> Units:
        """The unit polygons as the topology and linework checks see them (needs a units layer)."""
        return self.shared("analysis.units", lambda: read_units(self.view()))

    def edges(self) -> Edges:
        """The half-edge table of :meth:`units`."""
        return self.shared("analysis.edges", lambda: build_edges(self.units().geoms, self.edge_basis))

    def coverage(self) -> Coverage:
        """Gaps, overlaps, misfits and the map extent of :meth:`units`; notes what the extent is."""

        def compute() -> Coverage:
            cov = analyse_coverage(self.view(), self.units(), self.edges(), self.tolerance, self._cache.get(PART_KEY))
            self.note(cov.extent_note)
            return cov

        return self.shared("analysis.coverage", compute)

    def mismatches(self) -> tuple[Mismatch, ...]:
        """Neighbours whose common edge nearly coincides, grouped per pair, from :meth:`coverage`."""
        return self.shared("analysis.mismatches", lambda: find_mismatches(self.coverage()))

    # ------------------------------------------------------------ the lines

    def line_network(self) -> LineNetwork:
        """The lines layer as a network of parts and segments (needs a lines layer)."""
        return self.shared("analysis.lines", lambda: build_line_network(self.view()))

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
