"""Matching unit polygons: pairs that share area, kept when each is the other's largest overlap.

Identical polygons are paired first by a hash of their normalised geometry;
the rest through an STRtree bulk query, with the intersection areas computed
in one call. A polygon that is only reshaped (same unit, boundary moved) is
not a change of its own yet: it is returned as a :class:`Reshape` for
:mod:`.reshapes` to explain by the line or polygon change that caused it.
"""

from __future__ import annotations

from dataclasses import dataclass
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
    fmt_area,
    layer_pair,
    mutual_best,
    point_of,
    present,
    rest,
)
from .result import Change


@dataclass(frozen=True)
class Reshape:
    """A polygon matched to itself whose boundary moved beyond the tolerance, its unit unchanged."""

    old: Any  # geometry in OLD
    new: Any  # geometry in NEW (in OLD's CRS)
    oid: str
    nid: str
    ounit: str
    nunit: str
    fields: dict[str, dict[str, str]]


@dataclass(frozen=True)
class PolygonMatch:
    """The polygon changes, and the reshaped polygons still to be explained."""

    found: Found
    reshapes: list[Reshape]


def match_polygons(cmp: Comparison) -> PolygonMatch:
    """Every changed unit polygon between the two maps."""
    pair, layer_changes = layer_pair(cmp, "units")
    if pair is None:
        return PolygonMatch(Found(layer_changes=layer_changes), [])
    lo, ln = pair
    og, ng = cmp.geoms(lo, "old"), cmp.geoms(ln, "new")
    ou = cmp.text(lo, "unit_field", len(og))
    nu = cmp.text(ln, "unit_field", len(ng))
    layer_changes += column_changes("units", lo.frame, ln.frame)
    tol = cmp.tol
    opres, npres = np.flatnonzero(present(og)), np.flatnonzero(present(ng))
    ei, ej = exact_pairs(og, ng, opres, npres)
    ro, rn = rest(opres, ei, len(og)), rest(npres, ej, len(ng))
    i = j = np.zeros(0, dtype=int)
    if len(ro) and len(rn):
        tree = shapely.STRtree(ng[rn])
        qi, qj = tree.query(og[ro], predicate="intersects")
        i, j = ro[qi], rn[qj]
    inter = shapely.area(shapely.intersection(og[i], ng[j])) if len(i) else np.zeros(0)
    keep = inter > tol * tol
    i, j, inter = i[keep], j[keep], inter[keep]
    mi, mj = mutual_best(i, j, inter, (ou[i] != nu[j]).astype(float), higher=True)
    hd = np.r_[np.zeros(len(ei)), shapely.hausdorff_distance(shapely.boundary(og[mi]), shapely.boundary(ng[mj])) if len(mi) else np.zeros(0)]
    mi, mj = np.r_[ei, mi].astype(int), np.r_[ej, mj].astype(int)
    reshaped = hd > tol
    recoded = ou[mi] != nu[mj]
    unit_col = lo.spec.get("unit_field", "unit")
    fmask, fields = field_changes(lo.frame, ln.frame, mi, mj, skip=[unit_col])
    changes: list[Change] = []
    reshapes: list[Reshape] = []
    for k in map(int, np.flatnonzero(reshaped | recoded | fmask)):
        fields.setdefault(k, {})
        a, b = og[mi[k]], ng[mj[k]]
        oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
        ocode, ncode = str(ou[mi[k]]), str(nu[mj[k]])
        if reshaped[k] and not recoded[k]:
            reshapes.append(Reshape(a, b, oid, nid, ou[mi[k]], nu[mj[k]], fields[k]))
            continue
        x, y = point_of(b)
        if recoded[k]:
            gained = {nu[mj[k]]: float(b.area)}
            lost = {ou[mi[k]]: float(a.area)}
            msg = f"Polygon {nid} recoded {ou[mi[k]] or '(none)'} -> {nu[mj[k]] or '(none)'} ({fmt_area(b.area)})"
            geom = b
            if reshaped[k]:
                msg += f" and reshaped (was {fmt_area(a.area)})"
                geom = shapely.union(a, b)
            if fields[k]:
                msg += f"; also {describe_fields(fields[k])}"
            fields[k] = {unit_col: {"old": ocode, "new": ncode}, **fields[k]}
            changes.append(Change("polygon-recoded", "units", (nid,), msg + ".", x, y, (oid,), (nid,), fields[k], gained, lost,
                                  polygons=(nid,), geometry=geom, pieces=[(geom, ocode, ncode)], old_unit=ocode, new_unit=ncode))
        else:
            changes.append(Change("polygon-changed", "units", (nid,), f"Polygon {nid} ({nu[mj[k]]}): {describe_fields(fields[k])}.", x, y,
                                  (oid,), (nid,), fields[k], polygons=(nid,), geometry=b))
    for oi in rest(np.arange(len(og)), mi, len(og)):
        a, oid = og[oi], str(lo.ids[oi])
        x, y = point_of(a)
        area = float(shapely.area(a)) if a is not None else 0.0
        changes.append(Change("polygon-removed", "units", (oid,), f"Polygon {oid} ({ou[oi] or 'no unit'}, {fmt_area(area)}) removed", x, y,
                              (oid,), (), area_lost={ou[oi]: area}, polygons=(), geometry=a, pieces=[(a, str(ou[oi]), "")] if a is not None else []))
    for nj in rest(np.arange(len(ng)), mj, len(ng)):
        b, nid = ng[nj], str(ln.ids[nj])
        x, y = point_of(b)
        area = float(shapely.area(b)) if b is not None else 0.0
        changes.append(Change("polygon-added", "units", (nid,), f"Polygon {nid} ({nu[nj] or 'no unit'}, {fmt_area(area)}) added", x, y,
                              (), (nid,), area_gained={nu[nj]: area}, polygons=(nid,), geometry=b, pieces=[(b, "", str(nu[nj]))] if b is not None else []))
    return PolygonMatch(Found(changes, layer_changes), reshapes)


def compare_extent(cmp: Comparison) -> Found:
    """One change when the map extent (the union of the extent layer) moved beyond the tolerance."""
    pair, layer_changes = layer_pair(cmp, "extent")
    if pair is None:
        return Found(layer_changes=layer_changes)
    lo, ln = pair
    og, ng = cmp.geoms(lo, "old"), cmp.geoms(ln, "new")
    a = shapely.union_all(og[present(og)])
    b = shapely.union_all(ng[present(ng)])
    if a.is_empty and b.is_empty:
        return Found()
    if not (a.is_empty or b.is_empty) and shapely.hausdorff_distance(a.boundary, b.boundary) <= cmp.tol:
        return Found()
    gained, lost = float(shapely.difference(b, a).area), float(shapely.difference(a, b).area)
    geom = shapely.symmetric_difference(a, b)
    x, y = point_of(geom)
    return Found([Change("extent-changed", "extent", tuple(ln.ids), f"Map extent changed: {fmt_area(gained)} added, {fmt_area(lost)} removed.", x, y,
                         tuple(lo.ids), tuple(ln.ids), area_gained={"extent": gained}, area_lost={"extent": lost}, geometry=geom,
                         pieces=[(p, "extent", "extent") for p in shapely.get_parts(geom)])])
