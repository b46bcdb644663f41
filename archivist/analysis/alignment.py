"""The layers as the checks across layers see them: in the map CRS, with swapped axes put right.

A layer that a CRS rule reports (`crs-mismatch`, `crs-axis-swap-suspected`)
would otherwise be reported again, feature by feature, by every check that
compares it with another layer (a sample outside the extent, a contact off
the polygons). Here the cause is taken into account once:

- features that fit where the map is only with x and y exchanged (the
  swap suspects of :mod:`archivist.analysis.placement`) are swapped back;
- a layer whose declared CRS differs from the map CRS is transformed to the
  map CRS (geopandas ``to_crs``, that is pyproj); if its coordinates fit
  where the map is only as they are (the label, not the coordinates, is
  wrong), they are kept as they are;
- a layer that cannot be placed with the map either way (the transform
  fails, or the layer lands far from the map both ways) is left out of the
  checks across layers.

"Where the map is" is the box of the units and extent layers that are in the
map CRS, widened on every side by its own size. Every change made is one note
in the report. Nothing is changed when the map CRS is not declared.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
import pyproj
import shapely

from .placement import SwapSuspects

if TYPE_CHECKING:
    from ..project import Layer, MapProject

# The layers that say where the map is (a layer is judged against the others).
_FRAME_ROLES = ("extent", "units")


@dataclass(frozen=True)
class Alignment:
    """The layers as the checks across layers see them, and what was done to get there."""

    layers: dict[str, Layer]
    reprojected: tuple[str, ...] = ()  # transformed from their own CRS to the map CRS
    relabelled: tuple[str, ...] = ()  # taken as they are: their coordinates fit the map, their CRS label does not
    swapped: tuple[tuple[str, int], ...] = ()  # (role, features whose x and y were exchanged)
    left_out: tuple[str, ...] = ()  # not placed with the map: left out of the checks across layers
    notes: tuple[str, ...] = ()

    @property
    def changed(self) -> bool:
        return bool(self.reprojected or self.relabelled or self.swapped or self.left_out)


def _label(crs: pyproj.CRS | None) -> str:
    if crs is None:
        return "no CRS"
    epsg = crs.to_epsg(min_confidence=70)
    return f"EPSG:{epsg} ({crs.name})" if epsg else crs.name


def _box(geoms: np.ndarray) -> np.ndarray | None:
    present = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if not present.any():
        return None
    b = shapely.total_bounds(geoms[present])
    return b if np.isfinite(b).all() else None


def _fits(b: np.ndarray | None, ref: np.ndarray | None) -> bool:
    """Whether box ``b`` meets the reference box widened on every side by its own size."""
    if b is None or ref is None:  # nothing to place, or nothing to place it against
        return True
    pad = max(ref[2] - ref[0], ref[3] - ref[1], 0.0)
    return bool(b[0] <= ref[2] + pad and b[2] >= ref[0] - pad and b[1] <= ref[3] + pad and b[3] >= ref[1] - pad)


def align_layers(project: MapProject, swaps: dict[str, SwapSuspects]) -> Alignment:
    """The project's layers in the map CRS, swapped axes exchanged back; see the module docstring."""
    target = project.crs
    layers: dict[str, Layer] = {}
    reprojected: list[str] = []
    relabelled: list[str] = []
    swapped: list[tuple[str, int]] = []
    left_out: list[str] = []
    notes: list[str] = []
    in_map_crs = [
        lay.geometry for role, lay in project.layers.items()
        if role in _FRAME_ROLES and role not in swaps and (lay.crs is None or target is None or lay.crs.equals(target, ignore_axis_order=True))
    ]
    boxes = [b for b in (_box(g) for g in in_map_crs) if b is not None]
    ref = np.array([min(b[0] for b in boxes), min(b[1] for b in boxes), max(b[2] for b in boxes), max(b[3] for b in boxes)]) if boxes else None
    for role, layer in project.layers.items():
        frame = layer.frame
        where = f"layers.{role} ({layer.source})"
        suspect = swaps[role].suspect if role in swaps else None
        if suspect is not None and suspect.any():
            geoms = layer.geometry.copy()
            geoms[suspect] = shapely.transform(geoms[suspect], lambda xy: xy[:, ::-1])
            frame = _with_geometry(frame, geoms)
            n = int(suspect.sum())
            swapped.append((role, n))
            notes.append(f"{where}: the other checks read {n} feature(s) with x and y exchanged (see crs-axis-swap-suspected).")
        crs = frame.crs
        if target is not None and crs is not None and not crs.equals(target, ignore_axis_order=True):
            moved = None
            try:
                moved = frame.to_crs(target)
            except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError, ValueError):
                moved = None
            geoms_moved = None if moved is None else np.asarray(moved.geometry.array, dtype=object)
            ok = geoms_moved is not None and bool(np.isfinite(shapely.get_coordinates(geoms_moved)).all())
            if ok and geoms_moved is not None and _fits(_box(geoms_moved), ref):
                frame = moved
                reprojected.append(role)
                notes.append(
                    f"{where} is {_label(crs)}: the other checks read it transformed to the map CRS {_label(target)} (see crs-mismatch)."
                )
            elif ref is not None and _fits(_box(np.asarray(frame.geometry.array, dtype=object)), ref):
                frame = frame.set_crs(target, allow_override=True)
                relabelled.append(role)
                notes.append(
                    f"{where} is labelled {_label(crs)}, but its coordinates lie on the map only as they are, in the map CRS "
                    f"{_label(target)}: the other checks read them so (see crs-mismatch)."
                )
            else:
                left_out.append(role)
                notes.append(
                    f"{where} is {_label(crs)} and cannot be placed with the map in {_label(target)}: "
                    "it is left out of the checks that compare it with other layers (see crs-mismatch)."
                )
                continue
        layers[role] = layer if frame is layer.frame else replace(layer, frame=frame)
    return Alignment(layers, tuple(reprojected), tuple(relabelled), tuple(swapped), tuple(left_out), tuple(notes))


def _with_geometry(frame, geoms: np.ndarray):
    """A copy of ``frame`` with its geometry column replaced (same CRS)."""
    out = frame.copy()
    out[out.geometry.name] = geoms
    return out.set_crs(frame.crs, allow_override=True) if frame.crs is not None else out
