"""The DataCite record against the DataCite 4.5 JSON Schema shipped by the datacite package."""

import datetime as dt

import pytest
from datacite import schema45

import archivist
from archivist.package.datacite import datacite_record
from archivist.package.deposit import read_deposit
from builders import tiny_project


def record(tmp_path, open_errors=(), **map_keys):
    root = tiny_project(tmp_path, manifest={"map": map_keys} if map_keys else None)
    deposit = read_deposit(archivist.load_project(root), dt.datetime(2026, 3, 4, tzinfo=dt.timezone.utc))
    return datacite_record(deposit, bbox_wgs84=(10.5, 0.0, 10.6, 0.1), formats=["text/csv"], sizes=["2 features in units"],
                           technical="tech", open_errors=list(open_errors))


def errors(rec):
    return [f"{list(e.path)}: {e.message}" for e in schema45.validator.iter_errors(rec)]


def test_minimal_record_validates(tmp_path):
    rec = record(tmp_path)
    assert errors(rec) == []
    assert rec["creators"][0]["nameIdentifiers"][0] == {
        "nameIdentifier": "https://orcid.org/0000-0002-1825-0097", "nameIdentifierScheme": "ORCID", "schemeUri": "https://orcid.org"}
    assert rec["publisher"] == {"name": "(:unav)"} and rec["dates"] == [{"date": "2026-03-04", "dateType": "Created"}]


@pytest.mark.parametrize("derived", ["10.5555/tiny.0", "https://example.org/maps/tiny-0.9.zip"])
def test_full_record_validates(tmp_path, derived):
    rec = record(tmp_path, open_errors=["identifier-invalid: bad ORCID"], doi="10.5555/tiny.1", publisher="Tiny Survey",
                 derived_from=derived, licence="CC-BY-4.0 OR ODbL-1.0")
    assert errors(rec) == []
    assert rec["doi"] == "10.5555/tiny.1" and len(rec["rightsList"]) == 2
    assert rec["relatedIdentifiers"][0]["relatedIdentifierType"] in ("DOI", "URL")
    assert any(d["descriptionType"] == "Other" and "identifier-invalid" in d["description"] for d in rec["descriptions"])


def test_the_schema_really_checks(tmp_path):
    rec = record(tmp_path)
    del rec["creators"]
    assert errors(rec)
