"""Build archivist's chart tables from the official data of the International Chronostratigraphic Chart.

Usage::

    python tools/build_chart.py [SOURCE.ttl ...]

With no argument it reads the two files kept in ``tests/data/ics/``
(copied unchanged from the data repository of the International Commission on
Stratigraphy, CC BY 4.0) and writes ``archivist/reference/ics_chart_<version>.csv``
for each. The installed package reads only those CSV tables; rdflib (a test
extra) is needed only here and in the tests.

Each table's header records the chart version (``owl:versionInfo``), the
SHA-256 of the source file, the attribution and citation the licence asks
for, and every repair applied to a known transcription glitch of the source.
A repair first checks that the glitch is there as described, so a corrected
source file stops the build instead of being "repaired" twice.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
import sys
from dataclasses import dataclass
from pathlib import Path

import rdflib
from rdflib.namespace import OWL, RDF, SKOS

ROOT = Path(__file__).resolve().parent.parent
HERE = ROOT / "archivist" / "reference"
SOURCES = ROOT / "tests" / "data" / "ics"
ISC = "http://resource.geosciml.org/classifier/ics/ischart/"
GTS = rdflib.Namespace("http://resource.geosciml.org/ontology/timescale/gts#")
TIME = rdflib.Namespace("http://www.w3.org/2006/time#")
SDO = rdflib.Namespace("https://schema.org/")
SH = rdflib.Namespace("http://www.w3.org/ns/shacl#")
INMYA = rdflib.URIRef(ISC + "inMYA")
RANKS = {
    "Super-Eon": "supereon", "Eon": "eon", "Era": "era", "Period": "period",
    "Sub-Period": "subperiod", "Epoch": "epoch", "Age": "age",
}
CITATION = (
    "Cohen, K.M., Finney, S.C., Gibbard, P.L. & Fan, J.-X. (2013; updated) "
    "The ICS International Chronostratigraphic Chart. Episodes 36: 199-204."
)
COLUMNS = (
    "id", "name", "rank", "parent", "base_ma", "base_uncertainty_ma", "base_approximate",
    "top_ma", "top_uncertainty_ma", "top_approximate", "color", "order", "labels",
)


@dataclass
class Boundary:
    """One boundary of a unit as the source gives it."""

    ma: float
    uncertainty: float | None
    approximate: bool


@dataclass
class Unit:
    """One unit (skos:Concept) of the chart."""

    id: str
    name: str
    rank: str
    parent_id: str | None
    base: Boundary
    top: Boundary
    color: str
    order: int
    labels: list[tuple[str, str]]


def local(node: rdflib.term.Node) -> str:
    """The local name of a chart IRI ("…/ischart/LowerJurassic" -> "LowerJurassic")."""
    return str(node).rsplit("/", 1)[-1]


def name_from_id(ident: str) -> str:
    """The English name of a unit from its identifier: "LowerJurassic" -> "Lower Jurassic".

    The Cambrian's unnamed series and stages are called as the chart prints
    them: "CambrianStage2" -> "Stage 2", "CambrianSeries2" -> "Series 2".
    """
    ident = re.sub(r"^Cambrian(?=(Stage|Series)\d)", "", ident)
    return re.sub(r"(?<=[a-z])(?=[A-Z0-9])", " ", ident)


def boundary(graph: rdflib.Graph, node: rdflib.term.Node | None, what: str) -> Boundary:
    """The age, ± and "uncertain" note of a time:hasBeginning / time:hasEnd node."""
    if node is None or graph.value(node, INMYA) is None:
        raise SystemExit(f"{what}: no numeric age in the source")
    margin = graph.value(node, SDO.marginOfError)
    notes = {str(n).strip().lower() for n in graph.objects(node, SKOS.note)}
    return Boundary(
        ma=float(graph.value(node, INMYA)),  # type: ignore[arg-type]
        uncertainty=float(margin) if margin is not None else None,  # type: ignore[arg-type]
        approximate="uncertain" in notes,
    )


def read_units(graph: rdflib.Graph) -> dict[str, Unit]:
    """Every skos:Concept of the chart, keyed by identifier, as the source gives it (no repair)."""
    out: dict[str, Unit] = {}
    for c in graph.subjects(RDF.type, SKOS.Concept):
        ident = local(c)
        rank = RANKS[local(graph.value(c, GTS.rank))]
        broader = graph.value(c, SKOS.broader)
        labels = {(lit.language or "", str(lit)) for p in (SKOS.prefLabel, SKOS.altLabel) for lit in graph.objects(c, p)}
        if not labels:
            # Units the file leaves unlabelled: the labels of the rank-free resource of the same
            # number (ischart:Stage2 for CambrianStage2), where the file gives one.
            twin = rdflib.URIRef(ISC + re.sub(r"^Cambrian", "", ident))
            labels = {(lit.language or "", str(lit)) for lit in graph.objects(twin, SKOS.prefLabel)}
        out[ident] = Unit(
            id=ident,
            name=name_from_id(ident),
            rank=rank,
            parent_id=local(broader) if broader is not None else None,
            base=boundary(graph, graph.value(c, TIME.hasBeginning), f"{ident} base"),
            top=boundary(graph, graph.value(c, TIME.hasEnd), f"{ident} top"),
            color=str(graph.value(c, SDO.color) or ""),
            order=int(graph.value(c, SH.order)),  # type: ignore[arg-type]
            labels=sorted(labels),
        )
    return out


def _swap(units: dict[str, Unit], ident: str, base: float, top: float) -> str:
    u = units[ident]
    if (u.base.ma, u.top.ma) != (base, top):
        raise SystemExit(f"repair of {ident}: expected base {base}, top {top}; found {u.base.ma}, {u.top.ma}")
    u.base, u.top = u.top, u.base
    return f"{ident}: base and top swapped in the source ({base}/{top}); now base {top}, top {base}"


def _top_from(units: dict[str, Unit], ident: str, wrong: float, younger: str) -> str:
    u, y = units[ident], units[younger]
    if u.top.ma != wrong:
        raise SystemExit(f"repair of {ident}: expected top {wrong}; found {u.top.ma}")
    u.top = Boundary(y.base.ma, y.base.uncertainty, y.base.approximate)
    return f"{ident}: top {wrong} in the source; set to the base of {younger} ({y.base.ma})"


def _base_from(units: dict[str, Unit], ident: str, wrong: float, older: str) -> str:
    u, o = units[ident], units[older]
    if u.base.ma != wrong:
        raise SystemExit(f"repair of {ident}: expected base {wrong}; found {u.base.ma}")
    u.base = Boundary(o.top.ma, o.top.uncertainty, o.top.approximate)
    return f"{ident}: base {wrong} in the source; set to the top of {older} ({o.top.ma})"


def repair(version: str, units: dict[str, Unit]) -> list[str]:
    """Repair the known transcription glitches of a version; return one line per repair.

    Each glitch breaks the chain of boundaries: a unit whose base and top are
    swapped, or whose boundary differs from the one its neighbour (or its
    parent) gives for the same GSSP. The repair takes the value the
    neighbouring units agree on.
    """
    if version == "2023-09":
        return [
            _swap(units, "Paleozoic", 251.902, 538.8),
            _swap(units, "Valanginian", 132.6, 139.8),
            _swap(units, "Olenekian", 247.2, 251.2),
            # Stage 2 is given as 521-509, one boundary off at both ends: it lies between
            # the Fortunian (top 529) and Stage 3 (base 521).
            _top_from(units, "CambrianStage2", 509.0, "CambrianStage3"),
            _base_from(units, "CambrianStage2", 521.0, "Fortunian"),
            _top_from(units, "Ludlow", 419.2, "Pridoli"),
        ]
    if version == "2024-12":
        return [
            # The same Ludlow glitch as in 2023-09: its top is the top of the Pridoli.
            _top_from(units, "Ludlow", 419.62, "Pridoli"),
            # The Miocene and the Neogene start at 23.04 in the same file; their first stage at 23.03.
            _base_from(units, "Aquitanian", 23.03, "Oligocene"),
        ]
    return []


def _num(x: float | None) -> str:
    return "" if x is None else repr(float(x)).removesuffix(".0") if float(x).is_integer() else repr(float(x))


def build(source: Path, out_dir: Path = HERE) -> Path:
    """Convert one source TTL file into ``ics_chart_<version>.csv`` in ``out_dir``; return its path."""
    data = source.read_bytes()
    graph = rdflib.Graph().parse(data=data, format="turtle")
    scheme = rdflib.URIRef(ISC.rstrip("/"))
    version = str(graph.value(scheme, OWL.versionInfo))
    units = read_units(graph)
    repairs = repair(version, units)
    rows = sorted(units.values(), key=lambda u: u.order)
    buf = io.StringIO()
    buf.write(f"# International Chronostratigraphic Chart, International Commission on Stratigraphy, version {version}, CC BY 4.0\n")
    buf.write(f"# Citation: {CITATION}\n")
    buf.write(f"# chart_version: {version}\n")
    buf.write(f"# source: {source.name}, sha256 {hashlib.sha256(data).hexdigest()}\n")
    buf.write("# Built by tools/build_chart.py from the official SKOS/RDF data (github.com/i-c-stratigraphy/chart).\n")
    for line in repairs:
        buf.write(f"# repair: {line}\n")
    buf.write("# Columns: id (the chart's identifier), name (from the identifier), rank, parent (name of the broader unit),\n")
    buf.write("# base/top in Ma with the chart's +/- and 'approximate' (the chart's 'uncertain' note), color (official RGB),\n")
    buf.write("# order (the chart's sh:order), labels (every label the chart gives, lang:label joined by |).\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMNS)
    for u in rows:
        parent = units[u.parent_id].name if u.parent_id in units else ""
        w.writerow([
            u.id, u.name, u.rank, parent,
            _num(u.base.ma), _num(u.base.uncertainty), "yes" if u.base.approximate else "",
            _num(u.top.ma), _num(u.top.uncertainty), "yes" if u.top.approximate else "",
            u.color, u.order, "|".join(f"{lang}:{text}" for lang, text in u.labels),
        ])
    target = out_dir / f"ics_chart_{version}.csv"
    tmp = target.with_suffix(".csv.tmp")
    tmp.write_text(buf.getvalue(), encoding="utf-8")
    tmp.replace(target)
    return target


def main(argv: list[str]) -> int:
    """Build every table named on the command line (default: the shipped sources)."""
    sources = [Path(a) for a in argv] or sorted(SOURCES.glob("chart-*.ttl"))
    for s in sources:
        print(build(s))
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
