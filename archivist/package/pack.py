"""``archivist.pack``: a checked map project as a self-describing, verifiable, reproducible package.

The package is a BagIt bag (RFC 8493) whose payload ``data/`` is a
Frictionless Data Package::

    <name>-<version>/
      bagit.txt  bag-info.txt  manifest-sha256.txt  tagmanifest-sha256.txt
      data/
        datapackage.json  README.md  LICENSE.txt  CITATION.cff  archivist.toml
        map.gpkg                      all layers, map CRS (the editable master)
        geojson/<layer>.geojson       RFC 7946, WGS 84
        tables/<layer or table>.csv   attributes and tables, UTF-8
        metadata/datacite.json  metadata/provenance.json
        metadata/validation-report.json  metadata/crs.wkt
        source/...                    the input files, byte for byte

Nothing is written in the project. The package is built in a hidden sibling
of its final place and renamed there at the end; an interrupted run leaves
no package.
"""

from __future__ import annotations

import dataclasses
import math
import os
import re
import datetime as dt
import shutil
from concurrent.futures import ThreadPoolExecutor
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import pyproj

from .. import engine
from ..errors import ArchivistError
from ..vectorio import settled_copy
from ..fileset import dataset_files
from ..fsutil import guard_output, move_into_place, remove_leftovers, staging_dir, staging_file
from ..interrupt import Interrupted, terminate_as_exception
from ..manifest import MANIFEST_NAME, read_manifest, spec_paths
from ..model import Report
from ..project import MapProject, load_project, location_digits
from ..progress import Progress
from ..report.html import render_html
from . import datacite as dc
from . import datapackage as dp
from .bagwrite import Hashes, write_bag
from .deposit import Deposit, SourceNames, read_deposit, source_names
from .determinism import fix_modes, json_text, pack_time, write_json, write_text, zip_tree
from .media import pack_media
from .layers import PreparedLayer, layer_title, all_tables, prepare_layers, write_geojson, write_geopackage
from .packmanifest import dump_toml, packaged_manifest
from .provenance import FileFact, provenance, repair_record
from .readme import LayerFact, citation_cff, legend_rows, licence_text, open_error_lines, readme_text
from .literature import related as related_works
from .tables import write_csv

REPORT_PATH = "metadata/validation-report.json"
HTML_REPORT_PATH = "metadata/validation-report.html"


@dataclass(frozen=True)
class PackResult:
    """What ``pack`` wrote.

    Attributes
    ----------
    path
        The package folder ``DIR/<name>-<version>``.
    zip_path
        The zip of the package, or None without ``zip=True``.
    report
        The check report the package was made with.
    files
        Every file of the bag, relative to ``path``, sorted.
    open_errors
        Errors of the report packed with ``allow_errors`` (0 otherwise).
    """

    path: Path
    zip_path: Path | None
    name: str
    version: str
    report: Report
    files: tuple[str, ...]
    open_errors: int
    bytes: int


class PackRefused(ArchivistError):
    """The checks found errors and ``allow_errors`` was not given (exit code 1)."""

    exit_code = 1

    def __init__(self, report: Report, message: str) -> None:
        super().__init__(message)
        self.report = report


def _utcnow() -> dt.datetime:
    return dt.datetime.now(dt.timezone.utc).replace(microsecond=0)


def _guard(project: MapProject, out_dir: Path, targets: list[Path], force: bool) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise ArchivistError(f"{out_dir}: is a file; --out needs a folder")
    for target in targets:
        guard_output(target, force=force, project_root=project.root, kind="zip file" if target.suffix == ".zip" else "folder",
                     parent_may_be_missing=True, refuse_ancestor=True, hint="choose another --out")


def input_files(project: MapProject) -> list[tuple[Path, str, str]]:
    """(file, path relative to the project, roles) of every input: the manifest and the files it names.

    A shapefile comes with its side files; a folder format (File Geodatabase)
    with every file inside it; any file with its metadata sidecar
    (:func:`archivist.fileset.dataset_files`). Names are distinct and
    relative (see :func:`~archivist.package.deposit.source_names`).
    """
    roles: dict[Path, list[str]] = {}
    if project.manifest_path is not None:
        roles.setdefault(project.manifest_path.resolve(), []).append("manifest")
    for role, layer in project.sources.items():
        for path in layer.paths:  # several for a list of files handed in together
            roles.setdefault(path.resolve(), []).append(role)
    for role, table in project.tables.items():
        for path in table.paths:
            roles.setdefault(path.resolve(), []).append(role)
    for path, role in _link_tables(project):
        roles.setdefault(path, []).append(role)
    names = source_names(project, roles)
    out: dict[Path, tuple[str, str]] = {}
    for path, rs in roles.items():
        label = ", ".join(rs)
        for p in dataset_files(path) or [path]:
            out[p] = (names.name(p), label)
    return sorted(((p, rel, label) for p, (rel, label) in out.items()), key=lambda t: t[1])


def _link_tables(project: MapProject) -> list[tuple[Path, str]]:
    """(file, role) of the link tables of ``[files]`` that exist: inputs like the layers and tables."""
    out = []
    for kind, media in project.media.items():
        rel = getattr(media, "link_source", None)
        if isinstance(rel, str):
            path = Path(rel) if Path(rel).is_absolute() else (project.root / rel).resolve()
            if path.is_file():
                out.append((path, f"{kind} link table"))
    return out


def stored_name(rel: str) -> str:
    """The path an input file gets under ``source/``: the project's own, with ``%``, CR and LF replaced by ``_``.

    RFC 8493 would have those percent-encoded in the manifests, but common
    BagIt tools and ``sha256sum -c`` do not decode ``%25``; the original name
    stays in the resource title and the provenance.
    """
    return re.sub(r"[%\r\n]", "_", rel)


def _manifest_paths(project: MapProject) -> list[tuple[str, Path]]:
    """(path as the manifest wrote it, the file or folder it names) for every layer and table of the manifest."""
    out = []
    for group in ("layers", "tables"):
        for value in (project.manifest.get(group) or {}).values():
            for spec in value if isinstance(value, list) else [value]:  # [[layers.lines]] is a list of layers
                for written in spec_paths(spec):  # a path, or a list of files handed in together
                    path = Path(written) if Path(written).is_absolute() else (project.root / written).resolve()
                    out.append((written, path))
    return out


def input_names(project: MapProject) -> SourceNames:
    """The names :func:`input_files` gives the inputs, for labelling them elsewhere in the package."""
    paths = [p for _, p in _manifest_paths(project)]
    paths += [p for layer in project.sources.values() for p in layer.paths] + [p for table in project.tables.values() for p in table.paths]
    paths += [p for p, _ in _link_tables(project)]
    if project.manifest_path is not None:
        paths.append(project.manifest_path)
    return source_names(project, paths)


def shareable_text(project: MapProject, names: SourceNames):
    """A function that replaces every absolute path of the packing machine in a text by its name in the package.

    Absolute paths written in the manifest become the input's name under
    ``source/``; the project folder becomes its own name.
    """
    pairs: dict[str, str] = {}
    for written, path in _manifest_paths(project):
        if Path(written).is_absolute():
            pairs[written] = names.name(path)
    for root in (str(project.root.resolve()), str(project.root.absolute()), str(project.root)):
        if Path(root).is_absolute():
            pairs.setdefault(root, project.root.name)
    keys = sorted(pairs, key=len, reverse=True)

    def scrub(text: str) -> str:
        for key in keys:
            text = text.replace(key, pairs[key])
        return text

    return scrub


def source_manifest(project: MapProject, names: SourceNames) -> tuple[str, str] | None:
    """(text, why) of the manifest copy for ``source/`` when the manifest names files by absolute paths or
    outside the project folder: the same manifest with those paths pointing at their copies in ``source/``.
    None when the manifest can be stored byte for byte."""
    if project.manifest_path is None:
        return None
    raw = read_manifest(project.manifest_path)
    changed = []
    for group in ("layers", "tables"):
        for key, value in (raw.get(group) or {}).items():
            entries = [(f"{key}[{i}]", v) for i, v in enumerate(value)] if isinstance(value, list) else [(key, value)]
            for role, spec in entries:
                written_all = spec_paths(spec)
                listed = isinstance(spec.get("path"), list) if isinstance(spec, dict) else False
                for k, written in enumerate(written_all):  # a list of files handed in together: each one
                    path = Path(written) if Path(written).is_absolute() else (project.root / written).resolve()
                    inside = path == project.root.resolve() or project.root.resolve() in path.parents
                    if Path(written).is_absolute() or not inside:
                        if listed:
                            spec["path"][k] = names.name(path)
                            changed.append(f"{group}.{role}.path[{k}]")
                        else:
                            spec["path"] = names.name(path)
                            changed.append(f"{group}.{role}.path")
    if not changed:
        return None
    why = f"{', '.join(changed)} rewritten to the copies in source/ (the project named them outside its folder)"
    header = f"Written by archivist pack: the project's {MANIFEST_NAME} with {why}."
    return dump_toml(raw, header=header), why


def _transform_bbox(bbox: tuple[float, float, float, float], crs: pyproj.CRS) -> tuple[float, float, float, float]:
    """The bbox in WGS 84 longitude/latitude, its edges densified (21 points per edge) so curved edges are covered."""
    t = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    w, s, e, n = t.transform_bounds(*bbox, densify_pts=21)
    down = lambda v: math.floor(v * 1e7) / 1e7  # noqa: E731  (rounded outwards: the box still covers the map)
    up = lambda v: math.ceil(v * 1e7) / 1e7  # noqa: E731
    return (down(w), down(s), up(e), up(n))


def _map_bbox(layers: list[PreparedLayer]) -> tuple[float, float, float, float] | None:
    by_role = {pl.role: pl for pl in layers}
    if "extent" in by_role and by_role["extent"].bounds is not None:
        return by_role["extent"].bounds
    boxes = [pl.bounds for pl in layers if pl.bounds is not None]
    if not boxes:
        return None
    return (min(b[0] for b in boxes), min(b[1] for b in boxes), max(b[2] for b in boxes), max(b[3] for b in boxes))


def _shareable(report: Report, project: MapProject, scrub=None) -> Report:
    """The report as packed: the project named by its manifest, no absolute paths of the packing machine."""
    scrub = scrub or shareable_text(project, input_names(project))
    name = project.manifest_path.name if project.manifest_path else project.root.name
    notes = tuple(scrub(n) for n in report.notes)
    findings = tuple(dataclasses.replace(f, message=scrub(f.message)) for f in report.findings)
    return dataclasses.replace(report, project=name, notes=notes, findings=findings)


class PackBusy(ArchivistError):
    """Another pack is writing into the same output folder."""


@contextmanager
def output_lock(out_dir: Path) -> Iterator[None]:
    """Hold an exclusive lock on the folder ``out_dir`` while a package is written into it.

    The lock is ``flock`` on the folder itself (no lock file is left behind);
    the kernel releases it when the process ends, however it ends. A second
    pack into the same folder is refused at once, ``--force`` or not.
    Where ``fcntl`` is not available (Windows) no lock is taken.
    """
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX
        yield
        return
    fd = os.open(out_dir, os.O_RDONLY)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise PackBusy(f"{out_dir}: another archivist pack is writing into this folder; wait for it to finish") from None
        try:
            yield
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def pack(
    project_or_path: MapProject | str | Path,
    out_dir: str | Path,
    *,
    zip: bool = False,
    allow_errors: bool = False,
    force: bool = False,
    report: Report | None = None,
    progress: Progress | None = None,
) -> PackResult:
    """Check a map project and write it as an open data package in ``out_dir``.

    Parameters
    ----------
    project_or_path
        A loaded :class:`~archivist.project.MapProject`, or a project folder or manifest.
    out_dir
        Folder to write ``<name>-<version>/`` into (created when missing).
    zip
        Also write ``<name>-<version>.zip`` next to the folder.
    allow_errors
        Pack even when the checks report errors; the package then names them
        in its README, its metadata and ``bag-info.txt``.
    force
        Replace an existing package of the same name and version (the new one
        is built in full before the old one is removed).
    report
        The report of ``archivist.check`` on this same, loaded project, when
        the caller has just run it; the checks are then not run again.
    progress
        A :class:`archivist.progress.Progress` told about each step (reading,
        checking, writing the package, zipping); silent when None.

    Raises
    ------
    PackRefused
        The checks found errors and ``allow_errors`` is false (``.report`` holds the report).
    ArchivistError
        The project cannot be read, deposit metadata is missing (the message
        names the manifest key), or the output exists without ``force``.

    Examples
    --------
    >>> result = pack("example_bundle", "build", force=True)  # doctest: +SKIP
    >>> result.path.name  # doctest: +SKIP
    'geological-map-of-the-tarrowmere-district-1.0.0'
    """
    fixed = pack_time()
    reproducible = _source_date_set()
    pack_start = fixed if reproducible else _utcnow()
    progress = progress or Progress()
    project = project_or_path if isinstance(project_or_path, MapProject) else load_project(project_or_path, progress=progress)
    deposit = read_deposit(project, fixed)
    out_dir = Path(out_dir)
    target = out_dir / deposit.stem
    zip_target = out_dir / f"{deposit.stem}.zip" if zip else None
    _guard(project, out_dir, [target] + ([zip_target] if zip_target else []), force)

    check_start = fixed if reproducible else _utcnow()
    if report is None:
        report = engine.check(project, progress=progress)
    check_end = fixed if reproducible else _utcnow()
    errors = report.summary.errors
    if errors and not allow_errors:
        raise PackRefused(
            report,
            f"{project.manifest_path or project.root}: the checks found {errors} error{'s' if errors != 1 else ''}; "
            "no package was written (fix them, or pack anyway with --allow-errors)",
        )

    if "units" not in project.layers:
        raise ArchivistError(
            f"{project.manifest_path or project.root}: layers.units could not be read, so there is no map to pack "
            "(see the metadata findings of 'archivist check')"
        )
    out_dir.mkdir(parents=True, exist_ok=True)
    placed: list[Path] = []
    try:
        with terminate_as_exception(), ExitStack() as stack:
            stack.enter_context(output_lock(out_dir))
            _guard(project, out_dir, [target] + ([zip_target] if zip_target else []), force)  # again, now that no other pack writes here
            remove_leftovers(out_dir, {target.name} | ({zip_target.name} if zip_target else set()))
            bag = stack.enter_context(staging_dir(target))
            zip_tmp = stack.enter_context(staging_file(zip_target)) if zip_target else None
            hashes = Hashes()
            with progress.step("writing the package"):
                _write_payload(project, deposit, report, bag / "data", hashes, (check_start, check_end), pack_start, reproducible,
                               progress)
                write_bag(bag, deposit, hashes, open_errors=errors)
            fix_modes(bag)
            files = tuple(sorted(p.relative_to(bag).as_posix() for p in bag.rglob("*") if p.is_file()))
            size = sum((bag / f).stat().st_size for f in files)
            if zip_tmp is not None:
                with progress.step("zipping the package"):
                    zip_tree(bag, zip_tmp, deposit.stem, fixed)
                zip_tmp.chmod(0o644)
            try:
                move_into_place(bag, target)
            finally:  # even when interrupted inside the move: the staging folder gone means the package is in place
                if not bag.exists() and target.is_dir():
                    placed.append(target)
            if zip_tmp is not None and zip_target is not None:
                try:
                    move_into_place(zip_tmp, zip_target)
                finally:
                    if not zip_tmp.exists() and zip_target.is_file():
                        placed.append(zip_target)
    except (KeyboardInterrupt, Interrupted) as exc:
        setattr(exc, "placed", tuple(placed))  # what is whole in place: the CLI tells the truth about it
        raise
    return PackResult(
        path=target,
        zip_path=zip_target,
        name=deposit.name,
        version=deposit.version,
        report=report,
        files=files,
        open_errors=errors,
        bytes=size,
    )


def _source_date_set() -> bool:
    return bool(os.environ.get("SOURCE_DATE_EPOCH", "").strip())


def _write_payload(
    project: MapProject,
    deposit: Deposit,
    report: Report,
    data: Path,
    hashes: Hashes,
    check_times: tuple[dt.datetime, dt.datetime],
    pack_start: dt.datetime,
    reproducible: bool,
    progress: Progress | None = None,
) -> None:
    data.mkdir()
    resources: list[dp.ResourceInfo] = []

    # The map: one GeoPackage in the map CRS (written by GDAL in a second thread while the
    # rest is built here), GeoJSON per layer in WGS 84, tables as CSV, the inputs as handed in.
    names = input_names(project)
    scrub = shareable_text(project, names)
    layers = prepare_layers(project)
    for pl in layers:
        pl.source = scrub(pl.source)
        pl.note = scrub(pl.note) if pl.note else pl.note
    notes = [pl.note for pl in layers if pl.note]
    with ThreadPoolExecutor(max_workers=1) as pool:
        gpkg_job = pool.submit(write_geopackage, layers, data / "map.gpkg", deposit.created)
        resources.append(dp.ResourceInfo(
            "map.gpkg", "map-gpkg", "The map (GeoPackage)",
            f"All layers ({', '.join(pl.role for pl in layers)}) in {deposit.crs_label}; feature ids as in the project.",
            extra={"layers": {pl.role: pl.count for pl in layers}},
        ))
        (data / "geojson").mkdir()
        for pl in layers:
            rel = f"geojson/{pl.role}.geojson"
            write_geojson(pl, data / rel)
            resources.append(dp.ResourceInfo(
                rel, f"{pl.role}-geojson", f"{layer_title(pl.role)} (GeoJSON)",
                f"{pl.count} features, RFC 7946 GeoJSON in WGS 84 longitude/latitude; from {pl.source}.",
            ))

        # Tables: attributes of every layer, legend and analyses, with the keys that link them.
        (data / "tables").mkdir()
        tables = all_tables(project, layers)
        table_paths = {}
        for table in tables:
            rel = f"tables/{table.name}.csv"
            table.description = scrub(table.description)
            write_csv(table, data / rel)
            table_paths[table.name] = rel
            resources.append(dp.ResourceInfo(rel, table.name, table.title, table.description, schema=table.schema()))

        inputs = input_files(project)
        own_manifest = source_manifest(project, names)
        rewritten: dict[str, str] = {}
        settled: dict[str, tuple[str, ...]] = {}  # inputs whose SQLite log files were settled into the copy
        for src, rel, _ in inputs:
            dest = data / "source" / stored_name(rel)
            dest.parent.mkdir(parents=True, exist_ok=True)
            if own_manifest is not None and project.manifest_path is not None and src == project.manifest_path.resolve():
                write_text(dest, own_manifest[0])
                rewritten[rel] = own_manifest[1]
                continue
            logs = settled_copy(src, dest, times=False)  # a GeoPackage with the edits its -wal holds, as read
            if logs:
                settled[rel] = logs

        # Photos and field-book scans: streamed into folders of their own, hashed on the way, with their link tables.
        packed_media = [pack_media(m, data, hashes, progress or Progress()) for m in project.media.values() if m.files]
        gpkg_job.result()
    taken = {r.name for r in resources}
    for pm in packed_media:
        for info in pm.files:
            info.name = _unique_name(f"{pm.kind}-{info.path.split('/', 1)[1]}", taken)
        resources += pm.files
        if pm.table is not None:
            pm.table.description = scrub(pm.table.description)
            resources.append(pm.table)
    packaged = packaged_manifest(project, [pl.role for pl in layers], {r: p for r, p in table_paths.items() if r in project.tables})
    if packed_media:
        packaged = {**{k: v for k, v in packaged.items() if k != "checks"}, "files": {pm.kind: pm.manifest for pm in packed_media},
                    **({"checks": packaged["checks"]} if "checks" in packaged else {})}

    write_text(
        data / MANIFEST_NAME,
        dump_toml(
            packaged,
            header=f"Written by archivist pack: the manifest of {deposit.stem}, pointing at the files of this package.\n"
            "'archivist check' runs on this folder as it is.",
        ),
    )
    resources.append(dp.ResourceInfo(MANIFEST_NAME, "manifest", "archivist manifest", "The project manifest, pointing at the files of this package."))

    # Metadata: CRS, check report.
    (data / "metadata").mkdir()
    write_text(data / "metadata" / "crs.wkt", deposit.crs.to_wkt(pyproj.enums.WktVersion.WKT2_2019, pretty=True) + "\n")
    resources.append(dp.ResourceInfo("metadata/crs.wkt", "crs-wkt", "Map CRS (WKT2)", f"{deposit.crs_label} as WKT2 (ISO 19162:2019)."))
    shared = _shareable(report, project, scrub)
    write_text(data / REPORT_PATH, _report_json(shared))
    resources.append(dp.ResourceInfo(REPORT_PATH, "validation-report", "Check report", "The archivist check report the package was made with (schema: report.schema.json)."))
    write_text(data / HTML_REPORT_PATH, render_html(shared, project))
    resources.append(dp.ResourceInfo(
        HTML_REPORT_PATH, "validation-report-html", "Check report (HTML)",
        "The same report as a self-contained page: a map of the findings, the findings table, the legend. Opens in any browser, offline.",
    ))

    # Sizes and hashes of everything so far (each file read once).
    written = sorted(p for p in data.rglob("*") if p.is_file())
    hashes.add(written)

    bbox = _map_bbox(layers)
    bbox_wgs84 = _transform_bbox(bbox, deposit.crs) if bbox else None
    source_facts = []
    for _, rel, label in inputs:
        digest, size = hashes.get(data / "source" / stored_name(rel))
        source_facts.append(FileFact(rel, digest, size, label))
        resources.append(dp.ResourceInfo(
            f"source/{stored_name(rel)}", _resource_name(f"source-{rel}", resources), f"{rel} (as handed in)",
            f"Input file ({label}), {rewritten[rel]}." if rel in rewritten else
            f"Input file ({label}), with the edits its SQLite log ({', '.join(rel + x for x in settled[rel])}) held settled into "
            "it (a checkpoint), as the check read it; not byte for byte." if rel in settled else
            f"Input file ({label}), byte for byte as it was in the project.",
        ))
    output_facts = []
    for info in resources:
        if info.path.startswith(("map.gpkg", "geojson/", "tables/")):
            digest, size = hashes.get(data / info.path)
            output_facts.append(FileFact(info.path, digest, size, info.name))

    pack_end = deposit.created if reproducible else max(_utcnow(), pack_start)
    earlier = dc.earlier_authors(project.root) if deposit.derived_from else None
    write_json(
        data / "metadata" / "provenance.json",
        provenance(deposit, source_facts, output_facts, REPORT_PATH, check_times, (pack_start, pack_end), report.summary.errors,
                   revision=dc.relation_to_earlier(deposit, earlier) == "IsNewVersionOf",
                   repair=repair_record(project.root, project.manifest)),
    )
    resources.append(dp.ResourceInfo("metadata/provenance.json", "provenance", "Provenance (W3C PROV-JSON)", "Inputs with SHA-256, the check and pack runs, the authors."))

    technical = (
        f"Geological map at 1:{deposit.scale:.0f} in {deposit.crs_label}. Layers: "
        + ", ".join(f"{pl.role} ({pl.count} features)" for pl in layers)
        + f". Checked with archivist {report.version}: {report.summary.errors} errors, {report.summary.warnings} warnings, "
        f"{report.summary.notices} notices from {len(report.rules_run)} rules."
    )
    open_errors = open_error_lines(shared)
    record = dc.datacite_record(
        deposit,
        bbox_wgs84=bbox_wgs84,
        formats=[dp.media_type(r.path)[1] for r in resources],
        sizes=[f"{pl.count} features in {pl.role}" for pl in layers] + [f"{len(t.frame)} rows in {t.name}" for t in tables if t.name in project.tables]
        + [f"{pm.count} files in {pm.kind}" for pm in packed_media],
        technical=technical,
        open_errors=open_errors,
        earlier=earlier,
        references=related_works(project),
    )
    write_json(data / "metadata" / "datacite.json", record)
    resources.append(dp.ResourceInfo("metadata/datacite.json", "datacite", "DataCite metadata", "DataCite Metadata Schema 4.5 record, JSON form."))

    # Human-readable files.
    legend = project.tables.get("legend")
    write_text(
        data / "README.md",
        readme_text(
            deposit,
            shared,
            [LayerFact(pl.role, layer_title(pl.role), pl.count, pl.geometry_type, pl.source, pl.conventions) for pl in layers],
            legend_rows(legend),
            [(t.name, t.title, len(t.frame)) for t in tables],
            bbox,
            bbox_wgs84,
            notes + list(shared.notes),
            media=[scrub(pm.readme) for pm in packed_media],
        ),
    )
    write_text(data / "LICENSE.txt", licence_text(deposit))
    write_text(data / "CITATION.cff", citation_cff(deposit))
    resources.insert(0, dp.ResourceInfo("README.md", "readme", "README", "What the map is, how to cite it, what was checked."))
    resources.insert(1, dp.ResourceInfo("LICENSE.txt", "licence", "Licence", deposit.licence))
    resources.insert(2, dp.ResourceInfo("CITATION.cff", "citation", "Citation (Citation File Format 1.2.0)"))

    # The descriptor, with the size and hash of every other file.
    hashes.add([data / r.path for r in resources])
    descriptors = [r.descriptor(*hashes.get(data / r.path)) for r in resources]
    spatial: dict[str, Any] = {"crs": _crs_id(deposit.crs), "crs_name": deposit.crs.name, "crs_wkt": "metadata/crs.wkt", "scale": deposit.scale}
    if bbox:
        spatial["bbox"] = [round(v, location_digits(deposit.crs)) for v in bbox]  # 1e-8 in degrees, 1e-3 in metres
    if bbox_wgs84:
        spatial["bbox_wgs84"] = list(bbox_wgs84)
    write_json(
        data / "datapackage.json",
        dp.descriptor(
            deposit,
            descriptors,
            sources=[{"title": f"{f.path} ({f.role})", "path": f"source/{stored_name(f.path)}"} for f in source_facts],
            spatial=spatial,
            validation=dp.validation_summary(shared, REPORT_PATH),
        ),
    )


def _crs_id(crs: pyproj.CRS) -> str:
    auth = crs.to_authority(min_confidence=70)
    return f"{auth[0]}:{auth[1]}" if auth else crs.name


def _unique_name(wanted: str, taken: set[str]) -> str:
    """A resource name made of ``wanted`` (lower case, a-z 0-9 . _ -) that is not in ``taken``; added to it."""
    base = re.sub(r"[^a-z0-9._-]+", "-", wanted.lower()).strip("-")
    name, i = base, 2
    while name in taken:
        name, i = f"{base}-{i}", i + 1
    taken.add(name)
    return name


def _resource_name(wanted: str, resources: list[dp.ResourceInfo]) -> str:
    base = re.sub(r"[^a-z0-9._-]+", "-", wanted.lower()).strip("-")
    taken = {r.name for r in resources}
    name, i = base, 2
    while name in taken:
        name, i = f"{base}-{i}", i + 1
    return name


def _report_json(report: Report) -> str:
    return json_text(report.to_dict())
