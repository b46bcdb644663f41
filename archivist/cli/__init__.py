"""The ``archivist`` command: a thin click group over the Python API.

Each subcommand lives in its own module and calls one public function.
Whatever stops a run leaves as one line on stderr with its exit code,
through one click exception (:mod:`archivist.cli.errors`). The subcommand
modules import the rest of archivist only when their command runs, so
``archivist --help`` loads no geospatial library.
"""

from __future__ import annotations

import os
import sys
import warnings

import click

from .._version import __version__
from ..interrupt import terminate_as_exception
from . import audit as _audit
from . import check as _check
from . import diff as _diff
from . import init as _init
from . import pack as _pack
from . import repair as _repair
from . import rules as _rules
from . import unpack as _unpack
from .errors import TRACEBACK_VARIABLE, CommandFailed, handle_errors, os_error_line

__all__ = ["cli", "main", "handle_errors", "CommandFailed", "os_error_line", "TRACEBACK_VARIABLE"]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="archivist")
def cli() -> None:
    """Check a digital geological map, package it for an open repository, audit an archive."""


cli.add_command(_check.check_command)
cli.add_command(_pack.pack_command)
cli.add_command(_rules.rules_command)
cli.add_command(_init.init_command)
cli.add_command(_audit.audit_command)
cli.add_command(_unpack.unpack_command)
cli.add_command(_diff.diff_command)
cli.add_command(_repair.repair_command)


def main() -> None:
    """The ``archivist`` console script."""
    # Library warnings (numpy invalid values on NaN coordinates, GDAL notes on
    # a layer without CRS) are not addressed to the mapper: what matters in
    # them is reported as findings. The Python API leaves warnings alone.
    warnings.simplefilter("ignore", RuntimeWarning)
    warnings.simplefilter("ignore", UserWarning)
    # SIGTERM raises Interrupted: temporary siblings and private copies are removed,
    # and handle_errors prints one line (exit 143, 128 + the signal number).
    try:
        with terminate_as_exception():
            cli(prog_name="archivist")
    except SystemExit as exc:
        from ..threads import settled

        if not settled(0.5):  # stopped (Ctrl-C) while a check's threads are inside GEOS: nothing is left to write
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(code)
        raise
