"""Safe output: write to a temporary sibling, rename at the end, never over a file without force."""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from .errors import ArchivistError


def guard_output(target: Path, *, force: bool, project_root: Path | None = None) -> Path:
    """Refuse an output inside the project folder, or over an existing file without ``force``."""
    target = Path(target)
    if project_root is not None:
        root = Path(project_root).resolve()
        resolved = target.resolve()
        if resolved == root or root in resolved.parents:
            raise ArchivistError(f"{target}: is inside the project folder {project_root}; archivist never writes there, choose another path")
    if target.exists() and not force:
        raise ArchivistError(f"{target}: already exists; use --force to replace it")
    if not target.parent.exists():
        raise ArchivistError(f"{target.parent}: no such folder")
    return target


@contextmanager
def atomic_path(target: Path, suffix: str = "") -> Iterator[Path]:
    """Yield a temporary sibling path of ``target``; on success it is renamed to ``target``.

    On any exception the temporary file is removed and ``target`` is untouched.
    """
    target = Path(target)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix + ".part", dir=target.parent)
    os.close(fd)
    os.unlink(tmp)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def atomic_write_text(target: Path, text: str) -> None:
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
