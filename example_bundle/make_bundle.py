#!/usr/bin/env python3
"""Write archivist's example bundle: an INVENTED geological map of the
fictional Tarrowmere district (place, units, people and lab are all made up).

Usage::

    python example_bundle/make_bundle.py [OUTDIR]   # default: this folder

The output is deterministic: with the same library versions (GDAL, GEOS,
openpyxl) every run writes byte-identical files.

Construction: a NE-trending, near-horizontal syncline of Devonian-Carboniferous
strata on a schist basement is cut by two N-S faults into three blocks that
are offset across strike. A Permian granite stock and the alluvium of an
E-W river and two tributaries overprint the pattern. All linework (map frame, faults, contacts,
stock and valley outlines) is noded and snap-rounded to 1 cm in one go and
polygonized, so the faces form an exact coverage; faces of one unit are then
dissolved unless a fault separates them, and the map lines are rebuilt from
the shared edges of the final polygons.
"""
from __future__ import annotations

import csv
import datetime as dt
import io
import math
import os
import sys
import tempfile
import zipfile
from collections import defaultdict
from pathlib import Path

os.environ["OPENPYXL_LXML"] = "False"  # same XML bytes whether or not lxml is installed

import geopandas as gpd  # noqa: E402
import numpy as np  # noqa: E402
import openpyxl  # noqa: E402
import pyogrio  # noqa: E402
import shapely  # noqa: E402
from openpyxl.xml.functions import tostring  # noqa: E402
from shapely.geometry import LineString, Point, Polygon, box  # noqa: E402

SEED = 20240611
GRID = 0.01  # coordinate precision, metres
CRS = "EPSG:32633"
X0, Y0, X1, Y1 = 480000.0, 6792000.0, 488000.0, 6798000.0
CX, CY = 484000.0, 6795000.0
FIXED_TIME = dt.datetime(2026, 1, 1, 0, 0, 0)

# code, name, description, age, min_age_ma, max_age_ma, colour, lithology, kind
UNITS = [
    ("QAL", "Tarrow Valley Alluvium", "Unconsolidated gravel, sand and silt of the River Tarrow floodplain and its low terraces.", "Holocene", 0.0, 0.0117, "#FFF3B0", "sand and gravel", "superficial"),
    ("SKG", "Skelvane Granite", "Pink, coarse-grained biotite granite stock with K-feldspar megacrysts; narrow hornfels aureole in the host rocks.", "Cisuralian", 287.0, 291.0, "#E8506A", "granite", "intrusive"),
    ("ORB", "Orrimby Basalt Formation", "Stacked amygdaloidal basalt lavas with red-weathered flow tops; forms the core of the Tarrowmere Syncline.", "Gzhelian", 299.5, 302.5, "#4E8A5B", "basalt", "volcanic"),
    ("KES", "Kestlow Sandstone Formation", "Cross-bedded, medium-grained quartz-rich sandstone in channel bodies up to 4 m thick, with thin coal seams.", "Kasimovian", 304.0, 306.5, "#F0C27B", "sandstone", "sedimentary"),
    ("MAR", "Marrowby Mudstone Formation", "Grey to black laminated mudstone with siltstone beds, ironstone nodules and thin marine bands.", "Bashkirian-Moscovian", 309.0, 320.0, "#9AA5B5", "mudstone", "sedimentary"),
    ("DUN", "Dunnockside Limestone Formation", "Pale grey bioclastic limestone in metre-scale beds with crinoid and brachiopod debris; karstic at outcrop.", "Visean", 333.0, 344.0, "#7CC6E6", "limestone", "sedimentary"),
    ("TCG", "Tarrowmere Conglomerate Formation", "Polymict, clast-supported conglomerate with quartzite and schist pebbles, fining up into pebbly sandstone.", "Tournaisian", 348.0, 356.0, "#C48A55", "conglomerate", "sedimentary"),
    ("AMB", "Ambersett Sandstone Formation", "Red-brown, fine- to medium-grained arkosic sandstone with desiccation-cracked siltstone partings.", "Famennian", 361.0, 369.0, "#D99A8A", "sandstone", "sedimentary"),
    ("PEL", "Pellinmoor Schist", "Silvery garnet-mica schist with quartz segregations and a pervasive NE-striking foliation; basement to the succession.", "Ediacaran", 560.0, 600.0, "#B69AD0", "mica schist", "metamorphic"),
]
ORDER = {u[0]: i + 1 for i, u in enumerate(UNITS)}
LITHOLOGY = {u[0]: u[7] for u in UNITS}

# Syncline across strike (NW -> SE): unit sequence and contact positions (m, along dip direction 130).
SEQUENCE = ["PEL", "AMB", "TCG", "DUN", "MAR", "KES", "ORB", "KES", "MAR", "DUN", "TCG", "AMB", "PEL"]
CONTACT_U = [-2700, -1700, -1100, -200, 600, 1300, 2110, 2550, 3050, 3610, 3990, 4610]
AXIS_U = 1705.0  # syncline hinge, inside the basalt core
BLOCK_OFFSET = [0.0, 650.0, -450.0]  # W, C, E fault blocks: shift of the fold across strike
BLOCK_ROTATION = [-4.0, 3.0, 6.0]  # small rotation of bedding between blocks, degrees
DIP_VEC = np.array([math.sin(math.radians(130)), math.cos(math.radians(130))])
STRIKE_VEC = np.array([math.sin(math.radians(40)), math.cos(math.radians(40))])
FAULTS = [  # (name, default certainty, vertices), each crossing the whole map N-S
    ("Hask Fault", "certain", [(482450, 6798300), (482700, 6796800), (482900, 6795200), (483150, 6793500), (483350, 6791700)]),
    ("Brindlow Fault", "approximate", [(486350, 6798300), (486100, 6796500), (485850, 6794600), (485500, 6793000), (485300, 6791700)]),
]
AUTHORS = [
    ("Maren Tollivast", "Tarrowmere Geological Survey"),
    ("Idris Calderwyn", "Department of Earth Sciences, University of Lower Tarrow"),
    ("Sunniva Oakeshaw", "Tarrowmere Geological Survey"),
]
ABSTRACT = (
    "The Tarrowmere district (an invented place) exposes a Devonian to Carboniferous succession folded "
    "into the NE-trending Tarrowmere Syncline, whose core holds the Orrimby basalt lavas, above a schist "
    "basement. Two N-S faults, the Hask and Brindlow faults, offset the fold, and the Permian Skelvane "
    "Granite stock cuts its north-western limb. Holocene alluvium of the River Tarrow crosses the map. The bundle "
    "includes samples with major-element analyses and structural measurements; it is the example data set "
    "of the archivist tool.")
OXIDES = ["SiO2", "TiO2", "Al2O3", "Fe2O3T", "MnO", "MgO", "CaO", "Na2O", "K2O", "P2O5", "LOI"]
COMPOSITION = {  # typical whole-rock compositions (wt%), same order as OXIDES
    "SKG": [72.5, 0.28, 14.0, 2.3, 0.05, 0.55, 1.5, 3.5, 4.6, 0.10, 0.6],
    "ORB": [48.8, 1.9, 14.8, 12.6, 0.19, 6.9, 9.8, 2.8, 0.6, 0.25, 1.4],
    "KES": [88.6, 0.22, 4.9, 1.5, 0.02, 0.3, 0.4, 0.3, 1.4, 0.05, 2.3],
    "MAR": [58.5, 0.85, 17.5, 6.9, 0.07, 2.4, 1.2, 1.2, 3.6, 0.15, 7.6],
    "DUN": [3.5, 0.04, 0.9, 0.45, 0.02, 0.8, 52.6, 0.05, 0.15, 0.04, 41.6],
    "TCG": [76.0, 0.4, 9.5, 3.6, 0.06, 1.0, 2.0, 1.4, 2.2, 0.09, 3.6],
    "AMB": [74.5, 0.45, 11.5, 3.8, 0.05, 0.9, 0.8, 2.0, 3.4, 0.08, 2.4],
    "PEL": [61.3, 0.9, 18.2, 7.1, 0.1, 2.6, 1.3, 1.6, 3.8, 0.14, 2.9],
}
SAMPLES_PER_UNIT = {"SKG": 5, "ORB": 5, "KES": 4, "MAR": 4, "DUN": 5, "TCG": 3, "AMB": 4, "PEL": 3}
CENSORED = [("KES", "MnO"), ("DUN", "Na2O")]  # (unit of the first sample, oxide) written as "<0.01"


def to_xy(u, v):
    """Map coordinates of (across-strike u, along-strike v) offsets from the map centre."""
    return CX + u * DIP_VEC[0] + v * STRIKE_VEC[0], CY + u * DIP_VEC[1] + v * STRIKE_VEC[1]


def to_uv(x, y):
    """Across-strike (u) and along-strike (v) offsets of map coordinates."""
    dx, dy = np.asarray(x) - CX, np.asarray(y) - CY
    return dx * DIP_VEC[0] + dy * DIP_VEC[1], dx * STRIKE_VEC[0] + dy * STRIKE_VEC[1]


def wiggle(j, v, phases):
    """Outcrop wiggle of contact j (topographic V-ing plus thickness changes), metres."""
    return 55 * np.sin(2 * np.pi * v / 2700 + 0.8) + 28 * np.sin(2 * np.pi * v / 1150 + phases[j])


def river_centre(x):
    """Northing of the River Tarrow (flowing E-W across the north of the map) at easting x."""
    return (6796250 + 180 * np.sin(2 * np.pi * (x - X0) / 3100 + 0.6)
            + 90 * np.sin(2 * np.pi * (x - X0) / 1300 + 2.0) - 0.05 * (x - CX))


def river_valley():
    """Floodplain of the River Tarrow, 200-400 m wide, overrunning the map frame."""
    xs = np.arange(X0 - 500, X1 + 501, 50.0)
    yc, half = river_centre(xs), 150 + 50 * np.sin(2 * np.pi * xs / 2000 + 1.0)
    return Polygon(np.r_[np.c_[xs, yc + half], np.c_[xs, yc - half][::-1]])


def tributary_valley(x_mouth, y_source, phase):
    """Floodplain of a tributary from the map edge at y_source down to the Tarrow."""
    ys = np.linspace(y_source, river_centre(x_mouth), 100)
    xc = x_mouth + 120 * np.sin(2 * np.pi * (ys - Y0) / 1700 + phase) + 60 * np.sin(2 * np.pi * (ys - Y0) / 700)
    xc += x_mouth - xc[-1]  # end exactly at the mouth, on the river's centre line
    half = 65 + 15 * np.sin(2 * np.pi * ys / 900)
    return Polygon(np.r_[np.c_[xc - half, ys], np.c_[xc + half, ys][::-1]])


def base_geology(rng):
    """Extent, fault traces, fault blocks, stock and valley outlines, contact curves."""
    extent = box(X0, Y0, X1, Y1)
    faults = [shapely.intersection(LineString(pts), extent) for _, _, pts in FAULTS]
    blocks = list(shapely.get_parts(shapely.polygonize(shapely.get_parts(
        shapely.union_all([extent.boundary, *faults])))))
    blocks.sort(key=lambda b: b.centroid.x)
    t = np.linspace(0, 2 * np.pi, 73)[:-1]
    r = 620 + 70 * np.sin(3 * t + 0.5) + 40 * np.sin(5 * t + 1.3)
    stock = Polygon(np.c_[481650 + r * np.sin(t), 6793250 + r * np.cos(t)])
    valley = shapely.union_all([river_valley(), tributary_valley(484350, Y0 - 500, 0.3),
                                tributary_valley(487250, Y1 + 500, 2.1)]).intersection(extent)
    phases = rng.uniform(0, 2 * np.pi, len(CONTACT_U))
    v = np.arange(-7000, 7001, 40.0)
    contacts = []
    for b, block in enumerate(blocks):
        for j, u0 in enumerate(CONTACT_U):
            x, y = to_xy(u0 + BLOCK_OFFSET[b] + wiggle(j, v, phases), v)
            contacts.append(shapely.intersection(LineString(np.c_[x, y]), block))
    return extent, faults, blocks, stock, valley, contacts, phases


def unit_at(pt, blocks, stock, valley, phases):
    """Geological unit at a point, from the construction rules (valley > stock > folded strata)."""
    if valley.contains(pt):
        return "QAL"
    if stock.contains(pt):
        return "SKG"
    b = next(i for i, blk in enumerate(blocks) if blk.contains(pt))
    u, v = to_uv(pt.x, pt.y)
    n = sum(u >= u0 + BLOCK_OFFSET[b] + wiggle(j, v, phases) for j, u0 in enumerate(CONTACT_U))
    return SEQUENCE[n]


def ring_segments(poly):
    """All segments (as sorted coordinate-tuple pairs) of a polygon's rings."""
    out = []
    for ring in [poly.exterior, *poly.interiors]:
        c = [tuple(p) for p in ring.coords]
        out += [(min(a, b), max(a, b)) for a, b in zip(c[:-1], c[1:])]
    return out


def drop_short_segments(edge, min_len=1.0, max_shift=0.05):
    """Drop interior vertices that make a segment shorter than min_len, where that
    moves the edge by less than max_shift (noding leaves a few next to nodes)."""
    c = shapely.get_coordinates(edge)
    keep = [c[0]]
    for k in range(1, len(c) - 1):
        a, p, b = keep[-1], c[k], c[k + 1]
        short = min(np.hypot(*(p - a)), np.hypot(*(p - b))) < min_len
        if not (short and LineString([a, b]).distance(Point(p)) < max_shift):
            keep.append(p)
    return LineString([*keep, c[-1]])


def build_faces(extent, faults, stock, valley, contacts):
    """Node all linework on the 1 cm grid and polygonize it into exact faces."""
    work = [extent.boundary, *faults, stock.exterior, valley.boundary, *contacts]
    noded = shapely.get_parts(shapely.union_all(work, grid_size=GRID))
    faces = list(shapely.get_parts(shapely.polygonize([drop_short_segments(e) for e in noded])))
    assert abs(sum(f.area for f in faces) - extent.area) < 1e-3, "polygonize lost area"
    return faces


def fault_of_segments(segs, faults):
    """Index of the fault each segment lies on (-1 if none)."""
    ends = np.array(segs)  # (n, 2 ends, 2 coords)
    a, b, m = shapely.points(ends[:, 0]), shapely.points(ends[:, 1]), shapely.points(ends.mean(axis=1))
    out = np.full(len(segs), -1)
    for k, f in enumerate(faults):
        d = np.maximum.reduce([shapely.distance(g, f) for g in (a, b, m)])
        out[d < 0.05] = k
    return out


def dissolve(faces, face_units, edges):
    """Merge same-unit faces sharing a non-fault edge; return polygons, units, face->polygon."""
    parent = list(range(len(faces)))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for _s, fs, fault in edges:
        if len(fs) == 2 and fault < 0 and face_units[fs[0]] == face_units[fs[1]]:
            parent[find(fs[0])] = find(fs[1])
    groups = defaultdict(list)
    for i in range(len(faces)):
        groups[find(i)].append(i)
    comps = []
    for members in groups.values():
        poly = shapely.coverage_union_all([faces[i] for i in members])
        assert poly.geom_type == "Polygon", poly.geom_type
        comps.append((ORDER[face_units[members[0]]], -round(poly.centroid.y), round(poly.centroid.x), poly, members))
    comps.sort(key=lambda c: c[:3])
    face_poly = {i: k for k, c in enumerate(comps) for i in c[4]}
    return [c[3] for c in comps], [face_units[c[4][0]] for c in comps], face_poly


def merge_chains(segs, keys):
    """Join segments into lines: only through nodes where exactly two segments of
    the same key meet, and (except for faults) where no other line meets."""
    at = defaultdict(list)
    for i, (p, q) in enumerate(segs):
        at[p].append(i)
        at[q].append(i)

    def through(node, i):
        same = [j for j in at[node] if keys[j] == keys[i]]
        if len(same) != 2 or (keys[i][0] != "fault" and len(at[node]) != 2):
            return None
        return same[0] if same[1] == i else same[1]

    done, out = set(), []
    for i in range(len(segs)):
        if i in done:
            continue
        done.add(i)
        ends = []
        for start in segs[i][::-1]:  # walk forward from q, then backward from p
            path, node, cur = [], start, i
            while (nxt := through(node, cur)) is not None and nxt not in done:
                done.add(nxt)
                a, b = segs[nxt]
                node = b if a == node else a
                path.append(node)
                cur = nxt
            ends.append(path)
        out.append((keys[i], ends[1][::-1] + list(segs[i]) + ends[0]))
    return out


def build_lines(units, face_poly, edges, rng):
    """Contacts, faults and map boundary from the shared edges of the final polygons."""
    keep, keys = [], []
    for s, fs, k in edges:
        if len(fs) == 1:
            keep.append(s); keys.append(("map-boundary",))
            continue
        pa, pb = face_poly[fs[0]], face_poly[fs[1]]
        if k >= 0:
            cert = "concealed" if "QAL" in (units[pa], units[pb]) else FAULTS[k][1]
            keep.append(s); keys.append(("fault", k, cert))
        elif pa != pb:
            assert units[pa] != units[pb], "same-unit polygons share an edge"
            keep.append(s); keys.append(("contact", min(pa, pb), max(pa, pb)))
    rows = []
    for key, coords in merge_chains(keep, keys):
        if key[0] == "fault":
            cert = key[2]
        elif key[0] == "map-boundary":
            cert = "certain"
        else:
            pair = {units[key[1]], units[key[2]]}
            cert = "approximate" if "QAL" in pair else "certain" if "SKG" in pair else \
                str(rng.choice(["certain", "approximate", "inferred"], p=[0.55, 0.3, 0.15]))
        rows.append((key[0], cert, LineString(coords)))
    order = {"map-boundary": 0, "fault": 1, "contact": 2}
    rows.sort(key=lambda r: (order[r[0]], r[2].coords[0], r[2].coords[-1]))
    return rows


def splay_fault(polys, units):
    """A short fault ending freely inside one limestone or mudstone polygon (>=100 m from its edges)."""
    circles = {k: shapely.maximum_inscribed_circle(polys[k], 1.0) for k, u in enumerate(units) if u in ("DUN", "MAR")}
    i = max(circles, key=lambda k: (circles[k].length, -k))
    centre = shapely.get_coordinates(circles[i])[0]
    half = min(300.0, circles[i].length - 140.0)
    a = math.radians(158)
    pts = [(centre[0] - half * math.sin(a), centre[1] - half * math.cos(a)),
           (centre[0] + 0.1 * half, centre[1] + 0.04 * half),
           (centre[0] + half * math.sin(a + 0.12), centre[1] + half * math.cos(a + 0.12))]
    line = shapely.set_precision(LineString(pts), GRID)
    assert half > 150 and polys[i].buffer(-100).contains(line), "no room for the splay fault"
    return line


def random_point(rng, polys, units, tree, allowed, min_dist):
    """A random point (1 cm grid) inside a polygon of an allowed unit, min_dist from its edge."""
    while True:
        p = Point(round(rng.uniform(X0, X1), 2), round(rng.uniform(Y0, Y1), 2))
        for i in tree.query(p, predicate="within"):
            if units[i] in allowed and polys[i].exterior.distance(p) >= min_dist and \
                    all(h.distance(p) >= min_dist for h in polys[i].interiors):
                return p, units[i]


def make_samples(rng, polys, units, tree):
    """Sample points (>=60 m inside their polygon) with ids, dates and collectors."""
    picks = []
    for unit, n in SAMPLES_PER_UNIT.items():
        picks += [random_point(rng, polys, units, tree, {unit}, 60.0) for _ in range(n)]
    picks.sort(key=lambda pu: (-pu[0].y, pu[0].x))  # traverse the map from north to south
    days = np.sort(rng.integers(0, 75, len(picks)))
    num = np.cumsum(rng.integers(1, 4, len(picks)))
    rows = []
    for k, (p, unit) in enumerate(picks):
        rows.append({"sample_id": f"TM24-{num[k]:04d}", "unit": unit, "lithology": LITHOLOGY[unit],
                     "collected": (dt.date(2024, 6, 10) + dt.timedelta(days=int(days[k]))).isoformat(),
                     "collector": AUTHORS[k % 3 if k % 5 else 0][0], "geometry": p})
    return rows


def make_structures(rng, polys, units, tree, blocks, faults):
    """Structural measurements: bedding by fold limb and block, plus other fabrics."""
    rows = []

    def add(kind, p, az, dip):
        rows.append({"kind": kind, "azimuth": float(round(az % 360.0)), "dip": float(min(90, max(0, round(dip)))), "geometry": p})

    strata = {"AMB", "TCG", "DUN", "MAR", "KES"}
    for _ in range(32):
        p, _u = random_point(rng, polys, units, tree, strata, 30.0)
        b = next(i for i, blk in enumerate(blocks) if blk.contains(p))
        u, _v = to_uv(p.x, p.y)
        nw_limb = u - BLOCK_OFFSET[b] < AXIS_U
        az = (130.0 if nw_limb else 310.0) + BLOCK_ROTATION[b] + rng.normal(0, 6)
        add("bedding", p, az, (24 if nw_limb else 38) + rng.normal(0, 4))
    specs = [("foliation", {"PEL"}, 5, 300, 8, 55, 6), ("lineation", {"PEL"}, 3, 215, 8, 18, 4),
             ("cleavage", {"MAR"}, 5, 312, 6, 72, 5), ("fold axis", {"MAR", "KES"}, 2, 40, 5, 5, 2),
             ("joint", {"SKG"}, 5, None, 0, 82, 5), ("vein", {"SKG", "DUN"}, 3, 250, 15, 80, 5)]
    for kind, allowed, n, az0, az_sd, dip0, dip_sd in specs:
        for _ in range(n):
            p, _u = random_point(rng, polys, units, tree, allowed, 30.0)
            az = rng.uniform(0, 360) if az0 is None else az0 + rng.normal(0, az_sd)
            add(kind, p, az, dip0 + rng.normal(0, dip_sd))
    for k, f in enumerate(faults):  # fault planes measured 40 m off the trace, outside the alluvium
        for frac in (0.2, 0.85):
            q = f.interpolate(frac, normalized=True)
            r = f.interpolate(frac + 0.01, normalized=True)
            nx, ny = r.y - q.y, -(r.x - q.x)
            s = 40.0 / math.hypot(nx, ny)
            p = Point(round(q.x + nx * s, 2), round(q.y + ny * s, 2))
            add("fault plane", p, 80 + 180 * k + rng.normal(0, 5), 76 + rng.normal(0, 4))
    return rows


def make_analyses(rng, samples):
    """Major-element rows (text ids, 2-decimal values, censored cells, Total = sum)."""
    censored = {}
    for unit, oxide in CENSORED:
        first = next(s["sample_id"] for s in samples if s["unit"] == unit)
        censored[(first, oxide)] = "<0.01"
    rows = []
    for s in samples:
        mean = np.array(COMPOSITION[s["unit"]])
        rsd = np.where(mean >= 5, 0.04, 0.12)
        raw = np.maximum(mean * (1 + rsd * rng.standard_normal(len(mean))), 0.01)
        vals = [round(float(x), 2) for x in raw * rng.uniform(99.3, 100.7) / raw.sum()]
        cells = [censored.get((s["sample_id"], ox), v) for ox, v in zip(OXIDES, vals)]
        total = round(sum(c for c in cells if not isinstance(c, str)), 2)
        assert 99.0 <= total <= 101.0, total
        rows.append([s["sample_id"], *cells, total])
    return rows


# Field stations: invented stops of the 2024 season, each mapper's handed in as a file of their own.
STATION_SEED = SEED + 16  # a generator of their own: the map, samples and structures above stay as they were
STATION_FILES = dict(sorted(((name, f"stations_{name.split()[-1].lower()}.csv") for name, _ in AUTHORS), key=lambda nf: nf[1]))
OBSERVATIONS = {
    "QAL": "Sand and gravel in the river bank; rounded granite and basalt pebbles.",
    "SKG": "Pink coarse granite with K-feldspar megacrysts up to 3 cm; jointed.",
    "ORB": "Amygdaloidal basalt, red-weathered flow top below a massive flow base.",
    "KES": "Cross-bedded quartz sandstone in sets 0.3-0.5 m thick; thin coal streak.",
    "MAR": "Laminated grey mudstone with ironstone nodules; slaty cleavage.",
    "DUN": "Pale bioclastic limestone, crinoid debris; small karst hollows.",
    "TCG": "Clast-supported conglomerate, quartzite and schist pebbles, fining up.",
    "AMB": "Red-brown arkosic sandstone with desiccation-cracked silt partings.",
    "PEL": "Garnet-mica schist, NE-striking foliation, quartz segregations.",
}


def make_stations(polys, units, tree, samples, structures):
    """About 20 field stations: 14 where samples were taken, 6 where structures were measured.

    Each station lies a few metres from what was taken there (within its unit
    polygon) and records that unit; the linked samples and structures get the
    station's id in their `station` field. Returns the stations' rows.
    """
    rng = np.random.default_rng(STATION_SEED)
    for row in samples + structures:
        row["station"] = None
    picks = [("sample", samples[i]) for i in np.linspace(0, len(samples) - 1, 14).round().astype(int)]
    picks += [("structure", structures[i]) for i in np.linspace(0, len(structures) - 1, 6).round().astype(int)]
    stops = []
    for what, row in picks:
        p = row["geometry"]
        (i,) = tree.query(p, predicate="within")
        for _ in range(100):  # a stop a few metres away, still well inside the same polygon
            a, r = rng.uniform(0, 2 * math.pi), rng.uniform(2.0, 8.0 if what == "structure" else 12.0)
            q = Point(round(p.x + r * math.sin(a), 2), round(p.y + r * math.cos(a), 2))
            if polys[i].contains(q) and polys[i].exterior.distance(q) > 5.0:
                break
        day = row.get("collected") or (dt.date(2024, 6, 10) + dt.timedelta(days=int(rng.integers(0, 75)))).isoformat()
        observer = row.get("collector") or AUTHORS[int(rng.integers(0, 3))][0]
        stops.append((day, q, units[i], observer, row))
    stops.sort(key=lambda s: (s[0], -s[1].y))
    out = []
    for k, (day, q, unit, observer, row) in enumerate(stops, start=1):
        sid = f"ST24-{k:03d}"
        row["station"] = sid
        out.append({"station_id": sid, "easting": f"{q.x:.2f}", "northing": f"{q.y:.2f}", "date": day,
                    "observer": observer, "observation": OBSERVATIONS[unit], "unit": unit})
    return out


def stations_bytes(stations, observer):
    """One mapper's stations CSV: UTF-8, no BOM, \n line ends."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["station_id", "easting", "northing", "date", "observer", "observation", "unit"])
    for row in stations:
        if row["observer"] == observer:
            w.writerow(row.values())
    return buf.getvalue().encode("utf-8")
# Compiled analyses from invented publications. The DOIs use the prefix 10.5555, which Crossref uses in its
# documentation as an example prefix and keeps for testing (no real work can be registered under it).
LITERATURE_PREFIX = "10.5555"
REFERENCES = [  # key, authors, year, title, citation, doi
    ("Fennick2009", "Fennick, Aldous; Horrowby, Tamsin", "2009",
     "Geochemistry of the Orrimby lavas, Tarrowmere district",
     "Fennick, A. & Horrowby, T. (2009). Geochemistry of the Orrimby lavas, Tarrowmere district. "
     "Journal of the Lower Tarrow Geological Society 41, 113-129.", f"{LITERATURE_PREFIX}/ltgs.2009.041.113"),
    ("Quillon1932", "Quillon, Edric", "1932",
     "The geology of the country around Tarrowmere",
     "Quillon, E. (1932). The geology of the country around Tarrowmere. Memoir of the Tarrowmere Geological "
     "Survey, sheet 7.", ""),
]
# One row cites its work by a key of the references table, the other by its DOI alone (an invented
# bulletin of the invented survey); the references table also lists an old memoir that has no DOI.
LITERATURE = [  # sample id in the publication, unit it was taken from, source cell, method
    ("F09-14", "ORB", "Fennick2009", "XRF on fused beads"),
    ("A14-3", "SKG", f"https://doi.org/{LITERATURE_PREFIX}/tgs.bull.2014.12", "ICP-OES after lithium borate fusion"),
]
OWN_METHOD = "WD-XRF"  # the team's own laboratory (the workbook's method sheet)


def literature_analyses(polys, units):
    """Two analyses compiled from invented publications, each at a point of its unit, and the references table.

    Returns (rows for the analyses sheet, references.csv bytes, manifest keys of [tables.analyses] and
    the [tables.references] block). Each row: sample id, oxides, Total, source, method, longitude,
    latitude (WGS 84, 5 decimals, about 1 m).
    """
    import pyproj

    to_lonlat = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    rows = []
    for sid, unit, source, method in LITERATURE:
        poly = max((p for p, u in zip(polys, units) if u == unit), key=lambda p: p.area)
        inner = poly.buffer(-50)  # well inside, so that rounding the degrees keeps it in its unit
        pt = inner.point_on_surface()
        lon, lat = to_lonlat.transform(pt.x, pt.y)
        mean = np.array(COMPOSITION[unit])
        vals = [round(float(x), 2) for x in mean * 100.0 / mean.sum()]
        total = round(sum(vals), 2)
        rows.append([sid, *vals, total, source, method, round(lon, 5), round(lat, 5)])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["key", "authors", "year", "title", "citation", "doi"])
    w.writerows(REFERENCES)
    manifest = (
        'source_field = "source"\n'
        'method_field = "method"\n'
        'lon_field = "longitude"\n'
        'lat_field = "latitude"\n'
        "[tables.references]\n"
        'path = "references.csv"\n'
        'key_field = "key"\n'
        'doi_field = "doi"\n'
        'citation_field = "citation"\n'
    )
    return rows, buf.getvalue().encode("utf-8"), manifest


def write_atomic(path: Path, data: bytes):
    """Write bytes to a temp file next to path, then move it into place."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.")
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)
    os.chmod(tmp, 0o644)
    os.replace(tmp, path)


def write_gpkg(path: Path, layers):
    """Write all layers into one GeoPackage with a fixed timestamp."""
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2026-01-01T00:00:00.000Z"})
    with tempfile.TemporaryDirectory(dir=path.parent) as tmp:
        tmp_path = Path(tmp) / path.name
        for name, rows in layers:
            gdf = gpd.GeoDataFrame(rows, geometry="geometry", crs=CRS)
            pyogrio.write_dataframe(gdf, tmp_path, layer=name, driver="GPKG", promote_to_multi=False)
        os.replace(tmp_path, path)


def xlsx_bytes(analyses, compiled=()):
    """The analyses workbook, with fixed document times and zip entry dates; ``compiled`` rows (from the
    literature) follow the team's own, which cite "this study"."""
    assert not openpyxl.xml.LXML, "openpyxl was imported before OPENPYXL_LXML=False was set"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "majors"
    extra = ["source", "method", "longitude", "latitude"] if compiled else []
    ws.append(["sample_id", *[f"{ox} (wt%)" for ox in OXIDES], "Total (wt%)", *extra])
    for row in analyses:
        ws.append(row + (["this study", OWN_METHOD, None, None] if compiled else []))
    for row in compiled:
        ws.append(row)
    for r in ws.iter_rows(min_row=2, min_col=2, max_col=len(OXIDES) + 2):
        for cell in r:
            if not isinstance(cell.value, str):
                cell.number_format = "0.00"
    ws.freeze_panes = "B2"
    method = wb.create_sheet("method")
    for line in [
        ["item", "description"],
        ["laboratory", "Tarrowmere Geological Survey rock chemistry laboratory (invented)"],
        ["preparation", "Crushed in a steel jaw crusher, milled in agate; 0.7 g powder fused with 7 g lithium borate flux"],
        ["technique", "Wavelength-dispersive X-ray fluorescence (WD-XRF) on fused glass beads"],
        ["iron", "Total iron reported as Fe2O3T"],
        ["LOI", "Loss on ignition, 1 h at 1000 degrees C"],
        ["detection limit", "0.01 wt% for every oxide"],
        ["censored values", "Results below the detection limit are written as <0.01 and counted as 0 in Total"],
        ["quality control", "In-house rock standards and duplicates in every batch of 20; precision better than 1 % relative for SiO2, Al2O3 and CaO"],
    ]:
        method.append(line)
    wb.properties.creator = wb.properties.lastModifiedBy = AUTHORS[0][0]
    wb.properties.title = "Tarrowmere major-element analyses"
    buf = io.BytesIO()
    wb.save(buf)
    wb.properties.created = wb.properties.modified = FIXED_TIME  # save() stamps "now"; overwrite
    core = tostring(wb.properties.to_tree())
    out = io.BytesIO()
    with zipfile.ZipFile(buf) as zin, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as zout:
        for name in zin.namelist():
            data = core if name == "docProps/core.xml" else zin.read(name)
            info = zipfile.ZipInfo(name, date_time=FIXED_TIME.timetuple()[:6])
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zout.writestr(info, data)
    return out.getvalue()


def legend_bytes():
    """legend.csv: UTF-8, no BOM, \\n line ends."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["unit", "name", "description", "age", "min_age_ma", "max_age_ma", "order", "colour", "lithology", "kind"])
    for code, name, desc, age, lo, hi, colour, lith, kind in UNITS:
        w.writerow([code, name, desc, age, f"{lo:g}", f"{hi:g}", ORDER[code], colour, lith, kind])
    return buf.getvalue().encode("utf-8")


def manifest_bytes(literature_keys=""):
    """archivist.toml, the project manifest; ``literature_keys`` follow [tables.analyses]."""
    authors = "".join(
        f'\n[[map.authors]]\nname = "{n}"\naffiliation = "{a}"\n' for n, a in AUTHORS)
    text = f'''# Example bundle written by example_bundle/make_bundle.py - do not edit by hand.
# Everything here is invented: the Tarrowmere district, its rock units, its people and its laboratory.

[map]
title = "Geological map of the Tarrowmere district"
version = "1.0.0"
scale = 25000
crs = "{CRS}"
licence = "CC-BY-4.0"
abstract = "{ABSTRACT}"
keywords = ["geological map", "bedrock geology", "Carboniferous", "syncline", "granite", "geochemistry", "Tarrowmere"]

# The authors below are invented and have no ORCID iDs: any well-formed iD could belong to a
# real person. Real authors add `orcid = "0000-0002-1825-0097"`-style keys (check digit verified).
{authors}
[layers.units]
path = "map.gpkg"
layer = "units"
unit_field = "unit"
[layers.lines]
path = "map.gpkg"
layer = "lines"
kind_field = "kind"
certainty_field = "certainty"
[layers.extent]
path = "map.gpkg"
layer = "extent"
[layers.samples]
path = "map.gpkg"
layer = "samples"
id_field = "sample_id"
unit_field = "unit"
station_field = "station"
[layers.structures]
path = "map.gpkg"
layer = "structures"
kind_field = "kind"
azimuth_field = "azimuth"
dip_field = "dip"
convention = "dip-direction"
north = "true"
station_field = "station"
# The field stations of the 2024 season, as the three mappers handed them in: one file each, read as one table.
[layers.stations]
path = [{", ".join(f'"{f}"' for f in STATION_FILES.values())}]
x_field = "easting"
y_field = "northing"
crs = "{CRS}"
id_field = "station_id"
date_field = "date"
observer_field = "observer"
observation_field = "observation"
unit_field = "unit"
[tables.legend]
path = "legend.csv"
[tables.analyses]
path = "analyses.xlsx"
sheet = "majors"
sample_field = "sample_id"
{literature_keys}{PHOTOS_TOML}[checks]
tolerance = 0.5
'''
    return text.encode("utf-8")


# ---------------------------------------------------------------- photos and a field-book scan

PHOTO_STATIONS = 6  # stations photographed: at the first samples' sites, two photos each
PHOTOS_TOML = '''[files.photos]
paths = ["photos"]
name_pattern = "{station}_*.jpg"
[files.fieldbooks]
paths = ["fieldbook"]
'''


def photo_stations(stations):
    """Station ids and positions for the photos: the first field stations of the season (ST24-001...)."""
    return {row["station_id"]: (float(row["easting"]), float(row["northing"])) for row in stations[:PHOTO_STATIONS]}


def _exif_dms(value):
    from fractions import Fraction

    value = abs(value)
    d = int(value)
    m = int((value - d) * 60)
    sec = round((value - d - m / 60) * 3600 * 10000)
    return (Fraction(d), Fraction(m), Fraction(sec, 10000))


def photo_bytes(lon, lat, taken, shade):
    """A small invented photo (a gradient, no real scene) with EXIF GPS and DateTimeOriginal written by Pillow."""
    from PIL import Image

    im = Image.linear_gradient("L").resize((64, 48)).convert("RGB")
    tint = Image.new("RGB", im.size, shade)
    im = Image.blend(im, tint, 0.5)
    exif = Image.Exif()
    exif[0x010F] = "Invented camera"  # Make
    exif.get_ifd(0x8769)[0x9003] = taken  # DateTimeOriginal
    gps = exif.get_ifd(0x8825)
    gps[1], gps[2] = ("N" if lat >= 0 else "S"), _exif_dms(lat)
    gps[3], gps[4] = ("E" if lon >= 0 else "W"), _exif_dms(lon)
    buf = io.BytesIO()
    im.save(buf, "JPEG", quality=60, exif=exif)
    return buf.getvalue()


def fieldbook_png():
    """One scanned page of an invented field book: ruled lines and a few blocks for writing."""
    from PIL import Image, ImageDraw

    im = Image.new("L", (120, 160), 238)
    draw = ImageDraw.Draw(im)
    for y in range(16, 156, 9):
        draw.line([(8, y), (112, y)], fill=175)
    for k, y in enumerate(range(20, 120, 9)):
        draw.rectangle([(12, y), (20 + (k * 29) % 80, y + 3)], fill=60)
    buf = io.BytesIO()
    im.save(buf, "PNG", optimize=False)
    return buf.getvalue()


def make_photos(outdir, stations):
    """Write photos/<station>_<view>.jpg (two per station, EXIF at the station) and fieldbook/ (one scanned page)."""
    import pyproj

    to_lonlat = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    (outdir / "photos").mkdir(exist_ok=True)
    (outdir / "fieldbook").mkdir(exist_ok=True)
    shades = [(150, 120, 90), (110, 130, 100), (160, 150, 130), (90, 100, 120), (140, 110, 110), (120, 140, 150)]
    for k, (sid, (x, y)) in enumerate(sorted(stations.items())):
        for v, view in enumerate(("outcrop", "detail")):
            lon, lat = to_lonlat.transform(x + 3.0 * v, y + 2.0 * v)  # the detail a few metres on
            taken = f"2024:06:{11 + k // 3:02d} {9 + k:02d}:{15 + 7 * v:02d}:00"
            write_atomic(outdir / "photos" / f"{sid}_{view}.jpg", photo_bytes(lon, lat, taken, shades[k % len(shades)]))
    write_atomic(outdir / "fieldbook" / "tollivast_book1_p014.png", fieldbook_png())
    return 2 * len(stations)


def check_polygons(polys, extent):
    """Fail loudly if the coverage is not clean (gaps, overlaps, slivers, thin parts)."""
    assert shapely.coverage_is_valid(polys)
    assert shapely.union_all(polys).symmetric_difference(extent).area < 1e-6
    for p in polys:
        assert p.is_valid and p.area >= 5000, p.area
        inner = p.buffer(-10)
        assert inner.geom_type == "Polygon" and not inner.is_empty, "polygon thinner than 20 m"


def main(outdir: Path):
    """Build the map and write every file of the bundle into outdir."""
    rng = np.random.default_rng(SEED)
    outdir.mkdir(parents=True, exist_ok=True)
    extent, faults, blocks, stock, valley, contacts, phases = base_geology(rng)
    faces = build_faces(extent, faults, stock, valley, contacts)
    face_units = [unit_at(f.point_on_surface(), blocks, stock, valley, phases) for f in faces]
    seg_faces = defaultdict(list)
    for i, f in enumerate(faces):
        for s in ring_segments(f):
            seg_faces[s].append(i)
    segs = sorted(seg_faces)
    assert all(len(seg_faces[s]) in (1, 2) for s in segs)
    edges = list(zip(segs, [seg_faces[s] for s in segs], fault_of_segments(segs, faults)))
    polys, units, face_poly = dissolve(faces, face_units, edges)
    check_polygons(polys, extent)
    lines = build_lines(units, face_poly, edges, rng)
    lines.append(("fault", "inferred", splay_fault(polys, units)))
    tree = shapely.STRtree(polys)
    samples = make_samples(rng, polys, units, tree)
    structures = make_structures(rng, polys, units, tree, blocks, faults)
    analyses = make_analyses(rng, samples)
    stations = make_stations(polys, units, tree, samples, structures)
    compiled, references, literature_keys = literature_analyses(polys, units)
    write_gpkg(outdir / "map.gpkg", [
        ("units", [{"unit": u, "geometry": p} for u, p in zip(units, polys)]),
        ("lines", [{"kind": k, "certainty": c, "geometry": g} for k, c, g in lines]),
        ("extent", [{"name": "Tarrowmere district map sheet", "geometry": extent}]),
        ("samples", samples),
        ("structures", structures),
    ])
    write_atomic(outdir / "legend.csv", legend_bytes())
    write_atomic(outdir / "analyses.xlsx", xlsx_bytes(analyses, compiled))
    write_atomic(outdir / "references.csv", references)
    for observer, name in STATION_FILES.items():
        write_atomic(outdir / name, stations_bytes(stations, observer))
    write_atomic(outdir / "archivist.toml", manifest_bytes(literature_keys))
    photos = make_photos(outdir, photo_stations(stations))
    print(f"{outdir}: {len(polys)} polygons in {len(set(units))} units, {len(lines)} lines, "
          f"{len(samples)} samples, {len(structures)} structures, {len(stations)} stations, {photos} photos")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent)
