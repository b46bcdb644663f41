"""The mark of a folder that an archivist command made, so that ``--force`` never loses the mapper's work.

``unpack`` and ``repair`` each write a new folder that the mapper then works
in. The folder holds one hidden file more, its mark (:class:`Mark`): which
command made it and the SHA-256 of every file it wrote. ``--force`` replaces
an existing folder only when its mark shows that command made it and nothing
was added or changed since; otherwise one line says which file stays and
why. A folder of the mapper's own (no mark), a copy edited in a GIS, a file
dropped into it: all are left alone. The mark is hidden (a leading dot), so
role guessing never sees it, and ``check`` and ``pack`` read only the files
the manifest names, so it never ends up in a package.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable

from ._version import __version__
from .errors import ArchivistError
from .filebytes import sha256_file


def listing(folder: Path) -> tuple[dict[str, os.stat_result], list[str]]:
    """(regular files under ``folder`` by relative path -> stat, entries that are links or special files)."""
    files: dict[str, os.stat_result] = {}
    odd: list[str] = []
    for here, dirs, names in os.walk(folder, followlinks=False):
        base = Path(here)
        for name in sorted(dirs):
            if (base / name).is_symlink():
                odd.append((base / name).relative_to(folder).as_posix())
        for name in sorted(names):
            p = base / name
            rel = p.relative_to(folder).as_posix()
            st = p.lstat()
            if p.is_symlink() or not p.is_file():
                odd.append(rel)
            else:
                files[rel] = st
    return files, sorted(odd)


@dataclass(frozen=True)
class Mark:
    """The mark ``name`` that the command ``archivist <command>`` leaves in a folder it made (``doing``: its -ing form)."""

    name: str
    kind: str
    command: str
    doing: str

    def write(self, folder: Path, files: dict[str, str] | None = None, **extra: Any) -> dict[str, str]:
        """Write the mark into ``folder``: ``extra`` and the SHA-256 of ``files`` (relative path -> digest), or of
        every file in the folder when None. Returns the files recorded."""
        if files is None:
            found, _ = listing(folder)
            files = {rel: sha256_file(folder / rel) for rel in sorted(found) if rel != self.name}
        record = {"kind": self.kind, "archivist": __version__, **extra, "files": dict(sorted(files.items()))}
        (folder / self.name).write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        os.chmod(folder / self.name, 0o644)
        return files

    def recorded(self, target: Path) -> dict[str, str]:
        """The files and SHA-256 that the mark in ``target`` records; ArchivistError when there is none."""
        marker = target / self.name
        if not marker.is_file() or marker.is_symlink():
            raise ArchivistError(
                f"{target}: already exists and was not made by 'archivist {self.command}' (it has no {self.name}); "
                f"{self.command} replaces only a folder it made, so choose a new folder"
            )
        try:
            record = json.loads(marker.read_text(encoding="utf-8"))
            files = record["files"] if isinstance(record, dict) and record.get("kind") == self.kind else None
            if not isinstance(files, dict) or not all(
                isinstance(k, str) and isinstance(v, str) and re.fullmatch(r"[0-9a-f]{64}", v) for k, v in files.items()
            ):
                raise ValueError(f"not the record {self.command} writes")
        except (OSError, UnicodeDecodeError, ValueError, KeyError) as exc:
            raise ArchivistError(f"{marker}: cannot be read as the record of 'archivist {self.command}' ({exc}); "
                                 "the folder is left alone, choose a new one") from None
        return files

    def replaceable(self, target: Path, holds: Iterable[tuple[Path, str]] = ()) -> dict[str, tuple[int, int]]:
        """Check that the existing folder ``target`` may be replaced by a new run of the command.

        It may when it is not and does not hold any path of ``holds`` (path,
        what it is in words), is not the current folder or one that holds it,
        and is either empty or a folder the command made (its mark is there)
        holding no file the command did not write and no file whose content
        differs from what it wrote. Returns the size and modification time (ns)
        of each file, to see just before the swap that nothing changed
        meanwhile (:meth:`still_same`).

        Raises
        ------
        ArchivistError
            One line naming the folder (or the file in it) and why it stays.
        """
        target = Path(target)
        if target.is_symlink():
            raise ArchivistError(f"{target}: is a link; {self.command} writes a new folder, choose one that does not exist")
        if not target.is_dir():
            raise ArchivistError(f"{target}: exists and is not a folder")
        resolved = target.resolve()
        for path, what in holds:
            kept = Path(path).resolve()
            if kept == resolved or resolved in kept.parents:
                raise ArchivistError(f"{target}: holds {what}; {self.command} never replaces it, choose a new folder")
        cwd = Path.cwd().resolve()
        if resolved == cwd or resolved in cwd.parents:
            raise ArchivistError(f"{target}: is the current folder or holds it; {self.command} never replaces it, choose a new folder")
        files, odd = listing(target)
        if not files and not odd:  # an empty folder (made for the output, say): nothing in it to lose
            return {}
        recorded = self.recorded(target)
        extra = odd + sorted(rel for rel in files if rel != self.name and rel not in recorded)
        if extra:
            more = f" (and {len(extra) - 1} more)" if len(extra) > 1 else ""
            raise ArchivistError(f"{target}: holds '{extra[0]}'{more}, which 'archivist {self.command}' did not write; "
                                 "replacing the folder would lose it, so it is left alone")
        for rel in sorted(files):
            if rel != self.name and sha256_file(target / rel) != recorded[rel]:
                raise ArchivistError(f"{target}: '{rel}' was changed after 'archivist {self.command}' wrote it; replacing "
                                     "the folder would lose the change, so it is left alone")
        return {rel: (st.st_size, st.st_mtime_ns) for rel, st in files.items()}

    def exists(self, target: Path, before: dict[str, tuple[int, int]]) -> ArchivistError:
        """The refusal of an existing ``target`` that :meth:`replaceable` allows (``before``), without ``--force``."""
        what = "empty" if not before else f"made by an earlier 'archivist {self.command}', unchanged"
        return ArchivistError(f"{target}: already exists ({what}); use --force to replace it")

    def still_same(self, target: Path, before: dict[str, tuple[int, int]]) -> None:
        """ArchivistError when a file of ``target`` was added, removed or changed since :meth:`replaceable` said ``before``."""
        files, odd = listing(target)
        now = {rel: (st.st_size, st.st_mtime_ns) for rel, st in files.items()}
        if odd or now != before:
            changed = sorted(set(now) ^ set(before) | {r for r in now.keys() & before.keys() if now[r] != before[r]} | set(odd))
            raise ArchivistError(f"{target}: '{changed[0]}' changed while {self.doing}; the folder is left alone and nothing was written")
