"""Coordinates no map can have: non-finite, or far beyond any extent of the layer's CRS.

A single vertex at 1e300 makes areas and lengths overflow to infinity and
makes GEOS give up on the whole array it was handed; one such feature would
stop every geometric analysis of its layer. :func:`far_out` finds these
features so the metadata rule ``coordinates-implausible`` reports each one
and the geometric analyses leave them out.

The bounds are deliberately loose, to catch numbers that are broken rather
than places that are wrong (the crs family judges places):

* a geographic CRS (angular axes): any coordinate beyond ±720 degrees, twice
  the range of longitude, so unwrapped longitudes pass (common practice);
* any other CRS, or none: any coordinate beyond ±1e9 map units. In metres
  that is 25 times the Earth's equatorial circumference (40 075 km for the
  WGS 84 ellipsoid, a = 6 378 137 m, EPSG:7030); in US survey feet still
  more than seven times it.

Z and M values are not looked at.
"""

from __future__ import annotations

import numpy as np
import pyproj
import shapely

GEOGRAPHIC_LIMIT = 720.0
PROJECTED_LIMIT = 1e9


def coordinate_limit(crs: pyproj.CRS | None) -> float:
    """The largest plausible absolute coordinate for ``crs`` (see the module text)."""
    if crs is not None and crs.is_geographic:
        return GEOGRAPHIC_LIMIT
    return PROJECTED_LIMIT


def far_out(geoms: np.ndarray, crs: pyproj.CRS | None) -> tuple[np.ndarray, np.ndarray]:
    """Which geometries have a non-finite or implausibly large x or y, and the largest |x|, |y| of each.

    Returns ``(mask, largest)``: ``mask[i]`` is True for such a geometry;
    ``largest[i]`` is its largest absolute coordinate (``inf`` or ``nan``
    where one is not finite; 0 for a missing or empty geometry).
    """
    geoms = np.asarray(geoms, dtype=object)
    n = len(geoms)
    limit = coordinate_limit(crs)
    coords = shapely.get_coordinates(geoms, include_z=False)
    if bool((np.abs(coords.ravel()) <= limit).all()):  # False for NaN: every coordinate finite and near
        # the common case, without an index per coordinate: with every coordinate finite, each geometry's bounds
        # are the least and greatest of its own coordinates, exactly, so its largest |x|, |y| is the largest of
        # their absolute values (NaN bounds: a missing or empty geometry, 0)
        b = np.abs(shapely.bounds(geoms))
        largest = np.maximum(np.maximum(b[:, 0], b[:, 1]), np.maximum(b[:, 2], b[:, 3]))  # by columns: faster
        return np.zeros(n, dtype=bool), np.nan_to_num(largest, nan=0.0)
    coords, index = shapely.get_coordinates(geoms, include_z=False, return_index=True)
    x, y = coords[:, 0], coords[:, 1]  # column by column: numpy reduces a short axis slowly
    magnitude = np.maximum(np.abs(x), np.abs(y))  # NaN where either is NaN
    finite = np.isfinite(x) & np.isfinite(y)
    broken = ~finite | (magnitude > limit)
    mask = np.bincount(index, weights=broken, minlength=n) > 0
    largest = np.zeros(n)
    if len(index):
        # ``index`` runs in order (one geometry's coordinates after another's): the largest per run, in one pass
        starts = np.flatnonzero(np.r_[True, index[1:] != index[:-1]])
        largest[index[starts]] = np.maximum.reduceat(np.where(finite, magnitude, np.inf), starts)
    largest[np.bincount(index, weights=np.isnan(x) | np.isnan(y), minlength=n) > 0] = np.nan
    return mask, largest
