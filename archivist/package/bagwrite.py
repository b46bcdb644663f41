"""The BagIt tag files (RFC 8493) around a payload folder ``data/``.

Written directly (they are short text files) so that their bytes depend only
on the payload and the package metadata: ``bagit.txt``, ``bag-info.txt``,
``manifest-sha256.txt`` and ``tagmanifest-sha256.txt``, UTF-8 with ``\\n``
line ends, file paths sorted and percent-encoded as RFC 8493 section 2.1.3 asks.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

from .._version import __version__
from ..filebytes import human_size, sha256_file
from .deposit import Deposit
from .determinism import write_text

BAGIT_VERSION = "1.0"


class Hashes:
    """SHA-256 and size of files, each file read once (in parallel: hashlib releases the GIL)."""

    def __init__(self) -> None:
        self._known: dict[Path, tuple[str, int]] = {}

    def add(self, paths: list[Path]) -> None:
        todo = [p for p in paths if p not in self._known]
        workers = min(4, os.cpu_count() or 1)
        with ThreadPoolExecutor(max_workers=workers) as pool:
            for p, digest in zip(todo, pool.map(sha256_file, todo)):
                self._known[p] = (digest, p.stat().st_size)

    def record(self, path: Path, digest: str, size: int) -> None:
        """Take the SHA-256 and size of ``path`` as computed while it was written (a streamed copy), not read again."""
        self._known[path] = (digest, size)

    def get(self, path: Path) -> tuple[str, int]:
        if path not in self._known:
            self.add([path])
        return self._known[path]

    def forget(self, path: Path) -> None:
        self._known.pop(path, None)


def encode_path(rel: str) -> str:
    """A file path as a manifest line carries it: ``%``, CR and LF percent-encoded (RFC 8493, 2.1.3)."""
    return rel.replace("%", "%25").replace("\r", "%0D").replace("\n", "%0A")


def payload_files(bag: Path) -> list[Path]:
    data = bag / "data"
    return sorted((p for p in data.rglob("*") if p.is_file()), key=lambda p: p.relative_to(bag).as_posix())


def _info_value(text: str) -> str:
    """A bag-info value on one line (labels and values must not span lines unless folded)."""
    return " ".join(str(text).split())


def write_bag(bag: Path, deposit: Deposit, hashes: Hashes, *, open_errors: int) -> None:
    """Write the four tag files of the bag whose payload is ``bag/data``."""
    files = payload_files(bag)
    hashes.add(files)
    lines = []
    total = 0
    for p in files:
        digest, size = hashes.get(p)
        total += size
        lines.append(f"{digest}  {encode_path(p.relative_to(bag).as_posix())}\n")
    write_text(bag / "manifest-sha256.txt", "".join(lines))
    write_text(bag / "bagit.txt", f"BagIt-Version: {BAGIT_VERSION}\nTag-File-Character-Encoding: UTF-8\n")
    orgs = list(dict.fromkeys(a.affiliation for a in deposit.authors if a.affiliation))
    info: list[tuple[str, str]] = []
    if orgs:
        info += [("Source-Organization", o) for o in orgs]
    if deposit.contact_name:
        info.append(("Contact-Name", deposit.contact_name))
    if deposit.contact_email:
        info.append(("Contact-Email", deposit.contact_email))
    info.append(("External-Description", f"{deposit.title}, version {deposit.version}. {deposit.abstract}"))
    if deposit.doi:
        info.append(("External-Identifier", f"https://doi.org/{deposit.doi}"))
    info += [
        ("Internal-Sender-Identifier", deposit.stem),
        ("Bagging-Date", deposit.created.strftime("%Y-%m-%d")),
        ("Bag-Software-Agent", f"archivist {__version__}"),
        ("Payload-Oxum", f"{total}.{len(files)}"),
        ("Bag-Size", human_size(total)),
    ]
    if open_errors:
        info.append(("Internal-Sender-Description", f"Packed with {open_errors} open error(s) from archivist check; see data/README.md."))
    write_text(bag / "bag-info.txt", "".join(f"{k}: {_info_value(v)}\n" for k, v in info))
    tags = ["bag-info.txt", "bagit.txt", "manifest-sha256.txt"]
    tag_lines = [f"{sha256_file(bag / t)}  {t}\n" for t in tags]
    write_text(bag / "tagmanifest-sha256.txt", "".join(tag_lines))
