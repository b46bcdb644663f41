"""Compiled analyses: which rows are from publications, and how the package carries their references.

Checked against outside references: the DataCite Metadata Schema 4.5 JSON
Schema shipped in schemas/datacite-v4.5.json (validated with jsonschema),
and the Frictionless Data Package / Table Schema rules as the frictionless
library applies them (foreign keys included).

The example bundle's compiled analyses carry DOIs under the prefix 10.5555.
Crossref uses that prefix as its example in its own documentation ("When you
join Crossref as a member you are issued a DOI prefix (for example 10.5555)",
Crossref community forum, "Ticket of the month July 2024: I'm a new member,
how can I register my first DOI?", community.crossref.org/t/11948), and its
staff state that 10.5555 is kept for testing, not for publications (Crossref
community forum, "Crossref test account prefixes", community.crossref.org/t/13263).
No real work can carry one of the invented DOIs.
"""

from __future__ import annotations

import csv
import io
import json
import tomllib

import jsonschema
import numpy as np
import pytest

import archivist
from archivist.manifest import schema_dir
from archivist.project import load_project
from archivist.vocab import literature as vl
from archives import package
from builders import BUNDLE, copy_bundle, edit_manifest, edit_xlsx, tiny_with_analyses, xlsx_cell

pytestmark = pytest.mark.skipif(not (BUNDLE / "references.csv").exists(), reason="example bundle not generated")

EXAMPLE_PREFIX = "10.5555"  # Crossref's example and test prefix (see the module docstring)
DATACITE = schema_dir() / "datacite-v4.5.json"  # the DataCite 4.5 JSON Schema, the reference


def datacite_validator():
    schema = json.loads(DATACITE.read_text(encoding="utf-8"))
    return jsonschema.Draft202012Validator(schema)


# ---------------------------------------------------------------- which rows are from the literature

def test_bundle_compiled_rows_and_their_invented_dois():
    project = load_project(BUNDLE)
    comp = vl.compilation(project.tables["analyses"])
    ids = project.tables["analyses"].frame["sample_id"].to_numpy(dtype=object)
    assert sorted(ids[comp.literature]) == ["A14-3", "F09-14"]
    assert comp.own.sum() == len(project.layers["samples"].frame)  # every own row says "this study"
    works = vl.cited_works(project.tables["analyses"], project.tables["references"])
    dois = [w.doi for w in works if w.doi]
    assert len(dois) == 2 and all(d.startswith(EXAMPLE_PREFIX + "/") for d in dois)
    cited = set(comp.source[comp.literature])
    assert "Fennick2009" in cited and any(s.startswith("https://doi.org/10.5555/") for s in cited)


def test_invented_references_name_no_real_people():
    rows = list(csv.DictReader(io.StringIO((BUNDLE / "references.csv").read_text(encoding="utf-8"))))
    assert [r["key"] for r in rows] == ["Fennick2009", "Quillon1932"]
    for r in rows:
        assert r["doi"] == "" or r["doi"].startswith(EXAMPLE_PREFIX + "/")
        assert "Tarrow" in r["citation"]  # the invented district or its invented bodies


def test_origin_field_decides_and_blank_is_own(tmp_path):
    rows = [["S-0001", 1, "", "own"], ["P-1", 2, "Vell2011", "literature"], ["P-2", 3, "", "Published"], ["S-0002", 4, "x", ""]]
    root = tiny_with_analyses(tmp_path, header=["sample_id", "SiO2 (wt%)", "source", "origin"], rows=rows,
                              manifest={"tables": {"analyses": {"source_field": "source", "origin_field": "origin"}}})
    comp = vl.compilation(load_project(root).tables["analyses"])
    assert comp.literature.tolist() == [False, True, True, False]


def test_own_source_marker_and_default(tmp_path):
    rows = [["S-0001", 1, "This Study"], ["S-0002", 2, "own"], ["P-1", 3, "10.5555/x"], ["S-0001", 4, ""]]
    root = tiny_with_analyses(tmp_path, header=["sample_id", "SiO2 (wt%)", "source"], rows=rows,
                              manifest={"tables": {"analyses": {"source_field": "source"}}})
    comp = vl.compilation(load_project(root).tables["analyses"])
    assert comp.literature.tolist() == [False, True, True, False]  # "own" is not a default marker: a key
    edit_manifest(root, lambda m: m["tables"]["analyses"].update(own_source=["own", "this study"]))
    comp = vl.compilation(load_project(root).tables["analyses"])
    assert comp.literature.tolist() == [False, False, True, False]


@pytest.mark.parametrize("text, doi", [
    ("10.5555/abc", True), ("doi:10.5555/abc", True), ("https://doi.org/10.5555%2Fabc", True), ("info:doi/10.5555/abc", True),
    ("10.5555", True), ("Fennick2009", False), ("Smith 10.5555", False),
])
def test_doi_or_key(text, doi):
    assert vl.doi_like(text) is doi


def test_resolver_and_percent_encoded_dois_are_well_formed(tmp_path):
    """The DOI Handbook's resolver and URL-encoded forms (section 2.5.2.4) carry a DOI: no finding."""
    root = copy_bundle(tmp_path)
    edit_xlsx(root, "analyses.xlsx", "majors",
              lambda ws: setattr(xlsx_cell(ws, "A14-3", "source"), "value", "http://dx.doi.org/10.5555%2Ftgs.bull.2014.12"))
    report = archivist.check(root, rules=["literature-doi-malformed", "literature-reference-unknown"])
    assert not report.findings


def test_compiled_rows_are_not_orphans(tmp_path):
    """Compiled rows name samples of their publications: analysis-orphan leaves them to the literature family."""
    report = archivist.check(BUNDLE, rules=["analysis-orphan", "sample-unanalysed"])
    assert not report.findings
    # without the source column declared they are the team's own rows, and match no sample
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["tables"]["analyses"].pop("source_field"))
    orphans = {f.features[0] for f in archivist.check(root, rules=["analysis-orphan"]).findings}
    assert orphans == {"F09-14", "A14-3"}


def test_no_coordinate_columns_is_one_finding(tmp_path):
    rows = [["S-0001", 1, "this study"], ["P-1", 2, "10.5555/x"], ["P-2", 3, "10.5555/y"]]
    root = tiny_with_analyses(tmp_path, header=["sample_id", "SiO2 (wt%)", "source"], rows=rows,
                              manifest={"tables": {"analyses": {"source_field": "source"}}})
    (f,) = archivist.check(root, rules=["literature-location-missing"]).findings
    assert "2 compiled analyses but no coordinate columns" in f.message
    (m,) = archivist.check(root, rules=["literature-method-missing"]).findings
    assert "method_field" in m.message


def test_map_crs_coordinates(tmp_path):
    """x_field/y_field in the map CRS place a compiled row without degrees."""
    rows = [["S-0001", 1, "this study", None, None], ["P-1", 2, "10.5555/x", 150.0, 50.0], ["P-2", 3, "10.5555/y", 5000.0, 50.0]]
    root = tiny_with_analyses(tmp_path, header=["sample_id", "SiO2 (wt%)", "source", "east", "north"], rows=rows,
                              manifest={"tables": {"analyses": {"source_field": "source", "x_field": "east", "y_field": "north"}}})
    report = archivist.check(root, rules=["literature-outside-extent", "literature-location-missing"])
    (f,) = report.findings
    assert f.rule == "literature-outside-extent" and f.features == ("P-2",) and f.measure == pytest.approx(4800.0)  # 5000 - 200


# ---------------------------------------------------------------- the package

@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    return package(tmp_path_factory.mktemp("lit"), "bundle") / "data"


def test_datacite_record_lists_the_cited_works(packed):
    record = json.loads((packed / "metadata" / "datacite.json").read_text(encoding="utf-8"))
    datacite_validator().validate(record)  # the DataCite 4.5 JSON Schema
    related = [r for r in record["relatedIdentifiers"] if r["relationType"] == "References"]
    assert {r["relatedIdentifier"] for r in related} == {"10.5555/ltgs.2009.041.113", "10.5555/tgs.bull.2014.12"}
    assert all(r["relatedIdentifierType"] == "DOI" for r in related)
    (memoir,) = record["relatedItems"]  # the reference without a DOI: a related item described by title, creator, year
    assert memoir["relationType"] == "References" and memoir["relatedItemType"] == "Text"
    assert memoir["titles"][0]["title"] == "The geology of the country around Tarrowmere" and memoir["publicationYear"] == "1932"


def test_datacite_record_without_titles_would_be_invalid():
    """Why a reference with nothing to title it is left out: DataCite 4.5 requires titles in a related item."""
    base = {"schemaVersion": "http://datacite.org/schema/kernel-4", "types": {"resourceTypeGeneral": "Dataset"},
            "creators": [{"name": "Mapper, Test"}], "titles": [{"title": "T"}], "publisher": {"name": "P"}, "publicationYear": "2026"}
    ok = {**base, "relatedItems": [{"relatedItemType": "Text", "relationType": "References", "titles": [{"title": "A memoir"}]}]}
    bad = {**base, "relatedItems": [{"relatedItemType": "Text", "relationType": "References"}]}
    validator = datacite_validator()
    assert validator.is_valid(ok) and not validator.is_valid(bad)


def test_datapackage_carries_the_references_with_keys(packed):
    from frictionless import Package, validate

    report = validate(packed / "datapackage.json")
    assert report.valid, report.flatten(["rowNumber", "fieldName", "message"])[:5]
    desc = json.loads((packed / "datapackage.json").read_text(encoding="utf-8"))
    res = {r["name"]: r for r in desc["resources"]}
    assert res["references"]["schema"]["primaryKey"] == ["key"]
    fks = res["analyses"]["schema"]["foreignKeys"]
    assert {"fields": ["source"], "reference": {"resource": "references", "fields": ["key"]}} in fks
    assert not [fk for fk in fks if fk["reference"]["resource"] == "samples"]  # compiled rows are no samples of the map
    link = res["analysis-samples"]["schema"]
    assert link["foreignKeys"] == [{"fields": ["sample_id"], "reference": {"resource": "samples", "fields": ["sample_id"]}}]
    pkg = Package(packed / "datapackage.json")
    rows = pkg.get_resource("analyses").read_rows()
    own = {r["row"]: r["sample_id"] for r in pkg.get_resource("analysis-samples").read_rows()}
    assert len(own) == len(rows) - 2 and all(rows[i - 1]["sample_id"] == sid for i, sid in own.items())
    by_id = {r["sample_id"]: r for r in rows}
    assert by_id["F09-14"]["source"] == "Fennick2009" and "own_sample_id" not in by_id["F09-14"]
    assert by_id["TM24-0002"]["source"] is None  # "this study": a missing value, labelled as the team's own
    refs = list(csv.DictReader(io.StringIO((packed / "tables" / "references.csv").read_text(encoding="utf-8"))))
    assert refs[-1]["key"] == "https://doi.org/10.5555/tgs.bull.2014.12" and refs[-1]["doi"] == "10.5555/tgs.bull.2014.12"
    manifest = tomllib.loads((packed / "archivist.toml").read_text(encoding="utf-8"))
    assert manifest["tables"]["references"]["path"] == "tables/references.csv"


def test_frictionless_finds_a_broken_reference_key(packed, tmp_path):
    """The foreign key is real: a key removed from the references table is an error for frictionless itself."""
    from frictionless import validate

    copy = tmp_path / "data"
    import shutil

    shutil.copytree(packed, copy)
    path = copy / "tables" / "references.csv"
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines(keepends=True) if not ln.startswith("Fennick2009,")]
    path.write_text("".join(lines), encoding="utf-8")
    desc = json.loads((copy / "datapackage.json").read_text(encoding="utf-8"))
    for r in desc["resources"]:
        r.pop("hash", None), r.pop("bytes", None)
    (copy / "datapackage.json").write_text(json.dumps(desc), encoding="utf-8")
    report = validate(copy / "datapackage.json")
    errors = report.flatten(["type", "note"])
    assert any(t == "foreign-key" and "Fennick2009" in n for t, n in errors), errors


def test_pack_refuses_nothing_and_checks_clean():
    report = archivist.check(BUNDLE)
    assert not report.findings, [f.message for f in report.findings]


# ---------------------------------------------------------------- init

def test_init_places_a_references_table(tmp_path):
    root = tmp_path / "p"
    root.mkdir()
    for name in ("map.gpkg", "legend.csv", "analyses.xlsx", "references.csv"):
        (root / name).write_bytes((BUNDLE / name).read_bytes())
    from archivist.infer import infer

    inf = infer(root)
    refs = inf.manifest["tables"]["references"]
    assert refs["path"] == "references.csv" and refs["key_field"] == "key" and refs["doi_field"] == "doi"
    assert inf.manifest["tables"]["analyses"]["source_field"] == "source"
    assert "references.csv" not in {u for u, _ in inf.unplaced}


def test_init_places_a_bibliography_by_its_name(tmp_path):
    """Without a DOI column, a table named like a bibliography with a key and an authors column is placed;
    the same table under another name is not (nothing else says it lists works)."""
    from archivist.infer import infer

    root = copy_bundle(tmp_path)
    (root / "archivist.toml").unlink()
    (root / "references.csv").unlink()
    (root / "bibliography.csv").write_text("ref,authors\nQ32,\"Quillon, Edric\"\n", encoding="utf-8")
    assert infer(root).manifest["tables"]["references"] == {"path": "bibliography.csv", "key_field": "ref"}
    (root / "bibliography.csv").rename(root / "people.csv")
    assert "references" not in infer(root).manifest.get("tables", {})


def test_references_keys_are_text(tmp_path):
    """Numeric reference keys stay text, so they match the analyses' source cells."""
    root = copy_bundle(tmp_path)
    (root / "references.csv").write_text("key,doi\n7,10.5555/a\n", encoding="utf-8")
    edit_xlsx(root, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, "F09-14", "source"), "value", 7))
    report = archivist.check(root, rules=["literature-reference-unknown"])
    assert not report.findings
    assert vl.reference_keys(load_project(root).tables["references"]) == {"7"}
    assert np.asarray(vl.compilation(load_project(root).tables["analyses"]).keyed).sum() == 1


def test_schema_rejects_unknown_reference_key(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["tables"]["references"].update(kee_field="key"))
    (f,) = [f for f in archivist.check(root, rules=["manifest-invalid"]).findings]
    assert "tables.references.kee_field" in f.message and "key_field" in f.message
