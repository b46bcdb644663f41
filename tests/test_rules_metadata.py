"""Family `metadata`: manifest, files, deposit metadata, identifiers, geometry validity."""


import geopandas as gpd
import pytest
from shapely.geometry import LineString, Point, Polygon, box

import archivist
from archivist.identifiers import orcid_check_digit, orcid_problem
from archivist.vocab.licences import licence_problem
from builders import (
    CRS,
    MAJOR_HEADER,
    edit_manifest,
    edit_xlsx,
    major_rows,
    tiny_legend,
    tiny_project,
    tiny_with_analyses,
    tiny_with_measures,
    two_units,
    tree_digest,
)


def clean(tmp_path):
    return tiny_project(tmp_path)


def unknown_key(tmp_path):
    root = tiny_project(tmp_path)
    return edit_manifest(root, lambda m: m["layers"]["units"].update(unit_feild="code"))


def missing_file(tmp_path):
    root = tiny_project(tmp_path)
    return edit_manifest(root, lambda m: m["layers"]["lines"].update(path="lines.shp"))


def unreadable(tmp_path):
    root = tiny_project(tmp_path)
    (root / "broken.gpkg").write_bytes(b"this is not a geopackage")
    return edit_manifest(root, lambda m: m["layers"]["lines"].update(path="broken.gpkg"))


def latin1_legend(tmp_path):
    root = tiny_project(tmp_path)
    text = (root / "legend.csv").read_text(encoding="utf-8").replace("Alder Sandstone", "Gneiß Sandstone")
    (root / "legend.csv").write_bytes(text.encode("latin-1"))
    return root


def missing_field(tmp_path):
    root = tiny_project(tmp_path)
    return edit_manifest(root, lambda m: m["layers"]["units"].update(unit_field="code"))


def no_licence(tmp_path):
    root = tiny_project(tmp_path)
    return edit_manifest(root, lambda m: m["map"].pop("licence"))


def bad_licence(tmp_path):
    return tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}})


def bad_orcid(tmp_path):
    return tiny_project(tmp_path, manifest={"map": {"authors": [{"name": "Test Mapper", "orcid": "0000-0002-1825-0098"}]}})


def null_geometry(tmp_path):
    units = two_units()
    units.loc[len(units)] = {"unit": "A", "geometry": None}
    return tiny_project(tmp_path, units=units)


def wrong_type(tmp_path):
    units = gpd.GeoDataFrame({"unit": ["A", "B", "A"]}, geometry=[box(0, 0, 100, 100), box(100, 0, 200, 100), LineString([(0, 0), (5, 5)])], crs=CRS)
    return tiny_project(tmp_path, units=units)


def bow_tie(tmp_path):
    units = two_units()
    units.loc[1, "geometry"] = Polygon([(100, 0), (200, 100), (200, 0), (100, 100)])
    return tiny_project(tmp_path, units=units)


def merged_header(tmp_path):
    """Analyses whose header 'Major elements' is merged over the columns of SiO2 and TiO2 (B1:C1)."""
    root = tiny_with_analyses(tmp_path)

    def merge(ws):
        ws["B1"] = "Major elements"
        ws["C1"] = None
        ws.merge_cells("B1:C1")

    return edit_xlsx(root, "analyses.xlsx", "majors", merge)


def formulas_without_values(tmp_path):
    """Totals written as formulas by openpyxl, which stores formulas without computing them."""
    rows = major_rows(["S-0001", "S-0002"])
    for i, row in enumerate(rows, start=2):
        row[-1] = f"=SUM(B{i}:L{i})"
    return tiny_with_analyses(tmp_path, rows=rows)


def formula_like_legend(tmp_path):
    legend = tiny_legend()
    legend.loc[1, "name"] = '=HYPERLINK("http://example.invalid","Birch")'
    legend.loc[0, "description"] = "-12.5"  # a plain number: not reported
    return tiny_project(tmp_path, legend=legend)
def empty_units(tmp_path):
    return tiny_project(tmp_path, units=two_units().iloc[0:0])


# A corner at 1e300: its square (an area) overflows binary64, whose largest
# finite value is about 1.8e308 (IEEE 754; Python's sys.float_info.max).
FAR = 1e300


def far_corner(tmp_path):
    units = two_units()
    units.loc[len(units)] = {"unit": "A", "geometry": box(FAR, FAR, FAR * 1.000001, FAR * 1.000001)}
    return tiny_project(tmp_path, units=units)


def measured_lines(tmp_path):
    """Contacts of type LineString M: route measures in metres along each line."""
    return tiny_with_measures(tmp_path)


def units_with_ids(tmp_path, ids):
    units = two_units().assign(poly_id=ids)
    return tiny_project(tmp_path, units=units, manifest={"layers": {"units": {"id_field": "poly_id"}}})


def shared_id(tmp_path):
    return units_with_ids(tmp_path, ["P-1", " P-1"])


def unique_ids(tmp_path):
    return units_with_ids(tmp_path, ["P-1", "P-2"])


CASES = {
    "manifest-invalid": (unknown_key, clean),
    "layer-missing": (missing_file, clean),
    "layer-unreadable": (unreadable, clean),
    "table-not-utf8": (latin1_legend, clean),
    "field-missing": (missing_field, clean),
    "metadata-incomplete": (no_licence, clean),
    "licence-unknown": (bad_licence, clean),
    "identifier-invalid": (bad_orcid, clean),
    "geometry-missing": (null_geometry, clean),
    "feature-id-duplicate": (shared_id, unique_ids),
    "geometry-type-unexpected": (wrong_type, clean),
    "geometry-invalid": (bow_tie, clean),
    "column-unnamed": (merged_header, clean),
    "formula-value-missing": (formulas_without_values, clean),
    "formula-like-value": (formula_like_legend, clean),
    "layer-empty": (empty_units, clean),
    "coordinates-implausible": (far_corner, clean),
    "measures-source-only": (measured_lines, clean),
}


def findings(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def test_feature_id_duplicate_names_the_id_and_its_features_and_the_features_without_one(tmp_path):
    units = gpd.GeoDataFrame({"unit": ["A", "B", "A", "B", "A"], "poly_id": ["P-7", "P-2", "P-7 ", None, "P-2"]},
                             geometry=[box(0, 0, 40, 100), box(40, 0, 80, 100), box(80, 0, 120, 100), box(120, 0, 160, 100),
                                       box(160, 0, 200, 100)], crs=CRS)
    root = tiny_project(tmp_path, units=units, manifest={"layers": {"units": {"id_field": "poly_id"}}})
    got = [(f.features, f.message) for f in findings(root, "feature-id-duplicate")]
    assert got == [
        (("4",), "units (map.gpkg:units): 1 feature has no id in poly_id: feature 4."),
        (("P-2",), "units (map.gpkg:units): id 'P-2' in poly_id is given to 2 features (feature 2, feature 5), 120.0 m apart."),
        (("P-7",), "units (map.gpkg:units): id 'P-7' in poly_id is given to 2 features (feature 1, feature 3), 80.0 m apart."),
    ]
    # how far apart: between the centres of the 40 m x 100 m boxes, worked by hand (GEOS's point on surface of a box)
    shared = {f.features: f for f in findings(root, "feature-id-duplicate")}
    assert shared[("P-7",)].measure == pytest.approx(80.0) and shared[("P-2",)].measure == pytest.approx(120.0)
    assert all(f.wkt and f.x is not None for f in shared.values())  # where: the features' geometries
    assert findings(tiny_project(tmp_path, name="no-id-field", units=units), "feature-id-duplicate") == []  # FIDs


# ---------------------------------------------------------------- named findings, project untouched

@pytest.mark.parametrize(
    "make, rule, words",
    [
        (unknown_key, "manifest-invalid", "layers.units.unit_feild"),
        (missing_file, "layer-missing", "lines.shp"),
        (missing_field, "field-missing", "'code'"),
        (latin1_legend, "table-not-utf8", "offset"),
        (bad_orcid, "identifier-invalid", "0000-0002-1825-0098"),
        (bad_licence, "licence-unknown", "CC-BY"),
        (no_licence, "metadata-incomplete", "map.licence"),
    ],
)
def test_broken_input_gives_named_finding_and_leaves_project_alone(make, rule, words, tmp_path):
    root = make(tmp_path)
    before = tree_digest(root)
    found = findings(root, rule)
    assert len(found) == 1, [f.message for f in found]
    assert words in found[0].message
    assert tree_digest(root) == before


def test_latin1_offset_is_the_first_bad_byte(tmp_path):
    root = latin1_legend(tmp_path)
    raw = (root / "legend.csv").read_bytes()
    offset = raw.index("ß".encode("latin-1"))
    (f,) = findings(root, "table-not-utf8")
    assert f"offset {offset}" in f.message and "0xDF" in f.message


def test_bow_tie_reason_and_place(tmp_path):
    (f,) = findings(bow_tie(tmp_path), "geometry-invalid")
    assert "Self-intersection" in f.message  # GEOS's own reason text
    assert (f.x, f.y) == (150.0, 50.0)  # where the two diagonals cross
    assert f.features == ("2",)


# ---------------------------------------------------------------- ORCID against ORCID's documented examples

@pytest.mark.parametrize(
    "orcid",
    # Example iDs from ORCID's support article on the structure of the ORCID identifier
    # (which also documents the ISO 7064 MOD 11-2 check digit).
    ["0000-0002-1825-0097", "0000-0001-5109-3700", "0000-0002-1694-233X", "https://orcid.org/0000-0002-1825-0097"],
)
def test_orcid_documented_examples_are_valid(orcid):
    assert orcid_problem(orcid) is None


@pytest.mark.parametrize(
    "orcid, why",
    [
        ("0000-0002-1825-0098", "check digit"),  # last digit changed
        ("0000-0002-1852-0097", "check digit"),  # two digits transposed
        ("0000-0002-1825-009", "form"),
        ("0000-0002-1825-00X7", "form"),
    ],
)
def test_orcid_broken_examples_are_refused(orcid, why):
    assert why in orcid_problem(orcid)


def test_orcid_x_check_character():
    # 0000-0002-1694-233X: the documented example whose check value is 10, written X.
    assert orcid_check_digit("000000021694233") == "X"


# ---------------------------------------------------------------- SPDX against the SPDX licence list

@pytest.mark.parametrize("expr", ["CC-BY-4.0", "CC0-1.0", "ODbL-1.0", "CC-BY-SA-4.0", "MIT", "CC-BY-4.0 OR ODbL-1.0"])
def test_spdx_list_ids_are_known(expr):
    # Identifiers as spelt on the SPDX License List (spdx.org/licenses).
    assert licence_problem(expr) is None


@pytest.mark.parametrize("expr", ["CC-BY", "open", "Creative Commons Attribution", "CC-BY-5.0", "Copyright the authors, all rights reserved"])
def test_non_spdx_licences_are_refused(expr):
    assert licence_problem(expr) is not None


def test_clean_tiny_project_has_no_findings(tmp_path):
    report = archivist.check(clean(tmp_path), only=["metadata"])
    assert report.findings == ()


# ---------------------------------------------------------------- spreadsheets read whole, published cells

def test_merged_header_column_is_kept_named_and_reported(tmp_path):
    root = merged_header(tmp_path)
    project = archivist.load_project(root)
    frame = project.tables["analyses"].frame
    assert "Major elements, column C" in frame.columns  # TiO2's data, under the merged header
    assert frame["Major elements, column C"].tolist() == [0.28, 0.28]
    (f,) = findings(root, "column-unnamed")
    assert "sheet 'majors'" in f.message and "B1:C1" in f.message and "column C" in f.message


def test_merged_header_column_reaches_the_package(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    result = archivist.pack(merged_header(tmp_path), tmp_path / "out")
    text = (result.path / "data" / "tables" / "analyses.csv").read_text(encoding="utf-8")
    assert "Major elements, column C" in text.splitlines()[0]
    assert text.count("0.28") == 2


def test_formulas_without_values_are_named_by_cell(tmp_path):
    root = formulas_without_values(tmp_path)
    (f,) = findings(root, "formula-value-missing")
    assert f.severity.value == "error"
    assert "sheet 'majors'" in f.message and "M2:M3" in f.message  # Total is the 13th column, rows 2-3


def test_formulas_with_stored_values_are_read_as_values(tmp_path):
    # openpyxl stores no cached values, so a stored value is injected in the sheet XML as a spreadsheet program writes it:
    # <c><f>SUM(...)</f><v>100</v></c> (ECMA-376 Part 1, 18.3.1.4 c (Cell)).
    import zipfile

    root = formulas_without_values(tmp_path)
    book = root / "analyses.xlsx"
    with zipfile.ZipFile(book) as zin:
        parts = {i.filename: zin.read(i.filename) for i in zin.infolist()}
    sheet = parts["xl/worksheets/sheet1.xml"].decode()
    sheet = sheet.replace("</f><v></v>", "</f><v>100</v>").replace("</f><v/>", "</f><v>100</v>")
    if "<v>100</v>" not in sheet:
        sheet = sheet.replace("</f></c>", "</f><v>100</v></c>")
    parts["xl/worksheets/sheet1.xml"] = sheet.encode()
    with zipfile.ZipFile(book, "w") as zout:
        for name, data in parts.items():
            zout.writestr(name, data)
    assert findings(root, "formula-value-missing") == []
    assert archivist.load_project(root).tables["analyses"].frame["Total (wt%)"].tolist() == [100, 100]


@pytest.mark.parametrize("value", ["=1+2", "@SUM(A1)", "+A1", "-A1+B1", "\t=1"])
def test_formula_like_values_are_reported(value, tmp_path):
    legend = tiny_legend()
    legend.loc[0, "description"] = value
    root = tiny_project(tmp_path, legend=legend)
    (f,) = findings(root, "formula-like-value")
    assert "column 'description'" in f.message and "row 2" in f.message


@pytest.mark.parametrize("value", ["-12.5", "+3", "1e-3", "-0.5e2", "A=B", "Sandstone - red"])
def test_numbers_and_inner_signs_are_not_formula_like(value, tmp_path):
    legend = tiny_legend()
    legend.loc[0, "description"] = value
    assert findings(tiny_project(tmp_path, legend=legend), "formula-like-value") == []


def test_formula_like_values_are_kept_as_given_in_the_package(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    root = formula_like_legend(tmp_path)
    result = archivist.pack(root, tmp_path / "out")
    assert any(f.rule == "formula-like-value" for f in result.report.findings)
    assert '=HYPERLINK(""http://example.invalid"",""Birch"")' in (result.path / "data" / "tables" / "legend.csv").read_text(encoding="utf-8")


@pytest.mark.parametrize("value", ["=cmd|' /C calc'!A0", "\r=1"])  # a CR cannot travel in the test's own CSV legend
def test_formula_like_values_in_layer_attributes_name_the_feature(value, tmp_path):
    units = two_units()
    units["note"] = [value, "plain"]
    (f,) = findings(tiny_project(tmp_path, units=units), "formula-like-value")
    assert "column 'note'" in f.message and f.features == ("1",)
# ---------------------------------------------------------------- one cause, one finding

def test_empty_units_layer_is_one_error_and_the_derived_checks_keep_quiet(tmp_path):
    from builders import copy_bundle, edit_layer

    root = copy_bundle(tmp_path)
    before = archivist.check(root)
    edit_layer(root, "map.gpkg", "units", lambda frame: frame.iloc[0:0])
    report = archivist.check(root)
    empty = [f for f in report.findings if f.rule == "layer-empty"]
    assert [(f.layer, f.severity.value) for f in empty] == [("units", "error")]
    assert "map.gpkg:units" in empty[0].message
    # checks that compare other layers with the units are not run
    assert not {"line-off-boundary", "unit-gap", "legend-unused-unit"} & {f.rule for f in report.findings}
    assert not {"line-off-boundary", "unit-gap", "legend-unused-unit"} & set(report.rules_run)
    assert "line-off-boundary" in before.rules_run


def test_empty_samples_layer_is_a_warning(tmp_path):
    from builders import tiny_samples

    root = tiny_project(tmp_path, samples=tiny_samples().iloc[0:0])
    (f,) = findings(root, "layer-empty")
    assert (f.layer, f.severity.value) == ("samples", "warning")


def test_far_corner_is_one_finding_and_every_other_check_still_reports(tmp_path):
    units = two_units()
    units.loc[1, "geometry"] = Polygon([(100, 0), (200, 100), (200, 0), (100, 100)])  # a bow tie as well
    without = tiny_project(tmp_path, units=units, name="without")
    units.loc[len(units)] = {"unit": "A", "geometry": box(FAR, FAR, FAR * 1.000001, FAR * 1.000001)}
    root = tiny_project(tmp_path, units=units)
    report = archivist.check(root)
    far = [f for f in report.findings if f.rule == "coordinates-implausible"]
    assert [(f.layer, f.features) for f in far] == [("units", ("3",))]
    assert "1e+300" in far[0].message
    expected = [(f.rule, f.message) for f in archivist.check(without).findings if f.rule != "crs-outside-area-of-use"]
    found = [(f.rule, f.message) for f in report.findings if f.rule not in ("coordinates-implausible", "crs-outside-area-of-use")]
    assert {"geometry-invalid", "boundary-without-line"} <= {rule for rule, _ in expected}
    assert found == expected  # the topology and linework checks ran on the rest, with the same findings


@pytest.mark.parametrize("x", [float("inf"), float("nan")])
def test_non_finite_coordinates_are_one_finding(x, tmp_path):
    from builders import tiny_samples

    samples = tiny_samples()
    samples.loc[1, "geometry"] = Point(x, 50.0)
    root = tiny_project(tmp_path, samples=samples)
    report = archivist.check(root)
    far = [f for f in report.findings if f.rule == "coordinates-implausible"]
    assert [f.features for f in far] == [("S-0002",)] and "not a finite number" in far[0].message


def test_formula_like_cells_read_once_per_value_match_the_cell_by_cell_reading():
    import re

    import pandas as pd

    from archivist.rules.metadata import FORMULA_LEAD, PLAIN_NUMBER, _formula_like

    cells = ["=SUM(A1)", "+12", "-3.5", "Ka", None, float("nan"), 7, "=SUM(A1)", "@x", "-", "+49 30 1234", b"=b", True, "Ka", "", 1.0, "1"]
    series = pd.Series(cells * 50, dtype=object)
    # the plain reading: cell by cell, text only
    expected = [isinstance(c, str) and re.match(FORMULA_LEAD, c) is not None and re.match(PLAIN_NUMBER, c) is None for c in series]
    assert _formula_like(series).tolist() == expected
    assert any(expected) and not all(expected)
