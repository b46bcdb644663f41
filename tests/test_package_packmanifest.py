"""The package's own manifest: written as TOML, read back by tomllib, pointing at package files."""

import tomllib

import pytest

import archivist
from archivist.package.packmanifest import dump_toml, packaged_manifest
from builders import tiny_project


def test_round_trip_of_awkward_values():
    data = {"map": {"title": 'Quote " and \\ and é\nline', "scale": 25000, "ratio": 0.5, "ok": True, "keywords": ["a", "b"],
                    "authors": [{"name": "A"}, {"name": "B", "orcid": "0000-0002-1825-0097"}]},
            "checks": {"severity": {"unit-overlap": "warning", "odd key": "off"}}}
    assert tomllib.loads(dump_toml(data, header="two\nlines")) == data


def test_unknown_value_type_refused():
    with pytest.raises(TypeError):
        dump_toml({"map": {"x": object()}})


def test_points_at_package_files(tmp_path):
    project = archivist.load_project(tiny_project(tmp_path))
    m = packaged_manifest(project, ["units", "lines"], {"legend": "tables/legend.csv"})
    assert m["layers"]["units"] == {"path": "map.gpkg", "layer": "units", "unit_field": "unit"}
    assert m["tables"]["legend"]["path"] == "tables/legend.csv"
    assert m["map"]["title"] == "Tiny test map"
