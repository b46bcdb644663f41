"""Safe output, in one place: every command writes through this module.

* :func:`guard_output` (and :func:`guard_outputs` for several at once)
  refuses an output inside the project or archive being read (or, for a
  folder output, one that holds it), over an existing file without
  ``force``, of the wrong kind, or in a folder that is missing or is a file.
* :func:`atomic_path` / :func:`atomic_write_text` write one file to a hidden
  temporary sibling and rename it onto the target at the end;
  :func:`atomic_dataset` does the same for a GDAL data set (a GeoPackage),
  built under its own name inside a hidden sibling folder.
* :func:`staging_dir`, :func:`staging_file` and :func:`move_into_place`
  build a whole folder (a package, an unpacked project) in a hidden sibling
  and move it into place only when it is complete;
  :func:`remove_leftovers` clears what a killed run left behind.
* :func:`create_new` writes a file that must not exist yet and never
  replaces one (``archivist init``).

Hidden siblings are named ``.<name>.<pid>-<random>.part``: on the same file
system as the target, so the last step is a rename. An exception, Ctrl-C or
SIGTERM (see :mod:`archivist.interrupt`) removes them. A run killed outright
(SIGKILL, power loss) can leave one behind; :func:`remove_leftovers` removes
those whose process is gone.

A failure to write (read-only or full file system, no permission, a parent
that is a file) is an :class:`OutputError`, an :class:`ArchivistError`
naming the output and the system's reason, never a traceback.

What it does not cover: a folder cannot be swapped atomically (see
:func:`move_into_place`), and a file system without rename atomicity (some
network mounts) gets what its rename gives.
"""

from __future__ import annotations

import os
import re
import secrets
import shutil
from contextlib import contextmanager
from pathlib import Path
from typing import Iterable, Iterator, Sequence

from .errors import ArchivistError

__all__ = [
    "OutputError",
    "os_reason",
    "write_failed",
    "guard_output",
    "guard_outputs",
    "atomic_path",
    "atomic_write_text",
    "atomic_dataset",
    "staging_dir",
    "staging_file",
    "move_into_place",
    "remove_leftovers",
    "remove",
    "create_new",
]


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


# ---------------------------------------------------------------- guarding a path

def guard_output(
    target: Path,
    *,
    force: bool,
    project_root: Path | None = None,
    kind: str | None = None,
    parent_may_be_missing: bool = False,
    refuse_ancestor: bool = False,
    hint: str = "choose another path",
) -> Path:
    """Refuse an output that would harm what archivist reads, or replace a file without ``force``.

    Parameters
    ----------
    target
        The output (a file or a folder).
    force
        Whether an existing ``target`` may be replaced.
    project_root
        The project or archive folder being read: ``target`` may not be inside it.
    kind
        ``"folder"``, or what kind of file ``target`` is (``"file"``,
        ``"zip file"``): an existing ``target`` of the other kind is refused
        even with ``force``. None: not checked.
    parent_may_be_missing
        The caller creates the parent folder (``pack --out``); otherwise a
        missing parent is refused.
    refuse_ancestor
        Also refuse a ``target`` that is a folder holding ``project_root``
        (a folder output replaced whole, as ``pack`` does; callers that
        check more, as ``unpack`` does, say why in their own words).
    hint
        What the refusal of a path inside the project tells the user to do.

    Raises
    ------
    ArchivistError
        One line naming ``target`` and the reason.
    """
    target = Path(target)
    if project_root is not None:
        root = Path(project_root).resolve()
        resolved = target.resolve()
        if resolved == root or root in resolved.parents:
            raise ArchivistError(f"{target}: is inside the project folder {project_root}; archivist never writes there, {hint}")
        if refuse_ancestor and resolved in root.parents:
            raise ArchivistError(f"{target}: would replace a folder that holds the project {project_root}; {hint}")
    try:
        exists = target.exists()
        parent = target.parent
        if not exists and parent.exists() and not parent.is_dir():
            raise ArchivistError(f"{target}: cannot write ({parent} is not a folder)")
        parent_exists = parent.exists()
        is_dir = target.is_dir()
    except OSError as exc:
        raise write_failed(target, exc) from None
    if exists and not force:
        raise ArchivistError(f"{target}: already exists; use --force to replace it")
    if exists and kind is not None and is_dir != (kind == "folder"):
        raise ArchivistError(f"{target}: exists and is not a {kind}; remove it first")
    if not parent_exists and not parent_may_be_missing:
        raise ArchivistError(f"{target.parent}: no such folder")
    return target


def guard_outputs(
    outputs: Sequence[tuple[Path | None, str]],
    *,
    force: bool,
    project_roots: Iterable[Path | None] = (None,),
) -> None:
    """:func:`guard_output` for each ``(path, option)`` given (None: not asked for), and no two naming the same file.

    Every output is guarded against every one of ``project_roots`` (the
    projects or archives the command reads).
    """
    roots = list(project_roots) or [None]
    seen: dict[Path, str] = {}
    for target, flag in outputs:
        if target is None:
            continue
        key = Path(target).resolve()
        if key in seen:
            raise ArchivistError(f"{target}: {flag} and {seen[key]} name the same file")
        seen[key] = flag
        for root in roots:
            guard_output(Path(target), force=force, project_root=root)


# ---------------------------------------------------------------- hidden siblings

_LEFTOVER = re.compile(r"^\.(?P<stem>.+)\.(?P<pid>\d+)-[0-9a-f]{8}\.(?:part|old)$")


def _staging_name(stem: str, kind: str) -> str:
    return f".{stem}.{os.getpid()}-{secrets.token_hex(4)}.{kind}"


def _own_failure(exc: OSError, tmp: Path) -> bool:
    """Whether ``exc`` is about writing in ``tmp`` (or names no file, as a failed write does)."""
    name = exc.filename
    # also its relatives: the folder's files, a journal GDAL or SQLite keeps beside it
    return name is None or str(name).startswith(str(tmp))


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
    removed: list[Path] = []
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
    """Remove the file, link or folder ``path`` if it is there (a folder with all it holds)."""
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    elif path.exists() or path.is_symlink():
        path.unlink()


def _quiet_remove(path: Path) -> None:
    try:
        remove(path)
    except OSError:
        pass  # nothing was renamed into place; a leftover hidden part is all that remains


@contextmanager
def _staged(target: Path, tmp: Path) -> Iterator[None]:
    """Around work on ``tmp``: an OS error about it becomes an :class:`OutputError` naming ``target``;
    ``tmp`` is removed on any exit (after a successful move into place there is nothing left to remove)."""
    try:
        yield
    except OutputError:
        raise  # already one line naming its output
    except OSError as exc:
        if not _own_failure(exc, tmp):
            raise
        raise write_failed(target, exc) from None
    finally:
        _quiet_remove(tmp)


@contextmanager
def staging_dir(target: Path) -> Iterator[Path]:
    """A fresh hidden sibling folder of ``target``; removed on any exit unless it was moved into place.

    An OS error in making or filling it is an :class:`OutputError` naming ``target``.
    """
    target = Path(target)
    tmp = target.parent / _staging_name(target.name, "part")
    try:
        tmp.mkdir()
    except OSError as exc:
        raise write_failed(target, exc) from None
    with _staged(target, tmp):
        yield tmp


@contextmanager
def staging_file(target: Path) -> Iterator[Path]:
    """A hidden sibling path for the file ``target``; removed on any exit unless it was moved into place.

    An OS error in writing it is an :class:`OutputError` naming ``target``;
    one about another file (an input read inside the block) keeps its own name.
    """
    target = Path(target)
    tmp = target.parent / _staging_name(target.name, "part")
    with _staged(target, tmp):
        yield tmp


def move_into_place(tmp: Path, target: Path) -> None:
    """Rename ``tmp`` to ``target``; an existing ``target`` is replaced only once ``tmp`` is whole.

    A file is replaced atomically (``os.replace``). A folder cannot be swapped
    atomically: the old one is first renamed aside, the new one renamed in,
    then the old one removed. An OS error is an :class:`OutputError` naming ``target``.
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


# ---------------------------------------------------------------- one file, all or nothing

@contextmanager
def atomic_path(target: Path) -> Iterator[Path]:
    """Yield a hidden temporary sibling path of ``target``; on success it is renamed to ``target``.

    On any exception the temporary file is removed and ``target`` is untouched.
    An OS error in writing or renaming the temporary file becomes an
    :class:`OutputError` naming ``target``.
    """
    target = Path(target)
    with staging_file(target) as tmp:
        yield tmp
        move_into_place(tmp, target)


def atomic_write_text(target: Path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``target`` through :func:`atomic_path`."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")


@contextmanager
def atomic_dataset(target: Path) -> Iterator[Path]:
    """Yield a path with ``target``'s own name (GDAL picks a driver by the extension) in a hidden sibling folder.

    On success the file is renamed onto ``target``; the folder, with any
    journal GDAL or SQLite left beside the file, is removed on any exit.
    A GDAL error while writing is an :class:`ArchivistError` naming ``target``.
    """
    from pyogrio.errors import DataLayerError, DataSourceError

    target = Path(target)
    with staging_dir(target) as folder:
        work = folder / target.name
        try:
            yield work
        except (DataSourceError, DataLayerError) as exc:
            raise ArchivistError(f"{target}: cannot write ({' '.join(str(exc).split())})") from None
        move_into_place(work, target)


def create_new(target: Path, text: str, *, exists_hint: str) -> None:
    """Write ``text`` (UTF-8, LF line ends) to ``target`` only if it does not exist: complete or not at all.

    The text is written to a hidden sibling first, then hard-linked to
    ``target``, which fails if ``target`` appeared meanwhile: an existing
    file is never replaced. On a file system without hard links (FAT) an
    exclusive create is used instead.

    Raises
    ------
    ArchivistError
        ``target`` exists (``"<target>: already exists; <exists_hint>"``), or
        it could not be written (:class:`OutputError`).
    """
    target = Path(target)
    exists = ArchivistError(f"{target}: already exists; {exists_hint}")
    with staging_file(target) as tmp:
        with open(tmp, "x", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        try:
            os.link(tmp, target)
        except FileExistsError:
            raise exists from None
        except OSError:
            # a file system without hard links (FAT): exclusive create instead
            try:
                with open(target, "x", encoding="utf-8", newline="\n") as fh:
                    fh.write(text)
            except FileExistsError:
                raise exists from None
            except OSError as exc:
                raise write_failed(target, exc) from None
