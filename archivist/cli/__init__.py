"""The ``archivist`` command: a thin click group over the Python API.

Each subcommand lives in its own module and calls one public function.
Errors that stop a run print one line on stderr and exit 2: an
``ArchivistError``, an OS error (the file it names and the system's reason),
and, as a last fence, an unexpected error (a bug): one line saying so, exit 2;
set the environment variable ``ARCHIVIST_TRACEBACK=1`` to see its traceback.
Everything printed passes through :func:`archivist.printable.printable`.
"""

from __future__ import annotations

import functools
import os
import sys
import warnings
from typing import Any, Callable

import click

from .._version import __version__
from ..errors import ArchivistError
from ..interrupt import Interrupted, terminate_as_exception
from ..printable import printable

TRACEBACK_VARIABLE = "ARCHIVIST_TRACEBACK"
"""Set to 1 to let an unexpected error (a bug in archivist) show its traceback."""


def fail(message: object, code: int = 2) -> None:
    """Print ``archivist: <message>`` as one printable line on stderr and exit with ``code``."""
    click.echo(f"archivist: {' '.join(printable(message).split())}", err=True)
    sys.exit(code)


def os_error_line(exc: OSError) -> str:
    """One line for an OS error: the file(s) it names and the system's reason."""
    reason = exc.strerror or " ".join(str(exc).split()) or type(exc).__name__
    names = [str(n) for n in (exc.filename, exc.filename2) if n is not None]
    return f"{' -> '.join(names)}: {reason}" if names else reason


def handle_errors(func: Callable[..., Any]) -> Callable[..., Any]:
    """Turn ArchivistError, OSError and unexpected errors into one line on stderr and exit code 2.

    click's own exceptions (usage errors, ``Abort``) and ``SystemExit`` pass
    through. With ``ARCHIVIST_TRACEBACK=1`` an unexpected error is re-raised.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except ArchivistError as exc:
            fail(exc)
        except (click.ClickException, click.exceptions.Abort, click.exceptions.Exit):
            raise
        except KeyboardInterrupt:
            fail("interrupted (Ctrl-C); an output not yet complete was not written", 130)
        except Interrupted as exc:
            fail(f"{exc}; an output not yet complete was not written", 128 + int(exc.signum))
        except OSError as exc:
            fail(os_error_line(exc))
        except Exception as exc:  # the last fence: a bug must not show a mapper a traceback
            if os.environ.get(TRACEBACK_VARIABLE, "") not in ("", "0"):
                raise
            detail = " ".join(str(exc).split())
            fail(f"internal error ({type(exc).__name__}{': ' + detail if detail else ''}); "
                 f"please report it; set {TRACEBACK_VARIABLE}=1 to see the traceback")

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
    # SIGTERM raises Interrupted: temporary siblings and private copies are removed,
    # and handle_errors prints one line (exit 143, 128 + the signal number).
    with terminate_as_exception():
        cli(prog_name="archivist")
