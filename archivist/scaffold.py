"""``archivist init``: write a commented ``archivist.toml`` from what :mod:`archivist.infer` recognised.

This is the one place archivist writes into the mapper's folder, and only a
file that does not exist yet: an existing manifest is never replaced.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

from ._version import __version__
from .errors import ArchivistError
from .fsutil import create_new
from .infer import Inference, Placed, infer
from .manifest import MANIFEST_NAME
from .tomltext import toml_value

ROLE_TITLES = {
    "units": "Unit polygons",
    "lines": "Lines: contacts, faults, the map boundary",
    "contacts": "Contacts (every line's kind is contact unless kind_field says otherwise)",
    "faults": "Faults (every line's kind is fault unless kind_field says otherwise)",
    "frame": "The map frame (every line's kind is map-boundary unless kind_field says otherwise)",
    "extent": "The map's outer boundary",
    "samples": "Sample locations",
    "structures": "Orientation measurements",
    "stations": "Field stations and observations",
    "legend": "The legend",
    "analyses": "Analyses of the samples",
    "references": "Works cited by analyses compiled from publications",
}
ROLE_HINTS = {
    "units": ("polygons with a field of unit codes", ["path = \"…\"", "layer = \"…\"", "unit_field = \"…\""]),
    "lines": ("lines with a field naming their kind: contact, fault, map-boundary", ["path = \"…\"", "kind_field = \"…\""]),
    "extent": ("one polygon: the edge of the mapped area", ["path = \"…\""]),
    "samples": ("points, or a table with coordinates, with a sample id", ["path = \"…\"", "id_field = \"…\""]),
    "structures": ("points with azimuth and dip fields", ["path = \"…\"", "kind_field = \"…\"", "azimuth_field = \"…\"", "dip_field = \"…\""]),
    "stations": ("points, or tables with coordinates (a list of files: one per mapper), with a station id",
                 ["path = \"…\"", "id_field = \"…\""]),
    "legend": ("a CSV or XLSX table: unit, name, description, age, min_age_ma, max_age_ma, order, colour", ["path = \"…\""]),
    "analyses": ("a CSV or XLSX table of analyses with a sample id column", ["path = \"…\"", "sample_field = \"…\""]),
    "references": ("a CSV or XLSX table of cited works: key, doi, citation", ["path = \"…\"", "key_field = \"…\"", "doi_field = \"…\""]),
}
COMMENT_COLUMN = 40


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _kv(key: str, value: Any, comment: str | None = None) -> str:
    line = f"{key} = {toml_value(value)}"
    if comment:
        line = f"{line:<{COMMENT_COLUMN - 2}}  # {_one_line(comment)}"
    return line


def _block(inf: Inference, p: Placed, section: str) -> list[str]:
    role = p.role.split("[")[0]  # "lines[1]": an entry of [[layers.lines]]
    out = [f"# {ROLE_TITLES[role]}: {_one_line(p.source.described)}."]
    for why in p.why:
        out.append(f"# Recognised by: {_one_line(why)}.")
    crs_note = dict(inf.crs_disagree).get(p.source.label)
    if p.source.geometry and crs_note:
        if crs_note == "no CRS":
            out.append("# CONFIRM: this layer declares no CRS; `archivist check` will report it.")
        else:
            out.append(f"# CONFIRM: this layer's CRS ({_one_line(crs_note)}) differs from the map's; `archivist check` will report it.")
    for c in p.confirm:
        out.append(f"# CONFIRM: {_one_line(c)}.")
    out.append(f"[[{section}.{role}]]" if role != p.role else f"[{section}.{role}]")
    for key, value in p.spec.items():
        out.append(_kv(key, value))
    return out


def manifest_text(inf: Inference, command_path: str) -> str:
    """The commented manifest for an inference; parses to ``inf.manifest``."""
    m = inf.manifest["map"]
    lines = [
        "# archivist.toml: what each file of this map project is.",
        f"# Written by `archivist init` (archivist {__version__}) from the files in this folder:",
        "# the role of each layer and table was guessed from its geometry type, field names and values.",
        "# Confirm every line marked CONFIRM, fill in what is missing, then run",
        f"#     archivist check {command_path}",
        "# Paths are relative to this file. `archivist rules` explains every check.",
        "",
        "[map]",
        _kv("title", m["title"], "CONFIRM: the map's title (the folder's name for now)"),
        _kv("version", m["version"], "CONFIRM: the version of this release of the map"),
        _kv("scale", m["scale"], "CONFIRM: publication scale denominator; not in the data, 1:25 000 assumed"),
    ]
    if inf.crs_label:
        where = f"read from {inf.crs_from}"
        agree = "every layer shares it" if not inf.crs_disagree else "CONFIRM: not every layer shares it (see below)"
        name = f"{inf.crs_name}, " if inf.crs_name and inf.crs_label.startswith("EPSG:") else ""
        lines.append(_kv("crs", m["crs"], f"{name}{where}; {agree}"))
    else:
        lines.append("# " + _kv("crs", "EPSG:…", "CONFIRM: no layer declares a CRS; archivist needs the map's"))
    lines += [
        "# A deposit also needs these (`archivist pack` refuses to run without them; `check` warns):",
        "# " + _kv("licence", "CC-BY-4.0", "an SPDX licence identifier"),
        "# " + _kv("abstract", "What the map shows, where, and how it was made."),
        "# " + _kv("keywords", ["geological map"]),
        "# [[map.authors]]",
        "# " + _kv("name", "…"),
        "# " + _kv("orcid", "0000-0000-0000-0000", "optional; its check digit is verified"),
        "# " + _kv("affiliation", "…"),
        "",
    ]
    layer_roles = ("units", "lines", "extent", "samples", "structures", "stations")
    table_roles = ("legend", "analyses", "references")
    line_keys: list[str] = [r for r in ("contacts", "faults", "frame") if r in inf.placed]
    line_keys += [r for r in inf.placed if r.startswith("lines[")]
    if not any(r in inf.placed for r in layer_roles) and not line_keys:
        lines.append("[layers]")
    for section, roles in (("layers", layer_roles), ("tables", table_roles)):
        for role in roles:
            p = inf.placed.get(role)
            if role == "lines":  # line layers of their own ([layers.contacts]...), then [layers.lines] if any
                for key in line_keys:
                    lines += _block(inf, inf.placed[key], section)
                    lines.append("")
                if p is None and line_keys:
                    continue
            if p is not None:
                lines += _block(inf, p, section)
            else:
                hint, keys = ROLE_HINTS[role]
                lead = "CONFIRM: archivist needs unit polygons and" if role == "units" else "If the map has them,"
                lines.append(f"# {ROLE_TITLES[role]}: none recognised ({hint}). {lead} name them here:")
                lines.append(f"# [{section}.{role}]")
                lines += [f"# {k}" for k in keys]
            lines.append("")
    for kind, spec in (inf.manifest.get("files") or {}).items():
        what = "photos" if kind == "photos" else "field-book scans"
        lines += [
            f"[files.{kind}]",
            _kv("paths", spec["paths"], f"CONFIRM: the folders of {what} (found by their names); glob patterns work too"),
            "# " + _kv("name_pattern", "{station}_*.jpg", "how a file's name carries its station id, or:"),
            "# " + _kv("link_table", "photo_links.csv", "a table with a file column and a station_id column"),
            "",
        ]
    scale = m["scale"]
    lines += [
        "# Check settings; the defaults follow from the scale.",
        "# [checks]",
        "# " + _kv("tolerance", scale / 10000, f"in map units (metres for a map in degrees); the default is 0.1 mm at map scale ({scale / 10000:g} m at 1:{scale:,.0f})".replace(",", " ")),
        "# [checks.severity]" + " " * (COMMENT_COLUMN + 2 - 19) + "# per rule: \"error\", \"warning\", \"notice\" or \"off\"",
        "",
    ]
    if inf.unplaced:
        lines.append("# Not placed: archivist could not tell what these are. Add any that belong to the map above.")
        shown = inf.unplaced[:60]
        for label, why in shown:
            lines.append(f"#   {_one_line(label)}: {_one_line(why)}")
        if len(inf.unplaced) > len(shown):
            lines.append(f"#   … and {len(inf.unplaced) - len(shown)} more")
        lines.append("")
    return "\n".join(lines).rstrip("\n") + "\n"


def init_project(path: str | Path) -> Path:
    """Write a commented ``archivist.toml`` for the folder (or GeoPackage) ``path`` and return its path.

    The roles of the layers and tables are guessed from geometry types, field
    names and values; the CRS is read from the data; what could not be placed
    is listed at the end of the file. The mapper confirms the lines marked
    ``CONFIRM`` and then runs ``archivist check``.

    Raises
    ------
    ArchivistError
        ``path`` does not exist, is neither a folder nor a GeoPackage, holds
        no layer or table at all, or already has an ``archivist.toml`` (which
        is never replaced).

    Examples
    --------
    >>> init_project("field_season_2024")  # doctest: +SKIP
    PosixPath('field_season_2024/archivist.toml')
    """
    return write_manifest(path)[0]


def write_manifest(path: str | Path) -> tuple[Path, Inference]:
    """:func:`init_project`, returning the inference too (for the command line's summary)."""
    p = Path(path)
    if not p.exists():
        raise ArchivistError(f"{p}: no such folder")
    if p.is_file():
        if p.suffix.lower() != ".gpkg":
            raise ArchivistError(f"{p}: expected a project folder or a GeoPackage (.gpkg)")
        folder = p.parent
    else:
        folder = p
    target = folder / MANIFEST_NAME
    if not target.exists() and p.is_dir():
        from .batch import refuse_folder_of_projects

        refuse_folder_of_projects(p)
    if target.exists():
        raise ArchivistError(f"{target}: already exists; archivist init never replaces a manifest (edit it, or move it away first)")
    inf = infer(p)
    if not inf.placed and not any(why != "not a vector layer or a table" for _, why in inf.unplaced):
        raise ArchivistError(f"{p}: no vector layers or tables found (GeoPackage, shapefile, GeoJSON…, CSV, XLSX)")
    text = manifest_text(inf, str(folder))
    parsed = tomllib.loads(text)
    if parsed != inf.manifest:  # the comments must never change what the manifest says
        raise AssertionError("archivist init: the written manifest does not match the inference")
    create_new(target, text, exists_hint="archivist init never replaces a manifest")
    return target, inf
