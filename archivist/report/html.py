"""HTML report: one self-contained page with a summary, a map, the findings and the rule docs.

The page needs no network: no web fonts, no scripts, styles or tiles from
elsewhere (a Content-Security-Policy in the page forbids them). Its style
sheet and script are the package's ``assets/report.css`` and
``assets/report.js``, written into the page. The map comes first, with the
summary beside it on a wide screen and below it on a narrow one. The map is drawn by
:mod:`archivist.report.svg`, the unit colours come from
:mod:`archivist.report.legend`; this module writes the page's sections.
Every value from the data is escaped (:mod:`archivist.report.markup`).
All of that is formatting: every number the page states (counts, measures,
positions) comes from the report or the project.
"""

from __future__ import annotations

import math
from collections import Counter
from functools import cache
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Iterable

import numpy as np

from .. import reference, registry
from .._version import __version__
from ..fsutil import atomic_write_text
from ..model import Report, Severity
from .legend import TOUCH_MM, UnitStyles, legend_rows, project_fills
from .markup import code_text as _code
from .markup import escape_text as _e
from .markup import int_text as _int
from .markup import num_text as _num
from .markup import plural as _plural
from .markup import script_json as _json
from .text import CAUTION

if TYPE_CHECKING:
    from ..project import MapProject
    from .svg import MapDrawing

SEVERITY_COLOUR = {"error": "#c62828", "warning": "#e08600", "notice": "#1565c0"}
ROWS_PER_RULE = 1000  # findings of one rule listed one by one; more are counted and drawn as dots


@cache
def asset(name: str) -> str:
    """The text of a file shipped in ``archivist/report/assets/`` (the page's style sheet and script)."""
    return resources.files(__package__).joinpath("assets", name).read_text(encoding="utf-8")


class _Page:
    def __init__(self, report: Report, project: MapProject | None, rules: dict[str, registry.RuleInfo]) -> None:
        self.report = report
        self.project = project
        self.rules = rules
        self.legend_rows = legend_rows(project)
        touch = 0.0
        if project is not None and "units" in project.layers:
            from .svg import map_units_per_mm

            touch = TOUCH_MM * map_units_per_mm(project)
        self.styles = UnitStyles(self.legend_rows, project_fills(project, self.legend_rows, touch))
        self.chart = reference.chart_info(getattr(getattr(project, "config", None), "chart", None))
        # the first ROWS_PER_RULE findings of each rule are shown one by one; the rest are counted and dotted
        seen: Counter[str] = Counter()
        self.detailed = np.zeros(len(report.findings), dtype=bool)
        for i, f in enumerate(report.findings):
            seen[f.rule] += 1
            self.detailed[i] = seen[f.rule] <= ROWS_PER_RULE
        self.rule_counts = seen

    def draw_map(self) -> MapDrawing:
        from .svg import draw_map

        return draw_map(self.report, self.project, self.styles, self.detailed)

    # --- sections -------------------------------------------------------
    def summary(self) -> str:
        r, p = self.report, self.project
        m = (p.manifest.get("map", {}) if p is not None else {}) or {}
        s = r.summary
        out = []
        if s.errors:
            out.append(f'<p class="status bad">{_e(_plural(s.errors, "error"))}, {_e(_plural(s.warnings, "warning"))}, {_e(_plural(s.notices, "notice"))}</p>')
        elif s.warnings:
            out.append(f'<p class="status meh">No errors; {_e(_plural(s.warnings, "warning"))}, {_e(_plural(s.notices, "notice"))}</p>')
        else:
            out.append(f'<p class="status ok">No errors or warnings; {_e(_plural(s.notices, "notice"))}</p>')
        meta = []
        if m.get("version"):
            meta.append(("Map version", _e(m["version"])))
        if p is not None:
            meta.append(("Scale", f"1:{_e(_int(int(round(p.config.scale))))}"))
        meta.append(("CRS", _e(r.crs or "not declared")))
        authors = [str(a["name"]) for a in (m.get("authors") or []) if isinstance(a, dict) and a.get("name")]
        if authors:
            meta.append(("Authors", _e("; ".join(authors))))
        if m.get("licence"):
            meta.append(("Licence", _e(m["licence"])))
        meta.append(("Project", f"<code>{_e(r.project)}</code>"))
        meta.append(("Checked with", f"archivist {_e(r.version)}: {_e(_plural(len(r.rules_run), 'rule'))} ran"))
        chart_notes = [n for n in r.notes if n.startswith(reference.CREDIT_PREFIX)]
        for n in chart_notes:
            meta.append(("Chart", _e(n)))
        out.append('<dl class="meta">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in meta) + "</dl>")
        # counts by family and severity
        fams = [f for f in registry.FAMILIES]
        ran_fam = Counter(self.rules[x].family for x in r.rules_run if x in self.rules)
        counts = Counter((f.family, f.severity.value) for f in r.findings)
        extra = sorted({f.family for f in r.findings} - set(fams))
        rows = []
        for fam in fams + extra:
            if not ran_fam.get(fam) and not any(k[0] == fam for k in counts):
                continue
            cells = [counts.get((fam, sv.value), 0) for sv in Severity]
            tds = "".join(f'<td class="n">{_int(c) if c else "–"}</td>' for c in cells)
            rows.append(f'<tr><th scope="row">{_e(fam)}</th><td class="n">{_int(ran_fam.get(fam, 0))}</td>{tds}<td class="n">{_int(sum(cells))}</td></tr>')
        tot = [s.errors, s.warnings, s.notices]
        rows.append(
            '<tr><th scope="row">all</th>'
            f'<td class="n">{_int(len(r.rules_run))}</td>'
            + "".join(f'<td class="n"><b>{_int(c)}</b></td>' for c in tot)
            + f'<td class="n"><b>{_int(sum(tot))}</b></td></tr>'
        )
        out.append(
            '<table class="counts"><thead><tr><th>family</th><th class="n">rules run</th>'
            + "".join(f'<th class="n"><span class="sev {sv.value}">{sv.value}s</span></th>' for sv in Severity)
            + '<th class="n">total</th></tr></thead><tbody>'
            + "".join(rows)
            + "</tbody></table>"
        )
        other = [n for n in r.notes if n not in chart_notes]
        if other:
            out.append('<ul class="notes">' + "".join(f"<li>{_e(n)}</li>" for n in other) + "</ul>")
        return "".join(out)

    def not_covered(self) -> str:
        r = self.report
        could, cannot = rules_not_run(r, self.rules, self.project)
        items = [f"<p>{_e(CAUTION)}</p>"]
        li = []

        def listing(ids: list[str]) -> str:
            by_family: dict[str, list[str]] = {}
            for x in ids:
                by_family.setdefault(self.rules[x].family, []).append(x)
            return "".join(
                f"<li>{_e(fam)}: " + ", ".join(f"<code>{_e(x)}</code>" for x in group) + "</li>" for fam, group in by_family.items()
            )

        if could:
            li.append(
                f"<details><summary>{_e(_plural(len(could), 'rule'))} that could have run did not: "
                f"they were switched off or the run was limited to some rules.</summary><ul>{listing(could)}</ul></details>"
            )
        audit = [x for x in cannot if "archive" in self.rules[x].needs]
        absent = [x for x in cannot if x not in set(audit)]
        if absent:
            li.append(
                f"<details><summary>{_e(_plural(len(absent), 'rule'))} had nothing to check: a layer or table they need "
                f"is absent or empty.</summary><ul>{listing(absent)}</ul></details>"
            )
        if audit:
            li.append(
                f"<details><summary>{_e(_plural(len(audit), 'rule'))} check archives and run in "
                f"<code>archivist audit</code>.</summary><ul>{listing(audit)}</ul></details>"
            )
        unlocated = sum(1 for f in r.findings if f.x is None or f.y is None)
        if unlocated:
            li.append(f"{_e(_plural(unlocated, 'finding'))} have no place on the map (manifest, metadata or table problems); they are in the table only.")
        if li:
            items.append("<ul>" + "".join(f"<li>{x}</li>" for x in li) + "</ul>")
        return '<div class="caution">' + "".join(items) + "</div>"

    def map_section(self, m: MapDrawing) -> str:
        from .svg import FINDING_GRID, GRID_STEPS

        fr = m.frame
        if not m.svg or fr is None:
            return "<p>Nothing to draw: the project has no readable layers and no finding has a location.</p>"
        key = []
        sev = Counter(f.severity.value for f in self.report.findings if f.x is not None and f.y is not None)
        for sv in Severity:
            if sev.get(sv.value):
                key.append(
                    f'<span><svg width="14" height="14"><circle cx="7" cy="7" r="5.5" fill="{SEVERITY_COLOUR[sv.value]}"/></svg> '
                    f"{_e(sv.value)} ({_int(sev[sv.value])})</span>"
                )
        for label, style, _kind, n in m.line_key:
            key.append(f'<span><svg width="34" height="10"><path d="M2 5H32" style="{style}"/></svg> {_e(label)} ({_int(n)})</span>')
        if m.samples_n:
            key.append(
                '<span><svg width="14" height="14"><circle cx="7" cy="7" r="3" fill="#fff" stroke="#111" stroke-width="2"/></svg> '
                f"samples ({_int(m.samples_n)})</span>"
            )
        if m.structures_n:
            key.append(
                '<span><svg width="24" height="16"><path d="M2 5H22M12 5V12" stroke="#222" stroke-width="1.4" fill="none"/></svg> '
                f"structural measurements ({_int(m.structures_n)})</span>"
            )
        step = f"{_num(fr.q * fr.metres_per_unit)} m (1/{_int(GRID_STEPS)} of the map's larger side)"
        if fr.north is None:
            north_text = "North is not known (no CRS with an ellipsoid): up is the map's y axis"
            arrow = '<div id="north" title="grid north: the map\'s y axis"><svg width="28" height="40" viewBox="-14 -20 28 40"><path d="M0 -15L7 7L0 3L-7 7Z" fill="#fff" stroke="#111" stroke-width="1.4"/></svg><span>y</span></div>'
        else:
            off = abs(fr.north)
            side = "east" if fr.north > 0 else "west"
            north_text = "North up" if off < 0.05 else f"Grid north up; true north at the map's centre is {off:.2f}° {side} of it (arrow)"
            arrow = (
                f'<div id="north" title="true north at the map\'s centre{"" if off < 0.05 else f": {off:.2f}° {side} of grid north"}">'
                f'<svg width="28" height="40" viewBox="-14 -20 28 40"><g transform="rotate({fr.north:.3f})">'
                '<path d="M0 -15L7 7L0 3Z" fill="#111"/><path d="M0 -15L-7 7L0 3Z" fill="#fff" stroke="#111" stroke-width="1.2"/></g></svg><span>N</span></div>'
            )
        how = {
            "coverage": f"simplified for display to {step}, shared edges kept shared",
            "polygon": f"simplified for display to {step} one by one (shared edges may part by that much when zoomed far in)",
        }.get(m.simplified or "", f"drawn on a display grid of {step}")
        labels = ""
        if m.labels_n:
            labels = f" Unit codes are shown where they fit at the current zoom{f' (on the {_int(m.labels_n)} largest polygons)' if m.labels_left else ''}."
        caption = (
            f"{_e(north_text)}. Scale bar: ground length {_e(fr.ground)}. Unit polygons {how}; lines simplified to the same grid; "
            f"finding geometries drawn to {_num(fr.q / FINDING_GRID * fr.metres_per_unit)} m. "
            "Drag to pan, wheel or double-click to zoom, <kbd>0</kbd> to see everything; click a polygon to name it, a marker to find its row."
            + labels
        )
        notes = "".join(f"<li>{_e(n)}</li>" for n in m.notes)
        unit_names = {
            r["_code"]: str(r.get("name") or "") for r in self.legend_rows
        }
        data = (
            f'<script type="application/json" id="unit-names">{_json(unit_names)}</script>'
            f'<script type="application/json" id="unit-ids">{_json(m.unit_ids)}</script>'
            f'<script type="application/json" id="unit-rings">{_json(m.unit_rings)}</script>'
        )
        return (
            '<div id="mapbox">'
            + m.svg
            + '<div class="tools noprint"><button id="zin" title="Zoom in" type="button">+</button>'
            '<button id="zout" title="Zoom out" type="button">−</button>'
            '<button id="zfull" title="Whole map" type="button">⤢</button></div>'
            f'{arrow}<div id="scalebar"></div><div id="coords"></div></div>'
            '<p id="info" aria-live="polite"></p>'
            f'<div class="keyrow">{"".join(key)}</div>'
            f'<p class="caption">{caption}</p>'
            + (f'<ul class="caption">{notes}</ul>' if notes else "")
            + data
        )

    def findings_section(self, m: MapDrawing) -> str:
        r = self.report
        if not r.findings:
            return "<p>No findings.</p>"
        fams = sorted({f.family for f in r.findings}, key=lambda x: (registry.FAMILIES.index(x) if x in registry.FAMILIES else 99, x))
        rules = sorted({f.rule for f in r.findings})
        sevs = [sv.value for sv in Severity if any(f.severity == sv for f in r.findings)]

        def select(id_, label, values):
            opts = "".join(f'<option value="{_e(v)}">{_e(v)}</option>' for v in values)
            return f'<label>{label} <select id="{id_}"><option value="">all</option>{opts}</select></label>'

        filters = (
            '<div class="filters">'
            + select("f-family", "Family", fams)
            + select("f-severity", "Severity", sevs)
            + select("f-rule", "Rule", rules)
            + '<label>Text <input id="f-text" type="search" placeholder="feature, unit, word…"></label>'
            + '<span id="shown" aria-live="polite"></span></div>'
        )
        body = []
        rest: dict[str, set[str]] = {}
        for f, d in zip(r.findings, self.detailed.tolist()):
            if not d:
                rest.setdefault(f.rule, set()).add(f.severity.value)
        listed: Counter = Counter()
        for i, f in enumerate(r.findings):
            if not self.detailed[i]:
                continue
            listed[f.rule] += 1
            more = ""
            if listed[f.rule] == ROWS_PER_RULE and f.rule in rest:
                n = self.rule_counts[f.rule] - ROWS_PER_RULE
                more = (
                    f'<tr class="more" data-family="{_e(f.family)}" data-rule="{_e(f.rule)}" data-severities="{" ".join(sorted(rest[f.rule]))}">'
                    f'<td colspan="7">… and {_int(n)} more <code>{_e(f.rule)}</code> findings, marked on the map as dots and not '
                    "listed here; the JSON report (<code>archivist check --format json</code>) lists every one.</td></tr>"
                )
            box = m.boxes.get(i) if m.frame is not None else None
            attrs = f' data-k="{i}" data-family="{_e(f.family)}" data-severity="{f.severity.value}" data-rule="{_e(f.rule)}"'
            if box:
                attrs += f' class="loc" tabindex="0" data-box="{box}" title="Show on the map"'
            rule = f'<a href="#rule-{_e(f.rule)}"><code>{_e(f.rule)}</code></a>' if f.rule in self.rules else f"<code>{_e(f.rule)}</code>"
            where = []
            if f.layer:
                where.append(_e(f.layer))
            if f.features:
                shown = ", ".join(f.features[:8]) + (f" … (+{len(f.features) - 8})" if len(f.features) > 8 else "")
                where.append(f"feature{'s' if len(f.features) > 1 else ''} {_e(shown)}")
            xy = r.place(f)
            body.append(
                f"<tr{attrs}><td><span class=\"sev {f.severity.value}\">{f.severity.value}</span></td>"
                f"<td>{_e(f.family)}</td><td>{rule}</td><td class=\"msg\">{_e(f.message)}</td>"
                f"<td>{'<br>'.join(where)}</td><td class=\"n\">{_e(_num(f.measure)) if f.measure is not None else ''}</td>"
                f'<td class="where">{xy}</td></tr>' + more
            )
        return (
            filters
            + '<table id="findings"><thead><tr><th>severity</th><th>family</th><th>rule</th><th>message</th>'
            '<th>where</th><th class="n">measure</th><th>x, y</th></tr></thead><tbody>'
            + "".join(body)
            + "</tbody></table>"
        )

    def legend_section(self, m: MapDrawing) -> str:
        if self.project is None or ("legend" not in self.project.tables and not m.unit_counts):
            return "<p>The project has no legend table.</p>"
        rows = []
        legend_codes = set()
        for r in self.legend_rows:
            code = r["_code"]
            legend_codes.add(code)
            unit = self.styles.unit_for(code)
            if unit.source == "legend":
                tip = "the legend's colour"
            elif unit.source == "chart":
                tip = (f"no colour in the legend: the chart colour of the {unit.chart_unit}"
                       + (", in a lighter or darker shade to stand apart from a touching unit" if unit.shaded else ""))
            else:
                tip = "no colour or age in the legend: a palette colour, different from the touching units"
            sw = f'<span class="sw" style="background:{unit.fill}" title="{_e(tip)}"></span>'
            ages = ""
            lo, hi = r.get("min_age_ma"), r.get("max_age_ma")
            if _present(lo) or _present(hi):
                ages = f"{_e(lo if _present(lo) else '?')}–{_e(hi if _present(hi) else '?')} Ma"
            desc = r.get("description")
            rows.append(
                f"<tr><td>{sw}</td><td><b>{_e(code)}</b></td><td>{_e(r.get('name') or '')}"
                + (f'<div class="d">{_e(desc)}</div>' if _present(desc) else "")
                + f"</td><td>{_e(r.get('age') or '')}</td><td class=\"where\">{ages}</td>"
                f'<td>{_e(r.get("lithology") or "")}</td><td class="n">{_int(m.unit_counts.get(code, 0))}</td></tr>'
            )
        for code in sorted(set(m.unit_counts) - legend_codes):
            label = code or "(no unit code)"
            rows.append(
                f'<tr><td><span class="sw none"></span></td><td><b>{_e(label)}</b></td><td><i>not in the legend</i></td>'
                f'<td></td><td></td><td></td><td class="n">{_int(m.unit_counts[code])}</td></tr>'
            )
        total = sum(m.unit_counts.values())
        credit = []
        chart_units = self.styles.chart_units
        if chart_units:
            credit.append(
                f'<p class="credit">Colours of {_e(", ".join(chart_units))} (no colour in the legend): the official colour of '
                f"the unit's age on the {_e(self.chart.attribution)}; shades are marked in the swatch's tooltip.</p>"
            )
        palette = [r["_code"] for r in self.legend_rows if self.styles.unit_for(r["_code"]).source == "palette"]
        if palette:
            credit.append(
                f'<p class="credit">Colours of {_e(", ".join(palette))} (neither a colour nor a readable age in the legend): '
                "a qualitative palette (ColorBrewer Set3), touching units in colours far apart.</p>"
            )
        return (
            '<table class="legend"><thead><tr><th></th><th>unit</th><th>name</th><th>age</th><th>Ma</th><th>lithology</th>'
            '<th class="n">polygons</th></tr></thead><tbody>'
            + "".join(rows)
            + f'<tr><td></td><th colspan="5">all units</th><td class="n"><b>{_int(total)}</b></td></tr>'
            + "</tbody></table>"
            + "".join(credit)
        )

    def rules_section(self) -> str:
        r = self.report
        counts = Counter(f.rule for f in r.findings)
        ids = [x for x in self.rules if x in set(r.rules_run) or x in counts]
        out = [
            "<p>What each rule that ran checks, why it matters and how to fix what it finds. "
            "The same text is printed by <code>archivist rules RULE</code>.</p>"
        ]
        for rid in ids:
            info = self.rules[rid]
            n = counts.get(rid, 0)
            dl = "".join(f"<dt>{_e(name)}</dt><dd>{_code(text)}</dd>" for name, text in info.sections)
            out.append(
                f'<details class="rule" id="rule-{_e(rid)}"><summary><code>{_e(rid)}</code> — {_code(info.title)} '
                f'<span class="where">{_e(info.family)}, default {_e(info.severity.value)}; '
                f"{_e(_plural(n, 'finding')) if n else 'no findings'}</span></summary><dl>{dl}</dl></details>"
            )
        return "".join(out)



def rules_not_run(
    report: Report, rules: dict[str, registry.RuleInfo], project: MapProject | None
) -> tuple[list[str], list[str]]:
    """The registered rules that did not run, split in two: (could have run, had nothing to check).

    A rule could have run when every layer or table it ``needs`` is in the
    project and holds something (the engine's own test, ``engine.empty_layers``):
    it did not because it was switched off or the run was limited to other
    rules. The others had nothing to check (and the rules of archives need
    an audit). Without the project, a rule that needs anything counts as
    having had nothing to check.
    """
    ran = set(report.rules_run)
    notrun = [x for x in rules if x not in ran]
    if project is None:
        return [x for x in notrun if not rules[x].needs], [x for x in notrun if rules[x].needs]
    from ..engine import empty_layers

    empty = empty_layers(project)
    can = [x for x in notrun if all(project.has(role) and role not in empty for role in rules[x].needs)]
    return can, [x for x in notrun if x not in set(can)]


def _present(v) -> bool:
    if v is None:
        return False
    if isinstance(v, float) and math.isnan(v):
        return False
    return str(v).strip() != ""



def render_html(report: Report, project: MapProject | None = None, *, rules: Iterable[registry.RuleInfo] | None = None) -> str:
    """The report as one self-contained HTML page.

    Parameters
    ----------
    report
        The check's report: every count, measure and position on the page comes from it.
    project
        The checked :class:`~archivist.project.MapProject`; it gives the map's
        layers, the legend and the title. Without it the page has the summary,
        the findings (drawn on an empty frame) and the rule docs.
    rules
        The rule docs to include; by default every registered rule that ran or has findings.
    """
    infos = list(rules) if rules is not None else registry.all_rules()
    page = _Page(report, project, {i.id: i for i in infos})
    drawing = page.draw_map()
    title = project.name if project is not None else report.project
    # the map first on screen, the summary beside it (below it on a narrow screen)
    first = [("map", "Map", page.map_section(drawing)), ("summary", "Summary", page.summary())]
    sections = [
        ("not-covered", "What the checks do not cover", page.not_covered()),
        ("findings", "Findings", page.findings_section(drawing)),
        ("legend", "Legend", page.legend_section(drawing)),
        ("rules", "Rules", page.rules_section()),
    ]
    nav = " · ".join(f'<a href="#{sid}">{_e(name)}</a>' for sid, name, _ in first + sections)
    body = (
        '<div class="overview">'
        + "".join(f'<section id="{sid}"><h2>{_e(name)}</h2>{content}</section>' for sid, name, content in first)
        + "</div>"
        + "".join(f'<section id="{sid}"><h2>{_e(name)}</h2>{content}</section>' for sid, name, content in sections)
    )
    csp = "default-src 'none'; style-src 'unsafe-inline'; script-src 'unsafe-inline'; img-src data:"
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="generator" content="archivist {_e(__version__)}">'
        f"<title>{_e(title)}: archivist check report</title>"
        f"<style>\n{asset('report.css')}</style></head><body>"
        f'<header><h1>{_e(title)}</h1><p class="sub">archivist check report · <span class="noprint">{nav}</span></p></header>'
        f"<main>{body}</main>"
        f"<footer>Written by archivist {_e(report.version)}. This page is self-contained: it loads nothing from the network.</footer>"
        f"<script>\n{asset('report.js')}</script></body></html>\n"
    )


def write_html(report: Report, project: MapProject | None, target: Path) -> None:
    """Write :func:`render_html` to ``target`` atomically (temporary sibling, then rename)."""
    atomic_write_text(Path(target), render_html(report, project))
