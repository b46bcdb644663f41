"""Values from data made safe to show on a terminal.

A unit code, a legend cell, a layer or file name can hold any character.
Sent raw to a terminal, an ESC sequence can clear the screen, move the
cursor or repaint lines; a CR or BEL can overwrite or ring; a bidirectional
override can make a line read differently from what it holds (the "Trojan
Source" reordering; common practice to flag the embedding, override and
isolate controls U+202A-U+202E and U+2066-U+2069). :func:`printable`
replaces each such character with a visible escape (``\\x1b``, ``\\r``,
``\\u202e``) and keeps every other character, accents, Greek and CJK
included.

It is applied where text leaves for a terminal or a text report (the
writers, progress, error lines, command summaries), never to the data: the
JSON report keeps every value exactly as given (``json_printable`` only
swaps characters for their JSON ``\\uXXXX`` escapes, which decode to the
same string).

What it does not cover: characters that merely look alike (homoglyphs),
zero-width joiners and spaces, and the weak bidi marks (U+200E, U+200F,
U+061C) are left as they are; they cannot move the cursor or reorder text
beyond their own run.
"""

from __future__ import annotations

import json
from typing import Any

# C0 controls (U+0000-U+001F), DEL (U+007F), C1 controls (U+0080-U+009F):
# the ECMA-48 control sets (ESC, CSI, OSC, BEL, CR, ...).
_CONTROLS = [*range(0x00, 0x20), 0x7F, *range(0x80, 0xA0)]
# Unicode bidirectional embeddings/overrides and isolates (UAX #9), and the
# line and paragraph separators, which may start a new line on display.
_BIDI = [*range(0x202A, 0x202F), *range(0x2066, 0x206A)]
_SEPARATORS = [0x2028, 0x2029]
# Lone surrogates: what Python makes of file-name bytes that are not UTF-8;
# writing them to a UTF-8 stream fails, so they are shown as escapes too.
_SURROGATES = list(range(0xD800, 0xE000))

_SHORT = {0x09: "\\t", 0x0A: "\\n", 0x0D: "\\r"}

_TABLE: dict[int, str] = {}
for _cp in _CONTROLS:
    _TABLE[_cp] = _SHORT.get(_cp, f"\\x{_cp:02x}")
for _cp in _BIDI + _SEPARATORS + _SURROGATES:
    _TABLE[_cp] = f"\\u{_cp:04x}"

# What JSON text must not carry raw for a terminal's sake although JSON allows
# it (json.dumps already escapes U+0000-U+001F): DEL, C1, bidi, separators.
# Lone surrogates too: a UTF-8 stream cannot carry them raw.
_JSON_TABLE: dict[int, str] = {cp: f"\\u{cp:04x}" for cp in [0x7F, *range(0x80, 0xA0), *_BIDI, *_SEPARATORS, *_SURROGATES]}


def printable(value: Any) -> str:
    """``value`` as text with every control, bidi override/isolate and line separator shown as an escape.

    >>> printable("Ka\\x1b[2J")
    'Ka\\\\x1b[2J'
    >>> printable("Grès ψ 花崗岩")
    'Grès ψ 花崗岩'
    """
    return str(value).translate(_TABLE)


def json_printable(text: str) -> str:
    """JSON text (from ``json.dumps``) with DEL, C1 and bidi controls, line separators and lone surrogates as ``\\uXXXX``.

    These characters can only occur inside JSON strings, where ``\\uXXXX``
    is a valid escape of the same character: the document decodes to the
    same values (RFC 8259, section 7).
    """
    return text.translate(_JSON_TABLE)


def dumps_printable(data: Any, **kwargs: Any) -> str:
    """``json.dumps(data, ensure_ascii=False, **kwargs)`` made safe for a terminal by :func:`json_printable`."""
    return json_printable(json.dumps(data, ensure_ascii=False, **kwargs))
