"""``archivist audit ARCHIVE``."""

from __future__ import annotations

import re
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, TypeVar

import click

from ..errors import ArchivistError
from ..registry import FAMILIES
from .errors import handle_errors
from .options import details_option, emit_report, only_help, progress_for, progress_options

if TYPE_CHECKING:
    from ..package.safe import Limits

_SIZE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([kKMGT]i?B|B|bytes)?\s*$")
_FACTOR = {None: 1, "B": 1, "bytes": 1, "kB": 1000, "KB": 1000, "MB": 1000**2, "GB": 1000**3, "TB": 1000**4,
           "KiB": 1024, "kiB": 1024, "MiB": 1024**2, "GiB": 1024**3, "TiB": 1024**4}


def parse_size(text: str) -> int:
    """``16GiB``, ``500 MB`` or a number of bytes, as bytes."""
    m = _SIZE.match(text)
    if not m or m.group(2) not in _FACTOR:
        raise ArchivistError(f"--max-size '{text}': give a size such as 16GiB, 500MB or a number of bytes")
    return int(float(m.group(1)) * _FACTOR[m.group(2)])


F = TypeVar("F", bound=Callable[..., Any])


class CapOption(click.Option):
    """An option whose help names the default cap of :data:`~archivist.package.safe.DEFAULT_LIMITS`.

    The default is read when the help is shown, so that loading the command
    line (``archivist --help``) does not load the package modules.
    """

    def get_help_record(self, ctx: click.Context) -> tuple[str, str] | None:
        """click's help line, with ``{max_ratio}``, ``{max_members}`` in the help text filled in."""
        from ..package.safe import DEFAULT_LIMITS as d

        record = super().get_help_record(ctx)
        if record is None:
            return None
        return record[0], record[1].format(max_ratio=f"{d.max_ratio:g}", max_members=d.max_members)


def limit_options(func: F) -> F:
    """``--max-members``, ``--max-size`` and ``--max-ratio``: the caps for opening an untrusted archive."""
    func = click.option("--max-ratio", cls=CapOption, type=float, default=None, metavar="R",
                        help="Refuse a member that expands more than R times (default {max_ratio}).")(func)
    func = click.option("--max-size", default=None, metavar="SIZE",
                        help="Refuse an archive that expands beyond SIZE, e.g. 16GiB (the default).")(func)
    func = click.option("--max-members", cls=CapOption, type=int, default=None, metavar="N",
                        help="Refuse an archive of more than N members (default {max_members}).")(func)
    return func


def make_limits(max_members: int | None, max_size: str | None, max_ratio: float | None) -> Limits:
    """The caps of :data:`~archivist.package.safe.DEFAULT_LIMITS` with the options given on the command line."""
    from dataclasses import replace

    from ..package.safe import DEFAULT_LIMITS

    changes: dict[str, Any] = {}
    if max_members is not None:
        changes["max_members"] = max_members
    if max_size is not None:
        changes["max_total_bytes"] = parse_size(max_size)
    if max_ratio is not None:
        changes["max_ratio"] = max_ratio
    return replace(DEFAULT_LIMITS, **changes)


@click.command("audit", short_help="Audit ARCHIVE (a zip or a folder) before reusing it.")
@click.argument("archive", type=click.Path(path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text", show_default=True, help="Report format.")
@click.option("--output", "-o", type=click.Path(path_type=Path), help="Write the report to FILE instead of stdout.")
@click.option("--strict", is_flag=True, help="Warnings fail the run too (exit 1).")
@click.option("--only", "only", multiple=True, metavar="FAMILY", help=only_help(FAMILIES))
@click.option("--rule", "rules", multiple=True, metavar="RULE", help="Run only this rule (repeatable).")
@click.option("--force", is_flag=True, help="Replace an existing output file.")
@limit_options
@details_option
@progress_options
@handle_errors
def audit_command(archive: Path, fmt: str, output: Path | None, strict: bool, only: tuple[str, ...], rules: tuple[str, ...],
                  force: bool, max_members: int | None, max_size: str | None, max_ratio: float | None,
                  quiet: bool, verbose: bool, details: bool = False) -> None:
    """Audit ARCHIVE (a zip or a folder) before reusing it.

    The archive is inspected before anything is extracted: absolute paths,
    '..', links, duplicate names and zip bombs are refused. A private copy is
    audited; nothing in it is run. For an archivist package every checksum,
    the descriptor, the DataCite and PROV records are verified and every check
    runs on the packaged map; for any archive, the reuse-readiness findings
    say what to ask the original authors for.

    Exit 0: fit for reuse (no errors). 1: problems (errors, or warnings with
    --strict). 2: the archive cannot be opened.
    """
    from ..fsutil import guard_output
    from ..package.audit import audit

    limits = make_limits(max_members, max_size, max_ratio)
    if output is not None:
        guard_output(output, force=force, project_root=archive if Path(archive).is_dir() else None)
    with progress_for(quiet, verbose) as progress:
        report = audit(archive, limits=limits, only=only, rules=rules, progress=progress)
    emit_report(report, fmt, output, details)
    sys.exit(1 if report.failed(strict) else 0)
