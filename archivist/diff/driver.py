"""The ``diff`` API: open both sides, run each kind of matching, and order what they found."""

from __future__ import annotations

from contextlib import ExitStack
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..errors import ArchivistError
from ..project import MapProject, crs_label
from .common import Found, start, to_map
from .lines import match_lines
from .points import match_points
from .polygons import compare_extent, match_polygons
from .reshapes import fold_reshapes
from .result import LAYER_ORDER, Change, DiffReport
from .tables import match_analyses, match_units

if TYPE_CHECKING:
    from ..package.safe import Limits

UNREADABLE = ("layer-missing", "layer-unreadable", "table-not-utf8", "field-missing")  # load problems that make a side unfit to compare


def compare(old: MapProject, new: MapProject) -> tuple[list[Change], list[str]]:
    """Every change from ``old`` to ``new``, in report order, and the notes on how they were compared.

    Each step takes the comparison and what earlier steps returned, and
    returns what it found; none reads state another step left behind.
    """
    cmp, crs = start(old, new)
    polygons = match_polygons(cmp)
    lines = match_lines(cmp)
    folded = fold_reshapes(polygons.reshapes, polygons.found.changes, lines.changes, cmp.tol)
    units = match_units(cmp, folded.polygons)
    extent = compare_extent(cmp)
    samples = match_points(cmp, "samples")
    structures = match_points(cmp, "structures")
    analyses = match_analyses(cmp)
    steps: list[Found] = [crs, polygons.found, lines, units.found, extent, samples, structures, analyses]
    out = [c for s in steps for c in s.layer_changes]
    out += units.found.changes + units.polygons + folded.reshaped + folded.lines
    out += extent.changes + samples.changes + structures.changes + analyses.changes
    out = to_map(out, cmp.frame)
    for c in out:
        if not c.message.endswith("."):
            c.message += "."
    order = {name: i for i, name in enumerate(LAYER_ORDER)}
    out.sort(key=lambda c: (order.get(c.layer, 99), c.change, -(c.y if c.y is not None else -np.inf), c.x if c.x is not None else np.inf, c.features))
    return out, [n for s in steps for n in s.notes]


def diff(old: str | Path | MapProject, new: str | Path | MapProject, *, limits: Limits | None = None) -> DiffReport:
    """Compare two versions of a map and return every change from OLD to NEW.

    Parameters
    ----------
    old, new
        Project folders (or manifests), archivist packages (folders or zips),
        or loaded :class:`MapProject` objects. Archives are opened with the
        same safety rules as ``archivist audit``.
    limits
        Caps for opening archives (:class:`archivist.package.safe.Limits`).

    Returns
    -------
    DiffReport
        ``changes`` holds one :class:`Change` per changed feature; an
        unchanged map gives an empty tuple.

    Raises
    ------
    ArchivistError
        A side cannot be opened or read.

    Examples
    --------
    >>> report = diff("tarrowmere-1.0.0.zip", "remap")  # doctest: +SKIP
    >>> [c.change for c in report.changes]  # doctest: +SKIP
    ['polygon-recoded', 'line-moved']
    """
    from ..package.source import open_map

    with ExitStack() as stack:
        sides: list[tuple[MapProject, str]] = []
        for item in (old, new):
            if isinstance(item, MapProject):
                sides.append((item, str(item.manifest_path or item.root)))
            else:
                opened = stack.enter_context(open_map(item, limits=limits))
                sides.append((opened.project, str(item)))
        for project, label in sides:
            unreadable = [h for h in project.problems if h.rule in UNREADABLE]
            if unreadable:
                raise ArchivistError(f"{label}: {unreadable[0].message.rstrip('.')}; run 'archivist check' on it first")
        (old_project, old_label), (new_project, new_label) = sides
        changes, notes = compare(old_project, new_project)
        return DiffReport(old=old_label, new=new_label, crs=crs_label(old_project.crs), changes=tuple(changes),
                          notes=tuple(notes), crs_object=old_project.crs)
