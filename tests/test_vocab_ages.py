"""Ages as mappers write them (archivist.vocab.ages), checked against the official chart data.

Check values are the boundaries of the International Chronostratigraphic Chart in the
official machine-readable data of the International Commission on Stratigraphy
(chart-2023-09.ttl and chart-2024-12.ttl, CC BY 4.0): each value is given for both
versions, and the test uses the version the shipped chart reader names. Only boundaries
that the shipped table already carries as published are used here.
"""

import dataclasses

import pytest

from archivist.reference import CHART_VERSION, lookup
from archivist.vocab.ages import COMBINING_STEMS, AgeError, parse_age

# Boundary ages in Ma, (ICS official data 2023-09, ICS official data 2024-12).
OFFICIAL = {
    ("Cambrian", "base"): (538.8, 538.8),
    ("Cambrian", "top"): (485.4, 486.85),
    ("Ordovician", "top"): (443.8, 443.1),
    ("Silurian", "base"): (443.8, 443.1),
    ("Devonian", "base"): (419.2, 419.62),
    ("Devonian", "top"): (358.9, 358.86),
    ("Carboniferous", "base"): (358.9, 358.86),
    ("Carboniferous", "top"): (298.9, 298.9),
    ("Permian", "base"): (298.9, 298.9),
    ("Permian", "top"): (251.902, 251.902),
    ("Triassic", "base"): (251.902, 251.902),
    ("Triassic", "top"): (201.4, 201.4),
    ("Upper Cretaceous", "base"): (100.5, 100.5),
    ("Upper Cretaceous", "top"): (66.0, 66.0),
    ("Eocene", "base"): (56.0, 56.0),
    ("Eocene", "top"): (33.9, 33.9),
    ("Oligocene", "base"): (33.9, 33.9),
    ("Miocene", "base"): (23.03, 23.04),
    ("Miocene", "top"): (5.333, 5.333),
    ("Pliocene", "base"): (5.333, 5.333),
    ("Pliocene", "top"): (2.58, 2.58),
    ("Pleistocene", "top"): (0.0117, 0.0117),
    ("Chibanian", "base"): (0.774, 0.774),
    ("Chibanian", "top"): (0.129, 0.129),
    ("Paleoproterozoic", "base"): (2500.0, 2500.0),
    ("Paleoproterozoic", "top"): (1600.0, 1600.0),
    ("Lower Cretaceous", "base"): (145.0, 143.1),
    ("Lower Cretaceous", "top"): (100.5, 100.5),
    ("Upper Jurassic", "base"): (161.5, 161.5),
    ("Upper Jurassic", "top"): (145.0, 143.1),
    ("Middle Devonian", "base"): (393.3, 393.47),
    ("Middle Devonian", "top"): (382.7, 382.31),
    ("Upper Devonian", "base"): (382.7, 382.31),
    ("Upper Devonian", "top"): (358.9, 358.86),
    ("Upper Triassic", "base"): (237.0, 237.0),
    ("Upper Triassic", "top"): (201.4, 201.4),
}


def official(name: str, end: str) -> float:
    """The boundary as the official data of the chart version the reader ships gives it."""
    old, new = OFFICIAL[(name, end)]
    return new if "2024" in CHART_VERSION else old


@pytest.mark.parametrize(
    "text, older, younger",
    [
        ("Permo-Triassic", "Permian", "Triassic"),
        ("Permo-Carboniferous", "Carboniferous", "Permian"),
        ("Siluro-Devonian", "Silurian", "Devonian"),
        ("Cambro-Ordovician", "Cambrian", "Ordovician"),
        ("Devono-Carboniferous", "Devonian", "Carboniferous"),
        ("Plio-Pleistocene", "Pliocene", "Pleistocene"),
        ("Mio-Pliocene", "Miocene", "Pliocene"),
        ("Oligo-Miocene", "Oligocene", "Miocene"),
        ("Permo\u2013Triassic", "Permian", "Triassic"),  # an en dash
        ("Permian-Triassic", "Permian", "Triassic"),
        ("Permian or Triassic", "Permian", "Triassic"),
        ("Triassic or Permian", "Permian", "Triassic"),
        ("Permian to Triassic", "Permian", "Triassic"),
        ("Silurian and Devonian", "Silurian", "Devonian"),
    ],
)
def test_combined_forms_span_base_of_older_to_top_of_younger(text, older, younger):
    span = parse_age(text)
    assert span.base_ma == pytest.approx(official(older, "base"))
    assert span.top_ma == pytest.approx(official(younger, "top"))
    assert {older, younger} <= set(span.units) and not span.informal


def test_combining_stems_each_name_a_chart_unit():
    assert all(lookup(name) is not None for name in COMBINING_STEMS.values())


@pytest.mark.parametrize("text", ["Early Late Cretaceous", "Lower Upper Cretaceous", "early Late Cretaceous"])
def test_informal_part_of_a_formal_epoch(text):
    span = parse_age(text)
    base, top = official("Upper Cretaceous", "base"), official("Upper Cretaceous", "top")
    third = (base - top) / 3  # 11.5 Myr: the informal third, common practice
    assert (span.base_ma, span.top_ma) == pytest.approx((base, base - third))
    assert span.informal and span.thirds_of == "Upper Cretaceous"
    assert span.base_leeway_ma == 0 and span.top_leeway_ma == pytest.approx(third / 2)


@pytest.mark.parametrize("word, position", [("Early", 0), ("Middle", 1), ("Late", 2)])
def test_informal_thirds_of_the_cambrian(word, position):
    # The chart's Cambrian has series Terreneuvian, Series 2, Miaolingian, Furongian: no formal
    # Lower/Middle/Upper, so Early/Middle/Late Cambrian are informal thirds (common practice).
    base, top = official("Cambrian", "base"), official("Cambrian", "top")
    third = (base - top) / 3
    span = parse_age(f"{word} Cambrian")
    assert (span.base_ma, span.top_ma) == pytest.approx((base - position * third, base - (position + 1) * third))
    assert span.thirds_of == "Cambrian" and "informal" in span.note


def test_late_cambrian_does_not_contain_525_to_530_ma():
    span = parse_age("Late Cambrian")
    assert not span.contains(525) and not span.contains(530)
    assert span.contains(official("Cambrian", "top") + 2)
    # leeway: half a third beyond the strict third (common practice), no more
    third = (official("Cambrian", "base") - official("Cambrian", "top")) / 3
    assert span.contains(span.base_ma + third / 2 - 0.01) and not span.contains(span.base_ma + third / 2 + 0.01)


def test_informal_eocene_thirds():
    span = parse_age("Late Eocene")
    base, top = official("Eocene", "base"), official("Eocene", "top")
    assert (span.base_ma, span.top_ma) == pytest.approx((base - 2 * (base - top) / 3, top))


def test_informal_of_an_era_is_the_whole_era():
    span = parse_age("Early Paleozoic")
    unit = lookup("Paleozoic")
    assert (span.base_ma, span.top_ma) == (unit.base_ma, unit.top_ma) and span.informal


@pytest.mark.parametrize(
    "text, unit",
    [("Middle Pleistocene", "Chibanian"), ("Early Proterozoic", "Paleoproterozoic")],
)
def test_informal_names_of_named_units(text, unit):
    span = parse_age(text)
    assert (span.base_ma, span.top_ma) == pytest.approx((official(unit, "base"), official(unit, "top")))


@pytest.mark.parametrize(
    "text, base, top",
    [
        ("250-260 Ma", 260, 250),
        ("260 - 250 Ma", 260, 250),
        ("250 to 260 Ma", 260, 250),
        ("c. 255 Ma", 255, 255),
        ("255 \u00b1 5 Ma", 260, 250),
        ("1.2-1.4 Ga", 1400, 1200),
        ("11-12 ka", 0.012, 0.011),
    ],
)
def test_numeric_ranges(text, base, top):
    span = parse_age(text)
    assert (span.base_ma, span.top_ma) == pytest.approx((base, top)) and span.numeric


@pytest.mark.parametrize(
    "text, words, hint",
    [
        ("Namurian", "not a unit", True),
        ("Lias", "not a unit", True),
        ("Blorpian", "not a unit", False),
        ("Permo", "combining form of the Permian", False),
        ("250-260", "without its unit", False),
        ("Permo-Blorpian", "part 'Blorpian'", False),
    ],
)
def test_unknown_names_and_the_regional_hint(text, words, hint):
    with pytest.raises(AgeError) as err:
        parse_age(text)
    assert words in str(err.value)
    assert ("(a regional or obsolete name?)" in str(err.value)) is hint


# Lower/Middle/Upper written the German, French or Spanish way around a chart name. The names of the
# periods are the chart's own in those languages (ICS official data, chart-2024-12.ttl: "Kreide"@de,
# "Jura"@de, "Devon"@de, "Karbon"@de, "Trias"@de, "Crétacé"@fr, "Cretácico"@es); the chart itself gives
# "Mitteldevon", "Frühe Kreide", "Crétacé précoce" and "Cretácico temprano" (chart-2023-09.ttl) but not the
# other forms, which are the usual ones of those languages (from memory).
@pytest.mark.parametrize(
    "text, unit",
    [
        ("Unterkreide", "Lower Cretaceous"),
        ("Unter-Kreide", "Lower Cretaceous"),
        ("Untere Kreide", "Lower Cretaceous"),
        ("Frühe Kreide", "Lower Cretaceous"),
        ("Oberjura", "Upper Jurassic"),
        ("Spätjura", "Upper Jurassic"),
        ("Mitteldevon", "Middle Devonian"),
        ("Oberes Devon", "Upper Devonian"),
        ("Obertrias", "Upper Triassic"),
        ("Crétacé inférieur", "Lower Cretaceous"),
        ("Crétacé précoce", "Lower Cretaceous"),
        ("Cretácico Inferior", "Lower Cretaceous"),
        ("cretacico inferior", "Lower Cretaceous"),
    ],
)
def test_lower_middle_upper_in_german_french_and_spanish(text, unit):
    span = parse_age(text)
    assert span.units == (unit,) and not span.informal
    assert (span.base_ma, span.top_ma) == (official(unit, "base"), official(unit, "top"))


def test_upper_of_a_period_without_formal_subdivisions_reads_as_in_english():
    # the chart has no Upper Carboniferous (its subperiods are Mississippian and Pennsylvanian) nor a
    # formal Lower Cambrian: "Oberkarbon" and "Unterkambrium" are informal, read as "Upper Carboniferous"
    # and "Lower Cambrian" are
    assert parse_age("Oberkarbon") == dataclasses.replace(parse_age("Upper Carboniferous"), text="Oberkarbon")
    assert parse_age("Unterkambrium") == dataclasses.replace(parse_age("Lower Cambrian"), text="Unterkambrium")
    assert parse_age("Oberkarbon").informal


def test_a_prefix_on_a_name_the_chart_does_not_know_stays_unknown():
    with pytest.raises(AgeError):
        parse_age("Oberlias")  # a regional name after the prefix
    with pytest.raises(AgeError):
        parse_age("Unterholz")
