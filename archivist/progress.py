"""Progress bars and step timings: one small hook passed through the API.

Library code never prints. It announces its slow steps to a :class:`Progress`
object it was given (or to a silent default)::

    with progress.step("reading map.gpkg:units") as step:
        ...                                    # one step, shown as a spinner
    with progress.step("topology rules", total=6) as step:
        for info in rules:
            with step.item(info.id):           # advances the bar by one when done
                ...

The command line makes the hook with :func:`make_progress`: rich bars on
stderr when stderr is a terminal and ``--quiet`` is not given, and with
``-v`` one timing line per step (and per item) as each finishes.

Every :class:`Progress` records its timings in ``progress.timings``, so a
caller can read them after the run whatever is shown. Labels hold file and
layer names as given; what is shown passes through
:func:`archivist.printable.printable` and is never read as rich markup.
"""

from __future__ import annotations

import os
import sys
from contextlib import contextmanager
from dataclasses import dataclass
from time import perf_counter
from typing import IO, Any, Iterator

from .printable import printable


@dataclass(frozen=True)
class Timing:
    """How long one step (depth 0) or one item of a step (depth 1) took."""

    label: str
    seconds: float
    depth: int = 0


class Step:
    """A running step: advance its bar, or time one item of it."""

    def __init__(self, progress: "Progress", label: str, total: int | None) -> None:
        self.progress = progress
        self.label = label
        self.total = total
        self.done = 0
        self.task: Any = None  # the display's handle (a rich TaskID), if any

    def advance(self, n: int = 1) -> None:
        self.done += n
        self.progress._advance(self, n)

    @contextmanager
    def item(self, label: str) -> Iterator[None]:
        """Time one item of the step (e.g. one rule); the bar advances by one when it ends."""
        t0 = perf_counter()
        try:
            yield
        finally:
            timing = Timing(label, perf_counter() - t0, 1)
            self.progress.timings.append(timing)
            self.progress._timed(timing)
            self.advance()


class Progress:
    """The silent hook: records timings, shows nothing. Subclasses display."""

    def __init__(self) -> None:
        self.timings: list[Timing] = []

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Stop any display (idempotent)."""

    @contextmanager
    def step(self, label: str, total: int | None = None) -> Iterator[Step]:
        """A step of the run; ``total`` items when known (a bar), else a spinner."""
        step = Step(self, label, total)
        self._begin(step)
        t0 = perf_counter()
        try:
            yield step
        finally:
            timing = Timing(label, perf_counter() - t0, 0)
            self.timings.append(timing)
            self._end(step)
            self._timed(timing)

    # display hooks -----------------------------------------------------
    def _begin(self, step: Step) -> None:
        pass

    def _advance(self, step: Step, n: int) -> None:
        pass

    def _end(self, step: Step) -> None:
        pass

    def _timed(self, timing: Timing) -> None:
        pass


def format_timing(t: Timing) -> str:
    """One timing line as ``-v`` prints it: ``  1.234 s  reading map.gpkg:units``."""
    indent = "    " * t.depth
    return f"{t.seconds:8.3f} s  {indent}{printable(t.label)}"


class RichProgress(Progress):
    """Rich progress bars (transient) and/or timing lines, on ``stream`` (stderr)."""

    def __init__(self, stream: IO[str], *, bars: bool, timings: bool) -> None:
        super().__init__()
        from rich.console import Console

        self.console = Console(file=stream, force_terminal=True if bars else None, highlight=False, soft_wrap=True, emoji=False)
        self.show_timings = timings
        self._t0 = perf_counter()
        self._closed = False
        self._bars = None
        if bars:
            from rich.progress import BarColumn, MofNCompleteColumn, Progress as Bars, SpinnerColumn, TextColumn, TimeElapsedColumn

            self._bars = Bars(
                SpinnerColumn(),
                TextColumn("{task.description}", markup=False),
                BarColumn(),
                MofNCompleteColumn(),
                TimeElapsedColumn(),
                console=self.console,
                transient=True,
            )
            self._started = False

    @property
    def shows_bars(self) -> bool:
        return self._bars is not None

    def close(self) -> None:
        if self._bars is not None and self._started:
            self._bars.stop()
            self._started = False
        if self.show_timings and not self._closed:
            self._timed(Timing("total", perf_counter() - self._t0, 0))
        # a step still running on a thread (a rule at Ctrl-C) ends later: recorded, never shown below the total
        self._closed = True

    def _begin(self, step: Step) -> None:
        if self._bars is None or self._closed:
            return
        if not self._started:
            self._bars.start()
            self._started = True
        step.task = self._bars.add_task(printable(step.label), total=step.total)

    def _advance(self, step: Step, n: int) -> None:
        if self._bars is not None and step.task is not None:
            self._bars.advance(step.task, n)

    def _end(self, step: Step) -> None:
        if self._bars is not None and step.task is not None:
            self._bars.remove_task(step.task)

    def _timed(self, timing: Timing) -> None:
        if self.show_timings and not self._closed:
            self.console.print(format_timing(timing), markup=False, style="dim" if timing.depth else None)


def is_terminal(stream: IO[str]) -> bool:
    try:
        return bool(stream.isatty()) and os.environ.get("TERM") != "dumb"
    except (AttributeError, ValueError):
        return False


def make_progress(*, quiet: bool = False, verbose: bool = False, stream: IO[str] | None = None) -> Progress:
    """The hook the command line uses.

    Bars when ``stream`` (default: stderr) is a terminal and not ``quiet``;
    timing lines when ``verbose``. Otherwise the silent :class:`Progress`.
    """
    stream = sys.stderr if stream is None else stream
    bars = not quiet and is_terminal(stream)
    if not bars and not verbose:
        return Progress()
    return RichProgress(stream, bars=bars, timings=verbose)
