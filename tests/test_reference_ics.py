"""The shipped International Chronostratigraphic Chart and the reading of legend ages."""

from importlib import resources

import pytest

from archivist.reference import (
    CHART_PUBLISHER,
    CHART_VERSION,
    RANKS,
    AgeError,
    ancestors,
    children,
    intervals,
    lookup,
    parse_age,
)


# Boundary ages from the International Chronostratigraphic Chart, ICS, v2023/09.
# They were recalled, not copied from the chart file (the CSV header says so):
# the version is named beside each value so that they can be checked one by one.
PUBLISHED_BASES = [
    ("Holocene", 0.0117, "v2023/09"),
    ("Quaternary", 2.58, "v2023/09"),
    ("Pliocene", 5.333, "v2023/09"),
    ("Neogene", 23.03, "v2023/09"),
    ("Oligocene", 33.9, "v2023/09"),
    ("Eocene", 56.0, "v2023/09"),
    ("Paleogene", 66.0, "v2023/09"),
    ("Upper Cretaceous", 100.5, "v2023/09"),
    ("Jurassic", 201.4, "v2023/09"),  # printed 201.4 ± 0.2
    ("Triassic", 251.902, "v2023/09"),  # printed 251.902 ± 0.024
    ("Permian", 298.9, "v2023/09"),
    ("Pennsylvanian", 323.2, "v2023/09"),
    ("Carboniferous", 358.9, "v2023/09"),
    ("Cambrian", 538.8, "v2023/09"),  # lowered from 541.0 in 2022
    ("Tonian", 1000.0, "v2023/09"),  # chronometric
    ("Proterozoic", 2500.0, "v2023/09"),  # chronometric
]


def test_header_names_chart_version_and_publisher():
    text = resources.files("archivist.reference").joinpath("ics_chart.csv").read_text(encoding="utf-8")
    header = [line for line in text.splitlines() if line.startswith("#")]
    joined = " ".join(header)
    assert "International Chronostratigraphic Chart" in joined
    assert CHART_VERSION in joined and CHART_VERSION == "v2023/09"
    assert CHART_PUBLISHER in joined and "International Commission on Stratigraphy" == CHART_PUBLISHER
    assert "RECALLED" in joined  # values from memory are flagged as such


@pytest.mark.parametrize("name, base, version", PUBLISHED_BASES, ids=[p[0] for p in PUBLISHED_BASES])
def test_published_boundary_ages(name, base, version):
    assert version == CHART_VERSION
    assert lookup(name).base_ma == pytest.approx(base, abs=1e-9)


def test_base_jurassic_uncertainty_as_printed():
    # ICS chart v2023/09: base of the Hettangian (and Jurassic) 201.4 ± 0.2 Ma.
    assert lookup("Hettangian").base_uncertainty_ma == 0.2
    assert lookup("Jurassic").base_uncertainty_ma == 0.2


def test_estimated_boundaries_are_flagged():
    # The chart prints "~" before estimated ages, e.g. the base of the Cretaceous and of the Carnian.
    assert lookup("Berriasian").base_estimated
    assert lookup("Carnian").base_estimated
    assert not lookup("Hettangian").base_estimated


def test_every_rank_of_the_phanerozoic_is_there():
    for name, rank in [("Phanerozoic", "eon"), ("Mesozoic", "era"), ("Jurassic", "period"),
                       ("Mississippian", "subperiod"), ("Middle Jurassic", "epoch"), ("Bajocian", "age"),
                       ("Ediacaran", "period"), ("Neoarchean", "era"), ("Hadean", "eon")]:
        assert lookup(name).rank == rank, name
    assert {i.rank for i in intervals()} <= set(RANKS)
    assert len([i for i in intervals() if i.rank == "age"]) >= 100  # 100+ stages in the Phanerozoic


def test_children_tile_their_parent_exactly():
    # Internal consistency: a unit's children start at its base, end at its top and share boundaries.
    names = {i.name for i in intervals()}
    for unit in intervals():
        assert unit.base_ma > unit.top_ma, unit.name
        assert unit.parent is None or unit.parent in names, unit.name
        kids = children(unit.name)
        if kids:
            assert kids[0].base_ma == unit.base_ma, unit.name
            assert kids[-1].top_ma == unit.top_ma, unit.name
            for older, younger in zip(kids, kids[1:]):
                assert older.top_ma == younger.base_ma, (older.name, younger.name)


def test_finest_units_tile_the_phanerozoic():
    # Stages, plus the Pridoli, a series the chart does not divide into stages.
    phanerozoic = {"Phanerozoic", "Paleozoic", "Mesozoic", "Cenozoic"}
    inside = [i for i in intervals() if phanerozoic & ({i.name} | set(ancestors(i.name)))]
    ages = sorted((i for i in inside if not children(i.name)), key=lambda i: i.top_ma)
    assert {i.rank for i in ages} == {"age", "epoch"} and [i.name for i in ages if i.rank == "epoch"] == ["Pridoli"]
    assert ages[0].top_ma == 0.0 and ages[-1].base_ma == lookup("Phanerozoic").base_ma
    for younger, older in zip(ages, ages[1:]):
        assert younger.base_ma == older.top_ma, (younger.name, older.name)


@pytest.mark.parametrize(
    "text, units, base, top",
    [
        ("Cenomanian-Turonian", ("Cenomanian", "Turonian"), 100.5, 89.8),
        ("Cenomanian – Turonian", ("Cenomanian", "Turonian"), 100.5, 89.8),
        ("Late Jurassic", ("Upper Jurassic",), 161.5, 143.1),
        ("upper jurassic", ("Upper Jurassic",), 161.5, 143.1),
        ("Early-Middle Jurassic", ("Lower Jurassic", "Middle Jurassic"), 201.4, 161.5),
        ("Late Triassic to Early Jurassic", ("Upper Triassic", "Lower Jurassic"), 237.0, 174.7),
        ("Palaeogene", ("Paleogene",), 66.0, 23.03),
        ("Viséan", ("Visean",), 346.7, 330.9),
        ("Late Pleistocene", ("Upper Pleistocene",), 0.129, 0.0117),
        ("?Devonian", ("Devonian",), 419.2, 358.9),
        ("Mid-Jurassic", ("Middle Jurassic",), 174.7, 161.5),
        ("Cambrian Stage 2", ("Stage 2",), 529.0, 521.0),
        ("Bashkirian-Moscovian", ("Bashkirian", "Moscovian"), 323.2, 307.0),
    ],
)
def test_parse_age_forms(text, units, base, top):
    span = parse_age(text)
    assert span.units == units
    assert (span.base_ma, span.top_ma) == (base, top)
    assert not span.informal


def test_informal_modifier_spans_the_whole_unit():
    span = parse_age("Late Eocene")
    assert span.informal and (span.base_ma, span.top_ma) == (56.0, 33.9)


@pytest.mark.parametrize(
    "text, words",
    [
        ("Tertiary", "Paleogene and/or Neogene"),
        ("Jurasic", "did you mean Jurassic"),
        ("Namurian", "regional or obsolete"),
        ("300 Ma", "min_age_ma"),
        ("Cenomanian-Turonain", "Turonain"),
        ("", "empty"),
    ],
)
def test_unknown_ages_say_why(text, words):
    with pytest.raises(AgeError) as exc:
        parse_age(text)
    assert words in str(exc.value)


def test_uncertainty_widens_the_fit():
    span = parse_age("Famennian")  # base 372.2 ± 1.6 Ma (v2023/09)
    assert span.contains(373.0) and not span.contains(374.0)
    assert span.contains(358.9) and not span.contains(358.0)
