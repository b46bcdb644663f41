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
* that manifest with two changes: ``map.version`` is bumped, and
  ``map.derived_from`` names the package it came from (its name and version,
  the SHA-256 of its payload manifest, and its DOI when it has one). A
  ``map.doi`` is removed: it identifies the package, not the new work.

Versions: ``1.0.0`` becomes ``1.0.1-dev``. The last number is raised and the
SemVer pre-release tag ``dev`` marks a version being worked on; set the real
number (``1.1.0``, ``2.0.0``...) before packing the new version. A version
that does not end in a number gets ``-dev`` appended.

Packing the unpacked project again without edits gives the same data files
and the same check results; only the manifest (version, origin) and the
metadata written from it differ.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import ArchivistError
from ..fsutil import guard_output
from ..manifest import MANIFEST_NAME
from .bagcheck import file_digest, verify_bag
from .safe import Limits, open_archive
from ..safeparse import LimitExceeded, load_json, load_toml
from ..tomltext import dump_toml, toml_value
from .source import is_bag

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
        The files written, relative to ``path``, sorted.
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
            if isinstance(spec, dict) and isinstance(spec.get("path"), str):
                out.append(spec["path"])
    return out


def _inside(base: Path, rel: str) -> Path | None:
    if rel.startswith("/") or "\\" in rel or ".." in rel.split("/"):
        return None
    target = (base / rel).resolve()
    return target if base.resolve() in target.parents else None


def edit_map_keys(text: str, changes: dict[str, str | None]) -> str:
    """``text`` (a manifest) with keys of its ``[map]`` table set (or removed when None), comments kept.

    Falls back to rewriting the whole manifest when the text cannot be edited
    line by line (e.g. ``[map]`` written as an inline table); the result is
    always checked by parsing it again.
    """
    data = tomllib.loads(text)
    expected = dict(data)
    expected["map"] = {k: v for k, v in {**data.get("map", {}), **changes}.items() if v is not None}
    lines = text.splitlines()
    start = next((i for i, ln in enumerate(lines) if re.match(r"^\s*\[map\]\s*(#.*)?$", ln)), None)
    if start is not None:
        end = next((i for i in range(start + 1, len(lines)) if re.match(r"^\s*\[", lines[i])), len(lines))
        section = lines[start + 1 : end]
        for key, value in changes.items():
            pattern = re.compile(rf"^\s*{re.escape(key)}\s*=")
            at = next((i for i, ln in enumerate(section) if pattern.match(ln)), None)
            new = None if value is None else f"{key} = {toml_value(value)}"
            if at is not None:
                if new is None:
                    del section[at]
                else:
                    section[at] = new
            elif new is not None:
                anchor = next((i for i, ln in enumerate(section) if re.match(r"^\s*version\s*=", ln)), None)
                section.insert(anchor + 1 if anchor is not None else len([s for s in section if s.strip()]), new)
        candidate = "\n".join(lines[: start + 1] + section + lines[end:]) + "\n"
        try:
            if tomllib.loads(candidate) == expected:
                return candidate
        except tomllib.TOMLDecodeError:
            pass
    return dump_toml(expected)


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


def unpack(archive: str | Path, out_dir: str | Path, *, force: bool = False, limits: Limits | None = None) -> UnpackResult:
    """Turn an archivist package (folder or zip) into an editable project at ``out_dir``.

    Parameters
    ----------
    archive
        The package: its folder or its zip.
    out_dir
        The new project folder; it must not exist unless ``force``.
    force
        Replace an existing ``out_dir`` (only once the new project is complete).
    limits
        Caps for opening the archive (:class:`~archivist.package.safe.Limits`).

    Raises
    ------
    ArchivistError
        The archive cannot be opened safely, is not an archivist package, is
        damaged (a checksum differs, a file is missing or unlisted), or
        ``out_dir`` exists without ``force`` or lies inside the archive.

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
    guard_output(target, force=force, project_root=source if source.is_dir() else None)
    if target.exists() and not target.is_dir():
        raise ArchivistError(f"{target}: exists and is not a folder")
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
                if paths and all((p := _inside(src, rel)) is not None and p.is_file() for rel in paths):
                    origin, base, text = "source", src, src_text
            except (tomllib.TOMLDecodeError, UnicodeDecodeError, LimitExceeded):
                pass
        manifest = tomllib.loads(text)
        files = sorted(set(_manifest_paths(manifest)))
        for rel in files:
            if _inside(base, rel) is None:
                raise ArchivistError(f"{label}: {MANIFEST_NAME} names '{rel}', which leads outside the package; refusing it")
            if not (base / rel).is_file():
                raise ArchivistError(f"{label}: {MANIFEST_NAME} names '{rel}', which is not in the package")
        previous = str(manifest.get("map", {}).get("version", "")).strip() or "0.0.0"
        version = bump_version(previous)
        stem, doi = _package_identity(root, packaged)
        digest = file_digest(root / "manifest-sha256.txt", "sha256") if (root / "manifest-sha256.txt").is_file() else None
        derived = stem + (f"; bag manifest sha256:{digest}" if digest else "") + (f"; https://doi.org/{doi}" if doi else "")
        new_text = edit_map_keys(text, {"version": version, "derived_from": derived, "doi": None})
        # build the project beside its final place, move it in only when whole
        target_parent = target.resolve().parent
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=target_parent))
        try:
            for rel in files:
                dest = tmp / rel
                dest.parent.mkdir(parents=True, exist_ok=True)
                shutil.copyfile(base / rel, dest)
                os.chmod(dest, 0o644)
            (tmp / MANIFEST_NAME).write_text(new_text, encoding="utf-8", newline="\n")
            os.chmod(tmp / MANIFEST_NAME, 0o644)
            os.chmod(tmp, 0o755)
            written = tuple(sorted([MANIFEST_NAME, *files]))
            if target.exists():
                old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=target_parent))
                os.rmdir(old)
                os.replace(target, old)
                os.replace(tmp, target)
                shutil.rmtree(old, ignore_errors=True)
            else:
                os.replace(tmp, target)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
    return UnpackResult(path=target, version=version, previous_version=previous, derived_from=derived, origin=origin, files=written)
