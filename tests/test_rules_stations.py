"""Family `stations`: stations, the samples and measurements that name them, and files handed in together."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

import archivist
from builders import tiny_project, tiny_samples

HEADER = ["station_id", "easting", "northing", "date", "observer", "observation", "unit"]
# Invented stations of the tiny two-unit map (unit A west of x=100, unit B east of it).
ST1 = ["ST-1", "50", "50", "2024-06-11", "Test Mapper", "Red sandstone, cross-bedded.", "A"]
ST2 = ["ST-2", "150", "50", "2024-06-12", "Test Mapper", "Grey mudstone.", "B"]


def write_csv(path: Path, rows: list[list], header: list[str] = HEADER) -> Path:
    pd.DataFrame(rows, columns=header).to_csv(path, index=False, lineterminator="\n")
    return path


def station_project(tmp_path: Path, files: dict[str, list[list]] | None = None, *, samples=None, manifest=None,
                    name: str = "tiny") -> Path:
    """The tiny project with stations (one CSV, or several handed in together) and samples naming them."""
    files = {"stations.csv": [ST1, ST2]} if files is None else files
    samples = tiny_samples() if samples is None else samples
    if "station" not in samples.columns:
        samples = samples.assign(station=["ST-1", "ST-2"][: len(samples)])
    paths = list(files)
    extra = {"layers": {"stations": {"path": paths[0] if len(paths) == 1 else paths, "x_field": "easting",
                                     "y_field": "northing", "crs": "EPSG:32633", "date_field": "date",
                                     "observer_field": "observer", "observation_field": "observation"}}}
    if manifest:
        for k, v in manifest.items():
            extra.setdefault(k, {}).update(v) if isinstance(v, dict) else extra.__setitem__(k, v)
    root = tiny_project(tmp_path, samples=samples, manifest=extra, name=name)
    for file, rows in files.items():
        write_csv(root / file, rows)
    return root


def found(root: Path, rule: str):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


# ---------------------------------------------------------------- cases

def dup_across(tmp_path):
    moved = ["ST-2", "150", "85", "2024-06-12", "Second Mapper", "Grey mudstone, laminated.", "B"]
    return station_project(tmp_path, {"stations_anna.csv": [ST1, ST2], "stations_ben.csv": [moved]})


def two_files_clean(tmp_path):
    return station_project(tmp_path, {"stations_anna.csv": [ST1], "stations_ben.csv": [ST2]})


def unknown_station(tmp_path):
    return station_project(tmp_path, samples=tiny_samples().assign(station=["ST-1", "ST-9"]))


def clean(tmp_path):
    return station_project(tmp_path)


def off_map(tmp_path):
    return station_project(tmp_path, {"stations.csv": [ST1, ["ST-2", "150", "550", "", "", "", "B"]]},
                           samples=tiny_samples().assign(station=["ST-1", ""]))


def wrong_unit(tmp_path):
    return station_project(tmp_path, {"stations.csv": [ST1, ST2[:-1] + ["A"]]})


def far_sample(tmp_path):
    # sample S-0002 at (150, 50) names ST-1 at (50, 50): 100 m is not more than the default; 20 m allowed here
    return station_project(tmp_path, samples=tiny_samples().assign(station=["ST-1", "ST-1"]),
                           manifest={"checks": {"station_distance_m": 20}})


def samples_handed_in(tmp_path, repeat: bool):
    root = station_project(tmp_path)
    head = ["sample_id", "x", "y", "unit", "station"]
    write_csv(root / "samples_anna.csv", [["S-0001", "50", "50", "A", "ST-1"]], head)
    second = [["S-0001", "50", "50", "A", "ST-1"]] if repeat else []
    write_csv(root / "samples_ben.csv", second + [["S-0002", "150", "50", "B", "ST-2"]], head)
    import tomllib

    from builders import write_manifest

    data = tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    data["layers"]["samples"] = {"path": ["samples_anna.csv", "samples_ben.csv"], "x_field": "x", "y_field": "y",
                                 "crs": "EPSG:32633", "id_field": "sample_id", "unit_field": "unit"}
    write_manifest(root, data)
    return root


CASES = {
    "station-duplicate-id": (dup_across, two_files_clean),
    "station-unknown": (unknown_station, clean),
    "station-outside-extent": (off_map, clean),
    "station-unit-mismatch": (wrong_unit, clean),
    "station-link-distant": (far_sample, clean),
    "hand-in-row-repeated": (lambda p: samples_handed_in(p, True), lambda p: samples_handed_in(p, False)),
}


# ---------------------------------------------------------------- the findings, at their place

def test_conflicting_station_names_both_files(tmp_path):
    (f,) = found(dup_across(tmp_path), "station-duplicate-id")
    assert f.severity.value == "error"
    assert "station ST-2 is in stations_anna.csv row 3 and stations_ben.csv row 2" in f.message
    assert "different positions (35.0 m apart)" in f.message  # (150, 50) to (150, 85) in UTM metres
    assert "different observer" in f.message and "different observation" in f.message


def test_identical_station_handed_in_twice_is_a_notice(tmp_path):
    root = station_project(tmp_path, {"stations_anna.csv": [ST1, ST2], "stations_ben.csv": [ST2]})
    (f,) = found(root, "station-duplicate-id")
    assert f.severity.value == "notice"
    assert "handed in twice, identical" in f.message and "stations_anna.csv row 3 and stations_ben.csv row 2" in f.message


def test_unknown_station_names_the_probable_one(tmp_path):
    root = station_project(tmp_path, samples=tiny_samples().assign(station=["ST-1", "st-2 "]))
    (f,) = found(root, "station-unknown")
    assert "names station 'st-2'" in f.message and "probably ST-2" in f.message
    assert f.features == ("S-0002", "st-2")


def test_many_unknown_stations_are_one_finding_per_layer(tmp_path):
    from shapely.geometry import Point

    n = 6
    samples = tiny_samples(ids=[f"S-{i}" for i in range(n)], units=["A"] * n, xy=[(10 + 10 * i, 50) for i in range(n)])
    root = station_project(tmp_path, samples=samples.assign(station=[f"ZZ-{i}" for i in range(n)]))
    (f,) = found(root, "station-unknown")
    assert f.message.startswith("6 samples of map.gpkg:samples name 6 stations that are not in the stations")
    assert isinstance(Point, type)


def test_outside_station_distance_and_direction(tmp_path):
    (f,) = found(off_map(tmp_path), "station-outside-extent")
    assert "station ST-2 (row 3) lies 450.0 m north of the unit polygons" in f.message


def test_station_unit_mismatch_reuses_the_sample_wording(tmp_path):
    (f,) = found(wrong_unit(tmp_path), "station-unit-mismatch")
    assert f.message.startswith("station ST-2 (row 3) is recorded as A but lies in polygon 2 (B), 50.0 m inside its edge")
    assert "the nearest A polygon, polygon 1, is 50.0 m west" in f.message


def test_distant_sample_measured_in_metres(tmp_path):
    (f,) = found(far_sample(tmp_path), "station-link-distant")
    assert f.message == ("sample S-0002 (feature 2) is 100.0 m from its station ST-1 (stations.csv row 2); "
                         "more than station_distance_m (20 m).")
    assert f.measure == 100.0


def test_default_distance_is_100_m(tmp_path):
    root = station_project(tmp_path, samples=tiny_samples().assign(station=["ST-1", "ST-1"]))
    assert not found(root, "station-link-distant")  # exactly 100 m is not more than 100 m


def test_repeated_sample_row_is_not_also_a_duplicate_id(tmp_path):
    root = samples_handed_in(tmp_path, True)
    report = archivist.check(root, rules=["hand-in-row-repeated", "sample-duplicate-id"])
    (f,) = [x for x in report.findings]
    assert f.rule == "hand-in-row-repeated" and f.severity.value == "notice"
    assert f.message == "sample S-0001 is handed in twice, identical: samples_anna.csv row 2 and samples_ben.csv row 2."


def test_conflicting_sample_across_files_names_both(tmp_path):
    root = samples_handed_in(tmp_path, False)
    import tomllib

    with open(root / "samples_ben.csv", "a", encoding="utf-8") as fh:
        fh.write("S-0001,60,50,A,ST-1\n")
    assert tomllib.loads((root / "archivist.toml").read_text(encoding="utf-8"))
    (f,) = found(root, "sample-duplicate-id")
    assert "row 2 of samples_anna.csv, row 3 of samples_ben.csv" in f.message and "10.0 m apart" in f.message
