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
