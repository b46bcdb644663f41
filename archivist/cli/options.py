"""Options shared by the subcommands that can run for a while."""

from __future__ import annotations

import click

from ..progress import Progress, make_progress


def progress_options(func):
    """Add ``--quiet/-q`` and ``--verbose/-v``; the command receives ``quiet`` and ``verbose``.

    Progress bars go to stderr only when it is a terminal and ``--quiet`` is
    not given; ``-v`` prints one timing line per step to stderr as it ends.
    """
    func = click.option("--verbose", "-v", is_flag=True, help="Print how long each step took (to stderr).")(func)
    func = click.option("--quiet", "-q", is_flag=True, help="No progress bars.")(func)
    return func


def progress_for(quiet: bool, verbose: bool) -> Progress:
    """The progress hook for a command run (bars on a terminal, timings with -v)."""
    return make_progress(quiet=quiet, verbose=verbose)
