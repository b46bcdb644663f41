"""BagIt tag files, checked by the bagit library (RFC 8493) and sha256sum."""

import datetime as dt
import subprocess

import bagit

import archivist
from archivist.package.bagwrite import Hashes, encode_path, human_size, write_bag
from archivist.package.deposit import read_deposit
from builders import tiny_project


def test_paths_are_percent_encoded():
    # (pack never needs it: input files named with these characters are stored under another name)
    # RFC 8493 section 2.1.3: CR, LF and % in a file path are percent-encoded in manifests.
    assert encode_path("data/a%b\nc\rd.txt") == "data/a%25b%0Ac%0Dd.txt"


def test_human_size():
    assert human_size(999) == "999 bytes" and human_size(1_500_000) == "1.5 MB"


def test_bag_with_awkward_names_validates(tmp_path):
    deposit = read_deposit(archivist.load_project(tiny_project(tmp_path)), dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc))
    bag = tmp_path / "bag"
    (bag / "data" / "sub dir").mkdir(parents=True)
    (bag / "data" / "sub dir" / "100 é.txt").write_text("x", encoding="utf-8")
    (bag / "data" / "b.txt").write_text("yy", encoding="utf-8")
    write_bag(bag, deposit, Hashes(), open_errors=0)
    b = bagit.Bag(str(bag))
    b.validate()
    assert b.info["Payload-Oxum"] == "3.2" and b.info["Bagging-Date"] == "2026-01-01"
    assert b.info["External-Description"].startswith("Tiny test map, version 1.0.0.")
    assert (bag / "bagit.txt").read_text() == "BagIt-Version: 1.0\nTag-File-Character-Encoding: UTF-8\n"
    lines = (bag / "manifest-sha256.txt").read_text(encoding="utf-8").splitlines()
    assert [l.split("  ", 1)[1] for l in lines] == ["data/b.txt", "data/sub dir/100 é.txt"]
    run = subprocess.run(["sha256sum", "-c", "tagmanifest-sha256.txt"], cwd=bag, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr
