"""Build a package in a temporary sibling and move it into place only when it is whole.

The staging folder is ``DIR/.<stem>.<pid>-<random>.part``: a hidden sibling of
the final package on the same file system, so the last step is a rename.
An exception, Ctrl-C or SIGTERM removes it. A run killed outright (SIGKILL,
power loss) can leave one behind; the next pack into the same folder removes
leftovers whose process is gone.
"""

from __future__ import annotations

import os
import re
import secrets
import shutil
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from ..fsutil import write_failed
from ..interrupt import Interrupted, terminate_as_exception

__all__ = ["Interrupted", "terminate_as_exception", "staging_dir", "staging_file", "move_into_place", "remove_leftovers", "remove"]


def _own_failure(exc: OSError, tmp: Path) -> bool:
    """Whether ``exc`` is about writing in ``tmp`` (or names no file, as a failed write does)."""
    name = exc.filename
    return name is None or str(name) == str(tmp) or str(name).startswith(f"{tmp}{os.sep}")


def _staging_name(stem: str, kind: str) -> str:
    return f".{stem}.{os.getpid()}-{secrets.token_hex(4)}.{kind}"


_LEFTOVER = re.compile(r"^\.(?P<stem>.+)\.(?P<pid>\d+)-[0-9a-f]{8}\.(?:part|old)$")


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's live process
        return True
    return True


def remove_leftovers(out_dir: Path, stems: set[str]) -> list[Path]:
    """Remove staging leftovers of ``stems`` in ``out_dir`` whose process is gone; return what was removed."""
    removed = []
    if not out_dir.is_dir():
        return removed
    for entry in sorted(out_dir.iterdir()):
        m = _LEFTOVER.match(entry.name)
        if not m or m.group("stem") not in stems or _alive(int(m.group("pid"))):
            continue
        remove(entry)
        removed.append(entry)
    return removed


def remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    elif path.exists() or path.is_symlink():
        path.unlink()


@contextmanager
def staging_dir(target: Path) -> Iterator[Path]:
    """A fresh hidden sibling folder of ``target``; removed on any exit unless it was moved into place.

    An OS error in making or filling it is an ``ArchivistError`` naming ``target``.
    """
    tmp = target.parent / _staging_name(target.name, "part")
    try:
        tmp.mkdir()
    except OSError as exc:
        raise write_failed(target, exc) from None
    try:
        yield tmp
    except OSError as exc:
        if not _own_failure(exc, tmp):
            raise
        raise write_failed(target, exc) from None
    finally:
        remove(tmp)


@contextmanager
def staging_file(target: Path) -> Iterator[Path]:
    """A hidden sibling path for the file ``target``; removed on any exit unless it was moved into place."""
    tmp = target.parent / _staging_name(target.name, "part")
    try:
        yield tmp
    except OSError as exc:
        if not _own_failure(exc, tmp):
            raise
        raise write_failed(target, exc) from None
    finally:
        remove(tmp)


def move_into_place(tmp: Path, target: Path) -> None:
    """Rename ``tmp`` to ``target``; an existing ``target`` is replaced only once ``tmp`` is whole.

    A file is replaced atomically (``os.replace``). A folder cannot be swapped
    atomically: the old one is first renamed aside, the new one renamed in,
    then the old one removed. An OS error is an ``ArchivistError`` naming ``target``.
    """
    try:
        _move_into_place(tmp, target)
    except OSError as exc:
        raise write_failed(target, exc) from None


def _move_into_place(tmp: Path, target: Path) -> None:
    if tmp.is_dir() and target.exists():
        aside = target.parent / _staging_name(target.name, "old")
        os.replace(target, aside)
        try:
            os.replace(tmp, target)
        except BaseException:
            os.replace(aside, target)
            raise
        remove(aside)
    else:
        os.replace(tmp, target)
