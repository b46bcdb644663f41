"""Verify a BagIt bag (RFC 8493) file by file, naming every damaged, missing or extra file.

What is checked, with the section of RFC 8493 it comes from:

* ``bagit.txt`` exists and declares ``BagIt-Version`` and
  ``Tag-File-Character-Encoding`` (2.1.1);
* at least one payload manifest ``manifest-<algorithm>.txt`` exists (2.1.3);
  each line is ``checksum`` then white space then a path under ``data/``,
  with ``%0D``, ``%0A`` and ``%25`` decoded (2.1.3);
* every file listed exists and has the listed checksum; every payload file is
  listed in every payload manifest (2.1.3, 3);
* each tag manifest ``tagmanifest-<algorithm>.txt`` lists tag files whose
  checksums match, and lists every payload manifest (2.2.1); since nothing
  protects a tag manifest, a mismatch blames the tag manifest when another
  tag manifest confirms the file, and otherwise names both sides without
  accusing either; tag files no tag manifest covers (all of
  them in a bag without one, which 2.2.1 allows) are listed as unprotected;
* ``Payload-Oxum`` in ``bag-info.txt``, when present, matches the payload's
  octet and file counts (2.2.2);
* a ``fetch.txt`` whose files are absent leaves the bag incomplete (2.2.3);
  archivist never downloads them.

Only the algorithms Python's ``hashlib`` computes are verified (``md5``,
``sha1``, ``sha256``, ``sha512`` and the others it knows); a manifest in an
unknown algorithm is reported, not trusted. The ``bagit`` reference library
is run beside this module in the tests and agrees on every case there.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..filebytes import file_digest

_MANIFEST = re.compile(r"^(tag)?manifest-([a-z0-9]+)\.txt$")


@dataclass(frozen=True)
class BagProblem:
    """One problem with the bag: ``kind`` is mismatch, missing, unlisted or structure."""

    kind: str
    file: str
    message: str


@dataclass
class BagCheck:
    """The result of :func:`verify_bag`."""

    problems: list[BagProblem] = field(default_factory=list)
    algorithms: list[str] = field(default_factory=list)
    payload_files: int = 0
    payload_bytes: int = 0
    info: dict[str, list[str]] = field(default_factory=dict)
    verified: int = 0  # files whose checksum was compared
    unprotected: list[str] = field(default_factory=list)  # tag files no tag manifest covers

    def of(self, kind: str) -> list[BagProblem]:
        return [p for p in self.problems if p.kind == kind]

    def add(self, kind: str, file: str, message: str) -> None:
        self.problems.append(BagProblem(kind, file, message))


def decode_path(text: str) -> str:
    """A manifest path with RFC 8493's percent-encoding of CR, LF and % undone."""
    return re.sub(r"%(0[DdAa]|25)", lambda m: {"0D": "\r", "0A": "\n", "25": "%"}[m.group(1).upper()], text)


def read_tag_file(path: Path) -> tuple[dict[str, list[str]], list[str]]:
    """A ``Label: value`` tag file (bagit.txt, bag-info.txt) as label -> values, plus malformed lines."""
    out: dict[str, list[str]] = {}
    bad: list[str] = []
    last: str | None = None
    text = path.read_bytes().decode("utf-8-sig", errors="replace")
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        if line[0] in " \t" and last is not None:  # continuation line (RFC 8493, 2.2.2)
            out[last][-1] += " " + line.strip()
            continue
        if ":" not in line:
            bad.append(f"line {n}")
            continue
        label, value = line.split(":", 1)
        last = label.strip()
        out.setdefault(last, []).append(value.strip())
    return out, bad


def read_manifest_lines(text: str, name: str, on_problem) -> dict[str, str]:
    """``checksum path`` lines (the BagIt manifest and ``sha256sum`` formats) as path -> checksum."""
    entries: dict[str, str] = {}
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        parts = line.strip().split(maxsplit=1)
        if len(parts) != 2 or not re.fullmatch(r"[0-9a-fA-F]+", parts[0]):
            on_problem(f"{name}, line {n}: not 'checksum path'.")
            continue
        digest, rel = parts[0].lower(), decode_path(parts[1].strip())
        if rel.startswith("*"):  # binary-mode marker of the sha256sum format
            rel = rel[1:]
        if rel.startswith("./"):
            rel = rel[2:]
        if rel.startswith("/") or ".." in rel.split("/") or "\\" in rel:
            on_problem(f"{name}, line {n}: path '{rel}' leads outside the archive.")
            continue
        if rel in entries:
            on_problem(f"{name}, line {n}: '{rel}' is listed twice.")
        entries[rel] = digest
    return entries


def _read_manifest(path: Path, check: BagCheck) -> dict[str, str]:
    name = path.name
    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError as exc:
        check.add("structure", name, f"{name} is not UTF-8 (byte offset {exc.start}).")
        return {}
    return read_manifest_lines(text, name, lambda msg: check.add("structure", name, msg))


def _judge_tag_files(check: BagCheck, votes: dict[str, dict[str, tuple[bool, str, str, str]]]) -> None:
    """Report tag files whose checksum disagrees with a tag manifest, blaming only the side that is proven wrong.

    A tag manifest is itself protected by nothing (RFC 8493, 2.2.1), so a
    mismatch alone cannot tell a changed tag file from a changed tag manifest.
    When another tag manifest (another algorithm) confirms the file, the
    disagreeing manifest is the one that was changed; otherwise both are named
    and neither is accused.
    """
    for rel, by_manifest in votes.items():
        agree = [m for m, (ok, *_rest) in by_manifest.items() if ok]
        disagree = {m: v for m, v in by_manifest.items() if not v[0]}
        for name, (_, actual, digest, algorithm) in disagree.items():
            if agree:
                check.add(
                    "mismatch",
                    name,
                    f"{name} records {algorithm.upper()} {digest[:16]}... for {rel}, but {rel} matches its checksum in "
                    f"{', '.join(agree)}: {name} was changed or damaged after packing, not {rel}.",
                )
            else:
                check.add(
                    "mismatch",
                    f"{rel} or {name}",
                    f"{rel}: {algorithm.upper()} is {actual[:16]}... where {name} records {digest[:16]}...: either {rel} or "
                    f"{name} was changed or damaged after packing; no other record in the bag tells which.",
                )


def verify_bag(root: Path) -> BagCheck:
    """Verify the bag at ``root`` (the folder holding ``bagit.txt``); never raises for a damaged bag.

    Examples
    --------
    >>> check = verify_bag(Path("tarrowmere-1.0.0"))  # doctest: +SKIP
    >>> [p.file for p in check.of("mismatch")]  # doctest: +SKIP
    ['data/tables/legend.csv']
    """
    check = BagCheck()
    declaration = root / "bagit.txt"
    if not declaration.is_file():
        check.add("missing", "bagit.txt", "bagit.txt is missing: the folder is not a complete bag.")
    else:
        info, _ = read_tag_file(declaration)
        for key in ("BagIt-Version", "Tag-File-Character-Encoding"):
            if key not in info:
                check.add("structure", "bagit.txt", f"bagit.txt does not declare {key}.")
        enc = (info.get("Tag-File-Character-Encoding") or [""])[0]
        if enc and enc.upper().replace("_", "-") not in ("UTF-8", "UTF8"):
            check.add("structure", "bagit.txt", f"bagit.txt declares tag file encoding {enc}; archivist reads UTF-8 only.")
    if (root / "bag-info.txt").is_file():
        check.info, bad = read_tag_file(root / "bag-info.txt")
        for where in bad:
            check.add("structure", "bag-info.txt", f"bag-info.txt, {where}: not 'Label: value'.")
    data = root / "data"
    payload = sorted(p for p in data.rglob("*") if p.is_file()) if data.is_dir() else []
    payload_rel = [p.relative_to(root).as_posix() for p in payload]
    check.payload_files = len(payload)
    check.payload_bytes = sum(p.stat().st_size for p in payload)
    if not data.is_dir():
        check.add("missing", "data/", "The payload folder data/ is missing.")
    manifests = sorted(p for p in root.iterdir() if p.is_file() and _MANIFEST.match(p.name))
    tag_listed: set[str] = set()
    tag_votes: dict[str, dict[str, tuple[bool, str, str, str]]] = {}
    payload_manifests = [p for p in manifests if not p.name.startswith("tag")]
    if not payload_manifests:
        check.add("structure", "manifest-sha256.txt", "The bag has no payload manifest (manifest-<algorithm>.txt), so nothing can be verified.")
    for manifest in manifests:
        matched = _MANIFEST.match(manifest.name)
        if matched is None:  # pragma: no cover - manifests are found by this pattern
            continue
        tag, algorithm = matched.groups()
        if algorithm not in hashlib.algorithms_available:
            check.add("structure", manifest.name, f"{manifest.name}: algorithm '{algorithm}' is not one archivist can compute; its checksums were not verified.")
            continue
        if algorithm not in check.algorithms:
            check.algorithms.append(algorithm)
        entries = _read_manifest(manifest, check)
        if tag:
            tag_listed.update(entries)
        for rel, digest in entries.items():
            if not tag and not rel.startswith("data/"):
                check.add("structure", manifest.name, f"{manifest.name} lists '{rel}', which is not under data/.")
                continue
            path = root / rel
            if not path.is_file():
                where = "payload" if not tag else "bag"
                check.add("missing", rel, f"{rel} is listed in {manifest.name} but is not in the {where}.")
                continue
            actual = file_digest(path, algorithm)
            check.verified += 1
            if tag:
                tag_votes.setdefault(rel, {})[manifest.name] = (actual == digest, actual, digest, algorithm)
                continue
            if actual != digest:
                check.add(
                    "mismatch",
                    rel,
                    f"{rel}: {algorithm.upper()} is {actual[:16]}... where {manifest.name} records {digest[:16]}...; "
                    "the file was changed or damaged after packing.",
                )
        if not tag:
            for rel in payload_rel:
                if rel not in entries:
                    check.add("unlisted", rel, f"{rel} is in the payload but not in {manifest.name}; its integrity cannot be verified.")
        else:
            for pm in payload_manifests:
                if pm.name not in entries:
                    check.add("structure", manifest.name, f"{manifest.name} does not list the payload manifest {pm.name} (RFC 8493, 2.2.1).")
    _judge_tag_files(check, tag_votes)
    tag_manifests = [p.name for p in manifests if p.name.startswith("tag")]
    tag_files = sorted(p.relative_to(root).as_posix() for p in root.rglob("*") if p.is_file() and not p.relative_to(root).as_posix().startswith("data/"))
    for rel in tag_files:
        if rel in tag_manifests or rel in tag_listed:
            continue
        if tag_manifests and rel in {p.name for p in payload_manifests}:
            continue  # reported above as a structure problem
        check.unprotected.append(rel)
    oxum = (check.info.get("Payload-Oxum") or [""])[0]
    if oxum:
        m = re.fullmatch(r"\s*(\d+)\.(\d+)\s*", oxum)
        if not m:
            check.add("structure", "bag-info.txt", f"bag-info.txt: Payload-Oxum '{oxum}' is not 'octets.files'.")
        elif (int(m.group(1)), int(m.group(2))) != (check.payload_bytes, check.payload_files):
            check.add(
                "structure",
                "bag-info.txt",
                f"bag-info.txt: Payload-Oxum {oxum} but the payload holds {check.payload_bytes} bytes in {check.payload_files} files.",
            )
    fetch = root / "fetch.txt"
    if fetch.is_file():
        for n, line in enumerate(fetch.read_text(encoding="utf-8", errors="replace").splitlines(), start=1):
            parts = line.split(maxsplit=2)
            if len(parts) == 3:
                rel = decode_path(parts[2])
                if not (root / rel).is_file():
                    check.add("missing", rel, f"{rel} is to be fetched from {parts[0]} (fetch.txt, line {n}); archivist never downloads, so the bag is incomplete.")
    return check
