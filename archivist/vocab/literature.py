"""Compiled analyses: which rows of an analyses table come from publications, and what they cite.

An analyses table may mix the team's own analyses with values compiled from
the literature. ``[tables.analyses] source_field`` names the column that
says where each row comes from: a DOI (in any usual written form, read by
:mod:`archivist.identifiers`) or a key into the references table
(``[tables.references]``). This module decides, in one place, for the
checks, the package (Table Schema keys, DataCite related identifiers) and
the audit:

* **which rows are from the literature**, never by guessing:

  - with ``origin_field``, a row is from the literature when that column's
    cell reads as one of :data:`LITERATURE_WORDS` (``literature``,
    ``published``, ``compiled``...; case and edge spaces ignored); any other
    cell, blank included, marks the team's own analysis;
  - without it, a row is from the literature when its source cell is not
    blank and is not one of the team's own markers (``own_source``: a text
    or a list of texts, default :data:`OWN_SOURCES`, compared without case).
    A blank source is the team's own analysis, joined to its sample by
    ``sample_field`` as before.

* **what a source cell is**: a DOI when it is written like one (it starts
  with ``10.``, ``doi:`` or ``info:doi/``, or holds ``doi.org/``), whether
  or not it is well formed; otherwise a reference key, compared with the
  references table's keys exactly after edge spaces are stripped.

* **the references table's columns**: named by ``key_field``,
  ``doi_field``, ``citation_field``, ``authors_field``, ``year_field``,
  ``title_field``, or found by their usual headers (:data:`SPELLINGS`).

Nothing here reads coordinates or judges values; that is the checks' job.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..identifiers import doi_problem, normalise_doi
from ..readers import text_column

if TYPE_CHECKING:
    from ..project import Table

# The team's own rows, when the source column marks them instead of leaving them blank (common practice
# in compilation tables: "this study"); [tables.analyses] own_source replaces the list.
OWN_SOURCES = ("this study", "this work")
# Cells of an origin_field that mark a row taken from a publication (compared without case).
LITERATURE_WORDS = ("literature", "lit", "lit.", "published", "publication", "compiled", "compilation", "reference")
# Headers of the references table, by key, best first (compared without case, spaces and dashes as "_").
SPELLINGS: dict[str, tuple[str, ...]] = {
    "key": ("key", "reference_key", "ref_key", "ref", "reference", "ref_id", "reference_id", "id", "citekey", "cite_key"),
    "doi": ("doi", "doi_url", "doi_link"),
    "citation": ("citation", "full_citation", "full_reference", "bibliographic_reference", "reference_text"),
    "authors": ("authors", "author", "creators", "creator"),
    "year": ("year", "publication_year", "pub_year", "date"),
    "title": ("title", "article_title", "work_title"),
}
FIELD_KEYS = {k: f"{k}_field" for k in SPELLINGS}
_DOI_LIKE = re.compile(r"^\s*(?:10\.|doi:|info:doi/)|doi\.org/", re.IGNORECASE)


def header_key(header: Any) -> str:
    return re.sub(r"[\s\-]+", "_", str(header).strip().casefold())


def doi_like(text: str) -> bool:
    """True when ``text`` is written as a DOI (well formed or not) rather than as a reference key."""
    return bool(_DOI_LIKE.search(str(text)))


def own_markers(spec: dict[str, Any]) -> tuple[str, ...]:
    """The source texts that mark the team's own rows, folded: ``own_source`` or :data:`OWN_SOURCES`."""
    given = spec.get("own_source")
    if isinstance(given, str):
        given = [given]
    if isinstance(given, list):
        return tuple(str(v).strip().casefold() for v in given if str(v).strip())
    return OWN_SOURCES


def _named(table: Table, key: str) -> str | None:
    """The column the manifest names with ``key`` (a difference of case or edge spaces forgiven), or None."""
    name = table.spec.get(key)
    if not isinstance(name, str):
        return None
    columns = list(table.frame.columns)
    if name in columns:
        return name
    folded = {str(c).strip().casefold(): c for c in columns}
    found = folded.get(name.strip().casefold())
    return None if found is None else str(found)


@dataclass(frozen=True)
class Compilation:
    """How the rows of an analyses table are read as the team's own or compiled from publications.

    Arrays are aligned with the table's rows. ``source_col`` is None when
    the manifest names no ``source_field`` (then no row is from the
    literature unless ``origin_field`` says so).
    """

    source_col: str | None
    origin_col: str | None
    method_col: str | None
    source: np.ndarray  # source cell as text, edge spaces stripped
    literature: np.ndarray  # bool: the row is from the literature
    own: np.ndarray  # bool: the source cell is one of the team's own markers
    doi: np.ndarray  # bool: the source cell is written as a DOI
    markers: tuple[str, ...]  # the own markers in force

    @property
    def any(self) -> bool:
        return bool(self.literature.any())

    @property
    def keyed(self) -> np.ndarray:
        """Literature rows citing a reference key (a non-blank source that is not written as a DOI)."""
        return self.literature & (self.source != "") & ~self.doi


def compilation(table: Table) -> Compilation:
    """Read the analyses table's source and origin columns (see the module's docstring)."""
    n = len(table.frame)
    source_col = _named(table, "source_field")
    origin_col = _named(table, "origin_field")
    method_col = _named(table, "method_field")
    markers = own_markers(table.spec)
    if source_col is not None:
        source = np.array([s.strip() for s in text_column(table.frame[source_col])], dtype=object)
    else:
        source = np.full(n, "", dtype=object)
    folded = np.array([s.casefold() for s in source], dtype=object)
    own = np.isin(folded, list(markers)) if n else np.zeros(0, dtype=bool)
    doi = np.array([bool(s) and doi_like(s) for s in source], dtype=bool)
    if origin_col is not None:
        origin = np.array([s.strip().casefold() for s in text_column(table.frame[origin_col])], dtype=object)
        literature = np.isin(origin, list(LITERATURE_WORDS)) if n else np.zeros(0, dtype=bool)
    else:
        literature = (source != "") & ~own
    return Compilation(source_col, origin_col, method_col, source, np.asarray(literature, dtype=bool), np.asarray(own, dtype=bool),
                       doi, markers)


def literature_rows(table: Table) -> np.ndarray:
    """Bool per row of an analyses table: the row is compiled from a publication."""
    return compilation(table).literature


# ---------------------------------------------------------------- the references table

def column(table: Table, key: str) -> str | None:
    """The references table's column for ``key`` (``key``, ``doi``, ``citation``, ``authors``, ``year``, ``title``)."""
    if key not in SPELLINGS:
        raise KeyError(f"not a references key: {key!r}")
    if isinstance(table.spec.get(FIELD_KEYS[key]), str):
        return _named(table, FIELD_KEYS[key])
    loose: dict[str, Any] = {}
    for c in table.frame.columns:
        loose.setdefault(header_key(c), c)
    for spelling in SPELLINGS[key]:
        if spelling in loose:
            return str(loose[spelling])
    return None


@dataclass(frozen=True)
class Reference:
    """One row of the references table, as text."""

    row: int  # 0-based data row
    key: str
    doi: str  # as written
    citation: str
    authors: str
    year: str
    title: str

    @property
    def doi_bare(self) -> str | None:
        return normalise_doi(self.doi) if self.doi else None


def references(table: Table) -> list[Reference]:
    """The rows of the references table (blank rows left out)."""
    n = len(table.frame)
    cols = {k: column(table, k) for k in SPELLINGS}
    texts = {k: (np.array([s.strip() for s in text_column(table.frame[c])], dtype=object) if c is not None
                 else np.full(n, "", dtype=object)) for k, c in cols.items()}
    out = []
    for i in range(n):
        values = {k: str(texts[k][i]) for k in SPELLINGS}
        if any(values.values()):
            out.append(Reference(i, **values))
    return out


def reference_keys(table: Table) -> set[str]:
    """The keys of the references table (blank keys left out)."""
    return {r.key for r in references(table) if r.key}


@dataclass(frozen=True)
class CitedWork:
    """A work the analyses cite or the references table lists, for the package's metadata."""

    doi: str | None  # bare, normalised
    key: str | None  # the reference key, when it comes from the references table
    citation: str
    authors: str
    year: str
    title: str


def cited_works(analyses: Table | None, refs: Table | None) -> list[CitedWork]:
    """Every work of the references table, then every well-formed DOI cited directly in the analyses' source column.

    Works with the same DOI (compared without case, DOIs being
    case-insensitive: DOI Handbook 2.4) are listed once.
    """
    out: list[CitedWork] = []
    seen: set[str] = set()
    for r in references(refs) if refs is not None else []:
        bare = r.doi_bare
        if bare is not None:
            if bare.casefold() in seen:
                continue
            seen.add(bare.casefold())
        out.append(CitedWork(bare, r.key or None, r.citation, r.authors, r.year, r.title))
    if analyses is not None:
        comp = compilation(analyses)
        for s in comp.source[comp.literature & comp.doi]:
            bare = normalise_doi(str(s)) if doi_problem(str(s)) is None else None
            if bare is None or bare.casefold() in seen:
                continue
            seen.add(bare.casefold())
            out.append(CitedWork(bare, None, "", "", "", ""))
    return out
