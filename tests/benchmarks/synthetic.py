"""A large synthetic map project for benchmarks: a Voronoi coverage of N unit polygons.

Everything is invented: the "Quillon Fells" district, its units and its
samples. The polygons are the Voronoi cells of N random points clipped to a
20 km square (a clean coverage by construction: GEOS builds the cells), with
units laid out in folded bands so that the map looks like a map; contacts are
the boundaries between cells of different units, plus two faults and the map
boundary. ``python tests/benchmarks/synthetic.py DIR [N]`` writes one.
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

CRS = "EPSG:32633"
X0, Y0, SIZE = 520_000.0, 6_810_000.0, 20_000.0
# Invented units, youngest first; ages are names of the ICS chart with numbers inside their intervals.
UNITS = [
    ("QFA", "Quillon Fells Alluvium", "Holocene", "0", "0.0117", "#FFF1A8", "sand and gravel", "superficial"),
    ("BRG", "Brackenrigg Granite", "Cisuralian", "285", "290", "#E35D6A", "granite", "intrusive"),
    ("HDS", "Harrowdene Sandstone", "Kasimovian", "304", "306", "#F2C47E", "sandstone", "sedimentary"),
    ("OWM", "Owlcote Mudstone", "Moscovian", "310", "314", "#9AA6B4", "mudstone", "sedimentary"),
    ("LNL", "Lindnab Limestone", "Visean", "334", "344", "#7BC4E4", "limestone", "sedimentary"),
    ("TWC", "Thwaitfold Conglomerate", "Tournaisian", "348", "356", "#C2895A", "conglomerate", "sedimentary"),
    ("RSS", "Rookscar Siltstone", "Famennian", "361", "369", "#D59B8C", "siltstone", "sedimentary"),
    ("GBV", "Gillbeck Volcanics", "Frasnian", "375", "380", "#5E9A63", "andesite", "volcanic"),
    ("MSC", "Mirefold Schist", "Ediacaran", "560", "600", "#B39BD2", "mica schist", "metamorphic"),
]


def _colour(cells: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """A unit per cell, the wanted one where no neighbour has it yet, else the next free one.

    Every polygon of a real map differs from its neighbours (same-unit
    neighbours would be merged), so a map of N polygons needs this colouring;
    the wanted units keep the folded bands visible through the speckle.
    """
    tree = shapely.STRtree(cells)
    a, b = tree.query(cells, predicate="intersects")
    keep = a != b
    a, b = a[keep], b[keep]
    order = np.argsort(a, kind="stable")
    a, b = a[order], b[order]
    starts = np.searchsorted(a, np.arange(len(cells) + 1))
    k = len(UNITS)
    out = np.full(len(cells), -1)
    for i in range(len(cells)):
        taken = set(out[b[starts[i]:starts[i + 1]]].tolist())
        for step in range(k):
            c = (int(wanted[i]) + step) % k
            if c not in taken:
                break
        out[i] = c
    return out


def make_project(root: Path, n: int = 100_000, seed: int = 20240611) -> Path:
    """Write the synthetic project (map.gpkg, legend.csv, archivist.toml) into the new folder ``root``."""
    root = Path(root)
    root.mkdir(parents=True, exist_ok=False)
    rng = np.random.default_rng(seed)
    frame = shapely.box(X0, Y0, X0 + SIZE, Y0 + SIZE)
    pts = shapely.points(rng.uniform(X0, X0 + SIZE, n), rng.uniform(Y0, Y0 + SIZE, n))
    cells = shapely.get_parts(shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=frame))
    cells = shapely.intersection(cells, frame)
    cells = cells[~shapely.is_empty(cells)]
    c = shapely.get_coordinates(shapely.centroid(cells))
    u, v = (c[:, 0] - X0) / SIZE, (c[:, 1] - Y0) / SIZE
    # folded bands (a plunging syncline), a granite stock and an alluvial strip
    band = np.floor((v + 0.08 * np.sin(u * 9.0) + 0.35 * (u - 0.5) ** 2) * 14).astype(int) % 7 + 2
    band = np.clip(band, 2, 8)
    stock = (u - 0.3) ** 2 + (v - 0.62) ** 2 < 0.012
    river = np.abs(v - (0.25 + 0.05 * np.sin(u * 14))) < 0.012
    wanted = np.where(river, 0, np.where(stock, 1, band))
    idx = _colour(cells, wanted)
    codes = np.array([UNITS[i][0] for i in idx], dtype=object)
    units = gpd.GeoDataFrame({"unit": codes}, geometry=cells, crs=CRS)

    # contacts: boundaries of the dissolved units, each edge once
    dissolved = [shapely.coverage_union_all(cells[codes == code]) for code in sorted(set(codes))]
    edges = shapely.union_all(shapely.boundary(np.array(dissolved, dtype=object)))
    contacts = shapely.difference(edges, shapely.buffer(frame.boundary, 0.01))
    contacts = shapely.get_parts(shapely.line_merge(contacts))
    faults = np.array(
        [
            shapely.LineString([(X0 + 6200, Y0), (X0 + 7400, Y0 + SIZE)]),
            shapely.LineString([(X0 + 14100, Y0), (X0 + 13000, Y0 + SIZE)]),
        ],
        dtype=object,
    )
    certainty = np.where(rng.random(len(contacts)) < 0.7, "certain", "approximate")
    lines = gpd.GeoDataFrame(
        {
            "kind": ["contact"] * len(contacts) + ["fault", "fault", "map-boundary"],
            "certainty": list(certainty) + ["certain", "inferred", "certain"],
        },
        geometry=list(contacts) + list(faults) + [shapely.LineString(frame.exterior.coords)],
        crs=CRS,
    )
    m = 2000
    samples = gpd.GeoDataFrame(
        {"sample_id": [f"QF{i:05d}" for i in range(1, m + 1)]},
        geometry=shapely.points(rng.uniform(X0, X0 + SIZE, m), rng.uniform(Y0, Y0 + SIZE, m)),
        crs=CRS,
    )
    k = 1000
    structures = gpd.GeoDataFrame(
        {"kind": ["bedding"] * k, "azimuth": rng.uniform(0, 360, k).round(0), "dip": rng.uniform(5, 80, k).round(0)},
        geometry=shapely.points(rng.uniform(X0, X0 + SIZE, k), rng.uniform(Y0, Y0 + SIZE, k)),
        crs=CRS,
    )
    gpkg = root / "map.gpkg"
    for name, df in (("units", units), ("lines", lines), ("extent", gpd.GeoDataFrame({"name": ["Quillon Fells"]}, geometry=[frame], crs=CRS)),
                     ("samples", samples), ("structures", structures)):
        pyogrio.write_dataframe(df, gpkg, layer=name, driver="GPKG")
    legend = pd.DataFrame(
        [
            {"unit": u[0], "name": u[1], "description": f"Invented unit of the Quillon Fells: {u[6]}.", "age": u[2],
             "min_age_ma": u[3], "max_age_ma": u[4], "order": str(i + 1), "colour": u[5], "lithology": u[6], "kind": u[7]}
            for i, u in enumerate(UNITS)
        ]
    )
    legend.to_csv(root / "legend.csv", index=False, lineterminator="\n")
    (root / "archivist.toml").write_text(
        f"""[map]
title = "Synthetic map of the Quillon Fells ({len(cells)} polygons)"
version = "1.0.0"
scale = 25000
crs = "{CRS}"
licence = "CC0-1.0"
abstract = "A synthetic Voronoi coverage for benchmarks; every name in it is invented."
keywords = ["benchmark"]
[[map.authors]]
name = "Benchmark Generator"

[layers.units]
path = "map.gpkg"
layer = "units"
[layers.lines]
path = "map.gpkg"
layer = "lines"
certainty_field = "certainty"
[layers.extent]
path = "map.gpkg"
layer = "extent"
[layers.samples]
path = "map.gpkg"
layer = "samples"
[layers.structures]
path = "map.gpkg"
layer = "structures"
[tables.legend]
path = "legend.csv"
""",
        encoding="utf-8",
    )
    return root


if __name__ == "__main__":
    make_project(Path(sys.argv[1]), int(sys.argv[2]) if len(sys.argv) > 2 else 100_000)
    print(sys.argv[1])
