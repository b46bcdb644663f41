"""What every kind of matching shares: the comparison settings, array helpers, and message helpers.

A :class:`Comparison` is made once per run by :func:`start` and handed to each
matching step; each step returns a :class:`Found` (its changes, the layer and
column changes it noticed, its notes). No step reads what another step left
behind.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np
import pandas as pd
import pyproj
import shapely

from ..analysis.arrays import present
from ..analysis.localframe import LocalFrame, frame_for
from ..project import Layer, MapProject, crs_label
from ..readers import text_column
from .result import Change

MOVE_SEARCH_MM = 5.0  # how far (map mm) a line or point may move and still be the same feature

FieldChanges = dict[int, dict[str, dict[str, str]]]


@dataclass(frozen=True)
class Found:
    """What one matching step found.

    ``changes`` are its own changes; ``layer_changes`` the layer- and
    column-level changes it noticed on the way (layer added or removed,
    column added or removed); ``notes`` what the reader should know about how
    it compared.
    """

    changes: list[Change] = field(default_factory=list)
    layer_changes: list[Change] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class Comparison:
    """The two maps and the distances they are compared with, fixed for the whole run.

    ``tol`` is the old map's tolerance ("same place"), ``search`` how far a
    line or point may move and still be the same feature, both in the old
    map's CRS units, or in metres when OLD's CRS is geographic: both maps are
    then compared in OLD's local metric frame (``frame``,
    :mod:`archivist.analysis.localframe`), so distances and areas are metres
    in every direction, and :func:`to_map` carries the changes back to OLD's
    CRS. ``transform`` is NEW's CRS when it differs from OLD's (NEW is then
    reprojected to OLD's CRS to compare).
    """

    old: MapProject
    new: MapProject
    tol: float
    search: float
    transform: pyproj.CRS | None = None
    frame: LocalFrame | None = None
    _texts: dict[tuple[int, str], np.ndarray] = field(default_factory=dict, compare=False, repr=False)  # memo of text()

    def text(self, layer: Layer | None, key: str, n: int = 0) -> np.ndarray:
        """``layer.text(key)`` read once per run; empty texts when the layer or field is absent."""
        if layer is None:
            return np.full(n, "", dtype=object)
        memo = (id(layer), key)
        if memo not in self._texts:
            col = layer.field(key)
            self._texts[memo] = np.full(len(layer.frame), "", dtype=object) if col is None else as_text(layer.frame[col])
        return self._texts[memo]

    def geoms(self, layer: Layer, side: str) -> np.ndarray:
        """The layer's geometries, made valid, in OLD's CRS or its local frame (``side`` is "old" or "new")."""
        g = layer.geometry
        if side == "new" and self.transform is not None and layer.frame.crs is not None:
            g = np.asarray(layer.frame.to_crs(self.old.crs).geometry.array, dtype=object)
        if self.frame is not None:
            g = np.asarray(self.frame.to_local(g), dtype=object)
        return valid(g)


def start(old: MapProject, new: MapProject) -> tuple[Comparison, Found]:
    """The comparison of ``old`` with ``new``, and what their CRSs alone say (a change or a note)."""
    cfg = old.config
    tol = float(cfg.tolerance)  # metres when OLD's CRS is geographic (see CheckConfig)
    search = max(MOVE_SEARCH_MM * cfg.metres_per_map_mm, 10 * tol)
    frame = frame_for(old)
    oc, nc = old.crs, new.crs
    notes = [frame.note] if frame is not None else []
    if oc is not None and nc is not None and not oc.equals(nc):
        change = Change("crs-changed", "map", (), f"Map CRS changed from {crs_label(oc)} to {crs_label(nc)}; NEW was reprojected to compare.")
        return Comparison(old, new, tol, search, transform=nc, frame=frame), Found(layer_changes=[change], notes=notes)
    if (oc is None) != (nc is None):
        notes.append("One side declares no map CRS: both were compared as if in the same CRS.")
    return Comparison(old, new, tol, search, frame=frame), Found(notes=notes)


def to_map(changes: list[Change], frame: LocalFrame | None) -> list[Change]:
    """The changes with their locations and geometries carried from ``frame`` back to the map CRS."""
    if frame is None:
        return changes
    out = []
    for c in changes:  # a loop over changes, not features
        x, y = frame.point_to_map(c.x, c.y)
        back = {k: frame.to_map(getattr(c, k)) for k in ("geometry", "old_geometry", "new_geometry") if getattr(c, k) is not None}
        pieces = [(frame.to_map(g) if g is not None else g, o, n) for g, o, n in c.pieces]
        out.append(dataclasses.replace(c, x=x, y=y, pieces=pieces, **back))
    return out


def layer_pair(cmp: Comparison, role: str) -> tuple[tuple[Layer, Layer] | None, list[Change]]:
    """Both sides' layers of ``role`` when both have one; else None and the layer-added/removed change (if any)."""
    a, b = cmp.old.layers.get(role), cmp.new.layers.get(role)
    if a is not None and b is not None:
        return (a, b), []
    if a is None and b is None:
        return None, []
    lay = b if a is None else a
    assert lay is not None
    kind = "layer-added" if a is None else "layer-removed"
    g = cmp.geoms(lay, "new" if a is None else "old")
    ext = shapely.union_all(shapely.envelope(g[present(g)])) if present(g).any() else None
    x, y = point_of(ext)
    change = Change(kind, role, tuple(lay.ids), f"Layer {role} ({lay.source}, {len(lay.ids)} features) {kind.split('-')[1]}.", x, y,
                    old_features=tuple(lay.ids) if b is None else (), new_features=tuple(lay.ids) if a is None else ())
    return None, [change]


def column_changes(role: str, old: pd.DataFrame, new: pd.DataFrame, x: float | None = None, y: float | None = None) -> list[Change]:
    """A change per attribute column added to or removed from ``role``."""
    oc, nc = columns(old), columns(new)
    out = [Change("column-added", role, (), f"{role}: column '{c}' added.", x, y, fields={c: {"old": "", "new": "(column)"}})
           for c in nc if c not in oc]
    out += [Change("column-removed", role, (), f"{role}: column '{c}' removed.", x, y, fields={c: {"old": "(column)", "new": ""}})
            for c in oc if c not in nc]
    return out


# ------------------------------------------------------------------ arrays

def valid(geoms: np.ndarray) -> np.ndarray:
    """A copy with the invalid geometries made valid (GEOS make_valid)."""
    out = geoms.copy()
    bad = present(geoms) & ~shapely.is_valid(geoms)
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


def as_text(series: pd.Series) -> np.ndarray:
    """A column as text, like :func:`archivist.readers.text_column`, without a Python call per value when it
    already holds text (the usual case for codes and kinds)."""
    values = series.to_numpy(dtype=object)
    missing = pd.isna(values)
    if pd.api.types.infer_dtype(values[~missing], skipna=True) in ("string", "empty"):
        out = values.copy()
        out[missing] = ""
        return out
    return text_column(series)


def rest(idx: np.ndarray, used: np.ndarray, n: int) -> np.ndarray:
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


def norm_values(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values as stripped text, and as numbers (NaN where a value is not one)."""
    text = np.array([str(v).strip() for v in values], dtype=object)
    nums = pd.to_numeric(pd.Series(text, dtype=object), errors="coerce").to_numpy(dtype=float)
    return text, nums


def differs(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Element-wise: do two columns of values differ (numbers compared as numbers)?"""
    ta, na = norm_values(a)
    tb, nb = norm_values(b)
    both_num = ~np.isnan(na) & ~np.isnan(nb)
    num_same = np.isclose(np.nan_to_num(na), np.nan_to_num(nb), rtol=1e-9, atol=1e-12)
    return np.asarray(np.where(both_num, ~num_same, ta != tb), dtype=bool)


def columns(frame: pd.DataFrame) -> list[str]:
    """The attribute columns of a table or layer (not the geometry), as text."""
    if hasattr(frame, "geometry"):
        return [str(c) for c in frame.columns if c != "geometry" and str(c) != frame.geometry.name]
    return [str(c) for c in frame.columns]


def field_changes(old: pd.DataFrame, new: pd.DataFrame, oi: np.ndarray, nj: np.ndarray, skip: Iterable[str] = ()) -> tuple[np.ndarray, FieldChanges]:
    """For matched rows ``(oi[k], nj[k])``: a mask of the pairs whose attributes differ, and for those
    pairs only, the changed attributes as ``{column: {"old": text, "new": text}}``."""
    mask = np.zeros(len(oi), dtype=bool)
    changed: FieldChanges = {}
    if len(oi) == 0:
        return mask, changed
    skipped = set(skip)
    ocols, ncols = columns(old), columns(new)
    for col in [c for c in ocols if c in ncols and c not in skipped]:
        ra = old[col].to_numpy(dtype=object)[oi]
        rb = new[col].to_numpy(dtype=object)[nj]
        maybe = np.flatnonzero(~(pd.Series(ra).eq(pd.Series(rb)).to_numpy() | (pd.isna(ra) & pd.isna(rb))))
        if len(maybe) == 0:
            continue  # equal as stored: no need to compare as text
        a = text_column(pd.Series(ra[maybe], dtype=object))
        b = text_column(pd.Series(rb[maybe], dtype=object))
        diff = differs(a, b)
        mask[maybe[diff]] = True
        for k in np.flatnonzero(diff):  # a loop over changes only
            changed.setdefault(int(maybe[k]), {})[col] = {"old": str(a[k]), "new": str(b[k])}
    return mask, changed


def point_of(geom: Any) -> tuple[float | None, float | None]:
    """A point of ``geom`` (the point itself, or a point on its surface); (None, None) when there is none."""
    if geom is None or shapely.is_empty(geom):
        return None, None
    p = geom if geom.geom_type == "Point" else shapely.point_on_surface(geom)
    return float(p.x), float(p.y)


# ------------------------------------------------------------------ words

def fmt_area(m2: float) -> str:
    """An area for a message: hectares from 1 ha up, else m²."""
    return f"{m2 / 10_000:.2f} ha" if abs(m2) >= 10_000 else f"{m2:.1f} m²"


def fmt_units(d: dict[str, float]) -> str:
    """Areas per unit for a message, largest first."""
    return ", ".join(f"{u or '(no unit)'} {fmt_area(a)}" for u, a in sorted(d.items(), key=lambda kv: -kv[1]))


def describe_fields(fields: dict[str, dict[str, str]]) -> str:
    """Changed attributes for a message: ``column old -> new``."""
    return ", ".join(f"{k} {v['old'] or '(empty)'} -> {v['new'] or '(empty)'}" for k, v in fields.items())
