"""Guess the roles of a folder's files (or a GeoPackage's layers) when there is no ``archivist.toml``.

Roles come from geometry types, field names and a look at the values
(a field whose codes are the legend's unit codes is the unit field; a field
holding "contact" and "fault" is the line kind). Nothing is written here:
``load_project`` uses the guess for a folder without a manifest, and
``archivist init`` writes the same guess out as a commented manifest for the
mapper to confirm (:mod:`archivist.scaffold`).
"""

from __future__ import annotations

import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
import pyproj

from . import vectorio
from .fileset import SIDE_FILE_SUFFIXES
from .manifest import LINE_KEYS
from .readers import TABLE_SUFFIXES, VECTOR_SUFFIXES, read_table, spreadsheet_errors

# Field names, best first. Compared without case.
UNIT_NAMES = (
    "unit", "unit_code", "unitcode", "map_unit", "mapunit", "unit_symbol", "symbol", "map_symbol",
    "code", "geol_code", "geocode", "litho_code", "lithocode", "formation",
)
KIND_NAMES = ("kind", "line_kind", "type", "line_type", "linetype", "feature", "class", "category")
CERTAINTY_NAMES = ("certainty", "confidence", "existence", "exist", "location", "accuracy", "positional_accuracy", "qualifier")
SAMPLE_ID_NAMES = ("sample_id", "sampleid", "sample", "sample_no", "sample_number", "sample_code", "sample_name", "id")
AZIMUTH_NAMES = ("azimuth", "dip_direction", "dipdirection", "dip_dir", "dipdir", "dip_azimuth", "dipazimuth", "trend", "strike")
DIP_NAMES = ("dip", "dip_angle", "plunge", "inclination")
STRUCT_KIND_NAMES = ("kind", "type", "structure", "structure_type", "feature", "measurement", "class")
STATION_ID_NAMES = ("station_id", "stationid", "station", "station_no", "station_number", "stn", "stn_id", "site_id", "stop_id")
STATION_WORDS = re.compile(r"station|stn|stop|outcrop|observ|locality|localities", re.I)
DATE_NAMES = ("date", "visit_date", "visited", "observed", "obs_date", "day")
OBSERVER_NAMES = ("observer", "mapper", "geologist", "recorded_by", "recorder", "by")
OBSERVATION_NAMES = ("observation", "observations", "notes", "note", "description", "remarks", "remark", "comment", "comments")
X_NAMES = ("x", "easting", "east", "e", "lon", "long", "longitude")
Y_NAMES = ("y", "northing", "north", "n", "lat", "latitude")
LEGEND_EXTRA = ("name", "description", "age", "colour", "color", "min_age_ma", "max_age_ma", "order", "lithology")
EXTENT_WORDS = re.compile(r"extent|boundary|frame|outline|area|border|limit", re.I)
UNIT_WORDS = re.compile(r"unit|geol|litho|bedrock|formation|polygon", re.I)
LINE_WORDS = re.compile(r"line|contact|fault|linework|boundar", re.I)
SAMPLE_WORDS = re.compile(r"sample", re.I)
STRUCT_WORDS = re.compile(r"struct|orient|measure|bedding|foliation|dip", re.I)
OXIDE = re.compile(r"^(SiO2|TiO2|Al2O3|Fe2O3T?|FeOT?|MnO|MgO|CaO|Na2O|K2O|P2O5)\b", re.I)
KIND_VALUES = ("contact", "fault", "boundary", "thrust", "dyke", "dike", "unconformity", "shear", "axial")
CERTAINTY_VALUES = ("certain", "approximate", "approx", "inferred", "concealed", "uncertain", "accurate", "queried")
SKIP_DIRS = {"__pycache__", "node_modules"}
LAYER_KEYS = ("units", "lines", "contacts", "faults", "frame", "extent", "samples", "structures", "stations")  # as written in [layers]
MAX_DEPTH = 3
SAMPLE_ROWS = 5000  # values looked at per field


def _pick(fields: list[str], names: tuple[str, ...]) -> str | None:
    lower = {f.lower(): f for f in reversed(fields)}
    for n in names:
        if n in lower:
            return lower[n]
    return None


def _share(values: pd.Series, words: tuple[str, ...]) -> tuple[float, list[str]]:
    """Share of the non-empty values that contain one of ``words``, and the commonest such values."""
    v = values.dropna().astype(str).str.strip()
    v = v[v != ""]
    if v.empty:
        return 0.0, []
    pattern = "|".join(re.escape(w) for w in words)
    hit = v.str.lower().str.contains(pattern, regex=True)
    return float(hit.mean()), v[hit].value_counts().index[:3].tolist()


@dataclass
class Source:
    """One candidate layer or table found in the folder."""

    path: Path
    rel: str  # relative to the project folder, with /
    layer: str | None = None  # layer in a multi-layer file
    sheet: str | None = None  # sheet of a workbook
    geometry: str | None = None  # "Polygon", "LineString", "Point"; None for a table
    fields: list[str] = field(default_factory=list)
    crs: str | None = None
    features: int | None = None
    columns_only: bool = False  # a table with no geometry inside a vector file (not readable as a table)
    _frame: pd.DataFrame | None = None

    @property
    def label(self) -> str:
        inner = self.layer if self.layer is not None else self.sheet
        return f"{self.rel}:{inner}" if inner else self.rel

    @property
    def described(self) -> str:
        if self.layer is not None:
            where = f"{self.rel}, layer '{self.layer}'"
        elif self.sheet is not None:
            where = f"{self.rel}, sheet '{self.sheet}'"
        else:
            where = self.rel
        if self.geometry:
            word = {"Polygon": "polygon", "LineString": "line", "Point": "point"}.get(self.geometry, f"{self.geometry} feature")
            if self.features is None:
                return f"{where}: {word}s"
            return f"{where}: {self.features} {word}{'' if self.features == 1 else 's'}"
        n = len(self._frame) if self._frame is not None else 0
        return f"{where}: a table of {n} row{'' if n == 1 else 's'}"

    def values(self, column: str) -> pd.Series:
        if self._frame is not None:
            return self._frame[column] if column in self._frame.columns else pd.Series([], dtype=object)
        try:
            df = vectorio.read_dataframe(self.path, layer=self.layer, columns=[column], read_geometry=False, max_features=SAMPLE_ROWS)
            return df[column] if column in df.columns else pd.Series([], dtype=object)
        except vectorio.VectorReadError:  # a layer GDAL lists but cannot read: no values to look at
            return pd.Series([], dtype=object)

    def spec(self) -> dict[str, Any]:
        spec: dict[str, Any] = {"path": self.rel}
        if self.layer is not None and self._needs_layer:
            spec["layer"] = self.layer
        if self.sheet is not None:
            spec["sheet"] = self.sheet
        return spec

    _needs_layer: bool = True


@dataclass
class Placed:
    """A role given to a source, with the reasons written beside it in the manifest."""

    role: str
    source: Source
    spec: dict[str, Any]
    why: list[str] = field(default_factory=list)
    confirm: list[str] = field(default_factory=list)


@dataclass
class Inference:
    """What :func:`infer` found: the manifest, and how each part of it was decided."""

    root: Path
    manifest: dict[str, Any]
    placed: dict[str, Placed]
    unplaced: list[tuple[str, str]]  # (file or layer, why it was not placed)
    crs_label: str | None
    crs_name: str | None
    crs_from: str | None
    crs_disagree: list[tuple[str, str]]  # (source, its CRS) differing from the map CRS
    notes: list[str]


def crs_text(crs: str | None) -> tuple[str | None, str | None]:
    """(manifest value, name) of a CRS read from a file: ``EPSG:n`` when identifiable, else WKT."""
    if not crs:
        return None, None
    try:
        c = pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError:
        return str(crs), None
    epsg = c.to_epsg(min_confidence=70)
    return (f"EPSG:{epsg}" if epsg else c.to_wkt()), c.name


def _walk(root: Path, depth: int = 0):
    try:
        entries = sorted(root.iterdir(), key=lambda p: p.name)
    except OSError:
        return
    for p in entries:
        if p.name.startswith(".") or p.name in SKIP_DIRS:
            continue
        if p.is_dir() and p.suffix.lower() != ".gdb":
            if (p / "bagit.txt").is_file():
                yield p  # a package (e.g. an earlier archivist pack): listed, not read
            elif depth < MAX_DEPTH:
                yield from _walk(p, depth + 1)
            continue
        yield p


FAMILY_OF_TYPE_ID = {0: "Point", 4: "Point", 1: "LineString", 2: "LineString", 5: "LineString", 3: "Polygon", 6: "Polygon"}


def _geometry_family(path: Path, layer: str, gtype: str) -> str:
    """Point, LineString or Polygon for a layer; a layer declared as mixed ("Unknown") is judged by its features."""
    g = gtype.replace("Multi", "").replace(" Z", "").replace(" M", "").replace("25D", "").strip()
    if g in ("Point", "LineString", "Polygon"):
        return g
    if g == "LinearRing":
        return "LineString"
    try:
        import shapely

        df = vectorio.read_dataframe(path, layer=layer, columns=[], max_features=SAMPLE_ROWS)
        ids = shapely.get_type_id(df.geometry.values[~df.geometry.isna().to_numpy()])
    except (vectorio.VectorReadError, AttributeError):  # unreadable, or no geometry: leave the declared type, it will be listed as not placed
        return g
    families = Counter(FAMILY_OF_TYPE_ID[int(i)] for i in ids if int(i) in FAMILY_OF_TYPE_ID)
    return families.most_common(1)[0][0] if families else g


def scan(root: Path, only: Path | None = None) -> tuple[list[Source], list[tuple[str, str]]]:
    """Every layer and table under ``root`` (or in the one file ``only``), and the files that are neither."""
    sources: list[Source] = []
    other: list[tuple[str, str]] = []
    files = [only] if only is not None else list(_walk(root))
    sidecars = SIDE_FILE_SUFFIXES | {".qml", ".lock"}
    for path in files:
        rel = path.relative_to(root).as_posix()
        suffix = path.suffix.lower()
        if path.is_dir() and suffix != ".gdb":
            other.append((rel, "a BagIt package, not a source of the map: not looked into"))
            continue
        if suffix in VECTOR_SUFFIXES:
            try:
                layers = vectorio.list_layers(path, label=rel)
            except vectorio.VectorReadError as exc:
                other.append((rel, f"not readable as a vector layer: {exc}"))
                continue
            found = []
            for name, gtype in layers:
                name = str(name)
                try:
                    info = vectorio.read_info(path, layer=name, label=rel)
                except vectorio.VectorReadError:
                    other.append((f"{rel}:{name}", "cannot be read"))
                    continue
                fields = [str(f) for f in info["fields"]]
                if gtype is None:
                    other.append((f"{rel}:{name}", f"a table inside a vector file (columns: {', '.join(fields)}); archivist reads tables from CSV or XLSX"))
                    continue
                g = _geometry_family(path, name, str(gtype))
                found.append(Source(path, rel, name, None, g, fields, info.get("crs"), info.get("features")))
            for s in found:
                s._needs_layer = len(layers) > 1
            sources.extend(found)
        elif suffix in TABLE_SUFFIXES:
            sheets: list[str | None] = [None]
            if suffix in (".xlsx", ".xlsm"):
                unreadable: tuple[type[BaseException], ...] = (OSError, *spreadsheet_errors())
                try:
                    import openpyxl

                    wb = openpyxl.load_workbook(path, read_only=True)
                    sheets = list(wb.sheetnames)
                    wb.close()
                except unreadable:
                    other.append((rel, "not readable as a spreadsheet"))
                    continue
            for sheet in sheets:
                data, hits = read_table(path, rel, sheet)
                label = f"{rel}:{sheet}" if sheet else rel
                if data is None:
                    why = hits[0].message if hits else "cannot be read"
                    other.append((label, why))
                    continue
                if data.frame.empty and not len(data.frame.columns):
                    other.append((label, "empty"))
                    continue
                src = Source(path, rel, None, sheet if len(sheets) > 1 else None, None, [str(c) for c in data.frame.columns])
                src._frame = data.frame
                sources.append(src)
        elif suffix not in sidecars and not path.name.lower().startswith("archivist"):
            other.append((rel, "not a vector layer or a table"))
    return sources, other


def _unit_field(src: Source, legend_codes: set[str]) -> tuple[str | None, str]:
    """The field holding unit codes, and why it was chosen."""
    if legend_codes:
        best, best_share = None, 0.0
        for f in src.fields:
            v = src.values(f).dropna().astype(str).str.strip()
            v = set(v[v != ""])
            if not v:
                continue
            share = len(v & legend_codes) / len(v)
            if share > best_share:
                best, best_share = f, share
        if best is not None and best_share >= 0.5:
            return best, f"its values are the legend's unit codes ({best_share:.0%} of the distinct values)"
    name = _pick(src.fields, UNIT_NAMES)
    if name:
        return name, "by its name"
    return None, ""


def _field_by_values(src: Source, names: tuple[str, ...], words: tuple[str, ...]) -> tuple[str | None, str]:
    best, best_share, examples = None, 0.0, []
    for f in src.fields:
        share, found = _share(src.values(f), words)
        if share > best_share:
            best, best_share, examples = f, share, found
    if best is not None and best_share >= 0.3:
        return best, "its values include " + ", ".join(f"'{x}'" for x in examples)
    name = _pick(src.fields, names)
    return (name, "by its name") if name else (None, "")


def _legend(sources: list[Source]) -> tuple[Source | None, str | None]:
    best = None
    for s in sources:
        if s.geometry is not None:
            continue
        unit = _pick(s.fields, UNIT_NAMES)
        extra = {f.lower() for f in s.fields} & set(LEGEND_EXTRA)
        if unit and extra:
            score = (len(extra), -len(s.fields))
            if best is None or score > best[0]:
                best = (score, s, unit)
    return (best[1], best[2]) if best else (None, None)


REFERENCE_WORDS = re.compile(r"reference|bibliograph|sources|literature|citation", re.I)
METHOD_NAMES = ("method", "analytical_method", "technique", "analysis_method")
SOURCE_NAMES = ("source", "reference", "ref", "ref_key", "reference_key", "citation", "doi")  # an analyses column


def _references(sources: list[Source], used: set[int]) -> tuple[Source, dict[str, Any], str] | None:
    """A references table: a DOI column beside a citation, authors or title column, or a key column in a file named
    like a bibliography (references.csv, bibliography.xlsx, sources.csv); columns as archivist.vocab.literature reads them."""
    from .vocab.literature import SPELLINGS, header_key

    for s in sources:
        if s.geometry is not None or id(s) in used:
            continue
        keys = {header_key(f): f for f in s.fields}
        found = {k: next((keys[n] for n in names if n in keys), None) for k, names in SPELLINGS.items()}
        text = [k for k in ("citation", "authors", "title") if found[k]]
        named = bool(REFERENCE_WORDS.search(s.sheet or s.path.stem))
        if found["doi"] and text or named and found["key"] and (found["doi"] or text):
            spec = s.spec()
            for k in ("key", "doi", "citation"):
                if found[k]:
                    spec[f"{k}_field"] = found[k]
            cols = ", ".join(f"'{found[k]}'" for k in ("key", "doi", *text) if found[k])
            return s, spec, f"columns {cols} of a table of cited works" + (" named like one" if named else "")
    return None


LINE_KEY_WORDS = (
    ("contacts", re.compile(r"contact", re.I)),
    ("faults", re.compile(r"fault|thrust", re.I)),
    ("frame", re.compile(r"frame|boundary|border|neatline|outline", re.I)),
)


def _line_key(name: str) -> str | None:
    """The [layers] key a line layer's name suggests (``contacts``, ``faults``, ``frame``); None for none or several."""
    keys = [key for key, words in LINE_KEY_WORDS if words.search(name)]
    return keys[0] if len(keys) == 1 else None


def _entry_name(src: Source, taken: set[Any]) -> str:
    """A name for a [[layers.lines]] entry: its layer or file name, made distinct."""
    base = re.sub(r"[^A-Za-z0-9_.-]+", "_", src.layer or src.path.stem).strip("_.-") or "lines"
    name, n = base, 2
    while name in taken:
        name, n = f"{base}_{n}", n + 1
    return name


def _certainty(src: Source, spec: dict[str, Any], reasons: list[str], kind: str | None) -> None:
    cert, cwhy = _field_by_values(src, CERTAINTY_NAMES, CERTAINTY_VALUES)
    if cert and cert != kind:
        spec["certainty_field"] = cert
        reasons.append(f"certainty field '{cert}': {cwhy}")


def _station_fields(s: Source) -> dict[str, str] | None:
    """The station fields of a point layer or coordinate table that looks like field stations, else None.

    A station id column (``station_id``, ``stn``...), no sample id column (a
    sample layer names its station, it is not one), and a name or an
    observation column that says stations (``stations.csv``, ``notes``).
    """
    sid = _pick(s.fields, STATION_ID_NAMES)
    if sid is None or (_pick(s.fields, SAMPLE_ID_NAMES) not in (None, "id") and _pick(s.fields, SAMPLE_ID_NAMES) != sid):
        return None
    observation = _pick(s.fields, OBSERVATION_NAMES)
    if not (STATION_WORDS.search(s.layer or s.sheet or s.path.stem) or observation):
        return None
    out = {"id_field": sid}
    for key, names in (("date_field", DATE_NAMES), ("observer_field", OBSERVER_NAMES), ("unit_field", UNIT_NAMES)):
        found = _pick(s.fields, names)
        if found:
            out[key] = found
    if observation:
        out["observation_field"] = observation
    if s.geometry is None:
        x, y = _pick(s.fields, X_NAMES), _pick(s.fields, Y_NAMES)
        if not (x and y):
            return None
        out.update(x_field=x, y_field=y)
    return out


def _stations(sources: list[Source], place: Any, used: set[int]) -> None:
    """Place field stations: one point layer, or coordinate tables with the same columns (one per mapper) as a list."""
    found = [(s, f) for s in sources if id(s) not in used and s.geometry in (None, "Point") and not s.columns_only
             for f in [_station_fields(s)] if f is not None]
    if not found:
        return
    found.sort(key=lambda sf: (sf[0].geometry is None, sf[0].rel))  # a point layer first
    first, fields = found[0]
    group = [first] if first.geometry is not None else [s for s, f in found if s.geometry is None and f == fields
                                                            and s.sheet == first.sheet]
    spec = first.spec()
    if len(group) > 1:
        spec["path"] = [s.rel for s in group]
    spec.update(fields)
    what = "points" if first.geometry is not None else "a table with coordinates '{x_field}', '{y_field}'".format(**fields)
    why = [f"{what} with a station id '{fields['id_field']}'"
           + (f" and observations '{fields['observation_field']}'" if "observation_field" in fields else "")]
    confirm = []
    if len(group) > 1:
        why.append(f"{len(group)} files with the same columns, read as one table (a file per mapper)")
    if first.geometry is None and fields["x_field"].lower() in ("lon", "long", "longitude"):
        spec["crs"] = "EPSG:4326"
    elif first.geometry is None:
        confirm.append("the CRS of the coordinates: taken to be the map's")
    place("stations", first, spec, why, confirm)
    used.update(id(s) for s in group)


def infer(path: Path) -> Inference:
    """Guess a manifest for the project folder ``path``, or for the GeoPackage ``path`` alone.

    Files are read through :mod:`archivist.vectorio` in one session: nothing in the folder changes.
    """
    with vectorio.reading():
        return _infer(Path(path))


def _infer(path: Path) -> Inference:
    if path.is_file():
        root, only = path.parent, path
        title = path.stem
    else:
        root, only = path, None
        title = path.resolve().name
    sources, unplaced = scan(root, only)
    placed: dict[str, Placed] = {}
    used: set[int] = set()

    def place(role: str, src: Source, spec: dict[str, Any], why: list[str], confirm: list[str] | None = None):
        placed[role] = Placed(role, src, spec, why, confirm or [])
        used.add(id(src))

    # tables first: the legend's codes help find the unit field
    legend, legend_unit = _legend(sources)
    legend_codes: set[str] = set()
    if legend is not None and legend_unit is not None:
        spec = legend.spec()
        if legend_unit != "unit":
            spec["unit_field"] = legend_unit
        cols = [c for c in legend.fields if c.lower() in LEGEND_EXTRA]
        place("legend", legend, spec, [f"a unit column '{legend_unit}' with {', '.join(cols)}"])
        v = legend.values(legend_unit).dropna().astype(str).str.strip()
        legend_codes = set(v[v != ""])
    for s in sources:
        if s.geometry is not None or id(s) in used or "analyses" in placed:
            continue
        oxides = [c for c in s.fields if OXIDE.match(c)]
        sid = _pick(s.fields, SAMPLE_ID_NAMES)
        if len(oxides) >= 3 and sid:
            spec = s.spec()
            spec["sample_field"] = sid
            place("analyses", s, spec, [f"{len(oxides)} oxide columns ({', '.join(oxides[:4])}…) and a sample column '{sid}'"])

    refs = _references(sources, used)
    if refs is not None:
        src, spec, why = refs
        place("references", src, spec, [why])
    if "analyses" in placed:
        cited = _pick(placed["analyses"].source.fields, SOURCE_NAMES)
        if cited:
            fields = placed["analyses"].source.fields
            spec = placed["analyses"].spec
            spec["source_field"] = cited
            placed["analyses"].why.append(f"a column '{cited}' naming the source of rows compiled from publications")
            method = _pick(fields, METHOD_NAMES)
            if method:
                spec["method_field"] = method
            from .vocab.coordinates import lonlat_columns

            where = lonlat_columns(fields, {})
            if where is not None:
                spec["lon_field"], spec["lat_field"] = where.lon, where.lat

    # polygons: the unit layer, then the extent
    polys = [s for s in sources if s.geometry == "Polygon"]
    ranked = []
    for s in polys:
        unit, why = _unit_field(s, legend_codes)
        named = bool(UNIT_WORDS.search(s.layer or s.path.stem))
        extentish = bool(EXTENT_WORDS.search(s.layer or s.path.stem)) and not named
        ranked.append(((unit is not None, "values" in why, named, not extentish, s.features or 0), s, unit, why))
    ranked.sort(key=lambda r: r[0], reverse=True)
    if ranked and (ranked[0][2] is not None or ranked[0][0][2]):
        _, s, unit, why = ranked[0]
        spec = s.spec()
        confirm = []
        if unit is None:
            confirm.append(f"no field with unit codes was recognised (fields: {', '.join(s.fields) or 'none'}); set unit_field")
        else:
            spec["unit_field"] = unit
        place("units", s, spec, [f"polygons; unit field '{unit}': {why}"] if unit else ["polygons named like map units"], confirm)
    for s in polys:
        if id(s) in used or "extent" in placed:
            continue
        name = s.layer or s.path.stem
        if EXTENT_WORDS.search(name) or (s.features is not None and s.features <= 2 and "units" in placed):
            place("extent", s, s.spec(), [f"polygons named '{name}'" if EXTENT_WORDS.search(name) else f"{s.features} polygon(s) besides the units"])

    # lines: one layer with a kind field is `lines`; layers named for one kind (contacts, faults,
    # the frame) get that key and its kind; any other line layers are entries of [[layers.lines]]
    lines = [s for s in sources if s.geometry == "LineString"]
    ranked_lines: list[tuple[tuple[bool, bool, int], Source, str | None, str]] = []
    for s in lines:
        kind, kwhy = _field_by_values(s, KIND_NAMES, KIND_VALUES)
        ranked_lines.append(((kind is not None, bool(LINE_WORDS.search(s.layer or s.path.stem)), s.features or 0), s, kind, kwhy))
    ranked_lines.sort(key=lambda r: r[0], reverse=True)
    general: list[tuple[Source, str | None, str, str | None]] = []  # (source, kind field, why, key its name suggests)
    for _, s, kind, kwhy in ranked_lines:
        key = _line_key(s.layer or s.path.stem)
        if key is not None and key not in placed and not (len(lines) == 1 and kind):  # one layer with kinds stays `lines`
            if kind is not None and kind.lower() not in KIND_NAMES:
                kind = None  # in a layer of one kind, a field is its kind only by its name ("Hask Fault" is a fault's name)
            spec = s.spec()
            reasons = [f"lines named '{s.layer or s.path.stem}': every line is a {LINE_KEYS[key]}"]
            if kind:
                spec["kind_field"] = kind
                reasons = [f"lines named '{s.layer or s.path.stem}'; kind field '{kind}': {kwhy} (lines with it empty are {LINE_KEYS[key]}s)"]
            _certainty(s, spec, reasons, kind)
            place(key, s, spec, ["; ".join(reasons)])
        else:
            general.append((s, kind, kwhy, key))
    for i, (s, kind, kwhy, _) in enumerate(general):
        spec = s.spec()
        reasons, confirm = ["lines"], []
        if kind:
            spec["kind_field"] = kind
            reasons.append(f"kind field '{kind}': {kwhy}")
        else:
            confirm.append(f"no field naming the kind of line (contact, fault…) was recognised (fields: {', '.join(s.fields) or 'none'}); "
                           "set kind_field, or kind for a layer of one kind")
        _certainty(s, spec, reasons, kind)
        if len(general) == 1:
            place("lines", s, spec, ["; ".join(reasons)], confirm)
        else:  # several: a list, each entry named after its layer or file
            spec = {"name": _entry_name(s, {p.spec.get("name") for p in placed.values()} | set(LINE_KEYS)), **spec}
            place(f"lines[{i}]", s, spec, ["; ".join(reasons)], confirm)

    # points: structures (azimuth and dip), samples (a sample id)
    points = [s for s in sources if s.geometry == "Point"]
    ranked_s = []
    for s in points:
        az, dip = _pick(s.fields, AZIMUTH_NAMES), _pick(s.fields, DIP_NAMES)
        if az and dip:
            ranked_s.append(((bool(STRUCT_WORDS.search(s.layer or s.path.stem)), s.features or 0), s, az, dip))
    ranked_s.sort(key=lambda r: r[0], reverse=True)
    if ranked_s:
        _, s, az, dip = ranked_s[0]
        spec = s.spec()
        kind = _pick(s.fields, STRUCT_KIND_NAMES)
        if kind:
            spec["kind_field"] = kind
        spec.update(azimuth_field=az, dip_field=dip)
        strike = az.lower() == "strike"
        spec["convention"] = "right-hand-rule" if strike else "dip-direction"
        confirm = []
        if strike:
            confirm.append("azimuths read as strikes by the right-hand rule (the field is named 'strike')")
        else:
            confirm.append("azimuths read as dip directions; set convention = \"right-hand-rule\" if they are strikes")
        confirm.append("the data do not say which north the azimuths are from: add north = \"true\", \"magnetic\" (with declination) or \"grid\"")
        if not kind:
            confirm.append(f"no field naming the kind of measurement was recognised (fields: {', '.join(s.fields)}); set kind_field")
        place("structures", s, spec, [f"points with azimuth '{az}' and dip '{dip}'" + (f", kind '{kind}'" if kind else "")], confirm)
    _stations(sources, place, used)
    ranked_p = []
    for s in points:
        if id(s) in used:
            continue
        sid = _pick(s.fields, SAMPLE_ID_NAMES)
        if sid:
            ranked_p.append(((bool(SAMPLE_WORDS.search(s.layer or s.path.stem)), sid.lower() != "id", s.features or 0), s, sid))
    ranked_p.sort(key=lambda r: r[0], reverse=True)
    if ranked_p:
        _, s, sid = ranked_p[0]
        spec = s.spec()
        spec["id_field"] = sid
        reasons = [f"points with a sample id '{sid}'"]
        unit = _pick(s.fields, UNIT_NAMES)
        if unit:
            spec["unit_field"] = unit
            reasons.append(f"unit '{unit}'")
        place("samples", s, spec, [", ".join(reasons)])
    if "samples" not in placed:
        for s in sources:
            if s.geometry is not None or id(s) in used:
                continue
            sid, x, y = _pick(s.fields, SAMPLE_ID_NAMES), _pick(s.fields, X_NAMES), _pick(s.fields, Y_NAMES)
            if sid and x and y:
                spec = s.spec()
                spec.update(id_field=sid, x_field=x, y_field=y)
                geographic = x.lower() in ("lon", "long", "longitude")
                confirm = ["the CRS of the coordinates: longitude/latitude read as EPSG:4326" if geographic else "the CRS of the coordinates: taken to be the map's"]
                unit = _pick(s.fields, UNIT_NAMES)
                if unit:
                    spec["unit_field"] = unit
                place("samples", s, spec, [f"a table with sample id '{sid}' and coordinates '{x}', '{y}'"], confirm)
                if geographic:
                    spec["crs"] = "EPSG:4326"
                break

    # the map CRS: the units', else the most common
    crs_of = {p.source.label: p.source.crs for p in placed.values() if p.source.geometry}
    crs_label = crs_name = crs_from = None
    if "units" in placed and placed["units"].source.crs:
        crs_from = placed["units"].source.label
        crs_label, crs_name = crs_text(placed["units"].source.crs)
    else:
        common = Counter(c for c in crs_of.values() if c).most_common(1)
        if common:
            crs_from = next(k for k, v in crs_of.items() if v == common[0][0])
            crs_label, crs_name = crs_text(common[0][0])
    disagree = []
    for label, c in crs_of.items():
        if not c:
            disagree.append((label, "no CRS"))
        elif crs_label and crs_text(c)[0] != crs_label:
            disagree.append((label, crs_text(c)[0] or str(c)))
    if "stations" in placed:  # what names its station: a field called station or station_id, written out to confirm
        for role in ("samples", "structures"):
            found = _pick(placed[role].source.fields, STATION_ID_NAMES[:3]) if role in placed else None
            if found:
                placed[role].spec["station_field"] = found
                placed[role].why.append(f"station field '{found}'")
    for role in ("samples", "stations"):
        if role in placed and "x_field" in placed[role].spec and "crs" not in placed[role].spec and crs_label:
            placed[role].spec["crs"] = crs_label

    for s in sources:
        if id(s) not in used:
            if s.geometry:
                why = f"{s.geometry} features with fields {', '.join(s.fields) or 'none'}: no role recognised"
            else:
                why = f"a table with columns {', '.join(s.fields[:12])}{'…' if len(s.fields) > 12 else ''}: no role recognised"
            unplaced.append((s.label, why))

    files, unplaced, media_notes = place_media(unplaced)
    layers: dict[str, Any] = {r: placed[r].spec for r in LAYER_KEYS if r in placed}
    listed = [placed[r].spec for r in placed if r.startswith("lines[")]
    if listed:
        layers["lines"] = listed
    tables = {r: placed[r].spec for r in ("legend", "analyses", "references") if r in placed}
    manifest: dict[str, Any] = {"map": {"title": title, "version": "0.1.0", "scale": 25000}, "layers": layers}
    if tables:
        manifest["tables"] = tables
    if files:
        manifest["files"] = files
    if crs_label:
        manifest["map"]["crs"] = crs_label
    notes = ["Publication scale unknown: 1:25 000 assumed for tolerances; set map.scale in archivist.toml."] + media_notes
    if unplaced:
        notes.append(f"Not placed in any role: {', '.join(u for u, _ in unplaced)}.")
    return Inference(root, manifest, placed, unplaced, crs_label, crs_name, crs_from, disagree, notes)


# Folder names that hold photos or field-book scans, compared in lower case with spaces and dashes as "_".
MEDIA_FOLDERS = {
    "photos": {"photos", "photo", "fotos", "foto", "images", "image", "pictures", "pics", "img", "field_photos"},
    "fieldbooks": {"fieldbook", "fieldbooks", "field_book", "field_books", "notebooks", "notebook", "scans", "scan",
                   "fieldnotes", "field_notes", "notes"},
}


def place_media(unplaced: list[tuple[str, str]]) -> tuple[dict[str, Any], list[tuple[str, str]], list[str]]:
    """``[files]`` entries for folders of photos and field-book scans among the files not placed, the files left, notes.

    A file goes to a kind when a folder on its path bears one of
    :data:`MEDIA_FOLDERS`' names and its suffix is one of the kind's
    (JPEG, PNG, TIFF... for photos; PDF, JPEG, PNG, TIFF for scans); the
    entry names that folder.
    """
    from .photos import SUFFIXES

    found: dict[str, dict[str, int]] = {}
    left = []
    for rel, why in unplaced:
        parts = rel.split("/")
        kind = folder = None
        for i, part in enumerate(parts[:-1]):
            word = re.sub(r"[\s-]+", "_", part.lower())
            kind = next((k for k, names in MEDIA_FOLDERS.items() if word in names and Path(rel).suffix.lower() in SUFFIXES[k]), None)
            if kind:
                folder = "/".join(parts[: i + 1])
                break
        if kind and folder:
            found.setdefault(kind, {}).setdefault(folder, 0)
            found[kind][folder] += 1
        else:
            left.append((rel, why))
    files: dict[str, Any] = {}
    notes = []
    for kind, folders in found.items():
        files[kind] = {"paths": sorted(folders)}
        n = sum(folders.values())
        what = "photo" if kind == "photos" else "field-book scan"
        notes.append(f"{n} {what}{'s' if n != 1 else ''} in {', '.join(f + '/' for f in sorted(folders))} placed as [files.{kind}]; "
                     "tie them to stations with a link_table or a name_pattern.")
    return files, left, notes


def infer_manifest(root: Path) -> tuple[dict[str, Any], list[str]]:
    """A manifest guessed from the folder's data (or from the one map file ``root``), and notes on what was guessed."""
    inf = infer(Path(root))
    return inf.manifest, inf.notes
