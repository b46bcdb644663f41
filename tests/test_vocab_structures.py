"""archivist.vocab.structures: kinds, flags, north statements, and a rake turned into trend and plunge.

The rake reference values come from the textbook relations of a line in an
inclined plane (structural geology texts, e.g. the "pitch" construction of
geometrical techniques courses; from memory): with rake r measured in the
plane from the strike, and dip d,

    sin(plunge) = sin(r) * sin(d)
    tan(beta)   = tan(r) * cos(d)     (beta: angle from the strike to the trend, in the horizontal)

computed here with the math module, independently of the vector algebra the
module uses. The strike is the right-hand-rule strike (dip direction - 90;
common practice).
"""

import math

import numpy as np
import pandas as pd
import pytest

from archivist.vocab import structures as sv


def textbook_line(dip_direction: float, dip: float, rake: float) -> tuple[float, float]:
    """Trend and plunge by the textbook relations (see the module docstring)."""
    r, d = math.radians(rake), math.radians(dip)
    plunge = math.degrees(math.asin(math.sin(r) * math.sin(d)))
    beta = math.degrees(math.atan2(math.sin(r) * math.cos(d), math.cos(r)))  # tan(beta) = tan(r) cos(d), quadrant kept
    return (dip_direction - 90.0 + beta) % 360.0, plunge


@pytest.mark.parametrize(
    "dip_direction, dip, rake, trend, plunge",
    [
        (90.0, 30.0, 0.0, 0.0, 0.0),  # rake 0: along the strike (definition of rake)
        (90.0, 30.0, 180.0, 180.0, 0.0),  # rake 180: the other end of the strike
        (90.0, 30.0, 90.0, 90.0, 30.0),  # rake 90: down the dip line, plunge = dip
        (90.0, 60.0, 30.0, 16.102, 25.659),  # sin p = 0.5 * sin 60; tan b = tan 30 * cos 60 (from memory, computed)
        (200.0, 90.0, 45.0, 110.0, 45.0),  # vertical plane: trend = strike, plunge = rake
        (0.0, 45.0, 120.0, 39.232, 37.761),  # past the dip line toward the far strike end: b = 180 - atan(tan 60 cos 45)
    ],
)
def test_rake_to_line_against_textbook_values(dip_direction, dip, rake, trend, plunge):
    t, p = sv.rake_to_line([dip_direction], [dip], [rake])
    ref_t, ref_p = textbook_line(dip_direction, dip, rake)
    assert p[0] == pytest.approx(ref_p, abs=1e-9) and p[0] == pytest.approx(plunge, abs=1e-3)
    assert math.isclose(((t[0] - ref_t + 180) % 360) - 180, 0.0, abs_tol=1e-9)
    assert math.isclose(((t[0] - trend % 360 + 180) % 360) - 180, 0.0, abs_tol=1e-3)


def test_rake_to_line_whole_arrays():
    rng = np.random.default_rng(7)
    dd, dip, rake = rng.uniform(0, 360, 200), rng.uniform(0.5, 89.5, 200), rng.uniform(0.5, 179.5, 200)
    t, p = sv.rake_to_line(dd, dip, rake)
    ref = np.array([textbook_line(*row) for row in zip(dd, dip, rake)])
    assert np.allclose(p, ref[:, 1], atol=1e-9)
    assert np.allclose(((t - ref[:, 0] + 180) % 360) - 180, 0.0, atol=1e-9)


@pytest.mark.parametrize("azimuth, convention, dip_direction", [(10.0, "right-hand-rule", 100.0), (300.0, "right-hand-rule", 30.0), (300.0, "dip-direction", 300.0)])
def test_dip_directions(azimuth, convention, dip_direction):
    # right-hand rule: the plane dips to the right of the strike, dip direction = strike + 90 (common practice)
    assert sv.dip_directions([azimuth], convention)[0] == dip_direction


def test_flags_read():
    yes, unreadable = sv.read_flags(pd.Series(["Yes", "n", None, "OT", "maybe", "1", "upright"], dtype=object))
    assert yes.tolist() == [True, False, False, True, False, True, False]
    assert unreadable.tolist() == [False, False, False, False, True, False, False]


def test_boolean_flag_column():
    yes, unreadable = sv.read_flags(pd.Series([True, False]))
    assert yes.tolist() == [True, False] and not unreadable.any()


def test_kinds_folded():
    assert sv.fold_all(["Overturned_Bedding", " fold-axis ", None]).tolist() == ["overturned bedding", "fold axis", ""]
    assert sv.fold("Fault  Plane") == "fault plane"


@pytest.mark.parametrize(
    "spec, words",
    [
        ({}, "does not say which north, and true (geographic) north is assumed"),
        ({"north": "true"}, "from true (geographic) north."),
        ({"north": "grid"}, "from grid north of the map CRS."),
        ({"north": "magnetic"}, "declination was not declared"),
        # east declination is added to a magnetic azimuth to give a true one (common practice)
        ({"north": "magnetic", "declination": 4}, "4° east (true azimuth = magnetic azimuth + 4°)"),
        ({"north": "magnetic", "declination": -3.5}, "3.5° west (true azimuth = magnetic azimuth - 3.5°)"),
    ],
)
def test_north_statement(spec, words):
    assert words in sv.north_statement(spec)
