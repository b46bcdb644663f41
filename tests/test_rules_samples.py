"""Family `samples`: sample points, their units, and the analyses table tied to them."""

import datetime as dt

import math

import numpy as np
import pandas as pd
import pytest
import shapely
from shapely.geometry import Point

import archivist
from archivist.rules.samples import SampleIndex, probable_samples
from archivist.vocab.analytes import analytes, classify, split_header
from builders import (
    BUNDLE,
    MAJOR_HEADER,
    MAJOR_ROW,
    copy_bundle,
    edit_layer,
    edit_manifest,
    edit_xlsx,
    major_rows,
    read_layer,
    tiny_legend,
    tiny_samples,
    tiny_with_analyses,
    tree_digest,
    xlsx_cell,
)

pytestmark = pytest.mark.skipif(not (BUNDLE / "archivist.toml").exists(), reason="example bundle not generated")


def clean(tmp_path):
    return copy_bundle(tmp_path)


def _samples(root):
    return read_layer(root, "map.gpkg", "samples")


def duplicate_id(tmp_path):
    def dup(frame):
        frame.loc[frame.index[4], "sample_id"] = frame.sample_id.iloc[1]

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", dup)


def no_location(tmp_path):
    def drop(frame):
        g = frame.geometry.values.copy()
        g[2] = None
        frame.geometry = g
        return frame

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", drop)


def off_the_map(tmp_path):
    def move(frame):
        g = frame.geometry.values.copy()
        g[0] = Point(g[0].x, 6798000 + 500)  # 500 m north of the sheet's top edge
        frame.geometry = g
        return frame

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", move)


def wrong_unit(tmp_path):
    def relabel(frame):
        i = frame.index[frame.unit == "DUN"][0]
        frame.loc[i, "unit"] = "KES"

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", relabel)


def _first_id(root):
    return _samples(root).sample_id.iloc[2]  # TM24-0007 in the bundle


def mangled_id(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _first_id(root)
    prefix, number = sid.split("-")

    def change(ws):
        for row in ws.iter_rows(min_row=2):
            if row[0].value == sid:
                row[0].value = f"{prefix}-{int(number)}"  # leading zeros lost

    return edit_xlsx(root, "analyses.xlsx", "majors", change)


def row_deleted(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _first_id(root)

    def change(ws):
        for row in ws.iter_rows(min_row=2):
            if row[0].value == sid:
                ws.delete_rows(row[0].row)
                return

    return edit_xlsx(root, "analyses.xlsx", "majors", change)


def header_without_unit(tmp_path):
    def change(ws):
        for cell in ws[1]:
            if cell.value == "MnO (wt%)":
                cell.value = "MnO"

    return edit_xlsx(copy_bundle(tmp_path), "analyses.xlsx", "majors", change)


def excel_error(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _samples(root).sample_id.iloc[4]
    return edit_xlsx(root, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, sid, "MgO (wt%)"), "value", "#N/A"))


def negative_value(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _samples(root).sample_id.iloc[4]
    return edit_xlsx(root, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, sid, "P2O5 (wt%)"), "value", -0.01))


def low_total(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _samples(root).sample_id.iloc[4]
    return edit_xlsx(root, "analyses.xlsx", "majors", lambda ws: setattr(xlsx_cell(ws, sid, "Total (wt%)"), "value", 96.2))


def typo_behind_total(tmp_path):
    root = copy_bundle(tmp_path)
    sid = _samples(root).sample_id.iloc[4]

    def change(ws):
        cell = xlsx_cell(ws, sid, "SiO2 (wt%)")
        cell.value = round(cell.value / 10, 2)  # a decimal point typed one place off; the Total is unchanged

    return edit_xlsx(root, "analyses.xlsx", "majors", change)


CASES = {
    "sample-duplicate-id": (duplicate_id, clean),
    "sample-missing-location": (no_location, clean),
    "sample-outside-extent": (off_the_map, clean),
    "sample-unit-mismatch": (wrong_unit, clean),
    "analysis-orphan": (mangled_id, clean),
    "sample-unanalysed": (row_deleted, clean),
    "analysis-unit-undeclared": (header_without_unit, clean),
    "analysis-value-unreadable": (excel_error, clean),
    "analysis-negative-value": (negative_value, clean),
    "analysis-total-out-of-range": (low_total, clean),
    "analysis-total-disagrees": (typo_behind_total, clean),
}


def found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def _xlsx_row(root, sid):
    frame = pd.read_excel(root / "analyses.xlsx", sheet_name="majors", dtype=object)
    return int(frame.index[frame.sample_id == sid][0]) + 2


def test_clean_bundle_gives_no_sample_findings(tmp_path):
    root = clean(tmp_path)
    before = tree_digest(root)
    assert archivist.check(root, only=["samples"]).findings == ()
    assert tree_digest(root) == before


# ---------------------------------------------------------------- samples

def test_duplicate_id_names_features_and_distance(tmp_path):
    root = duplicate_id(tmp_path)
    (f,) = found(root, "sample-duplicate-id")
    s = _samples(root)
    sid = s.sample_id.iloc[1]
    a, b = s.geometry.iloc[1], s.geometry.iloc[4]
    assert f.features == (sid,) and f"feature {s.index[1]}" in f.message and f"feature {s.index[4]}" in f.message
    assert f.measure == pytest.approx(a.distance(b), abs=1e-3)  # GEOS distance through shapely


def test_ids_differing_only_in_case_or_spaces_are_duplicates(tmp_path):
    samples = tiny_samples(ids=("S-0001", " s-0001"))
    (f,) = found(tiny_with_analyses(tmp_path, samples=samples, ids=("S-0001",)), "sample-duplicate-id")
    assert "differ only in case" in f.message


def test_missing_location_named(tmp_path):
    root = no_location(tmp_path)
    (f,) = found(root, "sample-missing-location")
    assert f.features == (_samples(root).sample_id.iloc[2],) and "no location" in f.message


def test_missing_location_in_a_coordinate_table_and_null_island(tmp_path):
    root = tiny_with_analyses(tmp_path, ids=("S-1", "S-2", "S-3"))
    (root / "samples.csv").write_text("sample_id,unit,x,y\nS-1,A,50,50\nS-2,B,,50\nS-3,A,0,0\n", encoding="utf-8")
    edit_manifest(root, lambda m: m["layers"].update(samples={"path": "samples.csv", "x_field": "x", "y_field": "y", "crs": "EPSG:32633"}))
    (f,) = found(root, "sample-missing-location")
    assert f.features == ("S-2",) and "row 3" in f.message and "blank or not numbers" in f.message
    # S-3 at (0, 0) is not flagged: this tiny map's corner is the origin, so (0, 0) is a real place on it.


def test_null_island_placeholder(tmp_path):
    def to_origin(frame):
        g = frame.geometry.values.copy()
        g[1] = Point(0, 0)
        frame.geometry = g
        return frame

    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "samples", to_origin)
    (f,) = found(root, "sample-missing-location")
    assert f.features == (_samples(root).sample_id.iloc[1],) and "(0, 0)" in f.message


def test_outside_extent_with_distance(tmp_path):
    root = off_the_map(tmp_path)
    (f,) = found(root, "sample-outside-extent")
    extent = read_layer(root, "map.gpkg", "extent").geometry.iloc[0]
    p = _samples(root).geometry.iloc[0]
    assert f.measure == pytest.approx(extent.distance(p), abs=1e-3) and f.measure == pytest.approx(500, abs=1e-3)
    assert (f.x, f.y) == (round(p.x, 3), round(p.y, 3))
    samples = _samples(root)
    assert f.message == f"sample {samples.sample_id.iloc[0]} (feature {samples.index[0]}) lies 500.0 m north of the map extent."


def test_unit_mismatch_is_an_error_away_from_contacts(tmp_path):
    root = wrong_unit(tmp_path)
    (f,) = found(root, "sample-unit-mismatch")
    assert f.severity.value == "error"
    original = _samples(clean(tmp_path / "clean"))
    i = int(np.flatnonzero(original.unit.to_numpy() == "DUN")[0])  # the sample wrong_unit relabels
    assert f.features[0] == original.sample_id.iloc[i]
    units = read_layer(root, "map.gpkg", "units")
    p = original.geometry.iloc[i]
    # Reference distances from GEOS through shapely: to the nearest KES polygon and to the DUN polygon's edge.
    kes = units[units.unit == "KES"].geometry
    near_fid = kes.distance(p).idxmin()
    dun_fid = units.index[units.geometry.contains(p)][0]
    dun = units.geometry.loc[dun_fid]
    assert f.measure == pytest.approx(dun.boundary.distance(p), abs=1e-3)
    # the direction of the nearest KES polygon seen from the sample, to the nearest of eight 45° sectors
    from shapely.ops import nearest_points

    q = nearest_points(p, kes.loc[near_fid])[1]
    sector = round(math.degrees(math.atan2(q.x - p.x, q.y - p.y)) % 360 / 45) % 8
    towards = ["north", "north-east", "east", "south-east", "south", "south-west", "west", "north-west"][sector]
    sample_fid = _samples(root).index[i]
    assert f.message == (
        f"sample {f.features[0]} (feature {sample_fid}) is recorded as KES but lies in polygon {dun_fid} (DUN), "
        f"{dun.boundary.distance(p):.1f} m inside its edge; the nearest KES polygon, polygon {near_fid}, is "
        f"{kes.distance(p).min():.1f} m {towards}."
    )


@pytest.mark.parametrize(
    "xy, recorded, severity",
    [
        ((99.5, 50), "B", "notice"),  # 0.5 m from the contact at x=100, tolerance 1 m
        ((97.0, 50), "B", "error"),  # 3 m from it
        ((100.0, 50), "B", None),  # on the contact: touches the B polygon
        ((50, 50), "A", None),
    ],
)
def test_unit_mismatch_near_contact_is_a_notice(tmp_path, xy, recorded, severity):
    samples = tiny_samples(ids=("S-1",), units=(recorded,), xy=(xy,))
    hits = found(tiny_with_analyses(tmp_path, samples=samples, ids=("S-1",)), "sample-unit-mismatch")
    assert [h.severity.value for h in hits] == ([severity] if severity else [])


def test_bedrock_sample_under_superficial_unit_is_a_notice(tmp_path):
    legend = tiny_legend()
    legend.loc[0, "kind"] = "superficial"
    samples = tiny_samples(ids=("S-1",), units=("B",), xy=((50, 50),))
    (f,) = found(tiny_with_analyses(tmp_path, samples=samples, ids=("S-1",), legend=legend), "sample-unit-mismatch")
    assert f.severity.value == "notice" and "superficial" in f.message


# ---------------------------------------------------------------- analyses and their sample ids

def test_orphan_names_the_cell_and_the_probable_sample(tmp_path):
    root = mangled_id(tmp_path)
    sid = _first_id(root)
    (f,) = found(root, "analysis-orphan")
    assert f"analyses.xlsx, sheet 'majors', cell A{_xlsx_row(root, sid.split('-')[0] + '-' + str(int(sid.split('-')[1])))}" in f.message
    assert f"probably {sid} (leading zeros lost)" in f.message
    # one cause, one finding: the sample the orphan names has its analysis, under the mangled id
    assert found(root, "sample-unanalysed") == []


SAMPLE_IDS = ["0007", "HV24-0007", "HV24-0012", "118", "12000", "123456789012", "3-1", "SEPT2", "0042"]

# Spreadsheet manglings: (what the analyses table holds, the sample meant, the mangling named).
MANGLINGS = [
    ("7", "0007", "leading zeros lost"),
    (7, "0007", "leading zeros lost"),  # a number cell
    ("HV24-7", "HV24-0007", "leading zeros lost"),
    ("118.0", "118", "trailing '.0'"),
    ("1.2E+04", "12000", "scientific notation"),
    ("1.23457E+11", "123456789012", "scientific notation"),  # Excel's 6 significant digits
    (dt.datetime(2024, 3, 1), "3-1", "date 2024-03-01"),  # a date cell, as openpyxl reads it
    ("01-Mar", "3-1", "date 1 March"),
    ("2024-09-02 00:00:00", "SEPT2", "date 2024-09-02"),
    ("2-Sep", "SEPT2", "date 2 September"),
    (45352, "3-1", "day number"),  # 45352 is 1 March 2024 in Excel's 1900 date system
    ("hv24-0012", "HV24-0012", "different case"),
    (" HV24-0012 ", "HV24-0012", "stray spaces"),
    ("HV24-0012\u00a0", "HV24-0012", "non-breaking space"),
    ("HV24\u20130012", "HV24-0012", "typographic dash"),
    ("'0042", "0042", "leading apostrophe"),
]


@pytest.mark.parametrize("mangled, meant, how", MANGLINGS, ids=[repr(m[0]) for m in MANGLINGS])
def test_mangled_ids_resolve_to_the_intended_sample(mangled, meant, how):
    (match,) = probable_samples(mangled, SampleIndex.of(SAMPLE_IDS))
    assert match[0] == meant and how in match[1]


def test_excel_day_number_matches_python_date_arithmetic():
    # Excel's 1900 date system counts days from 1899-12-30 (for dates after February 1900).
    assert dt.date(1899, 12, 30) + dt.timedelta(days=45352) == dt.date(2024, 3, 1)


def test_unrelated_ids_get_no_guess():
    assert probable_samples("ZZ99-1234", SampleIndex.of(SAMPLE_IDS)) == []


def test_mangled_ids_end_to_end_through_a_workbook(tmp_path):
    samples = tiny_samples(ids=("0007", "3-1", "12000"), units=("A", "A", "B"), xy=((20, 20), (40, 40), (150, 50)))
    rows = [[v, *MAJOR_ROW, round(sum(MAJOR_ROW), 2)] for v in (7, dt.datetime(2024, 3, 1), "1.2E+04")]
    root = tiny_with_analyses(tmp_path, samples=samples, rows=rows)
    hits = {f.message.split(":")[0]: f for f in found(root, "analysis-orphan")}
    meant = {cell: f.message.split("probably ")[1].split(" ")[0] for cell, f in hits.items()}
    assert meant == {
        "analyses.xlsx, sheet 'majors', cell A2": "0007",
        "analyses.xlsx, sheet 'majors', cell A3": "3-1",
        "analyses.xlsx, sheet 'majors', cell A4": "12000",
    }
    assert "sample id the date 2024-03-01 matches no sample" in hits["analyses.xlsx, sheet 'majors', cell A3"].message


def test_blank_sample_id_is_an_orphan(tmp_path):
    rows = major_rows(["S-0001", "S-0002"]) + [[None, *MAJOR_ROW, 100.0]]
    (f,) = found(tiny_with_analyses(tmp_path, rows=rows), "analysis-orphan")
    assert "cell A4" in f.message and "no sample id" in f.message


# ---------------------------------------------------------------- reading analyte columns

@pytest.mark.parametrize(
    "header, name, unit",
    [
        ("SiO2 (wt%)", "SiO2", "wt%"),
        ("SiO2_wt%", "SiO2", "wt%"),
        ("SiO2 wt.%", "SiO2", "wt%"),
        ("Cu [ppm]", "Cu", "ppm"),
        ("Cu_ppm", "Cu", "ppm"),
        ("Au (ppb)", "Au", "ppb"),
        ("Zr (µg/g)", "Zr", "ppm"),
        ("Fe2O3(T) (wt%)", "Fe2O3(T)", "wt%"),
        ("Cu", "Cu", None),
        ("SiO2 (XRF)", "SiO2", None),
    ],
)
def test_header_units(header, name, unit):
    got = split_header(header)
    assert got[0] == name and got[1] == unit


def test_analyte_columns_and_units(tmp_path):
    header = ["sample_id", "SiO2 (wt%)", "Fe2O3T", "Cu", "87Sr/86Sr", "lab_batch", "comment", "Total"]
    rows = [["S-0001", 72.0, 2.0, 15, 0.7101, "B12", "fresh", 99.9]]
    root = tiny_with_analyses(tmp_path, header=header, rows=rows, manifest={"tables": {"analyses": {"units": {"Cu": "ppm"}}}})
    project = archivist.load_project(root)
    got = {a.column: a.unit for a in analytes(project.tables["analyses"])}
    assert got == {"SiO2 (wt%)": "wt%", "Fe2O3T": None, "Cu": "ppm", "87Sr/86Sr": "ratio", "Total": None}
    msgs = sorted(f.message for f in found(root, "analysis-unit-undeclared"))
    assert len(msgs) == 2 and "cell C1" in msgs[0] and "'Fe2O3T'" in msgs[0] and "'Total'" in msgs[1]


def test_unit_conflict_and_unknown_manifest_column(tmp_path):
    root = tiny_with_analyses(tmp_path)
    with open(root / "archivist.toml", "a", encoding="utf-8") as fh:
        fh.write('[tables.analyses.units]\n"SiO2 (wt%)" = "ppm"\nSiO3 = "wt%"\n')
    msgs = sorted(f.message for f in found(root, "analysis-unit-undeclared"))
    assert any("header says wt% but tables.analyses.units says ppm" in m for m in msgs)
    assert any("names column 'SiO3'" in m for m in msgs)


@pytest.mark.parametrize("cell", ["<0.5", "< 0.01", "bdl", "b.d.l.", "n.d.", "BDL", ">10000", "<LOD"])
def test_censored_values_are_read_not_reported(cell):
    c = classify(pd.Series([cell], dtype=object))
    assert c.censored[0] and not c.unreadable[0]


@pytest.mark.parametrize("cell", ["#N/A", "#VALUE!", "#DIV/0!", "#REF!"])
def test_excel_errors_are_unreadable(cell):
    c = classify(pd.Series([cell], dtype=object))
    assert c.excel_error[0] and c.unreadable[0]


def test_censored_cells_in_the_bundle_are_not_findings(tmp_path):
    root = clean(tmp_path)
    frame = pd.read_excel(root / "analyses.xlsx", sheet_name="majors", dtype=object)
    assert (frame == "<0.01").to_numpy().sum() >= 2  # the bundle has censored cells
    assert found(root, "analysis-value-unreadable") == []


def test_excel_error_names_the_cell(tmp_path):
    root = excel_error(tmp_path)
    (f,) = found(root, "analysis-value-unreadable")
    sid = _samples(root).sample_id.iloc[4]
    assert f"cell G{_xlsx_row(root, sid)}" in f.message and "'#N/A' is an Excel error value" in f.message
    assert f.features == (sid,)


def test_text_and_decimal_comma_are_unreadable(tmp_path):
    rows = major_rows(["S-0001", "S-0002"])
    rows[0][2] = "0,28"
    rows[1][3] = "approx 14"
    hits = sorted(found(tiny_with_analyses(tmp_path, rows=rows), "analysis-value-unreadable"), key=lambda f: f.message)
    assert len(hits) == 2 and "cell C2" in hits[0].message and "comma" in hits[0].message
    assert "cell D3" in hits[1].message


def test_negative_value_suggests_censoring_but_spares_loi(tmp_path):
    root = negative_value(tmp_path)
    (f,) = found(root, "analysis-negative-value")
    assert "write '<0.01'" in f.message and f.measure == pytest.approx(0.01)
    rows = major_rows(["S-0001", "S-0002"])
    rows[0][11] = -0.35  # LOI: a rock may gain mass on ignition
    rows[0][12] = round(sum(rows[0][1:11]) - 0.35, 2)
    assert found(tiny_with_analyses(tmp_path / "loi", rows=rows), "analysis-negative-value") == []


def test_low_total_from_the_total_column(tmp_path):
    root = low_total(tmp_path)
    (f,) = found(root, "analysis-total-out-of-range")
    sid = _samples(root).sample_id.iloc[4]
    assert f"cell M{_xlsx_row(root, sid)}" in f.message and "below 98.5" in f.message
    assert f.measure == pytest.approx(98.5 - 96.2)
    p = _samples(root).geometry.iloc[4]
    assert (f.x, f.y) == (round(p.x, 3), round(p.y, 3))  # placed at the sample


def test_total_summed_when_there_is_no_total_column(tmp_path):
    header = MAJOR_HEADER[:-1]
    rows = [["S-0001", *MAJOR_ROW], ["S-0002", 60.0, *MAJOR_ROW[1:]]]
    (f,) = found(tiny_with_analyses(tmp_path, header=header, rows=rows), "analysis-total-out-of-range")
    expected = 60.0 + sum(MAJOR_ROW[1:])
    assert f"total {expected:.2f} wt% (the sum of 11 oxide and volatile columns)" in f.message
    assert f.features == ("S-0002",)


def test_censored_oxide_counts_as_zero_in_the_sum(tmp_path):
    header = MAJOR_HEADER[:-1]
    rows = [["S-0001", *MAJOR_ROW], ["S-0002", *MAJOR_ROW[:4], "<0.01", *MAJOR_ROW[5:]]]
    assert found(tiny_with_analyses(tmp_path, header=header, rows=rows), "analysis-total-out-of-range") == []


def test_total_range_is_configurable(tmp_path):
    root = low_total(tmp_path)
    edit_manifest(root, lambda m: m["checks"].update(total_min=96.0))
    assert found(root, "analysis-total-out-of-range") == []


def test_partial_tables_are_not_totalled(tmp_path):
    header = ["sample_id", "SiO2 (wt%)", "Cu (ppm)"]
    rows = [["S-0001", 50.0, 12], ["S-0002", 40.0, 8]]
    assert found(tiny_with_analyses(tmp_path, header=header, rows=rows), "analysis-total-out-of-range") == []


def test_shapely_within_agrees_with_rule_on_bundle(tmp_path):
    # Reference: every bundle sample lies within a polygon of its recorded unit (GEOS predicate).
    root = clean(tmp_path)
    s, u = _samples(root), read_layer(root, "map.gpkg", "units")
    tree = shapely.STRtree(u.geometry.values)
    pi, ui = tree.query(s.geometry.values, predicate="within")
    assert set(pi) == set(range(len(s)))
    assert (u.unit.to_numpy()[ui] == s.unit.to_numpy()[pi]).all()
    assert found(root, "sample-unit-mismatch") == []


def test_ambiguous_date_offers_every_candidate():
    # 1 March could have been typed "3-1" or "MAR1": both samples are offered, neither is chosen.
    found_ = probable_samples(dt.datetime(2024, 3, 1), SampleIndex.of(["3-1", "MAR1", "HV24-0007"]))
    assert sorted(sid for sid, _ in found_) == ["3-1", "MAR1"]


# ---------------------------------------------------------------- totals as laboratories report them

# IUPAC standard atomic weights, abridged (IUPAC/CIAAW "Standard atomic weights of the elements 2021",
# Pure Appl. Chem. 94 (2022); conventional values for S and Cl).
IUPAC = {"O": 15.999, "F": 18.998, "S": 32.06, "Cl": 35.45, "Fe": 55.845}
# MAJOR_ROW sums to 100.00 wt% (arithmetic on the invented row).
ROW_SUM = round(sum(MAJOR_ROW), 2)
NO_TOTAL = MAJOR_HEADER[:-1]


def _disagrees(root):
    return found(root, "analysis-total-disagrees")


def test_major_row_sums_to_one_hundred():
    assert ROW_SUM == pytest.approx(100.00)


def test_a_typo_behind_a_lab_total_is_reported_with_both_values(tmp_path):
    # SiO2 typed 7.25 for 72.50: the sum is 100.00 - 72.50 + 7.25 = 34.75 (arithmetic), the lab Total stays 100.00.
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][1] = 7.25
    root = tiny_with_analyses(tmp_path, rows=rows)
    (f,) = _disagrees(root)
    assert "cell M3" in f.message and "says 100.00 wt%" in f.message and "sum to 34.75 wt%" in f.message
    assert "65.25 wt% apart" in f.message and f.features == ("S-0002",)
    assert f.measure == pytest.approx(65.25)
    assert found(root, "analysis-total-out-of-range") == []  # the lab Total alone is in range


def test_the_bundle_typo_case_names_the_total_cell(tmp_path):
    root = typo_behind_total(tmp_path)
    (f,) = _disagrees(root)
    sid = _samples(root).sample_id.iloc[4]
    assert f"cell M{_xlsx_row(root, sid)}" in f.message and f.features == (sid,)


@pytest.mark.parametrize("total, reported", [(100.03, False), (99.95, False), (100.10, True), (99.90, True)])
def test_rounding_is_not_a_disagreement(tmp_path, total, reported):
    # Values reported to two decimals (common practice): each of 11 summands and the Total may be off by 0.005,
    # so 12 x 0.005 = 0.06 wt% is rounding; 0.10 wt% is not.
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][-1] = total
    assert bool(_disagrees(tiny_with_analyses(tmp_path, rows=rows))) is reported


def test_censored_value_counts_as_zero_within_its_limit(tmp_path):
    # MnO 0.05 reported as "<0.1": the sum is 99.95, and the limit 0.1 covers the difference (common practice).
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][5] = "<0.1"
    assert _disagrees(tiny_with_analyses(tmp_path, rows=rows)) == []


@pytest.mark.parametrize("loi", ["LOI (wt%)", "LOI 1000°C (wt%)", "LOI (1000 °C) (wt%)", "L.O.I. 950 (wt%)", "loss on ignition (wt%)"])
def test_volatiles_are_loi_or_water_and_co2_never_both(tmp_path, loi):
    # LOI 0.62 wt% = H2O+ 0.30 + H2O- 0.10 + CO2 0.22 (invented); a sum taking both would be 100.62 (common practice).
    header = [*NO_TOTAL[:-1], loi, "H2O+ (wt%)", "H2O- (wt%)", "CO2 (wt%)", "Total (wt%)"]
    rows = [[sid, *MAJOR_ROW, 0.30, 0.10, 0.22, ROW_SUM] for sid in ("S-0001", "S-0002")]
    rows[1][11] = "n.a."  # no LOI in this row: the water and CO2 stand in for it
    root = tiny_with_analyses(tmp_path, header=header, rows=rows)
    assert found(root, "analysis-unit-undeclared") == []
    assert _disagrees(root) == []
    rows[1][12] = 0.50  # H2O+ now 0.20 too high for the row without LOI
    (f,) = _disagrees(tiny_with_analyses(tmp_path / "off", header=header, rows=rows))
    assert "sum to 100.20 wt%" in f.message and f.features == ("S-0002",)


@pytest.mark.parametrize("iron", ["Fe2O3T (wt%)", "Fe2O3_T (wt%)", "Fe2O3(T) (wt%)", "ΣFe2O3 (wt%)", "Fe2O3 (T) (wt%)"])
def test_iron_is_summed_once(tmp_path, iron):
    # Total iron 2.30 wt% as Fe2O3 is also given as FeOT (x 2FeO/Fe2O3 from IUPAC atomic weights) and split into
    # FeO + Fe2O3; the sum takes one form only (common practice).
    fe, o = IUPAC["Fe"], IUPAC["O"]
    feo_t = round(2.30 * 2 * (fe + o) / (2 * fe + 3 * o), 2)
    header = [*NO_TOTAL[:4], iron, *NO_TOTAL[5:], "FeOT (wt%)", "FeO (wt%)", "Fe2O3 (wt%)", "Total (wt%)"]
    rows = [[sid, *MAJOR_ROW, feo_t, 1.20, 0.97, ROW_SUM] for sid in ("S-0001", "S-0002")]
    root = tiny_with_analyses(tmp_path, header=header, rows=rows)
    assert found(root, "analysis-unit-undeclared") == []
    assert _disagrees(root) == []


def test_iron_falls_back_per_row_when_total_iron_is_missing(tmp_path):
    # A row without Fe2O3T is summed with FeO + Fe2O3 instead (0.97 + 1.20 + 0.13 = 2.30; invented values).
    header = [*NO_TOTAL, "FeO (wt%)", "Fe2O3 (wt%)", "Total (wt%)"]
    rows = [[sid, *MAJOR_ROW, 1.20, 1.10, ROW_SUM] for sid in ("S-0001", "S-0002")]
    rows[1][4] = ""
    assert _disagrees(tiny_with_analyses(tmp_path, header=header, rows=rows)) == []


def test_halogens_and_sulfur_are_summed_less_their_oxygen_equivalent(tmp_path):
    # F 2.00 wt%, Cl 5000 ppm (= 0.50 wt%, 1 wt% = 10 000 ppm), sulfide S 1.00 wt%: each is summed less
    # the oxygen it replaces, O/2F, O/2Cl and O/S from IUPAC atomic weights (common practice).
    w = IUPAC
    f_eq, cl_eq, s_eq = w["O"] / (2 * w["F"]), w["O"] / (2 * w["Cl"]), w["O"] / w["S"]
    assert (round(f_eq, 3), round(cl_eq, 3), round(s_eq, 3)) == (0.421, 0.226, 0.499)  # values quoted in common practice
    extra = 2.00 * (1 - f_eq) + 0.50 * (1 - cl_eq) + 1.00 * (1 - s_eq)
    header = [*NO_TOTAL, "F (wt%)", "Cl (ppm)", "S (wt%)", "Total (wt%)"]
    rows = [[sid, *MAJOR_ROW, 2.00, 5000, 1.00, round(ROW_SUM + extra, 2)] for sid in ("S-0001", "S-0002")]
    rows[1][-1] = round(ROW_SUM + 3.50, 2)  # the elements added with no oxygen equivalent
    (f,) = _disagrees(tiny_with_analyses(tmp_path, header=header, rows=rows))
    assert f.features == ("S-0002",) and f"sum to {ROW_SUM + extra:.2f} wt%" in f.message
    assert "less the oxygen equivalent of F, Cl, S" in f.message
    assert f.measure == pytest.approx(2.00 * f_eq + 0.50 * cl_eq + 1.00 * s_eq, abs=0.006)


def test_ppm_is_converted_and_trace_elements_are_not_summed(tmp_path):
    # MnO given as 500 ppm (= 0.05 wt%; 1 wt% = 10 000 ppm); Cu 12 000 ppm is a trace element, never summed.
    header = [*NO_TOTAL[:5], "MnO (ppm)", *NO_TOTAL[6:], "Cu (ppm)", "Total (wt%)"]
    rows = [[sid, *MAJOR_ROW[:4], 500, *MAJOR_ROW[5:], 12000, ROW_SUM] for sid in ("S-0001", "S-0002")]
    assert _disagrees(tiny_with_analyses(tmp_path, header=header, rows=rows)) == []
    rows[1][5] = 5000  # 5000 ppm = 0.50 wt%: the sum is 100.00 - 0.05 + 0.50 = 100.45 (arithmetic)
    (f,) = _disagrees(tiny_with_analyses(tmp_path / "more", header=header, rows=rows))
    assert "sum to 100.45 wt%" in f.message


def test_one_unreadable_cell_does_not_stop_the_row_being_totalled(tmp_path):
    # Without a Total column, a row with MgO unreadable and SiO2 at 80.00 still sums to 107.50 - 0.55 = 106.95.
    rows = [["S-0001", *MAJOR_ROW], ["S-0002", 80.00, *MAJOR_ROW[1:5], "#N/A", *MAJOR_ROW[6:]]]
    (f,) = found(tiny_with_analyses(tmp_path, header=NO_TOTAL, rows=rows), "analysis-total-out-of-range")
    assert "total 106.95 wt%" in f.message and "without MgO (wt%): unreadable" in f.message


def test_a_blank_total_cell_falls_back_to_the_sum(tmp_path):
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][1] = 62.50
    rows[1][-1] = None
    (f,) = found(tiny_with_analyses(tmp_path, rows=rows), "analysis-total-out-of-range")
    assert "total 90.00 wt% (the sum of 11 oxide and volatile columns)" in f.message


@pytest.mark.parametrize("setting, meaning", [(None, "not detected"), ("not-detected", "not detected"), ("not-determined", "not determined")])
def test_nd_is_read_as_the_manifest_says_and_the_report_says_which(tmp_path, setting, meaning):
    # "n.d." is "not detected" in some laboratories and "not determined" in others (common practice).
    rows = [["S-0001", *MAJOR_ROW], ["S-0002", *MAJOR_ROW[:4], "n.d.", *MAJOR_ROW[5:]]]
    manifest = {"tables": {"analyses": {"nd_means": setting}}} if setting else None
    root = tiny_with_analyses(tmp_path, header=NO_TOTAL, rows=rows, manifest=manifest)
    report = archivist.check(root, only=["samples"])
    (note,) = [n for n in report.notes if "'n.d.'" in n]
    assert f"1 'n.d.' cell read as {meaning}" in note
    assert ("by default" in note) is (setting is None)
    assert [f for f in report.findings if f.rule == "analysis-value-unreadable"] == []


def test_nd_means_takes_only_its_two_values(tmp_path):
    root = tiny_with_analyses(tmp_path, manifest={"tables": {"analyses": {"nd_means": "nil"}}})
    (f,) = found(root, "manifest-invalid")
    assert "tables.analyses.nd_means" in f.message


def test_an_unreadable_or_unitless_summand_is_left_to_its_own_rule(tmp_path):
    # One problem, one finding: the cell or header is reported by its own rule, not again as a disagreement.
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][6] = "#N/A"
    root = tiny_with_analyses(tmp_path, rows=rows)
    assert _disagrees(root) == [] and len(found(root, "analysis-value-unreadable")) == 1
    header = [h if h != "MnO (wt%)" else "MnO" for h in MAJOR_HEADER]
    root = tiny_with_analyses(tmp_path / "unit", header=header)
    assert _disagrees(root) == [] and len(found(root, "analysis-unit-undeclared")) == 1


def test_not_analysed_cell_counts_as_zero_and_is_named(tmp_path):
    # P2O5 "n.a.": the laboratory's Total leaves it out too (100.00 - 0.10 = 99.90; arithmetic).
    rows = major_rows(["S-0001", "S-0002"])
    rows[1][10], rows[1][-1] = "n.a.", 99.90
    assert _disagrees(tiny_with_analyses(tmp_path, rows=rows)) == []
    rows[1][-1] = 100.00
    (f,) = _disagrees(tiny_with_analyses(tmp_path / "lab", rows=rows))
    assert "without P2O5 (wt%): not analysed" in f.message
