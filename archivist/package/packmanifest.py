"""``data/archivist.toml``: the project's manifest pointed at the package's own files.

With it, ``archivist check`` runs on the unpacked ``data/`` folder as it is,
and the next mapper starts from a working project. Written with a small TOML
emitter for the shapes a manifest has (tables, arrays of tables, strings,
numbers, booleans, arrays); the result is read back with ``tomllib`` and
compared before it is used.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from typing import Any

from ..errors import ArchivistError
from ..project import MapProject

BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
LAYER_KEYS_DROPPED = ("path", "layer", "sheet", "x_field", "y_field", "crs")


def packaged_manifest(project: MapProject, layer_roles: list[str], table_paths: dict[str, str]) -> dict[str, Any]:
    """The manifest for the package: same ``[map]`` and ``[checks]``, paths to ``map.gpkg`` and ``tables/*.csv``."""
    m = dict(project.manifest.get("map", {}))
    out: dict[str, Any] = {"map": m, "layers": {}}
    for role in layer_roles:
        spec = {k: v for k, v in project.layers[role].spec.items() if k not in LAYER_KEYS_DROPPED}
        out["layers"][role] = {"path": "map.gpkg", "layer": role, **spec}
    tables = {}
    for role, path in table_paths.items():
        spec = {k: v for k, v in project.tables[role].spec.items() if k not in ("path", "sheet")}
        tables[role] = {"path": path, **spec}
    if tables:
        out["tables"] = tables
    checks = project.manifest.get("checks")
    if checks:
        out["checks"] = checks
    return out


def _key(k: str) -> str:
    return k if BARE_KEY.match(k) else json.dumps(k, ensure_ascii=False)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # a JSON string is a TOML basic string
    if isinstance(v, list) and all(not isinstance(x, dict) for x in v):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def dump_toml(data: dict[str, Any], header: str = "") -> str:
    lines: list[str] = [f"# {line}" if line else "#" for line in header.splitlines()]

    def table(path: list[str], body: dict[str, Any]) -> None:
        scalars = {k: v for k, v in body.items() if not isinstance(v, dict) and not (isinstance(v, list) and v and all(isinstance(x, dict) for x in v))}
        subtables = {k: v for k, v in body.items() if isinstance(v, dict)}
        arrays = {k: v for k, v in body.items() if k not in scalars and k not in subtables}
        if path and (scalars or not (subtables or arrays)):
            lines.append("")
            lines.append("[" + ".".join(_key(p) for p in path) + "]")
        for k, v in scalars.items():
            lines.append(f"{_key(k)} = {_value(v)}")
        for k, items in arrays.items():
            for item in items:
                lines.append("")
                lines.append("[[" + ".".join(_key(p) for p in [*path, k]) + "]]")
                for ik, iv in item.items():
                    lines.append(f"{_key(ik)} = {_value(iv)}")
        for k, v in subtables.items():
            table([*path, k], v)

    table([], data)
    text = "\n".join(lines).lstrip("\n") + "\n"
    if tomllib.loads(text) != data:
        raise ArchivistError("internal error: the package manifest does not read back as written")
    return text
