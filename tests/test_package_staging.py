"""All-or-nothing output: staging folders, the final rename, leftovers of killed runs."""

import os
import subprocess
import sys

import pytest

from archivist.package.staging import move_into_place, remove_leftovers, staging_dir


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
