"""A map from anywhere: a project folder, an archivist package, or any archive of map data.

:func:`open_map` gives a :class:`MapProject` for each, so that ``audit`` and
``diff`` treat them alike:

* a project folder (or its ``archivist.toml``) is the user's own and is read
  in place, as ``archivist check`` reads it;
* a zip file, or a folder that is a BagIt bag, comes from elsewhere: it is
  opened with :func:`archivist.package.safe.open_archive` (checked, then
  copied into a private temporary folder) and read there. Its manifest is
  believed only after every path in it is shown to stay inside the archive,
  and a layer file is handed to GDAL only when its first bytes are those of a
  self-contained format (:func:`~archivist.package.safe.sniff_vector`).

In a package the map is read from ``data/`` with the manifest the packager
wrote there (``data/archivist.toml``); without one, the roles of the files are
inferred from the data, as for a bare folder.
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

from .. import manifest as mf
from .. import vectorio
from ..errors import ArchivistError
from ..model import Hit
from ..project import MapProject, load_project
from ..readers import TABLE_SUFFIXES
from .safe import (
    LAYER_WHY,
    WORKBOOK_LIMITS,
    Limits,
    OpenedArchive,
    name_problem,
    open_archive,
    open_problem,
    screen_tree,
    set_aside,
    sniff_vector,
    workbook_problem,
)

__all__ = ["OpenedMap", "open_map", "load_archive_project", "screen_manifest", "workbook_problem", "WORKBOOK_LIMITS"]


@dataclass
class OpenedMap:
    """A map opened by :func:`open_map`.

    Attributes
    ----------
    project
        The loaded map (layers, tables, manifest, problems).
    kind
        ``"project"`` (read in place), ``"package"`` (a BagIt bag) or ``"archive"`` (any other zip or folder).
    archive
        The private copy, for packages and archives.
    root
        The folder the archive's content starts at (the bag's folder for a package).
    data
        The folder the map's files are in (``root/data`` for a package).
    held
        Files not opened because their content is not a self-contained format, relative to ``root``.
    """

    project: MapProject
    kind: str
    label: str
    archive: OpenedArchive | None = None
    root: Path | None = None
    data: Path | None = None
    held: list[str] = field(default_factory=list)
    unopened: list[tuple[str, str]] = field(default_factory=list)  # (path relative to root, why), from the screen


def is_bag(root: Path) -> bool:
    return (root / "bagit.txt").is_file()


def is_project_path(path: Path) -> bool:
    """True when ``path`` is one's own project: a folder that is not a bag, or a manifest file."""
    if path.is_file():
        return path.suffix.lower() == ".toml"
    if not path.is_dir() or is_bag(path):
        return False
    entries = [p for p in path.iterdir() if not p.name.startswith(".")]
    return not (len(entries) == 1 and entries[0].is_dir() and is_bag(entries[0]))


def _vector_spec(spec: dict[str, Any]) -> bool:
    return not (Path(str(spec.get("path", ""))).suffix.lower() in TABLE_SUFFIXES and (spec.get("x_field") or spec.get("y_field")))


def screen_manifest(raw: dict[str, Any], base: Path, label: str, where: str) -> tuple[dict[str, Any], list[Hit], list[str]]:
    """A copy of an archive's manifest whose every path stays inside ``base`` and whose files a reader may open.

    A path that leads outside the archive stops the run (ArchivistError): the
    archive is hostile. A file no reader may be handed (:func:`open_problem`), a
    layer file whose content is not a self-contained format, and a layer path
    that is a folder are left out, each with a ``layer-unreadable`` hit.
    """
    out = {k: (dict(v) if isinstance(v, dict) else v) for k, v in raw.items()}
    hits: list[Hit] = []
    held: list[str] = []
    base = base.resolve()
    for group in ("layers", "tables"):
        specs = out.get(group)
        if not isinstance(specs, dict):
            continue
        kept: dict[str, Any] = {}

        def admitted(group: str, role: str, spec: Any) -> bool:
            if isinstance(spec, dict) and isinstance(spec.get("path"), list):  # files handed in together: each screened
                rels = [r for r in spec["path"] if isinstance(r, str)]
                kept_paths = [r for r in rels if admitted(group, role, {**spec, "path": r})]
                spec["path"] = kept_paths
                return bool(kept_paths)
            if not isinstance(spec, dict) or not isinstance(spec.get("path"), str):
                return True
            rel = spec["path"]
            why = name_problem(rel)
            target = (base / rel).resolve()
            if why or (target != base and base not in target.parents):
                raise ArchivistError(f"{label}: {where}: {group}.{role}.path '{rel}' leads outside the archive; refusing the archive")
            problem = open_problem(target)
            if problem is None and target.is_dir():
                problem = "it is a folder, and a folder is not opened as a layer in an audit"
            if problem is None and group == "layers" and _vector_spec(spec) and target.is_file() and sniff_vector(target) is None:
                problem = LAYER_WHY + ", and other formats can make GDAL read files outside the archive"
            if problem:
                hits.append(Hit(f"{group}.{role}: '{rel}' was not opened: {problem}.", layer=role, rule="layer-unreadable"))
                held.append(rel)
                return False
            return True

        for role, spec in specs.items():
            spec = dict(spec) if isinstance(spec, dict) else spec  # a list of paths is narrowed on the copy, never on raw
            if isinstance(spec, list):  # a list of layers under one key ([[layers.lines]]): each entry screened
                kept[role] = [entry for i, entry in enumerate(spec) if admitted(group, f"{role}[{i}]", entry)]
            elif admitted(group, role, spec):
                kept[role] = spec
        out[group] = kept
    files = out.get("files")
    if isinstance(files, dict):
        kept_files: dict[str, Any] = {}
        for kind, spec in files.items():
            if not isinstance(spec, dict):
                continue
            spec = dict(spec)
            entries = spec.get("paths")
            for rel in [entries] if isinstance(entries, str) else (entries if isinstance(entries, list) else []):
                if not isinstance(rel, str):
                    continue
                why = name_problem(rel.replace("*", "x").replace("?", "x").replace("[", "x").replace("]", "x"))
                if why or rel.startswith("/") or ".." in rel.split("/"):
                    raise ArchivistError(f"{label}: {where}: files.{kind}.paths '{rel}' leads outside the archive; refusing the archive")
            rel = spec.get("link_table")
            if isinstance(rel, str):
                why = name_problem(rel)
                target = (base / rel).resolve()
                if why or (target != base and base not in target.parents):
                    raise ArchivistError(f"{label}: {where}: files.{kind}.link_table '{rel}' leads outside the archive; refusing the archive")
                problem = open_problem(target)
                if problem:
                    hits.append(Hit(f"files.{kind}.link_table: '{rel}' was not opened: {problem}.", layer=kind, rule="layer-unreadable"))
                    held.append(rel)
                    spec.pop("link_table")
            kept_files[kind] = spec
        out["files"] = kept_files
    return out, hits, held


def load_archive_project(arc: OpenedArchive) -> OpenedMap:
    """Load the map inside an opened archive (package or not), safely.

    Two fences stand between the archive and GDAL. Every file and folder of
    the private copy, at any depth, is screened first
    (:func:`~archivist.package.safe.screen_tree`): those no reader may be
    handed are set aside, out of the copy, while the map is read (by the
    manifest or by inferring roles), and put back afterwards for the checksum
    verification; each one is named with the reason. Then the reading runs
    with GDAL's virtual and network drivers switched off
    (:func:`archivist.vectorio.untrusted`).
    """
    with vectorio.untrusted():
        return _load_archive_project(arc)


def _load_archive_project(arc: OpenedArchive) -> OpenedMap:
    """The body of :func:`load_archive_project`, inside the GDAL fence."""
    root = arc.content_root()
    bag = is_bag(root)
    data = root / "data" if bag and (root / "data").is_dir() else root
    manifest_path = data / mf.MANIFEST_NAME
    label = arc.label
    held: list[str] = []
    hits: list[Hit] = []
    prefix = data.relative_to(root).as_posix() + "/" if data != root else ""
    raw: dict[str, Any] | None = None
    screened: dict[str, Any] | None = None
    if manifest_path.is_file():
        raw = mf.read_manifest(manifest_path)
        screened, hits, held_rel = screen_manifest(raw, data, label, f"{prefix}{mf.MANIFEST_NAME}")
        held = [prefix + h for h in held_rel]
    unsafe = screen_tree(root)
    # the store is a sibling of the copy, never inside the archive's own tree
    with set_aside(root, unsafe, arc.root.parent / "held"):
        if screened is not None and raw is not None:
            project = load_project(data, manifest=screened)
            project.manifest_path = manifest_path
            project.problems = mf.validate_manifest(raw, f"{prefix}{mf.MANIFEST_NAME}") + project.problems + hits
        else:
            project = load_project(data)
            # archive-map-missing says this for an archive, with what to ask the authors for
            project.problems = [h for h in project.problems if not (h.rule == "layer-missing" and h.layer == "units")]
    from ..photos import UNTRUSTED_EXIF_BYTES

    for media in project.media.values():  # EXIF of the archive's photos is read only under the cap
        media.max_exif_bytes = UNTRUSTED_EXIF_BYTES
    named = {h.rstrip("/") for h in held}
    unopened = [(rel, why) for rel, why in unsafe if rel.rstrip("/") not in named]  # the others have a layer-unreadable hit
    for rel, why in unopened:
        held.append(rel)
        project.notes.append(f"{rel} was not opened: {why}.")
    project.notes = [_relabel(n, data, label, prefix) for n in project.notes]
    return OpenedMap(
        project=project,
        kind="package" if bag else "archive",
        label=label,
        archive=arc,
        root=root,
        data=data,
        held=held,
        unopened=unopened,
    )


def _relabel(text: str, data: Path, label: str, prefix: str) -> str:
    shown = f"{label}/{prefix.rstrip('/')}" if prefix else label
    return text.replace(str(data), shown)


@contextmanager
def open_map(path: str | Path, *, limits: Limits | None = None) -> Iterator[OpenedMap]:
    """Open a project, package or archive and yield it as an :class:`OpenedMap`.

    Archives are removed from the temporary folder when the ``with`` block ends.

    Raises
    ------
    ArchivistError
        No such path, or an archive that cannot be opened safely.
    """
    p = Path(path)
    if not p.exists():
        raise ArchivistError(f"{p}: no such file or folder")
    if is_project_path(p):
        yield OpenedMap(project=load_project(p), kind="project", label=str(p))
        return
    with open_archive(p, limits) as arc:
        yield load_archive_project(arc)
