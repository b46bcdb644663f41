"""Family `structures`: orientation ranges, the kind vocabulary, the declared conventions and north reference.

The limits and conventions tested here are the trade's (common practice, as
structural geology textbooks teach them): azimuths 0-360 clockwise from
north, dips and plunges 0-90 below the horizontal (a negative plunge pointing
upward only where declared), overturned bedding written with its dip 0-90
and a mark, rake 0-180 measured in the plane from the right-hand-rule strike.
"""

import pytest

import archivist
from archivist.rules.structures import convention_statement
from builders import BUNDLE, copy_bundle, edit_layer, edit_manifest, read_layer, tiny_project, tiny_structures, tree_digest

STRUCTURES = ("layers", "structures")

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


def _structures_spec(root, **keys):
    return edit_manifest(root, lambda m: m["layers"]["structures"].update(keys))


def tiny_with(tmp_path, columns, **keys):
    """The tiny map with structures carrying extra columns and manifest keys."""
    n = len(columns["kind"])
    structures = tiny_structures(kinds=columns["kind"], azimuths=columns.get("azimuth", (130.0,) * n), dips=columns.get("dip", (24.0,) * n))
    for name, values in columns.items():
        if name not in ("kind", "azimuth", "dip"):
            structures[name] = list(values)
    return _structures_spec(tiny_project(tmp_path, structures=structures), **keys)


def overturned_joint(tmp_path):
    return tiny_with(tmp_path, {"kind": ("bedding", "joint"), "overturned": ("yes", "yes")}, overturned_field="overturned")


def overturned_bedding(tmp_path):
    return tiny_with(tmp_path, {"kind": ("bedding", "bedding"), "overturned": ("yes", "no")}, overturned_field="overturned")


def rake_on_lineation(tmp_path):
    return tiny_with(tmp_path, {"kind": ("fault plane", "lineation"), "rake": (35.0, 40.0)}, rake_field="rake")


def rake_on_fault(tmp_path):
    return tiny_with(tmp_path, {"kind": ("fault plane", "lineation"), "rake": (35.0, None)}, rake_field="rake")


def north_missing(tmp_path):
    return edit_manifest(copy_bundle(tmp_path), lambda m: m["layers"]["structures"].pop("north", None))


def magnetic_without_declination(tmp_path):
    return _structures_spec(copy_bundle(tmp_path), north="magnetic")


def magnetic_with_declination(tmp_path):
    # An invented declination, as a mapper would declare it for an invented district.
    return _structures_spec(copy_bundle(tmp_path), north="magnetic", declination=-2.5)


CASES = {
    "structure-out-of-range": (steep_dip, clean),
    "structure-kind-unknown": (unknown_kind, clean),
    "overturned-inconsistent": (overturned_joint, overturned_bedding),
    "rake-inconsistent": (rake_on_lineation, rake_on_fault),
    "north-undeclared": (north_missing, clean),
    "declination-missing": (magnetic_without_declination, magnetic_with_declination),
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
    assert "overturned" in f.message  # a bed: how an overturned bed is written
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
    assert f.message == "kind 'bed' (3 measurements) is not in the structure kinds; closest: bedding."
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
    assert f.message == ("1 measurement has no kind; known: bedding, foliation, cleavage, joint, vein, fault plane, "
                         "lineation, fold axis.")


@pytest.mark.parametrize("convention, words", [("dip-direction", "dip directions"), ("right-hand-rule", "right-hand rule")])
def test_convention_statement_for_package_metadata(tmp_path, convention, words):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["layers"]["structures"].update(convention=convention))
    text = convention_statement(archivist.load_project(root))
    assert words in text and "trend 0-360 and plunge 0-90" in text


def test_unknown_convention_is_a_manifest_finding(tmp_path):
    root = edit_manifest(copy_bundle(tmp_path), lambda m: m["layers"]["structures"].update(convention="strike-dip"))
    assert any("convention" in f.message for f in found(root, "manifest-invalid"))


# ---------------------------------------------------------------- overturned bedding (common practice: dip 0-90 plus a mark)

@pytest.mark.parametrize("dip", [0.0, 65.0, 90.0])  # an overturned bed keeps its dip in 0-90
def test_overturned_bedding_in_range(tmp_path, dip):
    root = tiny_with(tmp_path, {"kind": ("overturned bedding", "bedding"), "dip": (dip, 20.0), "overturned": ("", "yes")}, overturned_field="overturned")
    assert found(root, "structure-out-of-range") == []
    assert found(root, "structure-kind-unknown") == []  # a known kind whenever bedding is
    assert found(root, "overturned-inconsistent") == []


def test_dip_over_90_is_still_out_of_range_with_the_way_to_write_it(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("bedding", "overturned bedding", "joint"), "dip": (20.0, 110.0, 95.0)})
    f1, f2 = found(root, "structure-out-of-range")
    assert f1.features == ("2",) and "dip 110 is outside 0-90 (an overturned bed keeps its dip 0-90" in f1.message
    assert f2.features == ("3",) and "dip 95 is outside 0-90." in f2.message  # a joint has no top: no hint


@pytest.mark.parametrize("flag", ["yes", "Y", "TRUE", "1", "overturned", "no", "n", "0", "upright", ""])
def test_overturned_flags_read(tmp_path, flag):
    root = tiny_with(tmp_path, {"kind": ("bedding",), "overturned": (flag,)}, overturned_field="overturned")
    assert found(root, "overturned-inconsistent") == []


def test_overturned_problems_each_named(tmp_path):
    root = tiny_with(
        tmp_path,
        {"kind": ("bedding", "joint", "overturned bedding", "bedding"), "overturned": ("maybe", "yes", "no", "yes")},
        overturned_field="overturned",
    )
    unreadable, not_bedding, contradiction = found(root, "overturned-inconsistent")
    assert unreadable.features == ("1",) and "'maybe'" in unreadable.message
    assert not_bedding.features == ("2",) and "not bedding (kinds: joint)" in not_bedding.message
    assert contradiction.features == ("3",) and "marked not overturned" in contradiction.message


def test_overturned_field_missing_from_the_data_is_reported(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("bedding",)}, overturned_field="overturned")
    assert any("overturned_field" in f.message for f in found(root, "field-missing"))


# ---------------------------------------------------------------- lineations: trend and plunge, upward plunge

def test_negative_plunge_is_an_error_by_default(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("bedding", "lineation"), "dip": (20.0, -15.0)})
    (f,) = found(root, "structure-out-of-range")
    assert f.features == ("2",) and "plunge -15 is outside 0-90" in f.message


@pytest.mark.parametrize("plunge", [-90.0, -15.0, 0.0, 90.0])
def test_negative_plunge_allowed_when_declared(tmp_path, plunge):
    root = tiny_with(tmp_path, {"kind": ("bedding", "lineation"), "dip": (20.0, plunge)}, upward_plunge="negative")
    assert found(root, "structure-out-of-range") == []


def test_upward_plunge_is_only_for_lines(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("bedding", "fold axis"), "dip": (-20.0, -91.0)}, upward_plunge="negative")
    f1, f2 = found(root, "structure-out-of-range")
    assert "dip -20 is outside 0-90" in f1.message  # a plane's dip is never negative
    assert "plunge -91 is outside -90-90" in f2.message


def test_upward_plunge_setting_checked_by_the_schema(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("bedding",)}, upward_plunge="sometimes")
    assert any("upward_plunge" in f.message for f in found(root, "manifest-invalid"))


# ---------------------------------------------------------------- rake (pitch) on a plane: 0-180 from the RHR strike

@pytest.mark.parametrize("rake, words", [(-5.0, "rake -5 is outside 0-180"), (181.0, "rake 181 is outside 0-180"), ("steep", "rake 'steep' is not a number")])
def test_rake_out_of_range(tmp_path, rake, words):
    root = tiny_with(tmp_path, {"kind": ("fault plane", "fault plane"), "rake": ("40", str(rake))}, rake_field="rake")
    (f,) = found(root, "structure-out-of-range")
    assert f.features == ("2",) and words in f.message


@pytest.mark.parametrize("rake", [0.0, 90.0, 180.0])  # both strike ends and the dip line
def test_rake_limits_inclusive(tmp_path, rake):
    root = tiny_with(tmp_path, {"kind": ("fault plane",), "rake": (rake,)}, rake_field="rake")
    assert found(root, "structure-out-of-range") == [] and found(root, "rake-inconsistent") == []


def test_rake_on_horizontal_plane(tmp_path):
    root = tiny_with(tmp_path, {"kind": ("fault plane", "bedding"), "dip": (0.0, 0.0), "rake": (30.0, None)}, rake_field="rake")
    (f,) = found(root, "rake-inconsistent")
    assert f.features == ("1",) and "horizontal plane" in f.message


def test_rake_on_a_line(tmp_path):
    (f,) = found(rake_on_lineation(tmp_path), "rake-inconsistent")
    assert f.features == ("2",) and "linear (lineation)" in f.message


# ---------------------------------------------------------------- north reference

def test_north_undeclared_says_what_is_assumed(tmp_path):
    (f,) = found(north_missing(tmp_path), "north-undeclared")
    assert f.severity.value == "notice" and "assumed to be from true (geographic) north" in f.message


@pytest.mark.parametrize("north", ["true", "grid"])
def test_north_declared(tmp_path, north):
    root = _structures_spec(copy_bundle(tmp_path), north=north)
    assert found(root, "north-undeclared") == [] and found(root, "declination-missing") == []


def test_magnetic_without_declination_is_a_warning(tmp_path):
    (f,) = found(magnetic_without_declination(tmp_path), "declination-missing")
    assert f.severity.value == "warning" and "no declination" in f.message


@pytest.mark.parametrize("keys, word", [({"north": "south"}, "north"), ({"north": "magnetic", "declination": 200}, "declination"), ({"north": "magnetic", "declination": "3E"}, "declination")])
def test_north_keys_checked_by_the_schema(tmp_path, keys, word):
    root = _structures_spec(copy_bundle(tmp_path), **keys)
    assert any(word in f.message for f in found(root, "manifest-invalid"))


def test_structures_keys_are_every_layer_key():
    """The structures layer takes every key any layer takes (its own schema must not drift from the common one)."""
    from archivist.manifest import load_schema

    schema = load_schema("manifest.schema.json")["$defs"]
    assert set(schema["layer"]["properties"]) <= set(schema["structures"]["properties"])


def test_north_reference_carried_into_the_package(tmp_path):
    import json

    root = magnetic_with_declination(tmp_path)
    data = archivist.pack(root, tmp_path / "pkg").path / "data"
    readme = (data / "README.md").read_text(encoding="utf-8")
    line = "declared declination is 2.5° west (true azimuth = magnetic azimuth - 2.5°)"
    assert "Azimuths are measured clockwise from magnetic north" in readme and line in readme
    package = json.loads((data / "datapackage.json").read_text(encoding="utf-8"))
    (res,) = [r for r in package["resources"] if r["name"] == "structures"]
    (az,) = [f for f in res["schema"]["fields"] if f["name"] == "azimuth"]
    assert az["description"].startswith("Dip direction, in degrees clockwise from north.") and line in az["description"]
    assert "magnetic north" in res["description"]


def test_rake_and_overturned_columns_described_in_the_package(tmp_path):
    import json

    def change(frame):
        frame["overturned"] = "no"
        frame["rake"] = None

    root = edit_layer(copy_bundle(tmp_path), "map.gpkg", "structures", change)
    _structures_spec(root, overturned_field="overturned", rake_field="rake")
    data = archivist.pack(root, tmp_path / "pkg").path / "data"
    package = json.loads((data / "datapackage.json").read_text(encoding="utf-8"))
    (res,) = [r for r in package["resources"] if r["name"] == "structures"]
    fields = {f["name"]: f for f in res["schema"]["fields"]}
    assert fields["rake"]["description"].startswith("Rake (pitch) of a line in the plane, 0-180 degrees")
    assert "right-hand rule" in fields["rake"]["description"]
    assert fields["overturned"]["description"].startswith("Overturned bedding: yes")
    readme = (data / "README.md").read_text(encoding="utf-8")
    assert "Overturned bedding is marked yes in 'overturned'" in readme and "'rake': rake (pitch)" in readme
