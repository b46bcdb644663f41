"""Matching contacts and faults: pairs within the search distance, kept when each is the other's closest.

Closeness is the Hausdorff distance (GEOS through shapely). A line split or
merged at a new node, whose linework is otherwise unchanged, is no change:
each unmatched line whose whole length lies on the other side's linework of
the same kind is dropped.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

import numpy as np
import shapely

from .common import (
    Comparison,
    Found,
    column_changes,
    describe_fields,
    exact_pairs,
    field_changes,
    layer_pair,
    mutual_best,
    point_of,
    present,
    rest,
)
from .result import Change


def match_lines(cmp: Comparison) -> Found:
    """Every moved, reclassified, changed, added or removed line between the two maps."""
    pair, layer_changes = layer_pair(cmp, "lines")
    if pair is None:
        return Found(layer_changes=layer_changes)
    lo, ln = pair
    og, ng = cmp.geoms(lo, "old"), cmp.geoms(ln, "new")
    layer_changes += column_changes("lines", lo.frame, ln.frame)
    kf, cf = lo.spec.get("kind_field", "kind"), lo.spec.get("certainty_field")
    okind = cmp.text(lo, "kind_field", len(og))
    nkind = cmp.text(ln, "kind_field", len(ng))
    tol = cmp.tol
    opres, npres = np.flatnonzero(present(og)), np.flatnonzero(present(ng))
    ei, ej = exact_pairs(og, ng, opres, npres)
    ro, rn = rest(opres, ei, len(og)), rest(npres, ej, len(ng))
    i = j = np.zeros(0, dtype=int)
    if len(ro) and len(rn):
        tree = shapely.STRtree(ng[rn])
        qi, qj = tree.query(og[ro], predicate="dwithin", distance=cmp.search)
        i, j = ro[qi], rn[qj]
    hd = shapely.hausdorff_distance(og[i], ng[j]) if len(i) else np.zeros(0)
    keep = hd <= cmp.search
    i, j, hd = i[keep], j[keep], hd[keep]
    mi, mj = mutual_best(i, j, hd, (okind[i] != nkind[j]).astype(float), higher=False)
    mhd = np.r_[np.zeros(len(ei)), shapely.hausdorff_distance(og[mi], ng[mj]) if len(mi) else np.zeros(0)]
    mi, mj = np.r_[ei, mi].astype(int), np.r_[ej, mj].astype(int)
    fmask, fields = field_changes(lo.frame, ln.frame, mi, mj)
    changes: list[Change] = []
    for k in map(int, np.flatnonzero((mhd > tol) | fmask)):
        moved = mhd[k] > tol
        fields.setdefault(k, {})
        a, b = og[mi[k]], ng[mj[k]]
        oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
        kind = str(nkind[mj[k]] or "line")
        klass = {c: v for c, v in fields[k].items() if c in (kf, cf)}
        if moved:
            msg = f"{kind.capitalize()} {nid} moved by up to {mhd[k]:.1f} m"
            if fields[k]:
                msg += f"; {describe_fields(fields[k])}"
            x, y = farthest_point(b, a)
            changes.append(Change("line-moved", "lines", (nid,), msg, x, y, (oid,), (nid,), fields[k], distance=float(mhd[k]),
                                  geometry=b, old_geometry=a, new_geometry=b))
        else:
            what = "line-reclassified" if klass else "line-changed"
            x, y = point_of(shapely.line_interpolate_point(b, 0.5, normalized=True))
            changes.append(Change(what, "lines", (nid,), f"Line {nid} {'reclassified' if klass else 'changed'}: {describe_fields(fields[k])}.", x, y,
                                  (oid,), (nid,), fields[k], geometry=b, old_geometry=a, new_geometry=b))
    un_o = rest(opres, mi, len(og))
    un_n = rest(npres, mj, len(ng))
    renoded_o = covered_lines(og, un_o, ng, npres, tol, okind, nkind)
    renoded_n = covered_lines(ng, un_n, og, opres, tol, nkind, okind)
    for oi in un_o:
        if oi in renoded_o:
            continue
        a, oid = og[oi], str(lo.ids[oi])
        x, y = point_of(shapely.line_interpolate_point(a, 0.5, normalized=True))
        changes.append(Change("line-removed", "lines", (oid,), f"{str(okind[oi] or 'line').capitalize()} {oid} ({a.length:.0f} m) removed", x, y, (oid,), (),
                              geometry=a, old_geometry=a))
    drawn_from_polygons = generated_lines(ln.frame)
    for nj in un_n:
        if nj in renoded_n:
            continue
        b, nid = ng[nj], str(ln.ids[nj])
        x, y = point_of(shapely.line_interpolate_point(b, 0.5, normalized=True))
        changes.append(Change("line-added", "lines", (nid,), f"{str(nkind[nj] or 'line').capitalize()} {nid} ({b.length:.0f} m) added", x, y, (), (nid,),
                              geometry=b, new_geometry=b, generated=bool(drawn_from_polygons[nj])))
    for oi in np.flatnonzero(~present(og)):
        changes.append(Change("line-removed", "lines", (str(lo.ids[oi]),), f"Line {lo.ids[oi]} (no geometry) removed", old_features=(str(lo.ids[oi]),)))
    for nj in np.flatnonzero(~present(ng)):
        changes.append(Change("line-added", "lines", (str(ln.ids[nj]),), f"Line {ln.ids[nj]} (no geometry) added", new_features=(str(ln.ids[nj]),)))
    return Found(changes, layer_changes)


def generated_lines(frame: Any) -> np.ndarray:
    """Per line: True where the field ``generated`` marks it as drawn from the polygon boundaries (by ``archivist repair``)."""
    from ..repair.model import GENERATED_FIELD

    if GENERATED_FIELD not in frame.columns:
        return np.zeros(len(frame), dtype=bool)
    text = frame[GENERATED_FIELD].astype(str).str.strip().str.lower()  # booleans, 0/1 or text, as the format stores them
    return text.isin(("true", "1", "yes")).to_numpy(dtype=bool)


def farthest_point(line: Any, other: Any) -> tuple[float | None, float | None]:
    """The vertex of ``line`` farthest from ``other`` (where a moved line moved most)."""
    coords = shapely.get_coordinates(line)
    if len(coords) == 0:
        return None, None
    d = shapely.distance(shapely.points(coords), other)
    k = int(np.argmax(d))
    return float(coords[k, 0]), float(coords[k, 1])


def covered_lines(geoms: np.ndarray, idx: np.ndarray, other: np.ndarray, other_idx: np.ndarray, tol: float,
                  kind: np.ndarray, other_kind: np.ndarray) -> set[int]:
    """Lines of ``idx`` whose whole length lies on ``other`` linework of the same kind (split or merged at a node)."""
    out: set[int] = set()
    if len(idx) == 0 or len(other_idx) == 0:
        return out
    tree = shapely.STRtree(other[other_idx])
    qi, qj = tree.query(geoms[idx], predicate="dwithin", distance=tol)
    hits: dict[int, list[int]] = defaultdict(list)
    for a, b in zip(qi, qj):
        if kind[idx[a]] == other_kind[other_idx[b]]:
            hits[int(idx[a])].append(int(other_idx[b]))
    for line, cands in hits.items():
        zone = shapely.buffer(shapely.union_all(other[cands]), tol)
        remainder = shapely.difference(geoms[line], zone)
        if shapely.length(remainder) <= 2 * tol:
            out.add(line)
    return out
