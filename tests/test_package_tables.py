"""Tables as text with Table Schema types: what each cell becomes and how a column is typed."""

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from archivist.package.tables import column_text, text_table
from archivist.vocab.analytes import column_unit


@pytest.mark.parametrize(
    "values, kind, texts",
    [
        (["1", "2", "-3"], "integer", ["1", "2", "-3"]),
        (["007", "8"], "string", ["007", "8"]),  # a leading zero is an identifier, not a number
        (["1.5", "2", "1e-05"], "number", ["1.5", "2", "1e-05"]),
        ([1.5, 2.0, None], "number", ["1.5", "2", ""]),  # spreadsheet floats; a whole one has no ".0"
        (["2024-06-12", ""], "date", ["2024-06-12", ""]),
        ([dt.datetime(2024, 6, 12), dt.datetime(2024, 6, 13)], "date", ["2024-06-12", "2024-06-13"]),
        ([dt.datetime(2024, 6, 12, 9, 30)], "datetime", ["2024-06-12T09:30:00"]),
        ([True, False], "boolean", ["true", "false"]),
        (["0.17", "<0.01"], "string", ["0.17", "<0.01"]),  # below detection limit: kept as written
        (["granite", "12"], "string", ["granite", "12"]),
        (["", ""], "string", ["", ""]),
    ],
)
def test_object_columns_are_typed_from_their_cells(values, kind, texts):
    out, got, _ = column_text(pd.Series(values, dtype=object))
    assert got == kind
    assert out.tolist() == texts


def test_below_detection_limit_is_flagged():
    _, kind, censored = column_text(pd.Series(["0.17", "<0.01", "< 0.5"], dtype=object))
    assert kind == "string" and censored


def test_typed_columns_keep_their_type_and_exact_values():
    frame = pd.DataFrame(
        {
            "n": np.array([1, 2], dtype="int64"),
            "x": np.array([0.1 + 0.2, np.nan]),
            "s": pd.array(["a", None], dtype="string"),
            "t": pd.to_datetime(["2024-01-02", None]),
        }
    )
    table = text_table("t", frame)
    assert [f["type"] for f in table.fields] == ["integer", "number", "string", "date"]
    assert table.frame["x"].tolist() == ["0.30000000000000004", ""]  # shortest text that reads back the same float
    assert float(table.frame["x"][0]) == 0.1 + 0.2
    assert table.frame["s"].tolist() == ["a", ""] and table.frame["t"].tolist() == ["2024-01-02", ""]


def test_identifier_columns_stay_text():
    frame = pd.DataFrame({"sample_id": np.array([7, 8]), "code": [7.0, 8.0]})
    table = text_table("t", frame, identifiers={"sample_id", "code"})
    assert [f["type"] for f in table.fields] == ["string", "string"]
    assert table.frame["code"].tolist() == ["7", "8"]


@pytest.mark.parametrize(
    "header, quantity, unit",
    [("SiO2 (wt%)", "SiO2", "wt%"), ("Zr [ppm]", "Zr", "ppm"), ("Au (ppb) ", "Au", "ppb"), ("sample_id", "sample_id", None)],
)
def test_header_units(header, quantity, unit):
    read = column_unit(header)
    assert (read.quantity, read.unit) == (quantity, unit)


def test_units_and_descriptions_reach_the_schema():
    frame = pd.DataFrame({"SiO2 (wt%)": ["70.1"], "LOI": ["1.2"]}, dtype=object)
    table = text_table("analyses", frame, units={"LOI": "wt%"}, header_units=True)
    assert table.fields[0] == {"name": "SiO2 (wt%)", "type": "number", "description": "SiO2, in wt%.", "unit": "wt%"}
    assert table.fields[1]["unit"] == "wt%"


# Total iron is written "Fe2O3T", "Fe2O3 (T)", "FeOt", "FeO(T)", "Fe2O3tot" (common practice): the "T" marks total
# iron and is never a unit. The unit is what the header or [tables.analyses.units] says, as the checks read it.
TOTAL_IRON_HEADERS = {
    "Fe2O3 (T) (wt%)": ("wt%", "Fe2O3 (total iron), in wt%."),
    "FeOt_wt%": ("wt%", "FeO (total iron), in wt%."),
    "FeO(T) [ppm]": ("ppm", "FeO (total iron), in ppm."),
    "Fe2O3 (T)": ("wt%", "Fe2O3 (total iron), in wt%."),  # declared in the manifest
    "FeOt": ("wt%", "FeO (total iron), in wt%."),  # declared in the manifest
    "Fe2O3tot": (None, "Fe2O3 (total iron)."),  # declared nowhere: no unit, and the check says so
}


def test_pack_records_total_iron_with_its_real_unit(tmp_path):
    import json

    import archivist
    from builders import tiny_project

    frame = pd.DataFrame({"sample_id": ["S1"], **{h: ["9.5"] for h in TOTAL_IRON_HEADERS}})
    root = tiny_project(tmp_path, manifest={"tables": {"analyses": {"path": "analyses.csv", "units": {"Fe2O3 (T)": "wt%", "FeOt": "wt%"}}}})
    frame.to_csv(root / "analyses.csv", index=False)
    package = archivist.pack(root, tmp_path / "out", allow_errors=True).path
    descriptor = json.loads((package / "data" / "datapackage.json").read_text(encoding="utf-8"))
    schema = next(r["schema"] for r in descriptor["resources"] if r["name"] == "analyses")
    fields = {f["name"]: f for f in schema["fields"]}
    for header, (unit, description) in TOTAL_IRON_HEADERS.items():
        assert (fields[header].get("unit"), fields[header].get("description")) == (unit, description), header
    # the check reads the same headers the same way: only the column with no unit anywhere is reported
    undeclared = [f.message for f in archivist.check(root).findings if f.rule == "analysis-unit-undeclared"]
    assert len(undeclared) == 1 and "'Fe2O3tot' has no unit" in undeclared[0]


def test_bracketed_text_that_is_not_a_unit_is_not_recorded_as_one():
    frame = pd.DataFrame({"SiO2 (XRF)": ["70.1"], "Depth (m)": ["3.5"], "Fe2O3 (T)": ["9.1"]}, dtype=object)
    fields = {f["name"]: f for f in text_table("analyses", frame, header_units=True).fields}
    assert "unit" not in fields["SiO2 (XRF)"] and "unit" not in fields["Fe2O3 (T)"]
    assert fields["Depth (m)"]["unit"] == "m"  # not an analyte: its bracket is taken as written


# ---------------------------------------------------------------- laboratory readings in analyte columns
#
# How laboratories write readings that are not plain numbers (common practice of geochemistry laboratories'
# certificates): "<0.01", "<.01", "< 5 ppm", "<1e-3" (below the detection limit given), "bdl", "b.d.l."
# (below the detection limit, not given), "tr", "trace" (detected, too little to quantify), ">10000" (above
# the upper limit of the method), "n.d." (not detected, or not determined: the laboratory's own usage), and
# "n.a.", "-", empty (not analysed). How a Table Schema says so (Frictionless Table Schema specification v2,
# "missingValues"): a field's own missingValues replaces the schema-level list for that field, and each entry
# may be an object with a "value" and a unique "label".

import csv
import json
from decimal import Decimal
from pathlib import Path

import frictionless
import jsonschema

from archivist.package.tables import analyte_readings

# token -> (kind in "censoring" or None when not censored, limit, unit)
READINGS = {
    "<0.01": ("below-detection-limit", 0.01, None),
    "<.01": ("below-detection-limit", 0.01, None),
    "< 5 ppm": ("below-detection-limit", 5, "ppm"),
    "<1e-3": ("below-detection-limit", 0.001, None),
    "bdl": ("below-detection-limit", None, None),
    "b.d.l.": ("below-detection-limit", None, None),
    "tr": ("trace", None, None),
    "trace": ("trace", None, None),
    ">10000": ("above-upper-limit", 10000, None),
    "n.d.": ("not-detected", None, None),  # with nd_means = "not-detected", the default
    "n.a.": (None, None, None),
    "-": (None, None, None),
}


def test_every_reading_is_a_labelled_missing_value_and_censored_ones_carry_kind_and_limit():
    cells = pd.Series(["1.5", *READINGS, "", "12"], dtype=object)
    got = analyte_readings(cells)
    assert got is not None and got.kind == "number" and got.has_nd
    # the empty cell first (a writer's null), then each reading once, as written
    assert [m["value"] for m in got.missing_values] == ["", *READINGS]
    labels = [m["label"] for m in got.missing_values]
    assert len(set(labels)) == len(labels)  # labels must be unique (Frictionless Table Schema v2, missingValues)
    censoring = {c["value"]: c for c in got.censoring}
    for token, (kind, limit, unit) in READINGS.items():
        if kind is None:
            assert token not in censoring and "not analysed" in dict(zip([m["value"] for m in got.missing_values], labels))[token]
            continue
        entry = censoring[token]
        assert (entry["kind"], entry.get("limit"), entry.get("unit")) == (kind, limit, unit), token


def test_blank_cells_written_with_spaces_keep_unique_labels():
    got = analyte_readings(pd.Series(["0.5", "  ", "", "-"], dtype=object))
    assert [m["value"] for m in got.missing_values] == ["", "  ", "-"]
    assert len({m["label"] for m in got.missing_values}) == 3


def test_nd_as_not_determined_is_not_analysed():
    got = analyte_readings(pd.Series(["0.5", "n.d."], dtype=object), nd_means="not-determined")
    assert got is not None and got.censoring == []
    assert got.missing_values[1] == {"value": "n.d.", "label": "not determined, not analysed (written 'n.d.')"}


@pytest.mark.parametrize(
    "cells",
    [
        ["0.5", "<0.01", "#N/A"],  # a spreadsheet error: the check reports it; the column stays text
        ["0.5", "<0.01", "see note"],
        ["0.5", "0,7", "<0.01"],  # a decimal comma is not Table Schema's number form
        ["0.5", "0.7"],  # nothing to describe: the plain inference types it
    ],
)
def test_columns_with_other_text_get_no_readings(cells):
    assert analyte_readings(pd.Series(cells, dtype=object)) is None


def test_whole_numbers_with_readings_are_integer_and_plain_values_may_have_any_decimal_form():
    assert analyte_readings(pd.Series(["12", "<5", "7"], dtype=object)).kind == "integer"
    assert analyte_readings(pd.Series(["12", "<5", "5.", ".5", "1e-05"], dtype=object)).kind == "number"


# An invented laboratory sheet as the laboratory delivered it: every cell is text in the CSV.
LAB_HEADER = ["sample_id", "SiO2 (wt%)", "Cu (ppm)", "Au (ppb)", "Zn (ppm)", "MnO (wt%)", "Pb (ppm)", "Remark"]
LAB_ROWS = [
    ["S-0001", "72.50", "<0.01", "bdl", "< 5 ppm", "tr", "n.d.", "-"],
    ["S-0002", "70.1", "12.5", "b.d.l.", "33", "trace", "7", ""],
    ["S-0003", "69", "<.01", "<1e-3", "-", "n.a.", ">10000", "re-run"],
    ["S-0004", "71.0", "0.050", "3", "", "0.02", "< 0.01", ""],
]


def _lab_project(tmp_path, manifest_extra=None):
    from builders import tiny_project, tiny_samples

    ids = [r[0] for r in LAB_ROWS]
    samples = tiny_samples(ids=ids, units=("A", "B", "A", "B"), xy=((50, 50), (150, 50), (40, 40), (160, 40)))
    samples["Au_ppb"] = ["<5", "12", "", "b.d.l."]  # assay columns on the sample layer itself
    analyses = {"path": "analyses.csv", "sample_field": "sample_id", **(manifest_extra or {})}
    root = tiny_project(tmp_path, samples=samples, manifest={"tables": {"analyses": analyses}})
    with open(root / "analyses.csv", "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows([LAB_HEADER, *LAB_ROWS])
    return root


def _pack(root, out):
    import archivist

    data = archivist.pack(root, out, allow_errors=True).path / "data"
    return data, json.loads((data / "datapackage.json").read_text(encoding="utf-8"))


def _resource(descriptor, name):
    return next(r for r in descriptor["resources"] if r["name"] == name)


def test_packed_readings_validate_and_every_cell_reads_back_as_written(tmp_path):
    root = _lab_project(tmp_path)
    data, descriptor = _pack(root, tmp_path / "out")
    # Outside reference: the frictionless library validates the whole package, every table against its schema.
    report = frictionless.validate(str(data / "datapackage.json"))
    assert report.valid, report.flatten(["resourceName", "rowNumber", "fieldName", "message"])[:10]

    fields = {f["name"]: f for f in _resource(descriptor, "analyses")["schema"]["fields"]}
    types = {name: f["type"] for name, f in fields.items()}
    assert types == {"sample_id": "string", "SiO2 (wt%)": "number", "Cu (ppm)": "number", "Au (ppb)": "integer",
                     "Zn (ppm)": "integer", "MnO (wt%)": "number", "Pb (ppm)": "integer", "Remark": "string"}
    assert fields["Cu (ppm)"]["unit"] == "ppm" and fields["Cu (ppm)"]["description"].startswith("Cu, in ppm.")
    assert "missingValues" not in fields["Remark"]  # not an analyte: "-" stays a value there
    assert {"value": "< 5 ppm", "kind": "below-detection-limit", "limit": 5, "unit": "ppm"} in fields["Zn (ppm)"]["censoring"]

    # The CSV holds every cell exactly as the laboratory wrote it (RFC 4180 reading with Python's csv module).
    with open(data / "tables" / "analyses.csv", encoding="utf-8", newline="") as fh:
        assert list(csv.reader(fh)) == [LAB_HEADER, *LAB_ROWS]

    # A Table Schema reader (frictionless, reading the package as a reuser does: the descriptor's v2 profile
    # admits labelled missing values, and the foreign keys need the package) gets every plain value as a number,
    # every reading as missing, and still sees the reading as written; nothing else is missing.
    resource = frictionless.Package(str(data / "datapackage.json")).get_resource("analyses")
    with resource:
        rows = list(resource.row_stream)
    assert len(rows) == len(LAB_ROWS)
    for row, written in zip(rows, LAB_ROWS):
        for i, (name, cell) in enumerate(zip(LAB_HEADER, written)):
            assert row.cells[i] == cell, (name, cell)
            value = row[name]
            readings = {m["value"] for m in fields[name].get("missingValues", [])}
            if types[name] == "string":
                assert value == (cell or None), (name, cell)
            elif cell in readings:
                assert value is None, (name, cell)
            else:
                assert Decimal(str(value)) == Decimal(cell), (name, cell)


def test_nd_setting_reaches_the_schema(tmp_path):
    _, default = _pack(_lab_project(tmp_path / "a"), tmp_path / "a" / "out")
    pb = {f["name"]: f for f in _resource(default, "analyses")["schema"]["fields"]}["Pb (ppm)"]
    assert "'n.d.' is read as not detected (below the detection limit), by default" in pb["description"]
    assert {"value": "n.d.", "kind": "not-detected"} in pb["censoring"]
    assert "'n.d.' is read as not detected" in _resource(default, "analyses")["description"]

    _, declared = _pack(_lab_project(tmp_path / "b", {"nd_means": "not-determined"}), tmp_path / "b" / "out")
    pb = {f["name"]: f for f in _resource(declared, "analyses")["schema"]["fields"]}["Pb (ppm)"]
    assert "'n.d.' is read as not determined (not analysed), as [tables.analyses] nd_means says." in pb["description"]
    assert {"value": "n.d.", "label": "not determined, not analysed (written 'n.d.')"} in pb["missingValues"]
    assert all(c["value"] != "n.d." for c in pb["censoring"])


def test_sample_layer_assays_and_readme_and_package_profile(tmp_path):
    data, descriptor = _pack(_lab_project(tmp_path), tmp_path / "out")
    au = {f["name"]: f for f in _resource(descriptor, "samples")["schema"]["fields"]}["Au_ppb"]
    assert au["type"] == "integer" and [m["value"] for m in au["missingValues"]] == ["", "<5", "b.d.l."]
    with open(data / "tables" / "samples.csv", encoding="utf-8", newline="") as fh:
        assert [r["Au_ppb"] for r in csv.DictReader(fh)] == ["<5", "12", "", "b.d.l."]
    readme = (data / "README.md").read_text(encoding="utf-8")
    assert "kept in the CSV exactly as the laboratory wrote them" in readme and "`missingValues`" in readme
    # archivist's own package profile describes the custom "censoring" property (JSON Schema 2020-12 via jsonschema)
    profile = json.loads((Path(__file__).resolve().parent.parent / "schemas" / "package.schema.json").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(profile).validate(descriptor)
