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


# ---------------------------------------------------------------- LicenseRef, deprecated ids, choices

import pytest  # noqa: E402

from archivist.vocab.licences import licence_cautions, licence_choice  # noqa: E402


@pytest.mark.parametrize("expression", ["LicenseRef-tarrowmere", "DocumentRef-survey:LicenseRef-field-data-1.0", "CC-BY-4.0 OR LicenseRef-tarrowmere"])
def test_licence_ref_is_valid_syntax_with_a_caution(expression):
    # SPDX specification, annex "SPDX License Expressions": [DocumentRef-idstring:]LicenseRef-idstring,
    # idstring = letters, digits, "-" and ".".
    assert licence_problem(expression) is None
    (caution,) = licence_cautions(expression)
    assert "cannot tell" in caution and "LicenseRef-" in caution


def test_licence_ref_has_no_spdx_page():
    (lic,) = licences("LicenseRef-tarrowmere")
    assert lic.url == "" and not lic.listed
    assert lic.to_datacite() == {"rights": "LicenseRef-tarrowmere (a licence of the authors' own, not on the SPDX licence list)"}
    assert "path" not in lic.to_datapackage()


@pytest.mark.parametrize(
    "old, new",
    [
        # The license-expression package's licence index (scancode-licensedb-index.json): the entry with
        # spdx_license_key GPL-2.0-only lists GPL-2.0 among other_spdx_license_keys; likewise the others.
        # The SPDX License List marks GPL-2.0, GPL-2.0+ and LGPL-2.1 deprecated (since version 3.0).
        ("GPL-2.0", "GPL-2.0-only"),
        ("GPL-2.0+", "GPL-2.0-or-later"),
        ("LGPL-2.1", "LGPL-2.1-only"),
    ],
)
def test_deprecated_ids_named_with_their_replacement(old, new):
    assert licence_problem(old) is None
    (caution,) = licence_cautions(f"CC-BY-4.0 AND {old}")
    assert f"'{old}' is a deprecated SPDX id" in caution and f"'{new}'" in caution


def test_the_replacement_map_is_read_from_the_package_data():
    from license_expression import get_license_index

    entry = next(e for e in get_license_index() if e.get("spdx_license_key") == "GPL-2.0-only")
    assert "GPL-2.0" in entry["other_spdx_license_keys"]


def test_current_ids_have_no_caution():
    assert licence_cautions("CC-BY-4.0 OR ODbL-1.0") == []
    assert licence_cautions("GPL-2.0-only WITH Classpath-exception-2.0") == []


def test_or_is_a_choice_and_and_is_not():
    assert licence_choice("CC-BY-4.0 OR ODbL-1.0") == ["CC-BY-4.0", "ODbL-1.0"]
    assert licence_choice("(CC-BY-4.0 AND ODbL-1.0) OR CC0-1.0") == ["CC-BY-4.0 AND ODbL-1.0", "CC0-1.0"]
    assert licence_choice("CC-BY-4.0 AND ODbL-1.0") is None
    assert licence_choice("()-") is None


def _licence_findings(tmp_path, licence, name):
    import archivist
    from builders import tiny_project

    root = tiny_project(tmp_path, name=name, manifest={"map": {"licence": licence}})
    return archivist.check(root, rules=["licence-unknown"]).findings


def test_rule_warns_on_licence_ref_and_deprecated_ids(tmp_path):
    (f,) = _licence_findings(tmp_path, "LicenseRef-tarrowmere", "ref")
    assert f.severity.value == "warning" and "cannot tell" in f.message
    (f,) = _licence_findings(tmp_path, "GPL-2.0", "gpl")
    assert f.severity.value == "warning" and "GPL-2.0-only" in f.message
    (f,) = _licence_findings(tmp_path, "CC-BY", "bad")
    assert f.severity.value == "error" and "not on the SPDX licence list" in f.message
    assert _licence_findings(tmp_path, "CC-BY-4.0 OR ODbL-1.0", "good") == ()
