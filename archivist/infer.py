"""Guess the roles of a folder's files when there is no ``archivist.toml``.

Roles come from geometry types and field names only; nothing is written.
``archivist init`` writes the same guess out as a manifest to confirm.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pyogrio
import pyproj

from .readers import TABLE_SUFFIXES, VECTOR_SUFFIXES, read_table

UNIT_NAMES = ("unit", "unit_code", "unitcode", "code", "map_unit", "formation", "lithocode")
KIND_NAMES = ("kind", "type", "line_type", "linetype", "class", "feature")
SAMPLE_ID_NAMES = ("sample_id", "sampleid", "sample", "sample_no", "sample_number", "id")
AZIMUTH_NAMES = ("azimuth", "dip_direction", "dipdir", "dip_dir", "strike", "trend")
DIP_NAMES = ("dip", "plunge", "inclination")
EXTENT_WORDS = re.compile(r"extent|boundary|frame|outline|area", re.I)
OXIDE = re.compile(r"^(SiO2|TiO2|Al2O3|Fe2O3|FeO|MnO|MgO|CaO|Na2O|K2O|P2O5)", re.I)


def _pick(fields: list[str], names: tuple[str, ...]) -> str | None:
    lower = {f.lower(): f for f in fields}
    for n in names:
        if n in lower:
            return lower[n]
    return None


def _vector_layers(root: Path) -> list[tuple[Path, str, str, list[str], str | None]]:
    found = []
    for path in sorted(root.iterdir()):
        if path.suffix.lower() not in VECTOR_SUFFIXES or path.name.startswith("."):
            continue
        try:
            layers = pyogrio.list_layers(path)
        except Exception:
            continue
        for name, gtype in layers:
            if gtype is None:
                continue
            try:
                info = pyogrio.read_info(path, layer=str(name))
            except Exception:
                continue
            found.append((path, str(name), str(gtype), [str(f) for f in info["fields"]], info.get("crs")))
    return found


def infer_manifest(root: Path) -> tuple[dict[str, Any], list[str]]:
    """A manifest guessed from the folder's data, and notes on what was guessed."""
    layers: dict[str, dict[str, Any]] = {}
    tables: dict[str, dict[str, Any]] = {}
    notes: list[str] = []
    unplaced: list[str] = []
    crs_text = None
    for path, name, gtype, fields, crs in _vector_layers(root):
        rel = path.name
        spec: dict[str, Any] = {"path": rel, "layer": name}
        g = gtype.replace("Multi", "").replace(" Z", "").replace("25D", "")
        role = None
        if g == "Polygon":
            unit = _pick(fields, UNIT_NAMES)
            if unit and "units" not in layers:
                role, spec["unit_field"] = "units", unit
            elif EXTENT_WORDS.search(name) and "extent" not in layers:
                role = "extent"
        elif g == "LineString" and "lines" not in layers:
            role = "lines"
            kind = _pick(fields, KIND_NAMES)
            if kind:
                spec["kind_field"] = kind
        elif g == "Point":
            az, dip = _pick(fields, AZIMUTH_NAMES), _pick(fields, DIP_NAMES)
            sid = _pick(fields, SAMPLE_ID_NAMES)
            if az and dip and "structures" not in layers:
                role = "structures"
                spec.update(azimuth_field=az, dip_field=dip)
                kind = _pick(fields, KIND_NAMES)
                if kind:
                    spec["kind_field"] = kind
            elif sid and "samples" not in layers:
                role = "samples"
                spec["id_field"] = sid
                unit = _pick(fields, UNIT_NAMES)
                if unit:
                    spec["unit_field"] = unit
        if role is None:
            unplaced.append(f"{rel}:{name}")
            continue
        layers[role] = spec
        if role == "units" and crs:
            crs_text = crs
    for path in sorted(root.iterdir()):
        if path.suffix.lower() not in TABLE_SUFFIXES or path.name.startswith("."):
            continue
        data, hits = read_table(path, path.name)
        if data is None:
            unplaced.append(path.name)
            continue
        cols = [str(c) for c in data.frame.columns]
        lower = {c.lower() for c in cols}
        if "unit" in lower and ({"name", "description", "age"} & lower) and "legend" not in tables:
            tables["legend"] = {"path": path.name}
        elif any(OXIDE.match(c) for c in cols) and _pick(cols, SAMPLE_ID_NAMES) and "analyses" not in tables:
            tables["analyses"] = {"path": path.name, "sample_field": _pick(cols, SAMPLE_ID_NAMES)}
        else:
            unplaced.append(path.name)
    crs_label = None
    if crs_text:
        c = pyproj.CRS.from_user_input(crs_text)
        epsg = c.to_epsg(min_confidence=70)
        crs_label = f"EPSG:{epsg}" if epsg else c.to_wkt()
    manifest: dict[str, Any] = {
        "map": {"title": root.resolve().name, "version": "0.0.0", "scale": 25000},
        "layers": layers,
        "tables": tables,
    }
    if crs_label:
        manifest["map"]["crs"] = crs_label
    notes.append("Publication scale unknown: 1:25 000 assumed for tolerances; set map.scale in archivist.toml.")
    if unplaced:
        notes.append(f"Files not placed in any role: {', '.join(unplaced)}.")
    return manifest, notes
