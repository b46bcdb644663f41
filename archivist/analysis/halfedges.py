"""The half-edge table: every distinct boundary segment of the unit polygons, and who draws it on which side.

A clean coverage is one where every polygon edge inside the map is drawn
twice, once by each neighbour, with the same two vertices and in opposite
directions (interior on the left). The table is built for the whole layer
with numpy (coordinates from ``shapely.to_ragged_array``, one 64-bit hash per
segment, one sort), which is linear in the number of vertices. Every place
where the coverage is not clean leaves a trace in it: a half-edge without
its twin, or a segment drawn twice on the same side.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from .arrays import canonical, coord_hash, group_sorted, same_objects, segment_lines


def polygon_half_edges(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Directed boundary segments of polygons with the interior on the left.

    Returns x0, y0, x1, y1 and the owner (index into ``geoms``) of every
    segment of every ring, zero-length segments dropped.
    """
    empty = (np.empty(0),) * 4 + (np.empty(0, dtype=np.int64),)
    if len(geoms) == 0:
        return empty
    gtype, coords, offsets = shapely.to_ragged_array(geoms, include_z=False)
    if gtype == shapely.GeometryType.POLYGON:
        ring_off, part_off = offsets
        geom_of_part = np.arange(len(part_off) - 1)
    else:
        ring_off, part_off, geom_off = offsets
        geom_of_part = np.repeat(np.arange(len(geom_off) - 1), np.diff(geom_off))
    ring_off = ring_off.astype(np.int64)
    n_rings = len(ring_off) - 1
    if n_rings == 0:
        return empty
    part_of_ring = np.repeat(np.arange(len(part_off) - 1), np.diff(part_off))
    is_ext = np.zeros(n_rings, dtype=bool)
    is_ext[part_off[:-1][np.diff(part_off) > 0]] = True
    owner_of_ring = geom_of_part[part_of_ring]
    starts = np.ones(len(coords), dtype=bool)
    starts[ring_off[1:] - 1] = False
    s = np.flatnonzero(starts)
    ring = np.repeat(np.arange(n_rings), np.diff(ring_off) - 1)
    x, y = coords[:, 0], coords[:, 1]
    ox, oy = x[ring_off[:-1]][ring], y[ring_off[:-1]][ring]
    ax, ay, bx, by = x[s] - ox, y[s] - oy, x[s + 1] - ox, y[s + 1] - oy
    twice_area = np.bincount(ring, ax * by - bx * ay, minlength=n_rings)
    flip = (is_ext != (twice_area > 0))[ring]
    del ax, ay, bx, by, ox, oy
    x0 = np.where(flip, x[s + 1], x[s])
    y0 = np.where(flip, y[s + 1], y[s])
    x1 = np.where(flip, x[s], x[s + 1])
    y1 = np.where(flip, y[s], y[s + 1])
    owner = owner_of_ring[ring]
    keep = (x0 != x1) | (y0 != y1)
    if not keep.all():
        x0, y0, x1, y1, owner = x0[keep], y0[keep], x1[keep], y1[keep], owner[keep]
    return x0, y0, x1, y1, owner


@dataclass(frozen=True)
class Edges:
    """Every distinct boundary segment of the units, with who draws it on which side.

    ``left``/``right`` are the polygons with the segment's interior on their
    left going from (px, py) to (qx, qy) and the reverse (-1: none).
    ``twin`` marks the clean case: exactly one polygon on each side.
    ``suspects`` are polygons owning any half-edge without its twin;
    ``crowded`` those owning a half-edge of a segment drawn by three polygons
    or more, or twice on one side (two of them overlap there).
    """

    h: np.ndarray
    px: np.ndarray
    py: np.ndarray
    qx: np.ndarray
    qy: np.ndarray
    count: np.ndarray
    left: np.ndarray
    right: np.ndarray
    twin: np.ndarray
    suspects: np.ndarray
    crowded: np.ndarray

    def __len__(self) -> int:
        return len(self.h)

    @property
    def length(self) -> np.ndarray:
        return np.hypot(self.qx - self.px, self.qy - self.py)

    def find(self, h: np.ndarray, px: np.ndarray, py: np.ndarray, qx: np.ndarray, qy: np.ndarray) -> np.ndarray:
        """Index of the edge with exactly these (canonical) coordinates, or -1."""
        if len(self.h) == 0:
            return np.full(len(h), -1, dtype=np.int64)
        order = np.argsort(h)  # sorted needles keep the binary searches in cache
        pos = np.empty(len(h), dtype=np.int64)
        pos[order] = np.searchsorted(self.h, h[order])
        np.minimum(pos, len(self.h) - 1, out=pos)
        ok = (self.h[pos] == h) & (self.px[pos] == px) & (self.py[pos] == py) & (self.qx[pos] == qx) & (self.qy[pos] == qy)
        return np.where(ok, pos, -1)

    def lines(self, idx: np.ndarray) -> np.ndarray:
        """The selected edges as two-point LineStrings."""
        return segment_lines(self.px[idx], self.py[idx], self.qx[idx], self.qy[idx])


@dataclass(frozen=True)
class HalfEdgeRows:
    """Every half-edge of a set of polygons, in the order :func:`polygon_half_edges` gives them (polygon by
    polygon), as canonical keys: what :func:`build_edges` sorts into the table. ``geoms``: the polygons."""

    geoms: np.ndarray
    px: np.ndarray
    py: np.ndarray
    qx: np.ndarray
    qy: np.ndarray
    fwd: np.ndarray
    h: np.ndarray
    owner: np.ndarray


class EdgeBasis:
    """The half-edges last built for polygons that change a few at a time (a repair's working copy).

    Passed to :func:`build_edges`, it lends the half-edges of the polygons
    the new set shares with the last one (the very same geometry objects:
    half-edges depend on the polygon alone) and takes the new set's in turn;
    only the other polygons are taken apart. The table is the one a build
    from scratch gives, array for array.
    """

    def __init__(self) -> None:
        self.rows: HalfEdgeRows | None = None


# Coordinates per batch of polygons taken apart at once (:func:`_fresh_rows`): some 2 MB per array of the batch.
BATCH_COORDS = 1 << 18


def _fresh_rows(geoms: np.ndarray) -> tuple[np.ndarray, ...]:
    """px, py, qx, qy, fwd, h and owner (index into ``geoms``) of every half-edge of ``geoms``, polygon by polygon.

    Taken apart in batches of about :data:`BATCH_COORDS` coordinates, joined
    in order: every step is element-wise per polygon (its rings, their
    orientation, each segment's key), so the rows are those of one pass
    over all, bit for bit. One pass over a map of 10^6 polygons made a
    dozen temporary arrays of some 100 MB each, and the system zeroes every
    page of each such array afresh (glibc maps allocations over 32 MB anew
    each time): 4.4 to 4.9 s, 2.1 to 2.4 s of it system time; in batches,
    whose arrays the allocator reuses, 2.1 to 2.8 s (measured on the
    10^6-polygon, 1 % benchmark map; at 10^5 polygons 0.18 to 0.26 s
    against 0.23 to 0.35 s).
    """
    n = len(geoms)
    bounds = [0, n]  # no polygon: one pass over none, which gives the empty rows
    if n:
        ends = np.cumsum(shapely.get_num_coordinates(geoms))
        cuts = np.searchsorted(ends, np.arange(BATCH_COORDS, int(ends[-1]), BATCH_COORDS), side="right")
        bounds = np.unique(np.r_[0, cuts, n]).tolist()
    parts = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        x0, y0, x1, y1, owner = polygon_half_edges(geoms[a:b])
        px, py, qx, qy, fwd = canonical(x0, y0, x1, y1)
        parts.append((px, py, qx, qy, fwd, coord_hash(px, py, qx, qy), owner + a))
    if len(parts) == 1:
        return parts[0]
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(7))


def half_edge_rows(geoms: np.ndarray, basis: HalfEdgeRows | None = None) -> HalfEdgeRows:
    """The :class:`HalfEdgeRows` of ``geoms``; those of the polygons ``basis`` holds too are copied from it."""
    geoms = np.asarray(geoms, dtype=object)
    n = len(geoms)
    src = same_objects(basis.geoms, geoms) if basis is not None and n else np.full(n, -1, dtype=np.int64)
    fresh = np.flatnonzero(src < 0)
    px, py, qx, qy, fwd, h, owner = _fresh_rows(geoms[fresh])
    new = HalfEdgeRows(geoms, px, py, qx, qy, fwd, h, fresh[owner])
    if basis is None or len(fresh) == n:
        return new
    # polygon by polygon, as a build from scratch orders them: each kept polygon's block of the basis, each fresh
    # polygon's block of the new half-edges
    kept = np.flatnonzero(src >= 0)
    b_start = np.searchsorted(basis.owner, np.arange(len(basis.geoms)))
    b_count = np.diff(np.r_[b_start, len(basis.owner)])
    count = np.bincount(new.owner, minlength=n)
    count[kept] = b_count[src[kept]]
    start = np.zeros(n, dtype=np.int64)
    start[kept] = b_start[src[kept]]
    start[fresh] = np.searchsorted(new.owner, fresh)
    total = int(count.sum())
    # each half-edge's position in the basis followed by the new ones
    start[fresh] += len(basis.owner)
    at = np.repeat(start - np.r_[0, np.cumsum(count)[:-1]], count) + np.arange(total)
    owner_out = np.repeat(np.arange(n), count)

    def pick(old: np.ndarray, mine: np.ndarray) -> np.ndarray:
        return np.concatenate([old, mine])[at]

    return HalfEdgeRows(geoms, pick(basis.px, px), pick(basis.py, py), pick(basis.qx, qx), pick(basis.qy, qy),
                        pick(basis.fwd, fwd), pick(basis.h, h), owner_out)


def build_edges(geoms: np.ndarray, basis: EdgeBasis | None = None) -> Edges:
    """The half-edge table of polygons (see :class:`Edges`); ``basis``: see :class:`EdgeBasis`."""
    rows = half_edge_rows(geoms, basis.rows if basis is not None else None)
    if basis is not None:
        basis.rows = rows
    px, py, qx, qy, fwd, h, owner = rows.px, rows.py, rows.qx, rows.qy, rows.fwd, rows.h, rows.owner
    order, gid, starts = group_sorted(h, px, py, qx, qy)
    n = len(order)
    counts = np.diff(np.r_[starts, n])
    fwd_s = fwd[order]
    own_s = owner[order]
    n_fwd = np.bincount(gid, weights=fwd_s, minlength=len(starts)).astype(np.int64) if n else np.zeros(0, np.int64)
    twin = (counts == 2) & (n_fwd == 1)
    first = own_s[starts] if n else np.zeros(0, np.int64)
    second = np.where(counts >= 2, own_s[np.minimum(starts + 1, max(n - 1, 0))], -1) if n else np.zeros(0, np.int64)
    first_fwd = fwd_s[starts] if n else np.zeros(0, bool)
    left = np.where(first_fwd, first, second)
    right = np.where(first_fwd, second, first)
    suspects = np.unique(own_s[~twin[gid]]) if n else np.zeros(0, np.int64)
    irregular = (counts >= 3) | ((counts == 2) & ~twin)
    crowded = np.unique(own_s[irregular[gid]]) if n else np.zeros(0, np.int64)
    sel = order[starts]
    return Edges(h[sel], px[sel], py[sel], qx[sel], qy[sel], counts, left, right, twin, suspects, crowded)
