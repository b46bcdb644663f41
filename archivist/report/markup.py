"""Escaping and number formatting shared by the HTML page and its SVG map.

Every value that comes from data goes through :func:`escape_text` (text and
attributes) or :func:`script_json` (JSON inside a ``<script>`` element)
before it reaches the page.
"""

from __future__ import annotations

import html
import json
import re
from typing import Any


def escape_text(value: object) -> str:
    """Text or attribute value escaped for HTML (``&``, ``<``, ``>``, both quotes); None is empty."""
    return html.escape("" if value is None else str(value), quote=True)


def int_text(n: int) -> str:
    """1234567 -> '1 234 567' (narrow no-break spaces, as on a map sheet)."""
    return f"{n:,}".replace(",", "\u202f")


def num_text(v: float | None) -> str:
    """A measure for reading: 12 345, 123, 12.3, 1.23, 0.012."""
    if v is None:
        return ""
    a = abs(v)
    if a >= 1000:
        return int_text(int(round(v)))
    if a >= 100:
        return f"{v:.0f}"
    return f"{v:.3g}" if a >= 1 else f"{v:.2g}"


def plural(n: int, word: str) -> str:
    """``3 findings``, ``1 finding``: the count formatted by :func:`int_text`."""
    return f"{int_text(n)} {word}{'' if n == 1 else 's'}"


def code_text(text: str) -> str:
    """Escape a doc string and turn `backticks` into <code>."""
    return re.sub(r"`([^`]+)`", r"<code>\1</code>", escape_text(text))


def script_json(value: Any) -> str:
    """JSON safe inside a <script> element."""
    return json.dumps(value, ensure_ascii=False, separators=(",", ":")).replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
