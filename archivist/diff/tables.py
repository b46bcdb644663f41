"""Matching the tables: legend entries and map units by unit code, analyses by sample id.

A unit is "recoded" when its legend entry is unchanged under a new code, or
when every polygon of the old code became the new code and every polygon of
the new code was the old one; the polygon recodes it explains fold into it.
Analyses are matched by sample id and the order of repeats; a row whose
sample id changed but whose values did not is the same analysis, renamed.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import shapely

from ..project import Layer, MapProject, Table
from ..readers import text_column
from ..vocab.legend import column as legend_column
from .common import (
    Comparison,
    Found,
    column_changes,
    columns,
    describe_fields,
    differs,
    field_changes,
    fmt_area,
    norm_values,
    point_of,
    present,
)
from .result import Change


@dataclass(frozen=True)
class UnitsFound:
    """The unit-level and legend changes, and the polygon changes not folded into a unit recode."""

    found: Found
    polygons: list[Change]


def legend_entries(table: Table | None) -> dict[str, dict[str, str]]:
    """Each unit code of the legend table with its other columns as text (the first row of a repeated code).

    This is the one place ``diff`` reads legend columns.
    """
    entries: dict[str, dict[str, str]] = {}
    col = legend_column(table, "unit") if table is not None else None
    if table is None or col is None:
        return entries
    frame = table.frame
    keys = text_column(frame[col])
    others = [c for c in frame.columns if c != col]
    texts = {c: text_column(frame[c]) for c in others}
    for r, key in enumerate(keys):
        if key and key not in entries:
            entries[key] = {c: str(texts[c][r]) for c in others}
    return entries


def _mapped_codes(cmp: Comparison, layer: Layer | None) -> set[str]:
    if layer is None or layer.field("unit_field") is None:
        return set()
    return set(pd.unique(cmp.text(layer, "unit_field"))) - {""}


def _count_unit(cmp: Comparison, layer: Layer | None, code: str) -> int:
    if layer is None or layer.field("unit_field") is None:
        return 0
    return int((cmp.text(layer, "unit_field") == code).sum())


def _unit_stats(cmp: Comparison, layer: Layer | None, code: str, side: str) -> tuple[int, float, Any]:
    if layer is None or layer.field("unit_field") is None:
        return 0, 0.0, None
    mask = cmp.text(layer, "unit_field") == code
    g = cmp.geoms(layer, side)[mask]
    g = g[present(g)]
    if len(g) == 0:
        return int(mask.sum()), 0.0, None
    return int(mask.sum()), float(shapely.area(g).sum()), shapely.union_all(g)


def match_units(cmp: Comparison, polygon_changes: list[Change]) -> UnitsFound:
    """Unit-level changes (added, removed, recoded) and legend entry changes; unit recodes fold the polygon recodes they explain."""
    to, tn = cmp.old.tables.get("legend"), cmp.new.tables.get("legend")
    lo, ln = cmp.old.layers.get("units"), cmp.new.layers.get("units")
    oleg, omap = legend_entries(to), _mapped_codes(cmp, lo)
    nleg, nmap = legend_entries(tn), _mapped_codes(cmp, ln)
    oname = (legend_column(to, "name") if to is not None else None) or "name"
    nname = (legend_column(tn, "name") if tn is not None else None) or "name"
    old_codes, new_codes = set(oleg) | omap, set(nleg) | nmap
    added, removed = sorted(new_codes - old_codes), sorted(old_codes - new_codes)
    changes: list[Change] = []
    layer_changes: list[Change] = []
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
            all_polys = bool(rec) and len(rec) == _count_unit(cmp, lo, x) == _count_unit(cmp, ln, y)
            if same_entry or all_polys:
                pairs[x] = y
                break
    for x, y in pairs.items():
        rec = [c for c in recodes if c.old_unit == x and c.new_unit == y]
        folded.update(id(c) for c in rec)
        feats = tuple(f for c in rec for f in c.features)
        geom = shapely.union_all([c.geometry for c in rec]) if rec else None
        px, py = point_of(geom) if geom is not None else (None, None)
        area = sum(c.geometry.area for c in rec) if rec else 0.0
        entry_note = "" if x in oleg and y in nleg and oleg[x] == nleg[y] else (" (legend entry also changed)" if x in oleg and y in nleg else "")
        changes.append(Change("unit-recoded", "legend", feats, f"Unit {x} recoded to {y}: {len(rec)} polygon(s), {fmt_area(area)}{entry_note}.", px, py,
                              feats, feats, {"unit": {"old": x, "new": y}}, {y: area} if area else {}, {x: area} if area else {},
                              polygons=feats, geometry=geom, pieces=[p for c in rec for p in c.pieces]))
    for y in added:
        if y in pairs.values():
            continue
        name = nleg.get(y, {}).get(nname, "")
        n, area, geom = _unit_stats(cmp, ln, y, "new")
        where = f"mapped in {n} polygon(s), {fmt_area(area)}" if n else "not mapped"
        legend = f"legend entry '{name}'" if y in nleg and name else ("legend entry" if y in nleg else "no legend entry")
        px, py = point_of(geom) if geom is not None else (None, None)
        changes.append(Change("unit-added", "legend", (y,), f"Unit {y} added ({legend}; {where}).", px, py, (), (y,),
                              {c: {"old": "", "new": v} for c, v in nleg.get(y, {}).items() if v}))
    for x in removed:
        if x in pairs:
            continue
        name = oleg.get(x, {}).get(oname, "")
        n, area, geom = _unit_stats(cmp, lo, x, "old")
        where = f"was mapped in {n} polygon(s), {fmt_area(area)}" if n else "was not mapped"
        legend = f"legend entry '{name}'" if x in oleg and name else ("legend entry" if x in oleg else "no legend entry")
        px, py = point_of(geom) if geom is not None else (None, None)
        changes.append(Change("unit-removed", "legend", (x,), f"Unit {x} removed ({legend}; {where}).", px, py, (x,), (),
                              {c: {"old": v, "new": ""} for c, v in oleg.get(x, {}).items() if v}))
    if to is not None and tn is not None:
        layer_changes += column_changes("legend", to.frame, tn.frame)
    for code in sorted(set(oleg) & set(nleg)):
        diff = {c: {"old": oleg[code].get(c, ""), "new": nleg[code].get(c, "")} for c in sorted(set(oleg[code]) & set(nleg[code]))
                if differs(np.array([oleg[code].get(c, "")], dtype=object), np.array([nleg[code].get(c, "")], dtype=object))[0]}
        if diff:
            changes.append(Change("legend-entry-changed", "legend", (code,), f"Legend entry {code}: {describe_fields(diff)}.", None, None, (code,), (code,), diff))
    kept = [c for c in polygon_changes if id(c) not in folded]
    return UnitsFound(Found(changes, layer_changes), kept)


def match_analyses(cmp: Comparison) -> Found:
    """Every changed, added or removed analysis row; a sample analysed twice has its rows matched in order."""
    to, tn = cmp.old.tables.get("analyses"), cmp.new.tables.get("analyses")
    if to is None and tn is None:
        return Found()
    if to is None or tn is None:
        t = tn if to is None else to
        assert t is not None
        kind = "table-added" if to is None else "table-removed"
        return Found([Change(kind, "analyses", (), f"Analyses table ({t.source}, {len(t.frame)} rows) {kind.split('-')[1]}.")])
    layer_changes = column_changes("analyses", to.frame, tn.frame)
    notes: list[str] = []
    of, nf = to.field("sample_field"), tn.field("sample_field")
    if not of or not nf:
        notes.append("Analyses compared row by row: one side has no sample id column.")
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
        cols = [c for c in columns(to.frame) if c in columns(tn.frame) and c not in (of, nf)]
        if cols:
            extra_i, extra_j = _renamed_rows(to.frame, tn.frame, cols, un_o, un_n)
            mi, mj = np.r_[mi, extra_i], np.r_[mj, extra_j]
    order = np.argsort(mj, kind="stable")
    mi, mj = mi[order], mj[order]
    fmask, fields = field_changes(to.frame, tn.frame, mi, mj)
    locs = sample_points(cmp.old, cmp.new)
    changes = []
    for k in map(int, np.flatnonzero(fmask)):
        if fields[k]:
            sid = str(nkey[mj[k]])
            rep = f" (repeat {nrank[mj[k]] + 1})" if nrank[mj[k]] else ""
            x, y = locs.get(sid, (None, None))
            changes.append(Change("analysis-changed", "analyses", (sid,), f"Analysis of {sid}{rep}: {describe_fields(fields[k])}.", x, y, (sid,), (sid,), fields[k]))
    for oi in np.setdiff1d(np.arange(len(okey)), mi):
        sid = str(okey[oi])
        x, y = locs.get(sid, (None, None))
        changes.append(Change("analysis-removed", "analyses", (sid,), f"Analysis of {sid} removed ({to.data.cell(int(oi), of) if of else f'row {oi + 2}'}).", x, y, (sid,), ()))
    for nj in np.setdiff1d(np.arange(len(nkey)), mj):
        sid = str(nkey[nj])
        x, y = locs.get(sid, (None, None))
        changes.append(Change("analysis-added", "analyses", (sid,), f"Analysis of {sid} added ({tn.data.cell(int(nj), nf) if nf else f'row {nj + 2}'}).", x, y, (), (sid,)))
    return Found(changes, layer_changes, notes)


def _renamed_rows(old: pd.DataFrame, new: pd.DataFrame, cols: list[str], un_o: np.ndarray, un_n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairs of unmatched rows (old, new) whose values in ``cols`` are the same, numbers compared as numbers."""
    def row_keys(frame: pd.DataFrame, idx: np.ndarray) -> list[tuple[str, ...]]:
        """Each row's values, numbers as numbers, as a hashable key."""
        texts = [norm_values(text_column(frame[c])[idx]) for c in cols]
        return [tuple(repr(float(nums[k])) if np.isfinite(nums[k]) else str(text[k]) for text, nums in texts) for k in range(len(idx))]

    pool: dict[tuple[str, ...], list[int]] = defaultdict(list)
    for k, key in zip(un_o, row_keys(old, un_o)):
        pool[key].append(int(k))
    extra_i, extra_j = [], []
    for k, key in zip(un_n, row_keys(new, un_n)):
        if pool.get(key):
            extra_i.append(pool[key].pop(0))
            extra_j.append(int(k))
    return np.array(extra_i, dtype=int), np.array(extra_j, dtype=int)


def sample_points(old: MapProject, new: MapProject) -> dict[str, tuple[float, float]]:
    """Each sample id's place (from NEW's samples layer, else OLD's), to place analysis changes."""
    lay = new.layers.get("samples") or old.layers.get("samples")
    if lay is None:
        return {}
    g = lay.geometry
    ok = np.flatnonzero(present(g))
    pts = shapely.point_on_surface(g[ok])
    return {str(lay.ids[k]): (float(x), float(y)) for k, x, y in zip(ok, shapely.get_x(pts), shapely.get_y(pts))}
