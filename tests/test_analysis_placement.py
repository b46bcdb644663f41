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


def _layer(rng: np.random.Generator, n: int, x0: float, y0: float, size: float) -> np.ndarray:
    """``n`` feature boxes of up to 100 m in a square of ``size`` metres at (x0, y0), with some empty rows."""
    x = rng.uniform(x0, x0 + size, n)
    y = rng.uniform(y0, y0 + size, n)
    bounds = np.c_[x, y, x + rng.uniform(0, 100, n), y + rng.uniform(0, 100, n)]
    bounds[rng.random(n) < 0.01] = np.nan
    return bounds


def test_sketched_answers_equal_those_of_the_exact_boxes():
    from archivist.analysis.placement import SKETCH_MIN, Placement, lonlat_boxes, sketch_of, within

    rng = np.random.default_rng(5)
    crs = pyproj.CRS("EPSG:32633")  # UTM zone 33N; the layers lie across its west edge (12°E) or well inside it
    for x0, y0, size in ((310_000, 6_500_000, 60_000), (400_000, 6_500_000, 30_000), (480_000, 50_000, 30_000)):
        bounds = _layer(rng, SKETCH_MIN + 3000, x0, y0, size)
        present = np.isfinite(bounds).all(axis=1)
        sketch = sketch_of(crs, bounds, present)
        assert sketch is not None and sketch.error < 1e-4
        fast = Placement("units", crs, True, bounds, present, sketch)
        exact = lonlat_boxes(crs, bounds)
        ref = Placement("units", crs, True, bounds, present, None)
        assert np.array_equal(ref.lonlat, exact, equal_nan=True)
        b = fast.box()
        assert b is not None and np.array_equal(b, ref.box())
        some = rng.random(len(bounds)) < 0.3
        assert np.array_equal(fast.box(some & present), ref.box(some & present))
        assert np.array_equal(fast.failed(), ~np.isfinite(exact).all(axis=1))
        rows = np.flatnonzero(present)[:50]
        assert np.array_equal(fast.boxes(rows), exact[rows])
        # areas whose edges cut through the layer, one edge at a time, with and without a margin
        w, s, e, n = b
        mid_lon, mid_lat = (w + e) / 2, (s + n) / 2
        areas = [(12.0, 0.0, 18.0, 84.0), (mid_lon, s - 1, e + 1, n + 1), (w - 1, mid_lat, e + 1, n + 1),
                 (w - 1, s - 1, mid_lon, n + 1), (w - 1, s - 1, e + 1, mid_lat), (w, s, e, n)]
        for area in areas:
            for margin in (0.0, 1e-7, 1.0):
                assert np.array_equal(fast.inside(area, margin), within(exact, area, margin))
        assert "lonlat" not in fast.__dict__  # answered without transforming the whole layer


def test_a_grid_that_does_not_follow_the_projection_leaves_the_layer_exact():
    from archivist.analysis.placement import SKETCH_MIN, sketch_of

    rng = np.random.default_rng(6)
    polar = pyproj.CRS("EPSG:3413")  # polar stereographic north: the pole inside the layer's envelope
    bounds = _layer(rng, SKETCH_MIN + 10, -20_000, -20_000, 40_000)
    present = np.isfinite(bounds).all(axis=1)
    assert sketch_of(polar, bounds, present) is None
    small = _layer(rng, 100, 400_000, 6_500_000, 10_000)
    assert sketch_of(pyproj.CRS("EPSG:32633"), small, np.isfinite(small).all(axis=1)) is None
