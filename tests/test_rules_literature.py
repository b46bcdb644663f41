"""Family `literature`: analyses compiled from publications, and the audit of an archive's references.

Every broken variant starts from the example bundle, whose analyses sheet
holds two rows compiled from invented publications (F09-14 citing the key
Fennick2009 of references.csv, A14-3 citing a DOI directly) beside the
team's own rows ("this study").
"""

from __future__ import annotations

import csv
import io

import pytest

import archivist
from archives import package, rebag
from builders import BUNDLE, copy_bundle, edit_manifest, edit_xlsx, xlsx_cell

pytestmark = pytest.mark.skipif(not (BUNDLE / "references.csv").exists(), reason="example bundle not generated")

KEYED, DIRECT = "F09-14", "A14-3"  # the bundle's compiled rows (example_bundle/make_bundle.py, LITERATURE)


def clean(tmp_path):
    return copy_bundle(tmp_path)


def set_cell(root, sample_id, header, value):
    return edit_xlsx(root, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, sample_id, header), "value", value))


def with_origin(tmp_path, blank_source=False):
    """The bundle with an origin column marking its compiled rows, declared as origin_field."""
    root = copy_bundle(tmp_path)

    def change(ws):
        col = ws.max_column + 1
        ws.cell(row=1, column=col, value="origin")
        for row in ws.iter_rows(min_row=2):
            ws.cell(row=row[0].row, column=col, value="literature" if row[0].value in (KEYED, DIRECT) else "own")
        if blank_source:
            xlsx_cell(ws, KEYED, "source").value = None

    edit_xlsx(root, "analyses.xlsx", "majors", change)
    return edit_manifest(root, lambda m: m["tables"]["analyses"].update(origin_field="origin"))


def source_blank(tmp_path):
    return with_origin(tmp_path, blank_source=True)


def doi_broken(tmp_path):
    return set_cell(copy_bundle(tmp_path), DIRECT, "source", "10.5555:tgs.bull.2014.12")


def key_unknown(tmp_path):
    return set_cell(copy_bundle(tmp_path), KEYED, "source", "Fennick2008")


def no_location(tmp_path):
    root = set_cell(copy_bundle(tmp_path), KEYED, "longitude", None)
    return set_cell(root, KEYED, "latitude", None)


def sign_lost(tmp_path):
    """The longitude of a compiled row written west instead of east: the classic lost (here gained) sign."""
    root = copy_bundle(tmp_path)

    def change(ws):
        cell = xlsx_cell(ws, DIRECT, "longitude")
        cell.value = -cell.value

    return edit_xlsx(root, "analyses.xlsx", "majors", change)


def no_method(tmp_path):
    return set_cell(copy_bundle(tmp_path), DIRECT, "method", None)


def _drop_reference(path, key):
    rows = list(csv.reader(io.StringIO(path.read_text(encoding="utf-8"))))
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows([r for r in rows if r and r[0] != key])
    path.write_text(buf.getvalue(), encoding="utf-8")


def pkg_bundle(tmp_path):
    return package(tmp_path, "bundle")


def pkg_reference_dropped(tmp_path):
    root = package(tmp_path, "bundle")
    _drop_reference(root / "data" / "tables" / "references.csv", "Fennick2009")
    return rebag(root)


CASES = {
    "literature-source-missing": (source_blank, with_origin),
    "literature-doi-malformed": (doi_broken, clean),
    "literature-reference-unknown": (key_unknown, clean),
    "literature-location-missing": (no_location, clean),
    "literature-outside-extent": (sign_lost, clean),
    "literature-method-missing": (no_method, clean),
    "archive-references-incomplete": (pkg_reference_dropped, pkg_bundle),
}


def found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def _row_of(root, sample_id):
    import openpyxl

    ws = openpyxl.load_workbook(root / "analyses.xlsx")["majors"]
    return next(r[0].row for r in ws.iter_rows(min_row=2) if r[0].value == sample_id)


def _letter(root, header):
    import openpyxl

    ws = openpyxl.load_workbook(root / "analyses.xlsx")["majors"]
    return next(c.column_letter for c in ws[1] if c.value == header)


# ---------------------------------------------------------------- each broken variant found at its place

def test_source_missing_names_the_cell(tmp_path):
    root = source_blank(tmp_path)
    (f,) = found(root, "literature-source-missing")
    assert f"cell {_letter(root, 'source')}{_row_of(root, KEYED)}" in f.message and KEYED in f.message
    assert f.features == (KEYED,)


def test_malformed_doi_names_the_cell_and_the_fault(tmp_path):
    root = doi_broken(tmp_path)
    (f,) = found(root, "literature-doi-malformed")
    assert f"cell {_letter(root, 'source')}{_row_of(root, DIRECT)}" in f.message
    assert 'has no "/" between prefix and suffix' in f.message


def test_malformed_doi_in_the_references_table(tmp_path):
    root = copy_bundle(tmp_path)
    path = root / "references.csv"
    path.write_text(path.read_text(encoding="utf-8").replace("10.5555/ltgs.2009.041.113", "10.5555/ltgs.2009 041.113"), encoding="utf-8")
    (f,) = found(root, "literature-doi-malformed")
    assert f.layer == "references" and "references.csv, row 2, column 'doi'" in f.message and "white space" in f.message


def test_unknown_key_names_the_cell_and_the_table(tmp_path):
    root = key_unknown(tmp_path)
    (f,) = found(root, "literature-reference-unknown")
    assert f"cell {_letter(root, 'source')}{_row_of(root, KEYED)}" in f.message
    assert "'Fennick2008' is not in references.csv" in f.message and f.features == (KEYED, "Fennick2008")


def test_key_differing_in_case_is_named(tmp_path):
    root = set_cell(copy_bundle(tmp_path), KEYED, "source", "fennick2009")
    (f,) = found(root, "literature-reference-unknown")
    assert "probably 'Fennick2009' (case differs)" in f.message


def test_key_without_references_table(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["tables"].pop("references"))
    (f,) = found(root, "literature-reference-unknown")
    assert "no references table is declared" in f.message


def test_location_missing_names_the_cell(tmp_path):
    root = no_location(tmp_path)
    (f,) = found(root, "literature-location-missing")
    assert f"cell {_letter(root, 'longitude')}{_row_of(root, KEYED)}" in f.message and "'longitude'/'latitude'" in f.message


def test_outside_extent_gives_distance_and_place(tmp_path):
    root = sign_lost(tmp_path)
    (f,) = found(root, "literature-outside-extent")
    assert f"cell {_letter(root, 'longitude')}{_row_of(root, DIRECT)}" in f.message and "west of the map extent" in f.message
    # 14.66 E to 14.66 W at 61.27 N: about 2 x 14.66 degrees of longitude x 53.6 km per degree there (pyproj Geod
    # gives 53.6 km per degree of longitude at 61.27 N on WGS 84); the UTM distance to the sheet is of that order.
    assert 1.0e6 < f.measure < 2.0e6
    assert f.x is not None and f.y is not None


def test_outside_extent_margin(tmp_path):
    """A compiled row 300 m outside the sheet: found with the default margin, not with literature_margin = 500."""
    import pyproj

    root = copy_bundle(tmp_path)
    lon, lat = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True).transform(488300.0, 6795000.0)
    set_cell(root, DIRECT, "longitude", round(lon, 6))
    set_cell(root, DIRECT, "latitude", round(lat, 6))
    (f,) = found(root, "literature-outside-extent")
    assert 299.0 < f.measure < 301.0 and "east of the map extent" in f.message
    edit_manifest(root, lambda m: m["checks"].update(literature_margin=500))
    assert not found(root, "literature-outside-extent")


def test_method_missing_is_a_notice_at_its_cell(tmp_path):
    root = no_method(tmp_path)
    (f,) = found(root, "literature-method-missing")
    assert f.severity.value == "notice" and f"cell {_letter(root, 'method')}{_row_of(root, DIRECT)}" in f.message


def test_audit_names_the_missing_keys(tmp_path):
    report = archivist.audit(pkg_reference_dropped(tmp_path), rules=["archive-references-incomplete"])
    (f,) = [f for f in report.findings if f.rule == "archive-references-incomplete"]
    assert "Fennick2009 (1 row)" in f.message and "tables/references.csv" in f.message
