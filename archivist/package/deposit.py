"""The deposit metadata of a project, read once from ``[map]`` and used by every file pack writes."""

from __future__ import annotations

import datetime as dt
import re
import unicodedata
from dataclasses import dataclass
from pathlib import Path

import pyproj

from ..errors import ArchivistError
from ..identifiers import normalise_doi, normalise_orcid
from ..manifest import DEPOSIT_KEYS, MANIFEST_NAME
from ..project import MapProject, crs_label
from ..vocab.licences import Licence, licence_problem, licences

NAME_PATTERN = re.compile(r"^[a-z0-9][a-z0-9._-]*$")
UNAVAILABLE = "(:unav)"  # DataCite's standard value for information not available (from memory)


@dataclass(frozen=True)
class Author:
    name: str
    given: str | None
    family: str | None
    orcid: str | None  # bare 16 characters with hyphens, only when well formed with a correct check digit
    affiliation: str | None
    email: str | None
    role: str | None

    @property
    def orcid_url(self) -> str | None:
        return f"https://orcid.org/{self.orcid}" if self.orcid else None

    @property
    def inverted(self) -> str:
        """``Family, Given`` (the order DataCite and most citation styles use)."""
        if self.family and self.given:
            return f"{self.family}, {self.given}"
        return self.name


@dataclass(frozen=True)
class Deposit:
    """What a stranger needs to cite, reuse and locate the map."""

    name: str
    title: str
    version: str
    abstract: str
    licence: str  # the SPDX expression as written
    licences: tuple[Licence, ...]
    authors: tuple[Author, ...]
    keywords: tuple[str, ...]
    publisher: str
    contact_name: str | None
    contact_email: str | None
    doi: str | None
    derived_from: str | None
    scale: float
    crs: pyproj.CRS
    created: dt.datetime

    @property
    def stem(self) -> str:
        """Folder and zip name: ``<name>-<version>``."""
        return f"{self.name}-{safe_version(self.version)}"

    @property
    def year(self) -> str:
        return f"{self.created.year:04d}"

    @property
    def crs_label(self) -> str:
        return crs_label(self.crs) or self.crs.name

    @property
    def citation(self) -> str:
        """A plain-text citation: authors (year). title, version. publisher. DOI."""
        names = "; ".join(a.inverted for a in self.authors)
        text = f"{names} ({self.year}). {self.title.rstrip('.')}, version {self.version}."
        if self.publisher != UNAVAILABLE:
            text += f" {self.publisher.rstrip('.')}."
        if self.doi:
            text += f" https://doi.org/{self.doi}"
        return text


def slug(text: str) -> str:
    """A package name from a title: ASCII, lower case, words joined by hyphens, at most 64 characters."""
    ascii_text = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    out = re.sub(r"[^a-z0-9]+", "-", ascii_text.lower()).strip("-")
    return out[:64].rstrip("-") or "map"


def safe_version(version: str) -> str:
    """The version as it can stand in a file name."""
    return re.sub(r"[^A-Za-z0-9._+-]+", "_", version.strip())


def split_name(name: str) -> tuple[str | None, str | None]:
    """(given, family) from an author name.

    ``Family, Given`` is read as written; otherwise the last word is taken as
    the family name (common practice for names written given-name first; write
    the name as ``Family, Given`` where that is wrong).
    """
    name = " ".join(name.split())
    if "," in name:
        family, given = (p.strip() for p in name.split(",", 1))
        return (given or None), (family or None)
    parts = name.split(" ")
    if len(parts) < 2:
        return None, name or None
    return " ".join(parts[:-1]), parts[-1]


def _text(value) -> str | None:
    return value.strip() if isinstance(value, str) and value.strip() else None


def missing_keys(project: MapProject) -> list[str]:
    """Manifest keys a deposit needs that are absent or empty, as ``map.<key>``."""
    m = project.manifest.get("map", {})
    out = []
    for key in DEPOSIT_KEYS:
        value = m.get(key)
        if value is None or (isinstance(value, str) and not value.strip()) or (isinstance(value, list) and not value):
            out.append(f"map.{key}")
    for i, author in enumerate(m.get("authors") or []):
        if not isinstance(author, dict) or not _text(author.get("name")):
            out.append(f"map.authors[{i}].name")
    return out


def read_deposit(project: MapProject, created: dt.datetime) -> Deposit:
    """The deposit metadata, or an ArchivistError naming the first manifest key that stops a package."""
    where = project.manifest_path.name if project.manifest_path else MANIFEST_NAME
    if project.manifest_path is None:
        raise ArchivistError(
            f"{project.root}: has no {MANIFEST_NAME}; a package needs one with map.title, map.version, "
            "map.abstract, map.licence and map.authors ('archivist init' writes a first one)"
        )
    missing = missing_keys(project)
    if missing:
        raise ArchivistError(f"{where}: {', '.join(missing)} {'is' if len(missing) == 1 else 'are'} missing; a deposit needs {'it' if len(missing) == 1 else 'them'}")
    m = project.manifest["map"]
    if not isinstance(m.get("title"), str) or not isinstance(m.get("version"), str) or not isinstance(m.get("abstract"), str):
        raise ArchivistError(f"{where}: map.title, map.version and map.abstract must be text")
    licence = str(m.get("licence")).strip()
    why = licence_problem(licence)
    if why:
        raise ArchivistError(f"{where}: map.licence: {why}; a deposit needs an SPDX licence id such as CC-BY-4.0")
    if project.crs is None:
        raise ArchivistError(f"{where}: map.crs is missing or not understood; a package needs the map CRS")
    name = m.get("name")
    if isinstance(name, str) and name.strip():
        if not NAME_PATTERN.match(name):
            raise ArchivistError(f"{where}: map.name '{name}' must be lower case letters, digits, '.', '_' or '-'")
    else:
        name = slug(m["title"])
    authors = []
    for a in m["authors"]:
        given, family = split_name(a["name"])
        raw_orcid = _text(a.get("orcid"))
        orcid = normalise_orcid(raw_orcid) if raw_orcid else None
        authors.append(
            Author(
                name=" ".join(a["name"].split()),
                given=given,
                family=family,
                orcid=orcid,
                affiliation=_text(a.get("affiliation")),
                email=_text(a.get("email")),
                role=_text(a.get("role")),
            )
        )
    contact = _text(m.get("contact"))
    contact_name = contact_email = None
    if contact and "@" in contact and " " not in contact:
        contact_email = contact
    elif contact:
        contact_name = contact
    if contact_name is None:
        contact_name = authors[0].name
    if contact_email is None:
        contact_email = next((a.email for a in authors if a.email), None)
    doi = _text(m.get("doi"))
    if doi:
        doi = normalise_doi(doi) or re.sub(r"^(?:https?://(?:dx\.)?doi\.org/|doi:)", "", doi, flags=re.I)
    return Deposit(
        name=name,
        title=" ".join(m["title"].split()),
        version=m["version"].strip(),
        abstract=m["abstract"].strip(),
        licence=licence,
        licences=tuple(licences(licence)),
        authors=tuple(authors),
        keywords=tuple(str(k).strip() for k in (m.get("keywords") or []) if str(k).strip()),
        publisher=_text(m.get("publisher")) or UNAVAILABLE,
        contact_name=contact_name,
        contact_email=contact_email,
        doi=doi,
        derived_from=_text(m.get("derived_from")),
        scale=float(project.config.scale),
        crs=project.crs,
        created=created,
    )


def relative_source(project: MapProject, path: Path) -> str:
    """A project file as a path relative to the project folder (POSIX), or ``external/<name>`` outside it.

    For the inputs of a package use :func:`source_names`, which keeps two
    outside files of the same name apart.
    """
    return source_names(project, [path]).name(path)


@dataclass(frozen=True)
class SourceNames:
    """Distinct relative names for the input files of a package.

    A file inside the project keeps its path relative to the project folder;
    a file outside it is named by its path relative to the deepest folder that
    holds every outside input, under ``prefix`` (``external/a/legend.csv`` and
    ``external/b/legend.csv``). No absolute path of the packing machine is kept.
    """

    root: Path
    outside: Path | None
    prefix: str = "external"

    def name(self, path: Path) -> str:
        """The name of ``path`` (a file or folder, inside or outside the project) in the package."""
        resolved = Path(path).resolve()
        try:
            return resolved.relative_to(self.root).as_posix()
        except ValueError:
            pass
        if self.outside is not None:
            try:
                return f"{self.prefix}/{resolved.relative_to(self.outside).as_posix()}"
            except ValueError:
                pass
        return f"{self.prefix}/{resolved.name}"


def source_names(project: MapProject, paths) -> SourceNames:
    """Names for ``paths`` (the files and folders the manifest names) that differ wherever the files differ."""
    import os

    root = project.root.resolve()
    resolved = [Path(p).resolve() for p in paths]
    outside = [r for r in resolved if r != root and root not in r.parents]
    common = Path(os.path.commonpath([str(r.parent) for r in outside])) if outside else None
    inside_tops = {r.relative_to(root).parts[0] for r in resolved if r not in outside and r != root}
    prefix, n = "external", 2
    while prefix in inside_tops:
        prefix, n = f"external-{n}", n + 1
    return SourceNames(root, common, prefix)
