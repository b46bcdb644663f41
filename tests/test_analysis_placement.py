"""Lon/lat boxes of feature boxes (``to_lonlat``) equal pyproj's transform of each box's nine points, box by box."""

from __future__ import annotations

import numpy as np
import pyproj

from archivist.analysis.placement import WGS84, to_lonlat


def lonlat_by_loop(crs: pyproj.CRS, bounds: np.ndarray) -> np.ndarray:
    """One box at a time: its 3 x 3 grid through pyproj, the min and max; NaN when a point fails or |lat| > 90."""
    t = pyproj.Transformer.from_crs(crs, WGS84, always_xy=True)
    out = np.full((len(bounds), 4), np.nan)
    for i, (x0, y0, x1, y1) in enumerate(bounds):
        xs, ys = (x0, (x0 + x1) / 2, x1), (y0, (y0 + y1) / 2, y1)
        pts = [t.transform(x, y, errcheck=False) for x in xs for y in ys]
        lon, lat = np.array(pts, dtype=float).T
        if np.isfinite(lon).all() and np.isfinite(lat).all() and not (np.abs(lat) > 90).any():
            out[i] = (lon.min(), lat.min(), lon.max(), lat.max())
    return out


def test_lonlat_boxes_match_the_box_by_box_transform():
    rng = np.random.default_rng(11)
    x0 = rng.uniform(200_000, 800_000, 40)  # UTM zone 33N eastings and northings (EPSG:32633)
    y0 = rng.uniform(0, 9_000_000, 40)
    bounds = np.c_[x0, y0, x0 + rng.uniform(0, 5_000, 40), y0 + rng.uniform(0, 5_000, 40)]
    bounds[5] = np.nan  # a feature with no geometry
    bounds[9] = (1e12, 1e12, 1e12 + 1, 1e12 + 1)  # where PROJ cannot go
    crs = pyproj.CRS("EPSG:32633")
    got = to_lonlat(crs, bounds)
    expected = lonlat_by_loop(crs, bounds)
    assert np.array_equal(got, expected, equal_nan=True)
    assert np.isnan(got[5]).all() and np.isnan(got[9]).all()
    assert np.isfinite(np.delete(got, [5, 9], axis=0)).all()
