"""Read ``archivist.toml`` and validate it against ``schemas/manifest.schema.json``.

A manifest that is not TOML at all stops the run (exit 2). A manifest that
is TOML but breaks the schema is a finding (``manifest-invalid``) with the key
path, and loading carries on with what is usable.
"""

from __future__ import annotations

import copy
import difflib
import json
import re
import tomllib
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema

from .errors import ArchivistError
from .model import Hit
from .safeparse import load_toml

MANIFEST_NAME = "archivist.toml"
# The [map] keys a repository deposit needs (metadata-incomplete; pack refuses without them).
DEPOSIT_KEYS = ("title", "version", "abstract", "licence", "authors")

# Field names each role reads, and their defaults.
LAYER_DEFAULTS: dict[str, dict[str, str]] = {
    "units": {"unit_field": "unit"},
    "lines": {"kind_field": "kind"},
    "extent": {},
    "samples": {"id_field": "sample_id", "unit_field": "unit"},
    "structures": {"kind_field": "kind", "azimuth_field": "azimuth", "dip_field": "dip", "convention": "dip-direction"},
    "stations": {"id_field": "station_id", "unit_field": "unit"},
}
# Fields a role cannot do without; the others are read when present.
REQUIRED_FIELDS: dict[str, tuple[str, ...]] = {
    "units": ("unit_field",),
    "lines": ("kind_field",),
    "extent": (),
    "samples": ("id_field",),
    "structures": ("kind_field", "azimuth_field", "dip_field"),
    "stations": ("id_field",),
}
# Roles whose `path` may be a list of files read as one table (several mappers' files of one kind).
HAND_IN_ROLES = ("stations", "samples", "structures", "analyses")
# The column a table read from a list of files gains: the file (as the manifest writes it) each row came from.
SOURCE_COLUMN = "source_file"
# The fields that name a sample's or a measurement's station when station_field is not given, in this order.
STATION_FIELDS = ("station", "station_id")


def spec_paths(spec: Any) -> list[str]:
    """The file(s) a layer or table entry names: ``path`` as one text or a list of texts; [] when it names none."""
    if not isinstance(spec, dict):
        return []
    value = spec.get("path")
    if isinstance(value, str):
        return [value]
    if isinstance(value, list) and value and all(isinstance(v, str) for v in value):
        return list(value)
    return []
# Line layers: the keys of [layers] that hold lines, and the kind each key gives
# its lines when the entry names neither `kind` nor `kind_field`. `lines` is the
# general one: its lines carry their kind in a field (default `kind`), and it
# may be a list of entries (`[[layers.lines]]`), one per file or layer.
LINE_KEYS: dict[str, str | None] = {"lines": None, "contacts": "contact", "faults": "fault", "frame": "map-boundary"}


@dataclass(frozen=True)
class LineSource:
    """One declared line layer: its name in findings, where the manifest declares it, and its entry."""

    name: str  # "faults", or a list entry's `name`
    key: str  # "layers.faults", "layers.lines[1]"
    spec: dict[str, Any]


def line_sources(layers: dict[str, Any]) -> list[LineSource]:
    """The line layers of a manifest's ``[layers]`` (defaults filled in), in declaration order.

    ``[layers.lines]`` (one entry, or a list), ``[layers.contacts]``,
    ``[layers.faults]`` and ``[layers.frame]`` each name a file (and layer);
    a list entry is named by its ``name`` key, else by its layer or file
    name. Entries without a ``path`` are left out (the schema reports them).
    """
    out: list[LineSource] = []
    for key in LINE_KEYS:
        value = layers.get(key)
        entries = list(enumerate(value)) if isinstance(value, list) else [(None, value)]
        for i, spec in entries:
            if not isinstance(spec, dict) or not isinstance(spec.get("path"), str):
                continue
            if i is None:
                name, where = key, f"layers.{key}"
            else:
                name = str(spec.get("name") or spec.get("layer") or Path(spec["path"]).stem)
                where = f"layers.{key}[{i}]"
            out.append(LineSource(name, where, spec))
    return out


def line_defaults(key: str, spec: dict[str, Any]) -> dict[str, Any]:
    """A line layer entry with its defaults: the kind its key gives, or ``kind_field = "kind"``."""
    fixed = LINE_KEYS.get(key)
    if "kind" in spec or "kind_field" in spec:
        return dict(spec)
    if fixed is not None:
        return {"kind": fixed, **spec}
    return {**LAYER_DEFAULTS["lines"], **spec}


# The legend has no default field names: without a `*_field` key its columns
# are found by their usual spellings (archivist.vocab.legend).
TABLE_DEFAULTS: dict[str, dict[str, str]] = {
    "legend": {},
    "analyses": {"sample_field": "sample_id"},
    "references": {},  # columns found by their usual headers (archivist.vocab.literature)
}


# A publication scale as mappers write it: 25000, "1:25000", "1:25 000", "1/25,000".
# Digits may be grouped in threes by a space (also no-break or narrow no-break),
# a comma, a dot or an apostrophe; the schema holds the same pattern.
SCALE_PATTERN = re.compile(r"^\s*(?:1\s*[:/]\s*)?([1-9][0-9]{0,2}(?:[ \u00a0\u202f,.'][0-9]{3})+|0*[1-9][0-9]*)\s*$")


def parse_scale(value: Any) -> float | None:
    """The scale denominator of ``value`` (a number or a text such as ``"1:10 000"``), or None if it is not one.

    >>> parse_scale("1:10 000"), parse_scale("1/10000"), parse_scale(25000)
    (10000.0, 10000.0, 25000.0)
    """
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return float(value) if value > 0 else None
    if isinstance(value, str):
        m = SCALE_PATTERN.match(value)
        if m:
            n = float(re.sub(r"\D", "", m.group(1)))
            return n if n > 0 else None
    return None


def did_you_mean(key: str, known: Any) -> str:
    """`` (did you mean 'licence'?)`` for a near miss among ``known`` keys, else an empty string."""
    close = difflib.get_close_matches(str(key), sorted(map(str, known)), n=1, cutoff=0.75)
    if not close:
        close = [k for k in sorted(map(str, known)) if k.casefold() == str(key).casefold()][:1]
    return f"; did you mean '{close[0]}'?" if close else ""


def schema_dir() -> Path:
    """The folder of JSON Schemas: inside the installed package, else the source tree's ``schemas/``."""
    packaged = resources.files("archivist").joinpath("schemas")
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "schemas"


@lru_cache(maxsize=None)
def load_schema(name: str) -> dict[str, Any]:
    path = schema_dir() / name
    return json.loads(path.read_text(encoding="utf-8"))


def find_manifest(path: str | Path) -> tuple[Path, Path | None]:
    """Return (project folder, manifest path or None) for a folder, a manifest file or one map file.

    A vector file given alone (a GeoPackage, a shapefile, GeoJSON...) has no
    manifest: its folder is returned with None, and :func:`map_file` tells
    the loader to guess the roles of that file's layers only.
    Raises ArchivistError when the path does not exist.
    """
    p = Path(path)
    if not p.exists():
        raise ArchivistError(f"{p}: no such file or folder")
    if p.is_dir():
        m = p / MANIFEST_NAME
        return p, (m if m.is_file() else None)
    if p.suffix.lower() == ".toml":
        return p.parent, p
    if map_file(p) is not None:
        return p.parent, None
    raise ArchivistError(f"{p}: expected a project folder, its {MANIFEST_NAME} or a map file (GeoPackage, shapefile, GeoJSON...)")


def map_file(path: str | Path) -> Path | None:
    """``path`` when it is one vector file to check without a manifest, else None."""
    from .readers import VECTOR_SUFFIXES

    p = Path(path)
    return p if p.is_file() and p.suffix.lower() in VECTOR_SUFFIXES else None


def read_manifest(path: Path) -> dict[str, Any]:
    """Parse the TOML of a manifest within :mod:`archivist.safeparse`'s limits.

    A syntax error, an unreadable file, a text that is not UTF-8 and a
    manifest over a limit (size, nesting depth) are each an ArchivistError of
    one line naming the file.
    """
    try:
        data = load_toml(path, str(path))
    except OSError as exc:
        raise ArchivistError(f"{path}: cannot read the manifest ({exc.strerror or exc})") from None
    except UnicodeDecodeError as exc:
        raise ArchivistError(f"{path}: the manifest is not UTF-8 (byte offset {exc.start})") from None
    except tomllib.TOMLDecodeError as exc:
        raise ArchivistError(f"{path}: not valid TOML: {exc}") from None
    return data


def key_path(parts) -> str:
    """Render a JSON path as the mapper wrote it in TOML: ``layers.units.unit_feild``."""
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


def validate_manifest(data: dict[str, Any], source: str) -> list[Hit]:
    """Schema problems as ``manifest-invalid`` hits, each naming the key path."""
    validator = jsonschema.Draft202012Validator(load_schema("manifest.schema.json"))
    hits = []
    for err in sorted(validator.iter_errors(data), key=lambda e: (list(map(str, e.absolute_path)), e.message)):
        where = key_path(err.absolute_path)
        if err.validator == "additionalProperties":
            known = err.schema.get("properties", {})
            extra = sorted(set(err.instance) - set(known))
            for key in extra:
                full = f"{where}.{key}" if where else key
                hint = did_you_mean(key, known)
                hits.append(Hit(f"{source}: unknown key '{full}'{hint or '.'}", layer=source, rule="manifest-invalid"))
            continue
        if err.validator == "required":
            missing = [k for k in err.validator_value if k not in err.instance]
            for key in missing:
                full = f"{where}.{key}" if where else key
                hits.append(Hit(f"{source}: required key '{full}' is missing.", layer=source, rule="manifest-invalid"))
            continue
        if where == "map.scale":
            hits.append(Hit(f"{source}: key 'map.scale': {err.instance!r} is not a scale; write the denominator "
                            "(25000) or a ratio (\"1:25000\", \"1:25 000\").", layer=source, rule="manifest-invalid"))
            continue
        hits.append(Hit(f"{source}: key '{where or '(top)'}': {err.message}.", layer=source, rule="manifest-invalid"))
    return hits + _meaning(data, source)


def _meaning(data: dict[str, Any], source: str) -> list[Hit]:
    """What the schema cannot say: a geographic extent whose south is not below its north, a lonlat_crs that is not geographic."""
    hits = []
    m = data.get("map")
    box = m.get("geographic_extent") if isinstance(m, dict) else None
    if isinstance(box, list) and len(box) == 4 and all(isinstance(v, (int, float)) for v in box) and not box[1] < box[3]:
        hits.append(Hit(f"{source}: key 'map.geographic_extent': south ({box[1]}) must be less than north ({box[3]}); "
                        "the order is [west, south, east, north].", layer=source, rule="manifest-invalid"))
    layers = data.get("layers")
    for role, spec in (layers.items() if isinstance(layers, dict) else ()):
        text = spec.get("lonlat_crs") if isinstance(spec, dict) else None
        if not isinstance(text, str):
            continue
        import pyproj  # only for a manifest that names a lonlat_crs

        try:
            ok = pyproj.CRS.from_user_input(text).is_geographic
        except pyproj.exceptions.CRSError:
            ok = False
        if not ok:
            hits.append(Hit(f"{source}: key 'layers.{role}.lonlat_crs': '{text}' is not a geographic CRS pyproj understands "
                            "(longitude/latitude columns are in degrees: EPSG:4326, EPSG:4258...).", layer=source, rule="manifest-invalid"))
    return hits


def usable(data: dict[str, Any]) -> dict[str, Any]:
    """A copy of the manifest without the values the schema rejects.

    The rejections themselves are reported by :func:`validate_manifest`; what
    is left is safe for the loader and the rules to read (a string where a
    table belongs, a tolerance of "a", a severity of "loud" are dropped and
    their defaults apply).
    """
    out = copy.deepcopy(data)
    validator = jsonschema.Draft202012Validator(load_schema("manifest.schema.json"))
    doomed: list[tuple] = []
    for err in validator.iter_errors(data):
        path = tuple(err.absolute_path)
        if err.validator == "additionalProperties":
            doomed += [path + (key,) for key in set(err.instance) - set(err.schema.get("properties", {}))]
        elif err.validator != "required" and path:
            doomed.append(path)
    # deepest first, and higher list indices before lower ones so deletions do not shift the rest
    for path in sorted(set(doomed), key=lambda p: (len(p), p[-1] if isinstance(p[-1], int) else -1), reverse=True):
        parent = out
        try:
            for part in path[:-1]:
                parent = parent[part]
            if isinstance(parent, dict):
                parent.pop(path[-1], None)
            elif isinstance(parent, list) and isinstance(path[-1], int) and path[-1] < len(parent):
                del parent[path[-1]]
        except (KeyError, IndexError, TypeError):
            continue  # an enclosing value was dropped already
    return out


def with_defaults(data: dict[str, Any]) -> dict[str, Any]:
    """A copy of the manifest with the default field names filled in per role."""
    out = {k: (dict(v) if isinstance(v, dict) else v) for k, v in data.items()}
    layers: dict[str, Any] = {}
    for role, spec in (data.get("layers") or {}).items():
        if role in LINE_KEYS and isinstance(spec, list):
            layers[role] = [line_defaults(role, s) for s in spec if isinstance(s, dict)]
        elif role in LINE_KEYS and isinstance(spec, dict):
            layers[role] = line_defaults(role, spec)
        elif isinstance(spec, dict):
            layers[role] = {**LAYER_DEFAULTS.get(role, {}), **spec}
    out["layers"] = layers
    tables = {}
    for role, spec in (data.get("tables") or {}).items():
        if isinstance(spec, dict):
            tables[role] = {**TABLE_DEFAULTS.get(role, {}), **spec}
    out["tables"] = tables
    out.setdefault("map", {})
    if isinstance(out["map"], dict) and isinstance(out["map"].get("scale"), str):
        scale = parse_scale(out["map"]["scale"])
        out["map"] = {**out["map"], "scale": scale} if scale is not None else {k: v for k, v in out["map"].items() if k != "scale"}
    out.setdefault("checks", {})
    return out
