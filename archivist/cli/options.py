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
    """Add ``--jobs N``: threads that run the rule families side by side (default: every core).

    ``--jobs 1`` runs every rule in one thread, one after another; the report
    is the same whatever the number (see :func:`archivist.engine.run_rules`).
    With ``--scheduler``, the number of workers of a local cluster.
    """
    return click.option(
        "--jobs", "-j", "jobs", type=click.IntRange(min=0), default=None, show_default="every core",
        help="Threads that run the check families side by side (0: every core; 1: one after another). "
             "With --scheduler local, its workers. The findings are the same whatever the number.",
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
