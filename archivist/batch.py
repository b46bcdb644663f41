"""A folder of map projects: each checked on its own, one summary for all.

A folder without an ``archivist.toml`` of its own whose subfolders hold
projects (each with its ``archivist.toml``) is a folder of projects:
``archivist check FOLDER`` loads and checks each project by itself (its own
manifest, CRS and layers; nothing of one project reaches another), and
``archivist init FOLDER`` refuses to write one manifest over them all.

The JSON form of a run is described by ``schemas/batch-report.schema.json``:
one entry per project with its exit status and its full report (the shape of
``schemas/report.schema.json``), or the one line that stopped it.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable

from ._version import __version__
from .errors import ArchivistError
from .manifest import MANIFEST_NAME
from .model import Report, Summary
from .progress import Progress

__all__ = ["ProjectRun", "FolderReport", "project_folders", "check_folder", "render_folder_text", "render_folder_json"]

SKIP_DIRS = {"__pycache__", "node_modules"}
MAX_DEPTH = 3  # folders below the one given that are looked into, as for guessing roles (archivist.infer)


@dataclass(frozen=True)
class ProjectRun:
    """One project of the folder: its path relative to the folder, its report or the line that stopped it."""

    name: str
    path: Path
    report: Report | None
    error: str | None
    exit_code: int

    @property
    def summary(self) -> Summary:
        return self.report.summary if self.report is not None else Summary()

    def to_dict(self) -> dict[str, Any]:
        return {
            "project": self.name,
            "path": str(self.path),
            "exit_code": self.exit_code,
            "error": self.error,
            "report": self.report.to_dict() if self.report is not None else None,
        }


@dataclass(frozen=True)
class FolderReport:
    """The runs of a folder of projects; ``exit_code`` is the worst of theirs (2 > 1 > 0)."""

    folder: str
    runs: tuple[ProjectRun, ...]

    @property
    def exit_code(self) -> int:
        return max((r.exit_code for r in self.runs), default=0)

    def to_dict(self) -> dict[str, Any]:
        return {
            "tool": "archivist",
            "version": __version__,
            "folder": self.folder,
            "exit_code": self.exit_code,
            "projects": [r.to_dict() for r in self.runs],
        }


def _is_bag(path: Path) -> bool:
    return (path / "bagit.txt").is_file()


def project_folders(path: str | Path) -> list[Path]:
    """The projects below ``path``: folders (to :data:`MAX_DEPTH` levels) holding an ``archivist.toml``.

    Empty when ``path`` is not a folder, has a manifest of its own (it is one
    project), or holds no project below it. A project's own subfolders and
    BagIt packages are not looked into; hidden folders are skipped.
    """
    root = Path(path)
    if not root.is_dir() or (root / MANIFEST_NAME).is_file() or _is_bag(root):
        return []
    found: list[Path] = []

    def walk(folder: Path, depth: int) -> None:
        try:
            entries = sorted((p for p in folder.iterdir() if p.is_dir()), key=lambda p: p.name)
        except OSError:
            return
        for sub in entries:
            if sub.name.startswith(".") or sub.name in SKIP_DIRS or sub.suffix.lower() == ".gdb" or _is_bag(sub):
                continue
            if (sub / MANIFEST_NAME).is_file():
                found.append(sub)
            elif depth < MAX_DEPTH:
                walk(sub, depth + 1)

    walk(root, 1)
    return found


def check_folder(
    path: str | Path,
    *,
    only: Iterable[str] = (),
    rules: Iterable[str] = (),
    strict: bool = False,
    progress: Progress | None = None,
    jobs: int = 1,
) -> FolderReport:
    """Check every project below the folder ``path``, each on its own.

    A project that cannot be read (its manifest is not TOML...) is one run
    with exit code 2 and the line that stopped it; the others are checked as
    usual. An unknown family or rule stops the whole run (ArchivistError),
    before any project is read.

    Raises
    ------
    ArchivistError
        ``path`` holds no project, or ``only``/``rules`` name an unknown family or rule.

    ``jobs`` is :func:`archivist.engine.check`'s: threads for each project's
    check in turn (0: every core).
    """
    from . import engine
    from .project import load_project
    from .registry import select

    root = Path(path)
    projects = project_folders(root)
    if not projects:
        raise ArchivistError(f"{root}: no map projects (folders with an {MANIFEST_NAME}) below it")
    only, rules = tuple(only), tuple(rules)
    try:
        select(only, rules)
    except KeyError as exc:
        raise ArchivistError(f"unknown {exc.args[0]}; 'archivist rules' lists them") from None
    progress = progress or Progress()
    runs = []
    for folder in projects:
        name = folder.relative_to(root).as_posix()
        try:
            with progress.step(f"project {name}"):
                project = load_project(folder, progress=progress)
                report = engine.check(project, only=only, rules=rules, progress=progress, jobs=jobs)
        except ArchivistError as exc:
            runs.append(ProjectRun(name, folder, None, str(exc), exc.exit_code if exc.exit_code else 2))
            continue
        runs.append(ProjectRun(name, folder, report, None, 1 if report.failed(strict) else 0))
    return FolderReport(str(root), tuple(runs))


def summary_rows(result: FolderReport) -> list[tuple[str, str, str, str, str]]:
    """The summary table: a header, then one row per project."""
    rows = [("project", "errors", "warnings", "notices", "exit")]
    for r in result.runs:
        if r.report is None:
            rows.append((r.name, "-", "-", "-", str(r.exit_code)))
        else:
            s = r.summary
            rows.append((r.name, str(s.errors), str(s.warnings), str(s.notices), str(r.exit_code)))
    return rows


def render_folder_text(result: FolderReport, *, color: bool | None = False) -> str:
    """Each project's text report under its name, then one table: project, errors, warnings, notices, exit status."""
    from .printable import printable
    from .report import write_text

    buf = io.StringIO()
    for r in result.runs:
        buf.write(f"=== {printable(r.name)} ===\n")
        if r.report is not None:
            write_text(r.report, buf, color=color)
        else:
            buf.write(f"Could not be checked: {printable(r.error or '')}\n")
        buf.write("\n")
    rows = summary_rows(result)
    widths = [max(len(printable(row[i])) for row in rows) for i in range(5)]
    n = len(result.runs)
    buf.write(f"{n} project{'' if n == 1 else 's'} in {printable(result.folder)}:\n")
    for row in rows:
        cells = [printable(row[0]).ljust(widths[0])] + [printable(c).rjust(w) for c, w in zip(row[1:], widths[1:])]
        buf.write("  " + "  ".join(cells).rstrip() + "\n")
    buf.write(f"Exit status {result.exit_code}: the worst of the projects' (0 no errors, 1 errors found, 2 could not run).\n")
    return buf.getvalue()


def render_folder_json(result: FolderReport) -> str:
    """The run as JSON (``schemas/batch-report.schema.json``), terminal-unsafe characters escaped."""
    import json

    from .printable import json_printable

    return json_printable(json.dumps(result.to_dict(), indent=2, ensure_ascii=False)) + "\n"


def refuse_folder_of_projects(path: str | Path) -> None:
    """Raise ArchivistError when ``path`` is a folder of projects: one manifest over them all would mix their layers."""
    found = project_folders(path)
    if found:
        names = ", ".join(p.relative_to(Path(path)).as_posix() for p in found[:5]) + (", …" if len(found) > 5 else "")
        raise ArchivistError(
            f"{path}: a folder of map projects ({names}), each with its own {MANIFEST_NAME}; one manifest over them would mix "
            "their layers: run archivist init inside a project folder, and archivist check on this folder checks each project"
        )
