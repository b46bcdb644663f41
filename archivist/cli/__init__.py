"""The ``archivist`` command: a thin click group over the Python API.

Each subcommand lives in its own module and calls one public function.
Errors that stop a run print one line on stderr and exit 2.
"""

from __future__ import annotations

import functools
import sys
import warnings

import click

from .._version import __version__
from ..errors import ArchivistError


def handle_errors(func):
    """Turn ArchivistError into one line on stderr and exit code 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except ArchivistError as exc:
            click.echo(f"archivist: {exc}", err=True)
            sys.exit(2)

    return wrapper


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="archivist")
def cli():
    """Check a digital geological map, package it for an open repository, audit an archive."""


from . import check as _check  # noqa: E402  (registers the subcommand)
from . import pack as _pack  # noqa: E402
from . import rules as _rules  # noqa: E402
from . import init as _init  # noqa: E402
from . import audit as _audit  # noqa: E402
from . import unpack as _unpack  # noqa: E402
from . import diff as _diff  # noqa: E402

cli.add_command(_check.check_command)
cli.add_command(_pack.pack_command)
cli.add_command(_rules.rules_command)
cli.add_command(_init.init_command)
cli.add_command(_audit.audit_command)
cli.add_command(_unpack.unpack_command)
cli.add_command(_diff.diff_command)


def main() -> None:
    # Library warnings (numpy invalid values on NaN coordinates, GDAL notes on
    # a layer without CRS) are not addressed to the mapper: what matters in
    # them is reported as findings. The Python API leaves warnings alone.
    warnings.simplefilter("ignore", RuntimeWarning)
    warnings.simplefilter("ignore", UserWarning)
    cli(prog_name="archivist")
