"""PROV-JSON read by the prov library: entities, activities, agents, derivations."""

import datetime as dt

import pytest

from prov.model import ProvDerivation, ProvDocument

import archivist
from archivist.package.deposit import read_deposit
from archivist.package.determinism import json_text
from archivist.package.provenance import FileFact, provenance
from builders import tiny_project

T0 = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)
T1 = T0 + dt.timedelta(seconds=5)


def document(tmp_path, revision=False, raw=False, **map_keys):
    root = tiny_project(tmp_path, manifest={"map": map_keys} if map_keys else None)
    deposit = read_deposit(archivist.load_project(root), T0)
    doc = provenance(
        deposit,
        [FileFact("map.gpkg", "a" * 64, 10, "units, lines"), FileFact("legend.csv", "b" * 64, 5, "legend")],
        [FileFact("map.gpkg", "c" * 64, 12, "map-gpkg")],
        "metadata/validation-report.json",
        (T0, T1),
        (T1, T1 + dt.timedelta(seconds=3)),
        0,
        revision=revision,
    )
    if raw:
        return doc
    path = tmp_path / "prov.json"
    path.write_text(json_text(doc), encoding="utf-8")
    return ProvDocument.deserialize(source=str(path), format="json")


def test_prov_reads_the_document(tmp_path):
    doc = document(tmp_path)
    derivations = [r for r in doc.get_records() if isinstance(r, ProvDerivation)]
    assert len(derivations) == 2  # the package from each input
    text = doc.get_provn()
    assert "2026-01-01T00:00:05" in text and "prov:SoftwareAgent" in text and "orcid:0000-0002-1825-0097" in text


@pytest.mark.parametrize(
    "earlier",
    ["https://doi.org/10.5555/tiny.0", "tiny-test-map-0.9.0; bag manifest sha256:" + "ab" * 32 + "; https://doi.org/10.5555/tiny.0"],
)
def test_earlier_package_is_a_revision(tmp_path, earlier):
    doc = document(tmp_path, revision=True, derived_from=earlier)
    revisions = [
        r for r in doc.get_records()
        if isinstance(r, ProvDerivation) and "prov:Revision" in str(dict((str(k), v) for k, v in r.attributes).get("prov:type"))
    ]
    assert len(revisions) == 1


def test_remap_is_a_plain_derivation(tmp_path):
    # W3C PROV-DM 5.2.2: a revision is a derivation whose result is a revised version of the original;
    # a remap of someone else's map is derived from it but is not its revision.
    doc = document(tmp_path, revision=False, derived_from="https://doi.org/10.5555/tiny.0")
    derivations = [r for r in doc.get_records() if isinstance(r, ProvDerivation)]
    assert len(derivations) == 3  # from each of two inputs and from the earlier package
    assert not [r for r in derivations if "prov:Revision" in str(dict((str(k), v) for k, v in r.attributes).get("prov:type"))]


def test_namespaces_are_urns_or_resolving_uris(tmp_path):
    # RFC 8141: a URN is "urn:" + namespace identifier + ":" + a namespace-specific string; the other
    # namespaces are ORCID's resolver and the W3C XML Schema namespace. No invented host name.
    from urllib.parse import urlsplit

    prefixes = document(tmp_path, raw=True)["prefix"]
    for name, iri in prefixes.items():
        if iri.startswith("urn:"):
            assert iri.count(":") >= 2, name
        else:
            assert urlsplit(iri).hostname in ("orcid.org", "www.w3.org"), (name, iri)
    assert prefixes["archivist"].startswith("urn:archivist:")


def test_doi_of_the_earlier_package():
    from archivist.package.provenance import doi_of

    # the form unpack writes, ending in the DOI; a percent-encoded slash (DOI Handbook, URL encoding)
    assert doi_of("tiny-0.9.0; bag manifest sha256:" + "ab" * 32 + "; https://doi.org/10.5555/tiny.0") == "10.5555/tiny.0"
    assert doi_of("https://doi.org/10.5555%2Ftiny.0") == "10.5555/tiny.0"
    assert doi_of("tiny-0.9.0; bag manifest sha256:" + "ab" * 32) is None
