"""Human-readable files of a package: README.md, LICENSE.txt and CITATION.cff, generated from the metadata."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import yaml

from .._version import __version__
from ..model import Finding, Report
from ..reference import CREDIT_PREFIX as CHART_CREDIT_PREFIX
from ..vocab import legend as legend_vocab
from .deposit import Deposit

if TYPE_CHECKING:
    from ..project import Table

NOT_COVERED = (
    "archivist checks the form and consistency of the data: geometry, topology, the references between "
    "layers and tables, the metadata. A clean report is not a statement that the geology is right: the checks "
    "cannot tell whether a contact is in the right place on the ground, whether a unit is correctly assigned, "
    "or whether an age or an analysis is correct. A map used for engineering, hazard or resource decisions "
    "still needs review by a qualified geologist under local rules."
)


# How laboratory readings are written and read (archivist.package.tables.analyte_readings).
READINGS_SENTENCE = (
    "Laboratory readings that are not plain numbers (`<0.01`, `< 5 ppm`, `bdl`, `tr`, `n.d.`, `-`) are kept in the CSV "
    "exactly as the laboratory wrote them; where an analyte column holds nothing else, its Table Schema lists them under "
    "`missingValues` with their meaning (and under `censoring` with their kind and detection limit), so a Table Schema "
    "reader such as frictionless reads them as missing and every other cell as a number.",
    "",
)


@dataclass(frozen=True)
class LayerFact:
    role: str
    title: str
    count: int
    geometry_type: str
    source: str
    conventions: str = ""  # how its values are to be read (structures: conventions and north reference)


# A LicenseRef- licence (the authors' own, SPDX specification annex "SPDX License Expressions") has no page on
# the SPDX licence list: say so rather than print an empty address.
NO_PUBLIC_TEXT = "with no public text at a standard address: ask the authors for its terms before reuse"


def _md(text: Any) -> str:
    """A table cell: no pipes or line breaks."""
    return " ".join(str(text).replace("|", "\\|").split())


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


MAX_LISTED = 200  # findings listed in the README; the report holds all of them


def errors_by_rule(report: Report) -> dict[str, int]:
    counts: dict[str, int] = {}
    for f in report.findings:
        if f.severity.value == "error":
            counts[f.rule] = counts.get(f.rule, 0) + 1
    return counts


def open_error_lines(report: Report, limit: int | None = None) -> list[str]:
    errors = [f for f in report.findings if f.severity.value == "error"]
    shown = errors if limit is None else errors[:limit]
    return [_finding_line(f, report) for f in shown]


def _finding_line(f: Finding, report: Report) -> str:
    where = f" [at {report.place(f)}]" if report.place(f) else ""
    return f"{f.rule}: {f.message}{where}"


def legend_rows(legend: Table | None) -> list[tuple[str, str, str, str]]:
    """(code, name, age, age range in Ma) per legend row, in legend order (columns found by :mod:`archivist.vocab.legend`)."""
    if legend is None or legend_vocab.column(legend, "unit") is None:
        return []
    records = legend_vocab.records(legend)
    rows = []
    for i in legend_vocab.display_order(legend):
        r = records[i]
        lo, hi = r.get("min_age_ma", ""), r.get("max_age_ma", "")
        span = f"{lo}–{hi}" if str(lo) != "" and str(hi) != "" and str(lo) != str(hi) else str(lo or hi or "")
        rows.append((str(r["unit"]), str(r.get("name", "")), str(r.get("age", "")), span))
    return rows


def readme_text(
    deposit: Deposit,
    report: Report,
    layers: list[LayerFact],
    legend: list[tuple[str, str, str, str]],
    tables: list[tuple[str, str, int]],
    bbox: tuple[float, float, float, float] | None,
    bbox_wgs84: tuple[float, float, float, float] | None,
    notes: list[str],
    media: list[str] | tuple[str, ...] = (),
) -> str:
    """The package README: what the map is, how to use and cite it, and what was and was not checked."""
    s = report.summary
    out: list[str] = [f"# {deposit.title}", ""]
    out += [f"Version {deposit.version}. {deposit.abstract}", ""]
    if s.errors:
        out += [
            f"> **Warning: this package was made with {_plural(s.errors, 'open error')}.** "
            "`archivist check` found the problems listed below and the package was made anyway "
            "(`archivist pack --allow-errors`). Read them before reusing the data.",
            "",
            "## Open errors",
            "",
        ]
        lines = open_error_lines(report)
        out += [f"By rule: {', '.join(f'`{rule}` ({n})' for rule, n in errors_by_rule(report).items())}.", ""]
        out += [f"- {_md(line)}" for line in lines[:MAX_LISTED]]
        if len(lines) > MAX_LISTED:
            out.append(f"- ... and {len(lines) - MAX_LISTED} more: every finding is in `metadata/validation-report.json`.")
        out.append("")
    out += ["## The map", ""]
    out.append(f"- Scale: 1:{deposit.scale:,.0f}".replace(",", " "))
    out.append(f"- Coordinate reference system: {deposit.crs_label} (WKT2 in `metadata/crs.wkt`)")
    if bbox:
        out.append(f"- Extent in the map CRS: west {bbox[0]:.2f}, south {bbox[1]:.2f}, east {bbox[2]:.2f}, north {bbox[3]:.2f}")
    if bbox_wgs84:
        w, so, e, n = bbox_wgs84
        out.append(f"- Extent in WGS 84: longitude {w:.5f} to {e:.5f}, latitude {so:.5f} to {n:.5f}")
    out.append(f"- Authors: {'; '.join(a.name + (f' ({a.affiliation})' if a.affiliation else '') + (f', ORCID {a.orcid_url}' if a.orcid else '') for a in deposit.authors)}")
    if deposit.keywords:
        out.append(f"- Keywords: {', '.join(deposit.keywords)}")
    for lay in layers:
        if lay.conventions:
            out.append(f"- {_md(lay.title)}: {_md(lay.conventions)}")
    out.append("")
    if legend:
        out += ["## Units", "", "| code | name | age | age (Ma) |", "|---|---|---|---|"]
        out += [f"| {_md(c)} | {_md(n)} | {_md(a)} | {_md(r)} |" for c, n, a, r in legend]
        out.append("")
        for note in report.notes:
            if note.startswith(CHART_CREDIT_PREFIX):  # which chart the ages were checked on, with its credit
                out += [f"{note}.", ""]
    out += ["## Contents", "", "| file | what it holds |", "|---|---|"]
    out.append("| `map.gpkg` | All layers in one GeoPackage, in the map CRS: the editable master. |")
    for lay in layers:
        out.append(
            f"| `geojson/{lay.role}.geojson` | {_md(lay.title)}: {_plural(lay.count, 'feature')} ({_md(lay.geometry_type)}), "
            f"RFC 7946 GeoJSON in WGS 84 longitude/latitude; from `{_md(lay.source)}`. |"
        )
    for name, title, rows in tables:
        out.append(f"| `tables/{name}.csv` | {_md(title)}: {_plural(rows, 'row')}, UTF-8 CSV. |")
    for line in media:  # photos and field-book scans: how many, how tied to stations, where the links are
        folder = line.split("`", 2)[1] if line.count("`") >= 2 else ""
        out.append(f"| `{folder}` | {line.replace('|', '&#124;')} |")
    out += [
        "| `datapackage.json` | Frictionless Data Package descriptor: every file with its size and SHA-256, a Table Schema for every table with types, units and the keys that link the tables. |",
        "| `metadata/datacite.json` | DataCite Metadata Schema 4.5 record for the repository. |",
        "| `metadata/provenance.json` | W3C PROV-JSON: the input files with their SHA-256, the check and pack runs, the authors. |",
        "| `metadata/validation-report.json` | The `archivist check` report the package was made with. |",
        "| `metadata/crs.wkt` | The map CRS as WKT2. |",
        "| `archivist.toml` | A manifest for these files: `archivist check` runs on this folder as it is. |",
        "| `source/` | The input files exactly as handed in, byte for byte. |",
        "| `LICENSE.txt`, `CITATION.cff` | The licence, and the citation in Citation File Format. |",
        "",
        *(READINGS_SENTENCE if any(name == "analyses" for name, _, _ in tables) else ()),
        "The folder around `data/` is a BagIt bag (RFC 8493): `manifest-sha256.txt` lists the SHA-256 of every file.",
        "",
        "## How to cite",
        "",
        deposit.citation,
        "",
        "## Licence",
        "",
    ]
    for lic in deposit.licences:
        out.append(f"{lic.title} (SPDX `{lic.spdx}`), {lic.url or NO_PUBLIC_TEXT}")
    if len(deposit.licences) > 1:
        out.append(f"Licence expression: `{deposit.licence}`.")
    out += ["", "## Validation", ""]
    out.append(
        f"`archivist check` (archivist {report.version}) ran {_plural(len(report.rules_run), 'rule')} and reported "
        f"{_plural(s.errors, 'error')}, {_plural(s.warnings, 'warning')} and {_plural(s.notices, 'notice')}; "
        "the full report is `metadata/validation-report.json`."
    )
    if s.warnings or s.notices:
        out += ["", "Warnings and notices:", ""]
        others = [f for f in report.findings if f.severity.value != "error"]
        out += [f"- {f.severity.value}: {_md(_finding_line(f, report))}" for f in others[:MAX_LISTED]]
        if len(others) > MAX_LISTED:
            out.append(f"- ... and {len(others) - MAX_LISTED} more in `metadata/validation-report.json`.")
    for note in notes:
        out += ["", f"Note: {note}"]
    out += [
        "",
        "To verify the files: `sha256sum -c manifest-sha256.txt` in the folder around `data/` (or any BagIt validator), "
        "and `frictionless validate data/datapackage.json` for the tables and the links between them.",
        "",
        "## What the checks do not cover",
        "",
        NOT_COVERED,
        "",
        f"Packed by archivist {__version__} on {deposit.created.strftime('%Y-%m-%d')}.",
        "",
    ]
    return "\n".join(out)


def licence_text(deposit: Deposit) -> str:
    lines = [f"{deposit.title}, version {deposit.version}", ""]
    lines.append(f"Copyright {deposit.year} {', '.join(a.name for a in deposit.authors)}")
    lines.append("")
    lines.append(f"This data package is made available under {'the licence' if len(deposit.licences) == 1 else 'the licence expression'}:")
    lines.append("")
    if len(deposit.licences) > 1:
        lines += [f"SPDX-License-Identifier: {deposit.licence}", ""]
    for lic in deposit.licences:
        lines += [f"SPDX identifier: {lic.spdx}", f"Name: {lic.title}", f"Full text: {lic.url or NO_PUBLIC_TEXT}", ""]
    return "\n".join(lines)


def citation_cff(deposit: Deposit) -> str:
    """CITATION.cff (Citation File Format 1.2.0) for the package."""
    authors = []
    for a in deposit.authors:
        entry: dict[str, Any] = {}
        if a.family:
            entry["family-names"] = a.family
        if a.given:
            entry["given-names"] = a.given
        if a.orcid:
            entry["orcid"] = a.orcid_url
        if a.affiliation:
            entry["affiliation"] = a.affiliation
        if a.email:
            entry["email"] = a.email
        authors.append(entry)
    data: dict[str, Any] = {
        "cff-version": "1.2.0",
        "message": "If you use this map, please cite it as below.",
        "type": "dataset",
        "title": deposit.title,
        "version": deposit.version,
        "date-released": deposit.created.strftime("%Y-%m-%d"),
        "abstract": deposit.abstract,
        "authors": authors,
        "license": deposit.licence if len(deposit.licences) == 1 else [lic.spdx for lic in deposit.licences],
    }
    if deposit.keywords:
        data["keywords"] = list(deposit.keywords)
    if deposit.doi:
        data["doi"] = deposit.doi
    return yaml.safe_dump(data, sort_keys=False, allow_unicode=True, width=1000)
