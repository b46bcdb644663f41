"""A repaired GeoPackage layer written into its copied table in place, the table's definition kept.

Writing a layer through GDAL creates its table anew from the frame's
columns: a field's width (``TEXT(8)``), ``NOT NULL`` and ``DEFAULT``, a
``DATE`` field (read as a timestamp, written back as ``DATETIME``), the
table's triggers and anything else the mapper's GIS set on the table are
lost. So a layer of a GeoPackage copied into the repaired project is edited
instead: the rows the repairs removed are deleted, the rows whose geometry
or values changed are updated, new rows are inserted with the feature ids
of the working copy, and every other row is left as it was, byte for byte.

GDAL still encodes what is new: pyogrio writes the changed and new rows to
a scratch GeoPackage beside the copy, whose geometry blobs and values are
then moved into the table by SQL (Python's ``sqlite3``, the scratch file
attached). Values only a repair changed on rows whose geometry stayed (the
``generated`` field a repair adds) are plain SQL parameters.

The table's spatial index (the GeoPackage ``gpkg_rtree_index`` extension,
table ``rtree_<table>_<geometry column>``) is kept by hand: its triggers call
functions that only GDAL's SQLite connection has (``ST_MinX``, ``ST_IsEmpty``),
so they are set aside during the edit and put back as they were written,
and the index rows of every row touched are written from the geometries'
bounds (SQLite's R*Tree stores 32-bit floats rounded outward, so each box
still holds its geometry). Other triggers on the table run as written. The
extent in ``gpkg_contents`` and GDAL's feature count in
``gpkg_ogr_contents`` are brought up to date.

Where the table cannot take the rows as they are (a layer of one-part
geometries given a multi-part one, a coordinate system other than the
scratch file's, a ``NOT NULL`` field a new row leaves empty, a trigger that
fails), :class:`NotInPlace` says why; everything done so far is rolled back
and the caller writes the layer anew.
"""

from __future__ import annotations

import math
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..project import sql_name as _q

MULTI = {"MULTIPOINT", "MULTILINESTRING", "MULTIPOLYGON", "MULTICURVE", "MULTISURFACE", "GEOMETRYCOLLECTION"}
SINGLE = {"POINT", "LINESTRING", "POLYGON"}


class NotInPlace(Exception):
    """The layer cannot be edited in its table; the message says why."""


@dataclass(frozen=True)
class Edited:
    """What an edit did to the table: rows deleted, updated and inserted, and fields added."""

    deleted: int
    updated: int
    inserted: int
    added_fields: tuple[str, ...]


@dataclass(frozen=True)
class Fill:
    """One value for a field on the rows ``fids``; ``everywhere``: they are every row the scratch file does not hold."""

    value: Any
    fids: np.ndarray
    everywhere: bool


@dataclass(frozen=True)
class _Table:
    name: str
    fid: str
    geom: str
    geometry_type: str
    srs_id: int
    columns: dict[str, str]  # name -> declared type, in the table's order
    rtree: str | None


def _table(con: sqlite3.Connection, table: str, schema: str = "main") -> _Table:
    row = con.execute(f"SELECT table_name, column_name, geometry_type_name, srs_id FROM {schema}.gpkg_geometry_columns "
                      "WHERE lower(table_name) = lower(?)", (table,)).fetchone()
    if row is None:
        raise NotInPlace(f"table '{table}' has no geometry column registered in gpkg_geometry_columns")
    name, geom, gtype, srs = str(row[0]), str(row[1]), str(row[2]).upper(), int(row[3])
    info = con.execute(f"PRAGMA {schema}.table_info({_q(name)})").fetchall()
    pk = [r[1] for r in info if r[5] == 1]
    if len(pk) != 1 or sum(1 for r in info if r[5]) != 1:
        raise NotInPlace(f"table '{name}' has no single integer primary key")
    columns = {str(r[1]): str(r[2] or "") for r in info if r[1] not in (pk[0], geom)}
    rtree = f"rtree_{name}_{geom}"
    have = con.execute(f"SELECT 1 FROM {schema}.sqlite_master WHERE type = 'table' AND name = ?", (rtree,)).fetchone()
    return _Table(name, str(pk[0]), geom, gtype, srs, columns, rtree if have else None)


def _simple(value: Any) -> tuple[bool, Any]:
    """(True, the value as SQLite takes it) for None, numbers, booleans and text; (False, None) otherwise."""
    if value is None:
        return True, None
    if isinstance(value, (bool, np.bool_)):
        return True, int(bool(value))
    if isinstance(value, (int, np.integer)):
        return True, int(value)
    if isinstance(value, (float, np.floating)):
        return True, None if math.isnan(float(value)) else float(value)
    if isinstance(value, str):
        return True, value
    import pandas as pd

    if value is pd.NA or value is pd.NaT:
        return True, None
    return False, None


def _differs(new: Any, old: Any) -> np.ndarray:
    """Row by row, whether two columns' values differ (both missing counts as equal)."""
    import pandas as pd

    a = pd.Series(np.asarray(new, dtype=object))
    b = pd.Series(np.asarray(old, dtype=object))
    same = a.isna().to_numpy() & b.isna().to_numpy()
    try:
        eq = (a == b).to_numpy(dtype=bool)
    except (TypeError, ValueError):  # values that do not compare to a truth value (arrays): compared one by one
        eq = np.array([_equal(x, y) for x, y in zip(a, b)], dtype=bool)
    return ~(same | eq)


def _equal(x: Any, y: Any) -> bool:
    try:
        return bool(x == y)
    except (TypeError, ValueError):
        return False


def _extent(geoms: np.ndarray) -> tuple[float, float, float, float] | None:
    """The bounds of all the geometries together (GEOS total bounds); None when none has any."""
    import shapely

    box = shapely.total_bounds(geoms)
    return None if np.isnan(box).any() else (float(box[0]), float(box[1]), float(box[2]), float(box[3]))


def _value_sql(column: str, declared: str) -> str:
    """The SQL taking scratch column ``column`` into a field declared ``declared``."""
    ref = f"x.{_q(column)}"
    if declared.upper() == "DATE":  # GDAL writes a timestamp as 'YYYY-MM-DDTHH:MM:SS...'; a DATE holds the day
        return f"CASE WHEN typeof({ref}) = 'text' THEN substr({ref}, 1, 10) ELSE {ref} END"
    return ref


@dataclass(frozen=True)
class _Plan:
    """What an edit writes: the rows to delete (``gone``, feature ids), the frame's rows already in the table
    (``kept``), those GDAL encodes (``encoded``: moved, new, or with a value SQLite cannot take as a parameter),
    per field the rows whose value changed (``changed``), and the values set as parameters (``params``)."""

    gone: np.ndarray
    kept: np.ndarray
    encoded: np.ndarray
    changed: dict[str, np.ndarray]
    params: dict[str, Fill | list[tuple[Any, int]]]

    @property
    def idle(self) -> bool:
        return not len(self.gone) and not self.encoded.any() and not self.params and not self.changed


def _plan(frame: Any, fids: np.ndarray, original: Any) -> _Plan:
    """Compare the working rows with the table's rows as read (``original``, indexed by feature id)."""
    import pandas as pd
    import shapely

    old_fids = np.asarray(original.index, dtype=np.int64)
    pos = pd.Index(old_fids).get_indexer(fids)
    kept = pos >= 0
    # the table's rows no working row is (its feature ids are its key: each once), in ascending order
    hit = np.zeros(len(old_fids), dtype=bool)
    hit[pos[kept]] = True
    gone = np.sort(old_fids[~hit])
    a = np.asarray(frame.geometry.values, dtype=object)[kept]
    b = np.asarray(original.geometry.values, dtype=object)[pos[kept]]
    moved = np.zeros(len(frame), dtype=bool)
    moved[kept] = ~((shapely.is_missing(a) & shapely.is_missing(b)) | np.asarray(shapely.equals_identical(a, b), dtype=bool))
    changed: dict[str, np.ndarray] = {}
    for c in (c for c in frame.columns if c != frame.geometry.name):
        d = np.zeros(len(frame), dtype=bool)
        d[kept] = _differs(frame[c].to_numpy()[kept], original[c].to_numpy()[pos[kept]]) if c in original.columns else True
        if d.any() or c not in original.columns:
            changed[c] = d
    encoded = moved | ~kept
    params: dict[str, Fill | list[tuple[Any, int]]] = {}
    for c, d in changed.items():
        rows = np.flatnonzero(d & ~encoded)
        values = frame[c].to_numpy()[rows]
        distinct = pd.unique(pd.Series(values, dtype=object))
        if len(distinct) == 1 and _simple(distinct[0])[0]:  # one value (a field added): set by one statement
            params[c] = Fill(_simple(distinct[0])[1], fids[rows], len(rows) == int((kept & ~encoded).sum()))
            continue
        simple = [_simple(v) for v in values]
        if all(ok for ok, _ in simple):
            params[c] = [(v, int(fids[r])) for (_, v), r in zip(simple, rows)]
        else:
            encoded[rows] = True
    return _Plan(gone, kept, encoded, changed, params)


def edit_table(path: Path, table: str, frame: Any, fids: np.ndarray, original: Any, scratch: Path) -> Edited:
    """Make table ``table`` of the GeoPackage ``path`` hold ``frame`` (a GeoDataFrame whose rows have the feature ids
    ``fids``), given ``original``, the table's rows as read before (a GeoDataFrame indexed by feature id).

    ``scratch`` is a path for the scratch GeoPackage, removed at the end. Raises :class:`NotInPlace` (with the
    file as it was) where the table cannot take the rows.
    """
    import pyogrio
    import shapely

    fids = np.asarray(fids, dtype=np.int64)
    if len(np.unique(fids)) != len(fids):
        raise NotInPlace("two rows of the working copy have one feature id")
    fields = [c for c in frame.columns if c != frame.geometry.name]
    if "fid" in (c.lower() for c in fields):
        raise NotInPlace("the working copy has a field named fid, the name the rows' feature ids are written under")
    plan = _plan(frame, fids, original)
    if plan.idle:
        return Edited(0, 0, 0, ())
    con = sqlite3.connect(str(path), isolation_level=None)
    try:
        t = _table(con, table)
        new_fields = tuple(c for c in fields if c not in t.columns)
        for c in fields:
            if c.lower() in (t.fid.lower(), t.geom.lower()):
                raise NotInPlace(f"the working copy has a field '{c}' named like the table's key or geometry")
            if c not in t.columns and c.lower() in {k.lower() for k in t.columns}:
                raise NotInPlace(f"the working copy's field '{c}' differs from the table's only in case")
        rows = np.flatnonzero(plan.encoded)
        geoms = np.asarray(frame.geometry.values, dtype=object)
        if t.geometry_type in SINGLE and len(rows):
            kinds = shapely.get_type_id(geoms[rows])
            if np.any((kinds >= 4) & (kinds <= 7)):
                raise NotInPlace(f"a repaired feature has several parts and the table holds {t.geometry_type}s")
        sub = frame.iloc[rows].copy()
        sub.insert(0, "fid", fids[rows])
        if sub.crs is None and original.crs is not None:
            sub = sub.set_crs(original.crs)
        pyogrio.write_dataframe(sub, scratch, layer="rows", driver="GPKG",
                                promote_to_multi=True if t.geometry_type in MULTI else None,
                                layer_options={"SPATIAL_INDEX": "NO"})
        con.execute("ATTACH DATABASE ? AS scratch", (str(scratch),))
        try:
            return _apply(con, t, sub, plan, new_fields, rows, fids, _extent(geoms))
        finally:
            con.execute("DETACH DATABASE scratch")
    except sqlite3.Error as exc:
        raise NotInPlace(f"SQLite: {exc}") from exc
    finally:
        con.close()
        for p in (scratch, scratch.with_name(scratch.name + "-journal")):
            if p.exists():
                p.unlink()


def _apply(con: sqlite3.Connection, t: _Table, sub: Any, plan: _Plan, new_fields: tuple[str, ...], rows: np.ndarray,
           fids: np.ndarray, extent: tuple[float, float, float, float] | None) -> Edited:
    """Carry out ``plan`` in one transaction, the scratch file attached (``sub``: its rows, feature ids ``fids[rows]``)."""
    import shapely

    from ..analysis.arrays import present

    gone, params, changed, kept = plan.gone, plan.params, plan.changed, plan.kept
    s = _table(con, "rows", "scratch")
    if s.srs_id != t.srs_id:
        raise NotInPlace(f"GDAL gave the rows coordinate system {s.srs_id}, the table has {t.srs_id}")
    name = _q(t.name)
    con.execute("PRAGMA main.synchronous = OFF")  # a file in the staging folder, synced before it moves into place
    con.execute("BEGIN")
    try:
        # the spatial index's triggers (GDAL's SQL functions): set aside, the index kept below, put back as written
        rtree_triggers = []
        if t.rtree is not None:
            for trig, sql in con.execute("SELECT name, sql FROM main.sqlite_master WHERE type = 'trigger' "
                                         "AND lower(tbl_name) = lower(?)", (t.name,)).fetchall():
                if t.rtree.lower() in str(sql).lower():
                    rtree_triggers.append(str(sql))
                    con.execute(f"DROP TRIGGER main.{_q(trig)}")
        for c in new_fields:
            con.execute(f"ALTER TABLE main.{name} ADD COLUMN {_q(c)} {s.columns.get(c, '')}".rstrip())
        declared = {**t.columns, **{c: s.columns.get(c, "") for c in new_fields}}
        con.execute("CREATE TEMP TABLE archivist_gone (fid INTEGER PRIMARY KEY)")
        con.executemany("INSERT INTO temp.archivist_gone VALUES (?)", [(int(f),) for f in gone])
        con.execute(f"DELETE FROM main.{name} WHERE {_q(t.fid)} IN (SELECT fid FROM temp.archivist_gone)")
        if t.rtree is not None:
            con.execute(f"DELETE FROM main.{_q(t.rtree)} WHERE id IN (SELECT fid FROM temp.archivist_gone)")
        con.execute("DROP TABLE temp.archivist_gone")
        fields = [c for c in sub.columns if c not in ("fid", sub.geometry.name)]
        # rows kept: the geometry and the fields that changed anywhere; new rows: every field
        upd = [c for c in fields if c in changed]
        sets = ", ".join([f"{_q(t.geom)} = x.{_q(s.geom)}"] + [f"{_q(c)} = {_value_sql(c, declared[c])}" for c in upd])
        con.execute(f"UPDATE main.{name} SET {sets} FROM scratch.{_q(s.name)} AS x WHERE x.{_q(s.fid)} = main.{name}.{_q(t.fid)}")
        updated = int(kept[rows].sum())
        cols = ", ".join([_q(t.fid), _q(t.geom)] + [_q(c) for c in fields])
        vals = ", ".join([f"x.{_q(s.fid)}", f"x.{_q(s.geom)}"] + [_value_sql(c, declared[c]) for c in fields])
        con.execute(f"INSERT INTO main.{name} ({cols}) SELECT {vals} FROM scratch.{_q(s.name)} AS x "
                    f"WHERE NOT EXISTS (SELECT 1 FROM main.{name} AS y WHERE y.{_q(t.fid)} = x.{_q(s.fid)})")
        inserted = int((~kept[rows]).sum())
        valued: set[int] = set()
        for c, how in params.items():
            if isinstance(how, Fill):
                if how.everywhere:
                    con.execute(f"UPDATE main.{name} SET {_q(c)} = ? WHERE {_q(t.fid)} NOT IN "
                                f"(SELECT {_q(s.fid)} FROM scratch.{_q(s.name)})", (how.value,))
                else:
                    con.executemany(f"UPDATE main.{name} SET {_q(c)} = ? WHERE {_q(t.fid)} = ?",
                                    [(how.value, int(f)) for f in how.fids])
                valued.update(how.fids.tolist())
            else:
                con.executemany(f"UPDATE main.{name} SET {_q(c)} = ? WHERE {_q(t.fid)} = ?", how)
                valued.update(f for _, f in how)
        updated += len(valued - set(fids[rows].tolist()))
        geoms = np.asarray(sub.geometry.values, dtype=object)
        if t.rtree is not None and len(rows):
            have = present(geoms)
            con.executemany(f"DELETE FROM main.{_q(t.rtree)} WHERE id = ?", [(int(f),) for f in fids[rows][~have]])
            box = shapely.bounds(geoms[have])
            con.executemany(f"INSERT OR REPLACE INTO main.{_q(t.rtree)} VALUES (?, ?, ?, ?, ?)",
                            [(int(f), x0, x1, y0, y1) for f, (x0, y0, x1, y1) in zip(fids[rows][have], box.tolist())])
        for sql in rtree_triggers:
            con.execute(sql)
        _contents(con, t, extent)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return Edited(len(gone), updated, inserted, new_fields)


def _contents(con: sqlite3.Connection, t: _Table, extent: tuple[float, float, float, float] | None) -> None:
    """The table's extent in gpkg_contents (``extent``: the bounds of every geometry it now holds) and GDAL's
    feature count in gpkg_ogr_contents."""
    stamp = "last_change = strftime('%Y-%m-%dT%H:%M:%fZ', 'now')"
    if extent is not None:
        con.execute(f"UPDATE main.gpkg_contents SET min_x = ?, min_y = ?, max_x = ?, max_y = ?, {stamp} "
                    "WHERE lower(table_name) = lower(?)", (*extent, t.name))
    else:
        con.execute(f"UPDATE main.gpkg_contents SET {stamp} WHERE lower(table_name) = lower(?)", (t.name,))
    have = con.execute("SELECT 1 FROM main.sqlite_master WHERE type = 'table' AND name = 'gpkg_ogr_contents'").fetchone()
    if have:
        con.execute(f"UPDATE main.gpkg_ogr_contents SET feature_count = (SELECT count(*) FROM main.{_q(t.name)}) "
                    "WHERE lower(table_name) = lower(?)", (t.name,))
