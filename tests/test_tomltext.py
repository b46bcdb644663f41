"""The TOML emitter: what it writes reads back with the standard library's tomllib (TOML 1.0)."""

import math
import tomllib

import pytest

from archivist.tomltext import dump_toml, toml_key, toml_value


def test_manifest_shapes_round_trip():
    data = {
        "map": {
            "title": 'Map of "Quotes", back\\slash\ttab\nnewline and DEL\x7f',
            "scale": 25000,
            "ratio": 0.5,
            "keywords": ["a", "b"],
            "authors": [{"name": "A. Mapper", "orcid": "0000-0002-1825-0097"}, {"name": "B"}],
        },
        "layers": {"units": {"path": "map.gpkg", "layer": "units"}},
        "tables": {"analyses": {"path": "a.xlsx", "units": {"SiO2 (wt%)": "wt%"}}},
        "checks": {"severity": {"unit-overlap": "warning"}},
    }
    text = dump_toml(data, header="written by a test\n\nsecond line")
    assert text.startswith("# written by a test\n#\n# second line\n")
    assert tomllib.loads(text) == data


def test_keys_quoted_only_when_needed():
    assert toml_key("unit_field") == "unit_field"
    assert toml_key("SiO2 (wt%)") == '"SiO2 (wt%)"'


def test_special_floats():
    assert toml_value(math.inf) == "inf" and toml_value(-math.inf) == "-inf" and toml_value(math.nan) == "nan"
    assert tomllib.loads(f"x = {toml_value(1e-7)}")["x"] == 1e-7


def test_unwritable_value_is_refused():
    with pytest.raises(TypeError):
        toml_value(object())
