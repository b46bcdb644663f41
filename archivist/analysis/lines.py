"""The lines layer as a network: kinds, parts and hashed segments.

Line kinds
----------
The kind of each line is read from the lines layer's `kind_field` and
matched against `[checks] line_kinds`, ignoring case and the difference
between spaces, hyphens and underscores; a certainty qualifier may be
written into the kind (`contact, inferred`, `fault (concealed)`, `inferred
contact`). What a kind means for the checks (its role) follows from its name:
"fault" or "thrust" is a fault, `map-boundary` the map boundary, "contact" or
"unconformity" a contact, anything else another kind.

Segments
--------
Each segment is hashed by its two endpoints in canonical order, like the
edges of the half-edge table (:mod:`.halfedges`), so a segment drawn exactly
on a unit edge is found there with one ``searchsorted``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING, Any, Iterable

import numpy as np
import shapely

from .arrays import (
    LINESTRING,
    MULTILINESTRING,
    canonical,
    collections_as,
    coord_hash,
    group_sorted,
    linear_parts,
    text_values,
)
from .halfedges import Edges
from .messages import feature_name
from .nearness import dwithin_pairs

if TYPE_CHECKING:
    from ..project import Layer, MapProject

ROLE_NAMES = {"contact": "Contact", "fault": "Fault", "boundary": "Map-boundary line", "other": "Line", "unknown": "Line"}


# ---------------------------------------------------------------- kinds

def norm_kind(text: Any) -> str:
    """A kind compared loosely: lower case, runs of spaces, hyphens and underscores as one space."""
    return re.sub(r"[\s_\-]+", " ", str(text).strip().lower()).strip()


def parse_kind(text: Any, kinds: Iterable[str], certainties: Iterable[str]) -> tuple[str, str | None] | None:
    """The vocabulary kind (and certainty qualifier) a kind value names, or None.

    Accepts the kind alone or with a qualifier: ``contact``, ``Contact``,
    ``contact, inferred``, ``fault (concealed)``, ``inferred contact``,
    ``map boundary``.
    """
    if text is None:
        return None
    t = norm_kind(text)
    if not t:
        return None
    vocab = {norm_kind(k): k for k in kinds}
    quals = {norm_kind(c): c for c in certainties}
    if t in vocab:
        return vocab[t], None
    m = re.fullmatch(r"(.+?)\s*(?:,\s*(.+)|\(\s*(.+?)\s*\))", str(text).strip().lower())
    if m:
        base, qual = norm_kind(m.group(1)), norm_kind(m.group(2) or m.group(3))
        if base in vocab and qual in quals:
            return vocab[base], quals[qual]
    for q in sorted(quals, key=len, reverse=True):
        if t.startswith(q + " ") and t[len(q) + 1:] in vocab:
            return vocab[t[len(q) + 1:]], quals[q]
    return None


def kind_for(kinds: Iterable[str], role: str, fallback: str) -> str:
    """The first of ``kinds`` the checks read as ``role`` (a frame kind, a contact kind), else ``fallback``."""
    return next((k for k in kinds if kind_role(k) == role), fallback)


def kind_role(kind: str) -> str:
    """What the checks make of a vocabulary kind: contact, fault, boundary or other."""
    n = norm_kind(kind)
    if "fault" in n or "thrust" in n:
        return "fault"
    if n == "map boundary":
        return "boundary"
    if "contact" in n or "unconformity" in n:
        return "contact"
    return "other"


@dataclass(frozen=True)
class LineNetwork:
    """The lines layer as the linework checks see it: features, parts and segments."""

    rows: np.ndarray
    geoms: np.ndarray
    ids: np.ndarray
    kind_code: np.ndarray | None  # per feature: index into kind_texts (the last one, "", for nulls)
    kind_texts: np.ndarray | None  # distinct kind values as written
    kind_parsed: list[tuple[str, str | None] | None]  # per distinct value: (kind, qualifier) or None
    roles: np.ndarray  # per feature: contact, fault, boundary, other, unknown
    coords: np.ndarray
    part_off: np.ndarray
    part_feat: np.ndarray
    seg_c0: np.ndarray  # coordinate index of each segment's start
    seg_part: np.ndarray
    h: np.ndarray
    px: np.ndarray
    py: np.ndarray
    qx: np.ndarray
    qy: np.ndarray
    numbers: np.ndarray | None = None  # feature numbers as text, when ``ids`` are the mapper's own (id_field)

    @property
    def n_parts(self) -> int:
        return len(self.part_off) - 1

    @property
    def part_roles(self) -> np.ndarray:
        return self.roles[self.part_feat]

    @property
    def seg_roles(self) -> np.ndarray:
        return self.roles[self.part_feat[self.seg_part]]

    @property
    def seg_length(self) -> np.ndarray:
        return np.hypot(self.qx - self.px, self.qy - self.py)

    def part(self, p: int) -> Any:
        """Part p as a LineString."""
        return shapely.linestrings(self.coords[self.part_off[p]:self.part_off[p + 1]])

    def part_ends(self, parts: np.ndarray) -> np.ndarray:
        """Both end coordinates of each part: shape (n, 2, 2)."""
        return np.stack([self.coords[self.part_off[parts]], self.coords[self.part_off[parts + 1] - 1]], axis=1)

    @cached_property
    def tree(self) -> shapely.STRtree:
        """Spatial index of the line features (built on first use)."""
        return shapely.STRtree(self.geoms)

    def role_lines(self, role: str) -> np.ndarray:
        return self.geoms[self.roles == role]

    def label(self, f: int) -> str:
        """``Contact 3``; with the mapper's own ids ``Contact C-12 (feature 3)``."""
        noun = ROLE_NAMES.get(self.roles[f], "Line")
        if self.numbers is None:
            return feature_name(noun, self.ids[f])
        return feature_name(noun, self.numbers[f], self.ids[f])

    def kind(self, f: int) -> tuple[str, str | None] | None:
        """(kind, qualifier) of feature f, or None."""
        if self.kind_code is None:
            return None
        return self.kind_parsed[self.kind_code[f]]

    def kind_text(self, f: int) -> str:
        k = self.kind(f)
        return "unknown kind" if k is None else k[0]

    def match(self, edges: Edges) -> np.ndarray:
        """For every segment, the unit edge with exactly its endpoints, or -1."""
        return edges.find(self.h, self.px, self.py, self.qx, self.qy)

    def edges_drawn(self, seg_edge: np.ndarray, n_edges: int, roles: tuple[str, ...] | None = None) -> np.ndarray:
        """A mask over the unit edges: True where a line segment (of the given roles) draws the edge exactly.

        ``seg_edge`` is :meth:`match` of the half-edge table with ``n_edges`` edges.
        """
        sel = seg_edge >= 0
        if roles is not None:
            sel &= np.isin(self.seg_roles, roles)
        drawn = np.zeros(n_edges, dtype=bool)
        drawn[seg_edge[sel]] = True
        return drawn

    def runs(self, sel: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Maximal stretches of consecutive selected segments, as LineStrings, with their part."""
        idx = np.flatnonzero(sel)
        if not len(idx):
            return np.empty(0, dtype=object), np.empty(0, dtype=np.int64)
        c0 = self.seg_c0[idx]
        part = self.seg_part[idx]
        brk = np.ones(len(idx), dtype=bool)
        brk[1:] = (np.diff(c0) != 1) | (np.diff(part) != 0)
        run = np.cumsum(brk) - 1
        last = np.r_[brk[1:], True]
        cidx = np.concatenate([c0, c0[last] + 1])
        rid = np.concatenate([run, run[last]])
        order = np.lexsort((cidx, rid))
        geoms = shapely.linestrings(self.coords[cidx[order]], indices=rid[order])
        return geoms, part[brk]


def _line_geoms(layer: Layer) -> np.ndarray:
    g = collections_as(np.array(layer.geometry, dtype=object, copy=True), linear_parts, shapely.multilinestrings)
    g[~np.isin(shapely.get_type_id(g), (LINESTRING, MULTILINESTRING))] = None
    g[shapely.is_empty(g)] = None
    g[layer.far[0]] = None  # reported by coordinates-implausible
    return g


def build_line_network(project: MapProject) -> LineNetwork:
    """The lines layer as a network: features with their kind and role, parts, and hashed segments."""
    layer = project.layers["lines"]
    cfg = project.config
    all_geoms = _line_geoms(layer)
    rows = np.flatnonzero(~shapely.is_missing(all_geoms))
    geoms = all_geoms[rows]
    ids = np.asarray(layer.ids, dtype=object)[rows]
    values = text_values(layer, "kind_field")
    if values is not None:
        code, texts = values
        code = np.where(code < 0, len(texts) - 1, code)[rows]
        parsed = [parse_kind(t, cfg.line_kinds, cfg.certainties) for t in texts]
        roles = np.array(["unknown" if k is None else kind_role(k[0]) for k in parsed], dtype=object)[code]
    else:
        code, texts, parsed = None, None, []
        roles = np.full(len(rows), "unknown", dtype=object)
    if len(geoms):
        gtype, coords, offsets = shapely.to_ragged_array(geoms, include_z=False)
        if gtype == shapely.GeometryType.LINESTRING:
            part_off = offsets[0].astype(np.int64)
            part_feat = np.arange(len(part_off) - 1)
        else:
            part_off = offsets[0].astype(np.int64)
            part_feat = np.repeat(np.arange(len(offsets[1]) - 1), np.diff(offsets[1]))
    else:
        coords, part_off, part_feat = np.empty((0, 2)), np.zeros(1, dtype=np.int64), np.empty(0, dtype=np.int64)
    # drop empty parts: they have no coordinates and no segments
    sizes = np.diff(part_off)
    if (sizes == 0).any():
        keep = sizes > 0
        part_feat = part_feat[keep]
        part_off = np.r_[0, np.cumsum(sizes[keep])]
    start = np.ones(len(coords), dtype=bool)
    start[part_off[1:] - 1] = False
    c0 = np.flatnonzero(start)
    seg_part = np.repeat(np.arange(len(part_off) - 1), np.maximum(np.diff(part_off) - 1, 0))
    x, y = coords[:, 0], coords[:, 1]
    nonzero = (x[c0] != x[c0 + 1]) | (y[c0] != y[c0 + 1])
    c0, seg_part = c0[nonzero], seg_part[nonzero]
    px, py, qx, qy, _ = canonical(x[c0], y[c0], x[c0 + 1], y[c0 + 1])
    h = coord_hash(px, py, qx, qy)
    numbers = None
    if layer.field("id_field") is not None:  # ids are the mapper's own: the feature number is named second
        numbers = np.asarray(layer.frame.index.astype(str), dtype=object)[rows]
    return LineNetwork(rows, geoms, ids, code, texts, parsed, roles, coords, part_off, part_feat, c0, seg_part, h, px, py, qx, qy,
                       numbers)


@dataclass(frozen=True)
class LooseEnds:
    """Ends of lines that share no vertex with any other line, and whether another line is within the tolerance.

    Arrays run over the ends: ``coord`` (index into ``LineNetwork.coords``),
    ``part``, ``feat`` (its part and feature), ``at_start`` (the start of its
    part, else its end), ``points`` (the end as a Point) and ``near_line``
    (another feature of the network lies within the tolerance of it).
    """

    coord: np.ndarray
    part: np.ndarray
    feat: np.ndarray
    at_start: np.ndarray
    points: np.ndarray
    near_line: np.ndarray

    def __len__(self) -> int:
        return len(self.coord)


def loose_ends(net: LineNetwork, roles: tuple[str, ...], tol: float) -> LooseEnds:
    """The ends of the parts of ``roles`` whose coordinates occur at no other vertex of any line.

    An end that shares its coordinates exactly with another vertex (of any
    line, its own included: a closed loop) is connected without further test;
    for the others, ``near_line`` says whether another feature lies within
    ``tol`` (GEOS ``dwithin`` through the network's STRtree, :func:`.nearness.dwithin_pairs`).
    """
    empty = np.empty(0, dtype=np.int64)
    sel_parts = np.flatnonzero(np.isin(net.part_roles, roles) & (np.diff(net.part_off) >= 2))
    if not len(sel_parts):
        return LooseEnds(empty, empty, empty, np.empty(0, dtype=bool), np.empty(0, dtype=object), np.empty(0, dtype=bool))
    c = net.coords
    n = len(c)
    keep = np.ones(n, dtype=bool)
    if n > 1:
        keep[1:] = (c[1:, 0] != c[:-1, 0]) | (c[1:, 1] != c[:-1, 1])
        keep[net.part_off[:-1][np.diff(net.part_off) > 0]] = True
    kept = np.flatnonzero(keep)
    order, gid, starts = group_sorted(coord_hash(c[kept, 0], c[kept, 1]), c[kept, 0], c[kept, 1])
    counts = np.diff(np.r_[starts, len(order)])
    gid_of_kept = np.empty(len(kept), dtype=np.int64)
    gid_of_kept[order] = gid
    pos = np.cumsum(keep) - 1
    s, e = net.part_off[sel_parts], net.part_off[sel_parts + 1] - 1
    ends = np.concatenate([s, e])
    end_part = np.concatenate([sel_parts, sel_parts])
    at_start = np.r_[np.ones(len(s), bool), np.zeros(len(e), bool)]
    loose = counts[gid_of_kept[pos[ends]]] < 2
    ends, end_part, at_start = ends[loose], end_part[loose], at_start[loose]
    pts = shapely.points(c[ends]) if len(ends) else np.empty(0, dtype=object)
    end_feat = net.part_feat[end_part]
    near = np.zeros(len(ends), dtype=bool)
    if len(ends):
        pi, fj = dwithin_pairs(net.tree, net.geoms, pts, tol)
        near[pi[fj != end_feat[pi]]] = True
    return LooseEnds(ends, end_part, end_feat, at_start, pts, near)
