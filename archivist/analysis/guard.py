"""Running GEOS on many geometries so that one it cannot process does not stop the others.

GEOS may stop on degenerate input (a robustness failure in an overlay,
reported as ``shapely.errors.GEOSException``). The helpers here first run the
whole array at once, as usual; only when GEOS stops do they split the work
(halves of an element-wise call, clusters of touching polygons for a call
over a set) to find the geometries it cannot process, and return the results
for all the others unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from shapely.errors import GEOSException

from ..threads import map_runs, splits


@dataclass(frozen=True)
class Failure:
    """A part of the map GEOS could not process.

    ``units`` are indices into :class:`~.polygons.Units` (empty when the part
    cannot be narrowed down), ``doing`` says what was being done in words
    ("intersecting them"), ``aspects`` which results are incomplete there
    (``overlaps``, ``misfits``, ``gaps``, ``outside``) and ``reason`` is GEOS's
    own message.
    """

    units: tuple[int, ...]
    doing: str
    aspects: frozenset[str]
    reason: str


def reason_of(exc: BaseException) -> str:
    """GEOS's message on one line."""
    return " ".join(str(exc).split()) or type(exc).__name__


def elementwise(func: Callable[..., np.ndarray], *arrays: np.ndarray, fill: Any = None) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """``func(*arrays)`` for an element-wise shapely function, element by element if need be.

    Returns (result, failed, reasons): ``fill`` in the result where GEOS could
    not process the element, a mask of those elements, and GEOS's messages.
    The whole array is tried first; on failure it is halved until each
    failing element stands alone, so the cost grows with the failures only.
    """
    n = len(arrays[0])
    if splits(n):  # on the threads of a check: runs of elements side by side, joined in order (archivist.threads)
        runs = map_runs(lambda s: elementwise(func, *(a[s] for a in arrays), fill=fill), n)
        rs = [r for r, _, _ in runs]
        if len({r.dtype for r in rs}) > 1:
            rs = [r.astype(object) for r in rs]
        return np.concatenate(rs), np.concatenate([f for _, f, _ in runs]), [m for _, _, ms in runs for m in ms]
    try:
        return np.asarray(func(*arrays)), np.zeros(n, dtype=bool), []
    except GEOSException as exc:
        if n <= 1:
            out = np.full(n, fill, dtype=object if fill is None else None)
            return out, np.ones(n, dtype=bool), [reason_of(exc)]
    mid = n // 2
    r1, f1, m1 = elementwise(func, *(a[:mid] for a in arrays), fill=fill)
    r2, f2, m2 = elementwise(func, *(a[mid:] for a in arrays), fill=fill)
    if r1.dtype != r2.dtype:
        r1, r2 = r1.astype(object), r2.astype(object)
    return np.concatenate([r1, r2]), np.concatenate([f1, f2]), m1 + m2


def clusters(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Connected components of ``n`` nodes joined by the pairs (a[i], b[i]): a label per node."""
    labels = np.arange(n)
    while True:
        low = np.minimum(labels[a], labels[b])
        new = labels.copy()
        np.minimum.at(new, a, low)
        np.minimum.at(new, b, low)
        new = new[new]
        if np.array_equal(new, labels):
            return labels
        labels = new


def by_cluster(
    func: Callable[[np.ndarray], np.ndarray],
    geoms: np.ndarray,
    pairs: Callable[[], tuple[np.ndarray, np.ndarray]],
    fill: Any = None,
) -> tuple[np.ndarray, list[tuple[np.ndarray, str]]]:
    """``func(geoms)`` for a function over a set of geometries, one cluster at a time if need be.

    ``pairs()`` gives the pairs of intersecting geometries (indices into
    ``geoms``), asked for only when GEOS stops; geometries in different clusters do not touch, so a function
    whose result for a geometry depends only on those it touches (GEOS coverage
    validation) gives the same result per cluster. Returns the result
    (``fill`` for the geometries of a cluster GEOS could not process) and, per
    such cluster, its indices and GEOS's message.
    """
    try:
        return np.asarray(func(geoms)), []
    except GEOSException:
        pass
    labels = clusters(len(geoms), *pairs())
    out = np.empty(len(geoms), dtype=object)
    out[:] = fill
    failed: list[tuple[np.ndarray, str]] = []
    for label in np.unique(labels):  # only after GEOS has stopped: one call per cluster
        members = np.flatnonzero(labels == label)
        try:
            out[members] = func(geoms[members])
        except GEOSException as exc:
            failed.append((members, reason_of(exc)))
    return out, failed
