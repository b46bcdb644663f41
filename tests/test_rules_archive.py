"""Family `archive`: integrity and reuse-readiness of an archive, judged by `archivist audit`.

Each case returns an archive (a package folder, or a bare folder of map
data); the registry test sends archive-family cases through ``archivist.audit``.
Packages are made by ``archivist.pack`` once per session and copied; a case
breaks one thing and, where the break must not show as a checksum problem,
re-bags with the ``bagit`` reference library (``archives.rebag``).
"""

import hashlib
import warnings
from pathlib import Path

import bagit
import geopandas as gpd
import pyogrio
import pytest
from shapely.geometry import Point

import archivist
from archivist.package.audit import recognise_licence
from archivist.package.bagcheck import verify_bag
from archives import edit_json, flip_byte, package, rebag
from builders import CRS, edit_table, read_layer, tiny_project


# ---------------------------------------------------------------- packages

def pkg(tmp_path):
    return package(tmp_path)


def pkg_flipped(tmp_path):
    root = package(tmp_path)
    flip_byte(root / "data" / "tables" / "legend.csv", 20)
    return root


def pkg_file_removed(tmp_path):
    root = package(tmp_path)
    (root / "data" / "tables" / "units.csv").unlink()
    return root


def pkg_file_added(tmp_path):
    root = package(tmp_path)
    (root / "data" / "notes.txt").write_text("added after packing\n")
    return root


def pkg_tag_manifest_removed(tmp_path):
    root = package(tmp_path)
    (root / "tagmanifest-sha256.txt").unlink()
    return root


def pkg_bad_oxum(tmp_path):
    root = package(tmp_path)
    info = root / "bag-info.txt"
    lines = [("Payload-Oxum: 1.1" if ln.startswith("Payload-Oxum:") else ln) for ln in info.read_text().splitlines()]
    info.write_text("\n".join(lines) + "\n")
    return root


def pkg_part_removed(tmp_path):
    root = package(tmp_path)
    (root / "data" / "CITATION.cff").unlink()
    return rebag(root)


def pkg_descriptor_escape(tmp_path):
    root = package(tmp_path)
    edit_json(root / "data" / "datapackage.json", lambda d: d["resources"][0].update(path="../bag-info.txt"))
    return rebag(root)


def pkg_foreign_key_broken(tmp_path):
    root = package(tmp_path)
    edit_table(root / "data", "tables/legend.csv", lambda f: f[f["unit"] != "B"])
    return rebag(root)


def pkg_datacite_incomplete(tmp_path):
    root = package(tmp_path)
    edit_json(root / "data" / "metadata" / "datacite.json", lambda d: d.pop("publicationYear"))
    return rebag(root)


def pkg_prov_dangling(tmp_path):
    root = package(tmp_path)

    def change(doc):
        doc.setdefault("wasDerivedFrom", {})["_:broken"] = {"prov:generatedEntity": "pkg:nothing", "prov:usedEntity": "input:nowhere"}

    edit_json(root / "data" / "metadata" / "provenance.json", change)
    return rebag(root)


# ---------------------------------------------------------------- bare folders

def bare(tmp_path, *, legend=True, licence=None, readme=None, cff=None, files=None):
    """The tiny project without its manifest: a folder of layers, optionally with loose metadata files."""
    root = tiny_project(tmp_path)
    (root / "archivist.toml").unlink()
    if not legend:
        (root / "legend.csv").unlink()
    if licence is not None:
        (root / "LICENSE.txt").write_text(licence, encoding="utf-8")
    if readme is not None:
        (root / "README.md").write_text(readme, encoding="utf-8")
    if cff is not None:
        (root / "CITATION.cff").write_text(cff, encoding="utf-8")
    for name, data in (files or {}).items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(data)
    return root


def bare_with_sums(tmp_path):
    root = bare(tmp_path)
    lines = [f"{hashlib.sha256(p.read_bytes()).hexdigest()}  {p.name}" for p in sorted(root.iterdir())]
    (root / "SHA256SUMS").write_text("\n".join(lines) + "\n")
    return root


def bare_cc_by(tmp_path):
    return bare(tmp_path, licence="This work is licensed under https://creativecommons.org/licenses/by/4.0/\n")


def bare_vague_licence(tmp_path):
    return bare(tmp_path, licence="Free to use for non-commercial research. Ask before publishing.\n")


def bare_two_licences(tmp_path):
    return bare(tmp_path, licence="CC0-1.0\n", cff="cff-version: 1.2.0\ntitle: Tiny\nlicense: CC-BY-4.0\n")


def shapefile_folder(tmp_path, with_crs):
    root = Path(tmp_path) / "shp"
    root.mkdir(parents=True)
    units = read_layer(tiny_project(Path(tmp_path) / "src"), "map.gpkg", "units")
    if not with_crs:
        units = units.set_crs(None, allow_override=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pyogrio warns that the file will have no CRS: that is the point
        pyogrio.write_dataframe(units.reset_index(drop=True), root / "units.shp")
    (root / "legend.csv").write_bytes((Path(tmp_path) / "src" / "tiny" / "legend.csv").read_bytes())
    return root


def two_crs(tmp_path):
    root = bare(tmp_path)
    pts = gpd.GeoDataFrame({"sample_id": ["S1"], "unit": ["A"]}, geometry=[Point(50, 50)], crs=CRS).to_crs("EPSG:4326")
    pyogrio.write_dataframe(pts, root / "samples.geojson", driver="GeoJSON")
    return root


def legend_short(tmp_path):
    root = bare(tmp_path)
    return edit_table(root, "legend.csv", lambda f: f[f["unit"] != "B"])


def legend_blank_age(tmp_path):
    root = bare(tmp_path)

    def change(f):
        f.loc[f["unit"] == "A", "age"] = ""

    return edit_table(root, "legend.csv", change)


def no_map(tmp_path):
    root = Path(tmp_path) / "papers"
    root.mkdir(parents=True)
    (root / "legend.csv").write_text("unit,name,age\nA,Alder Sandstone,Norian\n")
    (root / "README.md").write_text("# Scans of the field slips\n\nOnly the legend was digitised.\n")
    return root


CASES = {
    "archive-checksum-mismatch": (pkg_flipped, pkg),
    "archive-file-missing": (pkg_file_removed, pkg),
    "archive-file-unlisted": (pkg_file_added, pkg),
    "bag-structure-invalid": (pkg_bad_oxum, pkg),
    "bag-tags-unprotected": (pkg_tag_manifest_removed, pkg),
    "package-part-missing": (pkg_part_removed, pkg),
    "descriptor-invalid": (pkg_descriptor_escape, pkg),
    "package-data-invalid": (pkg_foreign_key_broken, pkg),
    "datacite-record-invalid": (pkg_datacite_incomplete, pkg),
    "provenance-record-invalid": (pkg_prov_dangling, pkg),
    "archive-checksums-absent": (bare, bare_with_sums),
    "archive-licence-missing": (bare, bare_cc_by),
    "archive-licence-unclear": (bare_vague_licence, bare_cc_by),
    "archive-crs-undeclared": (lambda t: shapefile_folder(t, False), lambda t: shapefile_folder(t, True)),
    "archive-crs-inconsistent": (two_crs, bare),
    "archive-legend-missing": (lambda t: bare(t, legend=False), bare),
    "archive-legend-incomplete": (legend_short, bare),
    "archive-authors-missing": (bare, lambda t: bare(t, cff="cff-version: 1.2.0\ntitle: Tiny\nauthors:\n  - family-names: Mapper\n    given-names: Test\n")),
    "archive-contact-missing": (bare, lambda t: bare(t, readme="# Tiny map\n\nQuestions to test.mapper@example.org.\n")),
    "archive-lineage-missing": (bare, lambda t: bare(t, readme="# Tiny map\n\n## Methods\n\nMapped in the field in 2024 at 1:10 000.\n")),
    "archive-description-missing": (bare, lambda t: bare(t, readme="# Tiny map\n\nTwo invented units mapped for the tests of archivist.\n")),
    "archive-format-closed": (lambda t: bare(t, files={"legend.xls": b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(504)}), bare),
    "archive-map-missing": (no_map, bare),
    "archive-file-unopened": (lambda t: bare(t, files={"sub/deeper/units.gpkg": b"<OGRVRTDataSource/>\n"}), bare),
}


def findings(root, rule=None, **kw):
    report = archivist.audit(root, **kw)
    return [f for f in report.findings if rule is None or f.rule == rule]


# ---------------------------------------------------------------- what the findings say

def test_flipped_byte_names_the_file(tmp_path):
    root = pkg_flipped(tmp_path)
    (f,) = findings(root, "archive-checksum-mismatch", rules=["archive-checksum-mismatch"])
    assert f.features == ("data/tables/legend.csv",) and "data/tables/legend.csv" in f.message


def test_bare_folder_reuse_findings(tmp_path):
    found = {f.rule for f in findings(bare(tmp_path), only=["archive"])}
    assert found == {
        "archive-checksums-absent", "archive-licence-missing", "archive-authors-missing", "archive-contact-missing",
        "archive-lineage-missing", "archive-description-missing",
    }


def test_shapefile_without_prj_named(tmp_path):
    (f,) = findings(shapefile_folder(tmp_path, False), "archive-crs-undeclared", rules=["archive-crs-undeclared"])
    assert f.message.startswith("units.shp declares no CRS")


def test_two_crs_named(tmp_path):
    (f,) = findings(two_crs(tmp_path), "archive-crs-inconsistent", rules=["archive-crs-inconsistent"])
    assert "EPSG:32633" in f.message and "EPSG:4326" in f.message and "samples.geojson" in f.message


def test_legend_gaps_named(tmp_path):
    (f,) = findings(legend_short(tmp_path), "archive-legend-incomplete", rules=["archive-legend-incomplete"])
    assert "B (1 polygon)" in f.message and f.severity.value == "error"
    (g,) = findings(legend_blank_age(tmp_path / "b"), "archive-legend-incomplete", rules=["archive-legend-incomplete"])
    assert "A (age)" in g.message and g.severity.value == "warning"


def test_two_licences_disagree(tmp_path):
    (f,) = findings(bare_two_licences(tmp_path), "archive-licence-unclear", rules=["archive-licence-unclear"])
    assert "CC0-1.0" in f.message and "CC-BY-4.0" in f.message


def test_closed_format_says_what_to_ask_for(tmp_path):
    root = bare(tmp_path, files={"legend.xls": b"\xd0\xcf\x11\xe0" + bytes(60)})
    (f,) = findings(root, "archive-format-closed", rules=["archive-format-closed"])
    assert f.message == "legend.xls is a legacy binary Excel workbook; ask for CSV or XLSX."


def test_rules_skip_a_plain_check(tmp_path):
    report = archivist.check(bare(tmp_path), only=["archive"])
    assert report.rules_run == () and report.findings == ()


# ---------------------------------------------------------------- against the references

@pytest.mark.parametrize(
    "text, spdx",
    [
        # identifiers and names as on the SPDX License List; URLs as published by Creative Commons and Open Data Commons
        ("CC-BY-4.0", "CC-BY-4.0"),
        ("SPDX-License-Identifier: ODbL-1.0", "ODbL-1.0"),
        ("https://creativecommons.org/licenses/by-sa/4.0/", "CC-BY-SA-4.0"),
        ("https://creativecommons.org/licenses/by-nc-nd/3.0/", "CC-BY-NC-ND-3.0"),
        ("https://creativecommons.org/publicdomain/zero/1.0/", "CC0-1.0"),
        ("Creative Commons Attribution 4.0 International", "CC-BY-4.0"),
        ("Creative Commons Attribution-ShareAlike 4.0 International Public License", "CC-BY-SA-4.0"),
        ("https://opendatacommons.org/licenses/odbl/1-0/", "ODbL-1.0"),
        ("https://spdx.org/licenses/CC-BY-4.0.html", "CC-BY-4.0"),
        ("Free for academic use only", None),
        ("Copyright the authors, all rights reserved", None),
    ],
)
def test_recognise_licence(text, spdx):
    assert recognise_licence(text) == spdx


def _bagit_named(root, kind):
    """The files the bagit reference library names for ``kind`` (mismatch, missing, unlisted), or set() when it is content."""
    bag = bagit.Bag(str(root))
    if kind in ("missing", "unlisted"):
        only_in_manifests, only_on_fs = bag.compare_manifests_with_fs()  # bagit's own comparison of manifest and payload
        return set(only_in_manifests if kind == "missing" else only_on_fs)
    try:
        bag.validate()
    except bagit.BagValidationError as exc:
        return {str(d.path) for d in exc.details or [] if getattr(d, "path", None)} or {str(exc)}
    return set()


@pytest.mark.parametrize("make, kind", [(pkg_flipped, "mismatch"), (pkg_file_removed, "missing"), (pkg_file_added, "unlisted")])
def test_bag_verification_agrees_with_bagit(make, kind, tmp_path):
    root = make(tmp_path)
    ours = {p.file for p in verify_bag(root).of(kind)}
    assert len(ours) == 1
    assert ours == _bagit_named(root, kind)


def test_intact_package_valid_for_both(tmp_path):
    root = pkg(tmp_path)
    ours = verify_bag(root)
    assert ours.problems == [] and ours.verified > 0
    assert bagit.Bag(str(root)).is_valid()


def test_sha256_of_manifest_matches_hashlib(tmp_path):
    # the payload manifest's checksums are the SHA-256 of the files (FIPS 180-4, as computed by hashlib)
    root = pkg(tmp_path)
    for line in (root / "manifest-sha256.txt").read_text().splitlines():
        digest, rel = line.split(maxsplit=1)
        assert hashlib.sha256((root / rel).read_bytes()).hexdigest() == digest


def test_datacite_record_checked_against_the_datacite_schema(tmp_path):
    from archivist.package.audit import ArchiveFacts, _check_datacite

    root = pkg(tmp_path)
    facts = ArchiveFacts(label="t", kind="package")
    _check_datacite(facts, root / "data" / "metadata" / "datacite.json", "data/metadata/datacite.json")
    assert facts.datacite_problems == [] and facts.notes == []  # the shipped DataCite 4.5 JSON Schema was used
    edit_json(root / "data" / "metadata" / "datacite.json", lambda d: d["types"].update(resourceTypeGeneral="Mapz"))
    facts = ArchiveFacts(label="t", kind="package")
    _check_datacite(facts, root / "data" / "metadata" / "datacite.json", "data/metadata/datacite.json")
    assert any("Mapz" in p for p in facts.datacite_problems)


def test_provenance_read_by_the_prov_library(tmp_path):
    # what audit accepts as PROV-JSON, the prov reference library reads
    from prov.model import ProvDocument

    root = pkg(tmp_path)
    text = (root / "data" / "metadata" / "provenance.json").read_text()
    doc = ProvDocument.deserialize(content=text, format="json")
    assert len(list(doc.get_records())) > 0
    assert not findings(root, "provenance-record-invalid", rules=["provenance-record-invalid"])


def test_foreign_key_break_is_named_by_frictionless(tmp_path):
    found = findings(pkg_foreign_key_broken(tmp_path), "package-data-invalid", rules=["package-data-invalid"])
    assert any("foreign key" in f.message and "'B'" in f.message.replace('"', "'") for f in found), [f.message for f in found]


# ---------------------------------------------------------------- tag files: blame only what is proven wrong

def _retag(root, algorithm, change=None):
    """Write tagmanifest-<algorithm>.txt over the tag files the sha256 tag manifest lists (RFC 8493, 2.2.1 format)."""
    listed = [ln.split(maxsplit=1)[1] for ln in (root / "tagmanifest-sha256.txt").read_text().splitlines() if ln.strip()]
    lines = []
    for rel in listed:
        digest = hashlib.new(algorithm, (root / rel).read_bytes()).hexdigest()
        if change and rel == change:
            digest = hashlib.new(algorithm, b"not the file").hexdigest()
        lines.append(f"{digest}  {rel}")
    (root / f"tagmanifest-{algorithm}.txt").write_text("\n".join(lines) + "\n")


def test_tampered_tag_manifest_does_not_accuse_intact_bag_info(tmp_path):
    """Only one tag manifest, and it disagrees with bag-info.txt: both are named, neither accused."""
    root = package(tmp_path)
    before = (root / "bag-info.txt").read_bytes()
    _retag(root, "sha256", change="bag-info.txt")
    assert (root / "bag-info.txt").read_bytes() == before
    hits = findings(root, "archive-checksum-mismatch", rules=["archive-checksum-mismatch"])
    (f,) = hits
    assert "either bag-info.txt or tagmanifest-sha256.txt was changed" in f.message
    assert "the file was changed" not in f.message
    # the bagit reference library also fails this bag, without telling which side changed
    with pytest.raises(bagit.BagValidationError):
        bagit.Bag(str(root)).validate()


def test_second_tag_manifest_proves_which_side_changed(tmp_path):
    """A sha512 tag manifest confirms bag-info.txt: the sha256 tag manifest is the one that was changed."""
    root = package(tmp_path)
    _retag(root, "sha512")
    _retag(root, "sha256", change="bag-info.txt")
    (f,) = findings(root, "archive-checksum-mismatch", rules=["archive-checksum-mismatch"])
    assert f.layer == "tagmanifest-sha256.txt"
    assert "tagmanifest-sha256.txt was changed or damaged after packing, not bag-info.txt" in f.message
    assert "tagmanifest-sha512.txt" in f.message


def test_deleted_tag_manifest_says_what_is_lost(tmp_path):
    root = package(tmp_path)
    (root / "tagmanifest-sha256.txt").unlink()
    bagit.Bag(str(root)).validate()  # still a valid bag for the reference library (RFC 8493 allows it)
    (f,) = findings(root, "bag-tags-unprotected", rules=["bag-tags-unprotected"])
    assert f.message.startswith("The bag has no tag manifest: nothing protects bag-info.txt, bagit.txt, manifest-sha256.txt")


def test_member_named_like_a_private_file_is_left_alone(tmp_path):
    """A member called .archivist-audit.toml is the archive's own: audited as is, never overwritten or missed."""
    root = package(tmp_path)
    (root / "data" / ".archivist-audit.toml").write_text("# the depositor's own file\n")
    rebag(root)
    report = archivist.audit(root)
    assert not [f for f in report.findings if f.rule in ("archive-file-missing", "archive-checksum-mismatch", "archive-file-unlisted")]
    assert (root / "data" / ".archivist-audit.toml").read_text() == "# the depositor's own file\n"
