"""The legend's columns: which header holds the unit code, the name, the ages, the colour.

A legend table has one row per map unit. Each thing archivist reads from it
(a *key*: ``unit``, ``name``, ``description``, ``age``, ``min_age_ma``,
``max_age_ma``, ``colour``, ``order``, ``lithology``, ``kind``) is found in
this order:

1. the column the manifest names with the key's ``*_field`` entry under
   ``[tables.legend]`` (``unit_field``, ``name_field``, ``colour_field``...),
   (a difference of case is forgiven); when that column is not in the table
   the key is absent (the loader reports the missing field);
2. else the first header that, compared without regard to case, spaces,
   underscores, hyphens and brackets, is one of the spellings in
   :data:`SPELLINGS` (``Code``, ``CODE``, ``Unit name``, ``Unit_Name``,
   ``Colour``, ``Color``, ``Min age (Ma)``, ``Base age``...);
3. else the first header that is one of them written without separators
   (``UnitName``, ``MinAgeMa``).

The header row is the first non-empty row, ``[tables.legend] header_row``,
or the one row near the top whose cells name the unit code and another key
(:func:`header_test`) when a title stands above the table.

The spellings are those mappers commonly give legend columns (common
practice); they are a convenience, the ``*_field`` keys are the contract.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..model import Hit
from ..readers import as_text

if TYPE_CHECKING:
    from ..project import Table

# key -> header spellings, normalised by :func:`header_key` (common practice).
SPELLINGS: dict[str, tuple[str, ...]] = {
    "unit": ("unit", "code", "unit_code", "unitcode", "map_unit", "mapunit", "map_unit_code", "unit_symbol", "symbol", "unit_id",
             "map_symbol", "map_code", "legend_code", "unit_abbreviation", "abbreviation"),
    "name": ("name", "unit_name", "unitname", "title", "unit_title", "map_unit_name", "legend_name", "full_name", "long_name",
             "formation", "formation_name"),
    "description": ("description", "unit_description", "descr", "desc", "legend_description", "legend_text",
                    "lithological_description", "lithology_description"),
    "age": ("age", "unit_age", "age_name", "geological_age", "geologic_age", "chronostratigraphic_age", "stratigraphic_age",
            "chronostratigraphy", "period", "epoch", "stage"),
    "min_age_ma": ("min_age_ma", "min_age", "minimum_age_ma", "minimum_age", "age_min_ma", "age_min", "youngest_age_ma",
                   "youngest_age", "min_ma", "top_age_ma", "top_age", "age_top_ma", "age_top"),
    "max_age_ma": ("max_age_ma", "max_age", "maximum_age_ma", "maximum_age", "age_max_ma", "age_max", "oldest_age_ma",
                   "oldest_age", "max_ma", "base_age_ma", "base_age", "age_base_ma", "age_base"),
    "colour": ("colour", "color", "unit_colour", "unit_color", "colour_hex", "color_hex", "hex_colour", "hex_color", "fill_colour",
               "fill_color", "colour_code", "color_code", "hex", "hex_code", "map_colour", "map_color", "legend_colour",
               "legend_color"),
    "order": ("order", "legend_order", "sort_order", "sequence", "position", "legend_position", "display_order", "legend_sequence"),
    "lithology": ("lithology", "lith", "rock_type", "main_lithology", "dominant_lithology", "main_rock_type", "lithologies"),
    "kind": ("kind", "unit_kind", "unit_type", "kind_of_unit", "unit_class", "unit_category", "type", "category"),
}
KEYS = tuple(SPELLINGS)
# key -> the manifest entry under [tables.legend] that names its column.
FIELD_KEYS: dict[str, str] = {
    "unit": "unit_field",
    "name": "name_field",
    "description": "description_field",
    "age": "age_field",
    "min_age_ma": "min_age_field",
    "max_age_ma": "max_age_field",
    "colour": "colour_field",
    "order": "order_field",
    "lithology": "lithology_field",
    "kind": "kind_field",
}
REQUIRED = ("unit", "name", "description", "age")
_NOT_WORD = re.compile(r"[^0-9a-z]+")


def header_key(header: Any) -> str:
    """A header compared loosely: case folded, every run of spaces, ``_``, ``-`` and brackets one ``_``."""
    return _NOT_WORD.sub("_", str(header).strip().casefold()).strip("_")


def column(table: Table, key: str) -> str | None:
    """The legend column that holds ``key``, or None when the table has none."""
    if key not in SPELLINGS:
        raise KeyError(f"not a legend key: {key!r}")
    named = table.spec.get(FIELD_KEYS[key])
    columns = list(table.frame.columns)
    if isinstance(named, str):  # as the mapper wrote it; a difference of case or edge spaces is forgiven
        folded = {str(c).strip().casefold(): c for c in columns}
        return named if named in columns else folded.get(named.strip().casefold())
    loose: dict[str, Any] = {}
    compact: dict[str, Any] = {}  # without separators: "UnitName", "MinAgeMa"
    for c in columns:
        loose.setdefault(header_key(c), c)
        compact.setdefault(header_key(c).replace("_", ""), c)
    for spelling in SPELLINGS[key]:
        if spelling in loose:
            return loose[spelling]
    for spelling in SPELLINGS[key]:
        if spelling.replace("_", "") in compact:
            return compact[spelling.replace("_", "")]
    return None


def header_test(spec: dict[str, Any]):
    """A test for a legend's header row: two of its cells name legend keys (by a ``*_field`` of ``spec``
    or a usual spelling), one of them the unit code. A title above the table passes it only when it is
    made of such names."""
    named = {str(v).strip().casefold(): k for k, v in spec.items() if k in FIELD_KEYS.values() and isinstance(v, str)}
    by_key = {FIELD_KEYS[k]: k for k in KEYS}
    spelled = {s: k for k, spellings in SPELLINGS.items() for s in spellings}

    def test(cells) -> bool:
        keys = set()
        for c in cells:
            if not isinstance(c, str) or not c.strip():
                continue
            field_key = named.get(c.strip().casefold())
            key = by_key[field_key] if field_key else spelled.get(header_key(c))
            if key:
                keys.add(key)
        return "unit" in keys and len(keys) >= 2

    return test


def columns(table: Table) -> dict[str, str | None]:
    """Every legend key and its column (None when absent)."""
    return {key: column(table, key) for key in KEYS}


def wanted(table: Table, key: str) -> str:
    """How a missing column for ``key`` is named to the mapper: the manifest's name for it, else the key."""
    named = table.spec.get(FIELD_KEYS[key])
    return named if isinstance(named, str) else key


def cells(table: Table, key: str) -> np.ndarray | None:
    """A legend column as stripped text (None when the column is absent)."""
    col = column(table, key)
    if col is None:
        return None
    return np.array([as_text(v).strip() for v in table.frame[col].to_numpy(dtype=object)], dtype=object)


def records(table: Table) -> list[dict[str, Any]]:
    """Per legend row, the raw cell of every key the table has, keyed by the key (``colour``, ``name``...)."""
    found = {k: c for k, c in columns(table).items() if c is not None}
    frame = table.frame
    values = {k: frame[c].to_numpy(dtype=object) for k, c in found.items()}
    return [{k: values[k][i] for k in found} for i in range(len(frame))]


def display_order(table: Table) -> np.ndarray:
    """Row positions in legend order: by the ``order`` column as a number (blank or unreadable last), else as written."""
    n = len(table.frame)
    col = column(table, "order")
    if col is None:
        return np.arange(n)
    order = pd.to_numeric(table.frame[col], errors="coerce").to_numpy(dtype=float)
    return np.lexsort((np.arange(n), np.where(np.isnan(order), 0.0, order), np.isnan(order)))


def unfound_unit(table: Table) -> Hit | None:
    """A ``field-missing`` hit when no column of the legend holds the unit code and the manifest names none.

    A column the manifest names but the table lacks is reported by the
    loader, like every other ``*_field``.
    """
    if FIELD_KEYS["unit"] in table.spec or column(table, "unit") is not None:
        return None
    have = ", ".join(map(str, table.frame.columns))
    return Hit(
        f"tables.{table.role}: column 'unit' (unit_field) is not in '{table.source}' (columns: {have}).",
        layer=table.role,
        rule="field-missing",
    )
