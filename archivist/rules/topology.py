"""Family `topology`: the unit polygons tile the map, with no gaps, overlaps, slivers or misfits.

The rules read the coverage analysis (:mod:`archivist.analysis.coverage`:
the half-edge table narrows GEOS's coverage validation down to the polygons
that can take part in a defect) through the check context. Where GEOS could
not process some polygons, each rule whose findings are incomplete there
says so in one error finding naming them.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any, Iterator

import numpy as np
import shapely

from ..analysis.arrays import merge_by_group, text_values, widths
from ..analysis.coverage import GAPS, MISFITS, OUTSIDE, OVERLAPS, extent_is_declared
from ..analysis.messages import ABOVE, Ground, capital, feature_name, ground, metres_per_unit, num
from ..analysis.nearness import uncovered
from ..analysis.polygons import sliver_thresholds
from ..model import Hit, Severity
from ..registry import rule

if TYPE_CHECKING:
    from ..analysis.context import CheckContext
    from ..project import MapProject

ASPECT_WORDS = {
    OVERLAPS: "Overlaps",
    MISFITS: "Misfitting edges",
    GAPS: "Gaps",
    OUTSIDE: "Unit area outside the map extent",
}


def not_processed(ctx: CheckContext, aspect: str) -> Iterator[Hit]:
    """One error hit per part of the map GEOS could not process for ``aspect``, naming its polygons."""
    units = ctx.units()
    for failure in ctx.coverage().failures_of(aspect):
        ks = list(failure.units)
        shown = ks[:10]
        where = f"among {units.labels(shown)}" if len(ks) > 1 else (
            f"at {units.label(ks[0])}" if ks else "on this map")
        more = f" and {len(ks) - len(shown)} more" if len(ks) > len(shown) else ""
        box = None
        if ks:
            x0, y0, x1, y1 = shapely.total_bounds(units.geoms[ks])
            box = shapely.box(x0, y0, x1, y1)
        yield Hit(
            f"{ASPECT_WORDS[aspect]} {where}{more} could not be checked: GEOS stopped with \"{failure.reason}\" "
            f"while {failure.doing}. Repair these polygons (geometry-invalid, unit-sliver) and check again.",
            layer="units",
            features=tuple(units.ids[k] for k in ks),
            geometry=box,
            severity=Severity.ERROR,
        )


def piece_measures(g: Ground, pieces: list[Any]) -> tuple[np.ndarray, np.ndarray]:
    """Ground area (m²) and width (m) of each piece: on the ellipsoid's local projection in a geographic CRS."""
    area = np.array([p.area for p in pieces], dtype=float)
    width = np.array([p.width for p in pieces], dtype=float)
    if not g.geographic or not pieces:
        return area * (g.factor * g.factor), width * g.factor
    geoms = np.array([p.geom for p in pieces], dtype=object)
    return g.areas(geoms), g.widths(geoms, width)


def mismatch_scales(g: Ground, mms: tuple[Any, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Metres per map unit along each misfit's linework, and across it.

    Along: ground length over map length of the linework. Across: the local
    area scale (a small square at the linework's centre) over the scale
    along, which is the scale of the distance between two lines running that
    way (the map from map units to metres is linear over so small a piece).
    """
    n = len(mms)
    if not g.geographic or not n:
        return np.full(n, g.factor), np.full(n, g.factor)
    lines = np.array([mm.geometry for mm in mms], dtype=object)
    flat = shapely.length(lines)
    along = np.where(flat > 0, g.lengths(lines) / np.where(flat > 0, flat, 1.0), np.nan)
    c = shapely.get_coordinates(shapely.centroid(lines))
    d = 1e-4
    squares = shapely.box(c[:, 0] - d, c[:, 1] - d, c[:, 0] + d, c[:, 1] + d)
    area_scale = g.areas(squares) / (4 * d * d)
    fallback = np.sqrt(area_scale)  # a misfit with no length: the mean scale
    along = np.where(np.isfinite(along), along, fallback)
    return along, area_scale / along


# ---------------------------------------------------------------- rules

@rule("unit-overlap", family="topology", severity="error", needs=("units",), partitioned=extent_is_declared)
def unit_overlap(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two unit polygons share area.

    Catches
    -------
    Every place where two unit polygons cover the same ground and the shared
    piece is wider than the tolerance (`[checks] tolerance`, by default 0.1 mm
    at map scale): one finding per overlap piece, with the piece itself, its
    area, both feature ids and both unit codes. A polygon lying inside another
    and exact duplicates are overlaps too. Thinner overlaps, left where two
    neighbours' shared edge was digitised twice, are reported by
    `unit-edge-mismatch` instead, so each defect is reported once. Which
    polygons take part is decided by GEOS's own coverage validation
    (`shapely.coverage_invalid_edges`); the overlap pieces are exact GEOS
    intersections.

    Where GEOS stops on a part of the map (a polygon it cannot process), that
    part is one finding saying it could not be checked, naming its polygons;
    every other part is still checked.

    Why it matters
    --------------
    A point of the map belongs to two units at once: the map contradicts
    itself, areas per unit add up to more than the map, and a user querying
    the unit at a site gets whichever polygon their software finds first.

    Fix
    ---
    Decide which unit the overlap belongs to, cut it out of the other polygon
    (snap both to the contact line and rebuild the polygons from the lines if
    the project keeps lines as the master).

    Example
    -------
    Two 10 m x 10 m squares whose shared edge was drawn 0.1 m too far into the
    second one, on a map whose tolerance is 0.05 m: "Polygons 1 (A) and 2 (B)
    overlap by 1.00 m² (up to 0.10 m wide)."
    """
    units = ctx.units()
    cov = ctx.coverage()
    pieces = [p for p in cov.overlaps if not p.width <= cov.tol * ABOVE]
    areas, wides = piece_measures(ground(project, units.geoms), pieces)
    for piece, area, wide in zip(pieces, areas.tolist(), wides.tolist()):
        a, b = piece.units
        yield Hit(
            f"{capital(units.labels([a, b]))} overlap by {num(area)} m² (up to {num(wide)} m wide).",
            layer="units",
            features=(units.ids[a], units.ids[b]),
            measure=area,
            geometry=piece.geom,
        )
    yield from not_processed(ctx, OVERLAPS)


@rule("unit-gap", family="topology", severity="error", needs=("units",), partitioned=extent_is_declared)
def unit_gap(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """An unmapped hole inside the map extent.

    Catches
    -------
    Every piece of the map extent that no unit polygon covers: one finding
    per gap, with the gap polygon, its area and the ids of the polygons
    around it (those sharing a stretch of edge with it, not just a point).
    Reported here: every gap wider than the tolerance (`[checks] tolerance`),
    whatever it touches (units, the map edge, another gap), and a gap of any
    width along one unit only (an unfilled hole or a notch inside one unit).
    Reported once elsewhere: a gap no wider than the tolerance between two or
    more units (their shared edge digitised twice, apart) is a misfit of that
    edge, `unit-edge-mismatch`, also where it runs to the map edge. Not
    reported: a gap no wider than the tolerance that lies entirely within the
    tolerance of the extent edge, along which GEOS flags no edge (a unit
    lying on the frame, as lines within the tolerance of a boundary do).

    The extent is the `extent` layer when the manifest names one; otherwise
    it is the outer boundary of all units (with every hole they enclose and
    every bay or strip no wider than the tolerance), and the report says so:
    then wider bays open to the map edge cannot be found.

    Where GEOS stops on a part of the map (a polygon it cannot process), that
    part is one finding saying it could not be checked, naming its polygons;
    every other part is still checked.

    Why it matters
    --------------
    A geological map claims to say what is under every point inside its
    frame. A hole is ground the map says nothing about, usually a polygon lost
    while editing; areas per unit no longer add up to the map.

    Fix
    ---
    Draw the missing polygon with its unit, or extend the neighbours to meet
    along their contact. If the hole is real (a lake, ground not visited),
    map it as a polygon with its own code in the legend.

    Example
    -------
    A 2 m x 0.5 m slot left between two units: "Gap of 1.00 m² (up to 0.50 m
    wide) inside the map extent, between polygons 1 (A) and 2 (B)."
    """
    units = ctx.units()
    cov = ctx.coverage()
    pieces = [p for p in cov.gaps if not (p.width <= cov.tol * ABOVE and (len(p.units) > 1 or p.on_frame))]
    areas, wides = piece_measures(ground(project, units.geoms), pieces)
    for piece, area, wide in zip(pieces, areas.tolist(), wides.tolist()):
        where = f"between {units.labels(piece.units)}" if len(piece.units) > 1 else (
            f"next to {units.label(piece.units[0])}" if piece.units else "with no unit around it")
        edge = " at the map edge" if piece.at_extent else ""
        yield Hit(
            f"Gap of {num(area)} m² (up to {num(wide)} m wide) inside the map extent{edge}, {where}.",
            layer="units",
            features=tuple(units.ids[k] for k in piece.units),
            measure=area,
            geometry=piece.geom,
        )
    yield from not_processed(ctx, GAPS)


@rule("unit-sliver", family="topology", severity="warning", needs=("units",), partitioned=True)
def unit_sliver(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A unit polygon is too small or too thin to be seen at publication scale.

    Catches
    -------
    Polygons whose area is under `[checks] sliver_area_mm2` (default 1 mm²)
    of printed map, or whose width is under `sliver_width_mm` (default
    0.5 mm) everywhere, both measured at the map scale of `[map] scale`
    (1 mm² at 1:25 000 is 625 m², 0.5 mm is 12.5 m). The defaults are a
    rule of thumb of the trade (common practice; values from memory, not from
    a published standard). The width is the diameter of the largest circle
    that fits inside the polygon (GEOS `maximum_inscribed_circle`); a polygon
    with a thin tail but a wide body is not a sliver. To stay fast on large
    maps, the inscribed circle is computed only for polygons that could be
    thin: every point of a polygon whose inscribed circle has radius r lies
    within r of an edge or a vertex, so its area is at most perimeter x r plus
    half a disc of radius r per vertex; a polygon with more area than that
    bound at r = half the width is wide enough and skipped.
    In a geographic CRS the area and width are measured in metres, in a
    Lambert azimuthal equal-area projection of the CRS's own ellipsoid
    centred on the map (pyproj), never with one metres-per-degree factor: at
    60°N a degree of longitude is half a degree of latitude on the ground.
    Not covered there: the tolerance of the other topology rules is still
    one length in degrees.

    Why it matters
    --------------
    Nobody can see, colour or label such a polygon on the printed map, and
    most slivers are not geology but leftovers of editing: a contact drawn
    twice, a polygon cut by a line that should have snapped.

    Fix
    ---
    Merge a leftover into its neighbour; keep a real small body (a dyke, a
    thin bed) and exaggerate it on the printed map. If the map is published
    for use at a larger scale than `[map] scale`, set that scale, or lower
    the thresholds in `[checks]`.

    Example
    -------
    At 1:10 000 (100 m², 5 m) a 40 m x 2 m strip gives "Polygon 3 (B) is a sliver
    at 1:10,000: 80.00 m² (smallest legible 100.00 m²), at most 2.00 m wide
    (narrowest legible 5.00 m)."
    """
    units = ctx.units()
    if not len(units):
        return
    amin, wmin = sliver_thresholds(project)
    m = metres_per_unit(project)
    geoms = units.geoms
    g = ground(project, geoms)
    if g.geographic:  # judged in real metres, on the ellipsoid's local projection
        geoms = g.local(geoms)
        amin, wmin = amin * m * m, wmin * m
        m = 1.0
    area = shapely.area(geoms)
    small = area < amin
    perim = shapely.length(geoms)
    nverts = shapely.get_num_coordinates(geoms)
    r = wmin / 2.0
    maybe_thin = area <= perim * r + nverts * (math.pi / 2.0) * r * r
    cand = np.flatnonzero(small | maybe_thin)
    wid = np.full(len(geoms), np.inf)
    if len(cand):
        wid[cand] = widths(geoms[cand], wmin / 10.0)
    thin = wid < wmin
    scale = f"1:{project.config.scale:,.0f}"
    for k in np.flatnonzero(small | thin):
        parts = []
        if small[k]:
            parts.append(f"{num(area[k] * m * m)} m² (smallest legible {num(amin * m * m)} m²)")
        if thin[k]:
            parts.append(f"at most {num(wid[k] * m)} m wide (narrowest legible {num(wmin * m)} m)")
        elif np.isfinite(wid[k]):
            parts.append(f"{num(wid[k] * m)} m wide")
        yield Hit(
            f"{capital(units.label(k))} is a sliver at {scale}: {', '.join(parts)}.",
            layer="units",
            features=(units.ids[k],),
            measure=float(area[k] * m * m),
            geometry=units.geoms[k],
        )


@rule("unit-edge-mismatch", family="topology", severity="error", needs=("units",), partitioned=extent_is_declared)
def unit_edge_mismatch(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Neighbouring polygons whose common edge nearly, but not exactly, coincides.

    Catches
    -------
    Pairs of unit polygons whose boundaries run together but are not drawn
    with the same vertices: thin overlaps and thin gaps no wider than the
    tolerance (`[checks] tolerance`, default 0.1 mm at map scale), and edges
    that lie exactly on one another but where one polygon has vertices the
    other lacks (GEOS reports these as invalid coverage edges). One finding
    per pair (or per group of polygons around a thin gap), with the misfitting
    linework, the length of the stretch (for a thin piece: the long side of
    the rectangle with its area and perimeter, or of its minimum rotated
    rectangle, whichever is longer) and the largest separation (the width of
    the thin piece). A thin gap is a misfit wherever it runs: enclosed by
    units, open to the declared extent (a strip across the map between two
    units, a bay open to the frame), or open to the units' outline when no
    extent is declared; this is every gap GEOS flags with
    `shapely.coverage_invalid_edges(gap_width=tolerance)`. Wider overlaps and
    gaps are reported by `unit-overlap` and `unit-gap`, and a gap along one
    unit only (an unfilled hole inside it) by `unit-gap`, so each defect is
    reported once; misaligned vertices at the corners of such a gap or
    overlap belong to it, as does a thin misfit of the same polygons within
    the tolerance of it (the floating-point far side of a bite cut out of one
    polygon); a misfit of more polygons than such a defect's belongs to it only
    where the two touch (a misfit along the far side of a strip narrower than
    the tolerance, with a gap along its other side, is a defect of its own).
    A unit edge within the tolerance of the declared
    extent counts as lying on it, as lines do, unless GEOS flags an edge
    along the gap between them.
    Even a misfit far below the tolerance (floating-point noise after
    clipping or reprojecting one polygon alone) is reported: the polygons are
    not a coverage until their shared vertices are the same.

    Where GEOS stops on a part of the map (a polygon it cannot process), that
    part is one finding saying it could not be checked, naming its polygons;
    every other part is still checked.

    Why it matters
    --------------
    This is where slivers and micro-gaps come from after editing: invisible
    on screen, but the polygons no longer form a coverage, area sums are off,
    and dissolving, simplifying or rebuilding lines from the polygons fails or
    leaves debris.

    Fix
    ---
    Snap the two polygons' shared vertices together (a topological editing
    mode, or snapping with a tolerance a little above the separation reported),
    or rebuild both polygons from the contact line between them.

    Example
    -------
    Two squares sharing the edge x = 10, where the second one's edge has an
    extra vertex at (10.02, 5), on a 1:10 000 map (tolerance 1 m): "Polygons 1 (A)
    and 2 (B) do not share their common edge exactly: 10.00 m of it is
    misaligned, up to 0.02 m apart."
    """
    units = ctx.units()
    mms = ctx.mismatches()
    along, across = mismatch_scales(ground(project, units.geoms), mms)
    for mm, sa, sx in zip(mms, along.tolist(), across.tolist()):
        if mm.apart is None:
            how = "the edges coincide but their vertices are not shared"
        elif mm.apart * sx < 0.005:
            how = "less than 0.01 m apart"
        else:
            how = f"up to {num(mm.apart * sx)} m apart"
        length = mm.length * sa
        text = f"{capital(units.labels(mm.units))} do not share their common edge exactly: {num(length)} m of it is misaligned, {how}."
        yield Hit(text, layer="units", features=tuple(units.ids[k] for k in mm.units), measure=length, geometry=mm.geometry)
    yield from not_processed(ctx, MISFITS)


@rule("unit-same-neighbour", family="topology", severity="warning", needs=("units",), partitioned=extent_is_declared)
def unit_same_neighbour(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Two adjacent polygons carry the same unit code and no fault separates them.

    Catches
    -------
    Pairs of unit polygons with the same code (case and surrounding spaces
    ignored) that share a stretch of boundary longer than the tolerance along
    which no line of a fault kind runs (within the tolerance). Polygons that
    meet only at a point are not neighbours. A contact line along the shared
    edge does not excuse it (`line-same-unit-contact` reports that line as
    well). Without a lines layer no fault can be seen, so every such pair is
    reported. Polygons with an empty code are left to `unit-code-missing`.

    Why it matters
    --------------
    Either the two polygons are one body of rock split for no geological
    reason (an editing leftover that doubles the polygon count and hides the
    real outline), or one of them carries the wrong code.

    Fix
    ---
    Merge the two polygons, or correct the code of the mislabelled one; if a
    fault does separate them, draw it along the shared edge with a fault kind.

    Example
    -------
    Two adjacent polygons both coded `A` sharing a 100 m edge with no line on
    it: "Polygons 1 and 2 are both A and share 100.00 m of boundary with no
    fault along it."
    """
    units = ctx.units()
    if units.codes is None or not len(units):
        return
    edges = ctx.edges()
    tol = float(ctx.tolerance)
    codes = units.codes
    sel = np.flatnonzero(edges.twin)
    same = codes[edges.left[sel]] == codes[edges.right[sel]]
    sel = sel[same & (codes[edges.left[sel]] != "")]
    faults = None
    if ctx.layer("lines") is not None:  # lines placed with the map (see CheckContext.alignment)
        net = ctx.line_network()
        if sel.size:
            sel = sel[~ctx.edges_drawn(("fault",))[sel]]
        faults = net.role_lines("fault")
    # stretches per pair: exact shared edges, and misaligned edges of same-code pairs
    pairs: dict[tuple[int, ...], list[Any]] = {}
    if sel.size:
        a = np.minimum(edges.left[sel], edges.right[sel])
        b = np.maximum(edges.left[sel], edges.right[sel])
        key = a * len(units) + b
        uk, inv = np.unique(key, return_inverse=True)
        merged = merge_by_group(edges.lines(sel), inv, len(uk))
        for k, g in zip(uk, merged):
            pairs.setdefault((int(k // len(units)), int(k % len(units))), []).append(g)
    for mm in ctx.mismatches():
        if len(mm.units) == 2 and codes[mm.units[0]] == codes[mm.units[1]] and codes[mm.units[0]]:
            pairs.setdefault(tuple(mm.units), []).append(mm.geometry)
    if not pairs:
        return
    keys = list(pairs)
    geoms = np.array([shapely.union_all(v) if len(v) > 1 else v[0] for v in pairs.values()], dtype=object)
    if faults is not None and len(faults):
        geoms = uncovered(geoms, faults, tol)
    lengths = shapely.length(geoms)
    metres = ground(project, units.geoms).lengths(geoms)
    for (a, b), g, length, ground_length in zip(keys, geoms, lengths, metres):
        if length <= tol * ABOVE:
            continue
        yield Hit(
            f"{capital(units.labels([a, b], code=False))} are both {units.code(a)} and share {num(ground_length)} m of boundary with no fault along it.",
            layer="units",
            features=(units.ids[a], units.ids[b]),
            measure=float(ground_length),
            geometry=g,
        )


@rule("unit-outside-extent", family="topology", severity="error", needs=("units", "extent"), partitioned=extent_is_declared)
def unit_outside_extent(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """Unit area lies outside the declared map extent.

    Catches
    -------
    Each part of a unit polygon outside the polygon(s) of the `extent` layer
    and wider than the tolerance, with its area. Parts no wider than the
    tolerance (a unit edge digitised a hair beyond the frame, or clipped to it
    with rounding) count as lying on the extent, as lines within the
    tolerance of a boundary do. Without an `extent` layer the rule does not
    run: the extent is then the units' own outline, which nothing can lie
    outside.

    Where GEOS stops on a part of the map (a polygon it cannot process), that
    part is one finding saying it could not be checked, naming its polygons;
    every other part is still checked.

    Why it matters
    --------------
    The map claims more ground than its stated extent; the area outside was
    often not surveyed, and overlaps with the neighbouring sheet follow.

    Fix
    ---
    Clip the units to the extent, or correct the extent if the map really
    covers more ground.

    Example
    -------
    A unit drawn 2 m past a 100 m side of the frame: "Polygon 2 (B) has 200.00 m²
    outside the map extent (up to 2.00 m wide)."
    """
    units = ctx.units()
    cov = ctx.coverage()
    pieces = [p for p in cov.outside if not p.width <= cov.tol * ABOVE]
    areas, wides = piece_measures(ground(project, units.geoms), pieces)
    for piece, area, wide in zip(pieces, areas.tolist(), wides.tolist()):
        (k,) = piece.units
        yield Hit(
            f"{capital(units.label(k))} has {num(area)} m² outside the map extent (up to {num(wide)} m wide).",
            layer="units",
            features=(units.ids[k],),
            measure=area,
            geometry=piece.geom,
        )
    yield from not_processed(ctx, OUTSIDE)


@rule("unit-code-missing", family="topology", severity="error", needs=("units",), partitioned=True)
def unit_code_missing(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
    """A unit polygon has an empty unit code.

    Catches
    -------
    Polygons whose unit field (`unit_field` in the manifest, default `unit`)
    is null, empty or only spaces. When the field itself is absent,
    `field-missing` reports that once instead.

    Why it matters
    --------------
    A polygon without a unit cannot be coloured, cannot be matched to the
    legend and says nothing about the ground it covers.

    Fix
    ---
    Give the polygon its unit code from the field data, or merge it into the
    neighbour it was split from.

    Example
    -------
    A polygon with `unit = ""` gives "Polygon 3 has no unit code
    (field 'unit')."
    """
    layer = project.layers["units"]
    values = text_values(layer, "unit_field")
    if values is None:
        return
    k, texts = values
    geoms = layer.geometry
    blank = np.array([not t.strip() for t in texts], dtype=bool)[k]
    name = layer.field("unit_field")
    rows = np.flatnonzero(blank)
    own = layer.text("id_field")
    numbers = np.asarray(layer.frame.index.astype(str), dtype=object)
    areas = ground(project, ctx.units().geoms).areas(geoms[rows])
    for row, area in zip(rows, areas.tolist()):
        g = geoms[row]
        has = g is not None and not shapely.is_empty(g)
        yield Hit(
            f"{capital(feature_name('polygon', numbers[row], own[row] if own is not None else None))} has no unit code (field '{name}')"
            + (f"; it covers {num(area)} m²." if has else "."),
            layer="units",
            features=(str(layer.ids[row]),),
            measure=float(area) if has else None,
            geometry=g if has else None,
        )
