"""The HTML report, opened in a real browser: Debian's chromium driven by playwright.

Outside references: chromium renders and runs the page (console errors,
network requests, the SVG's viewBox after a click, the pixels of a
screenshot); Pillow decodes the screenshot; the standard library's
``html.parser`` reads the markup. The browser test is skipped only when
/usr/bin/chromium is absent and CI is not set; under CI a missing browser
fails the run.
"""

from __future__ import annotations

import io
import os
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import shapely
from click.testing import CliRunner

import archivist
from archivist.cli import cli
from archivist.model import Finding, Report, Severity
from archivist.registry import all_rules
from archivist.report.html import render_html
from archivist.report.text import CAUTION
from shapely.geometry import box

from builders import BUNDLE as BUNDLE_DIR
from builders import copy_bundle, edit_layer, edit_manifest, edit_table, tiny_project, tree_digest

CHROMIUM = Path("/usr/bin/chromium")
ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def _need_browser():
    if CHROMIUM.exists():
        try:
            import playwright.sync_api  # noqa: F401
            return
        except ImportError:
            if os.environ.get("CI"):
                pytest.fail("playwright is not installed: pip install -e '.[test]'")
            pytest.skip("playwright is not installed")
    if os.environ.get("CI"):
        pytest.fail("/usr/bin/chromium is missing: .ci/run installs it (apt-get install chromium)")
    pytest.skip("no /usr/bin/chromium on this machine (apt-get install chromium)")


@pytest.fixture(scope="module")
def browser():
    _need_browser()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        yield b
        b.close()


class Page:
    """A page opened from a file, recording console errors, page errors and every network request."""

    def __init__(self, browser, path: Path, width=1280, height=900):
        self.page = browser.new_page(viewport={"width": width, "height": height})
        self.errors: list[str] = []
        self.requests: list[str] = []
        self.page.on("console", lambda m: self.errors.append(f"console {m.type}: {m.text}") if m.type in ("error", "warning") else None)
        self.page.on("pageerror", lambda e: self.errors.append(f"pageerror: {e}"))
        self.page.on("request", lambda r: self.requests.append(r.url))
        self.url = path.resolve().as_uri()
        self.page.goto(self.url, wait_until="load")
        self.settle()

    def settle(self):
        self.page.evaluate("() => new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)))")

    def viewbox(self) -> list[float]:
        return [float(v) for v in self.page.get_attribute("#geomap", "viewBox").split()]

    def close(self):
        self.page.close()


# ------------------------------------------------------------------ fixtures


def broken_bundle(tmp_path: Path) -> Path:
    """The example bundle with a unit code the legend lacks, and a bad legend colour."""
    root = copy_bundle(tmp_path)

    def change(df):
        df.loc[df.index[3], "unit"] = "XQZ"

    edit_layer(root, "map.gpkg", "units", change)
    edit_table(root, "legend.csv", lambda df: df.__setitem__("colour", df["colour"].where(df["unit"] != "AMB", "reddish")))
    return root


def handmade_report(project) -> Report:
    """Five findings at known places (plus one without a place), with real rule ids for the doc links."""
    ids = [r.id for r in all_rules()]
    b = project.layers["units"].frame.total_bounds
    cx, cy = (b[0] + b[2]) / 2, (b[1] + b[3]) / 2
    spots = [(b[0] + 500, b[1] + 500), (cx, cy), (b[2] - 400, b[3] - 300), (cx + 1500, cy - 900), (b[0] + 2000, b[3] - 800)]
    sev = [Severity.ERROR, Severity.ERROR, Severity.WARNING, Severity.NOTICE, Severity.WARNING]
    findings = [
        Finding(rule=ids[i % len(ids)], family=archivist.get_rule(ids[i % len(ids)]).family, severity=sev[i],
                message=f"Handmade finding {i} for the browser test.", layer="units", features=(str(i + 1),),
                x=x, y=y, measure=12.5 * (i + 1), wkt=f"POINT ({x} {y})")
        for i, (x, y) in enumerate(spots)
    ]
    findings.append(Finding(rule=ids[0], family=archivist.get_rule(ids[0]).family, severity=Severity.WARNING,
                            message="A finding with no place on the map.", layer="manifest"))
    return Report(tool="archivist", version=archivist.__version__, project=str(project.root), crs="EPSG:32633 (WGS 84 / UTM zone 33N)",
                  findings=tuple(findings), rules_run=tuple(ids))


@pytest.fixture(scope="module")
def handmade(tmp_path_factory):
    out = tmp_path_factory.mktemp("handmade")
    project = archivist.load_project(copy_bundle(out))
    report = handmade_report(project)
    page = out / "report.html"
    page.write_text(render_html(report, project), encoding="utf-8")
    return project, report, page


class Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def tags_of(text: str) -> list[tuple[str, dict]]:
    p = Tags()
    p.feed(text)
    return p.tags


# ------------------------------------------------------------------ the markup (no browser)


def test_page_is_self_contained_and_states_its_limits(handmade):
    _, report, page = handmade
    text = page.read_text(encoding="utf-8")
    tags = tags_of(text)
    for tag, attrs in tags:
        for key in ("src", "href", "xlink:href", "action"):
            value = attrs.get(key) or ""
            assert not re.match(r"^(https?:)?//", value), f"<{tag} {key}={value}> loads from the network"
    assert not re.search(r"@import|url\((?!#)", text), "CSS must not load anything"
    assert any(t == "meta" and a.get("http-equiv") == "Content-Security-Policy" and "default-src 'none'" in a.get("content", "") for t, a in tags)
    assert CAUTION in text
    assert "What the checks do not cover" in text
    # one marker per finding with a place (5 of the 6)
    markers = [a for t, a in tags if t == "path" and "data-k" in a and a.get("d", "").endswith("h0")]
    assert len(markers) == sum(1 for f in report.findings if f.x is not None)


def test_style_and_script_are_the_shipped_assets(handmade):
    # the page's <style> and <script> hold the package data files verbatim, read through
    # importlib.resources (the Python documentation's way to reach files inside a package)
    from importlib import resources

    _, _, page = handmade
    text = page.read_text(encoding="utf-8")
    assets = resources.files("archivist.report") / "assets"
    css = (assets / "report.css").read_text(encoding="utf-8")
    js = (assets / "report.js").read_text(encoding="utf-8")
    assert css.strip() and js.strip()
    assert f"<style>\n{css}</style>" in text
    assert f"<script>\n{js}</script></body>" in text
    # HTML's raw text elements end at the first "</style" or "</script" (WHATWG HTML, "raw text
    # elements"): neither file may contain the other's or its own end tag
    for name, body in (("report.css", css), ("report.js", js)):
        assert not re.search(r"</(style|script)", body, re.I), name


def test_user_text_is_escaped(tmp_path):
    import geopandas as gpd

    from builders import tiny_legend, two_units

    units = two_units()
    units.loc[0, "unit"] = '<script>alert("x")</script>'
    legend = tiny_legend()
    legend.loc[0, "unit"] = units.loc[0, "unit"]
    legend.loc[0, "colour"] = 'red;background:url(http://example.invalid/x)'
    root = tiny_project(tmp_path, units=gpd.GeoDataFrame(units), legend=legend)
    project = archivist.load_project(root)
    rule = all_rules()[0]
    finding = Finding(rule=rule.id, family=rule.family, severity=Severity.ERROR, layer="units",
                      message='Unit <img src=x onerror="alert(1)"> & more.', features=('<u>f1</u>',), x=50.0, y=50.0)
    report = Report(tool="archivist", version="0", project=str(root), crs=None, findings=(finding,), rules_run=(rule.id,))
    text = render_html(report, project)
    assert "<script>alert" not in text and "<img src=x" not in text and "<u>f1</u>" not in text
    assert "&lt;script&gt;alert" in text and "&lt;img src=x onerror=&quot;alert(1)&quot;&gt; &amp; more." in text
    # a legend colour is only used when it is a colour: never copied into a style
    styles = [a.get("style") or "" for _, a in tags_of(text)]
    assert not any("example.invalid" in st for st in styles)


def test_legend_lists_units_with_counts_and_ages(handmade):
    project, _, page = handmade
    text = page.read_text(encoding="utf-8")
    legend = text.split('<section id="legend">', 1)[1].split("</section>", 1)[0]
    units = project.layers["units"].frame["unit"].value_counts()
    table = project.tables["legend"].frame
    for _, row in table.iterrows():
        assert f"<b>{row['unit']}</b>" in legend and row["age"] in legend
        assert f"background:{row['colour'].upper()}" in legend
        # the count of polygons per unit, as pandas counts them from the layer
        cells = re.search(rf"<b>{row['unit']}</b>.*?<td class=\"n\">([\d\u202f]+)</td></tr>", legend, flags=re.S)
        assert int(cells.group(1).replace("\u202f", "")) == int(units.get(row["unit"], 0))


def test_summary_counts_by_family_and_severity(handmade):
    _, report, page = handmade
    text = page.read_text(encoding="utf-8")
    summary = text.split('<section id="summary">', 1)[1].split("</section>", 1)[0]
    s = report.summary
    assert f"{s.errors} errors, {s.warnings} warnings, {s.notices} notice" in summary
    assert "1:25\u202f000" in summary and "EPSG:32633" in summary and "Tarrowmere" in text


def test_check_html_option_writes_safely(tmp_path):
    root = tiny_project(tmp_path)
    before = tree_digest(root)
    out = tmp_path / "report.html"
    only = ["--only", "metadata"]  # the writing is under test here, not the rules
    r = CliRunner().invoke(cli, ["check", str(root), "--html", str(out), *only])
    assert r.exit_code == 0, r.output
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    again = CliRunner().invoke(cli, ["check", str(root), "--html", str(out), *only])
    assert again.exit_code == 2 and "--force" in again.stderr and len(again.stderr.strip().splitlines()) == 1
    assert CliRunner().invoke(cli, ["check", str(root), "--html", str(out), "--force", *only]).exit_code == 0
    inside = CliRunner().invoke(cli, ["check", str(root), "--html", str(root / "r.html"), *only])
    assert inside.exit_code == 2 and "inside the project" in inside.stderr
    same = CliRunner().invoke(cli, ["check", str(root), "--html", str(tmp_path / "a"), "--output", str(tmp_path / "a"), *only])
    assert same.exit_code == 2 and "same file" in same.stderr
    assert tree_digest(root) == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".report")]


# ------------------------------------------------------------------ in the browser


def test_loads_without_errors_or_network(browser, handmade):
    _, _, path = handmade
    page = Page(browser, path)
    try:
        assert page.errors == []
        assert page.requests == [page.url], "the page must load nothing but itself"
        assert page.page.title().startswith("Geological map of the Tarrowmere district")
    finally:
        page.close()


def test_markers_match_the_findings(browser, handmade):
    _, report, path = handmade
    page = Page(browser, path)
    try:
        located = [f for f in report.findings if f.x is not None]
        assert page.page.locator("#geomap .fm path").count() == len(located) == 5
        # each marker is coloured by its severity, as the browser computes the style
        colours = page.page.eval_on_selector_all(
            "#geomap .fm path", "els => els.map(e => [e.dataset.k, getComputedStyle(e).stroke])"
        )
        by_sev = {}
        for k, colour in colours:
            by_sev.setdefault(report.findings[int(k)].severity.value, set()).add(colour)
        assert all(len(v) == 1 for v in by_sev.values()) and len({c for v in by_sev.values() for c in v}) == len(by_sev)
        assert page.page.locator("#findings tbody tr").count() == len(report.findings)
    finally:
        page.close()


def test_clicking_a_row_zooms_to_the_finding(browser, handmade):
    _, report, path = handmade
    page = Page(browser, path)
    try:
        svg = page.page.locator("#geomap")
        x0, y1, kx = (float(svg.get_attribute(a)) for a in ("data-x0", "data-y1", "data-kx"))
        full = page.viewbox()
        located = [k for k, f in enumerate(report.findings) if f.x is not None]
        for k in located[::2]:
            f = report.findings[k]
            page.page.click(f'#findings tbody tr[data-k="{k}"] td.msg')
            page.settle()
            vb = page.viewbox()
            X, Y = (f.x - x0) * kx, y1 - f.y  # the finding in the page's coordinates
            assert vb[0] < X < vb[0] + vb[2] and vb[1] < Y < vb[1] + vb[3], (k, vb, X, Y)
            assert vb[2] < full[2] / 3, "zoomed in"
            # centred on it
            assert abs(vb[0] + vb[2] / 2 - X) < vb[2] * 0.05 and abs(vb[1] + vb[3] / 2 - Y) < vb[3] * 0.05
            assert "sel" in page.page.get_attribute(f'#geomap .fm path[data-k="{k}"]', "class")
        assert page.errors == []
    finally:
        page.close()


def test_pan_zoom_and_whole_map(browser, handmade):
    _, _, path = handmade
    page = Page(browser, path)
    try:
        full = page.viewbox()
        page.page.locator("#mapbox").scroll_into_view_if_needed()
        box = page.page.locator("#geomap").bounding_box()
        page.page.mouse.move(box["x"] + box["width"] / 2, box["y"] + box["height"] / 2)
        page.page.mouse.wheel(0, -400)
        page.settle()
        zoomed = page.viewbox()
        assert zoomed[2] < full[2] * 0.8
        page.page.mouse.down()
        page.page.mouse.move(box["x"] + box["width"] / 2 + 120, box["y"] + box["height"] / 2 + 60, steps=5)
        page.page.mouse.up()
        page.settle()
        panned = page.viewbox()
        assert panned[0] < zoomed[0] and panned[1] < zoomed[1] and panned[2] == pytest.approx(zoomed[2])
        page.page.click("#zfull")
        page.settle()
        assert page.viewbox() == pytest.approx(full)
        assert page.errors == []
    finally:
        page.close()


def test_filters_hide_rows_and_markers(browser, handmade):
    _, report, path = handmade
    page = Page(browser, path)
    try:
        page.page.select_option("#f-severity", "error")
        shown = page.page.locator("#findings tbody tr:not([hidden])").count()
        assert shown == report.summary.errors
        visible = page.page.eval_on_selector_all("#geomap .fm path", "els => els.filter(e => getComputedStyle(e).display !== 'none').length")
        assert visible == sum(1 for f in report.findings if f.severity is Severity.ERROR and f.x is not None)
        page.page.select_option("#f-severity", "")
        rule = report.findings[2].rule
        page.page.select_option("#f-rule", rule)
        assert page.page.locator("#findings tbody tr:not([hidden])").count() == sum(1 for f in report.findings if f.rule == rule)
        page.page.select_option("#f-rule", "")
        page.page.fill("#f-text", "no place")
        assert page.page.locator("#findings tbody tr:not([hidden])").count() == 1
    finally:
        page.close()


def test_rule_links_open_their_doc(browser, handmade):
    _, report, path = handmade
    page = Page(browser, path)
    try:
        rule = report.findings[1].rule
        page.page.click(f'#findings tbody tr[data-k="1"] a[href="#rule-{rule}"]')
        assert page.page.evaluate("location.hash") == f"#rule-{rule}"
        page.settle()
        assert page.page.evaluate(f"document.getElementById('rule-{rule}').open") is True
        doc = page.page.inner_text(f"#rule-{rule}")
        for name, _ in archivist.get_rule(rule).sections:
            assert name in doc
    finally:
        page.close()


def test_clicking_a_polygon_names_its_unit(browser, handmade):
    project, _, path = handmade
    page = Page(browser, path)
    try:
        # the middle of the largest polygon of unit DUN, in screen pixels
        units = project.layers["units"].frame
        dun = units[units["unit"] == "DUN"].geometry
        k = int(dun.area.argmax())
        pt = dun.iloc[k].representative_point()  # GEOS: a point inside that polygon
        fid = str(dun.index[k])
        page.page.locator("#mapbox").scroll_into_view_if_needed()
        svg = page.page.locator("#geomap")
        x0, y1 = float(svg.get_attribute("data-x0")), float(svg.get_attribute("data-y1"))
        X, Y = pt.x - x0, y1 - pt.y
        screen = page.page.evaluate(
            "([X, Y]) => { const s = document.getElementById('geomap'); const p = s.createSVGPoint(); p.x = X; p.y = Y;"
            " const q = p.matrixTransform(s.getScreenCTM()); return [q.x, q.y]; }",
            [X, Y],
        )
        page.page.mouse.click(*screen)
        page.settle()
        info = page.page.inner_text("#info")
        assert "Unit DUN" in info and "Dunnockside Limestone Formation" in info and f"feature {fid}." in info
    finally:
        page.close()


def test_screenshot_is_a_coloured_map(browser, handmade):
    from PIL import Image

    project, _, path = handmade
    page = Page(browser, path)
    try:
        png = page.page.locator("#mapbox").screenshot()
        img = Image.open(io.BytesIO(png)).convert("RGB")
        colours = img.getcolors(maxcolors=1 << 20)
        assert colours is not None and len(colours) > 50, "a blank or flat screenshot"
        present = {f"#{r:02X}{g:02X}{b:02X}" for _, (r, g, b) in colours}
        legend = set(project.tables["legend"].frame["colour"].str.upper())
        drawn = set(project.layers["units"].frame["unit"])
        expected = {c for u, c in zip(project.tables["legend"].frame["unit"], project.tables["legend"].frame["colour"].str.upper()) if u in drawn}
        # the browser painted the legend colour of every unit on the map
        assert expected <= present, expected - present
        assert legend
    finally:
        page.close()


def test_print_layout_hides_controls(browser, handmade):
    _, _, path = handmade
    page = Page(browser, path)
    try:
        page.page.emulate_media(media="print")
        for sel in (".tools", ".filters"):
            assert page.page.eval_on_selector(sel, "e => getComputedStyle(e).display") == "none"
        pdf = page.page.pdf()
        assert pdf.startswith(b"%PDF") and len(pdf) > 10_000
    finally:
        page.close()


def test_real_check_of_a_broken_bundle(browser, tmp_path):
    root = broken_bundle(tmp_path)
    out = tmp_path / "report.html"
    r = CliRunner().invoke(cli, ["check", str(root), "--html", str(out)])
    assert r.exit_code in (0, 1), r.output
    report = archivist.check(root)
    located = [f for f in report.findings if f.x is not None and f.y is not None]
    assert report.findings, "the broken bundle must give findings"
    page = Page(browser, out)
    try:
        assert page.errors == []
        assert page.page.locator("#geomap .fm path").count() == len(located)
        assert page.page.locator("#findings tbody tr").count() == len(report.findings)
        if located:
            k = report.findings.index(located[0])
            full = page.viewbox()
            page.page.click(f'#findings tbody tr[data-k="{k}"] td.msg')
            page.settle()
            assert page.viewbox() != full
    finally:
        page.close()


def _click_map(page, x0_y1, X, Y):
    page.page.locator("#mapbox").scroll_into_view_if_needed()
    screen = page.page.evaluate(
        "([X, Y]) => { const s = document.getElementById('geomap'); const p = s.createSVGPoint(); p.x = X; p.y = Y;"
        " const q = p.matrixTransform(s.getScreenCTM()); return [q.x, q.y]; }",
        [X, Y],
    )
    page.page.mouse.click(*screen)
    page.settle()
    return page.page.inner_text("#info")


def test_identify_polygons_with_holes_and_parts(browser, tmp_path):
    from shapely.geometry import MultiPolygon

    import geopandas as gpd

    from builders import CRS

    ring = box(0, 0, 300, 300).difference(box(100, 100, 200, 200))
    units = gpd.GeoDataFrame(
        {"unit": ["A", "B", "A"]},
        geometry=[ring, box(100, 100, 200, 200), MultiPolygon([box(300, 0, 400, 100), box(300, 200, 400, 300).difference(box(330, 230, 370, 270))])],
        crs=CRS,
    )
    root = tiny_project(tmp_path, units=units)
    project = archivist.load_project(root)
    report = Report(tool="archivist", version="0", project=str(root), crs=None, findings=())
    out = tmp_path / "r.html"
    out.write_text(render_html(report, project), encoding="utf-8")
    page = Page(browser, out)
    try:
        svg = page.page.locator("#geomap")
        x0, y1 = float(svg.get_attribute("data-x0")), float(svg.get_attribute("data-y1"))
        # (map x, map y) -> feature id the click must name; the GeoPackage fids are 1, 2, 3
        for (x, y), unit, fid in [((50, 50), "A", "1"), ((150, 150), "B", "2"), ((350, 250 + 35), "A", "3"), ((350, 50), "A", "3")]:
            info = _click_map(page, (x0, y1), x - x0, y1 - y)
            assert f"Unit {unit}" in info and f"feature {fid}." in info, (x, y, info)
        assert page.errors == []
    finally:
        page.close()


def test_many_findings_of_one_rule_are_counted_and_dotted(browser, tmp_path, monkeypatch):
    import archivist.report.html as html_mod

    monkeypatch.setattr(html_mod, "ROWS_PER_RULE", 3)
    project = archivist.load_project(copy_bundle(tmp_path))
    rules = all_rules()
    a, b = rules[0], rules[1]
    x0, y0, x1, y1 = project.layers["units"].frame.total_bounds
    findings = [
        Finding(rule=a.id, family=a.family, severity=Severity.WARNING, message=f"Many {i}.", x=x0 + 100 * i, y=y0 + 50 * i)
        for i in range(1, 11)
    ] + [Finding(rule=b.id, family=b.family, severity=Severity.ERROR, message="One.", x=x1 - 200, y=y1 - 200)]
    report = Report(tool="archivist", version="0", project="p", crs=None, findings=tuple(findings), rules_run=(a.id, b.id))
    out = tmp_path / "r.html"
    out.write_text(render_html(report, project), encoding="utf-8")
    page = Page(browser, out)
    try:
        single = page.page.locator("#geomap .fm path[data-k]").count()
        bulk = page.page.eval_on_selector_all("#geomap .fm path.bulk", "els => els.map(e => +e.dataset.n)")
        assert single == 4 and bulk == [7] and single + sum(bulk) == len(findings)
        assert page.page.locator("#findings tbody tr[data-k]").count() == 4
        assert "7 more" in page.page.inner_text("#findings tbody tr.more")
        page.page.select_option("#f-rule", b.id)
        assert page.page.eval_on_selector("#geomap .fm path.bulk", "e => getComputedStyle(e).display") == "none"
        assert page.page.locator("#findings tbody tr.more:not([hidden])").count() == 0
        page.page.select_option("#f-rule", a.id)
        assert page.page.eval_on_selector("#geomap .fm path.bulk", "e => getComputedStyle(e).display") != "none"
        assert page.errors == []
    finally:
        page.close()


# ------------------------------------------------------------------ display geometry, against GEOS


def decode(d: str) -> list[list[tuple[int, int]]]:
    """Rings of an SVG path written with M, relative l and z (the page's format)."""
    rings, cmd, nums = [], "", []
    for tok in re.findall(r"[Mlz]|-?\d+", d):
        if tok in "Mlz":
            cmd = tok
            nums = []
            continue
        nums.append(int(tok))
        if len(nums) == 2:
            if cmd == "M":
                rings.append([tuple(nums)])
            else:
                x, y = rings[-1][-1]
                rings[-1].append((x + nums[0], y + nums[1]))
            nums = []
    return rings


def test_path_data_round_trips_the_polygons():
    from archivist.report.svg import Frame, path_data, path_data_joined

    project = archivist.load_project(BUNDLE_DIR)
    geoms = project.layers["units"].geometry
    fr = Frame(x0=479_000.0, y1=6_799_000.0, kx=1.0, width=10_000.0, height=8_000.0, q=0.5, metres_per_unit=1.0, mm=25.0)
    ds = path_data(geoms, fr, fr.q, closed=True)
    for g, d in zip(geoms, ds):
        rings = decode(d)
        # GEOS's rings of the polygon, on the same grid (closing point left out)
        expected = [np.asarray(r.coords)[:-1] for r in [g.exterior, *g.interiors]]
        assert len(rings) == len(expected)
        for got, ring in zip(rings, expected):
            X = np.rint((ring[:, 0] - fr.x0) / fr.q).astype(int)
            Y = np.rint((fr.y1 - ring[:, 1]) / fr.q).astype(int)
            keep = np.r_[True, (X[1:] != X[:-1]) | (Y[1:] != Y[:-1])]
            assert got == list(zip(X[keep].tolist(), Y[keep].tolist()))
        # the area drawn is the polygon's area (shoelace on the grid vs GEOS), within the grid's rounding
        area = sum(0.5 * abs(sum(x0 * y1 - x1 * y0 for (x0, y0), (x1, y1) in zip(r, r[1:] + r[:1]))) * (1 if i == 0 else -1) for i, r in enumerate(rings))
        assert area * fr.q**2 == pytest.approx(g.area, rel=1e-3, abs=fr.q * g.length)
    joined, counts = path_data_joined(geoms, fr, fr.q, closed=True)
    assert joined == "".join(ds) and counts.tolist() == [len(decode(d)) for d in ds]


def test_display_simplification_keeps_a_coverage(monkeypatch):
    import archivist.report.svg as svg_mod

    # a densely digitised coverage: wavy boundaries sampled every metre, polygonised by GEOS
    t = np.arange(0.0, 401.0)
    lines = [shapely.LineString(np.c_[i * 100 + 8 * np.sin(t / 15 + i), t]) for i in range(5)]
    lines += [shapely.LineString(np.c_[t, j * 100 + 8 * np.sin(t / 17 + j)]) for j in range(5)]
    dense = np.asarray(shapely.get_parts(shapely.polygonize(shapely.get_parts(shapely.union_all(lines)))), dtype=object)
    assert len(dense) == 9 and shapely.coverage_is_valid(dense)  # the 3 x 3 closed cells
    out, how = svg_mod._simplify_units(dense, 1.0)
    assert how == "coverage"
    assert shapely.get_num_coordinates(out).sum() < shapely.get_num_coordinates(dense).sum() / 5
    # GEOS's own coverage check: no gaps or overlaps were made by the simplification
    assert shapely.coverage_is_valid(out)
    # and the outline moved by no more than the tolerance: area change within perimeter x tolerance
    outline = shapely.union_all(dense)
    assert abs(shapely.union_all(out).area - outline.area) <= outline.length * 1.0
    monkeypatch.setattr(svg_mod, "COVERAGE_VERTICES", 10)
    out2, how2 = svg_mod._simplify_units(dense, 1.0)
    assert how2 == "polygon" and shapely.get_num_coordinates(out2).sum() < shapely.get_num_coordinates(dense).sum() / 5
    bundle = archivist.load_project(BUNDLE_DIR).layers["units"].geometry
    assert svg_mod._simplify_units(bundle, 1.0) == (None, None)  # 52 m segments on average: nothing to gain


def test_ci_installs_the_browser_and_playwright():
    import tomllib

    root = Path(__file__).resolve().parent.parent
    ci = (root / ".ci" / "run").read_text(encoding="utf-8")
    assert "apt-get install" in ci and "chromium" in ci
    extras = tomllib.loads((root / "pyproject.toml").read_text(encoding="utf-8"))["project"]["optional-dependencies"]["test"]
    assert any(x.startswith("playwright") for x in extras) and any(x.startswith("pillow") for x in extras)


# ------------------------------------------------------------------ scale bar, north arrow, zoom boxes (pure functions)


def _frame_at(crs, bounds, scale=25000):
    from types import SimpleNamespace

    import pyproj

    from archivist.report.svg import _frame

    return _frame([np.asarray(bounds, dtype=float)], SimpleNamespace(crs=pyproj.CRS(crs), config=SimpleNamespace(scale=scale)))


def _bar_metres(label: str) -> float:
    value, unit = label.split()
    return float(value) * (1000.0 if unit == "km" else 1.0)


def test_scale_bar_in_degrees_at_60n_is_geodesic():
    from pyproj import Geod

    from archivist.report.svg import scale_bars

    # a map in EPSG:4326 around 10°E 60°N
    fr = _frame_at("EPSG:4326", (10.0, 59.9, 10.2, 60.1))
    geod = Geod(ellps="WGS84")  # the outside reference: geodesics on the WGS 84 ellipsoid (pyproj, GeographicLib)
    bars = scale_bars(fr)
    assert [b[1] for b in bars][:3] == ["5 m", "10 m", "20 m"] and "1 km" in [b[1] for b in bars]
    lat = fr.y1 - fr.height / 2  # the frame's centre
    lon = fr.x0 + fr.width / 2 / fr.kx
    for length, label in bars:
        # the bar drawn east-west across the centre: from local units back to degrees of longitude
        half = length / fr.kx / 2
        _, _, metres = geod.inv(lon - half, lat, lon + half, lat)
        assert metres == pytest.approx(_bar_metres(label), rel=1e-4), label
    # the page is true to shape at its centre: one local unit north-south is as long on the ground
    _, _, ns = geod.inv(lon, lat - 0.0005, lon, lat + 0.0005)
    assert ns / 0.001 == pytest.approx(fr.metres_per_unit, rel=1e-4)
    # one metres-per-degree factor for the whole globe (111 320 m) is 0.25 % wrong here
    assert abs(fr.metres_per_unit - 111_320.0) / 111_320.0 > 5e-4


def test_scale_bar_of_a_projected_map_is_ground_distance():
    from pyproj import Geod, Transformer

    from archivist.report.svg import scale_bars

    geod = Geod(ellps="WGS84")
    for crs in ("EPSG:3857", "EPSG:32633"):
        fwd = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
        x, y = fwd.transform(12.0, 60.0)
        fr = _frame_at(crs, (x - 5000, y - 5000, x + 5000, y + 5000))
        inv = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
        cx, cy = fr.x0 + fr.width / 2, fr.y1 - fr.height / 2
        for length, label in scale_bars(fr):
            lon, lat = inv.transform([cx - length / 2, cx + length / 2], [cy, cy])
            _, _, metres = geod.inv(lon[0], lat[0], lon[1], lat[1])
            # Web Mercator at 60°N: a grid metre is half a metre on the ground (scale factor sec 60° = 2)
            assert metres == pytest.approx(_bar_metres(label), rel=1e-4), (crs, label)


def test_north_arrow_is_the_meridian_convergence():
    import math

    from pyproj import CRS, Transformer

    from archivist.report.svg import ground_scale

    # UTM zone 33N (central meridian 15°E) at 17°E 60°N. Convergence of the transverse Mercator on the
    # sphere, gamma = atan(tan(dlon) sin(lat)) (Snyder, Map Projections: A Working Manual, USGS PP 1395,
    # 1987, from memory); the ellipsoid adds less than 0.001° this close to the central meridian.
    # East of the central meridian, true north points west (anticlockwise) of grid north.
    x, y = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True).transform(17.0, 60.0)
    g = ground_scale(CRS("EPSG:32633"), x, y, 100.0)
    gamma = math.degrees(math.atan(math.tan(math.radians(2.0)) * math.sin(math.radians(60.0))))
    assert g.north == pytest.approx(-gamma, abs=0.005)
    # on the central meridian, and in a geographic CRS, true north is up
    x, y = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True).transform(15.0, 60.0)
    assert ground_scale(CRS("EPSG:32633"), x, y, 100.0).north == pytest.approx(0.0, abs=1e-6)
    assert ground_scale(CRS("EPSG:4326"), 10.0, 60.0, 0.01).north == 0.0
    # no CRS: no north, map units read as metres
    none = ground_scale(None, 0.0, 0.0, 1.0)
    assert none.north is None and none.metres_per_unit == 1.0


def test_north_arrow_and_bars_on_the_page(handmade):
    _, _, page = handmade
    text = page.read_text(encoding="utf-8")
    svg = dict(next(a for t, a in tags_of(text) if t == "svg" and a.get("id") == "geomap"))
    import json

    bars = json.loads(svg["data-bars"])
    assert bars and all(b[0] > 0 for b in bars) and [b[0] for b in bars] == sorted(b[0] for b in bars)
    assert 'id="north"' in text and "rotate(" in text.split('id="north"', 1)[1][:400]
    assert "measured on the WGS 84 ellipsoid at latitude" in text


def test_zoom_boxes_keep_the_finding_in_context():
    from archivist.report.svg import ZOOM_CONTEXT, ZOOM_MIN_MM, Frame, zoom_boxes

    fr = Frame(x0=0.0, y1=10_000.0, kx=1.0, width=10_000.0, height=10_000.0, q=0.5, metres_per_unit=1.0, mm=25.0)
    boxes = zoom_boxes(np.array([[500.0, 500.0, 500.0, 500.0], [100.0, 100.0, 110.0, 104.0], [0.0, 0.0, 2000.0, 400.0]]), fr)
    side = boxes[:, 2] - boxes[:, 0]
    assert np.allclose(side, boxes[:, 3] - boxes[:, 1])  # squares
    # a point: the least view, 40 mm of the printed map (1 km at 1:25 000)
    assert side[0] == pytest.approx(ZOOM_MIN_MM * 25.0) == pytest.approx(1000.0)
    # a small finding still gets the least view; a large one is a fifth of the view
    assert side[1] == pytest.approx(1000.0) and side[2] == pytest.approx(ZOOM_CONTEXT * 2000.0)
    # centred on the finding
    assert np.allclose((boxes[:, 0] + boxes[:, 2]) / 2, [500.0, 105.0, 1000.0])
    assert np.allclose((boxes[:, 1] + boxes[:, 3]) / 2, [500.0, 102.0, 200.0])


# ------------------------------------------------------------------ drawing order, rules not run


def _report_with(project, findings) -> Report:
    return Report(tool="archivist", version="0", project=str(project.root), crs=None, findings=tuple(findings),
                  rules_run=tuple(r.id for r in all_rules()))


def test_notices_are_drawn_below_the_samples_and_errors_on_top(tmp_path):
    project = archivist.load_project(copy_bundle(tmp_path))
    rule = all_rules()[0]
    s = project.layers["samples"].geometry
    findings = [
        Finding(rule=rule.id, family=rule.family, severity=sev, message=f"{sev.value} at a sample.", layer="samples",
                x=float(s[k].x), y=float(s[k].y), wkt=f"POINT ({s[k].x} {s[k].y})")
        for k, sev in enumerate([Severity.ERROR, Severity.NOTICE, Severity.WARNING, Severity.NOTICE])
    ]
    report = _report_with(project, findings)
    text = render_html(report, project)
    svg = text.split('<svg id="geomap"', 1)[1].split("</svg>", 1)[0]
    samples = svg.index('<g class="samples"')
    pos: dict[str, list[int]] = {}
    for k, f in enumerate(report.findings):
        pos.setdefault(f.severity.value, []).append(svg.index(f'class="s-{f.severity.value}" data-k="{k}"'))
    assert len(pos["notice"]) == 2 and max(pos["notice"]) < samples, "notices under the samples"
    assert min(pos["warning"] + pos["error"]) > samples, "errors and warnings over them"
    assert max(pos["warning"]) < min(pos["error"]), "errors painted last"


def test_rules_that_did_not_run_count_only_those_that_could_have(tmp_path):
    from archivist.registry import all_rules as every_rule
    from archivist.report.html import rules_not_run

    root = tiny_project(tmp_path)  # units, lines, legend: no samples, structures, analyses, extent
    project = archivist.load_project(root)
    report = archivist.check(project, only=["topology", "legend"])
    rules = {r.id: r for r in every_rule()}
    could, cannot = rules_not_run(report, rules, project)
    ran = set(report.rules_run)
    # the registry's own `needs` against the project's layers and tables
    for rid, info in rules.items():
        if rid in ran:
            continue
        if all(project.has(n) for n in info.needs):
            assert rid in could, rid
        else:
            assert rid in cannot, rid
    assert could and cannot and set(could).isdisjoint(cannot)
    assert {rules[x].family for x in could} <= {"metadata", "linework", "crs", "samples", "structures", "stations", "photos"}
    assert all(rules[x].family not in ("topology", "legend") for x in could)
    assert any(rules[x].family == "archive" for x in cannot)
    text = render_html(report, project)
    part = text.split('<section id="not-covered">', 1)[1].split("</section>", 1)[0]
    assert f"{len(could)} rules that could have run did not" in part
    audit = [x for x in cannot if "archive" in rules[x].needs]
    assert audit and f"{len(cannot) - len(audit)} rules had nothing to check" in part
    assert f"{len(audit)} rules check archives and run in <code>archivist audit</code>" in part
    # a full check of the example bundle leaves nothing out that could have run
    bundle = archivist.load_project(BUNDLE_DIR)
    full = archivist.check(bundle)
    assert rules_not_run(full, rules, bundle)[0] == []
    assert "could have run" not in render_html(full, bundle)


# ------------------------------------------------------------------ unit colours


def test_cielab_against_published_values():
    from archivist.report.legend import delta_e, srgb_to_lab

    # sRGB white is the D65 white point: L* 100, a* = b* = 0 (IEC 61966-2-1, CIE 15)
    assert srgb_to_lab("#FFFFFF") == pytest.approx((100.0, 0.0, 0.0), abs=0.01)
    # sRGB red in CIELAB D65: 53.24, 80.09, 67.20 (B. Lindbloom's colour calculator, from memory)
    assert srgb_to_lab("#FF0000") == pytest.approx((53.24, 80.09, 67.20), abs=0.05)
    # mid grey #777777: L* 50.03, neutral (CIE L* of Y = 0.1845, from memory)
    assert srgb_to_lab("#777777") == pytest.approx((50.03, 0.0, 0.0), abs=0.02)
    assert delta_e("#000000", "#FFFFFF") == pytest.approx(100.0, abs=0.01)


def _chart_rows(version: str) -> dict[str, str]:
    """name -> colour, read straight from the shipped chart table with the csv module."""
    import csv
    from importlib import resources

    text = resources.files("archivist.reference").joinpath(f"ics_chart_{version}.csv").read_text(encoding="utf-8")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]
    return {r["name"]: r["color"].upper() for r in csv.DictReader(lines)}


def test_uncoloured_legend_takes_the_chart_colours_of_the_ages(tmp_path):
    import colorsys

    from archivist.report.legend import UnitStyles, legend_rows, project_fills

    root = copy_bundle(tmp_path)
    edit_table(root, "legend.csv", lambda df: df.drop(columns=["colour"]))
    project = archivist.load_project(root)
    rows = legend_rows(project)
    fills = project_fills(project, rows, 25.0)
    chart = _chart_rows("2024-12")
    # age text -> the chart unit whose colour it takes (the bundle's ages; a span takes its smallest holder)
    expected = {
        "QAL": "Holocene", "SKG": "Cisuralian", "ORB": "Gzhelian", "KES": "Kasimovian", "MAR": "Pennsylvanian",
        "DUN": "Visean", "TCG": "Tournaisian", "AMB": "Famennian", "PEL": "Ediacaran",
    }
    for code, unit in expected.items():
        f = fills[code]
        assert f.source == "chart" and f.chart_unit == unit, (code, f)
        if not f.shaded:
            assert f.colour == chart[unit], code
        else:  # a lighter or darker shade of the same hue
            h = [colorsys.rgb_to_hls(*(int(c[i:i + 2], 16) / 255 for i in (1, 3, 5)))[0] for c in (f.colour, chart[unit])]
            assert abs(h[0] - h[1]) < 0.01, code
    text = render_html(archivist.check(project), project)
    legend = text.split('<section id="legend">', 1)[1].split("</section>", 1)[0]
    assert "International Chronostratigraphic Chart, International Commission on Stratigraphy, version 2024-12, CC BY 4.0" in legend
    # the map draws each unit in that fill
    for code, f in fills.items():
        assert f'data-unit="{code}"' in text and f"fill:{f.colour}" in text
    # a legend's own colours are never replaced, and then no chart colour is credited
    bundle = archivist.load_project(BUNDLE_DIR)
    styles = UnitStyles(legend_rows(bundle), project_fills(bundle, legend_rows(bundle), 25.0))
    assert all(styles.unit_for(r["_code"]).source == "legend" for r in legend_rows(bundle))
    assert "the official colour of the unit" not in render_html(archivist.check(bundle), bundle)


def test_chart_colours_follow_the_chart_setting(tmp_path):
    from archivist.report.legend import chart_colour

    old, new = _chart_rows("2023-09"), _chart_rows("2024-12")
    # the two versions differ in the colour of some units: each version gives its own
    differ = [n for n in old if n in new and old[n] and new[n] and old[n] != new[n]]
    for name in differ[:5]:
        assert chart_colour({"age": name}, "2023-09") == (old[name], name)
        assert chart_colour({"age": name}, "2024-12") == (new[name], name)
    # numbers only: the smallest chart unit holding the span
    assert chart_colour({"min_age_ma": "287", "max_age_ma": "291"}, "2024-12") == (new["Cisuralian"], "Cisuralian")
    # a span of named units never takes an era's colour: its oldest unit's
    assert chart_colour({"age": "Permo-Triassic"}, "2024-12") == (new["Permian"], "Permian")
    assert chart_colour({"age": "Late Jurassic"}, "2024-12") == (new["Upper Jurassic"], "Upper Jurassic")
    assert chart_colour({"age": "no such age"}, "2024-12") is None and chart_colour({}, "2024-12") is None


def _grid_units(n: int = 5, size: float = 100.0):
    import geopandas as gpd

    from builders import CRS

    cells = [box(i * size, j * size, (i + 1) * size, (j + 1) * size) for j in range(n) for i in range(n)]
    return gpd.GeoDataFrame({"unit": [f"U{k:02d}" for k in range(len(cells))]}, geometry=cells, crs=CRS)


def test_palette_tells_touching_units_apart(tmp_path):
    import itertools

    import pandas as pd

    from archivist.report.legend import PALETTE, delta_e, legend_rows, project_fills

    units = _grid_units()
    legend = pd.DataFrame({"unit": units["unit"], "name": [f"Unit {u}" for u in units["unit"]]})  # no colour, no age
    root = tiny_project(tmp_path, units=units, legend=legend)
    project = archivist.load_project(root)
    fills = project_fills(project, legend_rows(project), 10.0)
    assert {f.source for f in fills.values()} == {"palette"}
    # touching pairs (sides and corners) found by GEOS, one pair at a time
    geoms = list(units.geometry)
    touching = [(a, b) for a, b in itertools.combinations(range(len(geoms)), 2) if geoms[a].intersects(geoms[b])]
    assert len(touching) == 2 * 5 * 4 + 2 * 4 * 4  # 40 sides and 32 corners in a 5 x 5 grid
    worst = min(delta_e(fills[units["unit"][a]].colour, fills[units["unit"][b]].colour) for a, b in touching)
    # no two touching units share a colour: the least difference is the palette's own closest pair
    closest_pair = min(delta_e(a, b) for a, b in itertools.combinations(PALETTE, 2))
    assert worst >= closest_pair > 15.0
    text = render_html(Report(tool="archivist", version="0", project="p", crs=None, findings=()), project)
    assert "ColorBrewer Set3" in text


def test_same_chart_colour_on_touching_units_is_shaded(tmp_path):
    import pandas as pd

    from archivist.report.legend import DISTINCT_DE, delta_e, legend_rows, project_fills

    units = _grid_units(2)
    legend = pd.DataFrame({"unit": units["unit"], "age": ["Visean", "Visean", "Famennian", "Visean"]})
    project = archivist.load_project(tiny_project(tmp_path, units=units, legend=legend))
    fills = project_fills(project, legend_rows(project), 10.0)
    vis = [fills[c].colour for c in ("U00", "U01", "U03")]  # the three Visean cells touch each other
    assert all(fills[c].chart_unit == "Visean" for c in ("U00", "U01", "U03"))
    assert min(delta_e(a, b) for a, b in [(vis[0], vis[1]), (vis[0], vis[2]), (vis[1], vis[2])]) >= DISTINCT_DE
    assert [fills[c].shaded for c in ("U00", "U01", "U03")] == [False, True, True]


# ------------------------------------------------------------------ layout, labels and scale bar in the browser


def test_map_comes_first_with_the_summary_beside_or_below(browser, handmade):
    _, _, path = handmade
    for width, beside in ((1400, True), (800, False)):
        page = Page(browser, path, width=width, height=900)
        try:
            m = page.page.locator("#mapbox").bounding_box()
            s = page.page.locator("#summary").bounding_box()
            assert m["y"] < 160 and m["y"] + m["height"] <= 900, "the map is the first thing on screen"
            if beside:
                assert s["x"] >= m["x"] + m["width"] and s["y"] < m["y"] + m["height"] / 2, (m, s)
            else:
                assert s["y"] >= m["y"] + m["height"], (m, s)
            assert page.errors == []
        finally:
            page.close()


def _visible_labels(page):
    return page.page.eval_on_selector_all(
        "#geomap .labels text",
        "els => els.filter(e => getComputedStyle(e).display !== 'none').map(e => {"
        " const r = e.getBoundingClientRect(), b = e.getBBox();"
        " return [e.textContent, r.height, b.x, b.y, b.width, b.height]; })",
    )


def test_unit_labels_stay_legible_and_inside_their_polygons(browser, handmade):
    from shapely.geometry import box as shape_box

    project, _, path = handmade
    page = Page(browser, path)
    try:
        units = project.layers["units"].frame
        assert page.page.locator("#geomap .labels text").count() == len(units)
        svg = page.page.locator("#geomap")
        x0, y1, kx = (float(svg.get_attribute(a)) for a in ("data-x0", "data-y1", "data-kx"))
        seen = []
        for _ in range(3):
            shown = _visible_labels(page)
            seen.append(len(shown))
            for code, px, bx, by, bw, bh in shown:
                # the same size on screen at every zoom (12 px text: a line box of about 12-17 px)
                assert 10 <= px <= 18, (code, px)
                # GEOS: the label's box, back in map units, lies inside a polygon of its unit
                lab = shape_box(x0 + bx / kx, y1 - by - bh, x0 + (bx + bw) / kx, y1 - by)
                assert units[units["unit"] == code].geometry.contains(lab).any(), code
            page.page.click("#zin")
            page.settle()
        # zooming in shows more labels; at the whole map some are too small to hold theirs
        assert seen[0] < len(units) and seen[0] <= seen[1] <= seen[2] and seen[2] > seen[0], seen
        assert page.errors == []
    finally:
        page.close()


def test_scale_bar_on_screen_matches_its_length(browser, handmade):
    import json

    _, _, path = handmade
    page = Page(browser, path)
    try:
        bars = {label: length for length, label in json.loads(page.page.get_attribute("#geomap", "data-bars"))}
        for _ in range(3):
            label = page.page.eval_on_selector("#scalebar", "e => e.firstChild.textContent")
            px = page.page.eval_on_selector("#scalebar span", "e => e.getBoundingClientRect().width")
            # local units per pixel, as the browser lays out the viewBox (preserveAspectRatio meet)
            u = page.page.evaluate(
                "() => { const s = document.getElementById('geomap'), r = s.getBoundingClientRect(), v = s.viewBox.baseVal;"
                " return Math.max(v.width / r.width, v.height / r.height); }"
            )
            assert label in bars and px <= 130.5 and px * u == pytest.approx(bars[label], rel=0.01), (label, px)
            page.page.click("#zin")
            page.settle()
    finally:
        page.close()


def test_labels_and_bar_on_a_map_in_degrees_at_60n(browser, tmp_path):
    import json

    import geopandas as gpd
    import pandas as pd
    from pyproj import Geod
    from shapely.geometry import box as shape_box

    cells = [box(10 + i * 0.02, 60 + j * 0.01, 10 + (i + 1) * 0.02, 60 + (j + 1) * 0.01) for j in range(3) for i in range(3)]
    units = gpd.GeoDataFrame({"unit": [f"G{k}" for k in range(9)]}, geometry=cells, crs="EPSG:4326")
    legend = pd.DataFrame({"unit": units["unit"], "name": [f"Unit {k}" for k in range(9)]})
    lines = gpd.GeoDataFrame({"kind": ["map-boundary"], "certainty": ["certain"]},
                             geometry=[shapely.LineString([(10, 60), (10.06, 60), (10.06, 60.03), (10, 60.03), (10, 60)])], crs="EPSG:4326")
    root = tiny_project(tmp_path, units=units, lines=lines, legend=legend, manifest={"map": {"crs": "EPSG:4326", "scale": 10000}})
    project = archivist.load_project(root)
    out = tmp_path / "r.html"
    out.write_text(render_html(Report(tool="archivist", version="0", project=str(root), crs=None, findings=()), project), encoding="utf-8")
    page = Page(browser, out)
    try:
        svg = page.page.locator("#geomap")
        x0, y1, kx = (float(svg.get_attribute(a)) for a in ("data-x0", "data-y1", "data-kx"))
        assert 0.49 < kx < 0.51  # squeezed by about cos 60°
        page.page.click("#zin")
        page.settle()
        shown = _visible_labels(page)
        assert len(shown) == 9
        for code, px, bx, by, bw, bh in shown:
            lab = shape_box(x0 + bx / kx, y1 - by - bh, x0 + (bx + bw) / kx, y1 - by)
            assert units.geometry[units["unit"] == code].iloc[0].contains(lab), code
        # the bar on screen, back in degrees at the map's centre latitude, against pyproj's Geod
        bars = {label: length for length, label in json.loads(svg.get_attribute("data-bars"))}
        label = page.page.eval_on_selector("#scalebar", "e => e.firstChild.textContent")
        _, _, metres = Geod(ellps="WGS84").inv(10.03, 60.015, 10.03 + bars[label] / kx, 60.015)
        assert metres == pytest.approx(_bar_metres(label), rel=1e-3)
        assert page.errors == []
    finally:
        page.close()


def test_summary_names_the_chart_the_legend_was_checked_against(tmp_path):
    from archivist.reference import CREDIT_PREFIX, chart_credit

    root = copy_bundle(tmp_path)
    edit_manifest(root, lambda m: m.setdefault("checks", {}).__setitem__("chart", "2023-09"))
    project = archivist.load_project(root)
    report = archivist.check(project, only=["legend"])
    note = chart_credit("2023-09")
    assert note in report.notes  # the engine's note, as the text and JSON reports print it
    summary = render_html(report, project).split('<section id="summary">', 1)[1].split("</section>", 1)[0]
    assert "<dt>Chart</dt>" in summary and summary.count(CREDIT_PREFIX) == 1 and "version 2023-09, CC BY 4.0" in summary
