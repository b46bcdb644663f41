"""How big the HTML report of a 10^5-polygon map is, and how long headless chromium takes to open it.

    python tests/benchmarks/bench_html.py                 # 100 000 polygons, 3 loads
    python tests/benchmarks/bench_html.py --polygons 20000 --runs 5
    python tests/benchmarks/bench_html.py --project DIR   # an existing project instead

The map is the synthetic Voronoi coverage of ``synthetic.py`` (invented
names). The report is the real ``archivist check`` of it; the page is
written by ``archivist.report.html``. "Opened" is from navigation until the
load event and then two animation frames: the page parsed, laid out and
painted once. The example bundle's page, loaded in the same browser, is the
reference the ratio is taken against. Not a test: it prints, it asserts nothing.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import archivist  # noqa: E402
from archivist.report.html import render_html  # noqa: E402

REPO = HERE.parent.parent
CHROMIUM = "/usr/bin/chromium"
ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def timed(label, func, *args, **kw):
    t0 = time.perf_counter()
    out = func(*args, **kw)
    dt = time.perf_counter() - t0
    print(f"{label:<34} {dt:8.2f} s", flush=True)
    return out, dt


def page_of(project_path: Path, out: Path, only: list[str]) -> tuple[Path, float]:
    project, _ = timed(f"load {project_path.name}", archivist.load_project, project_path)
    report, _ = timed("check", archivist.check, project, only=only)
    html, dt = timed("render HTML", render_html, report, project)
    out.write_text(html, encoding="utf-8")
    polygons = len(project.layers["units"].frame) if "units" in project.layers else 0
    located = sum(1 for f in report.findings if f.x is not None)
    print(f"{'polygons / findings (located)':<34} {polygons:>8} / {len(report.findings)} ({located})")
    print(f"{'HTML size':<34} {out.stat().st_size / 1e6:8.2f} MB")
    return out, dt


def open_times(browser, path: Path, runs: int) -> list[float]:
    times = []
    for _ in range(runs):
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        errors = []
        page.on("pageerror", lambda e: errors.append(str(e)))
        t0 = time.perf_counter()
        page.goto(path.resolve().as_uri(), wait_until="load", timeout=300_000)
        page.evaluate("() => new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)))")
        times.append(time.perf_counter() - t0)
        if errors:
            print("page errors:", errors)
        page.close()
    return times


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--polygons", type=int, default=100_000)
    ap.add_argument("--project", type=Path, help="benchmark this project instead of a synthetic one")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--only", action="append", default=[], metavar="FAMILY", help="run only these rule families")
    ap.add_argument("--keep", type=Path, help="write the synthetic project and the pages here")
    a = ap.parse_args(argv)
    from playwright.sync_api import sync_playwright

    from synthetic import make_project

    work = a.keep or Path(tempfile.mkdtemp(prefix="archivist-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    if a.project is None:
        project_path = work / f"quillon_{a.polygons}"
        if not project_path.exists():
            timed(f"make {a.polygons} polygons", make_project, project_path, a.polygons)
    else:
        project_path = a.project
    big, _ = page_of(project_path, work / "big.html", a.only)
    ref, _ = page_of(REPO / "example_bundle", work / "reference.html", a.only)
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        ref_t = open_times(browser, ref, a.runs)
        big_t = open_times(browser, big, a.runs)
        browser.close()
    med_big, med_ref = statistics.median(big_t), statistics.median(ref_t)
    print(f"{'open, example bundle (reference)':<34} {med_ref:8.2f} s  (median of {a.runs}: {', '.join(f'{t:.2f}' for t in ref_t)})")
    print(f"{'open, synthetic map':<34} {med_big:8.2f} s  (median of {a.runs}: {', '.join(f'{t:.2f}' for t in big_t)})")
    print(f"{'ratio to the reference':<34} {med_big / med_ref:8.1f} x")
    print(f"{'within 10 s':<34} {'yes' if max(big_t) < 10 else 'NO'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
