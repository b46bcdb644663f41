"""Options shared by the subcommands that can run for a while."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, TypeVar

import click

from ..progress import Progress, make_progress

if TYPE_CHECKING:
    from ..model import Report

F = TypeVar("F", bound=Callable[..., Any])


def progress_options(func: F) -> F:
    """Add ``--quiet/-q`` and ``--verbose/-v``; the command receives ``quiet`` and ``verbose``.

    Progress bars go to stderr only when it is a terminal and ``--quiet`` is
    not given; ``-v`` prints one timing line per step to stderr as it ends.
    """
    func = click.option("--verbose", "-v", is_flag=True, help="Print how long each step took (to stderr).")(func)
    func = click.option("--quiet", "-q", is_flag=True, help="No progress bars.")(func)
    return func


def details_option(func: F) -> F:
    """Add ``--details``: the text report lists every finding after its summary (the command receives ``details``)."""
    return click.option(
        "--details",
        is_flag=True,
        help="List every finding after the summary (text format; the JSON report always has them all).",
    )(func)


def only_help(families: tuple[str, ...]) -> str:
    """The help of ``--only``, naming the families it takes."""
    return f"Run only this rule family (repeatable): {', '.join(families)}."


def jobs_option(func: F) -> F:
    """Add ``--jobs N``: worker processes for the rules run on spatial partitions of the map (default 1).

    The default stays one process until a whole family runs on partitions
    faster than in one process (measured with tests/benchmarks/bench_jobs.py);
    ``--jobs 0`` uses every core.
    """
    return click.option(
        "--jobs", "-j", "jobs", type=click.IntRange(min=0), default=None, show_default="1; with --scheduler local, every core",
        help="Worker processes for the topology and linework checks, run on parts of the map (0: every core). "
             "The findings are the same whatever the number.",
    )(func)


def progress_for(quiet: bool, verbose: bool) -> Progress:
    """The progress hook for a command run (bars on a terminal, timings with -v)."""
    return make_progress(quiet=quiet, verbose=verbose)


def emit_report(report: Report, fmt: str, output: Path | None, details: bool = False) -> None:
    """Write a report as text (every finding with ``details``) or JSON to ``output`` (atomically) or to stdout."""
    import sys

    from ..fsutil import atomic_write_text
    from ..report import render_json, render_text, write_text

    if output is not None:
        atomic_write_text(output, render_json(report) if fmt == "json" else render_text(report, details=details))
    elif fmt == "json":
        sys.stdout.write(render_json(report))
    else:
        write_text(report, sys.stdout, details=details)
