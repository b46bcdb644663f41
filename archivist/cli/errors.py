"""How a command stops: one printable line on stderr and an exit code, through one click exception.

Every subcommand's body is wrapped in :func:`handle_errors`, which turns what
stops a run into :class:`CommandFailed` (a :class:`click.ClickException`
carrying the exit code); click prints it (``archivist: <one line>``) and exits:

* :class:`~archivist.errors.ArchivistError`: its ``exit_code`` (2, "cannot
  run"; 1 for a refusal because the map has errors, e.g. ``PackRefused``);
* an ``OSError``: the file(s) it names and the system's reason, exit 2;
* Ctrl-C: exit 130; SIGTERM (:class:`~archivist.interrupt.Interrupted`):
  128 + the signal number, 143 (the shells' convention, common practice);
* as a last fence, an unexpected error (a bug): one line saying so, exit 2;
  set the environment variable ``ARCHIVIST_TRACEBACK=1`` to see its traceback.

Everything printed passes through :func:`archivist.printable.printable`.
This module imports nothing heavy: the command line loads it at start-up.
"""

from __future__ import annotations

import functools
import os
from typing import IO, Any, Callable, TypeVar, cast

import click

from ..errors import ArchivistError
from ..interrupt import Interrupted
from ..printable import printable

TRACEBACK_VARIABLE = "ARCHIVIST_TRACEBACK"
"""Set to 1 to let an unexpected error (a bug in archivist) show its traceback."""

NOT_WRITTEN = "an output not yet complete was not written"

F = TypeVar("F", bound=Callable[..., Any])


class CommandFailed(click.ClickException):
    """A run that stops: ``archivist: <message>`` as one printable line on stderr, and ``exit_code``."""

    def __init__(self, message: object, exit_code: int = 2) -> None:
        super().__init__(" ".join(printable(message).split()))
        # click declares exit_code on the class; click.exceptions.Exit sets it per instance the same way
        self.exit_code = exit_code  # type: ignore[misc]

    def format_message(self) -> str:
        """The one line, without the ``archivist:`` prefix."""
        return self.message

    def show(self, file: IO[Any] | None = None) -> None:
        """Print ``archivist: <message>`` on stderr (or ``file``)."""
        click.echo(f"archivist: {self.format_message()}", file=file, err=file is None)


def os_error_line(exc: OSError) -> str:
    """One line for an OS error: the file(s) it names and the system's reason."""
    reason = exc.strerror or " ".join(str(exc).split()) or type(exc).__name__
    names = [str(n) for n in (exc.filename, exc.filename2) if n is not None]
    return f"{' -> '.join(names)}: {reason}" if names else reason


def as_command_failed(exc: BaseException) -> CommandFailed | None:
    """The :class:`CommandFailed` for what stopped a run, or None for an unexpected error (a bug)."""
    if isinstance(exc, CommandFailed):
        return exc
    if isinstance(exc, ArchivistError):
        return CommandFailed(exc, getattr(exc, "exit_code", 2))
    if isinstance(exc, KeyboardInterrupt):
        return CommandFailed(f"interrupted (Ctrl-C); {NOT_WRITTEN}", 130)
    if isinstance(exc, Interrupted):
        return CommandFailed(f"{exc}; {NOT_WRITTEN}", 128 + int(exc.signum))
    if isinstance(exc, OSError):
        return CommandFailed(os_error_line(exc))
    return None


def handle_errors(func: F) -> F:
    """Run ``func`` so that whatever stops it leaves as one :class:`CommandFailed` (see the module docstring).

    click's own exceptions (usage errors, ``Abort``, ``Exit``) and
    ``SystemExit`` pass through. With ``ARCHIVIST_TRACEBACK=1`` an
    unexpected error is re-raised as it is.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except (click.ClickException, click.exceptions.Abort, click.exceptions.Exit):
            raise
        except (ArchivistError, KeyboardInterrupt, Interrupted, OSError) as exc:
            raise cast(CommandFailed, as_command_failed(exc)) from None
        except Exception as exc:  # the last fence: a bug must not show a mapper a traceback
            if os.environ.get(TRACEBACK_VARIABLE, "") not in ("", "0"):
                raise
            detail = " ".join(str(exc).split())
            raise CommandFailed(f"internal error ({type(exc).__name__}{': ' + detail if detail else ''}); "
                                f"please report it; set {TRACEBACK_VARIABLE}=1 to see the traceback") from None

    return cast(F, wrapper)
