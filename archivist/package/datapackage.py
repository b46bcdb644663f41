"""``data/datapackage.json``: a Frictionless Data Package (v2) descriptor of everything in ``data/``.

Every file is a resource with its format, media type, size and SHA-256;
every table has a Table Schema whose foreign keys carry the links between
tables, so ``frictionless validate`` checks the links itself. What archivist
adds beyond the standard (``spatial``, ``archivist``) is described by
``schemas/package.schema.json``.
"""

from __future__ import annotations

import mimetypes
from dataclasses import dataclass, field
from pathlib import PurePosixPath
from typing import Any

from .._version import __version__
from ..model import Report
from .deposit import Deposit
from .determinism import iso

PROFILE = "https://datapackage.org/profiles/2.0/datapackage.json"
PACKAGE_PROFILE = "package.schema.json"
MAX_OPEN_ERRORS = 100  # listed in the descriptor; the check report holds all of them

# Media types: IANA registrations where there is one (GeoPackage: OGC 12-128; GeoJSON: RFC 7946;
# CSV: RFC 4180; Markdown: RFC 7763; YAML: RFC 9512; TOML: IANA 2024, from memory).
MEDIA_TYPES = {
    ".gpkg": ("gpkg", "application/geopackage+sqlite3"),
    ".geojson": ("geojson", "application/geo+json"),
    ".csv": ("csv", "text/csv"),
    ".tsv": ("tsv", "text/tab-separated-values"),
    ".md": ("md", "text/markdown"),
    ".txt": ("txt", "text/plain"),
    ".wkt": ("wkt", "text/plain"),
    ".cff": ("cff", "application/yaml"),
    ".json": ("json", "application/json"),
    ".toml": ("toml", "application/toml"),
    ".xlsx": ("xlsx", "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"),
    ".xlsm": ("xlsm", "application/vnd.ms-excel.sheet.macroEnabled.12"),
    ".shp": ("shp", "application/octet-stream"),
    ".fgb": ("fgb", "application/octet-stream"),
    ".html": ("html", "text/html"),
}
TEXT_FORMATS = {"csv", "tsv", "md", "txt", "wkt", "cff", "json", "toml", "geojson", "html"}


def media_type(path: str) -> tuple[str, str]:
    """(format, media type) of a file from its suffix."""
    suffix = PurePosixPath(path).suffix.lower()
    if suffix in MEDIA_TYPES:
        return MEDIA_TYPES[suffix]
    guess = mimetypes.guess_type(path, strict=False)[0] or "application/octet-stream"
    return (suffix.lstrip(".") or "bin"), guess


@dataclass
class ResourceInfo:
    """A file of the package as the descriptor lists it (size and hash filled in at the end)."""

    path: str  # relative to data/
    name: str
    title: str
    description: str = ""
    schema: dict[str, Any] | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def descriptor(self, sha256: str, size: int) -> dict[str, Any]:
        fmt, mt = media_type(self.path)
        out: dict[str, Any] = {
            "name": self.name,
            "path": self.path,
            "title": self.title,
            "format": fmt,
            "mediatype": mt,
            "bytes": size,
            "hash": f"sha256:{sha256}",
        }
        if self.description:
            out["description"] = self.description
        if fmt in TEXT_FORMATS:
            out["encoding"] = "utf-8"
        if self.path.startswith("source/"):
            out["type"] = "file"  # the originals as handed in: described, hashed, not parsed
        elif fmt == "json":
            out["type"] = "json"
        if self.schema is not None:
            out["type"] = "table"
            out["schema"] = self.schema
            out["dialect"] = {"delimiter": ",", "lineTerminator": "\n", "header": True}
        out.update(self.extra)
        return out


def contributor(author) -> dict[str, Any]:
    out: dict[str, Any] = {"title": author.name, "roles": ["author"] + ([author.role] if author.role and author.role != "author" else [])}
    if author.given:
        out["givenName"] = author.given
    if author.family:
        out["familyName"] = author.family
    if author.orcid:
        out["path"] = author.orcid_url
    if author.email:
        out["email"] = author.email
    if author.affiliation:
        out["organization"] = author.affiliation
    return out


def validation_summary(report: Report, report_path: str) -> dict[str, Any]:
    errors = [f for f in report.findings if f.severity.value == "error"]
    by_rule: dict[str, int] = {}
    for f in errors:
        by_rule[f.rule] = by_rule.get(f.rule, 0) + 1
    return {
        "tool": f"archivist {report.version}",
        "report": report_path,
        "errors": report.summary.errors,
        "warnings": report.summary.warnings,
        "notices": report.summary.notices,
        "rules_run": len(report.rules_run),
        "packed_with_errors": bool(errors),
        "open_errors_by_rule": dict(sorted(by_rule.items())),
        "open_errors": [
            {"rule": f.rule, "layer": f.layer, "features": list(f.features), "message": f.message}
            for f in errors[:MAX_OPEN_ERRORS]
        ],
    }


def descriptor(
    deposit: Deposit,
    resources: list[dict[str, Any]],
    sources: list[dict[str, str]],
    spatial: dict[str, Any],
    validation: dict[str, Any],
) -> dict[str, Any]:
    out: dict[str, Any] = {
        "$schema": PROFILE,
        "name": deposit.name,
        "title": deposit.title,
        "description": deposit.abstract,
        "version": deposit.version,
        "created": iso(deposit.created),
        "licenses": [lic.to_datapackage() for lic in deposit.licences],
        "contributors": [contributor(a) for a in deposit.authors],
        "keywords": list(deposit.keywords),
        "sources": sources,
        "spatial": spatial,
        "archivist": {"version": __version__, "profile": PACKAGE_PROFILE, "validation": validation},
        "resources": resources,
    }
    if deposit.doi:
        out["id"] = f"https://doi.org/{deposit.doi}"
        out["homepage"] = out["id"]
    return out
