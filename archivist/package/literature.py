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
  the samples table is carried by a table of its own, ``analysis-samples``
  (the data row of each of the team's own analyses and its sample id, with
  a foreign key to the samples). The analyses table's cells stay as written.

The DataCite record lists the works (:func:`related`): a work with a DOI as
a ``relatedIdentifiers`` entry (``relationType`` ``References``,
``relatedIdentifierType`` ``DOI``), a work without one as a ``relatedItems``
entry (a related item described by its title, creators and year when it
has no identifier, as the shipped DataCite 4.5 JSON Schema defines it;
``relatedItemType`` ``Text``, ``relationType`` ``References``). A work with neither DOI nor any text to
title it cannot be described under DataCite 4.5 (``titles`` is required)
and is left out; the README of the package lists every work anyway.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from ..project import MapProject
from ..readers import text_column
from ..vocab import literature as vl
from .tables import TextTable, text_table

LINK_TABLE = "analysis-samples"
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
    # the team's own samples: their key lives in a table of its own, the analyses table stays as written
    sample_field = analyses_t.spec.get("sample_field")
    samples = tables.get("samples")
    analyses.foreign_keys = [fk for fk in analyses.foreign_keys if fk.get("reference", {}).get("resource") != "samples"]
    if samples is not None and samples.primary_key and analyses.has(sample_field):
        own = ~pd.Series(comp.literature, index=analyses.frame.index)
        frame = pd.DataFrame({
            "row": [int(i) + 1 for i in range(len(analyses.frame)) if own.iloc[i]],
            str(sample_field): analyses.frame[sample_field][own].astype(object).to_list(),
        })
        link_table = text_table(LINK_TABLE, frame, identifiers={str(sample_field)}, descriptions={
            "row": "Data row of the analyses table (tables/analyses.csv; 1 is the first row under the header).",
            str(sample_field): "Sample id of the team's own analysis in that row; a sample of the samples table.",
        })
        link_table.title = "Analyses of the team's own samples"
        link_table.description = (
            "Written by archivist pack: which rows of the analyses table are the team's own analyses, and of which sample. "
            "Rows compiled from publications are not samples of this map and are not listed; the analyses table stays as written.")
        link_table.foreign_keys.append({"fields": [str(sample_field)], "reference": {"resource": "samples", "fields": list(samples.primary_key)}})
        tables[LINK_TABLE] = link_table
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
