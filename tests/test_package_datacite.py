"""The DataCite record against the DataCite 4.5 JSON Schema: the datacite package's and the copy shipped in schemas/."""

import datetime as dt
import json
import uuid
from pathlib import Path

import jsonschema
import pytest
from datacite import schema45

import archivist
from archivist.package.datacite import datacite_record, earlier_authors, package_urn
from archivist.package.deposit import read_deposit
from builders import tiny_project

SHIPPED = json.loads((Path(__file__).parents[1] / "schemas" / "datacite-v4.5.json").read_text(encoding="utf-8"))


def record(tmp_path, open_errors=(), earlier=None, **map_keys):
    root = tiny_project(tmp_path, manifest={"map": map_keys} if map_keys else None)
    deposit = read_deposit(archivist.load_project(root), dt.datetime(2026, 3, 4, tzinfo=dt.timezone.utc))
    return datacite_record(deposit, bbox_wgs84=(10.5, 0.0, 10.6, 0.1), formats=["text/csv"], sizes=["2 features in units"],
                           technical="tech", open_errors=list(open_errors), earlier=earlier)


def errors(rec):
    found = [f"{list(e.path)}: {e.message}" for e in schema45.validator.iter_errors(rec)]
    shipped = jsonschema.Draft4Validator(SHIPPED) if "draft-04" in SHIPPED.get("$schema", "") else jsonschema.validators.validator_for(SHIPPED)(SHIPPED)
    return found + [f"shipped {list(e.path)}: {e.message}" for e in shipped.iter_errors(rec)]


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
    # No earlier authors known: IsDerivedFrom, true of a remap and of a new version alike.
    assert rec["relatedIdentifiers"][0]["relationType"] == "IsDerivedFrom"
    assert "alternateIdentifiers" not in rec  # the DOI identifies it
    assert any(d["descriptionType"] == "Other" and "identifier-invalid" in d["description"] for d in rec["descriptions"])


def test_the_schema_really_checks(tmp_path):
    rec = record(tmp_path)
    del rec["creators"]
    assert errors(rec)


# ---------------------------------------------------------------- identifiers

def test_record_without_doi_has_a_uuid_urn(tmp_path):
    rec = record(tmp_path)
    assert errors(rec) == [] and "doi" not in rec
    (alt,) = rec["alternateIdentifiers"]
    # RFC 4122: a name-based (SHA-1) UUID is version 5, written urn:uuid:<8-4-4-4-12 hex>.
    assert alt["alternateIdentifierType"] == "URN"
    parsed = uuid.UUID(alt["alternateIdentifier"].removeprefix("urn:uuid:"))
    assert alt["alternateIdentifier"].startswith("urn:uuid:") and parsed.version == 5
    assert record(tmp_path / "again")["alternateIdentifiers"] == rec["alternateIdentifiers"]  # same inputs, same URN


@pytest.mark.parametrize("written", ["https://doi.org/10.5555/tiny.1", "doi:10.5555%2Ftiny.1", "http://dx.doi.org/10.5555/tiny.1"])
def test_doi_forms_normalised_in_the_record(tmp_path, written):
    # DOI Handbook 2.2 / URL encoding: the bare DOI is 10.5555/tiny.1; the shipped schema's doi pattern checks it.
    rec = record(tmp_path, doi=written)
    assert errors(rec) == []
    assert (rec["doi"], rec["prefix"], rec["suffix"]) == ("10.5555/tiny.1", "10.5555", "tiny.1")


def test_orcid_forms_normalised_in_the_record(tmp_path):
    # ORCID: the canonical iD is the https URI, check character upper case (0000-0002-1694-233X, see test_identifiers).
    root = tiny_project(tmp_path)
    from builders import edit_manifest

    edit_manifest(root, lambda m: m["map"].update(authors=[{"name": "Test Mapper", "orcid": "orcid.org/0000-0002-1694-233x"}]))
    deposit = read_deposit(archivist.load_project(root), dt.datetime(2026, 3, 4, tzinfo=dt.timezone.utc))
    rec = datacite_record(deposit, bbox_wgs84=None, formats=[], sizes=[], technical="t", open_errors=[])
    assert rec["creators"][0]["nameIdentifiers"][0]["nameIdentifier"] == "https://orcid.org/0000-0002-1694-233X"
    assert errors(rec) == []


# ---------------------------------------------------------------- licences

def test_or_stays_a_choice(tmp_path):
    rec = record(tmp_path, licence="CC-BY-4.0 OR ODbL-1.0")
    assert errors(rec) == []
    assert [r["rightsIdentifier"] for r in rec["rightsList"]] == ["CC-BY-4.0", "ODbL-1.0"]
    (text,) = [d["description"] for d in rec["descriptions"] if d["description"].startswith("Licence:")]
    assert "may use the data under 'CC-BY-4.0' or under 'ODbL-1.0'" in text


def test_and_is_not_a_choice(tmp_path):
    rec = record(tmp_path, licence="CC-BY-4.0 AND ODbL-1.0")
    assert not [d for d in rec["descriptions"] if d["description"].startswith("Licence:")]


def test_licence_ref_in_the_record(tmp_path):
    rec = record(tmp_path, licence="LicenseRef-tarrowmere-field-data")
    assert errors(rec) == []
    assert rec["rightsList"] == [{"rights": "LicenseRef-tarrowmere-field-data (a licence of the authors' own, not on the SPDX licence list)"}]


# ---------------------------------------------------------------- relation to the earlier package
# DataCite Metadata Schema 4.5, relationType: IsNewVersionOf (a new edition), IsDerivedFrom (B is a source of A).

SAME = (("Test Mapper", "0000-0002-1825-0097"),)


@pytest.mark.parametrize(
    "earlier, relation",
    [
        (SAME, "IsNewVersionOf"),
        ((("Mapper, Test", None),), "IsNewVersionOf"),  # matched by name when the earlier record has no ORCID
        ((("Other Geologist", None),), "IsDerivedFrom"),  # a remap of someone else's map
        ((("Test Mapper", "0000-0002-1694-233X"),), "IsDerivedFrom"),  # same name, another ORCID: another person
        (SAME + (("Other Geologist", None),), "IsDerivedFrom"),  # an earlier author dropped
        ((), "IsDerivedFrom"),
        (None, "IsDerivedFrom"),  # earlier authors unknown
    ],
)
def test_relation_by_authors(tmp_path, earlier, relation):
    rec = record(tmp_path, derived_from="tiny-0.9.0; https://doi.org/10.5555/tiny.0", earlier=earlier)
    assert errors(rec) == []
    assert rec["relatedIdentifiers"] == [{"relatedIdentifier": "10.5555/tiny.0", "relatedIdentifierType": "DOI", "relationType": relation}]


def test_earlier_authors_read_from_the_unpack_mark(tmp_path):
    (tmp_path / ".archivist-unpack.json").write_text(json.dumps(
        {"kind": "archivist unpack record", "authors": [{"name": "Test Mapper", "orcid": "https://orcid.org/0000-0002-1825-0097"}]}))
    assert earlier_authors(tmp_path) == (("Test Mapper", "0000-0002-1825-0097"),)
    assert earlier_authors(tmp_path / "nowhere") is None
    (tmp_path / ".archivist-unpack.json").write_text("{not json")
    assert earlier_authors(tmp_path) is None


def test_pack_unpack_pack_new_version_and_remap(tmp_path):
    from builders import edit_manifest

    src = tiny_project(tmp_path / "src", manifest={"map": {"doi": "10.5555/tiny.1"}})
    (tmp_path / "out").mkdir()
    first = archivist.pack(src, tmp_path / "out")
    archivist.unpack(first.path, tmp_path / "same")
    archivist.unpack(first.path, tmp_path / "other")
    edit_manifest(tmp_path / "other", lambda m: m["map"].update(authors=[{"name": "Other Geologist"}]))

    def packed(work, out):
        (tmp_path / out).mkdir()
        result = archivist.pack(tmp_path / work, tmp_path / out)
        meta = Path(result.path) / "data" / "metadata"
        return json.loads((meta / "datacite.json").read_text()), json.loads((meta / "provenance.json").read_text())

    rec, prov = packed("same", "out-same")
    assert errors(rec) == []
    assert rec["relatedIdentifiers"] == [{"relatedIdentifier": "10.5555/tiny.1", "relatedIdentifierType": "DOI", "relationType": "IsNewVersionOf"}]
    assert "prov:Revision" in json.dumps(prov)
    rec, prov = packed("other", "out-other")
    assert rec["relatedIdentifiers"][0]["relationType"] == "IsDerivedFrom"
    assert "prov:Revision" not in json.dumps(prov)
