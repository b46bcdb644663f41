"""Loading: the manifest becomes a MapProject; nothing is written; roles are inferred without a manifest."""

import geopandas as gpd
import pytest
from shapely.geometry import Point

import archivist
from archivist.errors import ArchivistError
from archivist.project import crs_label, load_project
from builders import CRS, tiny_project, tree_digest, edit_manifest


def test_load_tiny_project(tmp_path):
    root = tiny_project(tmp_path)
    before = tree_digest(root)
    project = load_project(root)
    assert sorted(project.layers) == ["lines", "units"]
    assert sorted(project.tables) == ["legend"]
    assert project.layers["units"].ids.tolist() == ["1", "2"]  # GeoPackage fids, as text
    assert project.config.tolerance == pytest.approx(1.0)  # 0.1 mm at 1:10 000
    assert project.problems == []
    assert tree_digest(root) == before


def test_manifest_file_path_works_too(tmp_path):
    root = tiny_project(tmp_path)
    assert load_project(root / "archivist.toml").root == root


def test_crs_label_from_epsg_data():
    import pyproj

    # Name as in the EPSG dataset shipped with pyproj.
    assert crs_label(pyproj.CRS("EPSG:32633")) == "EPSG:32633 (WGS 84 / UTM zone 33N)"


def test_sample_ids_stay_text(tmp_path):
    samples = gpd.GeoDataFrame({"sample_id": ["007", "0100"], "unit": ["A", "B"]}, geometry=[Point(50, 50), Point(150, 50)], crs=CRS)
    project = load_project(tiny_project(tmp_path, samples=samples))
    assert project.layers["samples"].ids.tolist() == ["007", "0100"]


def test_samples_from_csv_with_coordinates(tmp_path):
    root = tiny_project(tmp_path)
    (root / "samples.csv").write_text("sample_id,east,north,unit\n007,50,50,A\n008,,,B\n", encoding="utf-8")
    edit_manifest(root, lambda m: m["layers"].update(samples={"path": "samples.csv", "x_field": "east", "y_field": "north", "crs": CRS}))
    layer = load_project(root).layers["samples"]
    assert layer.ids.tolist() == ["007", "008"]
    assert layer.crs.to_epsg() == 32633
    assert layer.geometry[0].equals(Point(50, 50)) and layer.geometry[1] is None


def test_unknown_crs_is_a_finding(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"crs": "EPSG:999999"}})
    report = archivist.check(root, rules=["manifest-invalid"])
    assert any("map.crs" in f.message for f in report.findings)


def test_missing_path_raises(tmp_path):
    with pytest.raises(ArchivistError, match="no such file"):
        load_project(tmp_path / "nothing")


def test_inferred_roles_without_manifest(tmp_path):
    samples = gpd.GeoDataFrame({"sample_id": ["007"], "unit": ["A"]}, geometry=[Point(50, 50)], crs=CRS)
    structures = gpd.GeoDataFrame({"kind": ["bedding"], "azimuth": [120.0], "dip": [30.0]}, geometry=[Point(20, 20)], crs=CRS)
    root = tiny_project(tmp_path, samples=samples, structures=structures)
    (root / "archivist.toml").unlink()
    before = tree_digest(root)
    project = load_project(root)
    assert project.manifest_path is None
    assert sorted(project.layers) == ["lines", "samples", "structures", "units"]
    assert sorted(project.tables) == ["legend"]
    assert project.manifest["map"]["crs"] == "EPSG:32633"
    assert project.notes[0].startswith("No archivist.toml")
    assert tree_digest(root) == before


def test_folder_without_map_says_so(tmp_path):
    (tmp_path / "empty").mkdir()
    report = archivist.check(tmp_path / "empty")
    assert report.summary.errors == 1
    (f,) = [f for f in report.findings if f.rule == "layer-missing"]
    assert "no polygon layer with unit codes" in f.message


def test_equal_text_values_of_a_layer_are_held_once(tmp_path):
    """The loader keeps one object per distinct text value of a column (the memory of millions of features);
    values, missing cells and dtypes are what GDAL read."""
    import numpy as np
    import pyogrio
    from shapely.geometry import LineString

    lines = gpd.GeoDataFrame(
        {"kind": ["contact", "fault", "contact", "contact", None, "fault"], "certainty": ["certain"] * 6},
        geometry=[LineString([(k, 0), (k, 1)]) for k in range(6)], crs=CRS)
    project = tiny_project(tmp_path, lines=lines)
    read = pyogrio.read_dataframe(project / "map.gpkg", layer="lines", fid_as_index=True)
    frame = load_project(project).layers["lines"].frame
    for name in ("kind", "certainty"):
        assert frame[name].dtype == read[name].dtype
        assert frame[name].equals(read[name])
    kinds = frame["kind"].to_numpy(dtype=object)
    assert kinds[0] is kinds[2] is kinds[3] and kinds[1] is kinds[5]
    assert frame["kind"].isna().tolist() == [False] * 4 + [True, False]


def test_text_sharing_never_merges_values_of_other_types():
    """1, 1.0 and True compare equal in Python; a column of mixed objects is left as it is."""
    import numpy as np
    import pandas as pd
    from archivist.project import share_text

    frame = pd.DataFrame({"mixed": pd.Series([1, 1.0, True, 1, 1.0, True], dtype=object),
                          "words": pd.Series(["a", "b"] * 3, dtype=object)})
    out = share_text(frame)
    assert [type(v) for v in out["mixed"]] == [int, float, bool] * 2
    assert out["words"].dtype == object and out["words"].tolist() == ["a", "b"] * 3
    words = out["words"].to_numpy()
    assert words[0] is words[2] is words[4]


def test_a_layer_takes_the_answers_another_has_for_the_same_geometries_and_asks_geos_for_the_rest(tmp_path):
    # a repair's working copy: most geometries the same objects as the layer before it, a few replaced (one by a
    # bowtie GEOS finds invalid, one by a coordinate no map can have), rows dropped and reordered; the answers
    # carried over must be GEOS's own for every row (shapely.is_valid, far_out asked afresh)
    from dataclasses import replace

    import numpy as np
    import shapely

    from archivist.farcoords import far_out
    from archivist.analysis.arrays import same_objects

    layer = load_project(tiny_project(tmp_path)).layers["units"]
    layer.valid, layer.far  # asked once, as the check before the repairs asks
    geoms = layer.geometry
    new = np.r_[geoms[::-1], [shapely.from_wkt("POLYGON ((0 0, 10 10, 10 0, 0 10, 0 0))"),
                              shapely.box(0, 0, 1e12, 1), None, geoms[0]]]
    frame = gpd.GeoDataFrame({"n": range(len(new))}, geometry=list(new), crs=layer.crs)
    work = replace(layer, frame=frame, ids=np.arange(len(new)).astype(str))
    assert "valid" not in work.__dict__
    work.known_from(layer)
    assert same_objects(geoms, work.geometry).tolist() == [1, 0, -1, -1, -1, 0]
    assert work.valid.tolist() == shapely.is_valid(work.geometry).tolist() == [True, True, False, True, False, True]
    mask, largest = far_out(work.geometry, work.crs)
    assert work.far[0].tolist() == mask.tolist() and np.array_equal(work.far[1], largest)
    assert work.far[0].tolist() == [False, False, False, True, False, False]
