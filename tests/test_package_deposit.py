"""Deposit metadata from [map]: names, authors, the keys a package cannot do without."""

import datetime as dt

import pytest

import archivist
from archivist.errors import ArchivistError
from archivist.package import PackRefused
from archivist.package.deposit import read_deposit, slug, split_name
from builders import edit_manifest, tiny_project

NOW = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)


@pytest.mark.parametrize(
    "title, name",
    [("Geological map of the Tarrowmere district", "geological-map-of-the-tarrowmere-district"),
     ("Carte géologique: Vallée d'Ëre (1:25 000)", "carte-geologique-vallee-d-ere-1-25-000"),
     ("!!!", "map")],
)
def test_slug(title, name):
    assert slug(title) == name


@pytest.mark.parametrize(
    "name, given, family",
    [("Maren Tollivast", "Maren", "Tollivast"), ("Tollivast, Maren", "Maren", "Tollivast"),
     ("de Wit, Anna Maria", "Anna Maria", "de Wit"), ("Tollivast", None, "Tollivast")],
)
def test_split_name(name, given, family):
    assert split_name(name) == (given, family)


def test_deposit_from_tiny_project(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"doi": "https://doi.org/10.5555/tiny.1", "contact": "maps@example.org"}})
    d = read_deposit(archivist.load_project(root), NOW)
    assert d.stem == "tiny-test-map-1.0.0"
    assert d.authors[0].orcid == "0000-0002-1825-0097" and d.authors[0].orcid_url == "https://orcid.org/0000-0002-1825-0097"
    assert d.doi == "10.5555/tiny.1" and d.contact_email == "maps@example.org" and d.contact_name == "Test Mapper"
    assert d.citation == "Mapper, Test (2026). Tiny test map, version 1.0.0. https://doi.org/10.5555/tiny.1"
    assert [lic.spdx for lic in d.licences] == ["CC-BY-4.0"]


def test_all_missing_keys_named_at_once(tmp_path):
    root = tiny_project(tmp_path)
    edit_manifest(root, lambda m: [m["map"].pop(k) for k in ("abstract", "licence")])
    with pytest.raises(ArchivistError) as exc:
        read_deposit(archivist.load_project(root), NOW)
    assert "map.abstract, map.licence are missing" in str(exc.value)


def test_author_without_name(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"authors": [{"name": " "}]}})
    with pytest.raises(ArchivistError, match=r"map\.authors\[0\]\.name"):
        read_deposit(archivist.load_project(root), NOW)


def test_bad_map_name(tmp_path):
    # The schema rejects the name: check reports it, and pack refuses on that error.
    root = tiny_project(tmp_path)
    edit_manifest(root, lambda m: m["map"].update(name="Tiny Map"))
    found = [f for f in archivist.check(root, rules=["manifest-invalid"]).findings]
    assert any("map.name" in f.message for f in found), [f.message for f in found]
    with pytest.raises(PackRefused):
        archivist.pack(root, tmp_path / "out")
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())
