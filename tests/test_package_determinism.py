"""Reproducible output: the clock, JSON text, the zip, the GeoPackage date."""

import datetime as dt
import zipfile

import pytest

from archivist.errors import ArchivistError
from archivist.package.determinism import iso, json_text, pack_time, zip_tree


def test_source_date_epoch_fixes_the_time():
    t = pack_time({"SOURCE_DATE_EPOCH": "1767225600"})
    assert iso(t) == "2026-01-01T00:00:00Z"


@pytest.mark.parametrize("value", ["soon", "1.5", "-1"])
def test_bad_source_date_epoch(value):
    with pytest.raises(ArchivistError, match="SOURCE_DATE_EPOCH"):
        pack_time({"SOURCE_DATE_EPOCH": value})


def test_unset_means_now():
    t = pack_time({})
    assert abs((dt.datetime.now(dt.timezone.utc) - t).total_seconds()) < 5


def test_json_text_is_stable():
    assert json_text({"b": 1, "a": "é"}) == '{\n  "a": "é",\n  "b": 1\n}\n'
    with pytest.raises(ValueError):
        json_text({"x": float("nan")})  # not JSON (RFC 8259): refused rather than written


def test_zip_is_byte_stable_and_clamped_to_1980(tmp_path):
    src = tmp_path / "src"
    (src / "b").mkdir(parents=True)
    (src / "b" / "z.txt").write_text("z", encoding="utf-8")
    (src / "a.txt").write_text("a", encoding="utf-8")
    early = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)
    zip_tree(src, tmp_path / "one.zip", "pkg", early)
    (src / "a.txt").touch()  # a file's own time never reaches the zip
    zip_tree(src, tmp_path / "two.zip", "pkg", early)
    assert (tmp_path / "one.zip").read_bytes() == (tmp_path / "two.zip").read_bytes()
    with zipfile.ZipFile(tmp_path / "one.zip") as zf:
        assert zf.namelist() == ["pkg/", "pkg/a.txt", "pkg/b/", "pkg/b/z.txt"]
        assert {i.date_time for i in zf.infolist()} == {(1980, 1, 1, 0, 0, 0)}
        assert zf.testzip() is None
