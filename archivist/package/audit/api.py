"""``audit()``: open an archive safely, gather its facts, and run every rule on the map inside."""

from __future__ import annotations

import dataclasses
from contextlib import ExitStack
from pathlib import Path
from typing import Iterable

from ... import registry
from ...engine import run_rules
from ...errors import ArchivistError
from ...model import Report
from ...progress import Progress
from ..safe import DEFAULT_LIMITS, Limits, open_archive
from ..source import load_archive_project
from .facts import archive_paths
from .gather import gather


def _scrub(report: Report, *roots: Path) -> Report:
    """Findings name files as they are in the archive, never by the private copy's temporary path."""
    def clean(text: str) -> str:
        for root in sorted({str(r) for r in roots}, key=len, reverse=True):
            text = text.replace(root + "/", "").replace(root, ".")
        return text

    findings = tuple(dataclasses.replace(f, message=clean(f.message), layer=None if f.layer is None else clean(f.layer)) for f in report.findings)
    return dataclasses.replace(report, findings=findings, notes=tuple(clean(n) for n in report.notes))


def audit(
    archive: str | Path,
    *,
    limits: Limits | None = None,
    only: Iterable[str] = (),
    rules: Iterable[str] = (),
    workdir: str | Path | None = None,
    progress: Progress | None = None,
) -> Report:
    """Audit an archive (zip or folder) and return a report in the same form as ``check``.

    Parameters
    ----------
    archive
        A zip file or a folder: an archivist package or any other archive of map data.
    limits
        Caps on members, size and compression ratio (:class:`~archivist.package.safe.Limits`);
        defaults sized for real deposits.
    only, rules
        Families and rule ids to run, as for :func:`archivist.check`; all when both are empty.
    workdir
        Where the private temporary copy is made (default: the system's temporary folder).
    progress
        A :class:`archivist.progress.Progress` told about each step; silent when None.

    Returns
    -------
    Report
        ``report.ok`` is True when the archive is fit for reuse (no errors).

    Raises
    ------
    ArchivistError
        The archive cannot be opened: no such path, not a zip, corrupt, or hostile
        (a path escape, a link, a duplicate name, over a cap).

    Examples
    --------
    >>> report = audit("tarrowmere-1.0.0.zip")  # doctest: +SKIP
    >>> report.summary.errors  # doctest: +SKIP
    0
    """
    try:
        selected = registry.select(only, rules)
    except KeyError as exc:
        raise ArchivistError(f"unknown {exc.args[0]}; 'archivist rules' lists them") from None
    limits = limits or DEFAULT_LIMITS
    progress = progress or Progress()
    with ExitStack() as stack:
        with progress.step(f"opening {Path(archive).name}"):
            arc = stack.enter_context(open_archive(archive, limits, workdir=workdir))
        with progress.step("reading the map"):
            opened = load_archive_project(arc)
        with progress.step("verifying checksums and metadata"):
            facts = gather(opened)
        project = opened.project
        project.archive = facts
        # files held back by the screen are findings of archive-file-unopened, not notes as well
        shown = tuple(f"{rel} was not opened:" for rel, _ in opened.unopened)
        project.notes = [n for n in project.notes if not n.startswith(shown)] if shown else project.notes
        if project.manifest_path is None and any(r.id == "metadata-incomplete" for r in selected):
            # its subject is archivist.toml, which this archive does not have: the archive rules report what is missing
            selected = [r for r in selected if r.id != "metadata-incomplete"]
            facts.notes.append("metadata-incomplete was not run: the archive has no archivist.toml; the archive rules say which metadata are missing.")
        report = run_rules(project, selected, progress)
        report = _scrub(report, arc.root, archive_paths(opened)[1])
    size = sum(m.size for m in arc.members)
    what = "an archivist package (a BagIt bag)" if facts.is_package else "not a BagIt bag: read as a plain archive of map data"
    notes = [
        f"Audited a private copy of {arc.label} ({arc.kind}, {len(arc.members)} files, {size} bytes): {what}. "
        "Nothing in the archive was run or imported.",
        *facts.notes,
        *[n for n in report.notes],
    ]
    return dataclasses.replace(report, project=str(Path(archive)), notes=tuple(dict.fromkeys(notes)))
