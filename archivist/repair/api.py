"""``repair()``: a repaired copy of a map project, every change logged, the copy checked.

The run: load the project, check it, copy its unit polygons and lines into a
:class:`~.model.RepairState`, apply the selected repairs in order, write the
copy (every file the manifest names, the changed layers rewritten in their
own format where GDAL writes it, else as GeoPackage; a manifest of its own
whose paths point into the copy and whose ``[repair] record`` names the
change log), then check the copy. The project folder is only read. The copy
is staged in a hidden sibling of ``out`` and moved into place at the end,
with a mark of what was written (:data:`MARK`).

What it does not cover: maps in a geographic CRS (longitude/latitude),
projects without a manifest, and units, lines or extent that the check reads
moved into place (another CRS, x and y exchanged: :func:`refuse_moved_layers`)
are refused; repairs work in map units.
"""

from __future__ import annotations

import shutil
from collections import Counter
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Iterable

from .._version import __version__
from ..collector import collector_paused
from ..errors import ArchivistError
from ..madefolder import Mark
from .model import FEATURE_ID, OVERLAP_RULES, SOURCE_LAYER, Change, Left, RepairSettings, RepairState

RECORD_KEY = "record"  # [repair] record = "repair-log.json" in the copy's manifest
MARK = Mark(".archivist-repair.json", "archivist repair record", "repair", "repairing")
"""The mark of a repaired copy: the SHA-256 of every file repair wrote there (:mod:`archivist.madefolder`), so that
``--force`` replaces only such a copy, and only while the mapper has added and changed nothing in it."""


@dataclass(frozen=True)
class RepairResult:
    """What a run did: the repairs applied, the changes and what was left, findings per rule before and after."""

    project: str
    out: Path | None
    repairs: tuple[str, ...]
    settings: RepairSettings
    changes: tuple[Change, ...]
    left: tuple[Left, ...]
    before: dict[str, int]
    after: dict[str, int]
    log: dict[str, Any]

    def per_repair(self) -> dict[str, int]:
        """Number of changes of each repair applied (0 included)."""
        counts = Counter(c.repair for c in self.changes)
        return {name: counts.get(name, 0) for name in self.repairs}


def settings_for(project: Any, build_polygons: bool = False) -> RepairSettings:
    """The thresholds of a run from ``[checks]`` and ``[repair]`` (see ``schemas/manifest.schema.json``)."""
    from ..analysis.polygons import sliver_thresholds

    cfg = project.config
    rep = project.manifest.get("repair") or {}
    area, width = sliver_thresholds(project)
    unit_mm = cfg.scale / 1000.0  # ground metres per map millimetre (map units are metres: projected maps only)
    overlap = str(rep.get("overlap", "longest-border"))
    if overlap not in OVERLAP_RULES:
        overlap = "longest-border"  # the schema reports the bad value
    gap = float(rep["gap_width_mm"]) * unit_mm if isinstance(rep.get("gap_width_mm"), (int, float)) else float(cfg.tolerance)
    omax = rep.get("overlap_max_area_mm2", cfg.sliver_area_mm2)
    return RepairSettings(
        tolerance=float(cfg.tolerance),
        gap_width=gap,
        overlap=overlap,
        overlap_max_area=float(omax) * unit_mm * unit_mm,
        sliver_area=float(area),
        sliver_width=float(width),
        generated_certainty=str(rep.get("generated_certainty", "inferred")),
        build_polygons=build_polygons,
        overlap_by_lines=rep.get("overlap_by_lines", True) is not False,  # the schema reports a value not true or false
    )


def _ages(project: Any) -> dict[str, Any]:
    """Unit code -> age span from the legend (codes whose age cannot be read are left out)."""
    table = project.tables.get("legend")
    if table is None:
        return {}
    from ..vocab import legend as vl
    from ..vocab.ages import AgeError, parse_age

    codes, ages = vl.cells(table, "unit"), vl.cells(table, "age")
    if codes is None or ages is None:
        return {}
    out = {}
    for code, text in zip(codes.tolist(), ages.tolist()):  # one per legend row
        try:
            out[str(code)] = parse_age(str(text), project.config.chart)
        except (AgeError, ValueError):
            continue
    return out


def make_state(project: Any) -> RepairState:
    """Working copies of the project's units and lines, with their feature ids in column FEATURE_ID."""
    import numpy as np
    import pandas as pd

    state = RepairState(project=project, config=project.config, ages=_ages(project))
    units = project.layers.get("units")
    if units is not None:
        frame = units.frame.copy()
        frame[FEATURE_ID] = np.asarray(units.ids, dtype=object)
        state.units = frame
        state.unit_field = units.field("unit_field")
    lines = project.layers.get("lines")
    if lines is not None:
        frame = lines.frame.copy()
        frame[FEATURE_ID] = np.asarray(lines.ids, dtype=object)
        if lines.origin:  # lines combined from several layers: each row's own layer (the row order of the ids)
            own = pd.Index(list(lines.origin)).get_indexer(np.asarray(lines.ids, dtype=object))
            roles = np.array([role for role, _ in lines.origin.values()] + ["lines"], dtype=object)
            frame[SOURCE_LAYER] = roles[own]  # -1: the last, "lines"
        else:
            frame[SOURCE_LAYER] = "lines"
        state.lines = frame
        state.kind_field = lines.field("kind_field")
        state.certainty_field = lines.field("certainty_field")
    for role in ("samples", "structures"):
        if role in project.layers:
            state.points[role] = project.layers[role].frame
    extent = project.layers.get("extent")
    if extent is not None and len(extent.frame):
        import shapely

        state.extent = shapely.union_all(extent.geometry)
    return state


def _counts(report: Any) -> dict[str, int]:
    return dict(Counter(f.rule for f in report.findings))


@collector_paused()
def repair(project: str | Path, out: str | Path | None, *, only: Iterable[str] = (), skip: Iterable[str] = (),
           dry_run: bool = False, force: bool = False, build_polygons: bool = False, progress: Any = None,
           jobs: int = 1) -> RepairResult:
    """Repair a copy of ``project`` into the folder ``out`` and check it.

    ``only``/``skip`` select repairs by name (:func:`archivist.repair.registry.select`);
    ``dry_run`` computes the changes without writing anything (``out`` may be None);
    ``force`` replaces an existing ``out`` that is empty, or that an earlier
    run wrote and nothing was added to or changed in since (:data:`MARK`). ``jobs``: as ``check``'s, the threads
    the checks before and after run their rule families on side by side (0:
    every core); with more than one, a large change log is also written by a
    forked process while the copy is checked. The repairs themselves run in
    this thread, and the result is the same whatever the number. Raises
    ArchivistError (exit 2) when the project cannot be repaired or ``out`` is
    refused.
    """
    from ..engine import check
    from ..fsutil import guard_output
    from ..manifest import find_manifest
    from ..parallel import default_jobs
    from ..progress import Progress
    from ..project import load_project
    from .registry import select

    progress = progress or Progress()
    if jobs < 0:
        raise ArchivistError(f"jobs must be 0 (every core) or a positive number of threads, not {jobs}")
    jobs = default_jobs() if jobs == 0 else jobs
    root, manifest_path = find_manifest(project)
    if manifest_path is None:
        raise ArchivistError(f"{project}: repair needs a project with an archivist.toml ('archivist init' writes one)")
    chosen = select(only, skip, build_polygons)
    target = None
    before_files = None  # an existing output folder the run may replace: its files as they were (see MARK)
    if not dry_run:
        if out is None:
            raise ArchivistError("repair: --out is required (or use --dry-run)")
        target = guard_output(Path(out), force=True, project_root=root, kind="folder", refuse_ancestor=True,
                              hint="choose a folder outside it")
        if target.exists() or target.is_symlink():
            before_files = MARK.replaceable(target, [(root, f"the project {root}")])
            if not force:
                raise MARK.exists(target, before_files)
    proj = load_project(manifest_path, progress=progress)
    if proj.crs is not None and proj.crs.is_geographic:
        raise ArchivistError(f"{manifest_path}: map.crs is geographic (longitude/latitude); repair works in a projected CRS only")
    if "units" not in proj.layers and not build_polygons:
        raise ArchivistError(f"{manifest_path}: no units layer could be read; nothing to repair")
    for role in ("units", "lines"):
        handed = [p for p in (proj.layers[role].parts or (proj.layers[role],)) if len(p.files) > 1] if role in proj.layers else []
        if handed:  # each row would have to go back to its own file, and a new one to some file: not done
            h = handed[0]
            raise ArchivistError(f"{manifest_path}: {h.key or 'layers.' + role} is read from {len(h.files)} files "
                                 f"({', '.join(f.name for f in h.files)}); repair writes each layer back into its one "
                                 "file: join them into one layer first")
    refuse_ambiguous_ids(proj, manifest_path)
    from ..analysis.context import CheckContext
    from .polygons import CHECKED, LINES_SEEN

    state = make_state(proj)
    # the check's analyses of the units as read: the first repair reads them too, and its half-edges are lent to
    # the next build (the working units are the same polygons until a repair replaces some)
    checked = CheckContext(proj, edge_basis=state.edge_basis)
    refuse_moved_layers(proj, checked.alignment(), manifest_path, build_polygons)
    before = _counts(check(proj, progress=progress, context=checked, jobs=jobs))
    settings = settings_for(proj, build_polygons)
    if checked.view() is proj:  # no layer moved into place by the check (another CRS, swapped axes): the same units
        state.analyses[CHECKED] = (state.units, checked)
        # the check's lines layer is the working lines' own (their frame a copy of it, with ids, geometries and
        # fields the same): its network is theirs (see _new_context)
        state.analyses[LINES_SEEN] = (state.lines, checked)
        state.aligned = True
    changes: list[Change] = []
    left: list[Left] = []
    for r in chosen:
        with progress.step(f"repair {r.name}"):
            c, lft = r.func(state, settings)
        changes += c
        left += lft
    names = tuple(r.name for r in chosen)
    from .log import dump_log, log_document

    if dry_run:
        after = _counts(check(_in_memory(proj, state), progress=progress, jobs=jobs))
        doc = log_document(str(project), names, settings, changes, left, before, after)
        return RepairResult(str(project), None, names, settings, tuple(changes), tuple(left), before, after, doc)
    assert target is not None
    from ..fsutil import move_into_place, staging_dir

    with staging_dir(target) as tmp:
        manifest, written = write_copy(proj, state, changes, tmp)
        from .log import GPKG_NAME, write_log_parts

        doc = log_document(str(project), names, settings, changes, left, before, None, written)
        # the log's GeoPackage and entries do not wait for the check of the copy: with jobs > 1 a large log is written
        # by a process forked for it meanwhile (at 10^5 polygons and 1 % defects, about a second of 30). The GeoPackage
        # is written in a staging folder of its own beside the copy's until the copy is checked: a pattern of the
        # copy's [files] could otherwise find it half-written
        from ..parallel import Aside

        with staging_dir(target) as beside, \
                Aside(write_log_parts, doc, changes, left, beside / GPKG_NAME, proj.crs,
                      fork=jobs > 1 and len(changes) + len(left) >= ASIDE_ENTRIES) as aside:
            copy = load_project(manifest, progress=progress)
            after = _counts(check(copy, progress=progress, context=_copy_context(copy, state, settings), jobs=jobs))
            doc["findings_after"] = dict(sorted(after.items()))
            lists = aside.result()
            move_into_place(beside / GPKG_NAME, tmp / GPKG_NAME)
        (tmp / _log_name()).write_text(dump_log(doc, lists), encoding="utf-8")
        MARK.write(tmp, project=str(project))
        if before_files is not None:
            MARK.still_same(target, before_files)
        move_into_place(tmp, target)
    return RepairResult(str(project), target, names, settings, tuple(changes), tuple(left), before, after, doc)


def refuse_ambiguous_ids(project: Any, manifest_path: Path) -> None:
    """Raise ArchivistError (exit 2) where the ``id_field`` of the units or of a line layer leaves a feature without
    an id or gives two features one (``feature-id-duplicate``): the change log and ``diff`` name features by it, and
    a merge or a removal would be ambiguous. Layers without an ``id_field`` are named by their feature ids (FID)."""
    from ..analysis.context import CheckContext
    from ..rules.metadata import feature_id_duplicate

    edited = {part.role for role in ("units", "lines") if role in project.layers
              for part in (project.layers[role].parts or (project.layers[role],))}
    hits = [h for h in feature_id_duplicate(project, CheckContext(project)) if h.layer in edited]
    if hits:
        more = f"; {len(hits) - 1} more such" if len(hits) > 1 else ""
        raise ArchivistError(f"{manifest_path}: {hits[0].message.rstrip('.')} (see feature-id-duplicate{more}): the "
                             "change log names features by their id; give each feature its own id, or leave id_field out to name "
                             "them by their feature id")


def refuse_moved_layers(project: Any, alignment: Any, manifest_path: Path, build_polygons: bool = False) -> None:
    """Raise ArchivistError (exit 2) where the check reads a layer the repairs edit or measure against other than as
    it is in its file: transformed from another CRS, some features' x and y exchanged, or not placed at all.

    The check reads such a layer placed with the map (:func:`archivist.analysis.alignment.align_layers`; it reports
    ``crs-mismatch`` or ``crs-axis-swap-suspected``). The repairs would measure the placed layer and edit the one in
    the file, in another frame, and writing it back transformed would move every vertex, repaired or not. A layer
    only labelled with another CRS, its coordinates already the map's, is read as it is and repaired; layers the
    repairs do not read (samples, structures) may be placed.
    """
    from ..project import crs_label
    from .build import LABELS

    swapped = dict(alignment.swapped)
    for role in ("units", "lines", "extent") + ((LABELS,) if build_polygons else ()):
        layer = project.layers.get(role)
        if layer is None:
            continue
        where = f"{manifest_path}: layers.{role} ({layer.source})"
        if role in swapped:
            raise ArchivistError(f"{where} has x and y exchanged in {swapped[role]} feature(s) (see crs-axis-swap-suspected): "
                                 "repair edits a layer as it is in its file; exchange them back first")
        if role in alignment.reprojected or role in alignment.left_out:
            how = " and cannot be placed with the map" if role in alignment.left_out else ""
            raise ArchivistError(f"{where} is in {crs_label(layer.crs)}, not in the map's {crs_label(project.crs)}{how} "
                                 "(see crs-mismatch): repair edits layers in the map's CRS only (a copy written back "
                                 "transformed would move every vertex); transform the layer to the map's CRS first")


ASIDE_ENTRIES = 2_000
"""Entries of a change log (changes and defects left) from which its GeoPackage and entries are written by a process
forked for them while the copy is checked (:class:`archivist.parallel.Aside`). Below, forking costs about what it
saves: a fork and its pool took 20 to 60 ms on a map of five squares, and writing a log of 34 088 entries (10^5
polygons, 1 % defects) 0.95 s, some 60 ms per 2 000. Our own choice, from those two measures."""


def _copy_context(copy: Any, state: RepairState, settings: RepairSettings) -> Any:
    """A check context of the written copy holding the half-edges and coverage analysis of the working units.

    The line repairs analysed the units as they are written (the key of
    :func:`archivist.repair.lines.unit_analyses`); they are handed in only
    where the copy's units, read back from the file, are the same polygons
    with the same coordinates in the same order (GEOS ``equals_exact`` with
    no tolerance, a one-part multipolygon read as its polygon), and the
    extent note is made for the copy's own extent layer. Otherwise the check
    computes them.
    """
    import numpy as np
    import shapely

    from ..analysis.context import CheckContext
    from ..analysis.coverage import extent_note
    from .polygons import _single

    ctx = CheckContext(copy)
    # the copy's units read back as the working copy has them, row for row: their validity and far coordinates
    # are the working layer's (asked of the others only); the lines' are cheaper to ask than to compare
    same_units = False
    work, layer = state.built.get("units"), copy.layers.get("units")
    if work is not None and layer is not None and len(work.frame) == len(layer.frame):
        equal = np.asarray(shapely.equals_exact(_single(layer.geometry), _single(work.geometry), tolerance=0.0), dtype=bool)
        layer.known_from(work, equal)
        same_units = bool(equal.all()) and work.frame is state.units
    hit = state.analyses.get(f"units-edges-coverage:{float(settings.tolerance)!r}")
    if hit is None or hit[0] is not state.units or "units" not in copy.layers or ctx.view() is not copy:
        return ctx
    units, edges, cov = hit[1]
    mine = ctx.units()
    if len(mine) != len(units) or not np.array_equal(mine.rows, units.rows):
        return ctx
    # the layers read back equal row for row (above) give the same polygons; else each is compared
    if not same_units and not bool(np.all(shapely.equals_exact(_single(mine.geoms), _single(units.geoms), tolerance=0.0))):
        return ctx
    ctx.provide("analysis.edges", edges)
    note = extent_note(copy, cov.extent_declared)
    ctx.provide("analysis.coverage", replace(cov, extent_note=note), [note])
    return ctx


def _log_name() -> str:
    from .log import LOG_NAME

    return LOG_NAME


def _frames(state: RepairState) -> dict[str, Any]:
    return {"units": state.units, "lines": state.lines}


def _in_memory(project: Any, state: RepairState) -> Any:
    """The project with its units and lines replaced by the working copies (for a dry run's check)."""
    from dataclasses import replace

    import numpy as np

    layers = dict(project.layers)
    if state.units is not None and "units" in layers:
        frame = state.units.drop(columns=[FEATURE_ID])
        layers["units"] = replace(layers["units"], frame=frame, ids=np.asarray(state.units[FEATURE_ID], dtype=object))
    if state.lines is not None and "lines" in layers:
        frame = state.lines.drop(columns=[FEATURE_ID, SOURCE_LAYER])
        layers["lines"] = replace(layers["lines"], frame=frame, ids=np.asarray(state.lines[FEATURE_ID], dtype=object))
    return replace(project, layers=layers, problems=list(project.problems))


# ---------------------------------------------------------------- writing the copy

WRITABLE = {".gpkg": "GPKG", ".shp": "ESRI Shapefile", ".geojson": "GeoJSON", ".json": "GeoJSON", ".fgb": "FlatGeobuf"}


def _place(root: Path, rel: str, tmp: Path, taken: dict[Path, str]) -> str:
    """Copy the dataset ``rel`` (all its files) into the copy; its path in the copy's manifest."""
    from ..fileset import dataset_files

    src = (root / rel).resolve() if not Path(rel).is_absolute() else Path(rel)
    try:
        inside = src.relative_to(root.resolve())
        new_rel = inside.as_posix()
    except ValueError:  # a file outside the project folder: copied in under external/
        new_rel = f"external/{src.name}"
    if src in taken:
        return taken[src]
    taken[src] = new_rel
    dest = tmp / new_rel
    dest.parent.mkdir(parents=True, exist_ok=True)
    if src.is_dir():
        shutil.copytree(src, dest)
    else:
        from ..vectorio import settled_copy

        for part in dataset_files(src) if src.exists() else []:  # a shapefile's .shx, .dbf, .prj... too
            # a GeoPackage with the edits its -wal holds (a GIS has it open), as the project was read
            settled_copy(part, dest.parent / part.name)
    return new_rel


def _write_layer(frame: Any, dest: Path, spec: dict[str, Any], key: str, raw_spec: dict[str, Any], crs: Any) -> Path:
    """Write ``frame`` over the copied layer at ``dest`` in its own format, else as a GeoPackage beside it; the file written."""
    import pyogrio

    driver = WRITABLE.get(dest.suffix.lower())
    if frame.crs is None and crs is not None:
        frame = frame.set_crs(crs, allow_override=True)
    if driver == "GPKG":
        name = spec.get("layer") or dest.stem
    elif driver is None:
        name = spec.get("layer")  # GDAL's first layer when the manifest names none
    else:
        name = None  # one layer per file
    multi = _multi(dest, name)
    if driver is None:
        new = dest.with_suffix(".gpkg")
        pyogrio.write_dataframe(frame, new, layer=str(spec.get("layer") or dest.stem), driver="GPKG", promote_to_multi=multi)
        raw_spec["path"] = str(Path(raw_spec["path"]).with_suffix(".gpkg").as_posix())
        raw_spec["layer"] = str(spec.get("layer") or dest.stem)
        return new
    kw: dict[str, Any] = {}
    if driver == "GPKG":
        kw["layer"] = spec.get("layer") or dest.stem
    elif dest.exists():
        from ..fileset import dataset_files

        for part in dataset_files(dest):
            part.unlink()
    pyogrio.write_dataframe(frame, dest, driver=driver, promote_to_multi=multi, **kw)
    return dest


def _multi(dest: Path, layer: Any) -> bool | None:
    """``promote_to_multi`` for writing over the copied layer ``layer`` of ``dest``: True where it holds multi-part
    geometry types (MultiPolygon, MultiLineString), else None, so that a layer of LineStrings stays one (pyogrio
    then makes the layer multi-part only where single and multi-part geometries mix, in a format that cannot
    hold both). One that cannot be read back is written multi-part."""
    import pyogrio

    try:
        gtype = pyogrio.read_info(dest, layer=layer).get("geometry_type")
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError):
        return True
    return True if gtype is None or str(gtype).startswith("Multi") else None


def _file_frame(frame: Any, layer: Any) -> Any:
    """The working frame as it goes to the file: the feature ids back in the file's FID where they came from it."""
    import numpy as np

    from .model import id_numbers

    out = frame.drop(columns=[c for c in (FEATURE_ID, SOURCE_LAYER) if c in frame.columns])
    if not layer.field("id_field") and layer.path.suffix.lower() == ".gpkg":
        fids = id_numbers(frame[FEATURE_ID].tolist())
        if np.isfinite(fids).all():
            out = out.copy()
            out.insert(0, "fid", fids.astype(np.int64))
    return out


def _write_built_units(state: RepairState, tmp: Path, manifest: dict[str, Any], crs: Any) -> Path:
    """Write the unit polygons built from the linework as a new GeoPackage layer and name it in ``[layers.units]``."""
    import pyogrio

    from .build import BUILT_UNITS

    assert state.units is not None
    frame = state.units.drop(columns=[FEATURE_ID])
    frame.insert(0, "fid", state.units[FEATURE_ID].astype("int64").to_numpy())
    if frame.crs is None and crs is not None:
        frame = frame.set_crs(crs)
    pyogrio.write_dataframe(frame, tmp / BUILT_UNITS, layer="units", driver="GPKG", promote_to_multi=True)
    manifest.setdefault("layers", {})["units"] = {"path": BUILT_UNITS, "layer": "units", "unit_field": state.unit_field or "unit"}
    return tmp / BUILT_UNITS


def _edit_in_place(frame: Any, layer: Any, dest: Path, spec: dict[str, Any], role: str) -> dict[str, Any] | str:
    """Write the working ``frame`` of ``layer`` into its copied GeoPackage table at ``dest`` in place
    (:mod:`.inplace`): the record of what was done, or why it could not be (the caller then writes it anew)."""
    import numpy as np
    import pandas as pd

    from .inplace import NotInPlace, edit_table
    from .model import id_numbers

    table = str(spec.get("layer") or dest.stem)
    if layer.parts or layer.path.suffix.lower() != ".gpkg" or dest.suffix.lower() != ".gpkg" or not dest.exists():
        return "only a layer of one GeoPackage is edited in place; other formats are written whole"
    ids = np.array([str(v) for v in frame[FEATURE_ID].to_numpy(dtype=object)], dtype=object)
    known = pd.Index(np.array([str(v) for v in np.asarray(layer.ids, dtype=object)], dtype=object))
    if not known.is_unique:
        return "its feature ids repeat, so rows cannot be told apart"
    pos = known.get_indexer(ids)
    try:
        old = np.asarray(layer.frame.index, dtype=np.int64)
    except (TypeError, ValueError):
        return "its rows were not read with their GeoPackage feature ids"
    fids = np.zeros(len(ids), dtype=np.int64)
    fids[pos >= 0] = old[pos[pos >= 0]]
    new = np.flatnonzero(pos < 0)
    if len(new) and not layer.field("id_field"):  # the feature id is the FID: a new feature's is its own
        nums = id_numbers([ids[k] for k in new])
        if not np.issubdtype(np.asarray(nums).dtype, np.integer):
            return "a new feature's id is not a whole number"
        fids[new] = nums
    elif len(new):
        fids[new] = max(int(old.max()) if len(old) else 0, int(fids.max()) if len(fids) else 0) + 1 + np.arange(len(new))
    work = frame.drop(columns=[c for c in (FEATURE_ID, SOURCE_LAYER) if c in frame.columns])
    try:
        done = edit_table(dest, table, work, fids, layer.frame, dest.with_name(f".{dest.stem}.{role}.rows.gpkg"))
    except NotInPlace as why:
        return str(why)
    return {"how": "edited", "deleted": done.deleted, "updated": done.updated, "inserted": done.inserted,
            "fields_added": list(done.added_fields)}


def _named(dest: Path, spec: dict[str, Any]) -> dict[str, Any]:
    """``spec`` naming the GeoPackage layer it reads: where the manifest names none, the file's only layer (as the
    project was loaded), so that the copy writes that layer, not a new one named after the file."""
    if spec.get("layer") or dest.suffix.lower() != ".gpkg" or not dest.exists():
        return spec
    import pyogrio

    try:
        names = [str(n) for n, _ in pyogrio.list_layers(dest)]
    except pyogrio.errors.DataSourceError:
        return spec
    return {**spec, "layer": names[0]} if len(names) == 1 else spec


def _write_one(frame: Any, layer: Any, dest: Path, spec: dict[str, Any], role: str, crs: Any, tmp: Path,
               record: list[dict[str, Any]]) -> Path:
    """Write one changed layer of the copy: edited in its GeoPackage table where it can be, else anew. ``spec`` is
    the copy's manifest entry (a layer converted to GeoPackage gets its new path and layer there)."""
    entry, spec = spec, _named(dest, spec)
    rel = dest.relative_to(tmp).as_posix()
    done = _edit_in_place(frame, layer, dest, spec, role)
    if isinstance(done, dict):
        record.append({"layer": role, "path": rel, "table": str(spec.get("layer") or dest.stem), **done, "reason": None})
        return dest
    path = _write_layer(_file_frame(frame, layer), dest, spec, role, entry, crs)
    how = "converted" if path != dest else "rewritten"
    table = str(spec.get("layer") or path.stem) if path.suffix.lower() == ".gpkg" else None
    record.append({"layer": role, "path": path.relative_to(tmp).as_posix(), "table": table, "how": how,
                   "deleted": None, "updated": None, "inserted": None, "fields_added": [], "reason": done})
    return path


def _write_layers(project: Any, state: RepairState, changed: set[str], layers_out: dict[str, Any], out: dict[str, Any],
                  tmp: Path, record: list[dict[str, Any]]) -> list[Path]:
    """Write the changed layers of the copy (units, the line layers) into ``tmp``; the files written. How each was
    written goes to ``record``."""
    written: list[Path] = []
    if "units" in changed and state.units is not None and "units" in layers_out:
        layer = project.layers["units"]
        spec = layers_out["units"]
        written.append(_write_one(state.units, layer, tmp / spec["path"], spec, "units", project.crs, tmp, record))
    if "units" in changed and state.units is not None and "units" not in layers_out:  # built from the linework
        written.append(_write_built_units(state, tmp, out, project.crs))
    if state.lines is not None and "lines" in project.layers and changed - {"units"}:
        combined = project.layers["lines"]
        parts = combined.parts or (combined,)
        from ..manifest import line_sources

        sources = {s.name: s for s in line_sources(out.get("layers") or {})}
        for part in parts:
            rows = state.lines[state.lines[SOURCE_LAYER] == part.role] if combined.parts else state.lines
            keep = [c for c in rows.columns if c in part.frame.columns or c in (FEATURE_ID, "generated")]
            frame = rows[keep].copy()
            if combined.parts:
                frame[FEATURE_ID] = frame[FEATURE_ID].astype(str).str.split(":", n=1).str[-1]
            src = sources.get(part.role)
            spec = src.spec if src is not None else layers_out.get("lines", {})
            written.append(_write_one(frame, part, tmp / spec["path"], spec, part.role, project.crs, tmp, record))
    return written


def write_copy(project: Any, state: RepairState, changes: list[Change], tmp: Path) -> tuple[Path, list[dict[str, Any]]]:
    """Write the repaired copy into the folder ``tmp``; return the path of its manifest and how each changed
    layer was written (the log's ``layers_written``)."""
    import copy

    from ..manifest import MANIFEST_NAME, read_manifest
    from ..tomltext import dump_toml
    from ..vectorio import staged_writes, sync_file

    assert project.manifest_path is not None
    raw = read_manifest(project.manifest_path)
    root = project.root
    taken: dict[Path, str] = {}
    out = copy.deepcopy(raw)
    for group in ("layers", "tables"):
        for key, spec in (out.get(group) or {}).items():
            for entry in spec if isinstance(spec, list) else [spec]:
                if isinstance(entry, dict) and isinstance(entry.get("path"), str):
                    entry["path"] = _place(root, entry["path"], tmp, taken)
                elif isinstance(entry, dict) and isinstance(entry.get("path"), list):  # a hand-in of several files
                    entry["path"] = [_place(root, p, tmp, taken) if isinstance(p, str) else p for p in entry["path"]]
    for spec in (out.get("files") or {}).values():  # photos and scans: folders, files or glob patterns
        if not isinstance(spec, dict):
            continue
        pats = spec.get("paths")
        for pat in [pats] if isinstance(pats, str) else (pats if isinstance(pats, list) else []):
            if not isinstance(pat, str):
                continue
            if any(ch in pat for ch in "*?["):  # the pattern stays as written; the files it matches keep their places
                for f in sorted(root.glob(pat)):
                    if f.is_file() and f.resolve().is_relative_to(root.resolve()):
                        _place(root, f.relative_to(root).as_posix(), tmp, taken)
            else:
                _place(root, pat, tmp, taken)
        if isinstance(spec.get("link_table"), str):
            spec["link_table"] = _place(root, spec["link_table"], tmp, taken)
    changed = {c.layer for c in changes}
    layers_out = out.get("layers") or {}
    written: list[Path] = []
    record: list[dict[str, Any]] = []
    with staged_writes():  # in the staging folder: each file synced below, before the folder is moved into place
        written += _write_layers(project, state, changed, layers_out, out, tmp, record)
    for path in dict.fromkeys(written):
        sync_file(path)
    rec = dict(out.get("repair") or {})
    from .log import LOG_NAME

    rec[RECORD_KEY] = LOG_NAME
    out["repair"] = rec
    text = dump_toml(out, header=f"Repaired copy of {project.root.name} written by archivist repair {__version__}; "
                                 f"every change is in {LOG_NAME}.\n")
    target = tmp / MANIFEST_NAME
    target.write_text(text, encoding="utf-8")
    return target, record
