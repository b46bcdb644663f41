"""Safe output: write to a temporary sibling, rename at the end, never over a file without force.

A failure to write (read-only or full file system, no permission, a parent
that is a file) is an :class:`ArchivistError` naming the output file and
the system's reason, never a traceback.
"""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from .errors import ArchivistError


class OutputError(ArchivistError, OSError):
    """An output could not be written: one line naming it (exit 2), and still an ``OSError`` for API callers."""


def os_reason(exc: OSError) -> str:
    """The system's reason for ``exc`` in words (``strerror``, e.g. ``Read-only file system``), else its text."""
    return exc.strerror or " ".join(str(exc).split()) or type(exc).__name__


def write_failed(target: Path, exc: OSError) -> OutputError:
    """The one-line error for an output ``target`` that could not be written."""
    err = OutputError(f"{target}: cannot write ({os_reason(exc)})")
    err.errno = exc.errno
    return err


def guard_output(target: Path, *, force: bool, project_root: Path | None = None) -> Path:
    """Refuse an output inside the project folder, or over an existing file without ``force``."""
    target = Path(target)
    if project_root is not None:
        root = Path(project_root).resolve()
        resolved = target.resolve()
        if resolved == root or root in resolved.parents:
            raise ArchivistError(f"{target}: is inside the project folder {project_root}; archivist never writes there, choose another path")
    try:
        exists = target.exists()
        parent = target.parent
        if not exists and parent.exists() and not parent.is_dir():
            raise ArchivistError(f"{target}: cannot write ({parent} is not a folder)")
        parent_exists = parent.exists()
    except OSError as exc:
        raise write_failed(target, exc) from None
    if exists and not force:
        raise ArchivistError(f"{target}: already exists; use --force to replace it")
    if not parent_exists:
        raise ArchivistError(f"{target.parent}: no such folder")
    return target


@contextmanager
def atomic_path(target: Path, suffix: str = "") -> Iterator[Path]:
    """Yield a temporary sibling path of ``target``; on success it is renamed to ``target``.

    On any exception the temporary file is removed and ``target`` is untouched.
    An OS error in making, writing or renaming the temporary file (or a GDAL
    error while writing it) becomes an :class:`ArchivistError` naming ``target``.
    """
    from pyogrio.errors import DataLayerError, DataSourceError

    target = Path(target)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix + ".part", dir=target.parent)
        os.close(fd)
        os.unlink(tmp)
    except OSError as exc:
        raise write_failed(target, exc) from None
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    except OSError as exc:
        # an error on another file (an input read inside the block) keeps its own name
        names = {None, str(tmp_path), str(target)}
        if exc.filename is not None and str(exc.filename) not in names and not str(exc.filename).startswith(str(tmp_path)):
            raise
        raise write_failed(target, exc) from None
    except (DataSourceError, DataLayerError) as exc:
        raise ArchivistError(f"{target}: cannot write ({' '.join(str(exc).split())})") from None
    finally:
        try:
            if tmp_path.exists():
                tmp_path.unlink()
        except OSError:
            pass  # nothing was renamed into place; a leftover hidden part is all that remains


def atomic_write_text(target: Path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``target`` through :func:`atomic_path`."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
