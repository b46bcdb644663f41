"""Whole-map totals that spatial partitions of the map add up to the last bit.

A rule whose findings read a fact of the whole map (the total length of a
kind of boundary, whether the map holds a line of some kind) registers a
:class:`~archivist.registry.Settle`: its tally function gives, per named
total, one value per element (an edge, a line) and a point placing it
(:class:`Tally`). In one process every element counts; on partitions each
partition counts the elements whose point lies in its own cells, so each
element is counted by exactly one partition (:mod:`archivist.parallel`).

Float totals are added exactly (:class:`ExactSum`): each value is an integer
times a power of two, and the integers are added per power of two with
integer arithmetic, so the total does not depend on the order of the values
nor on how they were split between partitions, and it equals
:func:`math.fsum` of all of them (both are the exact sum, correctly rounded
to the nearest double). A sum in partition order with ``+`` or ``np.sum``
would differ from the whole map's in the last bits, which a printed total or
a threshold can show.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any, Callable

import numpy as np

__all__ = ["ExactSum", "Tally", "totals"]

_HALF = 26  # a 53-bit significand is added as two halves of 27 and 26 bits: no int64 overflow below 2**36 values


@dataclass(frozen=True)
class ExactSum:
    """The exact sum of doubles, as integers per binary exponent: ``sum(n * 2**(e - 53))``; picklable."""

    parts: tuple[tuple[int, int], ...] = ()  # (e, n), e ascending

    @classmethod
    def of(cls, values: Any) -> ExactSum:
        """The exact sum of ``values`` (finite doubles; raises ValueError for NaN or infinity)."""
        v = np.asarray(values, dtype=np.float64).ravel()
        if not np.isfinite(v).all():
            raise ValueError("an exact sum of values that are not all finite")
        v = v[v != 0.0]
        if not len(v):
            return cls()
        m, e = np.frexp(v)  # v = m * 2**e, 0.5 <= |m| < 1: m * 2**53 is an integer below 2**53
        n = (m * 2.0**53).astype(np.int64)
        hi, lo = n >> _HALF, n & ((1 << _HALF) - 1)  # n = hi * 2**26 + lo, floor division for negatives too
        ue, inv = np.unique(e, return_inverse=True)
        sh = np.zeros(len(ue), dtype=np.int64)
        sl = np.zeros(len(ue), dtype=np.int64)
        np.add.at(sh, inv, hi)
        np.add.at(sl, inv, lo)
        return cls(tuple((int(k), (int(a) << _HALF) + int(b)) for k, a, b in zip(ue.tolist(), sh.tolist(), sl.tolist())))

    def __add__(self, other: ExactSum) -> ExactSum:
        merged: dict[int, int] = dict(self.parts)
        for e, n in other.parts:
            merged[e] = merged.get(e, 0) + n
        return ExactSum(tuple(sorted((e, n) for e, n in merged.items() if n)))

    def exact(self) -> Fraction:
        """The sum as an exact fraction."""
        if not self.parts:
            return Fraction(0)
        low = self.parts[0][0]
        n = sum(k << (e - low) for e, k in self.parts)
        return Fraction(n) * Fraction(2) ** (low - 53)

    def __float__(self) -> float:
        """The exact sum rounded to the nearest double (ties to even), as :func:`math.fsum` gives it."""
        return float(self.exact())


@dataclass(frozen=True)
class Tally:
    """Values a rule adds toward a whole-map total, each placed at a point (``x``, ``y``, in the rule's frame).

    The point decides which partition counts the value: the one owning the
    point's cell (:meth:`archivist.parallel.Plan.owners`).
    """

    values: np.ndarray
    x: np.ndarray
    y: np.ndarray

    def __post_init__(self) -> None:
        if not (len(self.values) == len(self.x) == len(self.y)):
            raise ValueError("a tally needs one point per value")

    def total(self, owned: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None) -> ExactSum:
        """The exact sum of the values whose point is ``owned`` (every value when None)."""
        values = np.asarray(self.values, dtype=np.float64)
        if owned is not None and len(values):
            values = values[owned(np.asarray(self.x, dtype=float), np.asarray(self.y, dtype=float))]
        return ExactSum.of(values)


def totals(sums: dict[str, ExactSum]) -> dict[str, float]:
    """The named exact sums, each rounded to the nearest double."""
    return {k: float(v) for k, v in sums.items()}
