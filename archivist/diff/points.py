"""Matching samples and structural measurements.

Samples are matched by sample id first (when both sides' ids are unique),
then by place; structures by place only. "By place" is mutual nearest within
the search distance; beyond the tolerance a point counts as the same point,
moved, only when its attributes are unchanged.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import shapely

from .common import (
    Comparison,
    Found,
    column_changes,
    describe_fields,
    field_changes,
    layer_pair,
    mutual_best,
    point_of,
    present,
    rest,
)
from .result import Change

WORD = {"units": "Polygon", "lines": "Line", "extent": "Extent", "samples": "Sample", "structures": "Structure"}


def match_points(cmp: Comparison, role: str) -> Found:
    """Every moved, changed, added or removed point of ``role`` ("samples" or "structures")."""
    pair, layer_changes = layer_pair(cmp, role)
    if pair is None:
        return Found(layer_changes=layer_changes)
    lo, ln = pair
    og, ng = cmp.geoms(lo, "old"), cmp.geoms(ln, "new")
    layer_changes += column_changes(role, lo.frame, ln.frame)
    tol = cmp.tol
    word = WORD[role]
    mi_parts, mj_parts = [], []
    id_col: str | None = lo.spec.get("id_field") if role == "samples" else None
    if id_col and lo.field("id_field") and ln.field("id_field"):
        oids, nids = pd.Index(lo.ids), pd.Index(ln.ids)
        if oids.is_unique and nids.is_unique:
            common = oids.intersection(nids)
            mi_parts.append(oids.get_indexer(common))
            mj_parts.append(nids.get_indexer(common))
    used_o = np.concatenate(mi_parts) if mi_parts else np.zeros(0, dtype=int)
    used_n = np.concatenate(mj_parts) if mj_parts else np.zeros(0, dtype=int)
    # the rest by place: mutual nearest within the search distance
    ro = rest(np.flatnonzero(present(og)), used_o, len(og))
    rn = rest(np.flatnonzero(present(ng)), used_n, len(ng))
    if len(ro) and len(rn):
        tree = shapely.STRtree(ng[rn])
        (qi, qj), d = tree.query_nearest(og[ro], max_distance=cmp.search, return_distance=True, all_matches=False)
        i, j = ro[qi], rn[qj]
        mi, mj = mutual_best(i, j, d, higher=False)
        dist = shapely.distance(og[mi], ng[mj])
        differ, _ = field_changes(lo.frame, ln.frame, mi, mj)
        # beyond the tolerance, a point is "the same, moved" only if its attributes are unchanged
        ok = (dist <= tol) | ~differ
        mi_parts.append(mi[ok])
        mj_parts.append(mj[ok])
    mi = np.concatenate(mi_parts).astype(int) if mi_parts else np.zeros(0, dtype=int)
    mj = np.concatenate(mj_parts).astype(int) if mj_parts else np.zeros(0, dtype=int)
    both = present(og[mi]) & present(ng[mj]) if len(mi) else np.zeros(0, dtype=bool)
    dist = np.where(both, shapely.distance(og[mi], ng[mj]) if len(mi) else 0.0, 0.0)
    fmask, fields = field_changes(lo.frame, ln.frame, mi, mj)
    present_o, present_n = present(og[mi]), present(ng[mj])
    candidates = np.flatnonzero((dist > tol) | (present_o != present_n) | fmask | (lo.ids[mi] != ln.ids[mj]))
    changes = []
    for k in map(int, candidates):
        fields.setdefault(k, {})
        oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
        if oid != nid and id_col is not None:  # samples only
            fields[k] = {id_col: {"old": oid, "new": nid}, **{c: v for c, v in fields[k].items() if c != id_col}}
        moved = dist[k] > tol or present_o[k] != present_n[k]
        if not moved and not fields[k]:
            continue
        b = ng[mj[k]]
        x, y = point_of(b) if present_n[k] else point_of(og[mi[k]])
        if moved:
            msg = f"{word} {nid} moved by {dist[k]:.1f} m" if both[k] else f"{word} {nid} location changed"
            if fields[k]:
                msg += f"; {describe_fields(fields[k])}"
            kind = f"{role[:-1]}-moved"
        else:
            msg = f"{word} {nid} changed: {describe_fields(fields[k])}"
            kind = f"{role[:-1]}-changed"
        changes.append(Change(kind, role, (nid,), msg + ".", x, y, (oid,), (nid,), fields[k], distance=float(dist[k]) if both[k] else None,
                              geometry=b, old_geometry=og[mi[k]], new_geometry=b))
    for oi in rest(np.arange(len(og)), mi, len(og)):
        x, y = point_of(og[oi]) if present(og[oi:oi + 1])[0] else (None, None)
        oid = str(lo.ids[oi])
        changes.append(Change(f"{role[:-1]}-removed", role, (oid,), f"{word} {oid} removed.", x, y, (oid,), (), geometry=og[oi], old_geometry=og[oi]))
    for nj in rest(np.arange(len(ng)), mj, len(ng)):
        x, y = point_of(ng[nj]) if present(ng[nj:nj + 1])[0] else (None, None)
        nid = str(ln.ids[nj])
        changes.append(Change(f"{role[:-1]}-added", role, (nid,), f"{word} {nid} added.", x, y, (), (nid,), geometry=ng[nj], new_geometry=ng[nj]))
    return Found(changes, layer_changes)
