"""Family `legend`: the map against its legend, and the legend against the ICS chart."""

import pandas as pd
import pytest
import shapely

import archivist
from archivist.reference import CHART_VERSION, lookup
from archivist.rules.legend import colour_problem
from builders import BUNDLE, copy_bundle, edit_layer, edit_table, read_layer, tiny_legend, tiny_project, tree_digest

pytestmark = pytest.mark.skipif(not (BUNDLE / "archivist.toml").exists(), reason="example bundle not generated")


def clean(tmp_path):
    return copy_bundle(tmp_path)


def _set(code, column, value):
    def change(frame):
        frame.loc[frame.unit == code, column] = value

    return change


def _first_kes(frame):
    i = frame.index[frame.unit == "KES"][0]
    frame.loc[i, "unit"] = "KSE"


def recoded_polygon(tmp_path):
    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "units", _first_kes)


def extra_legend_row(tmp_path):
    def add(frame):
        row = {c: "" for c in frame.columns}
        row.update(unit="GAB", name="Harrowden Gabbro", description="Dark medium-grained gabbro.", age="Cisuralian",
                   order="3", colour="#305030", kind="intrusive")
        return pd.concat([frame, pd.DataFrame([row])], ignore_index=True)

    return edit_table(copy_bundle(tmp_path), "legend.csv", add)


def duplicated_row(tmp_path):
    def dup(frame):
        row = frame[frame.unit == "MAR"].copy()
        row["age"] = "Moscovian"
        return pd.concat([frame, row], ignore_index=True)

    return edit_table(copy_bundle(tmp_path), "legend.csv", dup)


def empty_description(tmp_path):
    return edit_table(copy_bundle(tmp_path), "legend.csv", _set("ORB", "description", ""))


def rgb_colour(tmp_path):
    return edit_table(copy_bundle(tmp_path), "legend.csv", _set("QAL", "colour", "255,243,176"))


def age_too_old(tmp_path):
    return edit_table(copy_bundle(tmp_path), "legend.csv", _set("AMB", "max_age_ma", "380"))


def swapped_order(tmp_path):
    def swap(frame):
        dun, kes = frame.index[frame.unit == "DUN"][0], frame.index[frame.unit == "KES"][0]
        frame.loc[dun, "order"], frame.loc[kes, "order"] = frame.loc[kes, "order"], frame.loc[dun, "order"]

    return edit_table(copy_bundle(tmp_path), "legend.csv", swap)


CASES = {
    "legend-missing-unit": (recoded_polygon, clean),
    "legend-unused-unit": (extra_legend_row, clean),
    "legend-duplicate-unit": (duplicated_row, clean),
    "legend-incomplete-entry": (empty_description, clean),
    "legend-bad-colour": (rgb_colour, clean),
    "legend-age-unknown": (age_too_old, clean),
    "legend-age-order": (swapped_order, clean),
}


def found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def _legend_row(root, code):
    frame = pd.read_csv(root / "legend.csv", dtype=str, keep_default_na=False)
    return int(frame.index[frame.unit == code][0]) + 2  # header is row 1


def test_clean_bundle_gives_no_legend_findings(tmp_path):
    assert archivist.check(clean(tmp_path), only=["legend"]).findings == ()


def test_missing_unit_at_its_polygon_with_area(tmp_path):
    root = recoded_polygon(tmp_path)
    before = tree_digest(root)
    (f,) = found(root, "legend-missing-unit")
    units = read_layer(root, "map.gpkg", "units")
    poly = units[units.unit == "KSE"]
    fid = str(poly.index[0])
    assert f.features == (fid,) and f.layer == "units"
    assert f.measure == pytest.approx(round(poly.geometry.iloc[0].area, 3))  # GEOS area through shapely
    assert shapely.from_wkt(f.wkt).equals_exact(poly.geometry.iloc[0], 1e-3)
    assert "'KSE'" in f.message and f.severity.value == "error"
    assert tree_digest(root) == before


def test_missing_unit_hints_at_case(tmp_path):
    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "units", lambda f: f.assign(unit=f.unit.replace("DUN", "Dun")))
    found_ = found(root, "legend-missing-unit")
    assert len(found_) == 1 and "the legend has 'DUN'" in found_[0].message


def test_unused_unit_is_a_notice_naming_the_row(tmp_path):
    root = extra_legend_row(tmp_path)
    (f,) = found(root, "legend-unused-unit")
    assert f.severity.value == "notice"
    assert f"legend.csv, row {_legend_row(root, 'GAB')}" in f.message and "Harrowden Gabbro" in f.message


def test_duplicate_names_rows_and_differences(tmp_path):
    (f,) = found(duplicated_row(tmp_path), "legend-duplicate-unit")
    assert "'MAR' has 2 legend rows" in f.message and "differ in age" in f.message


def test_incomplete_entry_names_row_and_column(tmp_path):
    root = empty_description(tmp_path)
    (f,) = found(root, "legend-incomplete-entry")
    assert f"row {_legend_row(root, 'ORB')}" in f.message and "description is empty" in f.message


def test_missing_required_column(tmp_path):
    root = edit_table(copy_bundle(tmp_path), "legend.csv", lambda f: f.drop(columns=["description"]))
    msgs = [f.message for f in found(root, "legend-incomplete-entry")]
    assert msgs == ["legend.csv has no 'description' column (columns: unit, name, age, min_age_ma, max_age_ma, order, colour, lithology, kind)."]


def test_bad_colour_gives_the_hex_form(tmp_path):
    (f,) = found(rgb_colour(tmp_path), "legend-bad-colour")
    assert "column 'colour'" in f.message and "#FFF3B0" in f.message


@pytest.mark.parametrize(
    "text, words",
    [
        ("#FFF3B0", None),
        ("#fff3b0", None),
        ("#FFF", "#FFFFFF"),
        ("FFF3B0", "#FFF3B0"),
        ("rgb(255, 0, 0)", "#FF0000"),
        ("red", "#RRGGBB"),
        ("", "empty"),
        ("#GGGGGG", "#RRGGBB"),
    ],
)
def test_colour_forms(text, words):
    why = colour_problem(text)
    assert (why is None) if words is None else (words in why)


def test_numeric_age_outside_ics_interval(tmp_path):
    root = age_too_old(tmp_path)
    (f,) = found(root, "legend-age-unknown")
    famennian = lookup("Famennian")
    # ICS chart 2024-12 (chart-2024-12.ttl, ischart:Famennian time:hasBeginning): 372.15 ± 0.46 Ma
    assert (famennian.base_ma, famennian.base_uncertainty_ma) == (372.15, 0.46)
    assert f.measure == pytest.approx(380 - famennian.base_ma)
    assert "column 'max_age_ma'" in f.message and f"ICS chart {CHART_VERSION}" in f.message


def test_numeric_age_within_stated_uncertainty_passes(tmp_path):
    # 372.5 Ma is older than the base of the Famennian, 372.15 Ma, but inside the chart's
    # ± 0.46 Ma on that boundary (ICS chart 2024-12, chart-2024-12.ttl).
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("AMB", "max_age_ma", "372.5"))
    assert found(root, "legend-age-unknown") == []


@pytest.mark.parametrize(
    "age, words",
    [("Namurian", "regional or obsolete"), ("Tertiary", "Paleogene"), ("Tournasian", "did you mean Tournaisian")],
)
def test_age_names_not_on_the_chart(tmp_path, age, words):
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("DUN", "age", age))
    (f,) = found(root, "legend-age-unknown")
    assert words in f.message and "column 'age'" in f.message


def test_swapped_min_max_and_non_numbers(tmp_path):
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("MAR", "min_age_ma", "330"))
    (f,) = found(root, "legend-age-unknown")
    assert "older than max_age_ma" in f.message
    root = edit_table(copy_bundle(tmp_path, "b"), "legend.csv", _set("MAR", "min_age_ma", "c. 310"))
    (f,) = found(root, "legend-age-unknown")
    assert "'c. 310' is not an age in Ma" in f.message


def test_age_order_names_the_units_out_of_place(tmp_path):
    root = swapped_order(tmp_path)
    hits = found(root, "legend-age-order")
    assert {f.features[0] for f in hits} == {"DUN", "MAR"}  # DUN now above MAR and KES; MAR above KES
    dun = next(f for f in hits if f.features[0] == "DUN")
    assert "KES" in dun.message and "MAR" in dun.message


def test_intrusive_units_are_exempt(tmp_path):
    # The granite listed last, below older strata: allowed for intrusive units, not for others.
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("SKG", "order", "10"))
    assert found(root, "legend-age-order") == []
    def not_intrusive(frame):
        _set("SKG", "order", "10")(frame)
        _set("SKG", "kind", "sedimentary")(frame)

    root = edit_table(copy_bundle(tmp_path, "b"), "legend.csv", not_intrusive)
    hits = found(root, "legend-age-order")
    assert hits and all("SKG" in f.features for f in hits)


def test_oldest_first_legend_gives_one_finding(tmp_path):
    def reverse(frame):
        frame["order"] = [str(10 - int(o)) for o in frame["order"]]

    (f,) = found(edit_table(copy_bundle(tmp_path), "legend.csv", reverse), "legend-age-order")
    assert "oldest first" in f.message


def test_age_order_uses_chart_when_numbers_absent(tmp_path):
    legend = tiny_legend()
    legend["min_age_ma"] = ""
    legend["max_age_ma"] = ""
    legend["order"] = ["2", "1"]  # Carnian (older) listed above Norian
    (f,) = found(tiny_project(tmp_path, legend=legend), "legend-age-order")
    # Carnian ~237 to ~227.3 Ma: ICS chart 2024-12 (chart-2024-12.ttl, ischart:Carnian)
    assert "'B'" in f.message and "227.3-237" in f.message


def test_row_numbers_count_the_blank_rows_of_a_workbook_legend(tmp_path):
    """A legend sheet with a blank row between entries: findings name the row the mapper sees."""
    from builders import edit_manifest, write_xlsx

    root = tiny_project(tmp_path)
    legend = tiny_legend()
    extra = {**legend.iloc[0].to_dict(), "unit": "GAB", "name": "Unused Gabbro"}
    rows = [list(r) for r in legend.itertuples(index=False)] + [[None] * len(legend.columns), list(extra.values())]
    write_xlsx(root / "legend.xlsx", "legend", list(legend.columns), rows)
    edit_manifest(root, lambda m: m["tables"].update({"legend": {"path": "legend.xlsx"}}))
    (f,) = found(root, "legend-unused-unit")
    # header in row 1, two entries in rows 2-3, a blank row 4: the unused unit is in row 5
    assert "legend.xlsx, sheet 'legend', row 5" in f.message


# ---------------------------------------------------------------- ages as mappers write them

def _ages_legend(rows):
    """A legend for the two-unit tiny project: rows of (age, min_age_ma, max_age_ma), youngest first."""
    legend = tiny_legend()
    base = legend.iloc[0].to_dict()
    out = []
    for k, (age, lo, hi) in enumerate(rows):
        code = "AB"[k] if k < 2 else f"U{k}"
        out.append({**base, "unit": code, "name": f"Unit {code}", "age": age, "min_age_ma": lo, "max_age_ma": hi,
                    "order": str(k + 1)})
    return pd.DataFrame(out)


def test_legend_written_as_mappers_write_it_gives_no_age_finding(tmp_path):
    # Numbers chosen inside the spans of the ICS chart (official data 2023-09 and 2024-12):
    # Pliocene base 5.333, Upper Cretaceous 100.5-66.0, Cambrian 538.8 to 485.4 (2023-09) / 486.85 (2024-12).
    legend = _ages_legend([
        ("Plio-Pleistocene", "0.5", "4"),
        ("Mio-Pliocene", "", ""),
        ("Late Eocene", "35", "38"),
        ("Early Late Cretaceous", "92", "98"),
        ("Lower Upper Cretaceous", "", ""),
        ("Late Triassic to Early Jurassic", "", ""),
        ("Permo-Triassic", "", ""),
        ("250-260 Ma", "", ""),
        ("Permian or Carboniferous", "", ""),
        ("Permo-Carboniferous", "", ""),
        ("Devono-Carboniferous", "", ""),
        ("Siluro-Devonian", "", ""),
        ("Cambro-Ordovician", "", ""),
        ("Late Cambrian", "488", "495"),
        ("Middle Cambrian", "", ""),
        ("Early Cambrian", "525", "530"),
    ])
    root = tiny_project(tmp_path, legend=legend)
    assert found(root, "legend-age-unknown") == []
    assert found(root, "legend-age-order") == []


@pytest.mark.parametrize(
    "above, below",
    [("Early Cambrian", "Late Cambrian"), ("Early Cambrian", "Middle Cambrian"), ("Middle Eocene", "Late Eocene"),
     ("Early Late Cretaceous", "Late Late Cretaceous")],
)
def test_order_errors_among_informal_parts_are_found(tmp_path, above, below):
    root = tiny_project(tmp_path, legend=_ages_legend([(above, "", ""), (below, "", "")]))
    (f,) = found(root, "legend-age-order")
    assert f.features == ("A", "B") and "listed above younger unit B (order 2, " in f.message


def test_informal_parts_in_their_order_pass(tmp_path):
    root = tiny_project(tmp_path, legend=_ages_legend([("Late Cambrian", "", ""), ("Early Cambrian", "", "")]))
    assert found(root, "legend-age-order") == []


def test_late_cambrian_with_525_to_530_ma_is_found(tmp_path):
    root = tiny_project(tmp_path, legend=_ages_legend([("Late Cambrian", "525", "530"), ("Early Cambrian", "", "")]))
    hits = found(root, "legend-age-unknown")
    assert [f.features for f in hits] == [("A",), ("A",)]  # both numbers lie in the older third
    # Cambrian base 538.8, top 485.4 (ICS official data 2023-09) or 486.85 (2024-12): the younger third starts
    # two thirds of the way up.
    cambrian = lookup("Cambrian")
    start = cambrian.base_ma - 2 * (cambrian.base_ma - cambrian.top_ma) / 3
    assert cambrian.base_ma == 538.8 and cambrian.top_ma in (485.4, 486.85)
    assert sorted(f.measure for f in hits) == pytest.approx([525 - start, 530 - start], abs=5e-4)  # measures are reported to 0.001
    assert all("younger third of the Cambrian" in f.message for f in hits)


def test_informal_age_just_beyond_its_third_is_tolerated(tmp_path):
    # 505 Ma is older than the strict younger third of the Cambrian (about 503 Ma) but within its leeway.
    root = tiny_project(tmp_path, legend=_ages_legend([("Late Cambrian", "490", "505"), ("Early Cambrian", "", "")]))
    assert found(root, "legend-age-unknown") == []


def test_numeric_range_in_the_age_column_is_checked_against_the_numbers(tmp_path):
    root = tiny_project(tmp_path, legend=_ages_legend([("250-260 Ma", "240", "255"), ("Permian", "", "")]))
    (f,) = found(root, "legend-age-unknown")
    assert "'min_age_ma'" in f.message and f.measure == pytest.approx(10)
    assert "ICS chart" not in f.message  # the span is the mapper's own numbers, not the chart's


def test_regional_hint_only_for_regional_or_obsolete_names(tmp_path):
    root = tiny_project(tmp_path, legend=_ages_legend([("Blorpian", "", ""), ("Namurian", "", "")]))
    a, b = sorted(found(root, "legend-age-unknown"), key=lambda f: f.features)
    assert "regional or obsolete" not in a.message and "regional or obsolete" in b.message
