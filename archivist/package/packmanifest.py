"""``data/archivist.toml``: the project's manifest pointed at the package's own files.

With it, ``archivist check`` runs on the unpacked ``data/`` folder as it is,
and the next mapper starts from a working project. Written with
:func:`archivist.tomltext.dump_toml`, which reads its output back before use.
"""

from __future__ import annotations

from typing import Any

from ..project import MapProject
from ..tomltext import dump_toml
from ..vocab.analytes import analytes
from ..vocab.legend import column as legend_column

__all__ = ["packaged_manifest", "dump_toml"]
LAYER_KEYS_DROPPED = ("path", "layer", "sheet", "x_field", "y_field", "crs")


def packaged_manifest(project: MapProject, layer_roles: list[str], table_paths: dict[str, str]) -> dict[str, Any]:
    """The manifest for the package: same ``[map]`` and ``[checks]``, paths to ``map.gpkg`` and ``tables/*.csv``."""
    m = dict(project.manifest.get("map", {}))
    out: dict[str, Any] = {"map": m, "layers": {}}
    sources = project.sources
    for role in layer_roles:
        layer = sources[role]
        spec = {"path": "map.gpkg", "layer": role, **{k: v for k, v in layer.spec.items() if k not in LAYER_KEYS_DROPPED}}
        key = layer.key.removeprefix("layers.")
        if "[" in key:  # an entry of [[layers.lines]]: stays a list entry, under its own name
            out["layers"].setdefault(key.split("[")[0], []).append({**spec, "name": role})
        else:
            out["layers"][key] = spec
    tables = {}
    for role, path in table_paths.items():
        table = project.tables[role]
        # the packaged CSV has its header in row 1 and no units row: the units found there go to `units`
        spec = {k: v for k, v in table.spec.items() if k not in ("path", "sheet", "header_row")}
        if table.row_units:
            found_units = {a.column: a.unit_text for a in analytes(table) if a.source == "units row" and a.unit_text}
            spec["units"] = {**found_units, **(spec.get("units") or {})}
        if role == "legend" and "unit_field" not in spec:  # name the key column the checks found
            found = legend_column(project.tables[role], "unit")
            spec = {"unit_field": found, **spec} if found is not None else spec
        tables[role] = {"path": path, **spec}
    if tables:
        out["tables"] = tables
    checks = project.manifest.get("checks")
    if checks:
        out["checks"] = checks
    return out
