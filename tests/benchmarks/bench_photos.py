"""Benchmark: packing and auditing a large photo set with flat memory.

    python tests/benchmarks/bench_photos.py [N_FILES] [--mb=SIZE]    # default 5000 files of 1 MB

Writes the tiny photo project of the tests with ``N_FILES`` photos of
``SIZE`` MB each (a small JPEG with EXIF GPS tags written by Pillow, then
filler bytes after its end-of-image marker, so each file has its own
checksum), then in a child process of its own for each of N/5 and N files:

- ``archivist.pack`` (check included), which streams every photo into the
  bag and hashes it on the way;
- ``archivist.audit`` of the package, which copies it privately, verifies
  every checksum of the bag and reads every photo's EXIF header.

Each child reports its peak resident set size (``ru_maxrss``, Linux: KiB)
and how many files the audit verified. Memory is flat when the peak for N
files is about that for N/5 (a set that loaded files whole would grow by
the bytes of the set). Exits 1 when the audit finds an error, verifies
fewer files than packed, or the peak of packing grows by more than 100 MiB
from N/5 to N files (common practice: far below the 4/5 N MB more that
loading the set would take). The audit's peak is printed beside it: it
grows a little with the number of files (about 9 KiB per file, measured
from 1 000 to 5 000: the descriptor's and the bag's records of each), not
with their bytes.
"""

from __future__ import annotations

import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

MiB = 1024 * 1024


def make_set(root: Path, n: int, size: int) -> Path:
    from photo_builders import STATIONS, jpeg, lonlat, photo_project

    project = photo_project(root, photos={}, name=f"set{n}", fieldbook=False)
    (project / "photos").mkdir(exist_ok=True)
    head = jpeg(project / "head.jpg", *lonlat(*STATIONS["ST01"])).read_bytes()
    (project / "head.jpg").unlink()
    block = bytes(range(256)) * (MiB // 256)
    ids = list(STATIONS)
    for i in range(n):
        with open(project / "photos" / f"{ids[i % len(ids)]}_{i:05d}.jpg", "wb") as fh:
            fh.write(head)
            left = size - len(head)
            fh.write(i.to_bytes(8, "big"))  # each file its own checksum
            left -= 8
            while left > 0:
                fh.write(block[: min(left, len(block))])
                left -= len(block)
    return project


def child(project: Path, out: Path) -> None:
    import archivist

    t = time.perf_counter()
    result = archivist.pack(project, out)
    pack_s = time.perf_counter() - t
    pack_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t = time.perf_counter()
    report = archivist.audit(result.path, workdir=out)
    audit_s = time.perf_counter() - t
    lines = (result.path / "manifest-sha256.txt").read_text().splitlines()
    photos = sum(1 for line in lines if "  data/photos/" in line)
    print(json.dumps({
        "files": photos, "pack_s": round(pack_s, 1), "audit_s": round(audit_s, 1),
        "pack_peak_kib": pack_rss, "peak_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
        "audit_errors": report.summary.errors, "bag_files_verified": len(lines),
        "bytes": result.bytes,
    }))


def main(n: int, mb: float) -> int:
    work = Path(tempfile.mkdtemp(prefix="bench-photos-"))
    failed = False
    try:
        runs = []
        for count in (max(1, n // 5), n):
            project = make_set(work, count, int(mb * MiB))
            out = work / f"out{count}"
            out.mkdir()
            proc = subprocess.run([sys.executable, __file__, "--child", str(project), str(out)], capture_output=True, text=True,
                                  env={**os.environ, "PYTHONPATH": os.pathsep.join([str(HERE.parent.parent), str(HERE.parent)])})
            if proc.returncode:
                print(proc.stderr)
                return 1
            found = json.loads(proc.stdout.strip().splitlines()[-1])
            runs.append(found)
            print(f"{count} photos of {mb:g} MB: pack {found['pack_s']} s (peak RSS {found['pack_peak_kib'] / 1024:.0f} MiB), "
                  f"audit {found['audit_s']} s verifying {found['bag_files_verified']} bag files "
                  f"({found['files']} photos), peak RSS {found['peak_kib'] / 1024:.0f} MiB, audit errors {found['audit_errors']}")
            failed |= found["audit_errors"] > 0 or found["files"] != count
            shutil.rmtree(project)
            shutil.rmtree(out)
        growth = (runs[1]["pack_peak_kib"] - runs[0]["pack_peak_kib"]) / 1024
        audit_growth = (runs[1]["peak_kib"] - runs[0]["peak_kib"]) / 1024
        print(f"peak RSS growth from {runs[0]['files']} to {runs[1]['files']} photos: pack {growth:.0f} MiB, "
              f"pack and audit {audit_growth:.0f} MiB (the set grew by {(runs[1]['files'] - runs[0]['files']) * mb:.0f} MB)")
        failed |= growth > 100
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 1 if failed else 0


if __name__ == "__main__":
    if sys.argv[1:2] == ["--child"]:
        child(Path(sys.argv[2]), Path(sys.argv[3]))
        sys.exit(0)
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    size = next((float(a.split("=", 1)[1]) for a in sys.argv[1:] if a.startswith("--mb=")), 1.0)
    sys.exit(main(int(args[0]) if args else 5000, size))
