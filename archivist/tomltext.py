"""Writing TOML: the one emitter archivist uses for the manifests it writes.

``tomllib`` reads TOML but the standard library does not write it. The
shapes a manifest has are few (tables, arrays of tables, strings, numbers,
booleans, arrays, inline tables), so a small emitter is enough;
:func:`dump_toml` reads its own output back with ``tomllib`` and refuses to
return text that does not give the same data.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from typing import Any

from .errors import ArchivistError

BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def toml_key(k: str) -> str:
    """A key, quoted when it is not a bare key (``"SiO2 (wt%)"``)."""
    return k if BARE_KEY.match(k) else toml_value(k)


def toml_value(v: Any) -> str:
    """A TOML literal for a string, number, boolean, list or inline table."""
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
        # A JSON string is a TOML basic string, except that TOML also wants DEL escaped.
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007F")
    if isinstance(v, (list, tuple)) and all(not isinstance(x, dict) for x in v):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def dump_toml(data: dict[str, Any], header: str = "") -> str:
    """``data`` as TOML text, with ``header`` as leading comment lines.

    Raises ArchivistError if the text would not read back as ``data``.
    """
    lines: list[str] = [f"# {line}" if line else "#" for line in header.splitlines()]

    def table(path: list[str], body: dict[str, Any]) -> None:
        scalars = {k: v for k, v in body.items() if not isinstance(v, dict) and not (isinstance(v, list) and v and all(isinstance(x, dict) for x in v))}
        subtables = {k: v for k, v in body.items() if isinstance(v, dict)}
        arrays = {k: v for k, v in body.items() if k not in scalars and k not in subtables}
        if path and (scalars or not (subtables or arrays)):
            lines.append("")
            lines.append("[" + ".".join(toml_key(p) for p in path) + "]")
        for k, v in scalars.items():
            lines.append(f"{toml_key(k)} = {toml_value(v)}")
        for k, items in arrays.items():
            for item in items:
                lines.append("")
                lines.append("[[" + ".".join(toml_key(p) for p in [*path, k]) + "]]")
                for ik, iv in item.items():
                    lines.append(f"{toml_key(ik)} = {toml_value(iv)}")
        for k, v in subtables.items():
            table([*path, k], v)

    table([], data)
    text = "\n".join(lines).lstrip("\n") + "\n"
    if tomllib.loads(text) != data:
        raise ArchivistError("internal error: a manifest written by archivist does not read back as written")
    return text
