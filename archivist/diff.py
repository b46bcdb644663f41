"""Compare two versions of a map (projects or packages) and list what changed.

Feature ids are not stable between editors, so features are matched by
geometry and attributes, not by id:

* polygons: pairs that share area, kept when each is the other's largest
  overlap (STRtree bulk query, intersection areas computed in one call);
* lines: pairs within a search distance, kept when each is the other's
  closest by Hausdorff distance; a line split or merged at a new node, whose
  linework is otherwise unchanged, is no change;
* samples: by sample id, then by place for ids that changed;
* structures: by place (mutual nearest);
* legend entries by unit code, analyses by sample id (and order of repeats).

A moved or reshaped feature is therefore one change, not a removal plus an
addition. Polygon reshapes caused by another change (the two polygons either
side of a moved contact, the polygon a new polygon was carved from) are folded
into that change, which then carries the area gained and lost per unit.

"Same place" means within the old map's tolerance (``[checks] tolerance``,
default 0.1 mm at map scale). A line or point is looked for as moved up to
5 mm at map scale away (125 m at 1:25 000), a design choice: beyond that an
edit is a removal and an addition.

What diff does not judge: whether a change is geologically right. It states
what differs between the two data sets.
"""

from __future__ import annotations

from collections import defaultdict
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pandas as pd
import shapely

from ._version import __version__
from .errors import ArchivistError
from .project import Layer, MapProject, Table, crs_label
from .readers import text_column
from .vocab.legend import column as legend_column

MOVE_SEARCH_MM = 5.0  # how far (map mm) a line or point may move and still be the same feature
LAYER_ORDER = ("map", "legend", "units", "lines", "extent", "samples", "structures", "analyses")
WORD = {"units": "Polygon", "lines": "Line", "extent": "Extent", "samples": "Sample", "structures": "Structure"}


# ------------------------------------------------------------------ result

@dataclass
class Change:
    """One changed feature (or unit, legend entry, analysis) between OLD and NEW.

    ``features`` are the ids in NEW (in OLD for a removal); ``old_features`` and
    ``new_features`` give both sides. ``fields`` maps each changed attribute to
    ``{"old": text, "new": text}``. Areas are in m², ``distance`` in map units
    (metres in a projected CRS). ``x``/``y`` are a point of the change in the
    old map's CRS; ``geometry`` is the changed area (or the feature), in the
    same CRS.
    """

    change: str
    layer: str
    features: tuple[str, ...]
    message: str
    x: float | None = None
    y: float | None = None
    old_features: tuple[str, ...] = ()
    new_features: tuple[str, ...] = ()
    fields: dict[str, dict[str, str]] = field(default_factory=dict)
    area_gained: dict[str, float] = field(default_factory=dict)
    area_lost: dict[str, float] = field(default_factory=dict)
    distance: float | None = None
    polygons: tuple[str, ...] = ()
    geometry: Any = None
    pieces: list[tuple[Any, str, str]] = field(default_factory=list)  # (area geometry, old unit, new unit)
    old_geometry: Any = None
    new_geometry: Any = None
    old_unit: str = field(default="", repr=False)  # a recoded polygon's codes, for the unit-level changes
    new_unit: str = field(default="", repr=False)

    def to_dict(self) -> dict[str, Any]:
        wkt = None
        if self.geometry is not None and not shapely.is_empty(self.geometry):
            wkt = shapely.to_wkt(self.geometry, rounding_precision=3, trim=True)
        return {
            "change": self.change,
            "layer": self.layer,
            "features": list(self.features),
            "message": self.message,
            "x": _r(self.x),
            "y": _r(self.y),
            "old_features": list(self.old_features),
            "new_features": list(self.new_features),
            "fields": self.fields,
            "area_gained": {k: _r(v) for k, v in sorted(self.area_gained.items())},
            "area_lost": {k: _r(v) for k, v in sorted(self.area_lost.items())},
            "distance": _r(self.distance),
            "polygons": list(self.polygons),
            "wkt": wkt,
        }


def _r(v):
    if v is None or not np.isfinite(v):
        return None
    return float(round(float(v), 3))


@dataclass(frozen=True)
class DiffReport:
    """Every change from OLD to NEW, ordered by layer, kind and place."""

    old: str
    new: str
    crs: str | None
    changes: tuple[Change, ...]
    notes: tuple[str, ...] = ()
    tool: str = "archivist"
    version: str = __version__
    crs_object: Any = field(default=None, compare=False, repr=False)  # the old map's pyproj CRS, for the GeoPackage

    @property
    def counts(self) -> dict[str, int]:
        out: dict[str, int] = defaultdict(int)
        for c in self.changes:
            out[c.change] += 1
        return dict(sorted(out.items()))

    def to_dict(self) -> dict[str, Any]:
        return {
            "tool": self.tool,
            "version": self.version,
            "old": self.old,
            "new": self.new,
            "crs": self.crs,
            "notes": list(self.notes),
            "counts": self.counts,
            "changes": [c.to_dict() for c in self.changes],
        }


# ------------------------------------------------------------------ helpers

def _present(geoms: np.ndarray) -> np.ndarray:
    return ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))


def _valid(geoms: np.ndarray) -> np.ndarray:
    out = geoms.copy()
    bad = _present(geoms) & ~shapely.is_valid(geoms)
    if bad.any():
        out[bad] = shapely.make_valid(geoms[bad])
    return out


def mutual_best(i: np.ndarray, j: np.ndarray, score: np.ndarray, tie: np.ndarray | None = None, *, higher: bool) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (i, j) where j is i's best candidate and i is j's, by ``score`` then ``tie`` (lower tie wins)."""
    if len(i) == 0:
        return i, j
    key = -score if higher else score
    tie = np.zeros(len(i)) if tie is None else tie
    by_i = np.lexsort((tie, key, i))
    first_i = by_i[np.r_[True, i[by_i][1:] != i[by_i][:-1]]]
    by_j = np.lexsort((tie, key, j))
    first_j = by_j[np.r_[True, j[by_j][1:] != j[by_j][:-1]]]
    both = np.intersect1d(first_i, first_j)
    return i[both], j[both]


def _as_text(series: pd.Series) -> np.ndarray:
    """A column as text, like :func:`archivist.readers.text_column`, without a Python call per value when it
    already holds text (the usual case for codes and kinds)."""
    values = series.to_numpy(dtype=object)
    missing = pd.isna(values)
    if pd.api.types.infer_dtype(values[~missing], skipna=True) in ("string", "empty"):
        out = values.copy()
        out[missing] = ""
        return out
    return text_column(series)


def _rest(idx: np.ndarray, used: np.ndarray, n: int) -> np.ndarray:
    """The members of ``idx`` (indexes below ``n``) that are not in ``used``, in order."""
    free = np.ones(n, dtype=bool)
    free[np.asarray(used, dtype=int)] = False
    return idx[free[idx]]


def exact_pairs(old: np.ndarray, new: np.ndarray, oidx: np.ndarray, nidx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairs of identical geometries among ``old[oidx]`` and ``new[nidx]``: the same vertices after
    normalisation (ring start and orientation, line direction), matched in one hash join.

    Most features of a new version are untouched; pairing them here first leaves
    the overlay work for the few that changed.
    """
    if len(oidx) == 0 or len(nidx) == 0:
        return np.zeros(0, dtype=int), np.zeros(0, dtype=int)
    wa = shapely.to_wkb(shapely.normalize(old[oidx]))
    wb = shapely.to_wkb(shapely.normalize(new[nidx]))
    ha = pd.Series(pd.util.hash_array(wa))  # 64-bit hashes of the WKB, computed in C
    hb = pd.Series(pd.util.hash_array(wb))
    left = pd.DataFrame({"key": ha, "rank": ha.groupby(ha).cumcount(), "a": np.arange(len(oidx))})
    right = pd.DataFrame({"key": hb, "rank": hb.groupby(hb).cumcount(), "b": np.arange(len(nidx))})
    both = left.merge(right, on=["key", "rank"], how="inner")
    a, b = both["a"].to_numpy(dtype=int), both["b"].to_numpy(dtype=int)
    same = wa[a] == wb[b]  # a hash collision pairs nothing
    return oidx[a[same]], nidx[b[same]]


def _norm_values(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    text = np.array([str(v).strip() for v in values], dtype=object)
    nums = pd.to_numeric(pd.Series(text, dtype=object), errors="coerce").to_numpy(dtype=float)
    return text, nums


def _differs(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Element-wise: do two columns of values differ (numbers compared as numbers)?"""
    ta, na = _norm_values(a)
    tb, nb = _norm_values(b)
    both_num = ~np.isnan(na) & ~np.isnan(nb)
    num_same = np.isclose(np.nan_to_num(na), np.nan_to_num(nb), rtol=1e-9, atol=1e-12)
    return np.where(both_num, ~num_same, ta != tb)


def _columns(frame: pd.DataFrame) -> list[str]:
    return [str(c) for c in frame.columns if c != "geometry" and str(c) != frame.geometry.name] if hasattr(frame, "geometry") else [str(c) for c in frame.columns]


def _field_changes(old: pd.DataFrame, new: pd.DataFrame, oi: np.ndarray, nj: np.ndarray, skip: Iterable[str] = ()) -> tuple[np.ndarray, dict[int, dict[str, dict[str, str]]]]:
    """For matched rows ``(oi[k], nj[k])``: a mask of the pairs whose attributes differ, and for those
    pairs only, the changed attributes as ``{column: {"old": text, "new": text}}``."""
    mask = np.zeros(len(oi), dtype=bool)
    changed: dict[int, dict[str, dict[str, str]]] = {}
    if len(oi) == 0:
        return mask, changed
    skip = set(skip)
    ocols, ncols = _columns(old), _columns(new)
    for col in [c for c in ocols if c in ncols and c not in skip]:
        ra = old[col].to_numpy(dtype=object)[oi]
        rb = new[col].to_numpy(dtype=object)[nj]
        maybe = np.flatnonzero(~(pd.Series(ra).eq(pd.Series(rb)).to_numpy() | (pd.isna(ra) & pd.isna(rb))))
        if len(maybe) == 0:
            continue  # equal as stored: no need to compare as text
        a = text_column(pd.Series(ra[maybe], dtype=object))
        b = text_column(pd.Series(rb[maybe], dtype=object))
        diff = _differs(a, b)
        mask[maybe[diff]] = True
        for k in np.flatnonzero(diff):  # a loop over changes only
            changed.setdefault(int(maybe[k]), {})[col] = {"old": str(a[k]), "new": str(b[k])}
    return mask, changed


def _point_of(geom) -> tuple[float | None, float | None]:
    if geom is None or shapely.is_empty(geom):
        return None, None
    p = geom if geom.geom_type == "Point" else shapely.point_on_surface(geom)
    return float(p.x), float(p.y)


def fmt_area(m2: float) -> str:
    return f"{m2 / 10_000:.2f} ha" if abs(m2) >= 10_000 else f"{m2:.1f} m²"


def fmt_units(d: dict[str, float]) -> str:
    return ", ".join(f"{u or '(no unit)'} {fmt_area(a)}" for u, a in sorted(d.items(), key=lambda kv: -kv[1]))


def _describe_fields(fields: dict[str, dict[str, str]]) -> str:
    return ", ".join(f"{k} {v['old'] or '(empty)'} -> {v['new'] or '(empty)'}" for k, v in fields.items())


# ------------------------------------------------------------------ context

@dataclass
class _Side:
    project: MapProject
    label: str


class _Diff:
    def __init__(self, old: _Side, new: _Side):
        self.old, self.new = old, new
        self.notes: list[str] = []
        self.changes: list[Change] = []
        cfg = old.project.config
        self.tol = float(cfg.tolerance)
        metres = MOVE_SEARCH_MM * cfg.metres_per_map_mm
        if old.project.crs is not None and old.project.crs.is_geographic:
            metres /= 111_320.0  # metres to degrees near the equator, as for the tolerance
        self.search = max(metres, 10 * self.tol)
        self._poly_reshapes: list[dict[str, Any]] = []
        self.transform = None
        oc, nc = old.project.crs, new.project.crs
        if oc is not None and nc is not None and not oc.equals(nc):
            self.transform = nc
            self.changes.append(
                Change("crs-changed", "map", (), f"Map CRS changed from {crs_label(oc)} to {crs_label(nc)}; NEW was reprojected to compare.")
            )
        elif (oc is None) != (nc is None):
            self.notes.append("One side declares no map CRS: both were compared as if in the same CRS.")

    # -------------------------------------------------------------- layers

    def text(self, layer: Layer | None, key: str, n: int = 0) -> np.ndarray:
        """``layer.text(key)`` read once per run; empty texts when the layer or field is absent."""
        if layer is None:
            return np.full(n, "", dtype=object)
        cache = self.__dict__.setdefault("_texts", {})
        if (id(layer), key) not in cache:
            col = layer.field(key)
            cache[(id(layer), key)] = np.full(len(layer.frame), "", dtype=object) if col is None else _as_text(layer.frame[col])
        return cache[(id(layer), key)]

    def geoms(self, layer: Layer, side: str) -> np.ndarray:
        g = layer.geometry
        if side == "new" and self.transform is not None and layer.frame.crs is not None:
            g = np.asarray(layer.frame.to_crs(self.old.project.crs).geometry.array, dtype=object)
        return _valid(g)

    def layer_presence(self, role: str) -> tuple[Layer | None, Layer | None] | None:
        a, b = self.old.project.layers.get(role), self.new.project.layers.get(role)
        if a is None and b is None:
            return None
        if a is None or b is None:
            lay = b if a is None else a
            kind = "layer-added" if a is None else "layer-removed"
            g = self.geoms(lay, "new" if a is None else "old")
            ext = shapely.union_all(shapely.envelope(g[_present(g)])) if _present(g).any() else None
            x, y = _point_of(ext)
            self.changes.append(
                Change(kind, role, tuple(lay.ids), f"Layer {role} ({lay.source}, {len(lay.ids)} features) {kind.split('-')[1]}.", x, y,
                       old_features=tuple(lay.ids) if b is None else (), new_features=tuple(lay.ids) if a is None else ())
            )
            return None
        return a, b

    def columns(self, role: str, old: pd.DataFrame, new: pd.DataFrame, x=None, y=None) -> None:
        oc, nc = _columns(old), _columns(new)
        for c in nc:
            if c not in oc:
                self.changes.append(Change("column-added", role, (), f"{role}: column '{c}' added.", x, y, fields={c: {"old": "", "new": "(column)"}}))
        for c in oc:
            if c not in nc:
                self.changes.append(Change("column-removed", role, (), f"{role}: column '{c}' removed.", x, y, fields={c: {"old": "(column)", "new": ""}}))

    # -------------------------------------------------------------- polygons

    def polygons(self) -> list[Change]:
        pair = self.layer_presence("units")
        if pair is None:
            return []
        lo, ln = pair
        og, ng = self.geoms(lo, "old"), self.geoms(ln, "new")
        ou = self.text(lo, "unit_field", len(og))
        nu = self.text(ln, "unit_field", len(ng))
        self.columns("units", lo.frame, ln.frame)
        tol = self.tol
        opres, npres = np.flatnonzero(_present(og)), np.flatnonzero(_present(ng))
        ei, ej = exact_pairs(og, ng, opres, npres)
        ro, rn = _rest(opres, ei, len(og)), _rest(npres, ej, len(ng))
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
        fmask, fields = _field_changes(lo.frame, ln.frame, mi, mj, skip=[lo.spec.get("unit_field", "unit")])
        changes: list[Change] = []
        self._poly_reshapes: list[dict[str, Any]] = []
        for k in np.flatnonzero(reshaped | recoded | fmask):
            fields.setdefault(int(k), {})
            a, b = og[mi[k]], ng[mj[k]]
            oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
            if reshaped[k] and not recoded[k]:
                self._poly_reshapes.append({"old": a, "new": b, "oid": oid, "nid": nid, "ounit": ou[mi[k]], "nunit": nu[mj[k]], "fields": fields[k]})
                continue
            if recoded[k]:
                gained = {nu[mj[k]]: float(b.area)}
                lost = {ou[mi[k]]: float(a.area)}
                msg = f"Polygon {nid} recoded {ou[mi[k]] or '(none)'} -> {nu[mj[k]] or '(none)'} ({fmt_area(b.area)})"
                geom = b
                if reshaped[k]:
                    msg += f" and reshaped (was {fmt_area(a.area)})"
                    geom = shapely.union(a, b)
                if fields[k]:
                    msg += f"; also {_describe_fields(fields[k])}"
                x, y = _point_of(b)
                fields[k] = {lo.spec.get("unit_field", "unit"): {"old": str(ou[mi[k]]), "new": str(nu[mj[k]])}, **fields[k]}
                changes.append(Change("polygon-recoded", "units", (nid,), msg + ".", x, y, (oid,), (nid,), fields[k], gained, lost,
                                      polygons=(nid,), geometry=geom, pieces=[(geom, str(ou[mi[k]]), str(nu[mj[k]]))],
                                      old_unit=str(ou[mi[k]]), new_unit=str(nu[mj[k]])))
            else:
                x, y = _point_of(b)
                changes.append(Change("polygon-changed", "units", (nid,), f"Polygon {nid} ({nu[mj[k]]}): {_describe_fields(fields[k])}.", x, y,
                                      (oid,), (nid,), fields[k], polygons=(nid,), geometry=b))
        for oi in _rest(np.arange(len(og)), mi, len(og)):
            a, oid = og[oi], str(lo.ids[oi])
            x, y = _point_of(a)
            area = float(shapely.area(a)) if a is not None else 0.0
            changes.append(Change("polygon-removed", "units", (oid,), f"Polygon {oid} ({ou[oi] or 'no unit'}, {fmt_area(area)}) removed", x, y,
                                  (oid,), (), area_lost={ou[oi]: area}, polygons=(), geometry=a, pieces=[(a, str(ou[oi]), "")] if a is not None else []))
        for nj in _rest(np.arange(len(ng)), mj, len(ng)):
            b, nid = ng[nj], str(ln.ids[nj])
            x, y = _point_of(b)
            area = float(shapely.area(b)) if b is not None else 0.0
            changes.append(Change("polygon-added", "units", (nid,), f"Polygon {nid} ({nu[nj] or 'no unit'}, {fmt_area(area)}) added", x, y,
                                  (), (nid,), area_gained={nu[nj]: area}, polygons=(nid,), geometry=b, pieces=[(b, "", str(nu[nj]))] if b is not None else []))
        return changes

    # -------------------------------------------------------------- lines

    def lines(self) -> list[Change]:
        pair = self.layer_presence("lines")
        if pair is None:
            return []
        lo, ln = pair
        og, ng = self.geoms(lo, "old"), self.geoms(ln, "new")
        self.columns("lines", lo.frame, ln.frame)
        kf, cf = lo.spec.get("kind_field", "kind"), lo.spec.get("certainty_field")
        okind = self.text(lo, "kind_field", len(og))
        nkind = self.text(ln, "kind_field", len(ng))
        tol = self.tol
        opres, npres = np.flatnonzero(_present(og)), np.flatnonzero(_present(ng))
        ei, ej = exact_pairs(og, ng, opres, npres)
        ro, rn = _rest(opres, ei, len(og)), _rest(npres, ej, len(ng))
        i = j = np.zeros(0, dtype=int)
        if len(ro) and len(rn):
            tree = shapely.STRtree(ng[rn])
            qi, qj = tree.query(og[ro], predicate="dwithin", distance=self.search)
            i, j = ro[qi], rn[qj]
        hd = shapely.hausdorff_distance(og[i], ng[j]) if len(i) else np.zeros(0)
        keep = hd <= self.search
        i, j, hd = i[keep], j[keep], hd[keep]
        mi, mj = mutual_best(i, j, hd, (okind[i] != nkind[j]).astype(float), higher=False)
        mhd = np.r_[np.zeros(len(ei)), shapely.hausdorff_distance(og[mi], ng[mj]) if len(mi) else np.zeros(0)]
        mi, mj = np.r_[ei, mi].astype(int), np.r_[ej, mj].astype(int)
        fmask, fields = _field_changes(lo.frame, ln.frame, mi, mj)
        changes: list[Change] = []
        for k in np.flatnonzero((mhd > tol) | fmask):
            moved = mhd[k] > tol
            fields.setdefault(int(k), {})
            a, b = og[mi[k]], ng[mj[k]]
            oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
            kind = str(nkind[mj[k]] or "line")
            klass = {c: v for c, v in fields[k].items() if c in (kf, cf)}
            if moved:
                msg = f"{kind.capitalize()} {nid} moved by up to {mhd[k]:.1f} m"
                if fields[k]:
                    msg += f"; {_describe_fields(fields[k])}"
                x, y = _farthest_point(b, a)
                changes.append(Change("line-moved", "lines", (nid,), msg, x, y, (oid,), (nid,), fields[k], distance=float(mhd[k]),
                                      geometry=b, old_geometry=a, new_geometry=b))
            else:
                what = "line-reclassified" if klass else "line-changed"
                x, y = _point_of(shapely.line_interpolate_point(b, 0.5, normalized=True))
                changes.append(Change(what, "lines", (nid,), f"Line {nid} {'reclassified' if klass else 'changed'}: {_describe_fields(fields[k])}.", x, y,
                                      (oid,), (nid,), fields[k], geometry=b, old_geometry=a, new_geometry=b))
        un_o = _rest(opres, mi, len(og))
        un_n = _rest(npres, mj, len(ng))
        renoded_o = _covered_lines(og, un_o, ng, npres, tol, okind, nkind)
        renoded_n = _covered_lines(ng, un_n, og, opres, tol, nkind, okind)
        for oi in un_o:
            if oi in renoded_o:
                continue
            a, oid = og[oi], str(lo.ids[oi])
            x, y = _point_of(shapely.line_interpolate_point(a, 0.5, normalized=True))
            changes.append(Change("line-removed", "lines", (oid,), f"{str(okind[oi] or 'line').capitalize()} {oid} ({a.length:.0f} m) removed", x, y, (oid,), (),
                                  geometry=a, old_geometry=a))
        for nj in un_n:
            if nj in renoded_n:
                continue
            b, nid = ng[nj], str(ln.ids[nj])
            x, y = _point_of(shapely.line_interpolate_point(b, 0.5, normalized=True))
            changes.append(Change("line-added", "lines", (nid,), f"{str(nkind[nj] or 'line').capitalize()} {nid} ({b.length:.0f} m) added", x, y, (), (nid,),
                                  geometry=b, new_geometry=b))
        for oi in np.flatnonzero(~_present(og)):
            changes.append(Change("line-removed", "lines", (str(lo.ids[oi]),), f"Line {lo.ids[oi]} (no geometry) removed", old_features=(str(lo.ids[oi]),)))
        for nj in np.flatnonzero(~_present(ng)):
            changes.append(Change("line-added", "lines", (str(ln.ids[nj]),), f"Line {ln.ids[nj]} (no geometry) added", new_features=(str(ln.ids[nj]),)))
        return changes

    # -------------------------------------------------------------- fold polygon reshapes into their cause

    def fold(self, polygon_changes: list[Change], line_changes: list[Change]) -> list[Change]:
        """Attach the pieces of reshaped polygons to the change that explains them; the rest stay reshapes."""
        tol = self.tol
        causes: list[tuple[Change, Any]] = []
        for c in line_changes:
            if c.change in ("line-moved", "line-added", "line-removed"):
                parts = [g for g in (c.old_geometry, c.new_geometry) if g is not None]
                causes.append((c, shapely.union_all(parts)))
        for c in polygon_changes:
            if c.change in ("polygon-added", "polygon-removed") and c.geometry is not None:
                causes.append((c, c.geometry.boundary))
        zones = [shapely.buffer(g, 2 * tol + 1e-9) for _, g in causes]
        tree = shapely.STRtree(zones) if zones else None
        leftovers: list[Change] = []
        for r in self._poly_reshapes:
            a, b = r["old"], r["new"]
            pieces = [(p, "", r["nunit"]) for p in shapely.get_parts(shapely.difference(b, a))] + [
                (p, r["ounit"], "") for p in shapely.get_parts(shapely.difference(a, b))
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
                    cause = causes[best][0]
                    _add_piece(cause, piece, ou, nu, r["nid"] if nu else r["oid"])
                else:
                    unexplained.append((piece, ou, nu))
            if unexplained or r["fields"]:
                gained = defaultdict(float)
                lost = defaultdict(float)
                for p, ou, nu in unexplained:
                    if nu:
                        gained[nu] += p.area
                    else:
                        lost[ou] += p.area
                geom = shapely.union_all([p for p, _, _ in unexplained]) if unexplained else b
                x, y = _point_of(geom)
                msg = f"Polygon {r['nid']} ({r['nunit']}) reshaped"
                bits = []
                if gained:
                    bits.append(f"gained {fmt_area(sum(gained.values()))}")
                if lost:
                    bits.append(f"lost {fmt_area(sum(lost.values()))}")
                if bits:
                    msg += ": " + ", ".join(bits)
                if r["fields"]:
                    msg += f"; {_describe_fields(r['fields'])}"
                leftovers.append(Change("polygon-reshaped", "units", (r["nid"],), msg, x, y, (r["oid"],), (r["nid"],), r["fields"], dict(gained), dict(lost),
                                        polygons=(r["nid"],), geometry=geom, pieces=unexplained))
        for c, _ in causes:
            _finish_cause(c)
        return leftovers

    # -------------------------------------------------------------- extent

    def extent(self) -> list[Change]:
        pair = self.layer_presence("extent")
        if pair is None:
            return []
        lo, ln = pair
        og, ng = self.geoms(lo, "old"), self.geoms(ln, "new")
        a = shapely.union_all(og[_present(og)])
        b = shapely.union_all(ng[_present(ng)])
        if a.is_empty and b.is_empty:
            return []
        if not (a.is_empty or b.is_empty) and shapely.hausdorff_distance(a.boundary, b.boundary) <= self.tol:
            return []
        gained, lost = float(shapely.difference(b, a).area), float(shapely.difference(a, b).area)
        geom = shapely.symmetric_difference(a, b)
        x, y = _point_of(geom)
        return [Change("extent-changed", "extent", tuple(ln.ids), f"Map extent changed: {fmt_area(gained)} added, {fmt_area(lost)} removed.", x, y,
                       tuple(lo.ids), tuple(ln.ids), area_gained={"extent": gained}, area_lost={"extent": lost}, geometry=geom,
                       pieces=[(p, "extent", "extent") for p in shapely.get_parts(geom)])]

    # -------------------------------------------------------------- points

    def points(self, role: str) -> list[Change]:
        pair = self.layer_presence(role)
        if pair is None:
            return []
        lo, ln = pair
        og, ng = self.geoms(lo, "old"), self.geoms(ln, "new")
        self.columns(role, lo.frame, ln.frame)
        tol = self.tol
        word = WORD[role]
        mi_parts, mj_parts = [], []
        id_col = lo.spec.get("id_field") if role == "samples" else None
        if id_col and lo.field("id_field") and ln.field("id_field"):
            oids, nids = pd.Index(lo.ids), pd.Index(ln.ids)
            if oids.is_unique and nids.is_unique:
                common = oids.intersection(nids)
                mi_parts.append(oids.get_indexer(common))
                mj_parts.append(nids.get_indexer(common))
        used_o = np.concatenate(mi_parts) if mi_parts else np.zeros(0, dtype=int)
        used_n = np.concatenate(mj_parts) if mj_parts else np.zeros(0, dtype=int)
        # the rest by place: mutual nearest within the search distance
        ro = _rest(np.flatnonzero(_present(og)), used_o, len(og))
        rn = _rest(np.flatnonzero(_present(ng)), used_n, len(ng))
        if len(ro) and len(rn):
            tree = shapely.STRtree(ng[rn])
            (qi, qj), d = tree.query_nearest(og[ro], max_distance=self.search, return_distance=True, all_matches=False)
            i, j = ro[qi], rn[qj]
            mi, mj = mutual_best(i, j, d, higher=False)
            dist = shapely.distance(og[mi], ng[mj])
            differ, _ = _field_changes(lo.frame, ln.frame, mi, mj)
            # beyond the tolerance, a point is "the same, moved" only if its attributes are unchanged
            ok = (dist <= tol) | ~differ
            mi_parts.append(mi[ok])
            mj_parts.append(mj[ok])
        mi = np.concatenate(mi_parts).astype(int) if mi_parts else np.zeros(0, dtype=int)
        mj = np.concatenate(mj_parts).astype(int) if mj_parts else np.zeros(0, dtype=int)
        both = _present(og[mi]) & _present(ng[mj]) if len(mi) else np.zeros(0, dtype=bool)
        dist = np.where(both, shapely.distance(og[mi], ng[mj]) if len(mi) else 0.0, 0.0)
        fmask, fields = _field_changes(lo.frame, ln.frame, mi, mj)
        present_o, present_n = _present(og[mi]), _present(ng[mj])
        candidates = np.flatnonzero((dist > tol) | (present_o != present_n) | fmask | (lo.ids[mi] != ln.ids[mj]))
        changes = []
        for k in candidates:
            fields.setdefault(int(k), {})
            oid, nid = str(lo.ids[mi[k]]), str(ln.ids[mj[k]])
            if oid != nid and role == "samples":
                fields[k] = {id_col: {"old": oid, "new": nid}, **{c: v for c, v in fields[k].items() if c != id_col}}
            moved = dist[k] > tol or present_o[k] != present_n[k]
            if not moved and not fields[k]:
                continue
            b = ng[mj[k]]
            x, y = _point_of(b) if present_n[k] else _point_of(og[mi[k]])
            if moved:
                msg = f"{word} {nid} moved by {dist[k]:.1f} m" if both[k] else f"{word} {nid} location changed"
                if fields[k]:
                    msg += f"; {_describe_fields(fields[k])}"
                kind = f"{role[:-1]}-moved"
            else:
                msg = f"{word} {nid} changed: {_describe_fields(fields[k])}"
                kind = f"{role[:-1]}-changed"
            changes.append(Change(kind, role, (nid,), msg + ".", x, y, (oid,), (nid,), fields[k], distance=float(dist[k]) if both[k] else None,
                                  geometry=b, old_geometry=og[mi[k]], new_geometry=b))
        for oi in _rest(np.arange(len(og)), mi, len(og)):
            x, y = _point_of(og[oi]) if _present(og[oi:oi + 1])[0] else (None, None)
            oid = str(lo.ids[oi])
            changes.append(Change(f"{role[:-1]}-removed", role, (oid,), f"{word} {oid} removed.", x, y, (oid,), (), geometry=og[oi], old_geometry=og[oi]))
        for nj in _rest(np.arange(len(ng)), mj, len(ng)):
            x, y = _point_of(ng[nj]) if _present(ng[nj:nj + 1])[0] else (None, None)
            nid = str(ln.ids[nj])
            changes.append(Change(f"{role[:-1]}-added", role, (nid,), f"{word} {nid} added.", x, y, (), (nid,), geometry=ng[nj], new_geometry=ng[nj]))
        return changes

    # -------------------------------------------------------------- tables

    def legend_and_units(self, polygon_changes: list[Change]) -> tuple[list[Change], list[Change]]:
        """Unit-level changes (added, removed, recoded) and legend entry changes; recodes fold polygon recodes."""
        to, tn = self.old.project.tables.get("legend"), self.new.project.tables.get("legend")
        lo, ln = self.old.project.layers.get("units"), self.new.project.layers.get("units")

        def codes(table: Table | None, layer: Layer | None) -> tuple[dict[str, dict[str, str]], set[str]]:
            entries: dict[str, dict[str, str]] = {}
            col = legend_column(table, "unit") if table is not None else None
            if table is not None and col is not None:
                frame = table.frame
                keys = text_column(frame[col])
                others = [c for c in frame.columns if c != col]
                texts = {c: text_column(frame[c]) for c in others}
                for r, key in enumerate(keys):
                    if key and key not in entries:
                        entries[key] = {c: str(texts[c][r]) for c in others}
            mapped = set()
            if layer is not None and layer.field("unit_field") is not None:
                mapped = set(pd.unique(self.text(layer, "unit_field"))) - {""}
            return entries, mapped

        oleg, omap = codes(to, lo)
        nleg, nmap = codes(tn, ln)
        oname = (legend_column(to, "name") if to is not None else None) or "name"
        nname = (legend_column(tn, "name") if tn is not None else None) or "name"
        old_codes, new_codes = set(oleg) | omap, set(nleg) | nmap
        added, removed = sorted(new_codes - old_codes), sorted(old_codes - new_codes)
        changes: list[Change] = []
        recodes = [c for c in polygon_changes if c.change == "polygon-recoded"]
        folded: set[int] = set()
        pairs: dict[str, str] = {}
        for x in removed:
            for y in added:
                if y in pairs.values():
                    continue
                same_entry = x in oleg and y in nleg and oleg[x] == nleg[y]
                rec = [c for c in recodes if c.old_unit == x and c.new_unit == y]
                # every polygon of X became Y, and every polygon of Y was X
                all_polys = bool(rec) and len(rec) == self._count_unit(lo, x) == self._count_unit(ln, y)
                if same_entry or all_polys:
                    pairs[x] = y
                    break
        for x, y in pairs.items():
            rec = [c for c in recodes if c.old_unit == x and c.new_unit == y]
            folded.update(id(c) for c in rec)
            feats = tuple(f for c in rec for f in c.features)
            geom = shapely.union_all([c.geometry for c in rec]) if rec else None
            px, py = _point_of(geom) if geom is not None else (None, None)
            area = sum(c.geometry.area for c in rec) if rec else 0.0
            entry_note = "" if x in oleg and y in nleg and oleg[x] == nleg[y] else (" (legend entry also changed)" if x in oleg and y in nleg else "")
            changes.append(Change("unit-recoded", "legend", feats, f"Unit {x} recoded to {y}: {len(rec)} polygon(s), {fmt_area(area)}{entry_note}.", px, py,
                                  feats, feats, {"unit": {"old": x, "new": y}}, {y: area} if area else {}, {x: area} if area else {},
                                  polygons=feats, geometry=geom, pieces=[p for c in rec for p in c.pieces]))
        for y in added:
            if y in pairs.values():
                continue
            name = nleg.get(y, {}).get(nname, "")
            n, area, geom = self._unit_stats(ln, y, "new")
            where = f"mapped in {n} polygon(s), {fmt_area(area)}" if n else "not mapped"
            legend = f"legend entry '{name}'" if y in nleg and name else ("legend entry" if y in nleg else "no legend entry")
            px, py = _point_of(geom) if geom is not None else (None, None)
            changes.append(Change("unit-added", "legend", (y,), f"Unit {y} added ({legend}; {where}).", px, py, (), (y,),
                                  {c: {"old": "", "new": v} for c, v in nleg.get(y, {}).items() if v}))
        for x in removed:
            if x in pairs:
                continue
            name = oleg.get(x, {}).get(oname, "")
            n, area, geom = self._unit_stats(lo, x, "old")
            where = f"was mapped in {n} polygon(s), {fmt_area(area)}" if n else "was not mapped"
            legend = f"legend entry '{name}'" if x in oleg and name else ("legend entry" if x in oleg else "no legend entry")
            px, py = _point_of(geom) if geom is not None else (None, None)
            changes.append(Change("unit-removed", "legend", (x,), f"Unit {x} removed ({legend}; {where}).", px, py, (x,), (),
                                  {c: {"old": v, "new": ""} for c, v in oleg.get(x, {}).items() if v}))
        if to is not None and tn is not None:
            self.columns("legend", to.frame, tn.frame)
        for code in sorted(set(oleg) & set(nleg)):
            diff = {c: {"old": oleg[code].get(c, ""), "new": nleg[code].get(c, "")} for c in sorted(set(oleg[code]) & set(nleg[code]))
                    if _differs(np.array([oleg[code].get(c, "")], dtype=object), np.array([nleg[code].get(c, "")], dtype=object))[0]}
            if diff:
                changes.append(Change("legend-entry-changed", "legend", (code,), f"Legend entry {code}: {_describe_fields(diff)}.", None, None, (code,), (code,), diff))
        kept = [c for c in polygon_changes if id(c) not in folded]
        return changes, kept

    def _count_unit(self, layer: Layer | None, code: str) -> int:
        if layer is None or layer.field("unit_field") is None:
            return 0
        return int((self.text(layer, "unit_field") == code).sum())

    def _unit_stats(self, layer: Layer | None, code: str, side: str):
        if layer is None or layer.field("unit_field") is None:
            return 0, 0.0, None
        mask = self.text(layer, "unit_field") == code
        g = self.geoms(layer, side)[mask]
        g = g[_present(g)]
        if len(g) == 0:
            return int(mask.sum()), 0.0, None
        return int(mask.sum()), float(shapely.area(g).sum()), shapely.union_all(g)

    def analyses(self) -> list[Change]:
        to, tn = self.old.project.tables.get("analyses"), self.new.project.tables.get("analyses")
        if to is None and tn is None:
            return []
        if to is None or tn is None:
            t = tn if to is None else to
            kind = "table-added" if to is None else "table-removed"
            return [Change(kind, "analyses", (), f"Analyses table ({t.source}, {len(t.frame)} rows) {kind.split('-')[1]}.")]
        self.columns("analyses", to.frame, tn.frame)
        of, nf = to.field("sample_field"), tn.field("sample_field")
        if not of or not nf:
            self.notes.append("Analyses compared row by row: one side has no sample id column.")
            okey = np.array([str(i) for i in range(len(to.frame))], dtype=object)
            nkey = np.array([str(i) for i in range(len(tn.frame))], dtype=object)
        else:
            okey, nkey = text_column(to.frame[of]), text_column(tn.frame[nf])
        # a sample analysed twice: match its rows in order
        orank = pd.Series(okey).groupby(okey).cumcount().to_numpy()
        nrank = pd.Series(nkey).groupby(nkey).cumcount().to_numpy()
        oidx = pd.MultiIndex.from_arrays([okey, orank])
        nidx = pd.MultiIndex.from_arrays([nkey, nrank])
        common = oidx.intersection(nidx)
        mi, mj = oidx.get_indexer(common), nidx.get_indexer(common)
        # rows whose sample id changed but whose values did not: the same analysis, renamed
        un_o, un_n = np.setdiff1d(np.arange(len(okey)), mi), np.setdiff1d(np.arange(len(nkey)), mj)
        if len(un_o) and len(un_n):
            cols = [c for c in _columns(to.frame) if c in _columns(tn.frame) and c not in (of, nf)]
            if cols:
                def row_keys(frame, idx):
                    """Each row's values, numbers as numbers, as a hashable key."""
                    texts = [_norm_values(text_column(frame[c])[idx]) for c in cols]
                    return [tuple(repr(float(nums[k])) if np.isfinite(nums[k]) else str(text[k]) for text, nums in texts) for k in range(len(idx))]
                pool: dict[tuple, list[int]] = defaultdict(list)
                for k, key in zip(un_o, row_keys(to.frame, un_o)):
                    pool[key].append(int(k))
                extra_i, extra_j = [], []
                for k, key in zip(un_n, row_keys(tn.frame, un_n)):
                    if pool.get(key):
                        extra_i.append(pool[key].pop(0))
                        extra_j.append(int(k))
                mi, mj = np.r_[mi, np.array(extra_i, dtype=int)], np.r_[mj, np.array(extra_j, dtype=int)]
        order = np.argsort(mj, kind="stable")
        mi, mj = mi[order], mj[order]
        fmask, fields = _field_changes(to.frame, tn.frame, mi, mj)
        locs = self._sample_points()
        changes = []
        for k in np.flatnonzero(fmask):
            if fields[k]:
                sid = str(nkey[mj[k]])
                rep = f" (repeat {nrank[mj[k]] + 1})" if nrank[mj[k]] else ""
                x, y = locs.get(sid, (None, None))
                changes.append(Change("analysis-changed", "analyses", (sid,), f"Analysis of {sid}{rep}: {_describe_fields(fields[k])}.", x, y, (sid,), (sid,), fields[k]))
        for oi in np.setdiff1d(np.arange(len(okey)), mi):
            sid = str(okey[oi])
            x, y = locs.get(sid, (None, None))
            changes.append(Change("analysis-removed", "analyses", (sid,), f"Analysis of {sid} removed ({to.data.cell(int(oi), of) if of else f'row {oi + 2}'}).", x, y, (sid,), ()))
        for nj in np.setdiff1d(np.arange(len(nkey)), mj):
            sid = str(nkey[nj])
            x, y = locs.get(sid, (None, None))
            changes.append(Change("analysis-added", "analyses", (sid,), f"Analysis of {sid} added ({tn.data.cell(int(nj), nf) if nf else f'row {nj + 2}'}).", x, y, (), (sid,)))
        return changes

    def _sample_points(self) -> dict[str, tuple[float, float]]:
        lay = self.new.project.layers.get("samples") or self.old.project.layers.get("samples")
        if lay is None:
            return {}
        g = lay.geometry
        ok = np.flatnonzero(_present(g))
        pts = shapely.point_on_surface(g[ok])
        return {str(lay.ids[k]): (float(x), float(y)) for k, x, y in zip(ok, shapely.get_x(pts), shapely.get_y(pts))}

    # -------------------------------------------------------------- all

    def run(self) -> list[Change]:
        polys = self.polygons()
        lines = self.lines()
        reshapes = self.fold(polys, lines)
        units, polys = self.legend_and_units(polys)
        out = self.changes + units + polys + reshapes + lines + self.extent() + self.points("samples") + self.points("structures") + self.analyses()
        for c in out:
            if not c.message.endswith("."):
                c.message += "."
        order = {name: i for i, name in enumerate(LAYER_ORDER)}
        out.sort(key=lambda c: (order.get(c.layer, 99), c.change, -(c.y if c.y is not None else -np.inf), c.x if c.x is not None else np.inf, c.features))
        return out


def _farthest_point(line, other) -> tuple[float | None, float | None]:
    """The vertex of ``line`` farthest from ``other`` (where a moved line moved most)."""
    coords = shapely.get_coordinates(line)
    if len(coords) == 0:
        return None, None
    d = shapely.distance(shapely.points(coords), other)
    k = int(np.argmax(d))
    return float(coords[k, 0]), float(coords[k, 1])


def _covered_lines(geoms, idx, other, other_idx, tol, kind, other_kind) -> set[int]:
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
        rest = shapely.difference(geoms[line], zone)
        if shapely.length(rest) <= 2 * tol:
            out.add(line)
    return out


def _add_piece(cause: Change, piece, old_unit: str, new_unit: str, polygon: str) -> None:
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
            c.x, c.y = _point_of(area)
    elif c.change == "polygon-added":
        lost = {u: a for u, a in c.area_lost.items()}
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


# ------------------------------------------------------------------ API

def diff(old: str | Path | MapProject, new: str | Path | MapProject, *, limits=None) -> DiffReport:
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
    from .package.source import open_map

    with ExitStack() as stack:
        sides = []
        for item in (old, new):
            if isinstance(item, MapProject):
                sides.append(_Side(item, str(item.manifest_path or item.root)))
            else:
                opened = stack.enter_context(open_map(item, limits=limits))
                sides.append(_Side(opened.project, str(item)))
        for side in sides:
            unreadable = [h for h in side.project.problems if h.rule in ("layer-missing", "layer-unreadable", "table-not-utf8", "field-missing")]
            if unreadable:
                raise ArchivistError(f"{side.label}: {unreadable[0].message.rstrip('.')}; run 'archivist check' on it first")
        d = _Diff(*sides)
        changes = d.run()
        notes = list(d.notes)
        return DiffReport(old=sides[0].label, new=sides[1].label, crs=crs_label(sides[0].project.crs), changes=tuple(changes),
                          notes=tuple(notes), crs_object=sides[0].project.crs)
