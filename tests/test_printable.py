"""Values from data shown on a terminal: controls and bidi overrides as visible escapes, other text as is.

References: the C0/C1 control sets and DEL are those of ECMA-48 / ISO 6429
(U+0000-U+001F, U+007F, U+0080-U+009F, Unicode's general category Cc);
the bidirectional embedding, override and isolate controls are those of
Unicode UAX #9 (U+202A-U+202E, U+2066-U+2069), flagged since the
"Trojan Source" reordering attacks (common practice).
"""

from __future__ import annotations

import json
import unicodedata

import pytest

from archivist.printable import dumps_printable, json_printable, printable

# UAX #9, table 1: explicit directional embeddings, overrides and isolates.
BIDI_CONTROLS = "\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
# ECMA-48: CR, BEL, ESC, DEL, CSI (the 8-bit C1 introducer), NEL.
SAMPLES = {"\r": "\\r", "\x07": "\\x07", "\x1b": "\\x1b", "\x7f": "\\x7f", "\x9b": "\\x9b", "\x85": "\\x85",
           "\t": "\\t", "\n": "\\n", "\u202e": "\\u202e", "\u2066": "\\u2066"}


def unsafe(text: str) -> list[str]:
    """Characters of Unicode general category Cc (controls) or a UAX #9 bidi control, found in ``text``."""
    return [c for c in text if unicodedata.category(c) == "Cc" or c in BIDI_CONTROLS]


@pytest.mark.parametrize("raw, shown", sorted(SAMPLES.items()))
def test_each_control_becomes_a_visible_escape(raw, shown):
    assert printable(f"K{raw}a") == f"K{shown}a"


def test_every_control_and_bidi_character_is_escaped():
    every = "".join(chr(c) for c in range(0x110000) if unicodedata.category(chr(c)) == "Cc") + BIDI_CONTROLS
    assert len([c for c in every if unicodedata.category(c) == "Cc"]) == 65  # 32 C0 + DEL + 32 C1 (Unicode Cc)
    out = printable(every)
    assert unsafe(out) == []
    assert out.isascii()


def test_ordinary_text_is_kept():
    text = "Grès de Vaulx – ψ-Schiefer 花崗岩 (Ka₂) ∠ 35°"
    assert printable(text) == text


def test_a_fake_clean_report_stays_on_one_visible_line():
    code = "\x1b[2J\x1b[HNo findings.\r\n0 errors"
    out = printable(code)
    assert "\n" not in out and "\x1b" not in out and "\r" not in out
    assert out == "\\x1b[2J\\x1b[HNo findings.\\r\\n0 errors"


def test_non_text_values_and_undecodable_file_names():
    assert printable(12.5) == "12.5"
    name = b"map\xff.gpkg".decode("utf-8", "surrogateescape")  # how Python reads a non-UTF-8 file name
    shown = printable(name)
    shown.encode("utf-8")  # a UTF-8 terminal can take it
    assert shown == "map\\udcff.gpkg"


def test_json_keeps_the_exact_value():
    value = "\x1b[2J\r\x07\u202eKa\u2066\x9b\x7f\u2028" + "map\udcff"
    text = dumps_printable({"unit": value})
    assert unsafe(text) == [] and "\u2028" not in text
    text.encode("utf-8")
    # RFC 8259 section 7: any character may be escaped as \uXXXX; Python's json decodes it back.
    assert json.loads(text)["unit"] == value
    assert json.loads(json_printable(json.dumps(value, ensure_ascii=False))) == value
