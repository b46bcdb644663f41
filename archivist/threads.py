"""Element-wise work of one analysis split over the threads of a check (``check --jobs N``).

Shapely 2 releases the GIL inside each vectorised GEOS call, so one call over
a whole array (the largest inscribed circle of every gap, say) can be cut
into runs of elements that threads compute at the same time. For an
element-wise function the runs, put back in order, are exactly the answer
of the one call: each element is computed alone, by the same GEOS code.

:func:`spreading` makes a pool of ``n`` threads the current one for the code
inside it (a :class:`contextvars.ContextVar`: the check's threads each enter
it); :func:`map_runs` cuts ``n`` elements into runs and computes them on the
current pool, the calling thread taking its share, or in one run when there
is no pool (``--jobs 1``, a worker process) or few elements. The calling
thread always works through the runs itself, so a pool busy with another
family's runs never stalls it, and a run never waits on another run.

The pool's threads are daemons: on Ctrl-C the check stops at once and no new
run starts; a run already started ends its GEOS call unseen. A thread of
archivist's still inside a GEOS call when the interpreter shuts down would
crash it (the objects it reads are torn down under it): :func:`busy` marks
such work, an exit handler waits for it to end (a library caller that goes on
after Ctrl-C), and the command line, which has nothing left to write,
leaves at once instead (:func:`settled`, ``os._exit``).

What this does not cover: only functions that compute each element alone
may go through :func:`map_runs` (element-wise shapely functions, and
:func:`archivist.analysis.guard.elementwise`); a union, an overlay or an
STRtree built over the whole array is not split.
"""

from __future__ import annotations

import atexit
import queue
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Any, TypeVar

R = TypeVar("R")

__all__ = ["Pool", "busy", "map_runs", "settled", "splits", "spreading"]

# Fewest elements in one run: below it, handing a run to another thread costs more than it saves.
MIN_RUN = 32
# Runs per thread: more runs than threads, so that a thread done early takes another (costs per element vary).
RUNS_PER_THREAD = 4


_busy = [0]  # threads of archivist's at work (a family's rules, a run)
_idle = threading.Condition()


@contextmanager
def busy() -> Iterator[None]:
    """Mark the work inside as a thread of archivist's at work (see :func:`settled`)."""
    with _idle:
        _busy[0] += 1
    try:
        yield
    finally:
        with _idle:
            _busy[0] -= 1
            _idle.notify_all()


def settled(timeout: float | None = None) -> bool:
    """Wait until no thread of archivist's is at work (at most ``timeout`` seconds); whether none is."""
    with _idle:
        return _idle.wait_for(lambda: _busy[0] == 0, timeout)


atexit.register(settled)  # a library caller leaving after Ctrl-C: its threads end their GEOS call first


class Pool:
    """``size`` daemon threads taking callables from one queue (see the module docstring)."""

    def __init__(self, size: int) -> None:
        self.size = max(1, int(size))
        self._tasks: queue.SimpleQueue[Callable[[], None] | None] = queue.SimpleQueue()
        self._threads = [threading.Thread(target=self._serve, name=f"archivist-run-{i}", daemon=True)
                         for i in range(self.size)]
        for t in self._threads:
            t.start()

    def _serve(self) -> None:
        while True:
            task = self._tasks.get()
            if task is None:
                return
            with busy():
                task()

    def submit(self, task: Callable[[], None]) -> None:
        self._tasks.put(task)

    def close(self) -> None:
        """No further task; threads end once the queue is drained (nothing waits for them)."""
        for _ in self._threads:
            self._tasks.put(None)


_current: ContextVar[Pool | None] = ContextVar("archivist_pool", default=None)


@contextmanager
def spreading(pool: Pool | None) -> Iterator[None]:
    """While inside, :func:`map_runs` in this thread (and its context) uses ``pool``; None: one run."""
    token = _current.set(pool)
    try:
        yield
    finally:
        _current.reset(token)


def splits(n: int, min_run: int = MIN_RUN) -> bool:
    """Whether :func:`map_runs` would cut ``n`` elements into several runs here (a current pool, enough elements)."""
    return _current.get() is not None and n >= 2 * min_run


def map_runs(work: Callable[[slice], R], n: int, min_run: int = MIN_RUN) -> list[R]:
    """``work`` over runs (slices) that together cover ``range(n)`` in order; the results in the order of the runs.

    One run, ``work(slice(0, n))``, without a current pool or with fewer
    than ``2 * min_run`` elements. Otherwise the runs are computed by the
    calling thread and the pool's threads together; the first error (in
    run order) is raised once every started run has ended.
    """
    pool = _current.get()
    if pool is None or n < 2 * min_run:
        return [work(slice(0, n))]
    k = min(n // min_run, (pool.size + 1) * RUNS_PER_THREAD)
    edges = [n * i // k for i in range(k + 1)]
    runs = [slice(edges[i], edges[i + 1]) for i in range(k)]
    results: list[Any] = [None] * k
    errors: dict[int, BaseException] = {}
    state = {"next": 0, "busy": 0}  # the next run to take; runs taken and not ended
    done = threading.Condition()
    stop = threading.Event()

    def take() -> int | None:
        with done:
            if stop.is_set() or state["next"] >= k:
                return None
            i = state["next"]
            state["next"] += 1
            state["busy"] += 1
            return i

    def drain() -> None:
        while (i := take()) is not None:
            try:
                results[i] = work(runs[i])
            except BaseException as exc:  # noqa: BLE001 - raised by the calling thread
                errors[i] = exc
                stop.set()
            finally:
                with done:
                    state["busy"] -= 1
                    done.notify_all()

    for _ in range(min(pool.size, k - 1)):
        pool.submit(drain)
    token = _current.set(None)  # the runs of this thread are not split again
    try:
        drain()
        with done:
            while state["busy"] > 0:
                done.wait(0.1)  # a timed wait: Ctrl-C reaches this thread at once
    except BaseException:
        stop.set()
        raise
    finally:
        _current.reset(token)
    if errors:
        raise errors[min(errors)]
    return results
