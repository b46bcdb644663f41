"""Stopping a run cleanly: SIGTERM becomes an exception, so every clean-up (``finally``) runs.

A scheduler's time limit or ``kill`` sends SIGTERM; Python's default is to
end the process at once, which would leave temporary siblings and private
copies behind. Inside :func:`terminate_as_exception` the signal raises
:class:`Interrupted` instead. This module imports nothing heavy, so the
command line can install it before loading the rest of archivist.
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager
from typing import Iterator


class Interrupted(BaseException):
    """The run was asked to stop (SIGTERM); raised so every clean-up runs."""

    signum = signal.SIGTERM


@contextmanager
def terminate_as_exception() -> Iterator[None]:
    """While inside, SIGTERM raises :class:`Interrupted` so clean-up code runs (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise Interrupted(f"stopped by signal {signum}")

    before = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, before)
