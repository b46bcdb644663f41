"""Compiled analyses in the package: the references table, its keys, and the works for the DataCite record.

The analyses table may mix the team's own analyses and values compiled from
publications (:mod:`archivist.vocab.literature` decides which). In the Data
Package:

* the references table (``[tables.references]``) is a resource of its own,
  ``references``, whose primary key is its key column;
* the analyses' source column has a foreign key to it: the team's own
  markers ("this study") are listed in that field's ``missingValues`` with a
  label, so Table Schema reads them as no reference (Frictionless Table
  Schema v2: null values are not looked up), and every DOI that the analyses
  cite directly (not through a key) gets a row of its own in the packaged
  references table, keyed by the DOI as the analyses write it, so that the
  key resolves and the work is listed with the others;
* compiled rows are not the team's samples, so the key from the analyses to
  the samples table is carried by an added column, ``own_sample_id``: the
  sample id of the team's own rows, empty for compiled rows. The source
  column and every other column stay as written.

The DataCite record lists the works (:func:`related`): a work with a DOI as
a ``relatedIdentifiers`` entry (``relationType`` ``References``,
``relatedIdentifierType`` ``DOI``), a work without one as a ``relatedItems``
entry (DataCite 4.5, property 20: a related item described by its title,
creators and year when it has no identifier; ``relatedItemType`` ``Text``,
``relationType`` ``References``). A work with neither DOI nor any text to
title it cannot be described under DataCite 4.5 (``titles`` is required)
and is left out; the README of the package lists every work anyway.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from ..project import MapProject
from ..readers import text_column
from ..vocab import literature as vl
from .tables import TextTable

OWN_SAMPLE_COLUMN = "own_sample_id"
ADDED_ROW_NOTE = "cited by DOI in the analyses; row added by archivist pack"


def link(project: MapProject, tables: dict[str, TextTable]) -> None:
    """Keys between the analyses, the references and the samples tables, when the analyses hold compiled rows."""
    analyses_t = project.tables.get("analyses")
    refs_t = project.tables.get("references")
    analyses, refs = tables.get("analyses"), tables.get("references")
    key_col = vl.column(refs_t, "key") if refs_t is not None else None
    if refs is not None and key_col is not None and refs.has(key_col):
        refs.primary_key = [key_col]
    if analyses is None or analyses_t is None:
        return
    comp = vl.compilation(analyses_t)
    if not comp.any:
        return
    # the team's own samples: the key column added, the one from sample_field dropped
    sample_field = analyses_t.spec.get("sample_field")
    samples = tables.get("samples")
    analyses.foreign_keys = [fk for fk in analyses.foreign_keys if fk.get("reference", {}).get("resource") != "samples"]
    if samples is not None and samples.primary_key and analyses.has(sample_field):
        name = OWN_SAMPLE_COLUMN
        while name in analyses.frame.columns:
            name = "_" + name
        ids = analyses.frame[sample_field].astype(object)
        analyses.frame[name] = ids.where(~pd.Series(comp.literature, index=analyses.frame.index), "")
        analyses.fields.append({
            "name": name,
            "type": "string",
            "description": f"Added by archivist pack: the sample id ({sample_field}) of the team's own analyses, empty for "
                           "analyses compiled from publications, which are not samples of this map; the key to the samples table.",
        })
        analyses.foreign_keys.append({"fields": [name], "reference": {"resource": "samples", "fields": list(samples.primary_key)}})
    # the works cited
    source = comp.source_col
    if refs is None or key_col is None or source is None or not analyses.has(source) or not refs.has(key_col):
        return
    field = next(f for f in analyses.fields if f["name"] == source)
    field["type"] = "string"
    written = sorted({str(v) for v in analyses.frame[source] if str(v).strip().casefold() in comp.markers and str(v)})
    if written:
        field["missingValues"] = [{"value": "", "label": "no source: the team's own analysis"}] + [
            {"value": v, "label": "the team's own analysis (own_source)"} for v in written
        ]
    keys = set(text_column(refs.frame[key_col]))
    direct = [str(v) for v in dict.fromkeys(analyses.frame[source][comp.literature & comp.doi]) if str(v) and str(v) not in keys]
    if direct:
        doi_col = vl.column(refs_t, "doi") if refs_t is not None else None
        extra = pd.DataFrame({c: [""] * len(direct) for c in refs.frame.columns})
        extra[key_col] = direct
        if doi_col is not None and refs.has(doi_col):
            extra[doi_col] = [vl.normalise_doi(d) or d for d in direct]
        refs.frame = pd.concat([refs.frame, extra], ignore_index=True)
        refs.description += (f" The last {len(direct)} row{'s' if len(direct) > 1 else ''} ({ADDED_ROW_NOTE}): key is the DOI as "
                             "written in the analyses.")
    analyses.foreign_keys.append({"fields": [source], "reference": {"resource": "references", "fields": [key_col]}})


def related(project: MapProject) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """(relatedIdentifiers, relatedItems) entries for the works the analyses cite or the references table lists."""
    works = vl.cited_works(project.tables.get("analyses"), project.tables.get("references"))
    identifiers: list[dict[str, Any]] = []
    items: list[dict[str, Any]] = []
    for w in works:
        if w.doi:
            identifiers.append({"relatedIdentifier": w.doi, "relatedIdentifierType": "DOI", "relationType": "References"})
            continue
        title = w.title or w.citation or w.key
        if not title:
            continue
        item: dict[str, Any] = {"relatedItemType": "Text", "relationType": "References", "titles": [{"title": title}]}
        if w.authors:
            item["creators"] = [{"name": a.strip()} for a in w.authors.split(";") if a.strip()]
        year = w.year[:4]
        if year.isdigit():
            item["publicationYear"] = year
        if w.citation and w.citation != title:
            item["titles"].append({"title": w.citation, "titleType": "Other"})
        items.append(item)
    return identifiers, items
