"""Exact sums of doubles (archivist/tally.py) against math.fsum.

Outside reference: :func:`math.fsum` of the Python standard library, which
returns the sum of its values correctly rounded (Python documentation of
``math.fsum``; Shewchuk's algorithm with a final round-half-even step).
"""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest

from archivist.tally import ExactSum, Tally, totals


def values(seed: int, n: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.standard_normal(n) * 10.0 ** rng.integers(-12, 12, n)


@pytest.mark.parametrize("seed", range(20))
def test_an_exact_sum_is_fsum_however_the_values_are_split(seed):
    v = values(seed, 500 + 37 * seed)
    rng = np.random.default_rng(seed)
    cuts = np.sort(rng.integers(0, len(v), 4))
    parts = np.split(rng.permutation(v), cuts)
    total = ExactSum()
    for part in parts[::-1]:
        total = total + ExactSum.of(part)
    assert float(ExactSum.of(v)) == float(total) == math.fsum(v.tolist())


def test_plain_sums_depend_on_the_order_an_exact_sum_does_not():
    v = [1e16, 1.0, -1e16, 1.0, 0.1, 0.2, 0.3]
    assert sum(v) != sum(sorted(v))  # the reason for exact sums
    assert float(ExactSum.of(v)) == float(ExactSum.of(sorted(v))) == math.fsum(v) == 2.6


def test_edge_values():
    tiny = [5e-324, 5e-324, -1e-320, 2.2250738585072014e-308]  # subnormals and the smallest normal
    assert float(ExactSum.of(tiny)) == math.fsum(tiny)
    big = [1.7e308, -1.7e308, 1e308]
    assert float(ExactSum.of(big)) == math.fsum(big)
    assert float(ExactSum.of([])) == 0.0 and float(ExactSum.of([0.0, -0.0])) == 0.0
    with pytest.raises(ValueError):
        ExactSum.of([1.0, float("nan")])


def test_a_tally_counts_the_values_whose_point_is_owned_and_crosses_processes():
    t = Tally(np.array([0.1, 0.2, 0.3]), np.array([0.0, 5.0, 10.0]), np.array([0.0, 0.0, 0.0]))
    west = t.total(lambda x, y: x < 5)
    east = t.total(lambda x, y: x >= 5)
    assert float(west) == 0.1 and float(east) == 0.5
    assert float(pickle.loads(pickle.dumps(west)) + east) == float(t.total()) == math.fsum([0.1, 0.2, 0.3])
    assert totals({"length": west + east}) == {"length": math.fsum([0.1, 0.2, 0.3])}
    with pytest.raises(ValueError):
        Tally(np.array([1.0]), np.array([]), np.array([]))
