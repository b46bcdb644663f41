"""Licences: SPDX ids from an expression, with names and canonical URLs."""

from archivist.vocab.licences import licence_problem, licences


def test_single_licence():
    (lic,) = licences("CC-BY-4.0")
    # Canonical URL pattern of the SPDX License List: https://spdx.org/licenses/<id>.html
    assert (lic.spdx, lic.title, lic.url) == ("CC-BY-4.0", "Creative Commons Attribution 4.0 International", "https://spdx.org/licenses/CC-BY-4.0.html")


def test_expression_keeps_written_order():
    assert [lic.spdx for lic in licences("ODbL-1.0 OR CC-BY-4.0")] == ["ODbL-1.0", "CC-BY-4.0"]


def test_every_named_licence_is_on_the_spdx_list():
    # The names table must only hold ids the license-expression package's SPDX list knows.
    from archivist.vocab.licences import NAMES

    for spdx in NAMES:
        assert licence_problem(spdx) is None, spdx


def test_punctuation_the_parser_cannot_read_is_a_reason_not_an_exception():
    # license-expression fails inside its tokenizer on some punctuation (IndexError, AttributeError)
    from archivist.vocab.licences import recognise_licence

    for text in ("()-", "\x00", " ,4", "MIT AND"):
        assert licence_problem(text) is not None
        assert recognise_licence(text) is None
