"""ORCID, DOI and IGSN syntax, and their place in the identifier-invalid rule."""

import pytest

import archivist
from archivist.identifiers import (
    doi_problem, doi_uri, igsn_problem, normalise_doi, normalise_orcid, orcid_check_digit, orcid_problem, orcid_uri,
)
from builders import BUNDLE, copy_bundle, edit_layer, edit_manifest, tiny_project, tiny_samples


# ---------------------------------------------------------------- DOI (DOI Handbook, section 2 "Numbering")

@pytest.mark.parametrize(
    "doi, bare",
    [
        # 10.1000/182 is the DOI the DOI Handbook gives itself (DOI Handbook, front matter).
        ("10.1000/182", "10.1000/182"),
        ("doi:10.1000/182", "10.1000/182"),
        ("DOI: 10.1000/182", "10.1000/182"),
        ("https://doi.org/10.1000/182", "10.1000/182"),
        ("http://dx.doi.org/10.1000/182", "10.1000/182"),
        # Registrant codes may be subdivided by further dots (DOI Handbook 2.2.2).
        ("10.1000.10/123456", "10.1000.10/123456"),
        # The suffix may hold any printable characters, including "/" and brackets (DOI Handbook 2.2.3),
        # e.g. the SICI-style suffixes of older journals.
        ("10.1000/(SICI)0000-0000(202406)1:1<1::AID-TM1>3.0.CO;2-0", "10.1000/(SICI)0000-0000(202406)1:1<1::AID-TM1>3.0.CO;2-0"),
        # In a URL the DOI is percent-encoded (DOI Handbook 2.5.2.4, URL encoding): "%2F" is the slash.
        ("10.5555%2Ftarrowmere.1", "10.5555/tarrowmere.1"),
        ("https://doi.org/10.5555%2Ftarrowmere.1", "10.5555/tarrowmere.1"),
        ("http://dx.doi.org/10.5555/tarrowmere.1", "10.5555/tarrowmere.1"),
        ("https://www.doi.org/10.5555/tarrowmere.1", "10.5555/tarrowmere.1"),
        ("info:doi/10.5555/tarrowmere.1", "10.5555/tarrowmere.1"),
    ],
)
def test_dois_in_their_usual_forms(doi, bare):
    assert doi_problem(doi) is None
    assert normalise_doi(doi) == bare


@pytest.mark.parametrize(
    "doi, why",
    [
        ("10.1000", 'no "/"'),
        ("11.1000/182", 'prefix "10."'),
        ("10.abcd/182", "registrant code"),
        ("10.1000/", "empty suffix"),
        ("10.1000/18 2", "white space"),
        ("https://doi.org/", "nothing after"),
        ("", "empty"),
    ],
)
def test_malformed_dois(doi, why):
    assert why in doi_problem(doi)
    assert normalise_doi(doi) is None


def test_doi_uri_is_the_https_resolver_form():
    # DOI Handbook 3.8.3 / DataCite display guidelines: https://doi.org/ + the DOI.
    assert doi_uri("doi:10.5555%2Ftarrowmere.1") == "https://doi.org/10.5555/tarrowmere.1"
    assert doi_uri("10.5555/tarrow mere") is None


# ---------------------------------------------------------------- ORCID (ORCID "Structure of the ORCID Identifier", ISO 7064 MOD 11-2)

@pytest.mark.parametrize(
    "orcid, bare",
    [
        # 0000-0002-1825-0097: ORCID's documented example iD.
        ("0000-0002-1825-0097", "0000-0002-1825-0097"),
        ("https://orcid.org/0000-0002-1825-0097", "0000-0002-1825-0097"),
        ("http://orcid.org/0000-0002-1825-0097", "0000-0002-1825-0097"),
        ("orcid.org/0000-0002-1825-0097", "0000-0002-1825-0097"),
        ("https://www.orcid.org/0000-0002-1825-0097/", "0000-0002-1825-0097"),
        # 0000-0002-1694-233X: the example of an iD ending in X in ORCID's checksum documentation (from memory;
        # its check character is recomputed below);
        # written with a lower-case x it is the same iD.
        ("0000-0002-1694-233x", "0000-0002-1694-233X"),
        ("orcid.org/0000-0002-1694-233x", "0000-0002-1694-233X"),
    ],
)
def test_orcid_forms_normalised(orcid, bare):
    assert orcid_problem(orcid) is None
    assert normalise_orcid(orcid) == bare
    assert orcid_uri(orcid) == f"https://orcid.org/{bare}"


def test_orcid_check_character_x():
    # ISO 7064 MOD 11-2 over 000000021694233 gives 10, written "X" (ORCID checksum documentation).
    assert orcid_check_digit("000000021694233") == "X"
    assert "check digit 7" in orcid_problem("0000-0002-1694-2337")


@pytest.mark.parametrize("orcid", ["0000-0002-1825-009", "orcid:0000-0002-1825-0097", "https://orcid.com/0000-0002-1825-0097", "0000000218250097"])
def test_orcid_shapes_refused(orcid):
    assert "is not of the form" in orcid_problem(orcid)
    assert normalise_orcid(orcid) is None


# ---------------------------------------------------------------- IGSN
# Sources: DataCite "Displaying IGSN IDs" (https://doi.org/<prefix>/<code>, igsn:<prefix>/<code>,
# igsn:<code>); DataCite IGSN FAQ ("IGSN IDs are functionally DataCite DOIs"; legacy IGSNs still
# resolve); SESAR2 "IGSN changes" (each allocating agent its own prefix; shared prefix 10.58052);
# the legacy "IGSN:" form and Handle 10273 from memory.

@pytest.mark.parametrize(
    "igsn",
    [
        "IGSN:XXTM00002",
        "igsn: XXTM00002",
        "https://igsn.org/XXTM00002",
        "http://hdl.handle.net/10273/XXTM00002",
        "10.58052/XXTM00002",  # SESAR2's shared IGSN prefix (geosamples.org, "IGSN changes")
        "https://doi.org/10.58052/XXTM00002",
        "igsn:10.58052/XXTM00002",  # DataCite's preferred short display form
        "igsn:https://doi.org/10.5555/XXTM00002",  # tagged: the writer says this DOI is an IGSN
        "igsn:AU1234",  # DataCite's suffix-only short form, example code of "Displaying IGSN IDs"
        "10.58030/kielbot0007007",  # the example of Kiel University's IGSN ID specification
    ],
)
def test_igsn_forms(igsn):
    assert igsn_problem(igsn) is None


@pytest.mark.parametrize(
    "igsn, why",
    [
        ("IGSN:", "no code"),
        ("IGSN:XX TM00002", "white space"),
        ("ISGN:XXTM00002", "neither"),
        ("IGSN:XX#TM", "character"),
        ("10.58052", "written as a DOI"),
        ("", "empty"),
        # Any DOI is not an IGSN: 10.5555 is the DOI Handbook's test prefix, no IGSN agent's.
        ("10.5555/XXTM00002", "not a known IGSN prefix"),
        ("https://doi.org/10.5555/XXTM00002", "igsn:10.5555/XXTM00002"),
        # A local sample number cannot be told from an untagged code.
        ("XXTM00002", "no igsn: tag"),
        ("TM-2024-017", "no igsn: tag"),
    ],
)
def test_malformed_igsns(igsn, why):
    assert why in igsn_problem(igsn)


# ---------------------------------------------------------------- the rule

def _identifier_findings(root):
    return [f for f in archivist.check(root, rules=["identifier-invalid"]).findings]


def test_map_doi_checked(tmp_path):
    good = tiny_project(tmp_path, name="good", manifest={"map": {"doi": "https://doi.org/10.1000/182"}})
    assert _identifier_findings(good) == []
    bad = tiny_project(tmp_path, name="bad", manifest={"map": {"doi": "10.1000 /182"}})
    (f,) = _identifier_findings(bad)
    assert "map.doi '10.1000 /182'" in f.message and f.layer == "manifest"


def _with_igsn(tmp_path, values, name):
    samples = tiny_samples()
    samples["igsn"] = values
    root = tiny_project(tmp_path, samples=samples, name=name)
    return edit_manifest(root, lambda m: m["layers"]["samples"].update(igsn_field="igsn"))


def test_sample_igsns_checked_where_declared(tmp_path):
    good = _with_igsn(tmp_path, ["IGSN:XXAB00001", ""], "good")  # a blank IGSN is not a finding
    assert _identifier_findings(good) == []
    bad = _with_igsn(tmp_path, ["IGSN:XXAB00001", "IGSN:XX AB2"], "bad")
    (f,) = _identifier_findings(bad)
    assert f.layer == "samples" and f.features == ("S-0002",)
    assert "white space" in f.message and (f.x, f.y) == (150.0, 50.0)


def test_igsn_field_not_in_the_layer_is_field_missing(tmp_path):
    root = tiny_project(tmp_path, samples=tiny_samples())
    edit_manifest(root, lambda m: m["layers"]["samples"].update(igsn_field="igsn"))
    found = [f for f in archivist.check(root, rules=["field-missing"]).findings]
    assert any("igsn_field" in f.message for f in found)
    assert _identifier_findings(root) == []


def test_igsn_scheme_without_code(tmp_path):
    root = _with_igsn(tmp_path, ["IGSN:XXAB00001", "IGSN:XXAB00002"], "num")
    edit_layer(root, "map.gpkg", "samples", lambda f: f.assign(igsn=["IGSN:XXAB00001", "IGSN:"]))
    (f,) = _identifier_findings(root)
    assert "no code" in f.message


@pytest.mark.slow
@pytest.mark.skipif(not (BUNDLE / "archivist.toml").exists(), reason="example bundle not generated")
def test_bundle_variants(tmp_path):
    clean = copy_bundle(tmp_path, "clean")
    assert _identifier_findings(clean) == []
    bad_doi = edit_manifest(copy_bundle(tmp_path, "doi"), lambda m: m["map"].update(doi="https://doi.org/11.5555/tarrowmere"))
    (f,) = _identifier_findings(bad_doi)
    assert "map.doi" in f.message and 'prefix "10."' in f.message

    def igsns(frame):
        frame["igsn"] = [f"IGSN:XXTM{i:05d}" for i in range(len(frame))]
        frame.loc[frame.index[3], "igsn"] = "IGSN:XXTM 00003"
        return frame

    root = edit_layer(copy_bundle(tmp_path, "igsn"), "map.gpkg", "samples", igsns)
    edit_manifest(root, lambda m: m["layers"]["samples"].update(igsn_field="igsn"))
    (f,) = _identifier_findings(root)
    samples = archivist.load_project(root).layers["samples"]
    assert f.features == (samples.ids[3],)
    assert (f.x, f.y) == (round(samples.geometry[3].x, 3), round(samples.geometry[3].y, 3))
