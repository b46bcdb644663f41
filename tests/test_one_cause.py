"""One cause, one finding: a clean map with one defect injected gives that defect's finding and at most one consequence.

The clean map is the example bundle (``copy_bundle``): a 1:25 000 map with
44 unit polygons, contacts, faults, a drawn frame, an extent layer, samples,
structures, a legend and analyses, on which ``check`` finds nothing. Each case
below injects one defect, the way it happens while editing, and the check must
give the defect's own rule plus at most one consequence (errors and warnings
counted; notices are not).
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path
from typing import Callable

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
from shapely.affinity import translate
from shapely.geometry import LineString, Point, box

import archivist
from builders import copy_bundle, edit_layer, edit_table, edit_xlsx, read_layer, tiny_project
from archivist.analysis.context import CheckContext
from archivist.model import Severity
from archivist.project import load_project

MAP = "map.gpkg"


def _shared_edge(units: gpd.GeoDataFrame) -> tuple[int, int, object]:
    """Two polygons of different units sharing the longest edge, and that edge."""
    geoms = np.asarray(units.geometry.array, dtype=object)
    tree = shapely.STRtree(geoms)
    a, b = tree.query(geoms, predicate="touches")
    keep = (a < b) & (units.unit.to_numpy()[a] != units.unit.to_numpy()[b])
    a, b = a[keep], b[keep]
    shared = shapely.intersection(shapely.boundary(geoms[a]), shapely.boundary(geoms[b]))
    k = int(np.argmax(shapely.length(shared)))
    return int(a[k]), int(b[k]), shapely.line_merge(shared[k])


def _midpoint(line) -> Point:
    return shapely.line_interpolate_point(line, 0.5, normalized=True)


def crs_other(root: Path) -> None:
    """The samples saved in the neighbouring UTM zone (a real transformation: they still lie on the map)."""
    edit_layer(root, MAP, "samples", lambda f: f.to_crs("EPSG:32632"))


def crs_mislabelled(root: Path) -> None:
    """The samples labelled with the neighbouring zone, their coordinates left in the map's zone."""
    edit_layer(root, MAP, "samples", lambda f: f.set_crs("EPSG:32632", allow_override=True))


def axes_swapped(root: Path) -> None:
    """The samples imported with x and y exchanged."""

    def swap(f):
        f.geometry = shapely.transform(np.asarray(f.geometry.array, dtype=object), lambda xy: xy[:, ::-1])
        return f

    edit_layer(root, MAP, "samples", swap)


def gap(root: Path) -> None:
    """A bite 30 m across cut out of one polygon along its contact with a neighbour."""

    def change(f):
        i, _, edge = _shared_edge(f)
        f.loc[f.index[i], "geometry"] = f.geometry.iloc[i].difference(_midpoint(edge).buffer(15))
        return f

    edit_layer(root, MAP, "units", change)


def overlap(root: Path) -> None:
    """One polygon pushed 15 m into its neighbour along their contact."""

    def change(f):
        i, j, edge = _shared_edge(f)
        bite = f.geometry.iloc[j].intersection(_midpoint(edge).buffer(15))
        f.loc[f.index[i], "geometry"] = f.geometry.iloc[i].union(bite)
        return f

    edit_layer(root, MAP, "units", change)


SLIVER = {}


def sliver(root: Path) -> None:
    """A 60 m x 4 m polygon of another unit inside a large polygon, with its contact drawn around it."""
    units = read_layer(root, MAP, "units")
    big = int(np.argmax(units.geometry.area.to_numpy()))
    host = units.geometry.iloc[big]
    c = host.point_on_surface()
    strip = box(c.x - 30, c.y - 2, c.x + 30, c.y + 2)
    assert host.contains(strip.buffer(20))
    other = next(u for u in units.unit if u != units.unit.iloc[big])

    def change(f):
        f.loc[f.index[big], "geometry"] = host.difference(strip)
        row = f.iloc[[big]].copy()
        row["unit"] = other
        row.geometry = [strip]
        row.index = [int(f.index.max()) + 1]
        return gpd.GeoDataFrame(pd.concat([f, row]), crs=f.crs)

    edit_layer(root, MAP, "units", change)

    def add_line(f):
        row = f[f.kind == "contact"].iloc[[0]].copy()
        row.geometry = [strip.exterior]
        row.index = [int(f.index.max()) + 1]
        return gpd.GeoDataFrame(pd.concat([f, row]), crs=f.crs)

    edit_layer(root, MAP, "lines", add_line)


def _a_contact(f: gpd.GeoDataFrame) -> int:
    """The longest contact."""
    contacts = np.flatnonzero(f.kind.to_numpy() == "contact")
    return int(contacts[np.argmax(f.geometry.iloc[contacts].length.to_numpy())])


def contact_shifted(root: Path) -> None:
    """A whole contact moved 4 m north (the polygons stay)."""

    def change(f):
        k = _a_contact(f)
        f.loc[f.index[k], "geometry"] = translate(f.geometry.iloc[k], 0, 4)
        return f

    edit_layer(root, MAP, "lines", change)


def contact_deleted(root: Path) -> None:
    """One contact deleted."""
    edit_layer(root, MAP, "lines", lambda f: f.drop(index=f.index[_a_contact(f)]))


def dangle(root: Path) -> None:
    """A contact drawn 20 m past the line it ends on."""

    def change(f):
        k = _a_contact(f)
        line = shapely.line_merge(f.geometry.iloc[k])
        xy = shapely.get_coordinates(line)
        d = xy[-1] - xy[-2]
        end = xy[-1] + d / np.hypot(*d) * 20
        f.loc[f.index[k], "geometry"] = LineString([*xy, end])
        return f

    edit_layer(root, MAP, "lines", change)


def orphan_mangled(root: Path) -> None:
    """The lab's sheet lost the leading zeros of one sample id (TM24-0007 -> TM24-7)."""

    def change(ws):
        for row in ws.iter_rows(min_row=2):
            if row[0].value == "TM24-0007":
                row[0].value = "TM24-7"

    edit_xlsx(root, "analyses.xlsx", "majors", change)


def sample_outside(root: Path) -> None:
    """One sample 300 m south of the map's frame (a typo in its northing)."""

    def change(f):
        x, y = f.geometry.iloc[0].x, f.geometry.iloc[0].y
        f.loc[f.index[0], "geometry"] = Point(x, 6792000 - 300)
        return f

    edit_layer(root, MAP, "samples", change)


def legend_missing_unit(root: Path) -> None:
    """The legend row of one unit deleted."""
    edit_table(root, "legend.csv", lambda t: t[t.unit != "TCG"])


def no_contacts(root: Path) -> None:
    """Polygons, faults and frame only: no contact drawn at all (common in compilations)."""
    edit_layer(root, MAP, "lines", lambda f: f[f.kind != "contact"])


def frame_undrawn(root: Path) -> None:
    """No map-boundary line: the frame is only the extent layer."""
    edit_layer(root, MAP, "lines", lambda f: f[f.kind != "map-boundary"])


# defect -> (injection, the rule that reports the defect itself)
DEFECTS: dict[str, tuple[Callable[[Path], None], str]] = {
    "layer in another CRS": (crs_other, "crs-mismatch"),
    "CRS label wrong": (crs_mislabelled, "crs-mismatch"),
    "swapped axes": (axes_swapped, "crs-axis-swap-suspected"),
    "gap": (gap, "unit-gap"),
    "overlap": (overlap, "unit-overlap"),
    "sliver": (sliver, "unit-sliver"),
    "shifted contact": (contact_shifted, "line-off-boundary"),
    "deleted contact": (contact_deleted, "boundary-without-line"),
    "dangle": (dangle, "line-dangle"),
    "orphan analysis, mangled id": (orphan_mangled, "analysis-orphan"),
    "sample outside the extent": (sample_outside, "sample-outside-extent"),
    "unit missing from the legend": (legend_missing_unit, "legend-missing-unit"),
    "no contacts at all": (no_contacts, "boundary-without-line"),
    "frame without lines": (frame_undrawn, "boundary-without-line"),
}


@pytest.fixture(scope="module")
def clean_report(tmp_path_factory):
    return archivist.check(copy_bundle(tmp_path_factory.mktemp("clean")))


def test_the_clean_map_is_clean(clean_report):
    assert [f.rule for f in clean_report.findings] == []


def serious(report) -> list:
    return [f for f in report.findings if f.severity in (Severity.ERROR, Severity.WARNING)]


@pytest.mark.parametrize("defect", list(DEFECTS))
def test_one_defect_one_finding(tmp_path, defect):
    inject, own = DEFECTS[defect]
    root = copy_bundle(tmp_path)
    inject(root)
    found = serious(archivist.check(root))
    counts = Counter(f.rule for f in found)
    shown = "\n".join(f"{f.rule}: {f.message}" for f in found[:12])
    assert own in counts, f"{defect}: {own} missing; found {dict(counts)}\n{shown}"
    assert len(found) <= 2, f"{defect}: {len(found)} errors and warnings {dict(counts)}\n{shown}"


# ---------------------------------------------------------------- how a CRS fault is taken into account


def test_a_layer_in_another_crs_is_read_transformed_for_the_other_checks(tmp_path):
    root = copy_bundle(tmp_path)
    crs_other(root)
    project = load_project(root)
    ctx = CheckContext(project)
    seen = ctx.layer("samples")
    assert seen is not None and seen.crs.equals(project.crs)
    # the reference: pyproj's own transformation of the coordinates as stored (EPSG:32632 -> EPSG:32633)
    raw = shapely.get_coordinates(project.layers["samples"].geometry)
    x, y = pyproj.Transformer.from_crs("EPSG:32632", "EPSG:32633", always_xy=True).transform(raw[:, 0], raw[:, 1])
    assert np.allclose(shapely.get_coordinates(seen.geometry), np.c_[x, y], atol=1e-6)
    assert ctx.alignment().reprojected == ("samples",)
    assert any("layers.samples" in n and "transformed to the map CRS" in n for n in ctx.notes)
    # the layer as the CRS rules read it is untouched
    assert project.layers["samples"].crs.to_epsg() == 32632


def test_swapped_features_are_read_swapped_back(tmp_path):
    root = copy_bundle(tmp_path)
    before = shapely.get_coordinates(read_layer(root, MAP, "samples").geometry.values)
    axes_swapped(root)
    ctx = CheckContext(load_project(root))
    assert np.array_equal(shapely.get_coordinates(ctx.layer("samples").geometry), before)
    assert ctx.alignment().swapped == (("samples", 33),)


def test_a_layer_that_cannot_be_placed_is_left_out_with_one_note(tmp_path):
    root = copy_bundle(tmp_path)
    # neither as labelled (zone 32) nor as stored do the points come near the map
    edit_layer(root, MAP, "samples", lambda f: f.set_geometry(f.geometry.translate(2_000_000, 0)).set_crs("EPSG:32632", allow_override=True))
    report = archivist.check(root)
    assert not [f for f in report.findings if f.family == "samples"]
    assert {f.rule for f in report.findings} <= {"crs-mismatch", "crs-outside-area-of-use", "crs-axis-swap-suspected"}
    (note,) = [n for n in report.notes if n.startswith("layers.samples")]
    assert "left out of the checks that compare it with other layers" in note


def test_a_map_with_no_contacts_gives_one_finding_per_layer(tmp_path):
    root = copy_bundle(tmp_path)
    no_contacts(root)
    (f,) = [f for f in archivist.check(root).findings if f.rule == "boundary-without-line"]
    assert f.layer == "lines" and "no line of kind 'contact'" in f.message and "66 stretches" in f.message


def test_missing_linework_that_is_the_exception_is_listed_one_by_one(tmp_path):
    root = copy_bundle(tmp_path)
    contact_deleted(root)
    (f,) = [f for f in archivist.check(root).findings if f.rule == "boundary-without-line"]
    assert f.message.startswith("No line draws 4309.46 m of the boundary between polygons ")


def test_a_frame_without_lines_names_the_frame_and_the_kind_it_needs(tmp_path):
    # the tiny map: two units, a contact, no map-boundary line; its frame is the outline of the units
    lines = gpd.GeoDataFrame({"kind": ["contact"], "certainty": ["certain"]}, geometry=[LineString([(100, 0), (100, 100)])], crs="EPSG:32633")
    root = tiny_project(tmp_path, lines=lines)
    (f,) = [f for f in archivist.check(root).findings if f.rule == "boundary-without-line"]
    assert "the outer boundary of the unit polygons" in f.message and "kind 'map-boundary'" in f.message
    # the 2 x 3 outer sides of the two 100 m squares, less the tolerance (1 m) where each meets the contact's two ends
    assert f.measure == pytest.approx(596.0)


def test_one_stretch_of_frame_missing_names_the_kind(tmp_path):
    lines = gpd.GeoDataFrame(
        {"kind": ["contact", "map-boundary"], "certainty": ["certain", "certain"]},
        geometry=[LineString([(100, 0), (100, 100)]), LineString([(100, 0), (0, 0), (0, 100), (100, 100), (200, 100)])],
        crs="EPSG:32633",
    )
    root = tiny_project(tmp_path, lines=lines)
    found = [f for f in archivist.check(root).findings if f.rule == "boundary-without-line"]
    # undrawn: the east and south sides of the east square, 200 m, less the tolerance (1 m) at each end of the drawn frame
    assert [f.message for f in found] == [
        "No line draws 198.00 m of the map edge along polygon 2 (B); the frame needs a line of kind 'map-boundary' there."
    ]
