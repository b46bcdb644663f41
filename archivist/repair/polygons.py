"""The polygon repairs: overlaps, thin gaps, near-coincident edges, slivers, same-unit neighbours.

Each repair finds its defects with the check's own analyses (the coverage
analysis of :mod:`archivist.analysis.coverage`, the sliver thresholds, the
same-neighbour rule) run on the working copy, so what it repairs is what
``archivist check`` reports, and works on whole arrays (shapely 2, numpy,
STRtree); the Python loops run over defects, never over every polygon.

Bounds every repair keeps (tests hold them against GEOS):

* a polygon changes only by the area logged for it (an overlap piece it lost,
  a gap piece it gained, a sliver or neighbour merged into it) and by vertex
  moves no longer than the snapping distance (``[checks] tolerance``);
* a unit code changes only where a polygon is merged into another (logged);
* running a repair on its own output changes nothing.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Iterable

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely.errors import GEOSException

from ..analysis.alignment import Alignment
from ..analysis.arrays import group_tables, merge_by_group, present, segment_lines, segments, spans, union_by_group, widths
from ..analysis.context import CheckContext
from ..analysis.coverage import mean_width, noise_floor
from ..analysis.guard import elementwise
from ..analysis.messages import ABOVE
from ..analysis.nearness import dwithin_pairs, length_near, near_parts
from ..analysis.polygons import polygonal
from ..project import Layer
from .model import FEATURE_ID, SOURCE_LAYER, Change, Left, RepairSettings, RepairState
from .registry import repair

MERGE_STRATEGY = {"longest-border": "longest_border", "larger": "max_area"}


# ---------------------------------------------------------------- the working copy as the check sees it

def _context(state: RepairState) -> CheckContext:
    """A check context over the working copy (its units and lines in place of the project's).

    One per version of the working units: while a repair leaves them as they
    are, the next one reads the same analyses (the check before the repairs
    hands in its own, :data:`CHECKED`, made for the units as read).
    """
    hit = state.analyses.get(CHECKED)
    if hit is not None and hit[0] is state.units:
        return hit[1]
    ctx = _new_context(state)
    state.analyses[CHECKED] = (state.units, ctx)
    return ctx


CHECKED = "context"  # key of RepairState.analyses: the check context of the working units
# key of RepairState.analyses: (a lines frame, the last check context made over it). The line network depends on
# the lines alone: a context made for new units over the same lines frame takes over that one's network
LINES_SEEN = "context-of-lines"
NETWORK = "analysis.lines"  # the key a check context keeps its line network under


def _new_context(state: RepairState) -> CheckContext:
    project = state.project
    layers = dict(project.layers)
    assert state.units is not None
    old = project.layers["units"]
    layers["units"] = state.carry("units", Layer("units", old.path, old.source, state.units,
                                                 np.asarray(state.units[FEATURE_ID], dtype=object), old.spec))
    if state.lines is not None and "lines" in project.layers:
        old_lines = project.layers["lines"]
        layers["lines"] = state.carry("lines", replace(old_lines, frame=state.lines, ids=np.asarray(state.lines[FEATURE_ID], dtype=object),
                                                       parts=()))
    ctx = CheckContext(replace(project, layers=layers, problems=[], notes=[]), edge_basis=state.edge_basis)
    if state.aligned:  # placed as the check before the repairs placed the project: every layer as it is
        ctx.provide("analysis.alignment", Alignment(layers=dict(layers)))
    seen = state.analyses.get(LINES_SEEN)
    known = seen[1].computed(NETWORK) if seen is not None and seen[0] is state.lines else None
    if known is not None:  # the same lines, the same layer made of them: the same network
        ctx.provide(NETWORK, *known)
    state.analyses[LINES_SEEN] = (state.lines, ctx)
    return ctx


def _geoms(state: RepairState) -> np.ndarray:
    assert state.units is not None
    return np.array(state.units.geometry.array, dtype=object)


def _set(state: RepairState, geoms: np.ndarray, keep: np.ndarray | None = None) -> None:
    """Put ``geoms`` (one per row) back into the working units; drop the rows where ``keep`` is False."""
    assert state.units is not None
    frame = state.units
    col = frame.geometry.name
    # an overlay can leave a line or point beside the area (a GeometryCollection): only the area is kept
    odd = np.flatnonzero(~shapely.is_missing(geoms) & ~np.isin(shapely.get_type_id(geoms), (3, 6)))
    if len(odd):
        geoms = geoms.copy()
        fixed = polygonal(geoms[odd])
        geoms[odd] = np.where(shapely.is_missing(fixed), shapely.Polygon(), fixed)
    frame = frame.copy()
    frame[col] = gpd.GeoSeries(geoms, index=frame.index, crs=frame.crs)
    if keep is not None:
        frame = frame.iloc[np.flatnonzero(keep)]
    state.units = frame


def _codes(state: RepairState) -> np.ndarray:
    assert state.units is not None
    if state.unit_field is None or state.unit_field not in state.units.columns:
        return np.full(len(state.units), "", dtype=object)
    col = state.units[state.unit_field]
    values = col.to_numpy(dtype=object)
    if pd.api.types.infer_dtype(values, skipna=False) == "string":  # text in every row: stripped by str.strip, in C
        return pd.Series(values, dtype=object).str.strip().to_numpy(dtype=object)
    return np.array(["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip() for v in col], dtype=object)


def _scale(geoms: np.ndarray) -> float:
    """The largest absolute coordinate of the polygons (at least 1)."""
    if not len(geoms):
        return 1000.0
    b = shapely.total_bounds(geoms[~shapely.is_missing(geoms)])
    return max(float(np.nanmax(np.abs(b))) if np.isfinite(b).all() else 1.0, 1.0)


def _eps(geoms: np.ndarray) -> float:
    return 1e-12 * _scale(geoms)


def above_noise(parts: np.ndarray, floor: float) -> np.ndarray:
    """The parts wider on average than ``floor`` (:func:`archivist.analysis.coverage.noise_floor`): narrower ones
    are rounding left by GEOS's overlay (on a 10^5-polygon map, a 146 m sliver of 2.4e-9 m² was listed as a
    part of a gap left), which check does not report either."""
    return parts[mean_width(parts) > floor] if len(parts) else parts


def _far_if_cut(polys: np.ndarray, pieces: np.ndarray, reach: float) -> np.ndarray:
    """Whether cutting each piece out of its polygon would move the boundary further than ``reach``.

    A cut GEOS cannot make (a robustness failure on degenerate input) counts
    as too far, so the piece goes to the other polygon where that one can be
    cut; where neither can, the cut below fails and the overlap is listed.
    """
    cut, failed, _ = elementwise(shapely.difference, polys, pieces)
    far = np.ones(len(polys), dtype=bool)
    ok = ~failed
    far[ok] = _shift(polys[ok], cut[ok]) > reach
    return far


def _shift(before: np.ndarray, after: np.ndarray) -> np.ndarray:
    """Largest vertex displacement between two versions of each polygon: the Hausdorff distance of their boundaries."""
    out = np.zeros(len(before))
    ok = ~shapely.is_missing(before) & ~shapely.is_missing(after)
    ok &= ~shapely.is_empty(before) & ~shapely.is_empty(after)
    if ok.any():
        out[ok] = shapely.hausdorff_distance(shapely.boundary(before[ok]), shapely.boundary(after[ok]))
    return out


def _border(piece: np.ndarray, other: np.ndarray, eps: float) -> np.ndarray:
    """Length of the boundary of each ``piece`` that runs along the boundary of ``other`` (to within ``eps``,
    :func:`archivist.analysis.nearness.length_near`)."""
    if not len(piece):
        return np.zeros(0)
    return length_near(shapely.boundary(piece), shapely.boundary(other), eps)


def _age_rank(state: RepairState, codes: np.ndarray) -> np.ndarray:
    """The middle of each unit's age span (Ma; NaN when the legend gives no readable age)."""
    out = np.full(len(codes), np.nan)
    for i, c in enumerate(codes.tolist()):  # one lookup per polygon named in a defect
        span = state.ages.get(c)
        if span is not None:
            out[i] = (span.base_ma + span.top_ma) / 2.0
    return out


def _winner(state: RepairState, settings: RepairSettings, a: np.ndarray, b: np.ndarray, pieces: np.ndarray,
            geoms: np.ndarray, codes: np.ndarray, eps: float, wide: np.ndarray | None = None) -> tuple[np.ndarray, list[str]]:
    """For each overlap piece between polygons a and b (row positions), which one keeps it (True: a), and why.
    ``wide``: the pieces wider than the tolerance, the only ones a line drawn along an edge decides (None: all)."""
    # the piece's border with what is left of a runs along b's boundary, and the reverse
    with_a = _border(pieces, geoms[b], eps)
    with_b = _border(pieces, geoms[a], eps)
    longest = with_a >= with_b
    choice, notes = longest, ["longest border"] * len(a)
    if settings.overlap == "larger":
        area_a, area_b = shapely.area(geoms[a]), shapely.area(geoms[b])
        choice = np.where(area_a == area_b, longest, area_a > area_b)
        notes = ["larger polygon"] * len(a)
    if settings.overlap in ("younger", "older"):
        age_a, age_b = _age_rank(state, codes[a]), _age_rank(state, codes[b])
        known = np.isfinite(age_a) & np.isfinite(age_b) & (age_a != age_b)
        pick = age_a < age_b if settings.overlap == "younger" else age_a > age_b
        choice = np.where(known, pick, longest)
        notes = [f"{settings.overlap} unit" if k else "longest border (ages not known or equal in the legend)" for k in known]
    if settings.overlap_by_lines:
        side = np.zeros(len(a), dtype=np.int8)
        at = np.arange(len(a)) if wide is None else np.flatnonzero(wide)
        side[at] = _drawn_sides(state, a[at], b[at], pieces[at], geoms, eps, settings.tolerance)
        choice = np.where(side != 0, side > 0, choice)
        notes = ["a line drawn along its edge" if s_ else n for s_, n in zip(side.tolist(), notes)]
    return choice, notes


LINE_SHARE = 0.5  # an edge of an overlap is drawn when a line runs along more than this share of it: our own choice


def _drawn_sides(state: RepairState, a: np.ndarray, b: np.ndarray, pieces: np.ndarray, geoms: np.ndarray, eps: float,
                 tol: float) -> np.ndarray:
    """Per overlap piece between polygons a and b (row positions): 1 where a contact or fault of the working lines
    runs along the piece's edge that is a's boundary (over :data:`LINE_SHARE` of it, within the tolerance ``tol``)
    and not along its edge that is b's, so that a keeps it; -1 the reverse; 0 where neither or both are drawn.

    The piece lies between the two edges: a's boundary inside b and b's
    inside a. A line drawn along a's edge says the boundary is there, and
    the piece, inside a, is a's (a polygon grown past the contact its
    neighbour was drawn to is cut back to it: on the topology benchmark's map
    of 10^4 polygons at 1 %, 16 contacts drawn on such boundaries were left
    up to 2 m off the copy's boundaries when the grown polygon kept its
    overlap by the longest border). A piece both of whose edges the line
    runs along is undecided. :func:`resolve_overlaps` asks only of pieces
    wider than the tolerance: cutting a narrower one out of either polygon
    moves a boundary no further than the tolerance, and snap-lines puts a
    line within the tolerance onto it (at 10^5 polygons with 1 % defects,
    6 974 pieces 0.5 m wide at a 1 m tolerance: 0.8 s of measuring for
    nothing).
    """
    out = np.zeros(len(a), dtype=np.int8)
    if state.lines is None or not len(state.lines) or not len(a) or tol <= 0:
        return out
    ctx = _context(state)
    if "lines" not in ctx.project.layers:
        return out
    net = ctx.line_network()
    rim = shapely.boundary(pieces)
    k, f = dwithin_pairs(net.tree, net.geoms, rim, tol)
    keep = np.isin(net.roles[f], ("contact", "fault"))
    k, f = k[keep], f[keep]
    if not len(k):
        return out
    near = np.unique(k)
    parts, j = shapely.get_parts(net.geoms[f], return_index=True)
    drawn = merge_by_group(parts, np.searchsorted(near, k)[j], len(near))  # the lines near each piece, as one
    share = []
    for own in (a[near], b[near]):
        edge = near_parts(rim[near], shapely.boundary(geoms[own]), eps)  # the piece's edge that is this polygon's
        length = shapely.length(edge)
        along = length_near(edge, drawn, tol * ABOVE)
        share.append(np.where(length > 0, along / np.where(length > 0, length, 1.0), 0.0) > LINE_SHARE)
    out[near] = np.where(share[0] & ~share[1], 1, np.where(share[1] & ~share[0], -1, 0))
    return out


# ---------------------------------------------------------------- overlaps

@repair("resolve-overlaps", order=10)
def resolve_overlaps(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Overlaps given to one of the two polygons by the declared rule.

    Every piece of ground covered by two unit polygons (GEOS intersections,
    as ``unit-overlap`` and ``unit-edge-mismatch`` find them) is cut out of
    one of the two. Who keeps it is ``[repair] overlap``: ``longest-border``
    (the polygon whose remaining part shares the longer border with the
    piece; the convention of GEOS's coverage cleaning), ``larger`` (the
    larger polygon), ``younger`` or ``older`` (by the legend's ages, read by
    :mod:`archivist.vocab.ages`: a younger intrusion or superficial deposit
    usually overprints, common practice); where the ages are unknown or
    equal, the longest border decides and the log says so. Before the rule,
    the linework (``[repair] overlap_by_lines``, default true): where a
    contact or fault runs along one of the two edges of a piece wider than
    the tolerance and not along the other, the polygon whose edge the line
    draws keeps it (:func:`_drawn_sides`). Where cutting
    the piece out of the chosen polygon would move its boundary further than
    the snapping distance (``[checks] tolerance``) and cutting it out of the
    other would not, the other gives it up (the log says so).

    Threshold: pieces larger than ``[repair] overlap_max_area_mm2`` at map
    scale (default 1 mm², the sliver area of ``[checks]``: our own choice)
    are left and listed, as is a polygon lying wholly inside another.
    Never: it does not decide which unit a large overlap belongs to; that is
    the geologist's judgement.
    """
    if state.units is None or not len(state.units):
        return [], []
    ctx = _context(state)
    units = ctx.units()
    cov = ctx.coverage()
    state.overlaps_left = []
    if not cov.overlaps:
        return [], []
    geoms = _geoms(state)
    codes = _codes(state)
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    eps = _eps(geoms)
    pieces = np.array([p.geom for p in cov.overlaps], dtype=object)
    a = units.rows[np.array([p.units[0] for p in cov.overlaps])]
    b = units.rows[np.array([p.units[1] for p in cov.overlaps])]
    area = shapely.area(pieces)
    wide = np.array([p.width for p in cov.overlaps], dtype=float)  # NaN where GEOS could not measure it: asked
    wide = np.where(np.isnan(wide), np.inf, wide)
    whole = shapely.equals(pieces, geoms[a]) | shapely.equals(pieces, geoms[b])
    small = (area <= settings.overlap_max_area) & ~whole
    left = [Left("resolve-overlaps", "units", (str(ids[i]), str(ids[j])),
                 (f"an overlap of {ar:.2f} m², larger than the {settings.overlap_max_area:.2f} m² a repair may give away"
                  if not w else "one polygon lies wholly inside the other"), p, float(ar))
            for i, j, p, ar, w in zip(a[~small], b[~small], pieces[~small], area[~small], whole[~small])]
    state.overlaps_left += [(str(ids[i]), str(ids[j]), p, True) for i, j, p in zip(a[~small], b[~small], pieces[~small])]
    a, b, pieces, area = a[small], b[small], pieces[small], area[small]
    if not len(a):
        return [], left
    keep_a, why = _winner(state, settings, a, b, pieces, geoms, codes, eps, wide[small] > settings.tolerance * ABOVE)
    # where cutting the piece out of the polygon the rule chose would move its boundary further than the snapping
    # distance (a piece reaching into a corner where three polygons meet) and cutting it out of the other would
    # not, the other gives it up: the move stays within the snapping distance wherever one of the two can
    reach = settings.tolerance * ABOVE
    # the cut out of the polygon the rule chose first; the other's only where that one is too far
    lose = np.where(keep_a, b, a)
    far_lose = _far_if_cut(geoms[lose], pieces, reach)
    far_keep = np.zeros(len(a), dtype=bool)
    if far_lose.any():
        at = np.flatnonzero(far_lose)
        far_keep[at] = _far_if_cut(geoms[np.where(keep_a, a, b)[at]], pieces[at], reach)
    flip = far_lose & ~far_keep
    keep_a = keep_a ^ flip
    why = [f"{w}; the other would move further than the snapping distance" if f else w for w, f in zip(why, flip)]
    winner, loser = np.where(keep_a, a, b), np.where(keep_a, b, a)
    order = np.argsort(loser, kind="stable")
    new = geoms.copy()
    losers, starts = np.unique(loser[order], return_index=True)
    failed = np.zeros(len(loser), dtype=bool)
    # one cut per polygon losing area, all at once: its pieces joined (a row of a table, in order), then taken out
    count = np.diff(np.r_[starts, len(order)])
    joined = np.empty(len(losers), dtype=object)
    bad_join = np.zeros(len(losers), dtype=bool)
    reasons: dict[int, str] = {}
    for rows, table in group_tables(pieces, np.searchsorted(losers, loser), len(losers)):
        joined[rows], bad_join[rows], why_join = elementwise(lambda t: shapely.union_all(t, axis=1), table)
        reasons.update(zip(rows[bad_join[rows]].tolist(), why_join))
    ok = np.flatnonzero(~bad_join)
    cut, bad_cut, why_cut = elementwise(shapely.difference, new[losers[ok]], joined[ok])
    new[losers[ok[~bad_cut]]] = cut[~bad_cut]
    reasons |= dict(zip(ok[bad_cut].tolist(), why_cut))
    for g in sorted(reasons):  # left as it is, and said so; snapping may still resolve a thin one
        lo, group = losers[g], order[starts[g]:starts[g] + count[g]]
        failed[group] = True
        what = joined[g] if not bad_join[g] else shapely.geometrycollections(list(pieces[group]))
        left.append(Left("resolve-overlaps", "units", (str(ids[lo]),), f"GEOS could not cut the overlap out of it ({reasons[g]})",
                         what, float(area[group].sum())))
        state.overlaps_left += [(str(ids[winner[k]]), str(ids[lo]), pieces[k], False) for k in group.tolist()]
    winner, loser, pieces, area, why = winner[~failed], loser[~failed], pieces[~failed], area[~failed], [w for w, f in zip(why, failed) if not f]
    # ground under three polygons or more whose choices go round (each keeps its overlap with the next and loses
    # the one with the one before) would be lost by all of them: a gap where the map had none. It stays with one
    pieces, new = _kept_once(geoms, new, winner, loser, pieces, noise_floor(_scale(geoms)))
    some = ~shapely.is_empty(pieces)
    winner, loser, pieces, why = winner[some], loser[some], pieces[some], [w for w, k in zip(why, some) if k]
    area = shapely.area(pieces)
    empty = np.zeros(len(new), dtype=bool)  # a polygon given away whole (one filed empty is kept: no repair's change)
    empty[loser] = shapely.is_empty(new[loser])
    _set(state, new, ~empty)
    if not empty.any() and _still_covered(new, winner, loser, pieces):
        state.analyses[GAPS_OF] = (state.units, (units, cov))
    moved = _shift(geoms[loser], new[loser])
    changes = [Change("resolve-overlaps", "units", (str(ids[w]), str(ids[lo])), (str(ids[w]),) + (() if empty[lo] else (str(ids[lo]),)),
                      (str(codes[w]), str(codes[lo])), float(ar), float(mv), geoms[lo], p, f"overlap kept by {ids[w]} ({note})")
               for w, lo, p, ar, mv, note in zip(winner, loser, pieces, area, moved, why)]
    return changes, left


def _kept_once(geoms: np.ndarray, new: np.ndarray, winner: np.ndarray, loser: np.ndarray, pieces: np.ndarray,
               floor: float) -> tuple[np.ndarray, np.ndarray]:
    """The overlap pieces and cut polygons with no ground lost by every polygon over it.

    Each overlap piece is cut out of its loser only, so ground under three
    polygons or more is kept by one of them unless their choices go round in
    a circle (a keeps its overlap with b, b with c, c with a): then each
    loses it and nobody keeps it. Only a polygon that keeps one piece and
    loses another can be part of such a circle, so only the pieces of such
    polygons are measured (GEOS difference). Ground no polygon holds after
    the cut stays with the one among those over it that keeps the most of
    their overlaps with each other (ties: the first in the layer): it is
    taken out of the pieces that polygon loses, so the change log moves it
    nowhere. Returns the pieces (some may be empty) and the polygons as cut.
    """
    both = np.flatnonzero(np.isin(winner, loser))
    if not len(both):
        return pieces, new
    try:
        lost = above_noise(_parts(shapely.union_all(shapely.difference(pieces[both], new[winner[both]]))), floor)
    except GEOSException:
        return pieces, new
    if not len(lost):
        return pieces, new
    tree = shapely.STRtree(pieces)
    kept: list[tuple[int, np.ndarray, Any]] = []  # (the polygon keeping it, the pieces it no longer loses, the ground)
    for part in lost:  # few: where three polygons or more overlap
        ks = tree.query(part, predicate="intersects")
        ks = ks[shapely.area(shapely.intersection(pieces[ks], part)) > 0]
        over = np.unique(np.r_[winner[ks], loser[ks]])
        try:
            hole = shapely.difference(part, shapely.union_all(new[over]))  # empty unless their choices go round
        except GEOSException:
            continue
        for u in above_noise(_parts(hole), floor):
            kk = ks[shapely.area(shapely.intersection(pieces[ks], u)) > 0]
            wins = {int(o): int((winner[kk] == o).sum()) for o in over.tolist()}
            owner = min(wins, key=lambda o: (-wins[o], o))
            kept.append((owner, kk[loser[kk] == owner], u))
    if not kept:
        return pieces, new
    pieces, new = pieces.copy(), new.copy()
    for owner, mine, u in kept:
        pieces[mine] = shapely.difference(pieces[mine], u)
    for o in {owner for owner, _, _ in kept}:  # one per polygon keeping such ground
        new[o] = shapely.difference(geoms[o], shapely.union_all(pieces[loser == o]))
    return pieces, new


GAPS_OF = "gaps"  # key of RepairState.analyses: the units and coverage whose gaps are still the working units' gaps


def _still_covered(new: np.ndarray, winner: np.ndarray, loser: np.ndarray, pieces: np.ndarray) -> bool:
    """Whether every overlap piece cut out of a polygon is still covered by the polygon that kept it.

    Each piece was cut out of its loser only and stays in its winner, so the
    ground the units cover (and with it every gap) is as the coverage
    analysis found it, unless a winner lost a piece of its own there (three
    polygons overlapping, each losing to the next): those pieces are
    measured (GEOS difference), the others need not be. Rounding of the cut
    itself is below what ``check`` reports (its noise floor).
    """
    both = np.isin(winner, loser)
    if not both.any():
        return True
    try:
        rest = shapely.difference(pieces[both], new[winner[both]])
    except GEOSException:
        return False
    return bool((mean_width(rest[~shapely.is_empty(rest)]) <= noise_floor(_scale(new))).all())


# ---------------------------------------------------------------- gaps

@repair("fill-gaps", order=20)
def fill_gaps(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Thin gaps given to the neighbour with the longest shared border.

    A gap (ground inside the map extent no unit covers, as ``unit-gap`` and
    ``unit-edge-mismatch`` find it) no wider than the gap width (the width of
    its largest inscribed circle, GEOS) is added to the polygon around it
    that shares the longest stretch of its boundary. The gap width is
    ``[checks] tolerance`` (the width below which ``check`` calls a gap a
    misfit of the edge), or ``[repair] gap_width_mm`` at map scale.
    Never: a wider gap is left and listed (only a geologist can say what
    is there), as is a gap with no polygon along it; a thin gap lying on the
    map frame within the tolerance (no defect for ``check``) is not touched.
    """
    if state.units is None or not len(state.units):
        return [], []
    kept = state.analyses.get(GAPS_OF)
    if kept is not None and kept[0] is state.units:  # resolve-overlaps uncovered no ground: the gaps found before it
        units, cov = kept[1]
    else:
        ctx = _context(state)
        units, cov = ctx.units(), ctx.coverage()
    todo = [p for p in cov.gaps if not (p.on_frame and p.width <= cov.tol * ABOVE)]
    if not todo:
        return [], []
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    codes = _codes(state)
    geoms = _geoms(state)
    left: list[Left] = []
    fill = []
    for p in todo:  # one per gap
        around = tuple(str(ids[units.rows[k]]) for k in p.units)
        if p.width > settings.gap_width * ABOVE:
            left.append(Left("fill-gaps", "units", around, f"a gap up to {p.width:.2f} m wide, wider than the gap width "
                             f"{settings.gap_width:.2f} m", p.geom, p.area))
        elif not p.units:
            left.append(Left("fill-gaps", "units", (), "a gap with no polygon along it", p.geom, p.area))
        else:
            fill.append(p)
    if not fill:
        return [], left
    eps = _eps(geoms)
    gaps = np.array([p.geom for p in fill], dtype=object)
    # the polygons along each gap, found again with a little slack: the overlay that cut the gap out of the
    # extent may leave its edge a rounding error off a polygon's own, and that polygon is then missed
    live = units.rows
    gi, k = units.tree.query(gaps, predicate="dwithin", distance=eps)
    ui = live[k]
    shared = _border(gaps[gi], geoms[ui], eps)
    along = shared > 4 * eps
    gi, ui, shared = gi[along], ui[along], shared[along]
    lone = np.setdiff1d(np.arange(len(fill)), gi)
    left += [Left("fill-gaps", "units", (), "a gap with no polygon along it", fill[g].geom, fill[g].area) for g in lone]
    if not len(gi):
        return [], left
    # per gap, its neighbours by shared border, longest first (ties: the first in the file); the first takes
    # the part of the gap within reach of it (twice the gap's own width, at most the gap width), and each part of
    # the rest goes the same way among the others (ranked by their border with that part), so no polygon's
    # boundary moves further than the gap width;
    # what no neighbour reaches (a corner along the map edge) is left and listed. A gap along one polygon goes
    # to it whole.
    order = np.lexsort((ui, -shared, gi))
    gi, ui = gi[order], ui[order]
    reach = settings.gap_width  # not the admission slack: a buffer of it already reaches the bound, to within rounding
    floor = noise_floor(_scale(geoms))  # the differences that cut the gap leave rounding slivers: never a part left
    pieces: list[tuple[int, Any, int]] = []  # (polygon, piece, gap)
    filled, start, count = np.unique(gi, return_index=True, return_counts=True)
    # the neighbour with the longest border along the whole gap takes what is within reach of it (all such gaps
    # at once); each part of the rest then goes by the same rule on its own (the neighbour with the longest
    # border along that part): ranked by the whole gap instead, a neighbour the part merely touches at its end
    # would take a thin part lying along another one, a spike that snapping then folds away further than the
    # snapping distance.
    # Within twice the gap's own width (and the gap width): the strip a polygon lost lies within that of it,
    # while a branch of the gap running on between two other polygons (their edges misfit) reaches farther;
    # taken as far as the gap width, its end became a spike on the first polygon, which snapping then folded
    # away further than the snapping distance (1.001 m at a 1 m tolerance on a generated map)
    widths = np.array([fill[g].width for g in filled.tolist()])
    several = count > 1
    first_taken = np.full(len(filled), None, dtype=object)
    first_rest = np.full(len(filled), None, dtype=object)
    if several.any():
        first_taken[several], first_rest[several] = _take_many(gaps[filled[several]], ui[start[several]], geoms,
                                                                np.minimum(reach, 2.0 * widths[several]), eps)
    for j, g in enumerate(filled.tolist()):  # one per gap filled
        nbrs = ui[start[j]:start[j] + count[j]]
        if len(nbrs) == 1:
            pieces.append((int(nbrs[0]), gaps[g], g))
            continue
        near = min(reach, 2.0 * widths[j])
        if first_taken[j] is not None:
            pieces.append((int(nbrs[0]), first_taken[j], g))
        rest = first_rest[j]
        unreached = []
        others = nbrs[1:]
        for part in _parts(rest).tolist():  # one per piece of a gap the first neighbour does not reach
            if not len(others):
                unreached.append(part)
                continue
            ranked = others[np.lexsort((others, -_border(np.full(len(others), part, dtype=object), geoms[others], eps)))]
            for n in ranked.tolist():
                part = _take(part, n, geoms, near, eps, pieces, int(g))
                if shapely.area(part) <= 0:
                    break
            else:
                unreached.append(part)
        # what no neighbour reaches within the gap width (a corner of a gap along the map edge, where the edge
        # and not a polygon bounds it) stays: giving it to one would move that polygon further
        parts = _parts(shapely.union_all(unreached)) if unreached else np.zeros(0, dtype=object)
        parts = above_noise(parts, floor)
        if len(parts):
            around = tuple(str(ids[k]) for k in nbrs)
            left.append(Left("fill-gaps", "units", around, f"part of a gap farther than the gap width {settings.gap_width:.2f} m "
                             "from every polygon along it", shapely.union_all(parts), float(shapely.area(parts).sum())))
    if not pieces:
        return [], left
    # one piece per polygon and gap (the parts of one gap a polygon took, joined)
    joined: dict[tuple[int, int], list[Any]] = {}
    for t, p, g in pieces:
        joined.setdefault((t, g), []).append(p)
    pieces = [(t, ps[0] if len(ps) == 1 else shapely.union_all(ps), g) for (t, g), ps in joined.items()]
    target = np.array([t for t, _, _ in pieces], dtype=np.int64)
    parts = np.array([p for _, p, _ in pieces], dtype=object)
    new = geoms.copy()
    tidx = np.argsort(target, kind="stable")
    targets, starts = np.unique(target[tidx], return_index=True)
    failed = np.zeros(len(target), dtype=bool)
    for t, group in zip(targets, np.split(tidx, starts[1:])):  # one per polygon gaining area
        try:
            new[t] = shapely.union_all(np.r_[[new[t]], parts[group]])
        except GEOSException as exc:
            failed[group] = True
            left.append(Left("fill-gaps", "units", (str(ids[t]),), f"GEOS could not join the gap to it ({exc})",
                             shapely.union_all(parts[group]), float(shapely.area(parts[group]).sum())))
    pieces = [x for x, f in zip(pieces, failed) if not f]
    target, parts = target[~failed], parts[~failed]
    _set(state, new)
    moved = _shift(geoms[target], new[target])
    changes = [Change("fill-gaps", "units", (str(ids[t]),), (str(ids[t]),), (str(codes[t]),), float(shapely.area(p)), float(mv),
                      None, p, f"gap {g + 1} of this run given to the neighbour with the longest shared border within the gap width")
               for t, p, mv, g in zip(target, parts, moved, (g for _, _, g in pieces))]
    return changes, left


def _parts(geom: Any) -> np.ndarray:
    """The parts of ``geom`` with some area."""
    parts = shapely.get_parts(geom)
    return parts[shapely.area(parts) > 0]


def _take(rest: Any, n: int, geoms: np.ndarray, reach: float, eps: float, pieces: list[tuple[int, Any, int]], g: int) -> Any:
    """Give polygon ``n`` the parts of ``rest`` within ``reach`` of it that run along it (appended to ``pieces``); what remains."""
    taken, remain = _take_many(np.array([rest], dtype=object), np.array([n]), geoms, np.array([reach]), eps)
    if taken[0] is not None:
        pieces.append((n, taken[0], g))
    return remain[0]


def _take_many(rest: np.ndarray, n: np.ndarray, geoms: np.ndarray, reach: np.ndarray, eps: float
               ) -> tuple[np.ndarray, np.ndarray]:
    """Per row, what polygon ``n[i]`` takes of ``rest[i]``: the parts within ``reach[i]`` of it that run along it
    (None where none does), and what remains (``rest[i]`` itself where it takes nothing)."""
    within = shapely.buffer(geoms[n], reach, quad_segs=4)
    near, row = shapely.get_parts(shapely.intersection(rest, within), return_index=True)
    some = shapely.area(near) > 0
    near, row = near[some], row[some]
    # only the parts that run along the polygon: a part that merely comes within reach of it (a corner, a
    # wedge past its end) would hang off it by a point and is left for a neighbour it runs along
    along = _border(near, geoms[n[row]], eps) > 4 * eps
    taken = np.full(len(rest), None, dtype=object)
    remain = np.array(rest, dtype=object, copy=True)
    rows = np.unique(row[along])
    if not len(rows):
        return taken, remain
    taken[rows] = _union_rows(near[along], row[along], rows)
    # what remains is what lies beyond the reach, cut by the same overlay as the part taken (and the parts not
    # taken): the gap less the part taken left hair-thin slivers along the neighbours' edges where the overlay
    # noded the two cuts apart (50 m long, 1e-6 m wide, on a generated map), and a neighbour given one gained a
    # spike that snapping then folded away by more than the snapping distance
    beyond = shapely.difference(rest[rows], within[rows])
    remain[rows] = beyond
    mixed = np.intersect1d(rows, row[~along])
    if len(mixed):
        at = np.searchsorted(rows, mixed)
        keep = np.isin(row, mixed) & ~along
        remain[mixed] = _union_rows(np.r_[beyond[at], near[keep]], np.r_[mixed, row[keep]], mixed)
    return taken, remain


def _union_rows(geoms: np.ndarray, row: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Per row of ``rows`` (sorted), the union of the ``geoms`` labelled with it, in their order (GEOS, one
    unary union per row, as ``shapely.union_all`` of that row's geometries)."""
    return union_by_group(geoms, np.searchsorted(rows, row), len(rows))


# ---------------------------------------------------------------- snapping

@repair("snap-edges", order=30)
def snap_edges(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Near-coincident edges and vertices snapped so neighbours share them exactly.

    GEOS's coverage cleaning (``shapely.coverage_clean``, GEOS 3.14
    CoverageCleaner) with the snapping distance ``[checks] tolerance`` and no
    gap merging: vertices within the distance of each other or of an edge
    are snapped together, edges are noded against each other, and every
    shared edge is then drawn with the same vertices on both sides; what is
    left of a thin overlap goes to a neighbour by ``[repair] overlap``
    (``longest-border``: GEOS's longest common border; ``larger``: larger
    area; ``younger``/``older``: the polygons are given to GEOS youngest or
    oldest first, first one keeps it).

    What GEOS does not promise, and this repair holds itself: the snapping
    distance is a step of its noding, not a bound on any vertex's move, so
    every polygon is compared with its input (Hausdorff distance of the
    boundaries). Where one would move further than the distance (GEOS
    snapping the two sides of a part narrower than the distance together,
    and folding it away), it and the polygons near it are cleaned again at
    half the distance, then a quarter, and so on down to 1/64 of it
    (``FINER``), and the first that moves none too far and leaves them a
    valid coverage with no gap as thin as the tolerance (GEOS) is kept;
    otherwise the polygon keeps its input geometry and is listed. Each
    round of cleaning after the first cleans again around the polygons the
    round before held, up to :data:`MAX_CLEAN_ROUNDS` rounds of holding; in
    the cleaning after the last, with no finer tries, a polygon still moved
    too far is held, and the polygons that cleaning fitted to it as cleaned
    (and those linked to these by a chain of changed polygons within the
    snapping distance) keep their input and are listed; the rest stays
    cleaned. An
    overlap left for the geologist is kept (GEOS would give it away): it
    is cut out of one of its two polygons, and of the other where that
    one is cleaned too, and cleaned as a polygon of its own, so that its
    edges are snapped as every edge is and both polygons get it back
    along edges they share exactly. One too narrow for that (an opening
    by the snapping distance keeps less than :data:`WIDE_KEPT` of it), or
    that the cleaning folds away or splits, is cut out of one polygon
    only and given back as listed, clipped to the other polygon as
    cleaned; where it cannot be cut out (one polygon wholly inside the
    other), both polygons are kept out of the cleaning.
    Where the clipping would leave it no larger than a repair gives away
    (the cleaning moved the edges of the polygon it lies in, and a second
    run would give it away), the polygons around it are cleaned again at
    the finer distances as above. With the overlaps left cut out, a region
    GEOS finds valid is not cleaned at all, so a second run over a copy
    whose only defects are those overlaps changes nothing. A polygon whose
    only difference is where its rings start or their orientation is not a
    change.
    Never: it does not move a vertex further than the snapping distance.
    """
    if state.units is None or not len(state.units):
        return [], []
    ctx = _context(state)
    units = ctx.units()
    geoms = _geoms(state)
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    codes = _codes(state)
    hold = np.zeros(len(geoms), dtype=bool)
    if len(ctx.edges().suspects) == 0:
        return [], []  # every edge drawn twice, once each way: nothing to snap (the half-edge table proves it)
    usable = present(geoms) & np.isin(np.arange(len(geoms)), units.rows)
    # the first cleaning: the polygons owning an edge without its twin (the half-edge table's suspects: every
    # misfit, overlap and gap has one) and those within the snapping distance of such an edge; a polygon whose edges
    # all have their twin fits its neighbours already, as does the stretch of a polygon's boundary farther than the
    # distance from every such edge (at 10^5 polygons and 1 % defects this cleans 10 400 polygons where the
    # neighbours of whole misfit polygons were 23 000), and where one cleaned no longer fits a polygon left out, that
    # one joins (below)
    near = _Near(geoms, usable, settings.tolerance)
    found, loose = _misfit_edges(units, ctx.edges(), settings.tolerance)
    misfit = units.rows[found]
    region = near.along(ctx.edges().lines(loose))
    region[misfit[usable[misfit]]] = True
    refused: dict[int, tuple[float, bool]] = {}  # polygon held: how far the cleaning moved it, whether it collapsed
    unsettled = np.zeros(0, dtype=np.int64)  # polygons left as drawn when the rounds ran out (below)
    # overlaps still there were left for the geologist (or their repair was skipped): GEOS would give them away.
    # One left for the geologist (larger than a repair may give away) is cut out of the second of its two polygons
    # for the cleaning and given back to it afterwards, however thin it is: the overlap stays as it was listed and
    # every other edge of both polygons is still cleaned. One that cannot be cut out that way (a polygon wholly
    # inside the other, a GEOS failure) holds both polygons out of the cleaning, as does a wide one GEOS failed to
    # cut (snapping may still resolve a thin one).
    base = geoms.copy()
    put_back: dict[int, Any] = {}
    owners: dict[int, list[tuple[int, Any]]] = {}  # per polygon given an overlap back: (the other polygon, the piece)
    if state.overlaps_left is not None:  # resolve-overlaps ran: the overlaps still there are those it left
        if state.overlaps_left:
            pos = {str(v): k for k, v in enumerate(ids.tolist())}
            pieces = np.array([p for _, _, p, _ in state.overlaps_left], dtype=object)
            firm = np.array([f for _, _, _, f in state.overlaps_left], dtype=bool)
            wide = np.zeros(len(firm), dtype=bool)
            if (~firm).any():
                wide[~firm] = widths(pieces[~firm], settings.tolerance) > settings.tolerance * ABOVE
            cut: dict[int, list[Any]] = {}
            for (i, j, piece, f), w in zip(state.overlaps_left, wide.tolist()):  # one per overlap left
                both = [pos[x] for x in (i, j) if x in pos]
                if f and len(both) == 2:
                    cut.setdefault(both[1], []).append(piece)
                    owners.setdefault(both[1], []).append((both[0], piece))
                elif w or f:
                    hold[both] = True
            ks, backs, rests = _cut_out(geoms, cut)
            lost = shapely.is_missing(rests) | shapely.is_empty(rests)
            lost[~lost] = shapely.area(rests[~lost]) <= 0
            for k in ks[lost].tolist():  # the cut left nothing or GEOS failed: few
                hold[k] = True
                hold[[pos[x] for i, j, _, f in state.overlaps_left if f and pos.get(j) == k for x in (i, j) if x in pos]] = True
            base[ks[~lost]] = rests[~lost]
            put_back.update(zip(ks[~lost].tolist(), backs[~lost]))
    # GEOS: no misaligned edge, no overlap, no gap as thin as the snapping distance, the overlaps left for the
    # geologist cut out (the second run over a copy where they are all that is left has nothing to clean). An invalid
    # edge is one without its twin (a suspect's) that meets a polygon within that distance (in the region too), so
    # the region answers for the map: a polygon left out of it can only make the region look invalid, never valid
    if not _surely_invalid(near, base, misfit[usable[misfit]][:SEEDS], settings.tolerance) and \
            shapely.coverage_is_valid(base[np.flatnonzero(region)], gap_width=settings.tolerance):
        return [], []
    # cutting an overlap out can leave its edges some units in the last place off the neighbour's (a spike GEOS's
    # validation flags): asked of the polygons as they are, every invalid edge may lie on an overlap left
    if state.overlaps_left and _only_overlaps_left(near, geoms, region, misfit[usable[misfit]][:SEEDS],
                                                    [p for _, _, p, _ in state.overlaps_left], settings.tolerance):
        return [], []
    if state.overlaps_left is None:
        cov = ctx.coverage()
        for p in cov.overlaps:
            if p.width > cov.tol * ABOVE:
                hold[units.rows[list(p.units)]] = True
    strategy = MERGE_STRATEGY.get(settings.overlap, "min_index")
    n = len(geoms)
    current = geoms.copy()  # per polygon: as the cleaning left it (its input where it was not cleaned)
    bare = base.copy()  # the same before an overlap left for the geologist is given back (GEOS's cleaning as it is)
    same_r, moved_r = np.ones(n, dtype=bool), np.zeros(n)
    too_far_r, lost_r = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)
    # per polygon given back an overlap clipped to its cleaned neighbour: what the log says, and whether an overlap is
    # left no larger than a repair gives away
    clipped: dict[int, tuple[str, bool]] = {}
    todo = region.copy()  # the polygons of the region (re)cleaned now
    # per overlap left given back (polygon k it is cut out of, the other polygon i, the overlap): the overlap as the
    # last cleaning left it (see _clean_with_strips)
    left_over = _Overlaps(np.array([k for k, pairs in owners.items() for _ in pairs], dtype=np.int64),
                          np.array([i for pairs in owners.values() for i, _ in pairs], dtype=np.int64),
                          np.array([p for pairs in owners.values() for _, p in pairs], dtype=object))
    strips = left_over.listed.copy()
    wide_at: dict[float, np.ndarray] = {}  # per snapping distance: the overlaps left cleaned as polygons of their own
    rounds = steps = 0
    again = region  # the polygons cleaned again since the first cleaning of this round (only ever grows)
    distance = settings.tolerance  # the snapping distance of the cleaning now
    trial: _Finer | None = None  # finer cleanings tried (see below)
    tried: set[int] = set()  # polygons given back a clipped overlap that finer cleanings were tried around (once each)
    # a polygon GEOS would move too far keeps its input and is cleaned no more: the polygons within the snapping
    # distance of it are cleaned again without it, so that they are not left fitted to a version of it that is not
    # kept; the rest of the map keeps what the first cleaning made of it. Where a polygon cleaned no longer fits one
    # outside the region (GEOS's coverage validation of the two), that one joins the region and the part of the
    # region linked to it (polygons within the snapping distance of each other) is cleaned again; the other parts
    # of the region lie farther apart than the snapping distance, so cleaning again would not change them
    while True:
        sel = np.flatnonzero(~hold & usable & todo)
        work = geoms[sel]
        order = np.arange(len(work))
        back = [(k_, k) for k_, k in enumerate(sel.tolist()) if k in put_back]
        if strategy == "min_index":
            age = _age_rank(state, codes[sel])
            key = np.where(np.isfinite(age), age if settings.overlap == "younger" else -age, np.inf)
            order = np.argsort(key, kind="stable")
        cleaned = np.empty(len(work), dtype=object)
        # a cleaning for polygons outside that no longer fit starts from the region's polygons as already cleaned
        # (they fit each other; from their inputs, every snap was made anew and set off more misfits outside: at
        # 10^5 polygons 13 900 polygons cleaned again, now 11 100); the first cleaning of a round and the finer
        # ones start from the inputs. Every move is measured from the input all the same
        src = base if (trial is not None or steps == 0) else bare
        at = {k: k_ for k_, k in enumerate(sel.tolist())}
        if distance not in wide_at:
            # wide at a distance, wide at any shorter one (an opening by a smaller disc keeps more): only the others
            coarser = [d for d in wide_at if d > distance]
            known = wide_at[min(coarser)] if coarser else np.zeros(len(left_over.k), dtype=bool)
            wide = known.copy()
            wide[~known] = _wide(left_over.listed[~known], distance)
            wide_at[distance] = wide
        cleaned[order], strips = _clean_with_strips(src[sel][order], np.asarray(sel)[order], left_over, wide_at[distance],
                                                    strips if src is bare else None, distance, strategy)
        bare[sel] = cleaned
        if back:  # the polygons with an overlap left for the geologist: the overlaps given back
            bk_, bk = np.array([k_ for k_, _ in back]), np.array([k for _, k in back])
            # in the order of the polygons, each clipped to its neighbours as they stand then (one given its own
            # overlaps back already, or as GEOS cleaned it): in waves, each polygon after the earlier neighbours
            # it is clipped to, the polygons of a wave all at once
            earlier = {int(k): t for t, k in enumerate(bk.tolist())}
            wave = np.zeros(len(bk), dtype=np.int64)
            for t, k in enumerate(bk.tolist()):  # one per polygon given overlaps back (integers only)
                wave[t] = 1 + max((wave[earlier[i]] for i, _ in owners.get(k, []) if earlier.get(i, t) < t), default=-1)
            as_cleaned = cleaned.copy()
            for w in range(int(wave.max()) + 1):
                now = np.flatnonzero(wave == w)
                given, notes, small = _fitted_back_all(bk[now], left_over, strips, put_back, cleaned, at, current, ids,
                                                       settings.overlap_max_area, as_cleaned, earlier)
                clipped.update({int(k): (note, bool(sm)) for k, note, sm in zip(bk[now], notes, small)})
                k_ = bk_[now]
                joined, failed, _ = elementwise(shapely.union, cleaned[k_], given)
                same, unsure, _ = elementwise(shapely.equals, np.where(failed, work[k_], joined), work[k_], fill=False)
                # nothing else changed (or GEOS could not say): the input as it was (its vertices)
                cleaned[k_] = np.where(failed | unsure | np.asarray(same, dtype=bool), work[k_], joined)
        cleaned = polygonal(cleaned) if back else cleaned  # a union can leave a line beside the area
        same_r[sel] = shapely.equals_exact(shapely.normalize(_single(work)), shapely.normalize(_single(cleaned)))
        moved_r[sel] = _shift(work, cleaned)
        too_far_r[sel] = moved_r[sel] > settings.tolerance * ABOVE
        lost_r[sel] = shapely.is_empty(cleaned) | shapely.is_missing(cleaned)
        # the polygons this cleaning moved (from what the polygons outside last saw of them): only their neighbours
        # outside can have stopped fitting
        moved_now = ~shapely.equals_exact(shapely.normalize(_single(current[sel])), shapely.normalize(_single(cleaned)))
        current[sel] = cleaned
        if trial is not None:
            trial.cleaned[sel] = True
        grow = _unfitted(near, sel, cleaned, todo, current, moved_now)
        if grow.any():
            steps += 1
            add = near.of(np.flatnonzero(grow))
            again = add if steps == 1 else again | add
            todo = near.linked(again, add)
            region |= todo
            continue
        mine = np.flatnonzero(region & ~hold & usable)
        far = mine[(too_far_r[mine] | lost_r[mine]) & ~same_r[mine]]
        if rounds >= MAX_CLEAN_ROUNDS:
            # the cleaning after the last round's holds, with no tries left: a polygon it still moves too far keeps
            # its input and is listed, as held; the polygons this cleaning changed near it were fitted to it as
            # cleaned, not as kept, so they, and every polygon it changed linked to them by a chain of such
            # polygons within the snapping distance of each other, keep their input too (they fit their
            # neighbours as drawn) and are listed. The rest of the region fits, as GEOS's cleaning left it
            if len(far):
                refused.update({int(k): (float(m), bool(gone)) for k, m, gone in zip(far, moved_r[far], lost_r[far])})
                pending = usable & ~hold & ~same_r & ~too_far_r & ~lost_r
                undone = near.linked(pending, pending & near.of(far))
                unsettled = np.flatnonzero(undone)
                same_r[undone] = True
            break
        # a polygon the cleaning moves too far, or one given back an overlap left for the geologist clipped to no more
        # than a repair gives away (the cleaning moved the boundary of the polygon it lies in, and a second run would
        # give the rest away): cleaned again with the polygons near it at half the snapping distance, then a quarter,
        # and so on (each time from the cleaning that did it), kept where no polygon then moves too far, no such
        # overlap is clipped that far, and GEOS finds them and their neighbours a valid coverage with no gap as thin
        # as the tolerance; else as before the tries: a polygon moved too far is held, a clipped overlap stays
        # clipped. The polygons moved too far are tried first, all at once; then each clipped overlap on its own
        held = None
        if trial is not None:
            if not len(far) and not (trial.clip and len(_nicked(clipped, region, trial.bad))) and \
                    trial.fits(near, bare, usable, settings.tolerance, state.extent):
                trial = None  # kept
            elif trial.level < FINER:
                trial.level += 1
            else:  # as before the tries
                (current, bare, same_r, moved_r, too_far_r, lost_r, region, strips), clipped = trial.restored()
                distance = settings.tolerance
                if trial.clip:
                    far = np.zeros(0, dtype=np.int64)  # none then: clipped overlaps are tried only after
                else:
                    held = trial.bad
                trial = None
        if trial is None and held is None:
            nicked = _nicked(clipped, region, [k for k in clipped if k not in tried])
            if not len(far) and not len(nicked):
                break
            trial = _Finer(far if len(far) else nicked[:1], not len(far),
                           (current, bare, same_r, moved_r, too_far_r, lost_r, region, strips), dict(clipped))
            if trial.clip:
                tried.add(int(nicked[0]))
        if trial is not None:
            distance = settings.tolerance / 2.0 ** trial.level
            (current, bare, same_r, moved_r, too_far_r, lost_r, region, strips), clipped = trial.restored()
            todo = near.of(trial.bad)
            trial.cleaned = todo.copy()
            region |= todo
            steps = 0
            continue
        assert held is not None
        hold[held] = True
        refused.update({int(k): (float(m), bool(gone)) for k, m, gone in zip(held, moved_r[held], lost_r[held])})
        current[held], bare[held] = geoms[held], base[held]
        same_r[held] = True
        region = near.of(held)
        todo = region.copy()
        rounds, steps = rounds + 1, 0
    changed = usable & ~hold & ~same_r & ~too_far_r & ~lost_r
    changed &= ~_rounding_only(near, geoms, current, changed, moved_r, settings.tolerance)
    take = np.flatnonzero(changed)
    new = geoms.copy()
    new[take] = current[take]
    _set(state, new)
    left = [Left("snap-edges", "units", (str(ids[k]),),
                 "snapping would collapse it: narrower than the snapping distance" if gone else
                 f"snapping would move it by {m:.3f} m, more than the snapping distance", geoms[k], float(m))
            for k, (m, gone) in refused.items()]
    left += [Left("snap-edges", "units", (str(ids[k]),),
                  "left as drawn: snapping still moved a polygon near it further than the snapping distance after "
                  f"the most rounds of cleaning a run makes ({MAX_CLEAN_ROUNDS})", geoms[k], 0.0) for k in unsettled.tolist()]
    area_change = np.abs(shapely.area(current[take]) - shapely.area(geoms[take]))
    changes = [Change("snap-edges", "units", (str(ids[k]),), (str(ids[k]),), (str(codes[k]),), float(ar), float(m),
                      geoms[k], new[k], "vertices snapped to the neighbours'" + clipped.get(int(k), ("", False))[0])
               for k, ar, m in zip(take, area_change, moved_r[take])]
    return changes, left


def _cut_out(geoms: np.ndarray, cut: dict[int, list[Any]]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per polygon of ``cut`` (row: the overlaps left cut out of it): the rows, the union of each one's overlaps
    (GEOS union_all of them) and the polygon less it, polygonal (a cut out of an invalid polygon can leave a line
    beside the area); None where GEOS fails. All polygons at once; one by one only where GEOS fails on them."""
    ks = np.array(list(cut), dtype=np.int64)
    flat = np.array([p for k in ks.tolist() for p in cut[k]], dtype=object)
    label = np.repeat(np.arange(len(ks)), [len(cut[k]) for k in ks.tolist()])
    try:
        backs = _union_rows(flat, label, np.arange(len(ks)))
    except GEOSException:
        backs = np.empty(len(ks), dtype=object)
        for t, k in enumerate(ks.tolist()):  # GEOS failed on one of them: each on its own
            try:
                backs[t] = shapely.union_all(cut[k])
            except GEOSException:
                backs[t] = None
    ok = ~shapely.is_missing(backs)
    rests = np.full(len(ks), None, dtype=object)
    rest, failed, _ = elementwise(shapely.difference, geoms[ks[ok]], backs[ok])
    rest[failed] = None
    rests[ok] = rest
    return ks, backs, polygonal(rests)


def _wide(pieces: np.ndarray, distance: float) -> np.ndarray:
    """Which overlaps left are wide enough to be cleaned as polygons of their own at the snapping ``distance``: what
    an opening by the distance (GEOS erosion, then dilation) keeps of each is at least :data:`WIDE_KEPT` of it.

    The cleaning snaps the two sides of a part narrower than the distance together: cleaned as a polygon of its own,
    a narrow overlap would be folded away, and the overlap the geologist was left would be gone. Only its tips may
    be so narrow."""
    if not len(pieces):
        return np.zeros(0, dtype=bool)
    try:
        opened = shapely.buffer(shapely.buffer(pieces, -distance, quad_segs=2), distance, quad_segs=2)
        return shapely.area(opened) >= WIDE_KEPT * shapely.area(pieces)
    except GEOSException:
        return np.zeros(len(pieces), dtype=bool)


WIDE_KEPT = 0.9  # share of an overlap left an opening by the snapping distance must keep (our own choice, see _wide)


@dataclass(frozen=True)
class _Overlaps:
    """The overlaps left for the geologist that snap-edges gives back: per overlap, the polygon it is cut out of
    (row), the other polygon (row) and the overlap as listed."""

    k: np.ndarray
    i: np.ndarray
    listed: np.ndarray


def _positions(rows: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """The place of each of ``wanted`` in ``rows`` (distinct row numbers, in any order); -1 where it is not there."""
    return pd.Index(np.asarray(rows, dtype=np.int64)).get_indexer(np.asarray(wanted, dtype=np.int64))


def _part_to_holder(now: np.ndarray, polys: np.ndarray, other: np.ndarray, use: np.ndarray, x: np.ndarray,
                    y: np.ndarray) -> np.ndarray:
    """Where the overlaps left ``use[x]`` and ``use[y]`` (pairs) of one polygon overlap each other and only one of
    their other polygons covers the ground both cover (at least :data:`HOLDER_SHARE` of it, the other at most
    1 - that), that ground is taken out of the other overlap (``now`` is changed). Per overlap of ``use``: whether
    it is in a pair where that could not be done. ``other``: per overlap, the place of its other polygon among
    ``polys`` (-1: not there). All pairs at once (GEOS element-wise), from the overlaps as they stand (``now``)."""
    clash = np.zeros(len(use), dtype=bool)
    if not len(x):
        return clash
    ex, ey = use[x], use[y]
    ix, iy = other[ex], other[ey]
    sure = (ix >= 0) & (iy >= 0)
    area = np.zeros(len(x))
    cx, cy = np.zeros(len(x)), np.zeros(len(x))
    both = np.full(len(x), None, dtype=object)
    try:
        both[sure] = shapely.intersection(now[ex[sure]], now[ey[sure]])
        area[sure] = shapely.area(both[sure])
        cx[sure] = shapely.area(shapely.intersection(both[sure], polys[ix[sure]]))
        cy[sure] = shapely.area(shapely.intersection(both[sure], polys[iy[sure]]))
    except GEOSException:
        sure[:] = False
    sure &= (area > 0) & (np.minimum(cx, cy) <= (1 - HOLDER_SHARE) * area) & \
        (np.maximum(cx, cy) >= HOLDER_SHARE * area)
    clash[x[~sure]] = True
    clash[y[~sure]] = True
    rows = np.flatnonzero(sure)
    if not len(rows):
        return clash
    loser = np.where(cx[rows] > cy[rows], y[rows], x[rows])
    who = np.unique(loser)  # _union_rows groups them, each group in the order of its pairs
    try:
        lost = _union_rows(both[rows], loser, who)
        rest = polygonal(shapely.difference(now[use[who]], lost))
    except GEOSException:
        rest = np.full(len(who), None, dtype=object)
    gone = shapely.is_missing(rest) | shapely.is_empty(rest)
    now[use[who[~gone]]] = rest[~gone]
    clash[who[gone]] = True
    return clash


HOLDER_SHARE = 0.99  # share of the ground two overlaps left both cover that one other polygon must hold (our own choice)


def _clean_with_strips(polys: np.ndarray, rows: np.ndarray, left: _Overlaps, wide: np.ndarray,
                       strips: np.ndarray | None, distance: float, strategy: str) -> tuple[np.ndarray, np.ndarray]:
    """GEOS's cleaning of ``polys`` (the polygons ``rows``), each overlap left for the geologist between two of them
    cleaned as a polygon of its own; the polygons as cleaned (the first of each overlap with it again) and each
    overlap as now cleaned.

    An overlap left is cut out of one of its two polygons (``left.k``); the other one (``left.i``) still covers it. Cleaned so, the edge it was cut along is snapped
    on one side only, and the overlap given back beside the cleaned polygon leaves thin seams open along that edge,
    as deep into the polygon as the overlap is wide. Here the overlap is cleaned as a polygon of its own, cut out
    of the other polygon too where that one is cleaned: they then share every edge exactly, and each polygon is
    the union of its part and the overlap, whose edges the cleaning moved as it moved every edge (no further than
    the snapping distance). Where the other polygon is not cleaned now, the overlap as cleaned is given back
    clipped to it as it stands (:func:`_fitted_back_all`). Only overlaps ``wide`` enough (:func:`_wide`), and
    only where the cleaning keeps each in as many pieces as it had: one it folds away or splits is cleaned the
    other way (one more cleaning). ``strips``: the overlaps as the last cleaning left them (the polygons are as
    that cleaning left them), or None: as listed (the polygons as read). Where cutting fails or leaves nothing,
    or two overlaps overlap each other where neither other polygon alone holds the ground both cover
    (:func:`_part_to_holder`), the overlap stays with the other polygon in the cleaning, as before.
    """
    now = left.listed if strips is None else strips
    out_strips = now.copy()
    mine, other = _positions(rows, left.k) >= 0, _positions(rows, left.i)
    use = np.flatnonzero(mine & wide & present(now)) if len(now) else np.zeros(0, dtype=np.int64)
    if len(use) > 1:
        now = now.copy()
        a, b = shapely.STRtree(now[use]).query(now[use], predicate="intersects")
        a, b = a[a < b], b[a < b]
        inner = shapely.relate_pattern(now[use][a], now[use][b], "T********")  # interiors meet
        # two overlaps left overlapping each other, listed before a repair gave the ground both cover to one of
        # their other polygons: that one's alone; else neither is a polygon of its own
        use = use[~_part_to_holder(now, polys, other, use, a[inner], b[inner])]
    if not len(use):
        return shapely.coverage_clean(polys, snapping_distance=distance, gap_width=0.0, merge_strategy=strategy), out_strips
    inp = polys.copy()
    # the other polygon, where it is cleaned too: the overlaps it holds cut out of it for the cleaning
    inner = other[use] >= 0
    firsts = other[use[inner]]
    order = np.argsort(firsts, kind="stable")
    firsts, cut = firsts[order], use[inner][order]
    owner = np.zeros(0, dtype=np.int64)
    counts = np.zeros(0, dtype=np.int64)
    if len(cut):
        starts = np.flatnonzero(np.r_[True, firsts[1:] != firsts[:-1]])
        owner, counts = firsts[starts], np.diff(np.r_[starts, len(firsts)])
        try:
            joined = now[cut][starts].copy()
            many = np.flatnonzero(counts > 1)  # polygons holding two overlaps left or more as the other one
            if len(many):
                group = np.repeat(np.arange(len(owner)), counts)
                member = np.isin(group, many)
                joined[many] = _union_rows(now[cut][member], group[member], many)
            rest = polygonal(shapely.difference(inp[owner], joined))
        except GEOSException:
            rest = np.full(len(owner), None, dtype=object)
        ok = ~shapely.is_missing(rest) & ~shapely.is_empty(rest) & (shapely.area(rest) > 0)
        # where cutting fails or leaves nothing, those overlaps stay with that polygon and are not cleaned apart
        use = np.setdiff1d(use, cut[~np.repeat(ok, counts)])
        owner, rest, counts = owner[ok], rest[ok], counts[ok]
        cut = cut[np.repeat(ok, np.diff(np.r_[starts, len(firsts)]))]
        inp[owner] = rest
    if not len(use):
        return shapely.coverage_clean(polys, snapping_distance=distance, gap_width=0.0, merge_strategy=strategy), out_strips
    cleaned = shapely.coverage_clean(np.r_[inp, now[use]], snapping_distance=distance, gap_width=0.0,
                                     merge_strategy=strategy)
    out, faces = cleaned[:len(inp)], cleaned[len(inp):]
    # an overlap the cleaning did not keep in one piece (folded away, or split where narrow): cleaned again the
    # other way. Its edges may move as every edge does, within the snapping distance
    broken = ~present(faces)
    ok = ~broken
    broken[ok] = shapely.get_num_geometries(faces[ok]) > shapely.get_num_geometries(now[use][ok])
    if broken.any():
        narrow = wide.copy()
        narrow[use[broken]] = False
        return _clean_with_strips(polys, rows, left, narrow, strips, distance, strategy)
    out = out.copy()
    if len(owner):
        face = faces[np.searchsorted(use, cut)]  # ``use`` is sorted; ``cut`` in the order of the owners
        group = np.repeat(np.arange(len(owner)), counts)
        # GEOS's union of each polygon's part with its overlaps (union_all of them, one call)
        joined = _union_rows(np.r_[out[owner], face], np.r_[np.arange(len(owner)), group], np.arange(len(owner)))
        out[owner] = polygonal(joined)
    out_strips[use] = faces
    return out, out_strips


def _misfits(units: Any, edges: Any, distance: float) -> np.ndarray:
    """The polygons (positions in ``units``) owning an edge without its twin whose middle another polygon comes
    within ``distance`` of, or that more than one polygon draws: the suspects of the half-edge table less those whose
    only such edges lie on the outside of the map (along the frame, or along a gap wider than the distance),
    which cleaning has nothing to fit to."""
    return _misfit_edges(units, edges, distance)[0]


def _misfit_edges(units: Any, edges: Any, distance: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_misfits`, and the edges that make them misfits (positions in ``edges``)."""
    loose = np.flatnonzero(~edges.twin)
    if not len(loose):
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    owner = np.where(edges.left[loose] >= 0, edges.left[loose], edges.right[loose])
    crowded = edges.count[loose] != 1
    one = np.flatnonzero(~crowded)
    # each edge by its midpoint: its ends touch the polygon next along the frame, its middle does not (an edge
    # shorter than twice the distance near a corner counts as near: it is cleaned, which it survives unchanged)
    mid = shapely.points((edges.px[loose[one]] + edges.qx[loose[one]]) / 2, (edges.py[loose[one]] + edges.qy[loose[one]]) / 2)
    si, k = units.tree.query(mid, predicate="dwithin", distance=distance)
    near = np.zeros(len(one), dtype=bool)
    near[si[k != owner[one][si]]] = True
    many = loose[crowded]
    out = np.r_[owner[one][near], edges.left[many], edges.right[many]]
    return np.unique(out[out >= 0]), np.r_[loose[one][near], many]


def _fitted_back(k: int, owners: list[tuple[int, Any]], piece: Any, cleaned: np.ndarray, at: dict[int, int],
                 current: np.ndarray, ids: np.ndarray, limit: float = 0.0) -> tuple[Any, str, bool]:
    """:func:`_fitted_back_all` of one polygon ``k``: its piece given back, what the log says, whether it is small."""
    left = _Overlaps(np.full(len(owners), k, dtype=np.int64), np.array([i for i, _ in owners], dtype=np.int64),
                     np.array([p for _, p in owners], dtype=object))
    pieces, notes, small = _fitted_back_all(np.array([k]), left, left.listed, {k: piece}, cleaned, at, current, ids, limit)
    return pieces[0], notes[0], bool(small[0])


def _fitted_back_all(ks: np.ndarray, left: _Overlaps, strips: np.ndarray, put_back: dict[int, Any],
                     cleaned: np.ndarray, at: dict[int, int], current: np.ndarray, ids: np.ndarray,
                     limit: float = 0.0, as_cleaned: np.ndarray | None = None,
                     earlier: dict[int, int] | None = None) -> tuple[np.ndarray, list[str], np.ndarray]:
    """The overlaps left between each polygon of ``ks`` and its neighbours, each clipped to the neighbour as now
    cleaned.

    An overlap left for the geologist is cut out of ``k`` for the cleaning;
    given back as it was, it would no longer fit the neighbour it overlaps
    where the cleaning moved that one's boundary (nor a third polygon it
    reaches into), so it is given back as its intersection with the
    neighbour as cleaned by GEOS (``cleaned``, for the polygons ``at`` maps
    to it; ``current`` for the others): it still overlaps the same
    neighbour, now along its edges exactly. Per polygon: the piece (the
    union of its clipped overlaps; ``put_back`` where it has no owner), what
    the log says where the clipping took away more than rounding (empty
    otherwise), and whether it left an overlap no larger than ``limit``, the
    largest a repair gives away (a second run would give it away). With
    ``earlier`` (each polygon's place in the order they are given their
    overlaps back), a neighbour placed after ``k`` is taken from
    ``as_cleaned`` (GEOS's cleaning, before any overlap went back) and one
    placed before it from ``cleaned``: as if given back one at a time in that
    order. ``left``: the overlaps left given back (the polygon each is cut
    out of, the other, the overlap as listed), ``strips`` each as the last
    cleaning left it; what the log says and whether one is small are
    measured against them as listed. All overlaps of ``ks`` at once (GEOS element-wise): at 10 %
    defects they were clipped one by one, once per cleaning round, most of
    the repair's time.
    """
    ks = np.asarray(ks, dtype=np.int64)
    place = _positions(ks, left.k)  # each overlap's polygon among ks: the overlaps of ks, polygon by polygon
    e = np.flatnonzero(place >= 0)
    e = e[np.argsort(place[e], kind="stable")]
    k_of, nbr, pieces = place[e], left.i[e], left.listed[e]
    size = np.bincount(k_of, minlength=len(ks))
    pos = _looked_up(at, nbr)
    fit = current[nbr] if len(nbr) else np.empty(0, dtype=object)
    fit[pos >= 0] = cleaned[pos[pos >= 0]]
    if earlier is not None and as_cleaned is not None:  # neighbours given their overlaps back after k: not yet
        later = _looked_up(earlier, nbr) > _looked_up(earlier, ks[k_of])
        fit[later & (pos >= 0)] = as_cleaned[pos[later & (pos >= 0)]]
    clip, failed, _ = elementwise(lambda p, f: polygonal(shapely.intersection(p, f)), strips[e], fit)
    keep = failed | shapely.is_missing(clip) | shapely.is_empty(clip)  # nothing left inside: kept as it was
    clip[keep] = pieces[keep]  # (never dropped without a word)
    lost = shapely.area(pieces) - shapely.area(clip)
    bounds = np.abs(shapely.bounds(pieces)) if len(pieces) else np.empty((0, 4))
    scale = np.maximum(np.where(np.isfinite(bounds).all(axis=1), np.max(bounds, axis=1, initial=0.0), 1.0), 1.0)
    noted = lost > noise_floor(1.0) * scale * np.maximum(shapely.length(pieces), 1.0)  # noise_floor(scale), per piece
    small = np.zeros(len(ks), dtype=bool)
    np.logical_or.at(small, k_of[noted], shapely.area(clip[noted]) <= limit)
    notes = [""] * len(ks)
    for j in np.flatnonzero(noted):  # one per overlap clipped by more than rounding
        notes[k_of[j]] += f"; the overlap left with {ids[nbr[j]]} clipped to it as cleaned ({lost[j]:.3g} m² less)"
    out = np.array([put_back.get(int(k)) for k in ks], dtype=object)
    starts = np.r_[0, np.cumsum(size)[:-1]] if len(size) else np.zeros(0, dtype=np.int64)
    one = size == 1
    out[one] = clip[starts[one]]
    many = np.flatnonzero(size > 1)  # polygons with overlaps left with two neighbours or more: each one's union
    if len(many):
        rows = np.isin(k_of, many)
        out[many] = _union_rows(clip[rows], k_of[rows], many)
    return out, notes, small


def _looked_up(table: dict[int, int], keys: np.ndarray) -> np.ndarray:
    """``table[key]`` for each of ``keys`` (integers), -1 where a key is not in it."""
    if not table or not len(keys):
        return np.full(len(keys), -1, dtype=np.int64)
    have = np.fromiter(table.keys(), dtype=np.int64, count=len(table))
    values = np.fromiter(table.values(), dtype=np.int64, count=len(table))
    at = _positions(have, np.asarray(keys, dtype=np.int64))
    return np.where(at >= 0, values[np.maximum(at, 0)], -1)


def _rounding_only(near: "_Near", geoms: np.ndarray, current: np.ndarray, changed: np.ndarray, moved: np.ndarray,
                   distance: float) -> np.ndarray:
    """The polygons of ``changed`` (a mask) that keep their input: the cleaning moved none of their vertices further
    than the noise floor (``moved``: Hausdorff distance from the input), no polygon it really moved is linked to
    them by a chain of such polygons within the snapping distance, and GEOS's validation of them and their
    neighbours finds no more invalid edges with their inputs than with what the cleaning made of them (a
    rounding that mended a misfit below the noise floor is kept).

    GEOS's noding rounds the vertices of polygons near what it snaps by some units in the last place (beside an
    overlap left for the geologist, on a second run); such a change mends nothing and is no change to log."""
    none = np.zeros(len(changed), dtype=bool)
    candidates = changed & (moved <= noise_floor(_scale(geoms)))
    if not candidates.any():
        return none
    blockers = changed & ~candidates
    if blockers.any():
        candidates &= ~near.linked(candidates | blockers, blockers)
    if not candidates.any():
        return none
    rows = np.flatnonzero(candidates)
    hood = np.flatnonzero(near.of(rows) | candidates)
    cleaned = np.where(changed, current, geoms)
    kept = cleaned.copy()
    kept[rows] = geoms[rows]
    try:
        length = [float(np.nansum(shapely.length(shapely.coverage_invalid_edges(g[hood], gap_width=distance))))
                  for g in (cleaned, kept)]
    except GEOSException:
        return none
    return candidates if length[1] <= length[0] + NEAR_LEFT * _scale(geoms) else none


def _only_overlaps_left(near: "_Near", geoms: np.ndarray, region: np.ndarray, seeds: np.ndarray, pieces: list[Any],
                        distance: float) -> bool:
    """True when every edge GEOS's validation finds invalid among the polygons of ``region`` (a mask; gaps as narrow
    as ``distance``) is explained by the overlaps left for the geologist (``pieces``): nothing else is left to clean.
    The polygons around the misfit ``seeds`` are asked first (a real misfit there answers at once), then the whole
    region.

    An invalid edge is explained segment by segment. GEOS flags a whole
    segment, so a segment of a polygon running along an overlap's boundary
    and on past its corner (where the other polygon's boundary crosses it
    between two of its vertices) is flagged beyond the corner too, though
    what lies past the corner may fit its neighbour exactly: such a segment
    is explained when a stretch of it longer than ``ALONG_LEFT`` of the
    snapping distance lies along an overlap's boundary. Any other segment is
    explained only as far as it lies along one, and what is left of all of
    them must be no longer than ``NEAR_LEFT`` of the coordinates' size.
    "Along" is to within that same ``NEAR_LEFT``, measured on arrays
    (:func:`archivist.analysis.nearness.length_near`: GEOS's buffer at that
    distance misses stretches).
    """
    eps = NEAR_LEFT * _scale(geoms)
    try:
        rings = shapely.boundary(np.array(pieces, dtype=object))
        rings = rings[present(rings)]
    except GEOSException:
        return False

    def unexplained(rows: np.ndarray) -> bool:
        try:
            invalid = shapely.coverage_invalid_edges(geoms[rows], gap_width=distance)
            invalid = invalid[present(invalid)]
            if not len(invalid):
                return False
            parts = shapely.get_parts(invalid)  # each polygon's own segments, as GEOS flags them (not noded)
        except GEOSException:  # GEOS cannot tell: cleaned as before
            return True
        a, b, _ = segments(parts)
        lines = segment_lines(a[:, 0], a[:, 1], b[:, 0], b[:, 1])
        try:
            along = _along_any(lines, rings, eps)
        except GEOSException:  # GEOS cannot tell: cleaned as before
            return True
        off = shapely.length(lines) - along
        return float(off[along <= ALONG_LEFT * distance].sum()) > eps  # bits of edge at the overlap's corners, cut in rounding

    if len(seeds) and unexplained(np.flatnonzero(near.of(seeds))):
        return False
    return not unexplained(np.flatnonzero(region))


def _along_any(lines: np.ndarray, refs: np.ndarray, dist: float) -> np.ndarray:
    """Per line: the length of it within ``dist`` of the union of ``refs`` (linear geometries).

    :func:`archivist.analysis.nearness.length_near` against the union of the
    references that reach into the line's box widened as it widens it (twice
    ``dist``): the others have nothing within ``dist`` of the line. Measured
    against the union of them all, each line clipped that whole union to its
    box: with a few thousand overlaps left for the geologist (a map of 10^5
    polygons, 1 % defects, polygons grown 2 m), 21 of the 41 s of snap-edges.
    """
    out = np.zeros(len(lines))
    if not len(lines) or not len(refs):
        return out
    b = shapely.bounds(lines)
    pad = 2.0 * dist + 1e-9  # as archivist.analysis.nearness.clipped_near pads
    li, ri = shapely.STRtree(refs).query(shapely.box(b[:, 0] - pad, b[:, 1] - pad, b[:, 2] + pad, b[:, 3] + pad),
                                         predicate="intersects")
    if not len(li):
        return out
    order = np.lexsort((ri, li))
    li, ri = li[order], ri[order]
    near, start, count = np.unique(li, return_index=True, return_counts=True)
    ref = refs[ri[start]]
    for g in np.flatnonzero(count > 1):  # one per line reached by two references or more
        ref[g] = shapely.union_all(refs[ri[start[g]:start[g] + count[g]]])
    out[near] = length_near(lines[near], ref, dist)
    return out


# How near an overlap left for the geologist an invalid edge counts as its edge, relative to the coordinates'
# size: some 4 500 units in the last place (6.5 µm at 6.5 x 10^6 m; our own choice)
NEAR_LEFT = 1e-12
# How long a stretch of an invalid segment along an overlap left for the geologist makes GEOS flag it whole, relative
# to the snapping distance (1 mm at 1 m; our own choice: a segment merely crossing the overlap's boundary at its
# corner lies within NEAR_LEFT of it for far less, unless it meets it at less than a degree)
ALONG_LEFT = 1e-3
SEEDS = 8  # misfit polygons whose edges are validated first, with the polygons around them (see _surely_invalid)


def _surely_invalid(near: "_Near", geoms: np.ndarray, seeds: np.ndarray, distance: float) -> bool:
    """True when GEOS finds an invalid edge on one of the polygons ``seeds``, validated together with every usable
    polygon within ``distance`` of them (``shapely.coverage_invalid_edges``, gaps as narrow as the distance).

    Then any set of polygons holding all of those is invalid too: an edge of
    a seed is judged by the polygons within the distance of it, all of which
    are there (one matching it, or filling what looks like a gap, would touch
    it); a polygon farther away can only close a gap that is open here to
    the outside, never mend an edge found invalid. So a few polygons settle
    what GEOS's validation of the whole region would say, wherever a misfit
    is a real one; otherwise (False) the region is asked as before.
    """
    if not len(seeds):
        return False
    around = np.flatnonzero(near.of(seeds))
    at = np.searchsorted(around, seeds)
    ok = (at < len(around)) & (around[np.minimum(at, len(around) - 1)] == seeds)
    if not ok.any():
        return False
    bad = ~shapely.is_empty(shapely.coverage_invalid_edges(geoms[around], gap_width=distance))
    return bool(bad[at[ok]].any())


FINER = 6  # halvings of the snapping distance tried around a polygon moved too far or a clipped overlap (our own choice)
MAX_CLEAN_ROUNDS = 4  # rounds of holding per run of snap-edges; each is followed by a cleaning without what it held


def _unfitted(near: "_Near", sel: np.ndarray, cleaned: np.ndarray, region: np.ndarray, current: np.ndarray,
              moved: np.ndarray | None = None) -> np.ndarray:
    """The polygons outside ``region`` that no longer fit the polygons ``sel`` as ``cleaned`` (as ``current`` has them).

    GEOS's coverage validation (``shapely.coverage_invalid_edges``) of the
    cleaned polygons within the snapping distance of a polygon outside,
    together with those polygons outside, gaps as narrow as that distance
    included: one outside with an invalid edge there no longer fits. (A
    cleaned polygon farther from every polygon outside cannot touch one.)
    ``moved`` (per polygon of ``sel``): the cleaning changed it; only the
    polygons outside within the snapping distance of one that moved are
    asked (those near the others see them as they were: a polygon outside
    the region has every edge twinned, or lies farther than the distance
    from any misfit, so it fitted them).
    """
    out = np.zeros(near.n, dtype=bool)
    asked = sel if moved is None else sel[moved]
    if not len(asked):
        return out
    outside = np.flatnonzero(near.of(asked) & ~region)
    if not len(outside):
        return out
    at = np.full(near.n, -1, dtype=np.int64)
    at[sel] = np.arange(len(sel))
    rim = at[np.flatnonzero(near.of(outside))]
    rim = rim[rim >= 0]
    bad = ~shapely.is_empty(shapely.coverage_invalid_edges(np.r_[cleaned[rim], current[outside]], gap_width=near.distance))
    out[outside[bad[len(rim):]]] = True
    return out


def _nicked(clipped: dict[int, tuple[str, bool]], region: np.ndarray, among: Iterable[int]) -> np.ndarray:
    """The polygons of ``among`` in ``region`` given back an overlap left for the geologist clipped to no more than
    a repair gives away (``clipped``: per polygon, what the log says and whether one was), in order."""
    return np.array(sorted(k for k in map(int, among) if clipped.get(k, ("", False))[1] and region[k]), dtype=np.int64)


@dataclass
class _Finer:
    """Cleanings at a finer snapping distance tried around some polygons (see :func:`snap_edges`)."""

    bad: np.ndarray  # the polygons they are tried around (row positions)
    clip: bool  # they were given back a clipped overlap (else: moved too far)
    saved: tuple[np.ndarray, ...]  # the cleaning's arrays as they were then, restored before each try and after
    clipped: dict[int, tuple[str, bool]]
    level: int = 1  # the snapping distance is the tolerance halved this many times
    cleaned: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))  # the polygons cleaned in this try

    def restored(self) -> tuple[tuple[np.ndarray, ...], dict[int, tuple[str, bool]]]:
        """Copies of the arrays and of the clipping notes as they were when the tries began."""
        return tuple(a.copy() for a in self.saved), dict(self.clipped)

    def fits(self, near: "_Near", bare: np.ndarray, usable: np.ndarray, tolerance: float, extent: Any = None) -> bool:
        """GEOS: the polygons cleaned in this try and those near them, as cleaned (``bare``: before the overlaps left
        for the geologist are given back), form a valid coverage, no gap as thin as the tolerance (the full distance
        would have closed one; a finer one may not). Where GEOS's only objection is a thin gap, there must be
        uncovered ground along the edges it flags (:func:`_uncovered_along`): GEOS also flags the outer edge of a
        polygon narrower than the tolerance lying along the outside of the map."""
        around = np.flatnonzero(near.of(np.flatnonzero(self.cleaned)) & usable)
        flagged = shapely.coverage_invalid_edges(bare[around], gap_width=tolerance)
        flagged = flagged[present(flagged)]
        if not len(flagged):
            return True
        if not shapely.coverage_is_valid(bare[around], gap_width=0.0):
            return False  # an overlap or edges that do not match
        return not _uncovered_along(flagged, bare[around], bare[usable], tolerance, extent)


def _uncovered_along(flagged: np.ndarray, geoms: np.ndarray, others: np.ndarray, tolerance: float,
                     extent: Any = None) -> bool:
    """Whether there is ground no polygon covers within ``tolerance`` of the edges GEOS's thin-gap test flags in
    ``geoms`` (``flagged``: ``shapely.coverage_invalid_edges(geoms, gap_width=tolerance)``, the non-empty ones, of a
    coverage valid apart from that test; ``others``: every polygon of the map as it stands).

    GEOS's coverage validation with a gap width flags an edge that runs within the width of another polygon's
    edge without matching it; that takes in the outer edge of a polygon narrower than the width lying along the
    outside of the map (a 0.5 m strip along the top of a map at a 1 m tolerance: its top edge lies 0.5 m from the
    top edges of the polygons below it, across the strip itself), where no ground is uncovered. Ground counts
    inside the declared map extent, or without one inside the outline of the polygons near the flagged edges (a
    gap they enclose). Pieces narrower than the noise floor (:func:`archivist.analysis.coverage.noise_floor`) are
    overlay rounding. Where GEOS stops, there may be a gap: True.
    """
    if not len(flagged):
        return False
    try:
        window = shapely.buffer(shapely.union_all(flagged), tolerance)
        near = others[shapely.STRtree(others).query(window, predicate="intersects")] if len(others) else others
        covered = shapely.union_all(near)
        if extent is not None:
            ground = shapely.intersection(window, extent)
        else:
            outline = shapely.union_all(shapely.polygons(shapely.get_exterior_ring(shapely.get_parts(covered))))
            ground = shapely.intersection(window, outline)
        pieces = polygonal(np.array([shapely.difference(ground, covered)], dtype=object))
        parts = shapely.get_parts(pieces[~shapely.is_missing(pieces)])
    except GEOSException:
        return True
    return bool((mean_width(parts) >= noise_floor(_scale(geoms))).any())


class _Near:
    """The polygons within a distance of given polygons (an STRtree over the usable ones; each polygon's asked once)."""

    def __init__(self, geoms: np.ndarray, usable: np.ndarray, distance: float) -> None:
        self.n = len(geoms)
        self.rows = np.flatnonzero(usable)
        self.geoms = geoms
        self.distance = distance
        self.tree = shapely.STRtree(geoms[self.rows])
        self.asked = np.zeros(self.n, dtype=bool)
        self.a, self.b = np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)  # the pairs found, both ways

    def _ask(self, which: np.ndarray) -> None:
        new = np.zeros(self.n, dtype=bool)
        new[which] = True
        new &= ~self.asked
        rows = np.flatnonzero(new)
        if len(rows):
            # the pairs GEOS's tree query gives, tested in bulk: the query prepares every polygon asked (0.59 s for
            # 25 000 polygons of a 10^5 map, against 0.26 s)
            i, k = dwithin_pairs(self.tree, self.geoms[self.rows], self.geoms[rows], self.distance)
            self.a, self.b = np.r_[self.a, rows[i], self.rows[k]], np.r_[self.b, self.rows[k], rows[i]]
            self.asked[rows] = True

    def linked(self, region: np.ndarray, seeds: np.ndarray) -> np.ndarray:
        """Boolean mask: the polygons of ``region`` joined to a polygon of ``seeds`` (masks) by a chain of pairs in it."""
        self._ask(np.flatnonzero(region))
        m = region[self.a] & region[self.b]
        label = _components(self.n, self.a[m], self.b[m])
        return region & np.isin(label, label[seeds & region])

    def along(self, lines: np.ndarray) -> np.ndarray:
        """Boolean mask: the usable polygons within the distance of any of ``lines`` (GEOS ``dwithin``)."""
        out = np.zeros(self.n, dtype=bool)
        if len(lines):
            out[self.rows[dwithin_pairs(self.tree, self.geoms[self.rows], lines, self.distance)[1]]] = True
        return out

    def of(self, which: np.ndarray) -> np.ndarray:
        """Boolean mask: the usable polygons within the distance of any of the polygons ``which`` (row positions)."""
        self._ask(which)
        mine = np.zeros(self.n, dtype=bool)
        mine[which] = True
        out = np.zeros(self.n, dtype=bool)
        out[self.b[mine[self.a]]] = True
        return out


def _single(geoms: np.ndarray) -> np.ndarray:
    """One-part multipolygons as polygons (a file's MULTIPOLYGON and GEOS's POLYGON of the same ring are no change)."""
    out = geoms.copy()
    one = (shapely.get_type_id(out) == 6) & (shapely.get_num_geometries(out) == 1)
    out[one] = shapely.get_geometry(out[one], 0)
    return out


# ---------------------------------------------------------------- merges

def _shared_lengths(geoms: np.ndarray, of: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pairs (a, b) of polygons sharing edges (a clean coverage's twinned half-edges) and the length they share.

    ``of`` (a mask): only the pairs with a polygon of it are needed. The
    half-edge table is then built of those polygons and the ones whose boxes
    meet theirs (every polygon drawing an edge of theirs touches them): each
    of their edges is grouped with the same half-edges, in the same order,
    as in the table of all polygons, so their pairs and lengths are the same.
    Pairs of two other polygons may be missing or differ.
    """
    from ..analysis.halfedges import build_edges

    rows = np.arange(len(geoms))
    if of is not None:
        have = np.flatnonzero(~shapely.is_missing(geoms))
        mine = np.flatnonzero(of[have])
        if len(have):
            rows = have[np.unique(np.r_[mine, shapely.STRtree(geoms[have]).query(geoms[have[mine]])[1]])]
    edges = build_edges(geoms[rows])
    sel = np.flatnonzero(edges.twin)
    a, b = rows[np.minimum(edges.left[sel], edges.right[sel])], rows[np.maximum(edges.left[sel], edges.right[sel])]
    n = max(len(geoms), 1)
    key, inv = np.unique(a * n + b, return_inverse=True)
    length = np.bincount(inv, weights=edges.length[sel], minlength=len(key))
    return key // n, key % n, length


def _running_along(geoms: np.ndarray, rows: np.ndarray, ids: np.ndarray) -> dict[int, str]:
    """For the polygons ``rows`` that share no edge (no twinned half-edge): the id of the polygon whose boundary
    runs longest along theirs all the same, where one does (GEOS's intersection of the two boundaries has a length:
    the same line drawn with other vertices, a misfit snap-edges could not snap)."""
    if not len(rows):
        return {}
    have = np.flatnonzero(present(geoms))
    i, j = shapely.STRtree(geoms[have]).query(geoms[rows], predicate="intersects")
    j = have[j]
    keep = j != rows[i]
    i, j = i[keep], j[keep]
    if not len(i):
        return {}
    length, _, _ = elementwise(lambda a, b: shapely.length(shapely.intersection(shapely.boundary(a), shapely.boundary(b))),
                               geoms[rows[i]], geoms[j], fill=0.0)  # where GEOS stops: not known to run along
    length = length.astype(float)
    on = length > 0
    i, j, length = i[on], j[on], length[on]
    order = np.lexsort((j, -length, i))  # per sliver, the longest run first (then the first polygon)
    i, j = i[order], j[order]
    first = np.r_[True, i[1:] != i[:-1]] if len(i) else np.zeros(0, dtype=bool)
    return {int(rows[a]): str(ids[b]) for a, b in zip(i[first], j[first])}


def _components(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Connected component label of each of n nodes joined by edges (a, b): union-find on arrays."""
    parent = np.arange(n)
    while True:
        ra, rb = parent[a], parent[b]
        lo = np.minimum(ra, rb)
        np.minimum.at(parent, ra, lo)
        np.minimum.at(parent, rb, lo)
        nxt = parent[parent]
        if np.array_equal(nxt, parent) and np.array_equal(parent[a], parent[b]):
            return parent
        parent = nxt


def _merge(state: RepairState, name: str, groups: dict[int, list[int]], note: str, geoms: np.ndarray) -> list[Change]:
    """Merge each group's polygons into its key polygon (coverage union); the others are removed."""
    assert state.units is not None
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    codes = _codes(state)
    new = geoms.copy()
    keep = np.ones(len(geoms), dtype=bool)
    done: list[tuple[int, list[int]]] = []
    for target, members in groups.items():  # one per merge
        parts = np.array([geoms[target]] + [geoms[m] for m in members], dtype=object)
        try:
            new[target] = shapely.coverage_union_all(parts)
        except GEOSException:
            try:
                new[target] = shapely.union_all(parts)
            except GEOSException:
                continue  # left as it is; the check of the copy reports it
        keep[members] = False
        done.append((target, members))
    targets = np.array([t for t, _ in done], dtype=np.int64)
    moved = _shift(geoms[targets], new[targets]) if len(done) else np.zeros(0)  # every merged polygon at once
    changes = [Change(name, "units", (str(ids[target]),) + tuple(str(ids[m]) for m in members), (str(ids[target]),),
                      (str(codes[target]),) + tuple(str(codes[m]) for m in members),
                      float(shapely.area(shapely.union_all(geoms[members]))), float(mv),
                      shapely.union_all(geoms[[target] + members]), new[target], note)
               for (target, members), mv in zip(done, moved)]
    _set(state, new, keep)
    return changes


ERODE_MARGIN = 1.05  # our own margin over GEOS's 1 % buffer simplification and its arc chords (about 0.5 %, from memory)


@repair("merge-slivers", order=40)
def merge_slivers(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Slivers merged into the neighbour of the same unit, else the one with the longest shared edge.

    A sliver is what ``unit-sliver`` reports: a polygon under the sliver
    area (``[checks] sliver_area_mm2``) or narrower everywhere than the
    sliver width (``sliver_width_mm``), both at map scale (rules of thumb of
    the trade, common practice). It is merged into a neighbour sharing an
    edge with it: one with the same unit code if any (the longest shared edge
    among them), else the one with the longest shared edge; the merged
    polygon keeps the neighbour's id, code and attributes. Sliver chains
    merge into the first polygon that is not a sliver. A contact drawn
    between a sliver and the polygon it joins (the contact digitised twice,
    a sliver between the two traces) is taken out along it, as
    dissolve-same-unit does: it would lie inside the merged polygon.
    Never: a sliver with no neighbour sharing an edge (an island) is left
    and listed, as is one whose edge runs along a neighbour's without
    sharing its vertices (a misfit snap-edges could not snap; the entry
    names that neighbour); a real small body (a dyke, a thin bed) is for the geologist
    to keep and exaggerate, so skip this repair (``--skip merge-slivers``)
    where the map has them.
    """
    if state.units is None or not len(state.units):
        return [], []
    geoms = _geoms(state)
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    codes = _codes(state)
    amin, wmin = settings.sliver_area, settings.sliver_width
    area = shapely.area(geoms)
    r = wmin / 2.0
    maybe = (area < amin) | (area <= shapely.length(geoms) * r + shapely.get_num_coordinates(geoms) * (np.pi / 2) * r * r)
    drawn = present(geoms)  # an empty or missing geometry is geometry-missing's, no sliver
    cand = np.flatnonzero(maybe & drawn)
    wid = np.full(len(geoms), np.inf)
    if len(cand):
        # only the decision "narrower than wmin" is needed, as unit-sliver makes it: widths() settles each width
        # to ``p`` (wmin/200 here, as for unit-sliver) and never above the largest circle. An erosion by
        # ERODE_MARGIN x (wmin/2 + p) that leaves something standing shows a circle wider than that, and an empty
        # erosion by wmin/2 / ERODE_MARGIN shows none as wide as wmin/2 (:func:`archivist.analysis.arrays.widths`:
        # GEOS's offset curves are accurate to about 1 % of the distance); only the polygons in between are
        # measured (GEOS maximum_inscribed_circle)
        p = np.maximum(wmin / 200.0, np.sqrt(area[cand]) * 1e-6)
        standing = ~shapely.is_empty(shapely.buffer(geoms[cand], -ERODE_MARGIN * (r + p)))
        narrow = shapely.is_empty(shapely.buffer(geoms[cand], -r / ERODE_MARGIN))
        wid[cand[narrow]] = 0.0  # narrower than wmin for sure: not measured
        measure = cand[~standing & ~narrow]
        if len(measure):
            wid[measure] = widths(geoms[measure], wmin / 10.0)
    sliver = ((area < amin) | (wid < wmin)) & drawn
    if not sliver.any():
        return [], []
    a, b, length = _shared_lengths(geoms, sliver)
    # directed: sliver s -> neighbour t, preferring the same code, then the longest edge, then a non-sliver
    s = np.r_[a, b]
    t = np.r_[b, a]
    ln = np.r_[length, length]
    m = sliver[s]
    s, t, ln = s[m], t[m], ln[m]
    samecode = (codes[s] == codes[t]) & (codes[s] != "")
    order = np.lexsort((t, -ln, ~samecode, s))
    s, t = s[order], t[order]
    first = np.r_[0, np.flatnonzero(np.diff(s)) + 1] if len(s) else np.zeros(0, dtype=np.int64)
    target = np.full(len(geoms), -1)
    target[s[first]] = t[first]
    lonely = np.flatnonzero(sliver & (target < 0))
    along = _running_along(geoms, lonely, ids)
    left = [Left("merge-slivers", "units", (str(ids[k]),),
                 f"a sliver whose edge runs along polygon {along[k]}'s without sharing its vertices (snap-edges could not "
                 "snap them): not merged, merge it by hand" if k in along else
                 "a sliver sharing no edge with another polygon", geoms[k], float(area[k]))
            for k in lonely.tolist()]
    # follow chains to a non-sliver (or to the largest sliver of a group of slivers only)
    src = np.flatnonzero(target >= 0)
    comp = _components(len(geoms), src, target[src])
    groups: dict[int, list[int]] = {}
    members = np.flatnonzero(target >= 0)
    for c in np.unique(comp[members]):  # one per group of merged polygons: slivers around one non-sliver
        inside = np.flatnonzero(comp == c)
        big = inside[~sliver[inside]]
        root = int(big[0]) if len(big) else int(inside[np.argmax(area[inside])])
        groups[root] = [int(k) for k in inside if k != root]
    # the contacts between a sliver and the polygon it joins lie inside it afterwards: read before the polygons change
    sides = _contact_sides(state, _context(state)) if groups and state.lines is not None and len(state.lines) else None
    changes = _merge(state, "merge-slivers", groups, "sliver merged into its neighbour", geoms)
    return changes + _drop_inner_contacts(state, sides, changes, ids, codes, "merge-slivers"), left


@repair("dissolve-same-unit", order=50)
def dissolve_same_unit(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
    """Neighbouring polygons of the same unit with no fault between them dissolved into one.

    The pairs are those ``unit-same-neighbour`` reports (the same code, a
    shared boundary longer than the tolerance, no line of a fault kind along
    it within the tolerance); every group of polygons joined by such pairs
    becomes one polygon (GEOS coverage union), keeping the id and attributes
    of the first of them in the file.
    Never: polygons separated by a fault stay apart, and two polygons whose
    codes differ are never joined (a wrong code is the geologist's to fix).
    Nor two whose other attributes differ (a confidence, a source, a note:
    any field but the unit code and the id): the split may be the mapper's,
    and dissolving would drop one polygon's values; they are left and listed.
    """
    if state.units is None or not len(state.units) or state.unit_field is None:
        return [], []
    from ..rules.topology import unit_same_neighbour

    ctx = _context(state)
    hits = list(unit_same_neighbour(ctx.project, ctx))
    if not hits:
        return [], []
    ids = np.asarray(state.units[FEATURE_ID], dtype=object)
    pos = {str(v): i for i, v in enumerate(ids.tolist())}
    a = np.array([pos[h.features[0]] for h in hits])
    b = np.array([pos[h.features[1]] for h in hits])
    differ = _differing_field(state, a, b)
    left = [Left("dissolve-same-unit", "units", (str(ids[i]), str(ids[j])),
                 f"same unit, no fault between them, but {field} differs ({_shown(state.units[field].iloc[i])} / "
                 f"{_shown(state.units[field].iloc[j])}): not dissolved, the geologist decides whether they are one body",
                 h.geometry, float(h.measure or 0.0))
            for i, j, field, h in zip(a, b, differ, hits) if field is not None]
    same = np.array([f is None for f in differ], dtype=bool)
    a, b = a[same], b[same]
    if not len(a):
        return [], left
    comp = _components(len(ids), a, b)
    involved = np.unique(np.r_[a, b])
    groups: dict[int, list[int]] = {}
    for c in np.unique(comp[involved]):  # one per group dissolved
        inside = [int(k) for k in np.flatnonzero(comp == c)]
        groups[inside[0]] = inside[1:]
    sides = _contact_sides(state, ctx)  # read before the polygons change
    codes = _codes(state)
    changes = _merge(state, "dissolve-same-unit", groups, "same unit, no fault between them: dissolved", _geoms(state))
    return changes + _drop_inner_contacts(state, sides, changes, ids, codes), left


def _shown(value: Any) -> str:
    """An attribute value in a message: its repr, or "no value"."""
    return "no value" if value is None or (np.ndim(value) == 0 and bool(pd.isna(value))) else repr(value)


def _differing_field(state: RepairState, a: np.ndarray, b: np.ndarray) -> list[str | None]:
    """Per pair of working unit rows (a[k], b[k]): the first attribute whose values differ, or None where all agree.

    Every field counts but the geometry, the unit code and the id (``id_field``, the working copy's own columns);
    two missing values agree, a missing and a filled one do not.
    """
    assert state.units is not None
    frame = state.units
    id_field = state.project.layers["units"].field("id_field") if "units" in state.project.layers else None
    skip = {frame.geometry.name, FEATURE_ID, SOURCE_LAYER, state.unit_field, id_field}
    fields = [str(c) for c in frame.columns if c not in skip]
    first = np.full(len(a), -1)
    for j, name in enumerate(fields):  # one per attribute field
        values = np.array(frame[name].to_numpy(dtype=object), dtype=object, copy=True)  # not a view of the frame
        missing = np.asarray(pd.isna(values), dtype=bool)
        values[missing] = None  # pandas' NA answers == with NA, not a truth value
        ma, mb = missing[a], missing[b]
        agree = (ma & mb) | (~ma & ~mb & np.asarray(values[a] == values[b], dtype=bool))
        first[(first < 0) & ~agree] = j
    return [fields[j] if j >= 0 else None for j in first.tolist()]


def _contact_sides(state: RepairState, ctx: CheckContext) -> tuple[Any, np.ndarray, np.ndarray] | None:
    """The line network of the working lines and, per segment, the rows of the working units on its two sides."""
    if state.lines is None or not len(state.lines) or "lines" not in ctx.project.layers:
        return None
    from ..rules.linework import contact_sides

    assert state.units is not None
    units = ctx.units()
    if not len(units):
        return None
    left, right = contact_sides(ctx)
    row_of = pd.Index(np.asarray(state.units[FEATURE_ID], dtype=object).astype(str)).get_indexer(
        np.asarray(units.ids, dtype=object).astype(str))
    lr = np.where(left >= 0, row_of[np.maximum(left, 0)], -1)
    rr = np.where(right >= 0, row_of[np.maximum(right, 0)], -1)
    return ctx.line_network(), lr, rr


def _drop_inner_contacts(state: RepairState, sides: tuple[Any, np.ndarray, np.ndarray] | None, merged: list[Change],
                         ids: np.ndarray, codes: np.ndarray, name: str = "dissolve-same-unit") -> list[Change]:
    """The stretches of contact along a boundary that a dissolve (or a sliver's merge) took away, taken out of their lines.

    A contact separates two units; once two polygons are one polygon, a
    contact drawn between them lies inside it (``line-off-boundary`` in the
    copy, or ``line-duplicate`` beside the contact drawn on the sliver's
    other side). Each segment of a contact whose two sides were polygons now
    joined into one is taken out; the rest of the line stays as drawn (in
    parts where a stretch was taken out of its middle), and a line with
    nothing left is removed. Faults and other kinds are never touched: a
    fault between two polygons keeps them apart (``unit-same-neighbour``).
    ``name``: the repair the changes are logged under (``merge-slivers`` or
    ``dissolve-same-unit``).
    """
    if sides is None or not merged:
        return []
    from .lines import _ids, _line_change, _set_geoms, _source_layers

    net, lr, rr = sides
    joined = np.arange(len(ids))  # per unit row (before the dissolve): the row it was dissolved into
    pos = pd.Index(ids.astype(str))
    # per merge, the rows of its polygons: the first is the one the others went into (one lookup for all merges)
    members = [c.features_before for c in merged]
    rows = pos.get_indexer([f for m in members for f in m])
    first = np.repeat(rows[np.cumsum([0] + [len(m) for m in members[:-1]])], [len(m) for m in members])
    joined[rows[rows >= 0]] = first[rows >= 0]
    gone = (lr >= 0) & (rr >= 0) & (lr != rr)
    gone[gone] = joined[lr[gone]] == joined[rr[gone]]
    if not gone.any():
        return []
    seg_feat = net.part_feat[net.seg_part]
    feats = np.unique(seg_feat[gone])
    # every segment slot (coordinate c to c + 1 of a part) of those lines, with the slots taken out marked
    parts = np.flatnonzero(np.isin(net.part_feat, feats))
    lo, hi = net.part_off[parts], net.part_off[parts + 1] - 1  # slots lo .. hi - 1
    which, slot = spans(lo, np.maximum(hi - lo, 0))
    slot_part = parts[which]
    out = np.zeros(len(net.coords), dtype=bool)
    out[net.seg_c0[gone]] = True
    kept = ~out[slot]
    ks, kp = slot[kept], slot_part[kept]
    # runs of kept slots: a new run where a slot does not follow the one before in the same part
    start = np.ones(len(ks), dtype=bool)
    start[1:] = (ks[1:] != ks[:-1] + 1) | (kp[1:] != kp[:-1])
    run = np.cumsum(start) - 1
    last = np.r_[np.flatnonzero(start)[1:] - 1, len(ks) - 1] if len(ks) else np.empty(0, dtype=np.int64)
    cidx = np.r_[ks, ks[last] + 1]
    crun = np.r_[run, run[last]]
    order = np.lexsort((cidx, crun))
    pieces = shapely.linestrings(net.coords[cidx[order]], indices=crun[order]) if len(ks) else np.empty(0, dtype=object)
    run_feat = net.part_feat[kp[start]] if len(ks) else np.empty(0, dtype=np.int64)
    after = np.full(len(feats), None, dtype=object)
    has = np.isin(feats, run_feat)
    if has.any():
        whole = np.full(has.sum(), None, dtype=object)
        shapely.multilinestrings(pieces, indices=np.searchsorted(feats[has], run_feat), out=whole)
        one = shapely.get_num_geometries(whole) == 1
        whole[one] = shapely.get_geometry(whole[one], 0)
        after[has] = whole
    rows = net.rows[feats]
    before = net.geoms[feats]
    segs = np.flatnonzero(gone)
    first = segs[np.unique(seg_feat[segs], return_index=True)[1]]  # per line of feats, its first segment taken out
    line_codes = [str(codes[r]) or "?" for r in lr[first].tolist()]
    if name == "merge-slivers":
        what = ["contact along a sliver merged into its neighbour"] * len(line_codes)
    else:
        what = [f"contact between polygons of unit {code} dissolved into one" for code in line_codes]
    notes = [f"{w}: taken out along it" if a is not None else f"{w}: removed (nothing of it lay elsewhere)"
             for w, a in zip(what, after)]
    keep_rows = rows[has]
    changes = _line_change(name, state, keep_rows, before[has], after[has], np.zeros(int(has.sum())),
                           [nt for nt, h in zip(notes, has) if h])
    if len(keep_rows):
        _set_geoms(state, keep_rows, after[has])
    dropped = rows[~has]
    if len(dropped):
        assert state.lines is not None
        lids, layers = _ids(state), _source_layers(state)
        changes += [Change(name, str(layers[r]), (str(lids[r]),), (), (), 0.0, 0.0, b, None, nt)
                    for r, b, nt in zip(dropped.tolist(), before[~has], [nt for nt, h in zip(notes, has) if not h])]
        keep = np.ones(len(state.lines), dtype=bool)
        keep[dropped] = False
        state.lines = state.lines.iloc[keep]
    return changes
