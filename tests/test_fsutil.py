"""All-or-nothing output: staging folders, the final rename, leftovers of killed runs."""

import os
import subprocess
import sys

import pytest

from archivist.fsutil import move_into_place, remove_leftovers, staging_dir


def test_staging_is_removed_on_error(tmp_path):
    target = tmp_path / "pkg-1.0"
    with pytest.raises(RuntimeError):
        with staging_dir(target) as tmp:
            (tmp / "f").write_text("x")
            raise RuntimeError("stop")
    assert list(tmp_path.iterdir()) == []


def test_move_replaces_an_existing_folder_only_when_the_new_one_is_whole(tmp_path):
    target = tmp_path / "pkg-1.0"
    target.mkdir()
    (target / "old").write_text("old")
    with staging_dir(target) as tmp:
        (tmp / "new").write_text("new")
        move_into_place(tmp, target)
    assert [p.name for p in target.iterdir()] == ["new"]
    assert [p.name for p in tmp_path.iterdir()] == ["pkg-1.0"]


def test_leftovers_of_dead_runs_are_removed_live_ones_kept(tmp_path):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(dead.stdout)
    (tmp_path / f".pkg-1.0.{dead_pid}-0123abcd.part").mkdir()
    (tmp_path / f".pkg-1.0.zip.{dead_pid}-0123abcd.part").write_text("half a zip")
    (tmp_path / f".pkg-1.0.{os.getpid()}-0123abcd.part").mkdir()  # this run's own
    (tmp_path / f".other-2.0.{dead_pid}-0123abcd.part").mkdir()  # another package: not ours to touch
    (tmp_path / "pkg-1.0.txt").write_text("user file")
    removed = remove_leftovers(tmp_path, {"pkg-1.0", "pkg-1.0.zip"})
    assert sorted(p.name for p in removed) == sorted([f".pkg-1.0.{dead_pid}-0123abcd.part", f".pkg-1.0.zip.{dead_pid}-0123abcd.part"])
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        [f".pkg-1.0.{os.getpid()}-0123abcd.part", f".other-2.0.{dead_pid}-0123abcd.part", "pkg-1.0.txt"]
    )


# ---------------------------------------------------------------- one module for every output

import errno as _errno  # noqa: E402

from archivist.errors import ArchivistError  # noqa: E402
from archivist.fsutil import (  # noqa: E402
    OutputError,
    atomic_dataset,
    atomic_write_text,
    create_new,
    guard_output,
    guard_outputs,
    write_failed,
)


def test_an_output_error_inside_a_staging_folder_is_not_wrapped_twice(tmp_path):
    """A failed move inside the staging block is already one line naming the output; it stays that line."""
    target = tmp_path / "pkg-1.0"
    failure = write_failed(target, OSError(_errno.ENOSPC, os.strerror(_errno.ENOSPC)))
    with pytest.raises(OutputError) as caught:
        with staging_dir(target):
            raise failure
    assert str(caught.value) == f"{target}: cannot write ({os.strerror(_errno.ENOSPC)})"
    assert list(tmp_path.iterdir()) == []


def test_atomic_write_leaves_nothing_on_error_and_replaces_whole(tmp_path):
    target = tmp_path / "report.txt"
    target.write_text("old", encoding="utf-8")
    with pytest.raises(RuntimeError):
        from archivist.fsutil import atomic_path

        with atomic_path(target) as tmp:
            tmp.write_text("half", encoding="utf-8")
            raise RuntimeError("stop")
    assert target.read_text(encoding="utf-8") == "old" and [p.name for p in tmp_path.iterdir()] == ["report.txt"]
    atomic_write_text(target, "new")
    assert target.read_text(encoding="utf-8") == "new" and [p.name for p in tmp_path.iterdir()] == ["report.txt"]


def test_atomic_dataset_gives_gdal_the_name_and_leaves_no_journal(tmp_path):
    """GDAL picks the GeoPackage driver by the .gpkg extension; SQLite may keep -journal/-wal files beside it."""
    import geopandas as gpd
    import pyogrio
    import shapely

    target = tmp_path / "changes.gpkg"
    frame = gpd.GeoDataFrame({"n": [1]}, geometry=[shapely.Point(1, 2)], crs="EPSG:32630")
    with atomic_dataset(target) as work:
        assert work.name == "changes.gpkg" and work.parent != tmp_path
        pyogrio.write_dataframe(frame, work, layer="points", driver="GPKG")
    assert [p.name for p in tmp_path.iterdir()] == ["changes.gpkg"]
    assert pyogrio.list_layers(target)[0][0] == "points"


def test_atomic_dataset_turns_a_gdal_failure_into_one_line(tmp_path):
    import pyogrio

    target = tmp_path / "changes.gpkg"
    with pytest.raises(ArchivistError) as caught:
        with atomic_dataset(target) as work:
            pyogrio.write_dataframe(__import__("pandas").DataFrame({"a": [1]}), work, layer="t", driver="NoSuchDriver")
    assert str(caught.value).startswith(f"{target}: cannot write (") and "\n" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


def test_create_new_never_replaces(tmp_path):
    target = tmp_path / "archivist.toml"
    create_new(target, "a = 1\n", exists_hint="never replaced")
    assert target.read_bytes() == b"a = 1\n"
    with pytest.raises(ArchivistError, match="already exists; never replaced"):
        create_new(target, "a = 2\n", exists_hint="never replaced")
    assert target.read_bytes() == b"a = 1\n" and [p.name for p in tmp_path.iterdir()] == ["archivist.toml"]


def test_guard_refuses_inside_the_project_existing_and_wrong_kind(tmp_path):
    project = tmp_path / "project"
    (project / "sub").mkdir(parents=True)
    with pytest.raises(ArchivistError, match="is inside the project folder"):
        guard_output(project / "sub" / "report.txt", force=True, project_root=project)
    with pytest.raises(ArchivistError, match="would replace a folder that holds the project"):
        guard_output(tmp_path, force=True, project_root=project, refuse_ancestor=True)
    (tmp_path / "pkg.zip").mkdir()
    with pytest.raises(ArchivistError, match="already exists; use --force"):
        guard_output(tmp_path / "pkg.zip", force=False, kind="zip file")
    with pytest.raises(ArchivistError, match="exists and is not a zip file; remove it first"):
        guard_output(tmp_path / "pkg.zip", force=True, kind="zip file")
    with pytest.raises(ArchivistError, match="no such folder"):
        guard_output(tmp_path / "missing" / "report.txt", force=False)
    assert guard_output(tmp_path / "missing" / "pkg", force=False, parent_may_be_missing=True) == tmp_path / "missing" / "pkg"


def test_two_options_naming_one_file_are_refused(tmp_path):
    with pytest.raises(ArchivistError, match="--html and --output name the same file"):
        guard_outputs([(tmp_path / "r.txt", "--output"), (None, "--gpkg"), (tmp_path / "." / "r.txt", "--html")], force=False)
