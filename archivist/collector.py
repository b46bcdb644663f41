"""Python's cyclic garbage collector paused while archivist works over a whole map.

Every shapely geometry is an object the cyclic collector tracks, and a map
of 10^5 polygons holds some 400 000 of them (its polygons and lines) before a
check makes its own arrays of boundaries, buffers and pieces. The collector
examines the whole of its oldest generation each time the objects that
survived the younger ones grow by a quarter of it (CPython's rule for a full
collection, from memory of its gcmodule.c), and the check's arrays of new geometries do that again and
again. Measured side by side on ``tests/benchmarks/bench_topology.py``'s
map of 10^5 polygons with 1 % defects (2-core machine, best of two runs):
the whole check took 7.26 s with the collector running and 6.78 s with it
paused; a full collection of the loaded map alone takes about 0.03 s, and
CPython made over a dozen of them during a load and a check.

A geometry refers to no Python object but its class (``gc.get_referents``),
so it can never be part of a cycle; the cycles a check does make are few (about 2 000 objects
collected over that whole run), and they are collected as usual once the
pause ends. The pause is the collector's own switch (:func:`gc.disable`);
nothing else about memory changes. Pauses nest and may overlap across
threads: the collector runs again when the last one ends, and only if it was
running when the first one began (a caller that switched it off keeps it
off). A process forked during a pause starts with the collector paused and
so does not write to the objects it shares with its parent to collect them
(which would copy their memory pages).
"""

from __future__ import annotations

import gc
import threading
from collections.abc import Iterator
from contextlib import contextmanager

_lock = threading.Lock()
_depth = 0
_was_enabled = False


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause Python's cyclic garbage collector for the block (or the decorated function), then restore it."""
    global _depth, _was_enabled
    with _lock:
        if _depth == 0:
            _was_enabled = gc.isenabled()
            gc.disable()
        _depth += 1
    try:
        yield
    finally:
        with _lock:
            _depth -= 1
            if _depth == 0 and _was_enabled:
                gc.enable()
