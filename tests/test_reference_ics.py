"""The shipped International Chronostratigraphic Chart, against the official ICS data and pyrolite's copy.

Sources of the check values:
- the official data of the International Commission on Stratigraphy (ICS), versions 2024-12 and
  2023-09 (``tests/data/ics/chart-*.ttl``, CC BY 4.0; SHA-256 and repository commits in its README),
  parsed here with rdflib, independently of ``tools/build_chart.py``;
- the charts the ``pyrolite`` package ships as CSV (``pyrolite/data/timescale/geotimescale_202412.csv``
  and ``geotimescale_202210.csv``), an independent transcription.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.metadata
import json
from functools import lru_cache
from pathlib import Path

import pytest
import rdflib
from rdflib.namespace import OWL, RDF, SKOS

import archivist
from archivist.reference import (
    CHART_VERSIONS,
    DEFAULT_CHART,
    RANKS,
    ChartVersionError,
    ancestors,
    chart_info,
    children,
    intervals,
    lookup,
)
from archivist.vocab.ages import AgeError, parse_age
from archivist.report.json import render_json
from archivist.report.text import render_text
from builders import copy_bundle, edit_manifest, edit_table

ICS = Path(__file__).parent / "data" / "ics"
ISC = "http://resource.geosciml.org/classifier/ics/ischart/"
GTS = rdflib.Namespace("http://resource.geosciml.org/ontology/timescale/gts#")
TIME = rdflib.Namespace("http://www.w3.org/2006/time#")
SDO = rdflib.Namespace("https://schema.org/")
INMYA = rdflib.URIRef(ISC + "inMYA")
RANK_OF = {"Super-Eon": "supereon", "Eon": "eon", "Era": "era", "Period": "period",
           "Sub-Period": "subperiod", "Epoch": "epoch", "Age": "age"}

# SHA-256 of the official files, from tests/data/ics/README.md (the ICS repository commits named there).
SHA256 = {
    "2024-12": "5e9714b419e028a8e051669191ff093a1ce1c586b76d9c88817314ba8a71b6a7",
    "2023-09": "97d1867eeab249515c7541feaf14c3a086dfeac9d2c85013f2e0b51d4f6b2158",
}

# The repaired boundaries, as (unit id, "base"/"top", value in Ma, the unit the value is taken from).
# 2023-09: the five glitches documented with the data (Paleozoic, Valanginian and Olenekian base/top
# swapped; Cambrian Stage 2 top 509; Ludlow top 419.2), Stage 2's base also being one boundary off
# (521, which is its top); 2024-12: the Ludlow top (419.62, the top of the Pridoli) and the Aquitanian
# base (23.03 where the Miocene, Neogene, Oligocene and Chattian all give 23.04). pyrolite's copies
# agree with every repaired value (see the pyrolite tests below).
REPAIRED = {
    "2023-09": {
        ("Paleozoic", "base"): 538.8, ("Paleozoic", "top"): 251.902,
        ("Valanginian", "base"): 139.8, ("Valanginian", "top"): 132.6,
        ("Olenekian", "base"): 251.2, ("Olenekian", "top"): 247.2,
        ("CambrianStage2", "base"): 529.0, ("CambrianStage2", "top"): 521.0,
        ("Ludlow", "top"): 423.0,
    },
    "2024-12": {("Ludlow", "top"): 422.7, ("Aquitanian", "base"): 23.04},
}


def _boundary(g: rdflib.Graph, node) -> tuple[float, float | None, bool]:
    margin = g.value(node, SDO.marginOfError)
    notes = {str(n) for n in g.objects(node, SKOS.note)}
    return float(g.value(node, INMYA)), (float(margin) if margin is not None else None), "uncertain" in notes


@lru_cache(maxsize=None)
def official(version: str) -> tuple[str, dict[str, dict]]:
    """(owl:versionInfo, {unit id: fields}) straight from the official file."""
    g = rdflib.Graph().parse(ICS / f"chart-{version}.ttl", format="turtle")
    info = str(g.value(rdflib.URIRef(ISC.rstrip("/")), OWL.versionInfo))
    out = {}
    for c in g.subjects(RDF.type, SKOS.Concept):
        ident = str(c).rsplit("/", 1)[-1]
        labels = {(lit.language, str(lit)) for p in (SKOS.prefLabel, SKOS.altLabel) for lit in g.objects(c, p)}
        if not labels:  # unlabelled Cambrian stages/series: the file labels ischart:Stage2 etc.
            twin = rdflib.URIRef(ISC + ident.removeprefix("Cambrian"))
            labels = {(lit.language, str(lit)) for lit in g.objects(twin, SKOS.prefLabel)}
        broader = g.value(c, SKOS.broader)
        out[ident] = {
            "rank": RANK_OF[str(g.value(c, GTS.rank)).rsplit("/", 1)[-1]],
            "parent": str(broader).rsplit("/", 1)[-1] if broader is not None else None,
            "base": _boundary(g, g.value(c, TIME.hasBeginning)),
            "top": _boundary(g, g.value(c, TIME.hasEnd)),
            "color": str(g.value(c, SDO.color)),
            "labels": labels,
        }
    return info, out


@pytest.mark.parametrize("version", CHART_VERSIONS)
def test_header_records_version_source_checksum_and_credit(version):
    text = (Path(archivist.__file__).parent / "reference" / f"ics_chart_{version}.csv").read_text(encoding="utf-8")
    header = "\n".join(line for line in text.splitlines() if line.startswith("#"))
    info = chart_info(version)
    assert info.version == version == official(version)[0]  # owl:versionInfo of the official file
    assert info.sha256 == SHA256[version] == hashlib.sha256((ICS / f"chart-{version}.ttl").read_bytes()).hexdigest()
    assert (f"International Chronostratigraphic Chart, International Commission on Stratigraphy, "
            f"version {version}, CC BY 4.0") in header
    assert "Cohen, K.M., Finney, S.C., Gibbard, P.L. & Fan, J.-X. (2013; updated)" in header
    assert len(info.repairs) == len({k[0] for k in REPAIRED[version]}) + (version == "2023-09")


@pytest.mark.parametrize("version", CHART_VERSIONS)
def test_every_row_equals_the_official_data(version):
    _, units = official(version)
    shipped = {i.id: i for i in intervals(version)}
    assert set(shipped) == set(units) and len(shipped) == 178  # every skos:Concept of the file, no other row
    names = {i.id: i.name for i in intervals(version)}
    for ident, want in units.items():
        got = shipped[ident]
        base, base_unc, base_approx = want["base"]
        top, top_unc, top_approx = want["top"]
        fixes = REPAIRED[version]
        if (ident, "base") in fixes or (ident, "top") in fixes:
            if version == "2023-09" and ident in ("Paleozoic", "Valanginian", "Olenekian"):
                (base, base_unc, base_approx), (top, top_unc, top_approx) = want["top"], want["base"]
            base, top = fixes.get((ident, "base"), base), fixes.get((ident, "top"), top)
            assert (got.base_ma, got.top_ma) == (base, top), ident
        else:
            assert (got.base_ma, got.base_uncertainty_ma, got.base_estimated) == (base, base_unc, base_approx), ident
            assert (got.top_ma, got.top_uncertainty_ma, got.top_estimated) == (top, top_unc, top_approx), ident
        assert got.rank == want["rank"], ident
        assert got.parent == (names[want["parent"]] if want["parent"] else None), ident
        assert got.color == want["color"], ident
        assert set(got.labels) == want["labels"], ident


@pytest.mark.parametrize("version", CHART_VERSIONS)
def test_children_tile_their_parent_after_the_repairs(version):
    # Internal consistency, the check that finds the glitches: children start at their parent's
    # base, end at its top and share boundaries (true after the repairs listed in REPAIRED).
    for unit in intervals(version):
        assert unit.base_ma > unit.top_ma, unit.name
        kids = children(unit.name, version)
        if kids:
            assert kids[0].base_ma == unit.base_ma, unit.name
            assert kids[-1].top_ma == unit.top_ma, unit.name
            for older, younger in zip(kids, kids[1:]):
                assert older.top_ma == younger.base_ma, (older.name, younger.name)


# --- pyrolite's copies -------------------------------------------------------------------------------

def pyrolite_rows(stamp: str) -> list[dict[str, str]]:
    """pyrolite's chart CSV, read from the installed distribution without importing pyrolite."""
    path = importlib.metadata.distribution("pyrolite").locate_file(f"pyrolite/data/timescale/geotimescale_{stamp}.csv")
    with open(path, encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


PYROLITE_LEVELS = ("Supereon", "Eon", "Era", "Period", "Superepoch", "Epoch", "Age")
PYROLITE_RANK = {"Supereon": "supereon", "Eon": "eon", "Era": "era", "Period": "period",
                 "Superepoch": "subperiod", "Epoch": "epoch", "Age": "age"}


def pyrolite_units(stamp: str) -> dict[str, tuple[str, float, float]]:
    """{name as archivist spells it: (rank, base, top)}; pyrolite's "Upper"/"Lower" epochs get their
    period's name, its "Neo-proterozoic" loses the hyphen; the first row of a name wins (the Hadean eon
    before pyrolite's Hadean era)."""
    out: dict[str, tuple[str, float, float]] = {}
    for r in pyrolite_rows(stamp):
        levels = [(k, r[k]) for k in PYROLITE_LEVELS if r.get(k)]  # the 2022-10 file has no Supereon column
        rank, name = levels[-1]
        if name in ("Lower", "Middle", "Upper"):
            name = f"{name} {levels[-2][1]}"
        out.setdefault(name.replace("-", ""), (PYROLITE_RANK[rank], float(r["Start"]), float(r["End"])))
    return out


# Where pyrolite's 2024-12 copy differs from the official 2024-12 data, and who is right. Every other
# unit pyrolite lists agrees in rank, base and top.
PYROLITE_2024_DIFFERS = {
    # pyrolite rounds the base of the Phanerozoic; the official data gives 538.8.
    "Phanerozoic": "base",
    # pyrolite keeps 113.0 (the 2023 value) for the Albian/Aptian boundary; official 2024-12: 113.2.
    "Albian": "base", "Aptian": "top",
    # pyrolite's Toarcian top 174.1 and Capitanian top 259.1: the next stages start at 174.7 (Aalenian)
    # and 259.51 (Wuchiapingian) in both copies, so pyrolite's values break its own chain.
    "Toarcian": "top", "Capitanian": "top",
    # pyrolite's Sheinwoodian top 430.5 vs its own Homerian base 430.6; its Telychian base 430.6
    # (younger than its top, 432.9) and Aeronian top 430.6 are transcription slips; official: 438.6.
    "Sheinwoodian": "top", "Telychian": "base", "Aeronian": "top",
    # pyrolite's 485.85 for the base of the Ordovician; official 2024-12: 486.85 (the Cambrian top).
    "Ordovician": "base", "Lower Ordovician": "base", "Tremadocian": "base",
    "Cambrian": "top", "Furongian": "top", "Stage 10": "top",
    # pyrolite starts the Archean at 4567 (the Hadean's base) and the Hadean at 4567.3; official: 4031, 4567.
    "Archean": "base", "Hadean": "base",
}


# Ranks: the official data ranks the Pridoli an age (gts:rank rank:Age; the printed chart shows it as a
# series without stages) where pyrolite has an epoch; pyrolite files the Precambrian periods in its
# Epoch column (its Period column holds only Phanerozoic periods).
PRECAMBRIAN_PERIODS = ("Ediacaran", "Cryogenian", "Tonian", "Stenian", "Ectasian", "Calymmian",
                       "Statherian", "Orosirian", "Rhyacian", "Siderian")
PYROLITE_RANK_DIFFERS = {"Pridoli": ("age", "epoch")} | {n: ("period", "epoch") for n in PRECAMBRIAN_PERIODS}


def test_2024_12_against_pyrolite():
    theirs = pyrolite_units("202412")
    ours = {i.name: i for i in intervals("2024-12")}
    compared = 0
    for name, (rank, base, top) in theirs.items():
        unit = ours.get(name)
        if unit is None:
            continue
        compared += 1
        assert (unit.rank, rank) in {(rank, rank), PYROLITE_RANK_DIFFERS.get(name)}, name
        differs = ("base " if unit.base_ma != pytest.approx(base) else "") + ("top" if unit.top_ma != pytest.approx(top) else "")
        assert differs.split() == PYROLITE_2024_DIFFERS.get(name, "").split(), (name, unit.base_ma, unit.top_ma, base, top)
    assert compared == len(theirs) >= 175


def test_2024_12_repairs_agree_with_pyrolite():
    theirs = pyrolite_units("202412")
    assert theirs["Ludlow"][2] == lookup("Ludlow", "2024-12").top_ma == 422.7
    assert theirs["Aquitanian"][1] == lookup("Aquitanian", "2024-12").base_ma == 23.04


def test_2023_09_repairs_agree_with_pyrolite_2022_10():
    # The repaired boundaries did not move between the 2022-10 and 2023-09 charts (the 2023-09 file's
    # own neighbours say the same), so pyrolite's 2022-10 copy is a witness to each repair.
    theirs = pyrolite_units("202210")
    for name in ("Valanginian", "Olenekian", "Stage 2", "Ludlow"):
        unit = lookup(name, "2023-09")
        assert (unit.base_ma, unit.top_ma) == pytest.approx(theirs[name][1:]), name
    # The base of the Paleozoic moved from 541.0 (2022-10, pyrolite) to 538.8 with the Cambrian's in
    # 2023-09; the top agrees, and the repaired base is the 2023-09 file's own Cambrian base.
    assert lookup("Paleozoic", "2023-09").top_ma == theirs["Paleozoic"][2] == 251.902
    assert lookup("Paleozoic", "2023-09").base_ma == lookup("Cambrian", "2023-09").base_ma == 538.8


# --- the reader ---------------------------------------------------------------------------------------

def test_default_is_the_latest_and_unknown_versions_are_refused():
    assert DEFAULT_CHART == max(CHART_VERSIONS) == "2024-12"
    assert parse_age("Cretaceous").chart == "2024-12"
    # Base of the Cretaceous: 143.1 in chart-2024-12.ttl, 145 in chart-2023-09.ttl (ischart:Cretaceous).
    assert parse_age("Cretaceous").base_ma == 143.1 and parse_age("Cretaceous", "2023-09").base_ma == 145.0
    with pytest.raises(ChartVersionError):
        parse_age("Cretaceous", "2019-05")


@pytest.mark.parametrize(
    "text, unit",
    [  # labels from chart-2024-12.ttl (skos:prefLabel @de, @fr, @es, @it, @nl) and chart-2023-09.ttl (altLabel)
        ("Jura", "Jurassic"), ("Kreide", "Cretaceous"), ("Jurassique", "Jurassic"), ("Crétacé", "Cretaceous"),
        ("Cretácico", "Cretaceous"), ("Giurassico", "Jurassic"), ("Karbon", "Carboniferous"),
        ("Frühe Kreide", "Lower Cretaceous"),  # 2023-09 altLabel @de of ischart:LowerCretaceous
        ("Famennien", "Famennian"), ("Pléistocène", "Pleistocene"),
    ],
)
def test_names_in_other_languages(text, unit):
    assert parse_age(text).units == (unit,)


@pytest.mark.parametrize(
    "text, unit, base, top",
    [  # values: chart-2024-12.ttl
        ("Early Cretaceous", "Lower Cretaceous", 143.1, 100.5),
        ("Late Devonian", "Upper Devonian", 382.31, 358.86),
        ("Late Pleistocene", "Upper Pleistocene", 0.129, 0.0117),
        # Formal subseries (from memory: Lower Pleistocene = Gelasian + Calabrian, Middle = Chibanian;
        # Lower/Middle/Upper Holocene = Greenlandian/Northgrippian/Meghalayan); ages from the chart.
        ("Early Pleistocene", "Lower Pleistocene", 2.58, 0.774),
        ("Middle Pleistocene", "Middle Pleistocene", 0.774, 0.129),
        ("Late Holocene", "Upper Holocene", 0.0042, 0.0),
        ("Cambrian Stage 2", "Stage 2", 529.0, 521.0),
    ],
)
def test_formal_subdivisions_in_either_spelling(text, unit, base, top):
    span = parse_age(text)
    assert span.units == (unit,) and (span.base_ma, span.top_ma) == (base, top) and not span.informal


def test_colour_and_uncertainty_as_the_chart_gives_them():
    jurassic = lookup("Jurassic")  # chart-2024-12.ttl: #34B2C9, 201.4 ± 0.2 to 143.1 ± 0.6
    assert jurassic.color == "#34B2C9" and jurassic.label("de") == "Jura"
    assert (jurassic.base_uncertainty_ma, jurassic.top_uncertainty_ma) == (0.2, 0.6)
    assert lookup("Carnian").base_estimated and not lookup("Hettangian").base_estimated  # "uncertain" notes
    span = parse_age("Jurassic")
    assert span.contains(201.6) and not span.contains(201.61 + 0.01)
    assert span.contains(142.5) and not span.contains(142.4)


def test_every_rank_is_there():
    assert {i.rank for i in intervals()} == set(RANKS)
    for name, rank in [("Precambrian", "supereon"), ("Hadean", "eon"), ("Neoarchean", "era"), ("Mississippian", "subperiod"),
                       ("Middle Jurassic", "epoch"), ("Bajocian", "age"), ("Meghalayan", "age")]:
        assert lookup(name).rank == rank, name
    assert ancestors("Bajocian") == ["Middle Jurassic", "Jurassic", "Mesozoic", "Phanerozoic"]


@pytest.mark.parametrize("text, words", [("Tertiary", "Paleogene and/or Neogene"), ("Jurasic", "did you mean Jurassic"),
                                         ("Namurian", "regional or obsolete"), ("", "empty")])
def test_unknown_ages_say_why(text, words):
    with pytest.raises(AgeError) as exc:
        parse_age(text)
    assert words in str(exc.value)


# --- in a check ---------------------------------------------------------------------------------------

def _set(code, column, value):
    def change(frame):
        frame.loc[frame.unit == code, column] = value

    return change


def _chart(version):
    def change(data):
        data.setdefault("checks", {})["chart"] = version

    return change


def ages_found(root):
    return [f for f in archivist.check(root, rules=["legend-age-unknown"]).findings if f.rule == "legend-age-unknown"]


def test_manifest_selects_the_chart(tmp_path):
    # Famennian base: 372.2 ± 1.6 in chart-2023-09.ttl, 372.15 ± 0.46 in chart-2024-12.ttl.
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("AMB", "max_age_ma", "373"))
    (f,) = ages_found(root)
    assert "ICS chart 2024-12" in f.message
    edit_manifest(root, _chart("2023-09"))
    assert ages_found(root) == []


def test_unknown_chart_version_is_manifest_invalid(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), _chart("2031-01"))
    report = archivist.check(root, rules=["manifest-invalid"])
    assert any("chart" in f.message for f in report.findings if f.rule == "manifest-invalid")


@pytest.mark.parametrize("age", ["Famennium", "Famennien", "Fameniense"])  # @de, @fr, @es of ischart:Famennian
def test_legend_in_other_languages_passes(tmp_path, age):
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("AMB", "age", age))
    assert ages_found(root) == []


def test_age_within_the_stated_uncertainty_passes(tmp_path):
    # Base of the Tournaisian (= Carboniferous) 358.86 ± 0.19 (chart-2024-12.ttl): 359.0 is inside.
    root = edit_table(copy_bundle(tmp_path), "legend.csv", _set("TCG", "max_age_ma", "359.0"))
    assert ages_found(root) == []
    root = edit_table(copy_bundle(tmp_path / "b"), "legend.csv", _set("TCG", "max_age_ma", "359.1"))
    assert len(ages_found(root)) == 1


def test_report_names_the_chart(tmp_path):
    report = archivist.check(copy_bundle(tmp_path))
    credit = "International Chronostratigraphic Chart, International Commission on Stratigraphy, version 2024-12, CC BY 4.0"
    assert credit in render_text(report)
    assert any(credit in note for note in json.loads(render_json(report))["notes"])
