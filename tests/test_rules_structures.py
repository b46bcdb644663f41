"""Family `structures`: orientation ranges, the kind vocabulary and the declared convention."""

import pytest

import archivist
from archivist.rules.structures import convention_statement
from builders import BUNDLE, copy_bundle, edit_layer, edit_manifest, read_layer, tiny_project, tiny_structures, tree_digest

pytestmark = pytest.mark.skipif(not (BUNDLE / "archivist.toml").exists(), reason="example bundle not generated")


def clean(tmp_path):
    return copy_bundle(tmp_path)


def steep_dip(tmp_path):
    def change(frame):
        frame.loc[frame.index[6], "dip"] = 125.0  # a mistyped 12.5

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "structures", change)


def unknown_kind(tmp_path):
    def change(frame):
        idx = frame.index[frame.kind == "bedding"][:3]
        frame.loc[idx, "kind"] = "bed"

    return edit_layer(copy_bundle(tmp_path), "map.gpkg", "structures", change)


CASES = {
    "structure-out-of-range": (steep_dip, clean),
    "structure-kind-unknown": (unknown_kind, clean),
}


def found(root, rule):
    return [f for f in archivist.check(root, rules=[rule]).findings if f.rule == rule]


def test_clean_bundle_gives_no_structure_findings(tmp_path):
    root = clean(tmp_path)
    before = tree_digest(root)
    assert archivist.check(root, only=["structures"]).findings == ()
    assert tree_digest(root) == before


def test_out_of_range_dip_named_at_its_point(tmp_path):
    root = steep_dip(tmp_path)
    (f,) = found(root, "structure-out-of-range")
    frame = read_layer(root, "map.gpkg", "structures")
    fid, p = str(frame.index[6]), frame.geometry.iloc[6]
    assert f.features == (fid,) and "dip 125 is outside 0-90" in f.message
    assert (f.x, f.y) == (round(p.x, 3), round(p.y, 3))


@pytest.mark.parametrize(
    "kind, azimuth, dip, words",
    [
        ("bedding", 361.0, 20.0, "azimuth 361 is outside 0-360"),
        ("bedding", -5.0, 20.0, "azimuth -5 is outside 0-360"),
        ("bedding", 120.0, -3.0, "dip -3 is outside 0-90"),
        ("lineation", 400.0, 10.0, "trend 400 is outside 0-360"),  # lines: trend and plunge
        ("fold axis", 40.0, 95.0, "plunge 95 is outside 0-90"),
        ("bedding", "N30E", 20.0, "quadrant notation"),
        ("bedding", "", 20.0, "has no azimuth"),
        ("bedding", 120.0, "steep", "dip 'steep' is not a number"),
    ],
)
def test_out_of_range_values(tmp_path, kind, azimuth, dip, words):
    structures = tiny_structures(kinds=("bedding", kind), azimuths=("130", str(azimuth)), dips=("24", str(dip)))
    (f,) = found(tiny_project(tmp_path, structures=structures), "structure-out-of-range")
    assert words in f.message and f.features == ("2",)


@pytest.mark.parametrize("azimuth, dip", [(0.0, 0.0), (360.0, 90.0), (359.9, 89.9)])
def test_limits_are_inclusive(tmp_path, azimuth, dip):
    structures = tiny_structures(kinds=("bedding",), azimuths=(azimuth,), dips=(dip,))
    assert found(tiny_project(tmp_path, structures=structures), "structure-out-of-range") == []


def test_unknown_kind_grouped_with_closest(tmp_path):
    root = unknown_kind(tmp_path)
    (f,) = found(root, "structure-kind-unknown")
    assert "kind 'bed' (3 measurement(s))" in f.message and "closest: bedding" in f.message
    frame = read_layer(root, "map.gpkg", "structures")
    assert f.features == tuple(str(i) for i in frame.index[frame.kind == "bed"])


def test_kinds_compared_loosely(tmp_path):
    structures = tiny_structures(kinds=("Fault Plane", "fold_axis", "FOLIATION"), azimuths=(80.0, 40.0, 300.0), dips=(76.0, 5.0, 55.0))
    assert found(tiny_project(tmp_path, structures=structures), "structure-kind-unknown") == []


def test_vocabulary_from_the_manifest(tmp_path):
    structures = tiny_structures(kinds=("axial plane", "bedding"))
    root = tiny_project(tmp_path, structures=structures)
    assert len(found(root, "structure-kind-unknown")) == 1
    edit_manifest(root, lambda m: m.setdefault("checks", {}).update(structure_kinds=["bedding", "axial plane"]))
    assert found(root, "structure-kind-unknown") == []


def test_blank_kind_reported(tmp_path):
    structures = tiny_structures(kinds=("bedding", ""))
    (f,) = found(tiny_project(tmp_path, structures=structures), "structure-kind-unknown")
    assert "have no kind" in f.message


@pytest.mark.parametrize("convention, words", [("dip-direction", "dip directions"), ("right-hand-rule", "right-hand rule")])
def test_convention_statement_for_package_metadata(tmp_path, convention, words):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["layers"]["structures"].update(convention=convention))
    text = convention_statement(archivist.load_project(root))
    assert words in text and "trend 0-360 and plunge 0-90" in text


def test_unknown_convention_is_a_manifest_finding(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["layers"]["structures"].update(convention="strike-dip"))
    assert any("convention" in f.message for f in found(root, "manifest-invalid"))
