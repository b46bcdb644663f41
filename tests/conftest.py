"""Shared test set-up: the test helpers on the path, and the hypothesis profiles.

Reproducible property tests
---------------------------
Every hypothesis test runs under the ``repeatable`` profile unless told
otherwise: ``derandomize=True`` draws the examples from a seed derived from
each test function, and ``database=None`` keeps no examples between runs, so
``python -m pytest`` tests the same inputs on every run and on every machine
(for one version of Python, hypothesis and the test's source). A failure
prints its inputs; rerun it with the same command.

To explore new inputs while developing, select the ``explore`` profile:
random examples on every run, and failures kept in ``.hypothesis/`` and
replayed first on the next run until they pass::

    python -m pytest --hypothesis-profile=explore tests/test_rules_topology.py
    python -m pytest --hypothesis-profile=explore --hypothesis-seed=7 ...   # one random run, again

A failure found that way becomes an ``@example(...)`` on the test, so the
default run keeps checking it.

Slow tests
----------
Tests that take seconds each (whole commands in subprocesses, signals sent
mid-run, byte-identical reruns of the example bundle) are marked
``@pytest.mark.slow``. The default run (``python -m pytest``, what CI runs)
runs them all; for a quick loop while editing, leave them out::

    python -m pytest -m "not slow"

and run the whole suite before committing.
"""

import signal
import sys
from pathlib import Path

from hypothesis import settings

sys.path.insert(0, str(Path(__file__).resolve().parent))

# A test run started in the background (`nohup`, `&` in a script) inherits an ignored SIGINT, and so would every
# command the Ctrl-C tests start: they would wait out Ctrl-C instead of stopping. Those tests stand for a person at
# a terminal, so the commands they start get SIGINT's default back (a Python handler is reset to it across exec).
if signal.getsignal(signal.SIGINT) == signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)

settings.register_profile("repeatable", derandomize=True, database=None, print_blob=True)
settings.register_profile("explore", derandomize=False, print_blob=True)
settings.load_profile("repeatable")
