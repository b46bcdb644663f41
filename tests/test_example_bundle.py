"""The example bundle: generated deterministically, and clean by GEOS's own checks.

The script is run twice into temporary folders; both runs and the committed
files in example_bundle/ must be byte-identical. The geometry checks use
shapely/GEOS directly (not archivist's rules), as an outside reference.
If the byte comparison with the committed files fails after a dependency
upgrade (GDAL, GEOS, openpyxl), regenerate with
``python example_bundle/make_bundle.py`` and review the diff.
"""
from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import openpyxl
import pyogrio
import pyproj
import pytest
import shapely

ROOT = Path(__file__).resolve().parents[1]
BUNDLE = ROOT / "example_bundle"
SCRIPT = BUNDLE / "make_bundle.py"
FILES = ("map.gpkg", "legend.csv", "analyses.xlsx", "references.csv", "archivist.toml")
LAYERS = ("units", "lines", "extent", "samples", "structures")
LEGEND_COLUMNS = ["unit", "name", "description", "age", "min_age_ma", "max_age_ma", "order", "colour", "lithology", "kind"]
OXIDE_HEADERS = ["SiO2", "TiO2", "Al2O3", "Fe2O3T", "MnO", "MgO", "CaO", "Na2O", "K2O", "P2O5", "LOI", "Total"]
# Bounds (Ma) of the intervals the legend uses, from the ICS chart v2023/09.
ICS = {
    "Holocene": (0.0, 0.0117), "Cisuralian": (273.01, 298.9), "Gzhelian": (298.9, 303.7),
    "Kasimovian": (303.7, 307.0), "Bashkirian-Moscovian": (307.0, 323.2), "Visean": (330.9, 346.7),
    "Tournaisian": (346.7, 358.9), "Famennian": (358.9, 372.2), "Ediacaran": (538.8, 635.0),
}
LITERATURE_COLUMNS = ["source", "method", "longitude", "latitude"]  # compiled analyses (tests/test_literature.py)
COMPILED = 2  # rows taken from invented publications
TOL = 1e-3  # metres, for "covered by" tests on 1 cm-grid data


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    outs = []
    for name in ("run1", "run2"):
        out = tmp_path_factory.mktemp(name)
        subprocess.run([sys.executable, str(SCRIPT), str(out)], check=True, capture_output=True, text=True, timeout=300)
        outs.append(out)
    return outs


@pytest.fixture(scope="module")
def layers():
    return {name: pyogrio.read_dataframe(BUNDLE / "map.gpkg", layer=name) for name in LAYERS}


@pytest.fixture(scope="module")
def units(layers):
    df = layers["units"]
    return list(df.geometry.values), list(df["unit"])


@pytest.fixture(scope="module")
def lines(layers):
    df = layers["lines"]
    return list(df.geometry.values), list(df["kind"]), list(df["certainty"])


@pytest.fixture(scope="module")
def extent(layers):
    geoms = list(layers["extent"].geometry.values)
    assert len(geoms) == 1
    return geoms[0]


@pytest.fixture(scope="module")
def splay(units, lines):
    """Index of the one fault that ends freely inside a polygon (it is off every polygon boundary)."""
    bounds = shapely.union_all(shapely.boundary(units[0]))
    free = [i for i, (g, k) in enumerate(zip(lines[0], lines[1])) if k == "fault" and g.distance(bounds) > 50]
    assert len(free) == 1
    return free[0]


def shared_edges(polys):
    """(i, j, shared linework) for every pair of polygons sharing a boundary of positive length."""
    tree = shapely.STRtree(polys)
    out = []
    for i, j in zip(*tree.query(polys, predicate="touches")):
        if i < j:
            shared = shapely.line_merge(shapely.intersection(polys[i].boundary, polys[j].boundary))
            if shared.length > 0:
                out.append((i, j, shared))
    return out


@pytest.mark.slow
def test_runs_are_byte_identical(runs):
    for name in FILES:
        assert sha256(runs[0] / name) == sha256(runs[1] / name), f"{name} differs between two runs"


@pytest.mark.slow
def test_committed_bundle_is_what_the_script_makes(runs):
    """Same content as a fresh run. Text files byte for byte; the GeoPackage and the
    spreadsheet by content, since their bytes also depend on GDAL/openpyxl versions
    (regenerate with `python example_bundle/make_bundle.py` when those change)."""
    for name in ("archivist.toml", "legend.csv", "references.csv"):
        assert sha256(runs[0] / name) == sha256(BUNDLE / name), name
    for layer in LAYERS:
        fresh = pyogrio.read_dataframe(runs[0] / "map.gpkg", layer=layer, fid_as_index=True)
        committed = pyogrio.read_dataframe(BUNDLE / "map.gpkg", layer=layer, fid_as_index=True)
        assert fresh.drop(columns="geometry").equals(committed.drop(columns="geometry")), layer
        assert shapely.equals_exact(fresh.geometry.values, committed.geometry.values, tolerance=0).all(), layer
    fresh_wb, committed_wb = openpyxl.load_workbook(runs[0] / "analyses.xlsx"), openpyxl.load_workbook(BUNDLE / "analyses.xlsx")
    assert fresh_wb.sheetnames == committed_wb.sheetnames
    for sheet in fresh_wb.sheetnames:
        assert list(fresh_wb[sheet].values) == list(committed_wb[sheet].values), sheet


def test_crs_is_utm33n(layers):
    for name in LAYERS:
        crs = pyogrio.read_info(BUNDLE / "map.gpkg", layer=name)["crs"]
        assert pyproj.CRS.from_user_input(crs).to_epsg() == 32633
    assert set(pyogrio.list_layers(BUNDLE / "map.gpkg")[:, 0]) == set(LAYERS)


def test_counts(layers, units, lines, extent, splay):
    polys, codes = units
    assert len(polys) >= 40 and len(set(codes)) >= 8
    assert len(layers["samples"]) >= 30 and len(layers["structures"]) >= 50
    geoms, kinds, _ = lines
    assert "map-boundary" in kinds
    faults = [g for i, (g, k) in enumerate(zip(geoms, kinds)) if k == "fault" and i != splay]
    merged = shapely.get_parts(shapely.line_merge(shapely.union_all(faults)))
    frame = extent.boundary
    crossing = [f for f in merged if frame.distance(shapely.Point(f.coords[0])) < TOL and frame.distance(shapely.Point(f.coords[-1])) < TOL]
    assert len(crossing) >= 2
    wb = openpyxl.load_workbook(BUNDLE / "analyses.xlsx")
    assert wb["majors"].max_row - 1 == len(layers["samples"]) + COMPILED


def test_units_are_an_exact_coverage_of_the_extent(units, extent):
    polys, _ = units
    assert all(p.geom_type == "Polygon" and p.is_valid for p in polys)
    assert shapely.coverage_is_valid(polys)
    assert shapely.is_empty(shapely.coverage_invalid_edges(polys)).all()
    assert shapely.union_all(polys).symmetric_difference(extent).area < 1e-6
    assert extent.equals(shapely.box(*extent.bounds))


def test_no_slivers_or_thin_parts(units):
    for p in units[0]:
        assert p.area >= 5000
        inner = p.buffer(-10)  # a part thinner than 20 m would vanish or split off
        assert inner.geom_type == "Polygon" and not inner.is_empty


def test_same_unit_polygons_meet_only_across_faults(units, lines):
    polys, codes = units
    geoms, kinds, _ = lines
    fault_zone = shapely.union_all([g for g, k in zip(geoms, kinds) if k == "fault"]).buffer(TOL)
    for i, j, shared in shared_edges(polys):
        if codes[i] == codes[j]:
            assert fault_zone.covers(shared), f"{codes[i]} polygons {i} and {j} share an edge off any fault"


def test_lines_lie_on_polygon_boundaries(units, lines, splay):
    bounds = shapely.union_all(shapely.boundary(units[0])).buffer(TOL)
    for i, (g, k) in enumerate(zip(lines[0], lines[1])):
        if i != splay:
            assert bounds.covers(g), f"{k} line {i} leaves the polygon boundaries"


def test_unit_boundaries_and_frame_are_covered_by_lines(units, lines, extent):
    polys, codes = units
    geoms, kinds, _ = lines
    drawn = shapely.union_all([g for g, k in zip(geoms, kinds) if k in ("contact", "fault")]).buffer(TOL)
    for i, j, shared in shared_edges(polys):
        if codes[i] != codes[j]:
            assert drawn.covers(shared), f"boundary {codes[i]}|{codes[j]} ({i}, {j}) has no line"
    frame = shapely.union_all([g for g, k in zip(geoms, kinds) if k == "map-boundary"])
    assert frame.buffer(TOL).covers(extent.boundary) and extent.boundary.buffer(TOL).covers(frame)


def test_line_attributes_and_topology(lines, splay, units):
    geoms, kinds, certs = lines
    assert set(kinds) <= {"contact", "fault", "map-boundary"}
    assert set(certs) <= {"certain", "approximate", "inferred", "concealed"} and len(set(certs)) >= 3
    assert all(g.geom_type == "LineString" and g.is_simple and g.length > 0 for g in geoms)
    tree = shapely.STRtree(geoms)
    for i, j in zip(*tree.query(geoms, predicate="intersects")):
        if i < j:
            assert shapely.intersection(geoms[i], geoms[j]).length < 1e-9, f"lines {i} and {j} overlap"
    for i, (g, k) in enumerate(zip(geoms, kinds)):
        if k != "contact":
            continue
        others = shapely.union_all([h for n, h in enumerate(geoms) if n != i])
        for end in (g.coords[0], g.coords[-1]):
            assert others.distance(shapely.Point(end)) < TOL, f"contact {i} dangles at {end}"
    # the splay fault ends freely, >= 100 m inside one polygon
    inside = [p for p in units[0] if p.contains(geoms[splay])]
    assert len(inside) == 1 and inside[0].exterior.distance(geoms[splay]) >= 100


def test_no_segment_shorter_than_the_tolerance(units, lines):
    tolerance = tomllib.loads((BUNDLE / "archivist.toml").read_text())["checks"]["tolerance"]
    rings = [r for p in units[0] for r in (p.exterior, *p.interiors)]
    for g in (*rings, *lines[0]):
        c = shapely.get_coordinates(g)
        assert np.hypot(*np.diff(c, axis=0).T).min() >= tolerance


def test_samples(layers, units):
    polys, codes = units
    df = layers["samples"]
    assert df["sample_id"].is_unique
    assert all(isinstance(s, str) and re.fullmatch(r"[A-Z]{2}\d{2}-\d{4}", s) for s in df["sample_id"])
    authors = {a["name"] for a in tomllib.loads((BUNDLE / "archivist.toml").read_text())["map"]["authors"]}
    assert set(df["collector"]) <= authors
    for date in df["collected"]:
        dt.date.fromisoformat(date)
    tree = shapely.STRtree(polys)
    for sid, unit, p in zip(df["sample_id"], df["unit"], df.geometry.values):
        hits = [i for i in tree.query(p, predicate="within")]
        assert len(hits) == 1 and codes[hits[0]] == unit, f"{sid} is not in a {unit} polygon"
        assert polys[hits[0]].boundary.distance(p) >= 50


def test_structures(layers):
    df = layers["structures"]
    kinds = {"bedding", "foliation", "cleavage", "joint", "vein", "fault plane", "lineation", "fold axis"}
    assert set(df["kind"]) <= kinds
    assert df["azimuth"].dtype.kind == "f" and df["dip"].dtype.kind == "f"
    assert ((df["azimuth"] >= 0) & (df["azimuth"] <= 360)).all()
    assert ((df["dip"] >= 0) & (df["dip"] <= 90)).all()


def test_analyses(layers):
    wb = openpyxl.load_workbook(BUNDLE / "analyses.xlsx")
    assert wb.sheetnames == ["majors", "method"] and wb["method"].max_row >= 3
    ws = wb["majors"]
    header = [c.value for c in ws[1]]
    assert header == ["sample_id"] + [f"{h} (wt%)" for h in OXIDE_HEADERS] + LITERATURE_COLUMNS
    censored = 0
    ids = []
    compiled = []
    for full in ws.iter_rows(min_row=2):
        row, (source, method, lon, lat) = full[: -len(LITERATURE_COLUMNS)], [c.value for c in full[-len(LITERATURE_COLUMNS):]]
        assert row[0].data_type == "s" and isinstance(row[0].value, str)
        assert method
        if source == "this study":
            ids.append(row[0].value)
            assert lon is None and lat is None  # the team's own rows are placed by their sample
        else:
            compiled.append(row[0].value)
            assert isinstance(lon, float) and isinstance(lat, float)
        values = []
        for cell in row[1:-1]:
            if isinstance(cell.value, str):
                assert re.fullmatch(r"<\d+(\.\d+)?", cell.value)
                censored += 1
            else:
                values.append(cell.value)
        total = row[-1].value
        assert 98.5 <= total <= 101.5
        assert abs(total - round(sum(values), 2)) < 0.006
    assert 1 <= censored <= 2
    assert sorted(ids) == sorted(layers["samples"]["sample_id"])
    assert len(compiled) == COMPILED and not set(compiled) & set(ids)


def test_legend(units):
    raw = (BUNDLE / "legend.csv").read_bytes()
    assert not raw.startswith(b"\xef\xbb\xbf") and b"\r" not in raw
    rows = list(csv.DictReader(io.StringIO(raw.decode("utf-8"))))
    assert list(rows[0].keys()) == LEGEND_COLUMNS
    assert all(r[c] for r in rows for c in ("unit", "name", "description", "age"))
    assert [int(r["order"]) for r in rows] == list(range(1, len(rows) + 1))
    assert all(re.fullmatch(r"#[0-9A-Fa-f]{6}", r["colour"]) for r in rows)
    assert {r["kind"] for r in rows} <= {"sedimentary", "volcanic", "metamorphic", "superficial", "intrusive"}
    for r in rows:
        lo, hi = float(r["min_age_ma"]), float(r["max_age_ma"])
        youngest, oldest = ICS[r["age"]]
        assert youngest <= lo <= hi <= oldest, r["unit"]
    layered = [r for r in rows if r["kind"] != "intrusive"]
    for young, old in zip(layered, layered[1:]):
        assert float(young["max_age_ma"]) <= float(old["min_age_ma"])
    assert {r["unit"] for r in rows} == set(units[1])


def test_manifest():
    m = tomllib.loads((BUNDLE / "archivist.toml").read_text())
    assert m["map"]["crs"] == "EPSG:32633" and m["map"]["scale"] == 25000
    assert 2 <= len(m["map"]["authors"]) <= 3
    for a in m["map"]["authors"]:
        assert a["name"] and "orcid" not in a  # invented people carry no identifier that could be someone's
    assert set(m["layers"]) == {*LAYERS, "stations"} and set(m["tables"]) == {"legend", "analyses", "references"}
    for section in (*m["layers"].values(), *m["tables"].values()):
        paths = section["path"] if isinstance(section["path"], list) else [section["path"]]  # stations: one file per mapper
        assert all((BUNDLE / p).is_file() for p in paths)
    assert np.isclose(m["checks"]["tolerance"], 0.5)
