"""``archivist unpack``: an archivist package back into an editable working project.

The package is opened like an audit opens it (checked for path escapes,
links, bombs; copied to a private temporary folder), and its checksums are
verified first: a damaged package is refused, since the next mapper would
start from data that are not what the authors deposited.

What the new project holds:

* the input files exactly as the authors handed them in (``data/source/`` of
  the package: their GeoPackage, spreadsheets, and their own
  ``archivist.toml``, comments included), when every file that manifest names
  is there; otherwise the package's own files (``map.gpkg``, ``tables/*.csv``)
  with the manifest the packager wrote for them (``data/archivist.toml``);
* the photos and field-book scans (``data/photos/``, ``data/fieldbooks/``),
  put back where the project's ``[files]`` paths found them (the
  ``original`` column of the package's ``tables/photos.csv``), or left where
  the package holds them when the package's own manifest is used;
* that manifest with two changes: ``map.version`` is bumped, and
  ``map.derived_from`` names the package it came from (its name and version,
  the SHA-256 of its payload manifest, and its DOI when it has one). A
  ``map.doi`` is removed: it identifies the package, not the new work.

Versions: ``1.0.0`` becomes ``1.0.1-dev``. The last number is raised and the
SemVer pre-release tag ``dev`` marks a version being worked on; set the real
number (``1.1.0``, ``2.0.0``...) before packing the new version. A version
that does not end in a number gets ``-dev`` appended.

Every dataset travels whole: a shapefile with its ``.shx``, ``.dbf``,
``.prj``, ``.cpg`` and other parts, a File Geodatabase folder with all it
holds, a metadata sidecar (``units.shp.xml``, ``map.gpkg.aux.xml``); which
files belong together is decided by :func:`archivist.fileset.dataset_files`,
the same function ``pack`` uses.

Packing the unpacked project again without edits gives the same data files
and the same check results; only the manifest (version, origin) and the
metadata written from it differ.

The mark of an unpacked folder
------------------------------
The new folder holds one more file, ``.archivist-unpack.json`` (:data:`MARKER`):
which package it came from, the authors of that package, and the SHA-256 of
every file unpack wrote. It sits in the project folder itself so that it moves with the folder; it is
hidden (a leading dot), so role guessing never sees it, and ``check`` and
``pack`` read only the files the manifest names, so it never ends up in a
package. ``unpack --force`` replaces an existing folder only when that
mark shows unpack made it and nothing was added or changed since (the
mapper's edits are never lost); it never replaces a folder that holds the
package being unpacked, nor the current folder or one that holds it.

The folder is built in a hidden sibling (``.DIR.<pid>-<random>.part``) and
renamed into place at the end; an error, Ctrl-C or SIGTERM removes the
sibling and the private copy of the package in the temporary folder.
"""

from __future__ import annotations

import os
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import ArchivistError
from ..filebytes import copy_new_file, sha256_bytes, sha256_file
from ..fileset import dataset_files
from ..fsutil import guard_output, move_into_place, remove_leftovers, staging_dir
from ..madefolder import Mark
from ..interrupt import Interrupted, terminate_as_exception
from ..manifest import MANIFEST_NAME, spec_paths
from ..tomltext import dump_toml
from .bagcheck import verify_bag
from .safe import Limits, name_problem, open_archive
from ..safeparse import LimitExceeded, load_json, load_toml
from .source import is_bag

MARKER = ".archivist-unpack.json"
"""The file in an unpacked folder that records what ``unpack`` wrote there (see the module docstring)."""
MARKER_KIND = "archivist unpack record"
MARK = Mark(MARKER, MARKER_KIND, "unpack", "unpacking")

_SEMVER = re.compile(r"^(\d+)\.(\d+)\.(\d+)(?:[-+].*)?$")
_NUMERIC = re.compile(r"^(.*?)(\d+)([^\d]*)$")


@dataclass(frozen=True)
class UnpackResult:
    """What ``unpack`` wrote.

    Attributes
    ----------
    path
        The new project folder.
    version, previous_version
        The bumped version and the package's.
    derived_from
        What ``map.derived_from`` now says.
    origin
        ``"source"`` (the inputs as handed in) or ``"package"`` (the package's own files).
    files
        The project files written, relative to ``path``, sorted (the mark
        :data:`MARKER` is written too, and not listed here).
    """

    path: Path
    version: str
    previous_version: str
    derived_from: str
    origin: str
    files: tuple[str, ...]


def bump_version(version: str) -> str:
    """The working version after ``version``.

    Examples
    --------
    >>> bump_version("1.0.0")
    '1.0.1-dev'
    >>> bump_version("2.3")
    '2.4-dev'
    >>> bump_version("1.0.0-rc.1")
    '1.0.1-dev'
    >>> bump_version("first edition")
    'first edition-dev'
    """
    v = version.strip()
    m = _SEMVER.match(v)
    if m:
        return f"{m.group(1)}.{m.group(2)}.{int(m.group(3)) + 1}-dev"
    m = re.match(r"^(\d+(?:\.\d+)*)$", v)
    if m:
        head, _, last = v.rpartition(".")
        return f"{head + '.' if head else ''}{int(last) + 1}-dev"
    return f"{v}-dev"


def _manifest_paths(data: dict[str, Any]) -> list[str]:
    out = []
    for group in ("layers", "tables"):
        for spec in (data.get(group) or {}).values():
            out.extend(spec_paths(spec))  # a path, or a list of files handed in together
    for spec in (data.get("files") or {}).values():  # the link tables of photos and field-book scans
        if isinstance(spec, dict) and isinstance(spec.get("link_table"), str):
            out.append(spec["link_table"])
    return out


def _media_files(data: Path, packaged: dict[str, Any], original: bool) -> list[tuple[Path, str]]:
    """(file in the package, where it goes in the new project) for every photo and scan the package's link tables list.

    The package's ``tables/<kind>.csv`` names each file's place in the package
    (``photo``) and in the project it was packed from (``original``); with
    ``original`` the files go back to those places (the inputs' own manifest
    names them there), else they keep their places in the package.
    """
    import csv

    out: list[tuple[Path, str]] = []
    for spec in (packaged.get("files") or {}).values():
        rel = spec.get("link_table") if isinstance(spec, dict) else None
        table = _inside(data, rel) if isinstance(rel, str) else None
        if table is None or not table.is_file():
            continue
        with open(table, encoding="utf-8", newline="") as fh:
            for row in csv.DictReader(fh):
                src = _inside(data, str(row.get("photo") or ""))
                if src is None or not src.is_file():
                    continue
                dest = str(row.get("original") or "") if original else ""
                if not dest or name_problem(dest) is not None:
                    dest = src.relative_to(data).as_posix()
                out.append((src, dest))
    return out


def _inside(base: Path, rel: str) -> Path | None:
    if rel.startswith("/") or "\\" in rel or ".." in rel.split("/"):
        return None
    target = (base / rel).resolve()
    return target if base.resolve() in target.parents else None


def edit_map_keys(text: str, changes: dict[str, str | None]) -> str:
    """``text`` (a manifest) with keys of its ``[map]`` table set (or removed when None), comments and layout kept.

    The manifest is edited through ``tomlkit``, which keeps every comment,
    blank line and key order of the mapper's file: a key that is there is
    changed where it stands, a new key goes right after ``version``. The
    result is checked by parsing it again (``tomllib``); should it differ
    from what was asked (or the text has no ``[map]`` table tomlkit can
    edit), the whole manifest is rewritten instead, without its comments.
    """
    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    data = tomllib.loads(text)
    expected = dict(data)
    expected["map"] = {k: v for k, v in {**data.get("map", {}), **changes}.items() if v is not None}
    try:
        doc = tomlkit.parse(text)
        table = doc.get("map")
        if isinstance(table, (tomlkit.items.Table, tomlkit.items.InlineTable)):
            for key, value in changes.items():
                if value is None:
                    if key in table:
                        del table[key]
                elif key in table or "version" not in table:
                    table[key] = value
                else:
                    _insert_after(table, "version", key, value)
            candidate = tomlkit.dumps(doc)
            if tomllib.loads(candidate) == expected:
                return candidate
    except (TOMLKitError, tomllib.TOMLDecodeError):
        pass
    return dump_toml(expected)


def _insert_after(table: Any, anchor: str, key: str, value: str) -> None:
    """Add ``key = value`` to the tomlkit ``table`` on the line after ``anchor``.

    tomlkit has no public call for a position: its container's
    ``_insert_after`` is used where it has one (tomlkit before 0.15), else
    its ``_insert_at`` at the position after ``anchor`` in the table's body
    (0.15), else the key goes at the end of the table (still correct TOML,
    checked by the caller).
    """
    container = getattr(table, "value", None)
    insert_after = getattr(container, "_insert_after", None)
    if insert_after is not None:
        insert_after(anchor, key, value)
        return
    insert_at = getattr(container, "_insert_at", None)
    body = getattr(container, "body", None)
    if insert_at is not None and body is not None:
        at = next((i for i, (k, _) in enumerate(body) if k is not None and getattr(k, "key", None) == anchor), None)
        if at is not None and at + 1 < len(body):
            insert_at(at + 1, key, value)
            return
    table[key] = value


def _package_identity(root: Path, data_manifest: dict[str, Any]) -> tuple[str, str | None]:
    """(name-version of the package, its DOI or None)."""
    stem = root.name
    info = root / "bag-info.txt"
    if info.is_file():
        from .bagcheck import read_tag_file

        tags, _ = read_tag_file(info)
        stem = (tags.get("Internal-Sender-Identifier") or [stem])[0]
    doi = data_manifest.get("map", {}).get("doi")
    record = root / "data" / "metadata" / "datacite.json"
    if not doi and record.is_file():
        try:
            doi = load_json(record, "data/metadata/datacite.json").get("doi")
        except (ValueError, AttributeError, OSError, LimitExceeded):
            doi = None
    if isinstance(doi, str):
        doi = re.sub(r"^(?:https?://(?:dx\.)?doi\.org/|doi:)", "", doi.strip(), flags=re.I) or None
    return stem, doi if isinstance(doi, str) else None


def _copy_file(src: Path, dest: Path) -> str:
    """Copy ``src`` to the new file ``dest`` (mode 0644); return the SHA-256 of the bytes copied (read once)."""
    return copy_new_file(src, dest, 0o644)


def _write_new(dest: Path, data: bytes) -> str:
    dest.write_bytes(data)
    os.chmod(dest, 0o644)
    return sha256_bytes(data)


def replaceable(target: Path, package: Path) -> dict[str, tuple[int, int]]:
    """Check that the existing folder ``target`` may be replaced by a new unpack of ``package``.

    It may when it is a folder that ``unpack`` made (its :data:`MARKER` is
    there), holds no file that unpack did not write and no file whose
    content differs from what unpack wrote, is not and does not hold
    ``package``, and is not the current folder or one that holds it
    (:meth:`archivist.madefolder.Mark.replaceable`).

    Returns the size and modification time (ns) of each file, to see just
    before the swap that nothing changed meanwhile.

    Raises
    ------
    ArchivistError
        One line naming the folder (or the file in it) and why it stays.
    """
    return MARK.replaceable(target, [(Path(package), f"the package {package} being unpacked")])


def unpack(archive: str | Path, out_dir: str | Path, *, force: bool = False, limits: Limits | None = None) -> UnpackResult:
    """Turn an archivist package (folder or zip) into an editable project at ``out_dir``.

    Parameters
    ----------
    archive
        The package: its folder or its zip.
    out_dir
        The new project folder; it must not exist unless ``force``.
    force
        Replace an existing ``out_dir`` that an earlier ``unpack`` made and
        that holds no changes (:func:`replaceable`); only once the new
        project is complete.
    limits
        Caps for opening the archive (:class:`~archivist.package.safe.Limits`).

    Raises
    ------
    ArchivistError
        The archive cannot be opened safely, is not an archivist package, is
        damaged (a checksum differs, a file is missing or unlisted), or
        ``out_dir`` exists (without ``force``, or ``force`` may not replace
        it) or lies inside the archive.
    archivist.interrupt.Interrupted, KeyboardInterrupt
        SIGTERM or Ctrl-C arrived before the new folder was in place; nothing
        was written and the temporary copies are gone. (One arriving after
        it is in place is ignored: the work is done.)

    Examples
    --------
    >>> result = unpack("tarrowmere-1.0.0.zip", "tarrowmere-remap")  # doctest: +SKIP
    >>> result.version  # doctest: +SKIP
    '1.0.1-dev'
    """
    source = Path(archive)
    target = Path(out_dir)
    if not source.exists():
        raise ArchivistError(f"{source}: no such file or folder")
    guard_output(target, force=True, project_root=source if source.is_dir() else None)
    before = None
    if target.exists() or target.is_symlink():
        before = replaceable(target, source)
        if not force:
            raise MARK.exists(target, before)
    final = Path(os.path.abspath(target))
    placed = False
    try:
        with terminate_as_exception():
            remove_leftovers(final.parent, {final.name})
            with staging_dir(final) as tmp:
                written, version, previous, derived, origin = _unpack_into(source, tmp, limits)
                os.chmod(tmp, 0o755)
                if before is not None:
                    MARK.still_same(target, before)
                move_into_place(tmp, final)
                placed = True
    except (Interrupted, KeyboardInterrupt):
        if not placed:
            raise  # nothing was written: the staging folder and the private copy are gone
    return UnpackResult(path=target, version=version, previous_version=previous, derived_from=derived, origin=origin, files=written)


def _unpack_into(source: Path, tmp: Path, limits: Limits | None) -> tuple[tuple[str, ...], str, str, str, str]:
    """Write the project from the package ``source`` into the empty folder ``tmp``, with its mark.

    Returns (files written, version, previous version, derived_from, origin).
    """
    with open_archive(source, limits) as arc:
        root = arc.content_root()
        label = arc.label
        if not is_bag(root) or not (root / "data" / MANIFEST_NAME).is_file():
            raise ArchivistError(f"{label}: not an archivist package (no bagit.txt and data/{MANIFEST_NAME}); 'archivist audit' can inspect it")
        check = verify_bag(root)
        damage = check.of("mismatch") + check.of("missing") + check.of("unlisted")
        if damage:
            more = f" (and {len(damage) - 1} more)" if len(damage) > 1 else ""
            raise ArchivistError(f"{label}: the package is damaged: {damage[0].message.rstrip('.')}{more}; run 'archivist audit {source}' for the full list")
        data = root / "data"
        packaged_text = (data / MANIFEST_NAME).read_text(encoding="utf-8")
        try:
            packaged = load_toml(packaged_text, f"{label}: data/{MANIFEST_NAME}")
        except tomllib.TOMLDecodeError as exc:
            raise ArchivistError(f"{label}: data/{MANIFEST_NAME} is not valid TOML: {exc}") from None
        origin, base, text = "package", data, packaged_text
        src = data / "source"
        if (src / MANIFEST_NAME).is_file():
            try:
                src_text = (src / MANIFEST_NAME).read_text(encoding="utf-8-sig")
                src_data = load_toml(src_text, f"{label}: data/source/{MANIFEST_NAME}")
                paths = _manifest_paths(src_data)
                if paths and all((p := _inside(src, rel)) is not None and p.exists() for rel in paths):
                    origin, base, text = "source", src, src_text
            except (tomllib.TOMLDecodeError, UnicodeDecodeError, LimitExceeded):
                pass
        manifest = tomllib.loads(text)
        named = sorted(set(_manifest_paths(manifest)))
        for rel in named:
            if _inside(base, rel) is None:
                raise ArchivistError(f"{label}: {MANIFEST_NAME} names '{rel}', which leads outside the package; refusing it")
            if not (base / rel).exists():
                raise ArchivistError(f"{label}: {MANIFEST_NAME} names '{rel}', which is not in the package")
        previous = str(manifest.get("map", {}).get("version", "")).strip() or "0.0.0"
        version = bump_version(previous)
        stem, doi = _package_identity(root, packaged)
        digest = sha256_file(root / "manifest-sha256.txt") if (root / "manifest-sha256.txt").is_file() else None
        derived = stem + (f"; bag manifest sha256:{digest}" if digest else "") + (f"; https://doi.org/{doi}" if doi else "")
        new_text = edit_map_keys(text, {"version": version, "derived_from": derived, "doi": None})
        # the earlier package's authors, so that pack can tell a new version by them from a remap by others
        authors = [
            {"name": str(a["name"]), "orcid": a.get("orcid") if isinstance(a.get("orcid"), str) else None}
            for a in (manifest.get("map", {}).get("authors") or [])
            if isinstance(a, dict) and isinstance(a.get("name"), str)
        ]

        # every file of every dataset the manifest names (a shapefile's parts, a .gdb folder's files)
        written: dict[str, str] = {}
        for rel in named:
            for part in dataset_files(base / rel):
                part_rel = part.relative_to(base).as_posix()
                if part_rel in written or part_rel in (MANIFEST_NAME, MARKER):
                    continue
                dest = tmp / part_rel
                dest.parent.mkdir(parents=True, exist_ok=True)
                written[part_rel] = _copy_file(part, dest)
        # photos and field-book scans, at the places the manifest's [files] paths look for them
        for src_file, dest_rel in _media_files(data, packaged, origin == "source"):
            if dest_rel in written or dest_rel in (MANIFEST_NAME, MARKER):
                continue
            dest = tmp / dest_rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            written[dest_rel] = _copy_file(src_file, dest)
        written[MANIFEST_NAME] = _write_new(tmp / MANIFEST_NAME, new_text.encode("utf-8"))
    MARK.write(tmp, written, package=derived, authors=authors)
    return tuple(sorted(written)), version, previous, derived, origin
