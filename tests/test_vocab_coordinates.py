"""Longitude/latitude columns: headers as mappers write them, and cells in decimal degrees or degrees-minutes-seconds.

Reference for the cell values: a sexagesimal angle d°m's" is d + m/60 + s/3600 degrees,
west and south negative (the convention ISO 6709 writes down; from memory).
"""

import math

import numpy as np
import pandas as pd
import pytest

from archivist.vocab.coordinates import degrees, header_axis, lonlat_columns, rounding_step


@pytest.mark.parametrize(
    "header, axis",
    [
        ("lon", "lon"), ("Long", "lon"), ("LONGITUDE", "lon"), ("lng", "lon"), ("Longitude (°E)", "lon"),
        ("x_wgs84", "lon"), ("X (WGS84)", "lon"), ("lon_dd", "lon"), ("DecimalLongitude", "lon"), ("longitude_deg", "lon"),
        ("lat", "lat"), ("Latitude", "lat"), ("lat_N", "lat"), ("y_wgs84", "lat"), ("Y_4326", "lat"), ("Latitude WGS84", "lat"),
        # Not degrees, or not said to be: projected coordinates and look-alikes.
        ("x", None), ("y", None), ("easting", None), ("northing", None), ("long_axis", None), ("lateral", None), ("sample_id", None),
    ],
)
def test_headers(header, axis):
    assert header_axis(header) == axis


def test_manifest_names_win_and_case_is_forgiven():
    cols = ["sample_id", "lon", "lat", "GPS_E", "GPS_N"]
    assert lonlat_columns(cols, {}) == ("lon", "lat", False)
    assert lonlat_columns(cols, {"lon_field": "gps_e", "lat_field": "gps_n"}) == ("GPS_E", "GPS_N", True)
    assert lonlat_columns(cols, {"lon_field": "missing", "lat_field": "GPS_N"}) is None  # the loader reports the field
    assert lonlat_columns(["sample_id", "lon"], {}) is None  # a pair or nothing


@pytest.mark.parametrize(
    "cell, axis, expected",
    [
        ("14.7", "lon", 14.7),
        ("14,7", "lon", 14.7),  # a decimal comma
        (14.25, "lon", 14.25),
        ("-14.5", "lon", -14.5),
        ("14°42'30\"E", "lon", 14 + 42 / 60 + 30 / 3600),
        ("14 42 30 W", "lon", -(14 + 42 / 60 + 30 / 3600)),
        ("W 14 42.5", "lon", -(14 + 42.5 / 60)),
        ("61 18.5 N", "lat", 61 + 18.5 / 60),
        ("S 40°12'", "lat", -(40 + 12 / 60)),
        ("40.5S", "lat", -40.5),
        ("61°18′30″N", "lat", 61 + 18 / 60 + 30 / 3600),  # prime and double prime
    ],
)
def test_cells_read_as_degrees(cell, axis, expected):
    (got,) = degrees([cell], axis)
    assert got == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(
    "cell, axis",
    [("61 18.5 N", "lon"), ("40.5E", "lat"), ("200", "lon"), ("95", "lat"), ("14°60'", "lon"), ("x", "lon"), ("", "lon"), (None, "lat"),
     ("N 61 18 S", "lat")],
)
def test_cells_that_are_not_readings(cell, axis):
    assert math.isnan(degrees([cell], axis)[0])


def test_whole_columns_vectorised():
    values = pd.Series(["14.7", "14°42'30\"E", None, 15.0] * 1000, dtype=object)
    got = degrees(values, "lon")
    assert got.shape == (4000,) and np.isnan(got[2::4]).all() and (got[3::4] == 15.0).all()


def test_rounding_step():
    assert rounding_step(np.array([14.7012, 14.5, np.nan])) == pytest.approx(1e-4)
    assert rounding_step(np.array([14.701])) == pytest.approx(1e-3)
    assert rounding_step(np.array([14.123456789])) == 0.0  # finer than 1e-8: precise
    assert rounding_step(np.array([np.nan])) == 0.0
