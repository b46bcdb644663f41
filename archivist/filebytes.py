"""Facts about bytes: a size in words, and checksums (SHA-256 and the other ``hashlib`` algorithms).

One place for each, so that every message and every manifest states sizes
and digests the same way. Nothing heavy is imported.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

CHUNK = 1 << 20
"""Bytes read at a time when hashing or copying a file."""

_DECIMAL = ("bytes", "kB", "MB", "GB", "TB")
_BINARY = ("bytes", "KiB", "MiB", "GiB", "TiB")


def human_size(n: float, *, binary: bool = False) -> str:
    """``n`` bytes in words, one decimal: SI units (``kB``, ``MB``: powers of 1000) or, with ``binary``, IEC units (``KiB``, ``MiB``: powers of 1024).

    Unit symbols as SI and IEC 80000-13 write them.

    >>> human_size(999), human_size(1_500_000), human_size(10 * 1024**2, binary=True)
    ('999 bytes', '1.5 MB', '10.0 MiB')
    """
    base, units = (1024, _BINARY) if binary else (1000, _DECIMAL)
    size = float(n)
    for unit in units:
        if size < base or unit == units[-1]:
            return f"{size:.0f} {unit}" if unit == "bytes" else f"{size:.1f} {unit}"
        size /= base
    raise AssertionError("unreachable")  # pragma: no cover


def file_digest(path: Path, algorithm: str = "sha256") -> str:
    """The hex digest of the file ``path`` by ``algorithm`` (any name ``hashlib`` knows), read in chunks."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, algorithm).hexdigest()


def sha256_file(path: Path) -> str:
    """The SHA-256 of the file ``path``, as hex."""
    return file_digest(path, "sha256")


def sha256_bytes(data: bytes) -> str:
    """The SHA-256 of ``data``, as hex."""
    return hashlib.sha256(data).hexdigest()


def copy_new_file(src: Path, dest: Path, mode: int = 0o644) -> str:
    """Copy ``src`` to ``dest``, which must not exist yet, with ``mode``; return the SHA-256 of the bytes copied (read once)."""
    digest = hashlib.sha256()
    with open(src, "rb") as fin, open(dest, "xb") as fout:
        while chunk := fin.read(CHUNK):
            digest.update(chunk)
            fout.write(chunk)
    os.chmod(dest, mode)
    return digest.hexdigest()
