"""Family `linework`: contacts, faults and the map boundary agree with the unit polygons.

Line kinds
----------
The kind of each line is read from the lines layer's `kind_field` (default
`kind`) and checked against `[checks] line_kinds` (default `contact`,
`fault`, `map-boundary`). Case, and the difference between spaces, hyphens
and underscores, are ignored (`Map boundary` is `map-boundary`). A certainty
qualifier from `[checks] certainties` (default `certain`, `approximate`,
`inferred`, `concealed`) may be written into the kind itself, as
`contact, inferred`, `fault (concealed)` or `inferred contact`; the
`certainty_field`, when named, is checked against the same list. What a kind
means for the checks follows from its name: a kind containing "fault" or
"thrust" is a fault, `map-boundary` is the map boundary, a kind containing
"contact" or "unconformity" is a contact; any other kind you add (a fold
axial trace, a dyke) is drawn freely and only checked for self-intersections
and duplicates.

How it scales
-------------
Each line segment is looked up by its two endpoints in the half-edge table
of the unit polygons (:mod:`archivist.analysis.halfedges`; one hash per segment,
numpy ``searchsorted``). On a map whose lines and polygons were built from
each other, nearly every segment is found there exactly, and the checks are
pure array work. Only the rest, the segments with no exact twin, go through
geometry (GEOS's distance within the tolerance; what lies within it cut
away segment by segment on arrays, :mod:`archivist.analysis.nearness`), so the
cost of the exact checks grows with the number of problems, not the size of
the map.
"""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import shapely
from shapely.ops import substring

from ..analysis.arrays import (
    MULTILINESTRING,
    group_sorted,
    linear_parts,
    merge_by_group,
    segment_lines,
    text_values,
)
from ..analysis.coverage import extent_is_declared
from ..analysis.halfedges import Edges
from ..analysis.lines import LineNetwork, kind_for, loose_ends, norm_kind
from ..analysis.messages import ABOVE, Ground, ground, metres_per_unit, num, offset
from ..analysis.nearness import (
    between_units,
    connected_pieces,
    dwithin_pairs,
    far_parts,
    near_parts,
    point_distances,
    off_unit_boundaries,
    uncovered,
    undrawn_boundaries,
    unit_at,
    within_of,
)
from ..analysis.polygons import Units
from ..model import Hit
from ..registry import Settle, rule
from ..tally import ExactSum, Tally

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
    from ..project import MapProject


# ---------------------------------------------------------------- rules

@rule("line-off-boundary", family="linework", severity="error", needs=("lines", "units"), partitioned=True)
def line_off_boundary(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A contact, or a stretch of one, does not lie on a unit polygon boundary.

    Catches
    -------
    Each stretch longer than the tolerance (`[checks] tolerance`, default
    0.1 mm at map scale) of a contact that is farther than the tolerance from
    every unit polygon boundary, with its length; map-boundary lines are held
    to the map's outer edge (the extent layer, or the outline of the units).
    Digitising noise within the tolerance is not reported; every misfit beyond
    it is. Faults are exempt where they run inside a unit (they may cut
    through rock and end in it) but not where they leave the mapped area.
    Lines of other kinds you add to the vocabulary are not checked. Segments
    whose two endpoints are exactly those of a polygon edge are on the
    boundary without further test; the rest are measured with GEOS.

    Why it matters
    --------------
    Lines and polygons tell two different stories: the printed contact runs
    through a unit while the polygons put it elsewhere, and anyone rebuilding
    polygons from the lines gets a different map.

    Fix
    ---
    Snap the line to the polygon boundary (or reshape the polygons to the
    line, if the line is right); if the line is really a fault, give it a fault
    kind.

    Example
    -------
    A contact drawn 3 m east of the edge between two units, on a map whose
    tolerance is 1 m: "Contact 1 runs 100.00 m off the unit boundaries, up
    to 3.00 m east of the boundary between B and A, inside polygon 2 (B)."
    The size and direction are those of the stretch's point farthest from
    the boundary (its vertices and midpoint), seen from the nearest point of
    the boundary: the line is to be moved that far the opposite way. The
    direction is one of eight compass points, from grid north in a
    projected CRS and from true north (pyproj `Geod`) in a geographic one.
    """
    net = ctx.line_network()
    units = ctx.units()
    cov = ctx.coverage()
    tol = float(ctx.tolerance)
    m = metres_per_unit(project)
    g = ground(project, units.geoms)
    se = ctx.segment_edges()
    roles = net.seg_roles
    on = se >= 0
    on_outline = on.copy()
    on_outline[on] = cov.outline[se[on]]
    sel_edge = ~on_outline & (roles == "boundary")
    found = []
    runs, part, off = _off_boundaries(ctx)
    poly = np.isin(net.part_roles[part], ("contact", "fault"))
    if poly.any():
        pieces, k = linear_parts(off[poly], tol * ABOVE)
        found.append((pieces, part[poly][k], "boundaries"))
    runs, part = net.runs(sel_edge)
    if len(runs) and cov.extent is not None:
        off = uncovered(runs, np.array([cov.extent_boundary], dtype=object), tol)
        pieces, k = linear_parts(off, tol * ABOVE)
        found.append((pieces, part[k], "edge"))
    crs = project.crs or project.layers["units"].crs
    for pieces, parts, what in found:
        if not len(pieces):
            continue
        pieces, parts = connected_pieces(pieces, parts)
        mid = shapely.line_interpolate_point(pieces, 0.5, normalized=True)
        inside = unit_at(mid, units)
        feats = net.part_feat[parts]
        keep = ~((net.roles[feats] == "fault") & (inside >= 0))  # faults may run inside a unit
        pieces, feats, inside, mid = pieces[keep], feats[keep], inside[keep], mid[keep]
        if not len(pieces):
            continue
        lengths = np.asarray(g.lengths(pieces), dtype=float) if g.geographic else shapely.length(pieces) * m
        # what each piece is measured against: the map edge, the boundary of the polygon it lies in, or that of
        # the nearest polygon; all pieces at once
        nearest = np.full(len(pieces), -1, dtype=np.int64)
        if what == "edge":
            targets = np.full(len(pieces), cov.extent_boundary, dtype=object)
        else:
            outside = np.flatnonzero(inside < 0)
            if len(outside):
                nearest[outside] = _first_nearest(units, mid[outside])
            targets = shapely.boundary(units.geoms[np.where(inside >= 0, inside, nearest)])
        links = shapely.shortest_line(targets, _far_points(pieces, targets))
        xy = shapely.get_coordinates(links).reshape(-1, 4)
        between = _across(units, inside, shapely.get_point(links, 0), tol) if what != "edge" else None
        px, py = _first_of_two(pieces)
        for i, (piece, f, u, length) in enumerate(zip(pieces, feats.tolist(), inside.tolist(), lengths.tolist())):
            x0, y0, x1, y1 = xy[i].tolist()
            metres, towards = offset(crs, x0, y0, x1, y1, m)
            away = f"{num(metres)} m {towards}"
            if what == "edge":
                text = f"{net.label(f)} runs {num(length)} m off the map's outer edge, up to {away} of it."
            elif u >= 0:
                assert between is not None
                text = (f"{net.label(f)} runs {num(length)} m off the unit boundaries, up to {away} "
                        f"of the boundary {between[i]}, inside {units.label(u)}.")
            else:
                text = (f"{net.label(f)} runs {num(length)} m outside every unit polygon, up to "
                        f"{away} of the nearest, {units.label(int(nearest[i]))}.")
            yield Hit(text, layer="lines", features=(net.ids[f],), measure=length, geometry=piece, x=px[i], y=py[i])


def _first_nearest(units: Units, points: np.ndarray) -> np.ndarray:
    """For each point, the nearest unit polygon; the first of the layer among equals (not the spatial index's
    first, which depends on which polygons it holds)."""
    pi, ui = units.tree.query_nearest(points)
    out = np.full(len(points), -1, dtype=np.int64)
    if len(pi):
        first = np.full(len(points), len(units), dtype=np.int64)
        np.minimum.at(first, pi, ui)
        out[pi] = first[pi]
    return out


def _far_points(pieces: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """For each piece, its point (among its vertices and its midpoint) farthest from its target; the first on ties."""
    xy, k = shapely.get_coordinates(pieces, return_index=True)
    mids = shapely.get_coordinates(shapely.line_interpolate_point(pieces, 0.5, normalized=True))
    n = len(pieces)
    # each piece's vertices, then its midpoint
    pos = np.r_[np.arange(len(k)) + k, np.cumsum(np.bincount(k, minlength=n)) + np.arange(n)]
    pts = np.empty((len(k) + n, 2))
    pts[pos] = np.r_[xy, mids]
    group = np.empty(len(k) + n, dtype=np.int64)
    group[pos] = np.r_[k, np.arange(n)]
    d = shapely.distance(shapely.points(pts), targets[group])
    order = np.lexsort((np.arange(len(d)), -d, group))
    first = order[np.r_[True, group[order][1:] != group[order][:-1]]]
    return shapely.points(pts[first])


def _across(units: Units, inside: np.ndarray, feet: np.ndarray, tol: float) -> list[str]:
    """For each foot on the boundary of polygon ``inside``: ``between A and B`` for the nearest other polygon within
    ``tol`` of it (the first of the layer among equals: not the spatial index's order, which depends on which
    polygons it holds), else ``of polygon 2 (A) along the map edge``."""
    out = ["" for _ in range(len(inside))]
    sel = np.flatnonzero(inside >= 0)
    if not len(sel):
        return out
    pi, ui = units.tree.query(feet[sel], predicate="dwithin", distance=max(tol, 0.0))
    other = ui != inside[sel][pi]
    pi, ui = pi[other], ui[other]
    best = np.full(len(sel), -1, dtype=np.int64)
    if len(pi):
        d = shapely.distance(feet[sel][pi], units.geoms[ui])
        order = np.lexsort((ui, d, pi))
        first = order[np.r_[True, pi[order][1:] != pi[order][:-1]]]
        best[pi[first]] = ui[first]
    for j, s in enumerate(sel.tolist()):
        u = int(inside[s])
        out[s] = f"between {units.code(u)} and {units.code(int(best[j]))}" if best[j] >= 0 else f"of {units.label(u)} along the map edge"
    return out


def _off_boundaries(ctx: CheckContext) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The stretches of line with no exact unit edge (runs of segments, any kind), their part, and what of each
    lies farther than the tolerance from every unit boundary; once per check (line-off-boundary and
    line-duplicate both ask).

    What lies off is left out (None) for the runs of a fault part that lies wholly inside the unit polygons
    (every run of the part covered by their union): whatever of it lies off the boundaries lies inside a unit,
    where a fault may run, so line-off-boundary reports none of it; line-duplicate takes such a run as near
    the boundaries. Measuring them is most of the work on a map whose faults cut across the units.
    """

    def compute() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        runs, part = ctx.line_network().runs(ctx.segment_edges() < 0)
        if not len(runs):
            return runs, part, runs
        tol = float(ctx.tolerance)
        todo = np.ones(len(runs), dtype=bool)
        fault = np.flatnonzero(ctx.line_network().part_roles[part] == "fault")
        cov = ctx.coverage()
        if len(fault) and tol > 0 and not cov.failures and cov.extent is not None:
            inside = cov.covers(runs[fault])
            leaves = np.unique(part[fault[~inside]])  # a part with any run leaving the units is measured whole
            todo[fault[inside & ~np.isin(part[fault], leaves)]] = False
        off = np.full(len(runs), None, dtype=object)
        off[todo] = off_unit_boundaries(runs[todo], ctx.units(), tol)
        return runs, part, off

    return ctx.shared("linework.off-unit-boundaries", compute)


# When missing linework is systematic rather than the exception (our own choice, not a published
# standard): more than half of the length of a kind of boundary has no line, over more than
# SYSTEMATIC_STRETCHES stretches between units, or more than one stretch of the map edge (a frame
# is one line, drawn in one go). Then one finding per kind of boundary says how much and where.
SYSTEMATIC_SHARE = 0.5
SYSTEMATIC_STRETCHES = 10


def _kind_for(project: MapProject, role: str, fallback: str) -> str:
    """The first kind of `[checks] line_kinds` the checks read as ``role`` (a frame kind, a contact kind)."""
    return kind_for(project.config.line_kinds, role, fallback)


def _span(b: np.ndarray, geographic: bool) -> str:
    """A box in map coordinates as words: x and y ranges, to the metre (or 1e-5 degree)."""
    f = (lambda v: f"{v:.5f}") if geographic else (lambda v: f"{v:.0f}")
    return f"x {f(b[0])} to {f(b[2])}, y {f(b[1])} to {f(b[3])}"


# What the stretches of boundary-without-line are (Hit.detail) and the whole-map totals its settle step reads.
BETWEEN, EDGE, CONTACTS = "between", "edge", "contacts"


def _edge_lengths(edges: Edges, idx: np.ndarray, g: Ground) -> np.ndarray:
    """Ground length (m) of each selected unit edge.

    In a projected CRS straight from the coordinates, as GEOS measures a
    two-point line (the square root of dx² + dy², not ``hypot``), so each is
    the length of the edge drawn as a line, without drawing it.
    """
    if g.geographic:
        return np.asarray(g.lengths(edges.lines(idx)), dtype=float)
    dx = edges.qx[idx] - edges.px[idx]
    dy = edges.qy[idx] - edges.py[idx]
    return np.sqrt(dx * dx + dy * dy) * g.factor


def _boundary_tally(project: MapProject, ctx: CheckContext) -> dict[str, Tally]:
    """The lengths of the boundaries between units and of the units' edge along the map edge (each edge at its
    first vertex), and the contact lines (each part at its first vertex): the whole-map facts of the summary."""
    units, edges, net = ctx.units(), ctx.edges(), ctx.line_network()
    g = ground(project, units.geoms)
    twin = between_units(units, edges)
    out = {}
    for key, mask in ((BETWEEN, twin), (EDGE, ctx.coverage().outline & ~twin)):
        idx = np.flatnonzero(mask)
        out[key] = Tally(_edge_lengths(edges, idx, g), edges.px[idx], edges.py[idx])
    parts = np.flatnonzero((net.part_roles == "contact") & (np.diff(net.part_off) > 0))
    first = net.coords[net.part_off[parts]].reshape(-1, 2)
    out[CONTACTS] = Tally(np.ones(len(parts)), first[:, 0], first[:, 1])
    return out


def _finish_missing(project: MapProject, hits: list[Hit], totals: dict[str, float]) -> list[Hit]:
    """The stretches of each kind of boundary as they are, or one summary when their share of the map is systematic.

    Independent of the order of the stretches: the missing length is their
    exact sum, and the summary takes them in the order of :func:`_in_order`.
    """
    out: list[Hit] = []
    kinds: dict[str, list[Hit]] = {BETWEEN: [], EDGE: []}
    for hit in hits:
        kind = hit.detail[0] if isinstance(hit.detail, tuple) and hit.detail else None
        (kinds[kind] if kind in kinds else out).append(hit)
    for kind, mine in kinds.items():
        if not mine:
            continue
        inner = kind == BETWEEN
        missing = float(ExactSum.of([h.measure for h in mine]))
        total = totals[kind]
        if missing > SYSTEMATIC_SHARE * total and len(mine) > (SYSTEMATIC_STRETCHES if inner else 1):
            out.append(_missing_summary(project, _in_order(mine), missing, total, inner, totals[CONTACTS] > 0))
        else:
            out.extend(mine)
    return out


def _in_order(hits: list[Hit]) -> list[Hit]:
    """Stretches in one order whatever the order they came in: by features, then first and last vertex and length."""
    xy, k = shapely.get_coordinates(np.array([h.geometry for h in hits], dtype=object), return_index=True)
    a = np.full((len(hits), 2), np.nan)
    b = a.copy()
    step = k[1:] != k[:-1]  # the vertices come geometry by geometry
    first, last = np.flatnonzero(np.r_[True, step]), np.flatnonzero(np.r_[step, True])
    a[k[first]], b[k[last]] = xy[first], xy[last]
    keys = [(h.features, *p.tolist(), *q.tolist(), h.measure) for h, p, q in zip(hits, a, b)]
    return [hits[k] for k in sorted(range(len(hits)), key=keys.__getitem__)]


@rule("boundary-without-line", family="linework", severity="warning", needs=("lines", "units"), partitioned=True,
      settle=Settle(_boundary_tally, _finish_missing, extent_is_declared))
def boundary_without_line(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A stretch of boundary between two units, or along the map edge, that no line draws.

    Catches
    -------
    Each stretch longer than the tolerance of the boundary between two
    polygons of different units, or of the units' edge along the map's outer
    edge, that no line of the lines layer (of any kind) covers within the
    tolerance, with its length. Boundaries between two polygons of the same
    unit are left to `unit-same-neighbour`; edges of gaps and overlaps are
    left to the topology family.

    Missing linework is listed stretch by stretch only when it is the
    exception. When it is systematic (our own choice of threshold, not a
    published standard: more than half of the length of the boundaries
    between units over more than 10 stretches, or more than half of the map
    edge over more than one stretch), one finding per kind of boundary gives
    the number of stretches, their length and share, the box they span and
    the longest one, and names the line kind to draw: a map of polygons and
    faults with no contact drawn (common in compilations) gets one finding,
    not one per boundary. The map edge is the extent layer when there is one,
    else the outer boundary of the unit polygons; a frame with no line gets
    one finding naming the kind its line needs (`map-boundary` by default,
    the frame kind of `[checks] line_kinds`).

    Why it matters
    --------------
    The printed map shows a boundary with no line symbol (so no certainty can
    be read off it), and the linework no longer describes the polygons: a
    contact was deleted, or never drawn after a polygon was split.

    Fix
    ---
    Draw the contact (or fault, or map boundary) along the stretch, snapped
    to the polygon edge, with its kind and certainty. A map whose linework
    is kept elsewhere can turn the rule off in `[checks.severity]`.

    Example
    -------
    Two units side by side with no line between them: "No line draws
    100.00 m of the boundary between polygons 1 (A) and 2 (B)."
    """
    net = ctx.line_network()
    units = ctx.units()
    edges = ctx.edges()
    cov = ctx.coverage()
    tol = float(ctx.tolerance)
    found = undrawn_boundaries(units, edges, cov.outline, ctx.edges_drawn(), net, tol)
    if found is None:
        return
    pieces, ua, ub = found.pieces, found.ua, found.ub
    g = ground(project, units.geoms)
    lengths = np.asarray(g.lengths(pieces), dtype=float)
    px, py = _first_of_two(pieces)
    frame_kind = _kind_for(project, "boundary", "map-boundary")
    # each polygon named once (as Units.label and Units.labels name it), however many stretches it has
    named = np.unique(np.r_[ua, ub[ub >= 0]]).tolist()
    name = dict(zip(named, (units.label(k).removeprefix("polygon ") for k in named)))
    for piece, length, u, v, x, y in zip(pieces, lengths.tolist(), ua.tolist(), ub.tolist(), px.tolist(), py.tolist()):
        if v >= 0:
            between = f"polygons {name[u]} and {name[v]}"
            text = f"No line draws {num(length)} m of the boundary between {between}."
            feats: tuple[str, ...] = (units.ids[u], units.ids[v])
            detail = (BETWEEN, between)
        else:
            text = (f"No line draws {num(length)} m of the map edge along polygon {name[u]}; "
                    f"the frame needs a line of kind '{frame_kind}' there.")
            feats = (units.ids[u],)
            detail = (EDGE, "")
        yield Hit(text, layer="units", features=feats, measure=length, geometry=piece, x=x, y=y, detail=detail)


def _first_of_two(pieces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Where a piece of two vertices is reported: its first vertex (None for longer pieces, placed by the engine).

    The engine places a line at GEOS's interior point, for a line of two vertices the endpoint nearer its
    midpoint: a tie, which the last bit of the coordinates breaks. A cut point computed another way from the
    same lines (the same value to within 1e-9 m) would move the place to the other end of the piece.
    """
    x = np.full(len(pieces), None, dtype=object)
    y = np.full(len(pieces), None, dtype=object)
    two = np.flatnonzero(shapely.get_num_coordinates(pieces) == 2)
    if len(two):
        first = shapely.get_point(pieces[two], 0)
        x[two] = shapely.get_x(first)
        y[two] = shapely.get_y(first)
    return x, y


def _missing_summary(project: MapProject, stretches: list[Hit], missing: float, total: float, inner: bool,
                     contacts: bool) -> Hit:
    """One finding for systematically missing linework of one kind of boundary: how much, where, what to draw.

    ``stretches`` in their summary order (:func:`_in_order`); the longest is
    the first of the longest in it.
    """
    pieces = np.array([h.geometry for h in stretches], dtype=object)
    lengths = np.array([h.measure for h in stretches], dtype=float)
    share = 100.0 * missing / total if total > 0 else 100.0
    # the box in map coordinates: from the local frame back to longitude/latitude when the checks ran in one
    frame = getattr(project, "local", None)
    where = _span(shapely.total_bounds(pieces if frame is None else frame.to_map(pieces)), ground(project).geographic)
    w = int(np.argmax(lengths))
    longest = float(lengths[w])
    geom = shapely.multilinestrings(shapely.get_parts(pieces))
    if inner:
        kind = _kind_for(project, "contact", "contact")
        none = "" if contacts else f"; the lines layer holds no line of kind '{kind}'"
        text = (f"No line draws {len(pieces)} stretches of the boundaries between units: {num(missing)} m of {num(total)} m "
                f"({share:.0f} %), spanning {where}; the longest, {num(longest)} m, is between "
                f"{stretches[w].detail[1]}{none}. Draw them as lines of kind '{kind}' "
                "(or a fault kind where a fault runs), snapped to the polygon edges.")
    else:
        kind = _kind_for(project, "boundary", "map-boundary")
        frame = (f"the extent layer ({project.layers['extent'].source})" if extent_is_declared(project)
                 else "the outer boundary of the unit polygons (no extent layer)")
        text = (f"No line draws {len(pieces)} stretches of the map edge: {num(missing)} m of {num(total)} m ({share:.0f} %), "
                f"spanning {where}; the frame is {frame}. Draw it as lines of kind '{kind}'.")
    return Hit(text, layer="lines", measure=missing, geometry=geom)


@rule("line-dangle", family="linework", severity="error", needs=("lines",), partitioned=True)
def line_dangle(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A contact or map-boundary line ends without touching another line.

    Catches
    -------
    Ends of contacts and map-boundary lines that touch no other line within
    the tolerance, nor their own line further along (a closed loop), nor the
    map's outer edge (a contact may stop at the frame when the frame is not
    drawn as a line; `boundary-without-line` asks for the frame). Faults may
    end freely inside a unit and are never reported, nor are kinds you add to
    the vocabulary. The finding gives the free end and how far it is from
    being connected: for an overshoot, the length of line past the line it
    crosses (to trim); for an undershoot, the distance to the nearest line (to
    add). Ends that share a vertex exactly with another line are connected
    without further test.

    Why it matters
    --------------
    A contact separates two units, so it must end where it meets another
    boundary; a free end means polygons cannot be built from the lines and the
    map does not say where one unit stops.

    Fix
    ---
    Snap the end onto the line it should meet (extend an undershoot, trim an
    overshoot), or, if the line is a fault dying out in a unit, give it a
    fault kind.

    Example
    -------
    A contact that runs 5 m past the map boundary it should end on: "Contact
    1 ends free 5.00 m past the line it crosses (map-boundary line 2); trim
    it back to that line." One that stops 2 m west of it: "Contact 1 ends
    free, 2.00 m short of the nearest line (map-boundary line 2); extend it
    2.00 m east to meet it." The direction is one of eight compass points,
    from grid north in a projected CRS and from true north (pyproj `Geod`)
    in a geographic one.
    """
    net = ctx.line_network()
    tol = float(ctx.tolerance)
    g = ground(project, net.geoms)
    found = loose_ends(net, ("contact", "boundary"), tol)
    if not len(found):
        return
    c = net.coords
    ends, end_part, at_start, pts, end_feat = found.coord, found.part, found.at_start, found.points, found.feat
    # within the tolerance of another line, of another part of the same line, or of the map edge
    connected = found.near_line.copy()
    edge = None
    if ctx.layer("units") is not None:  # units placed with the map (see CheckContext.alignment)
        cov = ctx.coverage()
        if cov.extent is not None:
            edge = cov.extent_boundary
            connected |= within_of(edge, pts, tol)
    cand = np.flatnonzero(~connected)  # few: ends with no other line near
    if not len(cand):
        return
    # ... nor near their own line: its other parts, or its own part beyond 2 tolerances from the end
    away = 2.0 * tol + 1e-9 * np.maximum(np.abs(c[ends[cand]]).max(axis=1), 1.0)
    own = _near_own_line(net, end_part[cand], at_start[cand], away, pts[cand], tol)
    k_free = cand[~own]
    if not len(k_free):
        return
    parts = _part_lines(net, end_part[k_free])
    free = list(zip(k_free.tolist(), parts))
    near, gaps = _nearest_other_line(net, pts[k_free], end_feat[k_free], tol)
    edge_gaps = point_distances(pts[k_free], np.full(len(k_free), edge, dtype=object)) if edge is not None else np.full(len(k_free), np.inf)
    # what each free end is measured against: the nearest other line, or the map edge when nearer
    to_edge = edge_gaps < gaps
    target = np.full(len(near), None, dtype=object)
    target[near >= 0] = net.geoms[near[near >= 0]]
    target[to_edge] = edge
    gaps = np.where(to_edge, edge_gaps, gaps)
    crossings = shapely.intersection(np.array([part for _, part in free], dtype=object), target)
    for (k, part), j, gap, across, onto, crossing in zip(free, near.tolist(), gaps.tolist(), to_edge.tolist(), target, crossings):
        name = "the map edge" if across else (_lower(net.label(j)) if j >= 0 else None)
        yield _dangle_hit(net, int(end_feat[k]), part, pts[k], bool(at_start[k]), onto, gap, name, crossing, tol, g,
                          project.crs or project.layers["lines"].crs)


def _part_lines(net: LineNetwork, parts: np.ndarray) -> np.ndarray:
    """The given parts as LineStrings (as :meth:`LineNetwork.part` builds each)."""
    sizes = net.part_off[parts + 1] - net.part_off[parts]
    idx = np.repeat(net.part_off[parts], sizes) + (np.arange(sizes.sum()) - np.repeat(np.cumsum(sizes) - sizes, sizes))
    out = np.empty(len(parts), dtype=object)
    shapely.linestrings(net.coords[idx], indices=np.repeat(np.arange(len(parts)), sizes), out=out)
    return out


def _near_own_line(net: LineNetwork, parts: np.ndarray, at_start: np.ndarray, away: np.ndarray, pts: np.ndarray,
                   tol: float) -> np.ndarray:
    """For each line end: within ``tol`` of another part of its own line, or of its own part from ``away`` along
    it onwards (the part less its first or last ``away``: a line closing on itself).

    The stretch of the part is the one :func:`shapely.ops.substring` cuts (its cut point from GEOS, its
    vertices by the distance along the part summed segment by segment), built for all ends at once.
    """
    d = max(tol, 0.0)
    near = np.zeros(len(parts), dtype=bool)
    feats = net.part_feat[parts]
    first = np.searchsorted(net.part_feat, feats)
    last = np.searchsorted(net.part_feat, feats + 1)
    # other parts of the same feature
    count = last - first
    multi = np.flatnonzero(count > 1)
    if len(multi):
        k = np.repeat(multi, count[multi])
        q = np.repeat(first[multi], count[multi]) + (np.arange(count[multi].sum()) - np.repeat(np.cumsum(count[multi]) - count[multi], count[multi]))
        other = q != parts[k]
        k, q = k[other], q[other]
        hit = shapely.dwithin(pts[k], _part_lines(net, q), d)
        near[k[hit]] = True
    # the own part beyond ``away``
    lines = _part_lines(net, parts)
    length = shapely.length(lines)
    cut = np.flatnonzero(~near & (length > away))
    if not len(cut):
        return near
    start = np.where(at_start[cut], away[cut], 0.0)
    end = np.where(at_start[cut], length[cut], length[cut] - away[cut])
    a = shapely.get_coordinates(shapely.line_interpolate_point(lines[cut], start))
    b = shapely.get_coordinates(shapely.line_interpolate_point(lines[cut], end))
    # vertices strictly between the two distances: each vertex but the last, at the length before it, summed
    # segment by segment from the start of the part (in the order substring sums them)
    off0, off1 = net.part_off[parts[cut]], net.part_off[parts[cut] + 1]
    sizes = off1 - off0 - 1  # the vertices that start a segment
    head = np.cumsum(sizes) - sizes
    pos = np.arange(sizes.sum()) - np.repeat(head, sizes)
    grp = np.repeat(np.arange(len(cut)), sizes)
    vi = np.repeat(off0, sizes) + pos
    dx = net.coords[vi + 1, 0] - net.coords[vi, 0]
    dy = net.coords[vi + 1, 1] - net.coords[vi, 1]
    seg = np.sqrt(dx * dx + dy * dy)
    before = np.zeros(len(vi))
    by_pos = np.argsort(pos, kind="stable")  # the vertices at position 1 of every part, then at 2, ...
    bounds = np.searchsorted(pos[by_pos], np.arange(1, int(sizes.max()) + 1)) if len(sizes) else np.zeros(1, dtype=np.int64)
    for lo, hi in zip(bounds[:-1].tolist(), bounds[1:].tolist()):  # one step per position: every vertex summed once
        at = by_pos[lo:hi]
        before[at] = before[at - 1] + seg[at - 1]
    inner = (start[grp] < before) & (before < end[grp])
    # each stretch: the cut point, its inner vertices in order, the end point
    total = np.bincount(grp[inner], minlength=len(cut)) + 2
    first_row = np.cumsum(total) - total
    xy = np.empty((int(total.sum()), 2))
    xy[first_row] = a
    xy[first_row + total - 1] = b
    mid = np.ones(len(xy), dtype=bool)
    mid[first_row] = False
    mid[first_row + total - 1] = False
    xy[mid] = net.coords[vi[inner]]
    rows = np.repeat(np.arange(len(cut)), total)
    stretch = shapely.linestrings(xy, indices=rows)
    near[cut] = shapely.dwithin(pts[cut], stretch, d)
    return near


def _nearest_other_line(net: LineNetwork, pts: np.ndarray, feats: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """For each point, the nearest line feature other than its own (index, distance), or (-1, inf).

    Searched in widening circles (from ten tolerances or a thousandth of the
    map, four times wider each round, up to four map sizes), all points of a
    round in one bulk query; among lines at the same distance the first in
    the layer's order wins (not the spatial index's order, which depends on
    which lines the index holds: a partition of the map must name the same
    line as the whole map).
    """
    n = len(pts)
    nearest = np.full(n, -1, dtype=np.int64)
    gap = np.full(n, np.inf)
    xmin, ymin, xmax, ymax = shapely.total_bounds(net.geoms)
    size = max(xmax - xmin, ymax - ymin, 1.0)
    radius = max(10.0 * tol, 1e-3 * size)
    todo = np.arange(n)
    while radius <= 4.0 * size and len(todo):
        pi, cand = net.tree.query(shapely.buffer(pts[todo], radius))
        keep = cand != feats[todo][pi]
        pi, cand = pi[keep], cand[keep]
        found = np.zeros(len(todo), dtype=bool)
        if len(pi):
            d = point_distances(pts[todo][pi], net.geoms[cand])
            order = np.lexsort((cand, d, pi))  # per point: smallest distance, then first in the layer
            first = order[np.r_[True, pi[order][1:] != pi[order][:-1]]]
            ok = d[first] <= radius
            hit = pi[first][ok]
            nearest[todo[hit]] = cand[first][ok]
            gap[todo[hit]] = d[first][ok]
            found[hit] = True
        todo = todo[~found]
        radius *= 4.0
    return nearest, gap


def _dangle_hit(net: LineNetwork, f: int, part: Any, pt: Any, at_start: bool, nearest: Any, gap: float, name: str | None,
                crossing: Any, tol: float, g: Ground, crs: Any = None) -> Hit:
    """Describe a free end: overshoot past the nearest line it crosses, or undershoot short of the nearest line.

    ``nearest`` is the nearest other line or the map edge (None: neither), ``gap`` the distance to it, ``name``
    how the message names it and ``crossing`` where the end's part meets it.
    """
    what = net.label(f)
    if nearest is None:
        return Hit(f"{what} ends free, with no other line on the map.", layer="lines", features=(net.ids[f],), geometry=pt)
    length = part.length
    if not shapely.is_empty(crossing):
        along = shapely.line_locate_point(part, shapely.points(shapely.get_coordinates(crossing)))
        free = float(along.min()) if at_start else float(length - along.max())
        if free < length - max(tol, 0.0):
            piece = substring(part, 0, free) if at_start else substring(part, length - free, length)
            free_m = float(g.lengths(piece)) if g.geographic else free * g.factor
            return Hit(f"{what} ends free {num(free_m)} m past the line it crosses ({name}); trim it back to that line.", layer="lines",
                       features=(net.ids[f],), measure=free_m, geometry=piece, x=pt.x, y=pt.y)
    link = shapely.shortest_line(pt, nearest)
    gap_m = float(g.lengths(link)) if g.geographic else gap * g.factor
    (x0, y0), (x1, y1) = shapely.get_coordinates(link)
    towards = offset(crs, x0, y0, x1, y1)[1]
    return Hit(f"{what} ends free, {num(gap_m)} m short of the nearest line ({name}); extend it {num(gap_m)} m {towards} to meet it.", layer="lines",
               features=(net.ids[f],), measure=gap_m, geometry=link, x=pt.x, y=pt.y)


@rule("line-same-unit-contact", family="linework", severity="warning", needs=("lines", "units"), partitioned=True)
def line_same_unit_contact(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A contact has the same unit on both sides.

    Catches
    -------
    Contacts lying on the boundary between two polygons that carry the same
    unit code, over more than the tolerance, with the length concerned. Each
    side is read from the polygons the contact's segment belongs to when the
    segment is exactly a polygon edge, otherwise from the polygons found just
    off each side of it (twice the tolerance away). A contact inside a single
    polygon is reported by `line-off-boundary` instead.

    Why it matters
    --------------
    A contact separates two different units. With the same unit on both sides,
    either the line is of the wrong kind (often a fault recorded as a
    contact), or one of the polygons carries the wrong code, or the line and
    the split of the polygons are both leftovers.

    Fix
    ---
    Correct the unit code of the mislabelled polygon, give the line its right
    kind, or delete the line and merge the two polygons.

    Example
    -------
    A contact between two polygons both coded `A`: "Contact 1 has unit A on
    both sides over 100.00 m (units 1 and 2)."
    """
    net = ctx.line_network()
    units = ctx.units()
    if units.codes is None or not len(units):
        return
    tol = float(ctx.tolerance)
    m = metres_per_unit(project)
    codes = units.codes
    left, right = contact_sides(ctx)
    same = (left >= 0) & (right >= 0) & (left != right)
    same[same] = (codes[left[same]] == codes[right[same]]) & (codes[left[same]] != "")
    idx = np.flatnonzero(same)
    if not len(idx):
        return
    feat = net.part_feat[net.seg_part[idx]]
    uf, inv = np.unique(feat, return_inverse=True)
    segs = segment_lines(net.px[idx], net.py[idx], net.qx[idx], net.qy[idx])
    geoms = merge_by_group(segs, inv, len(uf))
    lengths = np.bincount(inv, weights=net.seg_length[idx], minlength=len(uf))
    for k, (f, g, length) in enumerate(zip(uf, geoms, lengths)):
        if length <= tol * ABOVE:
            continue
        mine = idx[inv == k]
        pairs = sorted({tuple(sorted((int(a), int(b)))) for a, b in zip(left[mine], right[mine])})
        polys = sorted({u for pair in pairs for u in pair})
        yield Hit(
            f"{net.label(f)} has unit {units.code(polys[0])} on both sides over {num(length * m)} m ({join_ids(units, polys)}).",
            layer="lines",
            features=(net.ids[f],),
            measure=float(length * m),
            geometry=g,
        )


def contact_sides(ctx: CheckContext) -> tuple[np.ndarray, np.ndarray]:
    """For every segment of the line network, the unit polygons on its left and right (indices into
    ``ctx.units()``), -1 where there is none or the segment is not of a contact.

    A segment that is exactly a polygon edge with its twin takes the two
    polygons of that edge; any other contact segment the polygons found just
    off each side of its middle, twice the tolerance away (the first in the
    layer where two overlap there).
    """
    net = ctx.line_network()
    units = ctx.units()
    edges = ctx.edges()
    tol = float(ctx.tolerance)
    se = ctx.segment_edges()
    contact = net.seg_roles == "contact"
    left = np.full(len(se), -1, dtype=np.int64)
    right = np.full(len(se), -1, dtype=np.int64)
    exact = contact & (se >= 0)
    ok = exact.copy()
    ok[exact] = edges.twin[se[exact]]
    left[ok], right[ok] = edges.left[se[ok]], edges.right[se[ok]]
    loose = np.flatnonzero(contact & (se < 0))
    if len(loose) and len(units):
        x0, y0 = net.coords[net.seg_c0[loose]].T
        x1, y1 = net.coords[net.seg_c0[loose] + 1].T
        length = np.hypot(x1 - x0, y1 - y0)
        d = 2.0 * tol if tol > 0 else 1e-6 * max(np.abs(net.coords).max(), 1.0)
        nx, ny = -(y1 - y0) / length * d, (x1 - x0) / length * d
        mx, my = (x0 + x1) / 2, (y0 + y1) / 2
        left[loose] = unit_at(shapely.points(mx + nx, my + ny), units)
        right[loose] = unit_at(shapely.points(mx - nx, my - ny), units)
    return left, right


def join_ids(units: Units, polys: list[int]) -> str:
    """``polygons 1 and 2`` (the codes are the same: not repeated)."""
    return units.labels(polys, code=False)


def _lower(name: str) -> str:
    """A line's name inside a sentence: ``contact 3``."""
    return name[:1].lower() + name[1:]


@rule("line-self-intersection", family="linework", severity="error", needs=("lines",), partitioned=True)
def line_self_intersection(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A line crosses, touches or doubles back on itself.

    Catches
    -------
    Lines that GEOS does not find simple (`shapely.is_simple`): a line
    crossing itself, touching itself, running back over itself, or a
    multi-part line whose parts cross. A closed line (start = end) is fine.
    The finding gives the self-intersection points and a size: when the line
    runs back over itself, the length of line that repeats its own trace;
    otherwise the length of the smallest loop it closes.

    Why it matters
    --------------
    Such a line is almost always a digitising slip (a double click, a wobble
    at a snap); it builds bow-tie polygons and breaks length and side
    computations.

    Fix
    ---
    Delete the loop or the doubled-back vertices so that the line runs once
    along its trace.

    Example
    -------
    A contact drawn (0 0, 10 0, 10 10, 5 -5): "Contact 1 crosses itself at 1
    point; the smallest loop it closes is 31.81 m long."
    """
    net = ctx.line_network()
    m = metres_per_unit(project)
    if not len(net.geoms):
        return
    # a single segment is always simple; only longer or multi-part lines need GEOS's test
    cand = np.flatnonzero((shapely.get_num_coordinates(net.geoms) >= 3) | (shapely.get_type_id(net.geoms) == MULTILINESTRING))
    for f in cand[~shapely.is_simple(net.geoms[cand])]:
        g = net.geoms[f]
        noded = shapely.node(g)
        pieces = shapely.get_parts(noded)
        ends: Counter[tuple[float, ...]] = Counter()
        for piece in pieces:
            xy = shapely.get_coordinates(piece)
            ends[tuple(xy[0])] += 1
            ends[tuple(xy[-1])] += 1
        original = set()
        for part in shapely.get_parts(g):
            xy = shapely.get_coordinates(part)
            if len(xy):
                original.add(tuple(xy[0]))
                original.add(tuple(xy[-1]))
        nodes = [p for p, c in ends.items() if c >= 3 or (c == 1 and p not in original)]
        retraced = float(shapely.length(g) - shapely.length(noded))
        loops = shapely.get_parts(shapely.polygonize(pieces))
        n_nodes = max(len(nodes), 1)
        points = "point" if n_nodes == 1 else "points"
        if retraced > 1e-9 * max(g.length, 1.0):
            text = f"{net.label(f)} runs back over itself: {num(retraced * m)} m of it repeats its own trace."
            measure = retraced * m
        elif len(loops):
            size = float(shapely.length(loops).min())
            text = f"{net.label(f)} crosses itself at {n_nodes} {points}; the smallest loop it closes is {num(size * m)} m long."
            measure = size * m
        else:
            text = f"{net.label(f)} touches itself at {n_nodes} {points}."
            measure = None
        geom = shapely.multipoints(nodes) if nodes else g
        yield Hit(text, layer="lines", features=(net.ids[f],), measure=measure, geometry=geom)


@rule("line-duplicate", family="linework", severity="error", needs=("lines",), partitioned=True)
def line_duplicate(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two lines share length: one trace drawn twice.

    Catches
    -------
    Pairs of lines that run together over more than the tolerance: segments
    with exactly the same endpoints (found by hashing, whatever the kinds), and
    lines running within the tolerance of each other without sharing vertices.
    Where two lines meet at a junction they are close over a short stretch;
    that stretch (five tolerances around each junction and line end) is not
    counted, so only lines meeting at angles under about 11 degrees can be
    reported for it. A line running back over itself is reported by
    `line-self-intersection`.

    Why it matters
    --------------
    The trace is printed twice (often with two symbols, e.g. a contact and a
    fault), lengths are counted twice, and which of the two carries the right
    kind and certainty is unclear.

    Fix
    ---
    Keep one line with the right kind and certainty and delete the other, or
    cut the shared stretch out of one of them.

    Example
    -------
    A fault digitised over a contact along 100 m: "Lines 1 (contact) and 3
    (fault) share 100.00 m."
    """
    net = ctx.line_network()
    tol = float(ctx.tolerance)
    m = metres_per_unit(project)
    nseg = len(net.h)
    if not nseg:
        return
    # exact: segments with identical endpoints in two features
    if ctx.layer("units") is not None:  # units placed with the map (see CheckContext.alignment)
        se = ctx.segment_edges()
        matched = se >= 0
        key = np.where(matched, se, -1)
    else:
        matched = np.zeros(nseg, dtype=bool)
        key = np.full(nseg, -1)
    groups: list[np.ndarray] = []
    mi = np.flatnonzero(matched)
    if len(mi):
        counts = np.bincount(key[mi])
        multi = mi[counts[key[mi]] >= 2]
        if len(multi):
            o = np.argsort(key[multi], kind="stable")
            multi = multi[o]
            cut = np.flatnonzero(np.diff(key[multi])) + 1
            groups += np.split(multi, cut)
    ui = np.flatnonzero(~matched)
    if len(ui):
        order, gid, starts = group_sorted(net.h[ui], net.px[ui], net.py[ui], net.qx[ui], net.qy[ui])
        counts = np.diff(np.r_[starts, len(order)])
        for g in np.flatnonzero(counts >= 2):
            groups.append(ui[order[starts[g]:starts[g] + counts[g]]])
    shared: dict[tuple[int, int], list] = {}
    for members in groups:
        feats = sorted(set(net.part_feat[net.seg_part[members]].tolist()))
        seg = int(members[0])
        for i in range(len(feats)):
            for j in range(i + 1, len(feats)):
                shared.setdefault((feats[i], feats[j]), []).append(seg)
    found: dict[tuple[int, int], tuple[Any, float]] = {}
    for pair, seg_list in shared.items():
        segs = np.array(seg_list)
        length = float(net.seg_length[segs].sum())
        geom = shapely.line_merge(shapely.multilinestrings(segment_lines(net.px[segs], net.py[segs], net.qx[segs], net.qy[segs])))
        found[pair] = (geom, length)
    # near: stretches without an exact twin, within the tolerance of another line
    if tol > 0 and len(net.geoms) > 1:
        runs, rpart = net.runs(~matched)
        if len(runs):
            rfeat = net.part_feat[rpart]
            # stretches close to one another ...
            ri, rj = shapely.STRtree(runs).query(runs, predicate="dwithin", distance=tol)
            fj = rfeat[rj]
            # ... and, for stretches that come within the tolerance of a unit boundary, the lines drawn on it
            # (a line drawn exactly on the boundary can only be near a stretch that is near the boundary)
            if ctx.layer("units") is not None:  # units placed with the map (see CheckContext.alignment)
                off = _off_boundaries(ctx)[2]  # the same stretches: those with no exact unit edge
                close = shapely.length(off) < shapely.length(runs) * (1 - 1e-12)
                close |= shapely.is_missing(off)  # faults inside the units: their lines are asked for all the same
            else:
                close = np.ones(len(runs), dtype=bool)
            if close.any():
                near = np.flatnonzero(close)
                qi, qf = dwithin_pairs(net.tree, net.geoms, runs[near], tol)
                ri, fj = np.concatenate([ri, near[qi]]), np.concatenate([fj, qf])
            keep = fj != rfeat[ri]
            both = np.unique(np.c_[ri[keep], fj[keep]], axis=0)
            ri, fj = both[:, 0], both[:, 1]
            if len(ri):
                near = _near_shared(runs[ri], net.geoms, fj, net.part_ends(rpart[ri]), tol)
                lengths = shapely.length(near)
                long = lengths > tol * ABOVE
                for r, b, g, length in zip(ri[long], fj[long], near[long], lengths[long]):
                    a = net.part_feat[rpart[r]]
                    pair = (min(a, b), max(a, b))
                    if pair not in found or found[pair][1] < length:
                        found[pair] = (g, float(length))
    for (a, b), (geom, length) in sorted(found.items()):
        if length <= tol * ABOVE:
            continue
        yield Hit(
            f"Lines {net.ids[a]} ({net.kind_text(a)}) and {net.ids[b]} ({net.kind_text(b)}) share {num(length * m)} m.",
            layer="lines",
            features=(net.ids[a], net.ids[b]),
            measure=length * m,
            geometry=geom,
        )


def _near_shared(runs: np.ndarray, lines: np.ndarray, other: np.ndarray, own_ends: np.ndarray, tol: float) -> np.ndarray:
    """The part of each run within ``tol`` of the other line (``lines[other]``), away from where the two lines meet or end.

    Cut on arrays (:func:`archivist.analysis.nearness.near_parts` and ``far_parts``: the true distance, as GEOS's
    buffers approximated it). Where the part within ``tol`` is itself no longer than the tolerance
    (``tol * ABOVE``), it is returned as it is: too short to report either way.
    """
    close = near_parts(runs, lines[other], tol)
    # taking the junctions out only shortens: a run whose close part is already no longer than the tolerance
    # is kept as it is (the caller drops it), and the junctions are found for the others only
    out = close.copy()
    long = np.flatnonzero(shapely.length(close) > tol * ABOVE)
    if len(long):
        others = lines[other[long]]
        n = len(long)
        # within 5 x tol of where the two lines meet, of the other line's ends, or of the run's own line's ends
        junctions = np.concatenate([shapely.intersection(runs[long], others), shapely.boundary(others),
                                    shapely.multipoints(own_ends[long])])
        k = np.tile(np.arange(n), 3)
        out[long] = far_parts(close[long], k, junctions, np.arange(3 * n), 5.0 * tol)
    return out


@rule("line-kind-unknown", family="linework", severity="error", needs=("lines",), partitioned=True)
def line_kind_unknown(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A line's kind (or certainty) is not in the vocabulary.

    Catches
    -------
    Lines whose kind (`kind_field`, default `kind`) is empty or is not one
    of `[checks] line_kinds` (default `contact`, `fault`, `map-boundary`),
    and lines whose certainty (`certainty_field`, when named) is not one of
    `[checks] certainties` (default `certain`, `approximate`, `inferred`,
    `concealed`). Case, and spaces versus hyphens or underscores, do not
    matter; a certainty may be written into the kind (`contact, inferred`,
    `fault (concealed)`, `inferred contact`). One finding per line.

    Why it matters
    --------------
    The kind decides the symbol on the printed map and which checks apply (a
    contact must lie on a boundary, a fault may end in a unit); an unknown kind
    gets neither, and a reader cannot tell what the line is.

    Fix
    ---
    Correct the value, or add the kind (or certainty) to `[checks]
    line_kinds` (`certainties`) if the map really uses it; kinds containing
    "fault" or "thrust" are treated as faults, kinds containing "contact" or
    "unconformity" as contacts.

    Example
    -------
    A line with `kind = "contcat"`: "Line 4 has kind 'contcat', which is not
    in the vocabulary (contact, fault, map-boundary)."
    """
    layer = project.layers["lines"]
    net = ctx.line_network()
    cfg = project.config
    vocab = ", ".join(cfg.line_kinds)
    if net.kind_code is not None and net.kind_texts is not None:
        unknown = np.array([k is None for k in net.kind_parsed], dtype=bool)
        for f in np.flatnonzero(unknown[net.kind_code]):
            raw = net.kind_texts[net.kind_code[f]]
            if not str(raw).strip():
                text = f"Line {net.ids[f]} has no kind (field '{layer.field('kind_field')}'); the vocabulary is {vocab}."
            else:
                text = f"Line {net.ids[f]} has kind '{raw}', which is not in the vocabulary ({vocab})."
            yield Hit(text, layer="lines", features=(net.ids[f],), geometry=net.geoms[f])
    values = text_values(layer, "certainty_field")
    if values is not None:
        code, texts = values
        known = {norm_kind(c) for c in cfg.certainties}
        bad = np.array([bool(t.strip()) and norm_kind(t) not in known for t in texts], dtype=bool)
        code = np.where(code < 0, len(texts) - 1, code)[net.rows]
        for f in np.flatnonzero(bad[code]):
            yield Hit(
                f"Line {net.ids[f]} has certainty '{texts[code[f]]}', which is not in the vocabulary ({', '.join(cfg.certainties)}).",
                layer="lines",
                features=(net.ids[f],),
                geometry=net.geoms[f],
            )
