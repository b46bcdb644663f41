"""Sizes in words and checksums, against the standards that define them."""

import hashlib

from archivist.filebytes import copy_new_file, file_digest, human_size, sha256_bytes, sha256_file

# FIPS 180-2, appendix B.1: SHA-256("abc")
ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_sha256_matches_the_published_test_vector(tmp_path):
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    assert sha256_bytes(b"abc") == ABC_SHA256
    assert sha256_file(path) == ABC_SHA256
    assert file_digest(path, "md5") == hashlib.md5(b"abc").hexdigest()  # the other algorithms hashlib knows


def test_copy_new_file_hashes_what_it_copies_and_never_replaces(tmp_path):
    src, dest = tmp_path / "a", tmp_path / "b"
    src.write_bytes(b"abc")
    assert copy_new_file(src, dest) == ABC_SHA256 and dest.read_bytes() == b"abc"
    assert oct(dest.stat().st_mode & 0o777) == "0o644"
    try:
        copy_new_file(src, dest)
    except FileExistsError:
        pass
    else:
        raise AssertionError("copied over an existing file")


def test_sizes_in_si_and_iec_units():
    # SI prefixes (k = 1000, lower-case k) and IEC 80000-13 binary prefixes (Ki = 1024)
    assert human_size(0) == "0 bytes" and human_size(999) == "999 bytes"
    assert human_size(1000) == "1.0 kB" and human_size(1_500_000) == "1.5 MB" and human_size(2 * 10**12) == "2.0 TB"
    assert human_size(1023, binary=True) == "1023 bytes" and human_size(1024, binary=True) == "1.0 KiB"
    assert human_size(10 * 1024**2, binary=True) == "10.0 MiB" and human_size(16 * 1024**3, binary=True) == "16.0 GiB"
