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
from builders import copy_bundle, edit_layer, edit_table, tiny_project, tree_digest

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
