"""Folding polygon reshapes into the change that caused them.

The two polygons either side of a moved contact, or the polygon a new polygon
was carved from, are reshaped by that one edit. Each piece of area a reshaped
polygon gained or lost is attached to the line change (moved, added, removed)
or polygon change (added, removed) whose linework runs along at least half of
the piece's boundary; that change then carries the area gained and lost per
unit. Pieces no change explains stay as a ``polygon-reshaped`` change. A
line added with the field ``generated`` true (drawn from the polygon
boundaries by ``archivist repair``) explains nothing: the polygons came
first, so their reshape stays a change of its own, as the repair log lists it.
"""

from __future__ import annotations

import dataclasses
from collections import defaultdict
from dataclasses import dataclass
from typing import Any

import shapely

from .common import describe_fields, fmt_area, fmt_units, point_of
from .polygons import Reshape
from .result import Change

CAUSE_LINES = ("line-moved", "line-added", "line-removed")
CAUSE_POLYGONS = ("polygon-added", "polygon-removed")


@dataclass(frozen=True)
class Folded:
    """The polygon and line changes with the pieces they explain attached, and the reshapes left unexplained."""

    polygons: list[Change]
    lines: list[Change]
    reshaped: list[Change]


def _copy(c: Change) -> Change:
    return dataclasses.replace(c, fields=dict(c.fields), area_gained=dict(c.area_gained), area_lost=dict(c.area_lost), pieces=list(c.pieces))


def fold_reshapes(reshapes: list[Reshape], polygon_changes: list[Change], line_changes: list[Change], tol: float) -> Folded:
    """Attach the pieces of reshaped polygons to the change that explains them; the rest stay reshapes.

    The changes given are not modified: the causes come back as completed copies.
    """
    polygons = [_copy(c) if c.change in CAUSE_POLYGONS and c.geometry is not None else c for c in polygon_changes]
    lines = [_copy(c) if c.change in CAUSE_LINES else c for c in line_changes]
    causes: list[tuple[Change, Any]] = []
    for c in lines:
        # a line drawn from the polygon boundaries follows them: it explains no change of theirs
        if c.change in CAUSE_LINES and not c.generated:
            parts = [g for g in (c.old_geometry, c.new_geometry) if g is not None]
            causes.append((c, shapely.union_all(parts)))
    for c in polygons:
        if c.change in CAUSE_POLYGONS and c.geometry is not None:
            causes.append((c, c.geometry.boundary))
    zones = [shapely.buffer(g, 2 * tol + 1e-9) for _, g in causes]
    tree = shapely.STRtree(zones) if zones else None
    leftovers: list[Change] = []
    for r in reshapes:
        a, b = r.old, r.new
        pieces = [(p, "", r.nunit) for p in shapely.get_parts(shapely.difference(b, a))] + [
            (p, r.ounit, "") for p in shapely.get_parts(shapely.difference(a, b))
        ]
        pieces = [(p, o, n) for p, o, n in pieces if p.area > tol * tol and p.geom_type == "Polygon"]
        unexplained = []
        for piece, ou, nu in pieces:
            best, best_len = None, 0.0
            if tree is not None:
                ring = piece.boundary
                for z in tree.query(ring, predicate="intersects"):
                    shared = shapely.length(shapely.intersection(ring, zones[z]))
                    if shared > best_len:
                        best, best_len = z, shared
            if best is not None and best_len >= 0.5 * piece.boundary.length:
                _add_piece(causes[best][0], piece, ou, nu, r.nid if nu else r.oid)
            else:
                unexplained.append((piece, ou, nu))
        if unexplained or r.fields:
            leftovers.append(_reshaped(r, unexplained))
    for c, _ in causes:
        _finish_cause(c)
    return Folded(polygons, lines, leftovers)


def _reshaped(r: Reshape, unexplained: list[tuple[Any, str, str]]) -> Change:
    gained: dict[str, float] = defaultdict(float)
    lost: dict[str, float] = defaultdict(float)
    for p, ou, nu in unexplained:
        if nu:
            gained[nu] += p.area
        else:
            lost[ou] += p.area
    geom = shapely.union_all([p for p, _, _ in unexplained]) if unexplained else r.new
    x, y = point_of(geom)
    msg = f"Polygon {r.nid} ({r.nunit}) reshaped"
    bits = []
    if gained:
        bits.append(f"gained {fmt_area(sum(gained.values()))}")
    if lost:
        bits.append(f"lost {fmt_area(sum(lost.values()))}")
    if bits:
        msg += ": " + ", ".join(bits)
    if r.fields:
        msg += f"; {describe_fields(r.fields)}"
    return Change("polygon-reshaped", "units", (r.nid,), msg, x, y, (r.oid,), (r.nid,), r.fields, dict(gained), dict(lost),
                  polygons=(r.nid,), geometry=geom, pieces=unexplained)


def _add_piece(cause: Change, piece: Any, old_unit: str, new_unit: str, polygon: str) -> None:
    cause.pieces.append((piece, old_unit, new_unit))
    if new_unit:
        cause.area_gained[new_unit] = cause.area_gained.get(new_unit, 0.0) + float(piece.area)
    else:
        cause.area_lost[old_unit] = cause.area_lost.get(old_unit, 0.0) + float(piece.area)
    if polygon and polygon not in cause.polygons:
        cause.polygons = cause.polygons + (polygon,)


def _finish_cause(c: Change) -> None:
    """Complete the message of a change that absorbed polygon pieces."""
    if c.change.startswith("line-"):
        if c.area_gained or c.area_lost:
            c.message += f"; {_gain_loss(c)}"
            area = shapely.union_all([p for p, _, _ in c.pieces])
            c.geometry = area
            c.x, c.y = point_of(area)
    elif c.change == "polygon-added":
        lost = dict(c.area_lost)
        new_unit = next(iter(c.area_gained), "")
        if lost and set(lost) == {new_unit}:
            c.change = "polygon-split"
            c.message = c.message.replace(" added", " split off") + f" from polygon(s) {', '.join(p for p in c.polygons if p not in c.features)}"
        elif lost:
            c.message += f", taking {fmt_units(lost)}"
    elif c.change == "polygon-removed":
        gained = dict(c.area_gained)
        old_unit = next(iter(c.area_lost), "")
        if gained and set(gained) == {old_unit}:
            c.change = "polygon-merged"
            c.message = c.message.replace(" removed", " merged") + f" into polygon(s) {', '.join(c.polygons)}"
        elif gained:
            c.message += f", given to {fmt_units(gained)}"


def _gain_loss(c: Change) -> str:
    bits = []
    if c.area_gained:
        bits.append(", ".join(f"{u or '(no unit)'} gained {fmt_area(a)}" for u, a in sorted(c.area_gained.items(), key=lambda kv: -kv[1])))
    if c.area_lost:
        bits.append(", ".join(f"{u or '(no unit)'} lost {fmt_area(a)}" for u, a in sorted(c.area_lost.items(), key=lambda kv: -kv[1])))
    return ", ".join(bits)
