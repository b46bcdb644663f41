"""HTML report: one self-contained page with a summary, a map, the findings and the rule docs.

The page needs no network: no web fonts, no scripts, styles or tiles from
elsewhere (a Content-Security-Policy in the page forbids them). The map is
SVG written here from the project's geometries:

* unit polygons filled with their legend colours, one ``<path>`` per polygon,
  grouped per unit;
* lines drawn by kind (contacts, faults, the map boundary) and certainty;
* samples as dots and structural measurements as strike-and-dip symbols;
* every finding with a location as a marker coloured by severity, and its
  geometry (an overlap, a gap, a dangling line) drawn unsimplified on top.

Display geometry is simplified (``shapely.coverage_simplify`` keeps shared
edges shared) to 1/20 000 of the map's width and written as integers on that
grid with relative path commands, so a map of 10^5 polygons stays a page a
browser opens in seconds. All of that is formatting: every number the page
states (counts, measures, positions) comes from the report or the project.
"""

from __future__ import annotations

import html
import json
import math
import re
import zlib
from collections import Counter
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Iterable

import numpy as np
import pandas as pd
import shapely

from .. import registry
from .._version import __version__
from ..fsutil import atomic_write_text
from ..model import Report, Severity
from ..readers import as_text
from ..vocab import legend as legend_vocab
from .text import CAUTION

SEVERITY_COLOUR = {"error": "#c62828", "warning": "#e08600", "notice": "#1565c0"}
GRID_STEPS = 20000  # display grid: the map's larger side in this many steps
FINDING_GRID = 100  # findings are drawn on a grid this many times finer
ROWS_PER_RULE = 1000  # findings of one rule listed one by one; more are counted and drawn as dots
SIMPLIFY_BELOW = 10
COVERAGE_VERTICES = 500_000  # above this, polygons are simplified one by one (coverage simplification is slow)  # simplify units only when their mean segment is shorter than this many grid steps
HEX = re.compile(r"^#?([0-9a-fA-F]{3}|[0-9a-fA-F]{6})$")
LINEAR_KINDS = ("lineation", "fold axis", "fold-axis", "fold hinge", "trend")


def _e(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _int(n: int) -> str:
    """1234567 -> '1 234 567' (narrow no-break spaces, as on a map sheet)."""
    return f"{n:,}".replace(",", "\u202f")


def _num(v: float | None) -> str:
    """A measure for reading: 12 345, 123, 12.3, 1.23, 0.012."""
    if v is None:
        return ""
    a = abs(v)
    if a >= 1000:
        return _int(int(round(v)))
    if a >= 100:
        return f"{v:.0f}"
    return f"{v:.3g}" if a >= 1 else f"{v:.2g}"


def _plural(n: int, word: str) -> str:
    return f"{_int(n)} {word}{'' if n == 1 else 's'}"


def _code(text: str) -> str:
    """Escape a doc string and turn `backticks` into <code>."""
    return re.sub(r"`([^`]+)`", r"<code>\1</code>", _e(text))


def _colour(value) -> str | None:
    m = HEX.match(str(value or "").strip())
    if not m:
        return None
    h = m.group(1)
    if len(h) == 3:
        h = "".join(c * 2 for c in h)
    return "#" + h.upper()


def _generated_colour(code: str) -> str:
    """A stable pale colour for a unit the legend gives none."""
    hue = zlib.crc32(code.encode("utf-8")) % 360
    return f"hsl({hue},45%,78%)"


# ------------------------------------------------------------------ geometry to SVG


@dataclass
class Frame:
    """Map coordinates to the page's local SVG units.

    Local ``X = (x - x0) * kx``, ``Y = y1 - y``: map units with y pointing
    down and an origin at the top left; ``kx`` squeezes longitude by the
    cosine of the latitude for a geographic CRS (1 otherwise). Paths are
    written as integers on a grid of ``q`` local units.
    """

    x0: float
    y1: float
    kx: float
    width: float
    height: float
    q: float
    metres_per_unit: float
    mm: float  # local units per millimetre of the printed map

    def local(self, x, y):
        return (np.asarray(x, dtype=float) - self.x0) * self.kx, self.y1 - np.asarray(y, dtype=float)

    def grid(self, xy: np.ndarray, q: float) -> tuple[np.ndarray, np.ndarray]:
        X, Y = self.local(xy[:, 0], xy[:, 1])
        return np.rint(X / q).astype(np.int64), np.rint(Y / q).astype(np.int64)


def _frame(bounds: list[np.ndarray], project) -> Frame | None:
    b = [x for x in bounds if x is not None and np.all(np.isfinite(x))]
    if not b:
        return None
    arr = np.array(b, dtype=float)
    minx, miny = arr[:, 0].min(), arr[:, 1].min()
    maxx, maxy = arr[:, 2].max(), arr[:, 3].max()
    crs = getattr(project, "crs", None)
    kx, metres = 1.0, 1.0
    if crs is not None and crs.is_geographic:
        kx = max(math.cos(math.radians((miny + maxy) / 2)), 0.05)
        metres = 111_320.0
    elif crs is not None and crs.axis_info and crs.axis_info[0].unit_conversion_factor:
        metres = float(crs.axis_info[0].unit_conversion_factor)
    scale = float(getattr(getattr(project, "config", None), "scale", 25000.0) or 25000.0)
    mm = scale / 1000.0 / metres  # map units per printed millimetre
    w, h = (maxx - minx) * kx, maxy - miny
    least = 20 * mm  # a frame at least 2 cm of the printed map across
    if w < least:
        minx -= (least - w) / 2 / kx
        w = least
    if h < least:
        maxy += (least - h) / 2
        h = least
    pad = 0.03 * max(w, h)
    x0 = minx - pad / kx
    y1 = maxy + pad
    width, height = w + 2 * pad, h + 2 * pad
    return Frame(x0, y1, kx, width, height, max(width, height) / GRID_STEPS, metres, mm)


_LUT_N = 2 * GRID_STEPS + 16
_LEADS = np.array(["M", "l", " ", ""], dtype=object)
_LEAD_LEN = np.array([1, 1, 1, 0])


@lru_cache(maxsize=1)
def _int_lut() -> tuple[np.ndarray, np.ndarray]:
    """The text of every integer in [-_LUT_N, _LUT_N], and its length: int -> str by indexing."""
    text = np.array([str(v) for v in range(-_LUT_N, _LUT_N + 1)], dtype=object)
    return text, np.array([len(t) for t in text])


def _ints_as_text(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if len(v) == 0 or np.abs(v).max() <= _LUT_N:
        text, length = _int_lut()
        return text[v + _LUT_N], length[v + _LUT_N]
    t = v.astype(str)
    return t.astype(object), np.char.str_len(t)


def _encode(geoms: np.ndarray, frame: Frame, q: float, closed: bool):
    """Path data of all geometries as one string, with the end offset and owning geometry of each vertex.

    Vectorised: one pass of shapely over all parts, rings and vertices, and
    integers turned to text by table look-up. Vertices that fall on the same
    grid point as the one before are dropped, and so are rings that collapse
    below 3 points (polygons) or 2 points (lines) at this grid.
    """
    geoms = np.asarray(geoms, dtype=object)
    empty = ("", np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=bool))
    if len(geoms) == 0:
        return empty
    parts, gi = shapely.get_parts(geoms, return_index=True)
    types = shapely.get_type_id(parts)
    if closed:
        keep = types == 3
        parts, gi = parts[keep], gi[keep]
        rings, pi = shapely.get_rings(parts, return_index=True)
        gi = gi[pi]
    else:
        keep = (types == 1) | (types == 2)
        rings, gi = parts[keep], gi[keep]
    if len(rings) == 0:
        return empty
    xy, ri = shapely.get_coordinates(rings, return_index=True)
    if len(xy) == 0:
        return empty
    X, Y = frame.grid(xy, q)
    new_ring = np.r_[True, ri[1:] != ri[:-1]]
    last = np.r_[ri[1:] != ri[:-1], True]
    keep = ~(~new_ring & (X == np.r_[0, X[:-1]]) & (Y == np.r_[0, Y[:-1]]))
    if closed:
        keep &= ~last
    X, Y, ri = X[keep], Y[keep], ri[keep]
    if len(ri) == 0:
        return empty
    _, counts = np.unique(ri, return_counts=True)
    big_enough = np.repeat(counts >= (3 if closed else 2), counts)
    X, Y, ri = X[big_enough], Y[big_enough], ri[big_enough]
    if len(ri) == 0:
        return empty
    first = np.r_[True, ri[1:] != ri[:-1]]
    last = np.r_[ri[1:] != ri[:-1], True]
    second = np.r_[False, first[:-1]]
    dX = np.where(first, X, X - np.r_[0, X[:-1]])
    dY = np.where(first, Y, Y - np.r_[0, Y[:-1]])
    lead = np.where(first, 0, np.where(second, 1, np.where(dX < 0, 3, 2)))
    sx, lx = _ints_as_text(dX)
    sy, ly = _ints_as_text(dY)
    mid = dY >= 0
    table = np.empty((len(dX), 5), dtype=object)
    table[:, 0] = _LEADS[lead]
    table[:, 1] = sx
    table[:, 2] = np.where(mid, " ", "").astype(object)
    table[:, 3] = sy
    table[:, 4] = np.where(last & closed, "z", "").astype(object)
    ends = np.cumsum(_LEAD_LEN[lead] + lx + mid + ly + (last & closed))
    return "".join(table.ravel().tolist()), ends, gi[ri], first


def path_data(geoms: np.ndarray, frame: Frame, q: float, *, closed: bool) -> list[str]:
    """SVG path data (``M``, relative ``l``, ``z``) of each geometry, on a grid of ``q`` local units."""
    out = [""] * len(geoms)
    big, ends, owner, _ = _encode(geoms, frame, q, closed)
    if not big:
        return out
    change = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    starts = np.r_[0, ends[change[1:] - 1]]
    stops = np.r_[ends[change[1:] - 1], ends[-1]]
    for g, a, b in zip(owner[change].tolist(), starts.tolist(), stops.tolist()):
        out[g] = big[a:b]
    return out


def path_data_joined(geoms: np.ndarray, frame: Frame, q: float, *, closed: bool) -> tuple[str, np.ndarray]:
    """The path data of all geometries in one string, and how many rings of each geometry it holds."""
    big, _, owner, first = _encode(geoms, frame, q, closed)
    return big, np.bincount(owner[first], minlength=len(geoms))


def dots(x: np.ndarray, y: np.ndarray, frame: Frame, q: float) -> list[str]:
    """``M x y h0`` per point: drawn as a dot by a round-capped stroke."""
    ok = np.isfinite(x) & np.isfinite(y)
    X, Y = frame.grid(np.c_[np.where(ok, x, frame.x0), np.where(ok, y, frame.y1)], q)
    return [f"M{a} {b}h0" if k else "" for a, b, k in zip(X.tolist(), Y.tolist(), ok.tolist())]


def _display_crs(layer, project):
    """The layer's geometries in the map CRS (reprojected for display when they differ)."""
    frame = layer.frame
    note = None
    if project.crs is not None and frame.crs is not None and not frame.crs.equals(project.crs):
        try:
            frame = frame.to_crs(project.crs)
            note = f"{layer.source} is drawn after reprojection from {layer.frame.crs.name} to the map CRS."
        except Exception:  # noqa: BLE001 - a CRS pyproj cannot convert: draw as stored
            note = f"{layer.source} could not be reprojected to the map CRS and is drawn as stored."
    return np.asarray(frame.geometry.array, dtype=object), note


def _simplify_units(geoms: np.ndarray, tolerance: float) -> tuple[np.ndarray | None, str | None]:
    """Unit polygons simplified for display, and how: ``"coverage"``, ``"polygon"`` or None (not needed).

    Segments already longer than a few grid steps lose nothing visible, so
    then nothing is done. A valid coverage of up to
    :data:`COVERAGE_VERTICES` vertices is simplified as a coverage (shared
    edges stay shared); a larger or broken one polygon by polygon
    (Douglas-Peucker), which is many times faster, at the cost of shared
    edges that may part by up to the tolerance when zoomed far in.
    """
    geoms = geoms.copy()
    ok = ~shapely.is_missing(geoms)
    ok[ok] = ~shapely.is_empty(geoms[ok]) & np.isin(shapely.get_type_id(geoms[ok]), (3, 6))
    if not ok.any():
        return None, None
    sub = geoms[ok]
    vertices = int(shapely.get_num_coordinates(sub).sum())
    if float(shapely.length(sub).sum()) / max(vertices, 1) > SIMPLIFY_BELOW * tolerance:
        return None, None
    if vertices <= COVERAGE_VERTICES and shapely.is_valid(sub).all():
        try:
            geoms[ok] = shapely.coverage_simplify(sub, tolerance)
            return geoms, "coverage"
        except shapely.errors.GEOSException:
            pass
    geoms[ok] = shapely.simplify(sub, tolerance, preserve_topology=False)
    return geoms, "polygon"


def _simplify_lines(geoms: np.ndarray, tolerance: float) -> np.ndarray:
    """Lines simplified for display, unless their segments are already longer than the display needs."""
    ok = ~shapely.is_missing(geoms)
    if not ok.any():
        return geoms
    mean_segment = float(shapely.length(geoms[ok]).sum()) / max(int(shapely.get_num_coordinates(geoms[ok]).sum()), 1)
    if mean_segment > SIMPLIFY_BELOW * tolerance:
        return geoms
    return shapely.simplify(geoms, tolerance, preserve_topology=False)


# ------------------------------------------------------------------ the page

CSS = """
:root{--err:#c62828;--warn:#e08600;--note:#1565c0;--ink:#1d2327;--muted:#5f6b73;--rule:#d5dade;--bg:#f6f7f8}
*{box-sizing:border-box}
body{margin:0;font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;color:var(--ink);background:#fff}
header,main>section{max-width:1400px;margin:0 auto;padding:0 20px}
header{padding-top:18px}
h1{font-size:1.55em;margin:.2em 0 .1em}
h2{font-size:1.2em;margin:1.4em 0 .5em;border-bottom:1px solid var(--rule);padding-bottom:.2em}
.sub{color:var(--muted);margin:0 0 .6em}
dl.meta{display:grid;grid-template-columns:max-content 1fr;gap:.15em 1em;margin:.6em 0}
dl.meta dt{color:var(--muted)}dl.meta dd{margin:0}
.status{display:inline-block;padding:.35em .8em;border-radius:4px;font-weight:600;margin:.4em 0}
.status.ok{background:#e3f3e5;color:#1b5e20}.status.bad{background:#fde7e7;color:#8e1515}.status.meh{background:#fff2dc;color:#7a4a00}
table{border-collapse:collapse}
th,td{padding:.25em .6em;border-bottom:1px solid var(--rule);text-align:left;vertical-align:top}
th{background:var(--bg);font-weight:600}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}
.sev{display:inline-block;min-width:4.7em;padding:0 .4em;border-radius:3px;color:#fff;font-size:.85em;text-align:center}
.sev.error{background:var(--err)}.sev.warning{background:var(--warn)}.sev.notice{background:var(--note)}
.caution{border-left:4px solid var(--warn);background:#fffaf0;padding:.6em .9em;margin:.8em 0}
.notes li{color:var(--muted)}
#mapbox{position:relative;border:1px solid var(--rule);background:#fbfbf8;height:72vh;min-height:360px;overflow:hidden}
#geomap{width:100%;height:100%;display:block;cursor:grab;touch-action:none}
#geomap.drag{cursor:grabbing}
#geomap .units path{stroke:#3a3a3a;stroke-opacity:.35;stroke-width:.5px;vector-effect:non-scaling-stroke}
#geomap .lines,#geomap .extent,#geomap .struct,#geomap .samples{pointer-events:none}
#geomap .lines path,#geomap .extent path,#geomap .struct path{fill:none;vector-effect:non-scaling-stroke;stroke-linecap:round;stroke-linejoin:round}
#geomap .extent path{stroke:#000;stroke-width:1.6px}
#geomap .samples path{stroke:#111;stroke-width:6px;stroke-linecap:round;vector-effect:non-scaling-stroke}
#geomap .samples path.inner{stroke:#fff;stroke-width:2.5px}
#geomap .struct path{stroke:#222;stroke-width:1.3px}
#geomap .fg path{vector-effect:non-scaling-stroke;stroke-width:2px;fill-opacity:.28}
#geomap .fm path{stroke-width:11px;stroke-linecap:round;vector-effect:non-scaling-stroke;stroke-opacity:.9;cursor:pointer}
#geomap .s-error{stroke:var(--err);fill:var(--err)}#geomap .s-warning{stroke:var(--warn);fill:var(--warn)}#geomap .s-notice{stroke:var(--note);fill:var(--note)}
#geomap .fg .ln{fill:none}
#geomap .fm path.sel{stroke:#000;stroke-width:17px}
#geomap .off{display:none}
.tools{position:absolute;top:8px;left:8px;display:flex;flex-direction:column;gap:4px}
.tools button{width:32px;height:32px;font-size:18px;line-height:1;border:1px solid #999;background:#fff;border-radius:4px;cursor:pointer}
#scalebar{position:absolute;left:10px;bottom:10px;background:rgba(255,255,255,.85);padding:2px 6px;font-size:12px}
#scalebar span{display:block;height:6px;border:2px solid #000;border-top:none}
#coords{position:absolute;right:10px;bottom:10px;background:rgba(255,255,255,.85);padding:2px 6px;font-size:12px;font-variant-numeric:tabular-nums}
#info{min-height:1.6em;margin:.4em 0;color:var(--muted)}
.caption{color:var(--muted);font-size:.9em}
.keyrow{display:flex;flex-wrap:wrap;gap:.3em 1.4em;margin:.5em 0;font-size:.9em}
.keyrow svg{vertical-align:middle}
.filters{display:flex;flex-wrap:wrap;gap:.6em 1.2em;align-items:center;margin:.5em 0}
.filters label{color:var(--muted)}
#findings{width:100%}
#findings tbody tr.loc{cursor:pointer}
#findings tbody tr.loc:hover{background:#f1f6fb}
#findings tbody tr.sel{background:#fff4c2}
#findings td.msg{max-width:48em}
.where{color:var(--muted);font-size:.85em;white-space:nowrap}
.sw{display:inline-block;width:2.6em;height:1.5em;border:1px solid #555;vertical-align:middle;print-color-adjust:exact;-webkit-print-color-adjust:exact}
.sw.none{background:repeating-linear-gradient(45deg,#ddd 0 4px,#fff 4px 8px)}
.legend td.d{color:var(--muted);font-size:.9em;max-width:40em}
details.rule{border:1px solid var(--rule);border-radius:4px;margin:.4em 0;padding:.3em .8em}
details.rule[open]{background:#fcfcfd}
details.rule summary{cursor:pointer}
details.rule dl{margin:.4em 0 .6em}details.rule dt{font-weight:600;margin-top:.4em}details.rule dd{margin:0 0 0 1em}
code{font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:.92em;background:#f1f3f4;padding:0 .2em;border-radius:2px}
footer{max-width:1400px;margin:2em auto;padding:0 20px;color:var(--muted);font-size:.85em}
@media print{
 body{font-size:10pt}
 .tools,.filters,#coords,#info,.noprint{display:none!important}
 #mapbox{height:auto;border:1px solid #000;break-inside:avoid}
 #geomap{height:auto;aspect-ratio:var(--aspect)}
 #geomap,.sev,#geomap *{print-color-adjust:exact;-webkit-print-color-adjust:exact}
 header,main>section{max-width:none;padding:0}
 a{color:inherit;text-decoration:none}
 tr{break-inside:avoid}
 h2{break-after:avoid}
 #findings tbody tr{cursor:auto}
 details.rule{border:none;padding:0}
}
"""

JS = r"""
(function(){
"use strict";
var svg=document.getElementById("geomap");
var rows=Array.prototype.slice.call(document.querySelectorAll("#findings tbody tr[data-k]"));
var moreRows=Array.prototype.slice.call(document.querySelectorAll("#findings tbody tr.more"));
var bulk=Array.prototype.slice.call(document.querySelectorAll("#geomap .fm path.bulk"));
var markers={},shapes={};
function fmt(v,d){return v.toLocaleString("en-GB",{maximumFractionDigits:d,minimumFractionDigits:d}).replace(/,/g,"\u202f");}
if(svg){
  var d=svg.dataset,full=d.full.split(" ").map(Number),vb=full.slice();
  var x0=+d.x0,y1=+d.y1,kx=+d.kx,mpu=+d.mpu,minW=+d.minw;
  var info=document.getElementById("info"),coords=document.getElementById("coords"),bar=document.getElementById("scalebar");
  var unitNames=JSON.parse(document.getElementById("unit-names").textContent);
  var fids=JSON.parse(document.getElementById("unit-ids").textContent);
  var frings=JSON.parse(document.getElementById("unit-rings").textContent);
  var unitsG=svg.querySelector(".units"),uq=unitsG?unitsG.transform.baseVal.consolidate().matrix.a:1;
  Array.prototype.forEach.call(svg.querySelectorAll(".fm path[data-k]"),function(p){markers[p.dataset.k]=p;});
  Array.prototype.forEach.call(svg.querySelectorAll(".fg path"),function(p){shapes[p.dataset.k]=p;});
  var pending=false;
  function apply(){
    if(pending)return;pending=true;
    requestAnimationFrame(function(){pending=false;
      svg.setAttribute("viewBox",vb.map(function(v){return +v.toFixed(4);}).join(" "));scale();});
  }
  function unitsPerPx(){var r=svg.getBoundingClientRect();return Math.max(vb[2]/Math.max(r.width,1),vb[3]/Math.max(r.height,1));}
  function scale(){
    var m=unitsPerPx()*mpu*110,p=Math.pow(10,Math.floor(Math.log10(m))),n=m/p,s=(n>=5?5:n>=2?2:1)*p;
    var px=s/(unitsPerPx()*mpu);
    bar.innerHTML=(s>=1000?fmt(s/1000,s%1000?1:0)+" km":fmt(s,s<1?2:0)+" m")+'<span style="width:'+px.toFixed(0)+'px"></span>';
  }
  function toLocal(e){var pt=svg.createSVGPoint();pt.x=e.clientX;pt.y=e.clientY;return pt.matrixTransform(svg.getScreenCTM().inverse());}
  function zoomAt(cx,cy,f){
    var w=Math.min(full[2]*3,Math.max(vb[2]*f,minW)),k=w/vb[2];
    vb=[cx-(cx-vb[0])*k,cy-(cy-vb[1])*k,w,vb[3]*k];apply();
  }
  function zoomTo(b){
    var r=svg.getBoundingClientRect(),asp=r.height/Math.max(r.width,1);
    var cx=(b[0]+b[2])/2,cy=(b[1]+b[3])/2;
    var w=Math.max((b[2]-b[0])*2.5,(b[3]-b[1])*2.5/asp,minW*4);
    vb=[cx-w/2,cy-w*asp/2,w,w*asp];apply();
  }
  window.archivistZoomTo=zoomTo;
  function reset(){vb=full.slice();apply();}
  svg.addEventListener("wheel",function(e){e.preventDefault();var p=toLocal(e);zoomAt(p.x,p.y,Math.pow(1.0016,e.deltaY*(e.deltaMode?30:1)));},{passive:false});
  var drag=null;
  svg.addEventListener("pointerdown",function(e){if(e.button!==0)return;drag={x:e.clientX,y:e.clientY,vb:vb.slice(),moved:false};svg.setPointerCapture(e.pointerId);});
  svg.addEventListener("pointermove",function(e){
    var p=toLocal(e);coords.textContent=fmt(x0+p.x/kx,kx===1?1:5)+"  "+fmt(y1-p.y,kx===1?1:5);
    if(!drag)return;var dx=e.clientX-drag.x,dy=e.clientY-drag.y;
    if(!drag.moved&&Math.abs(dx)+Math.abs(dy)<4)return;
    drag.moved=true;svg.classList.add("drag");var u=unitsPerPx();
    vb=[drag.vb[0]-dx*u,drag.vb[1]-dy*u,vb[2],vb[3]];apply();});
  svg.addEventListener("pointerup",function(e){var was=drag;drag=null;svg.classList.remove("drag");if(was&&!was.moved)identify(e);});
  svg.addEventListener("dblclick",function(e){var p=toLocal(e);zoomAt(p.x,p.y,0.5);});
  svg.addEventListener("keydown",function(e){
    var c=[vb[0]+vb[2]/2,vb[1]+vb[3]/2],s=vb[2]*0.15;
    if(e.key==="+"||e.key==="=")zoomAt(c[0],c[1],0.67);else if(e.key==="-")zoomAt(c[0],c[1],1.5);
    else if(e.key==="0")reset();else if(e.key==="ArrowLeft"){vb[0]-=s;apply();}else if(e.key==="ArrowRight"){vb[0]+=s;apply();}
    else if(e.key==="ArrowUp"){vb[1]-=s;apply();}else if(e.key==="ArrowDown"){vb[1]+=s;apply();}else return;
    e.preventDefault();});
  document.getElementById("zin").onclick=function(){zoomAt(vb[0]+vb[2]/2,vb[1]+vb[3]/2,0.5);};
  document.getElementById("zout").onclick=function(){zoomAt(vb[0]+vb[2]/2,vb[1]+vb[3]/2,2);};
  document.getElementById("zfull").onclick=reset;
  function identify(e){
    var t=document.elementFromPoint(e.clientX,e.clientY);if(!t)return;
    var g=t.parentNode;
    if(g&&g.classList&&g.classList.contains("fg")){select(t.dataset.k,true);return;}
    if(g&&g.classList&&g.classList.contains("fm")){
      if(t.dataset.k!==undefined)select(t.dataset.k,true);
      else info.textContent=t.dataset.n+" "+t.dataset.rule+" findings not listed one by one (see the table).";
      return;}
    if(t.dataset&&t.dataset.unit!==undefined){
      var p=toLocal(e),u=t.dataset.unit,gi=+t.dataset.g;
      var k=featureAt(t.getAttribute("d"),p.x/uq,p.y/uq,frings[gi]);
      info.textContent="Unit "+u+(unitNames[u]?" \u2014 "+unitNames[u]:"")+(k>=0?"; feature "+fids[gi][k]:"")+".";
    }
  }
  // Which polygon of a unit's path holds the point: ray casting over its rings (even-odd per polygon).
  function featureAt(d,gx,gy,rings){
    var re=/[Mlz]|-?\d+/g,m,cmd="",nums=[],x=0,y=0,sx=0,sy=0,parity=0,feat=0,left=rings?rings[0]:1,open=false;
    function edge(ax,ay,bx,by){if((ay>gy)!==(by>gy)&&gx<(bx-ax)*(gy-ay)/(by-ay)+ax)parity^=1;}
    function close(){if(!open)return false;edge(x,y,sx,sy);open=false;left--;
      if(left===0){if(parity)return true;feat++;parity=0;left=rings?rings[feat]:1;}return false;}
    while((m=re.exec(d))!==null){
      var tok=m[0];
      if(tok==="M"||tok==="l"||tok==="z"){
        if(tok==="z"){if(close())return feat;}
        else if(tok==="M"){if(close())return feat;}
        cmd=tok;nums=[];continue;}
      nums.push(+tok);
      if(nums.length===2){
        if(cmd==="M"){x=sx=nums[0];y=sy=nums[1];open=true;}
        else{var nx=x+nums[0],ny=y+nums[1];edge(x,y,nx,ny);x=nx;y=ny;}
        nums=[];}
    }
    if(close())return feat;
    return -1;
  }
  window.addEventListener("resize",apply);
  apply();
}
function select(k,fromMap){
  rows.forEach(function(r){r.classList.toggle("sel",r.dataset.k===k);});
  Object.keys(markers).forEach(function(m){markers[m].classList.toggle("sel",m===k);});
  var tr=document.querySelector('#findings tbody tr[data-k="'+k+'"]');
  if(tr&&svg){document.getElementById("info").textContent=tr.dataset.rule+": "+tr.querySelector(".msg").textContent;}
  if(fromMap&&tr){tr.scrollIntoView({block:"nearest"});}
}
var tbody=document.querySelector("#findings tbody");
function go(tr){
  if(!tr||!tr.dataset.box||!svg)return;
  select(tr.dataset.k,false);
  window.archivistZoomTo(tr.dataset.box.split(" ").map(Number));
  document.getElementById("mapbox").scrollIntoView({block:"nearest"});
}
if(tbody){
  tbody.addEventListener("click",function(e){if(e.target.closest("a"))return;go(e.target.closest("tr"));});
  tbody.addEventListener("keydown",function(e){if(e.key==="Enter"&&!e.target.closest("a"))go(e.target.closest("tr"));});
}
var fFam=document.getElementById("f-family"),fSev=document.getElementById("f-severity"),fRule=document.getElementById("f-rule"),fText=document.getElementById("f-text"),shown=document.getElementById("shown");
function filter(){
  var fam=fFam.value,sev=fSev.value,rule=fRule.value,txt=fText.value.trim().toLowerCase(),n=0;
  rows.forEach(function(r){
    var ok=(!fam||r.dataset.family===fam)&&(!sev||r.dataset.severity===sev)&&(!rule||r.dataset.rule===rule)&&(!txt||r.textContent.toLowerCase().indexOf(txt)>=0);
    r.hidden=!ok;if(ok)n++;
    var m=markers[r.dataset.k],s=shapes[r.dataset.k];
    if(m)m.classList.toggle("off",!ok);if(s)s.classList.toggle("off",!ok);
  });
  function keep(el,sevs){return (!fam||el.dataset.family===fam)&&(!sev||sevs.indexOf(sev)>=0)&&(!rule||el.dataset.rule===rule)&&!txt;}
  moreRows.forEach(function(r){r.hidden=!keep(r,r.dataset.severities.split(" "));});
  bulk.forEach(function(p){p.classList.toggle("off",!keep(p,[p.dataset.severity]));});
  shown.textContent=n===rows.length?"all "+rows.length+" listed":n+" of "+rows.length+" listed";
}
if(fFam){[fFam,fSev,fRule].forEach(function(s){s.addEventListener("change",filter);});fText.addEventListener("input",filter);filter();}
function openRule(){var h=decodeURIComponent(location.hash.slice(1));if(h.indexOf("rule-")===0){var d=document.getElementById(h);if(d)d.open=true;}}
window.addEventListener("hashchange",openRule);openRule();
var opened=[];
window.addEventListener("beforeprint",function(){opened=[];document.querySelectorAll("details.rule").forEach(function(d){if(!d.open){d.open=true;opened.push(d);}});});
window.addEventListener("afterprint",function(){opened.forEach(function(d){d.open=false;});});
})();
"""


@dataclass
class _Unit:
    code: str
    cls: str
    colour: str | None  # legend colour, or None
    fill: str


class _Page:
    def __init__(self, report: Report, project, rules: dict[str, registry.RuleInfo]):
        self.report = report
        self.project = project
        self.rules = rules
        self.notes: list[str] = []  # display notes under the map
        self.frame: Frame | None = None
        self.units: dict[str, _Unit] = {}
        self.unit_counts: Counter = Counter()
        self.legend_rows: list[dict] = []
        self.boxes: dict[int, str] = {}
        self.unit_ids: list[list[str]] = []
        self.unit_rings: list[list[int] | None] = []
        self._read_legend()
        # the first ROWS_PER_RULE findings of each rule are shown one by one; the rest are counted and dotted
        seen: Counter = Counter()
        self.detailed = np.zeros(len(report.findings), dtype=bool)
        for i, f in enumerate(report.findings):
            seen[f.rule] += 1
            self.detailed[i] = seen[f.rule] <= ROWS_PER_RULE
        self.rule_counts = seen
        self.finding_geoms = np.full(len(report.findings), None, dtype=object)
        idx = [i for i, f in enumerate(report.findings) if f.wkt and self.detailed[i]]
        if idx:
            wkts = np.array([report.findings[i].wkt for i in idx], dtype=object)
            self.finding_geoms[idx] = shapely.from_wkt(wkts, on_invalid="ignore")

    # --- legend ---------------------------------------------------------
    def _read_legend(self) -> None:
        p = self.project
        table = p.tables.get("legend") if p is not None else None
        if table is None:
            return
        if legend_vocab.column(table, "unit") is None:
            return
        records = legend_vocab.records(table)  # keyed "unit", "name", "colour"... whatever the headers
        rows = [records[i] for i in legend_vocab.display_order(table)]
        seen = set()
        for r in rows:
            code = "" if r.get("unit") is None else str(r.get("unit")).strip()
            if not code or code in seen:
                continue
            seen.add(code)
            self.legend_rows.append({**r, "_code": code})

    def unit_for(self, code: str) -> _Unit:
        if code not in self.units:
            legend = next((r for r in self.legend_rows if r["_code"] == code), None)
            colour = _colour(legend.get("colour")) if legend else None
            fill = colour or (_generated_colour(code) if legend else "url(#nolegend)")
            self.units[code] = _Unit(code, f"u{len(self.units)}", colour, fill)
        return self.units[code]

    # --- map ------------------------------------------------------------
    def map_svg(self) -> str:
        p = self.project
        layers = {}
        bounds = []
        if p is not None:
            for role in ("units", "extent", "lines", "samples", "structures"):
                lay = p.layers.get(role)
                if lay is None or len(lay.frame) == 0:
                    continue
                geoms, note = _display_crs(lay, p)
                if note:
                    self.notes.append(note)
                layers[role] = (lay, geoms)
                present = geoms[~shapely.is_missing(geoms)]
                present = present[~shapely.is_empty(present)]
                if len(present):
                    b = shapely.total_bounds(present)
                    if np.all(np.isfinite(b)):
                        bounds.append(b)
        fx = np.array([f.x if f.x is not None else np.nan for f in self.report.findings], dtype=float)
        fy = np.array([f.y if f.y is not None else np.nan for f in self.report.findings], dtype=float)
        ok = np.isfinite(fx) & np.isfinite(fy)
        if ok.any():
            bounds.append(np.array([fx[ok].min(), fy[ok].min(), fx[ok].max(), fy[ok].max()]))
        self.frame = fr = _frame(bounds, p)
        if fr is None:
            return ""
        parts = []
        q = fr.q
        # units
        if "units" in layers:
            lay, geoms = layers["units"]
            codes = _labels(lay, "unit_field")
            if codes is None:
                codes = np.full(len(geoms), "", dtype=object)
                self.notes.append(f"{lay.source} has no unit field: its polygons are drawn without colour.")
            self.unit_counts = Counter(codes.tolist())
            simple, self.simplified = _simplify_units(geoms, q)
            shown = geoms if simple is None else simple
            # One path per unit (a browser draws 10 paths far faster than 10^5). Clicking finds the
            # polygon again: unit_ids[g] lists the feature ids of group g in the order of their
            # subpaths, unit_rings[g] how many rings (subpaths) each has, or null when all have one.
            # Polygons too small to draw at the display grid are left out.
            order = np.argsort(codes, kind="stable")
            ocodes = codes[order]
            self.unit_ids, self.unit_rings = [], []
            parts.append(f'<g class="units" transform="scale({q:.9g})">')
            for code in sorted(set(codes.tolist())):
                unit = self.unit_for(code)
                sel = order[ocodes == code]
                body, rings = path_data_joined(shown[sel], fr, q, closed=True)
                if not body:
                    continue
                drawn = rings > 0
                self.unit_ids.append(lay.ids[sel[drawn]].tolist())
                self.unit_rings.append(rings[drawn].tolist() if (rings[drawn] != 1).any() else None)
                parts.append(
                    f'<path class="{unit.cls}" data-unit="{_e(code)}" data-g="{len(self.unit_ids) - 1}" '
                    f'style="fill:{unit.fill}" d="{body}"/>'
                )
            parts.append("</g>")
        # extent
        if "extent" in layers:
            lay, geoms = layers["extent"]
            boundary = shapely.boundary(geoms[~shapely.is_missing(geoms)])
            d = "".join(path_data(boundary, fr, q, closed=False))
            if d:
                parts.append(f'<g class="extent" transform="scale({q:.9g})"><path d="{d}"><title>map extent</title></path></g>')
        # lines
        self.line_key: list[tuple[str, str, str, int]] = []
        if "lines" in layers:
            parts.append(self._lines_svg(*layers["lines"]))
        if "structures" in layers:
            parts.append(self._structures_svg(*layers["structures"]))
        if "samples" in layers:
            lay, geoms = layers["samples"]
            pts = shapely.point_on_surface(geoms[~shapely.is_missing(geoms)])
            xy = shapely.get_coordinates(pts)
            d = "".join(dots(xy[:, 0], xy[:, 1], fr, q))
            if d:
                self.samples_n = len(xy)
                parts.append(
                    f'<g class="samples" transform="scale({q:.9g})"><title>{_e(_plural(len(xy), "sample"))}</title>'
                    f'<path d="{d}"/><path class="inner" d="{d}"/></g>'
                )
        parts.append(self._findings_svg(fx, fy))
        aspect = fr.width / fr.height
        defs = (
            '<defs><pattern id="nolegend" width="8" height="8" patternUnits="userSpaceOnUse" patternTransform="rotate(45)">'
            '<rect width="8" height="8" fill="#eee"/><rect width="3" height="8" fill="#bbb"/></pattern></defs>'
        )
        # the hatch pattern is in local units; make it a few pixels at full view
        pat = fr.width / 300
        defs = defs.replace('width="8" height="8" patternUnits', f'width="{pat:.6g}" height="{pat:.6g}" patternUnits')
        defs = defs.replace('<rect width="8" height="8"', f'<rect width="{pat:.6g}" height="{pat:.6g}"')
        defs = defs.replace('<rect width="3" height="8"', f'<rect width="{pat * 0.4:.6g}" height="{pat:.6g}"')
        full = f"0 0 {fr.width:.4f} {fr.height:.4f}"
        return (
            f'<svg id="geomap" role="img" aria-label="Map of the project with its findings" tabindex="0" '
            f'viewBox="{full}" preserveAspectRatio="xMidYMid meet" style="--aspect:{aspect:.5f}" '
            f'data-full="{full}" data-x0="{float(fr.x0)!r}" data-y1="{float(fr.y1)!r}" data-kx="{float(fr.kx)!r}" '
            f'data-mpu="{float(fr.metres_per_unit)!r}" data-minw="{fr.mm * 2:.6g}">'
            + defs
            + "".join(parts)
            + "</svg>"
        )

    def _lines_svg(self, lay, geoms) -> str:
        fr = self.frame
        q = fr.q
        n = len(geoms)
        kinds = _labels(lay, "kind_field")
        cert = _labels(lay, "certainty_field") if lay.spec.get("certainty_field") else None
        kinds = np.full(n, "", dtype=object) if kinds is None else kinds
        cert = np.full(n, "", dtype=object) if cert is None else cert
        simple = _simplify_lines(geoms, q)
        keys, inverse = np.unique(np.char.add(np.char.add(kinds.astype(str), "\x1f"), cert.astype(str)), return_inverse=True)
        pairs = [tuple(k.split("\x1f", 1)) for k in keys.tolist()]
        out = [f'<g class="lines" transform="scale({q:.9g})">']
        for j in sorted(range(len(pairs)), key=lambda j: (_kind_rank(pairs[j][0]), pairs[j])):
            kind, c = pairs[j]
            sel = np.flatnonzero(inverse == j)
            body, _ = path_data_joined(simple[sel], fr, q, closed=False)
            if not body:
                continue
            style = _line_style(kind, c)
            label = f"{kind or 'no kind'}{', ' + c if c else ''}"
            self.line_key.append((label, style, kind, len(sel)))
            out.append(f'<path style="{style}" d="{body}"><title>{_e(label)} ({_e(_plural(len(sel), "line"))})</title></path>')
        out.append("</g>")
        return "".join(out)

    def _structures_svg(self, lay, geoms) -> str:
        fr = self.frame
        ok = ~shapely.is_missing(geoms)
        pts = shapely.point_on_surface(geoms[ok])
        xy = shapely.get_coordinates(pts)
        if len(xy) == 0:
            return ""

        def num(key):
            col = lay.field(key)
            if col is None:
                return np.full(len(geoms), np.nan)
            return pd.to_numeric(lay.frame[col], errors="coerce").to_numpy(dtype=float)

        az = num("azimuth_field")[ok]
        kinds = _labels(lay, "kind_field")
        kinds = np.array([k.lower() for k in kinds[ok]], dtype=object) if kinds is not None else np.full(len(xy), "", dtype=object)
        rhr = str(lay.spec.get("convention", "dip-direction")) == "right-hand-rule"
        linear = np.isin(kinds, LINEAR_KINDS)
        # dip direction (planes) or trend (lines), degrees clockwise from grid north
        direction = np.where(linear | ~rhr, az, az + 90.0)
        X, Y = fr.local(xy[:, 0], xy[:, 1])
        L = 2.5 * fr.mm  # half strike line: 2.5 mm at map scale
        T = 1.5 * fr.mm  # dip tick
        rad = np.radians(direction)
        ux, uy = np.sin(rad), -np.cos(rad)  # unit vector of the direction in local units (y down)
        sx, sy = -uy, ux  # strike: perpendicular
        has = np.isfinite(rad)
        q = fr.q
        segs = []
        plane = has & ~linear
        line = has & linear
        # planes: strike line through the point, tick towards the dip direction
        segs.append((X - sx * L, Y - sy * L, X + sx * L, Y + sy * L, plane))
        segs.append((X, Y, X + ux * T, Y + uy * T, plane))
        # lines: an arrow along the trend
        segs.append((X, Y, X + ux * 2 * L, Y + uy * 2 * L, line))
        ax, ay = X + ux * 2 * L, Y + uy * 2 * L
        for ang in (150.0, -150.0):
            r = np.radians(ang)
            hx = ux * math.cos(r) - uy * math.sin(r)
            hy = ux * math.sin(r) + uy * math.cos(r)
            segs.append((ax, ay, ax + hx * T * 0.8, ay + hy * T * 0.8, line))
        pieces = []
        for a, b, c, dd, m in segs:
            if not m.any():
                continue
            A, B, C, D = (np.rint(v[m] / q).astype(np.int64) for v in (a, b, c, dd))
            pieces.append(
                np.char.add(
                    np.char.add(np.char.add(np.char.add("M", A.astype(str)), " "), B.astype(str)),
                    np.char.add(np.char.add(np.char.add("L", C.astype(str)), " "), D.astype(str)),
                )
            )
        nodir = ~has
        body = "".join("".join(p.tolist()) for p in pieces)
        if nodir.any():
            body += "".join(dots(xy[nodir, 0], xy[nodir, 1], fr, q))
        self.structures_n = len(xy)
        return (
            f'<g class="struct" transform="scale({q:.9g})"><title>{_e(_plural(len(xy), "structural measurement"))}</title>'
            f'<path d="{body}"/></g>'
        )

    def _findings_svg(self, fx, fy) -> str:
        """Markers and geometries of the findings.

        The first :data:`ROWS_PER_RULE` findings of each rule get their own
        marker (clickable, linked to their row) and their geometry drawn; the
        others of that rule are marked too, as dots merged into one path per
        rule and severity.
        """
        fr = self.frame
        qf = fr.q / FINDING_GRID
        findings = self.report.findings
        geoms = self.finding_geoms
        detailed = self.detailed
        located = np.isfinite(fx) & np.isfinite(fy)
        # zoom boxes in local units: the finding's geometry, else its point
        X, Y = fr.local(fx, fy)
        bx = np.c_[X, Y, X, Y]
        has_geom = ~shapely.is_missing(geoms)
        if has_geom.any():
            b = shapely.bounds(geoms[has_geom])
            lx0, ly1 = fr.local(b[:, 0], b[:, 1])
            lx1, ly0 = fr.local(b[:, 2], b[:, 3])
            gb = np.c_[lx0, ly0, lx1, ly1]
            good = np.all(np.isfinite(gb), axis=1)
            bx[np.flatnonzero(has_geom)[good]] = gb[good]
        for i in np.flatnonzero(detailed & located & np.all(np.isfinite(bx), axis=1)).tolist():
            self.boxes[i] = " ".join(f"{v:.3f}" for v in bx[i])
        # geometries other than points, drawn unsimplified on the fine grid
        shapes = []
        if has_geom.any():
            t = np.full(len(findings), -1)
            t[has_geom] = shapely.get_type_id(geoms[has_geom])
            poly = np.isin(t, (3, 6))
            lines = np.isin(t, (1, 2, 5))
            dpoly = path_data(np.where(poly, geoms, None), fr, qf, closed=True)
            dline = path_data(np.where(lines, geoms, None), fr, qf, closed=False)
            for i in np.flatnonzero(poly | lines).tolist():
                dd = dpoly[i] if poly[i] else dline[i]
                if dd:
                    cls = f"s-{findings[i].severity.value}" + ("" if poly[i] else " ln")
                    shapes.append(f'<path class="{cls}" data-k="{i}" d="{dd}"/>')
        dd = dots(fx, fy, fr, qf)
        marks = [
            f'<path class="s-{findings[i].severity.value}" data-k="{i}" d="{dd[i]}"/>'
            for i in np.flatnonzero(detailed & located).tolist()
        ]
        bulk: dict[tuple[str, str], list[int]] = {}
        for i in np.flatnonzero(~detailed & located).tolist():
            bulk.setdefault((findings[i].rule, findings[i].severity.value), []).append(i)
        for (rule, sev), idx in bulk.items():
            f = findings[idx[0]]
            marks.append(
                f'<path class="s-{sev} bulk" data-rule="{_e(rule)}" data-family="{_e(f.family)}" data-severity="{sev}" '
                f'data-n="{len(idx)}" d="{"".join(dd[i] for i in idx)}"/>'
            )
        self.markers_n = int(located.sum())
        return (
            f'<g class="fg" transform="scale({qf:.9g})">{"".join(shapes)}</g>'
            f'<g class="fm" transform="scale({qf:.9g})">{"".join(marks)}</g>'
        )

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
        authors = [a.get("name") for a in (m.get("authors") or []) if isinstance(a, dict) and a.get("name")]
        if authors:
            meta.append(("Authors", _e("; ".join(authors))))
        if m.get("licence"):
            meta.append(("Licence", _e(m["licence"])))
        meta.append(("Project", f"<code>{_e(r.project)}</code>"))
        meta.append(("Checked with", f"archivist {_e(r.version)}: {_e(_plural(len(r.rules_run), 'rule'))} ran"))
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
        if r.notes:
            out.append('<ul class="notes">' + "".join(f"<li>{_e(n)}</li>" for n in r.notes) + "</ul>")
        return "".join(out)

    def not_covered(self) -> str:
        r = self.report
        ran = set(r.rules_run)
        notrun = [x for x in self.rules if x not in ran]
        items = [f"<p>{_e(CAUTION)}</p>"]
        li = []
        if notrun:
            by_family: dict[str, list[str]] = {}
            for x in notrun:
                by_family.setdefault(self.rules[x].family, []).append(x)
            listing = "".join(
                f"<li>{_e(fam)}: " + ", ".join(f"<code>{_e(x)}</code>" for x in ids) + "</li>" for fam, ids in by_family.items()
            )
            li.append(
                f"<details><summary>{_e(_plural(len(notrun), 'rule'))} did not run: a layer or table they need is absent, "
                f"they were switched off, the run was limited to some rules, or they belong to another command "
                f"(such as an audit).</summary><ul>{listing}</ul></details>"
            )
        unlocated = sum(1 for f in r.findings if f.x is None or f.y is None)
        if unlocated:
            li.append(f"{_e(_plural(unlocated, 'finding'))} have no place on the map (manifest, metadata or table problems); they are in the table only.")
        if li:
            items.append("<ul>" + "".join(f"<li>{x}</li>" for x in li) + "</ul>")
        return '<div class="caution">' + "".join(items) + "</div>"

    def map_section(self, svg: str) -> str:
        fr = self.frame
        if not svg:
            return "<p>Nothing to draw: the project has no readable layers and no finding has a location.</p>"
        key = []
        sev = Counter(f.severity.value for f in self.report.findings if f.x is not None and f.y is not None)
        for sv in Severity:
            if sev.get(sv.value):
                key.append(
                    f'<span><svg width="14" height="14"><circle cx="7" cy="7" r="5.5" fill="{SEVERITY_COLOUR[sv.value]}"/></svg> '
                    f"{_e(sv.value)} ({_int(sev[sv.value])})</span>"
                )
        for label, style, _kind, n in getattr(self, "line_key", []):
            key.append(f'<span><svg width="34" height="10"><path d="M2 5H32" style="{style}"/></svg> {_e(label)} ({_int(n)})</span>')
        if getattr(self, "samples_n", 0):
            key.append(
                '<span><svg width="14" height="14"><circle cx="7" cy="7" r="3" fill="#fff" stroke="#111" stroke-width="2"/></svg> '
                f"samples ({_int(self.samples_n)})</span>"
            )
        if getattr(self, "structures_n", 0):
            key.append(
                '<span><svg width="24" height="16"><path d="M2 5H22M12 5V12" stroke="#222" stroke-width="1.4" fill="none"/></svg> '
                f"structural measurements ({_int(self.structures_n)})</span>"
            )
        step = f"{_num(fr.q * fr.metres_per_unit)} m (1/{_int(GRID_STEPS)} of the map's larger side)"
        how = {
            "coverage": f"simplified for display to {step}, shared edges kept shared",
            "polygon": f"simplified for display to {step} one by one (shared edges may part by that much when zoomed far in)",
        }.get(getattr(self, "simplified", None), f"drawn on a display grid of {step}")
        caption = (
            f"Grid north up. Unit polygons {how}; lines simplified to the same grid; "
            f"finding geometries drawn to {_num(fr.q / FINDING_GRID * fr.metres_per_unit)} m. "
            "Drag to pan, wheel or double-click to zoom, <kbd>0</kbd> to see everything; click a polygon to name it, a marker to find its row."
        )
        notes = "".join(f"<li>{_e(n)}</li>" for n in self.notes)
        unit_names = {
            r["_code"]: str(r.get("name") or "") for r in self.legend_rows
        }
        data = (
            f'<script type="application/json" id="unit-names">{_json(unit_names)}</script>'
            f'<script type="application/json" id="unit-ids">{_json(self.unit_ids)}</script>'
            f'<script type="application/json" id="unit-rings">{_json(self.unit_rings)}</script>'
        )
        return (
            '<div id="mapbox">'
            + svg
            + '<div class="tools noprint"><button id="zin" title="Zoom in" type="button">+</button>'
            '<button id="zout" title="Zoom out" type="button">−</button>'
            '<button id="zfull" title="Whole map" type="button">⤢</button></div>'
            '<div id="scalebar"></div><div id="coords"></div></div>'
            '<p id="info" aria-live="polite"></p>'
            f'<div class="keyrow">{"".join(key)}</div>'
            f'<p class="caption">{caption}</p>'
            + (f'<ul class="caption">{notes}</ul>' if notes else "")
            + data
        )

    def findings_section(self) -> str:
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
            box = self.boxes.get(i) if self.frame is not None else None
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
            xy = f"{f.x:.1f}, {f.y:.1f}" if f.x is not None and f.y is not None else ""
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

    def legend_section(self) -> str:
        if self.project is None or ("legend" not in self.project.tables and not self.unit_counts):
            return "<p>The project has no legend table.</p>"
        rows = []
        legend_codes = set()
        for r in self.legend_rows:
            code = r["_code"]
            legend_codes.add(code)
            unit = self.unit_for(code)
            sw = f'<span class="sw" style="background:{unit.colour}"></span>' if unit.colour else f'<span class="sw" style="background:{unit.fill}" title="no colour in the legend: drawn in a generated colour"></span>'
            ages = ""
            lo, hi = r.get("min_age_ma"), r.get("max_age_ma")
            if _present(lo) or _present(hi):
                ages = f"{_e(lo if _present(lo) else '?')}–{_e(hi if _present(hi) else '?')} Ma"
            desc = r.get("description")
            rows.append(
                f"<tr><td>{sw}</td><td><b>{_e(code)}</b></td><td>{_e(r.get('name') or '')}"
                + (f'<div class="d">{_e(desc)}</div>' if _present(desc) else "")
                + f"</td><td>{_e(r.get('age') or '')}</td><td class=\"where\">{ages}</td>"
                f'<td>{_e(r.get("lithology") or "")}</td><td class="n">{_int(self.unit_counts.get(code, 0))}</td></tr>'
            )
        for code in sorted(set(self.unit_counts) - legend_codes):
            label = code or "(no unit code)"
            rows.append(
                f'<tr><td><span class="sw none"></span></td><td><b>{_e(label)}</b></td><td><i>not in the legend</i></td>'
                f'<td></td><td></td><td></td><td class="n">{_int(self.unit_counts[code])}</td></tr>'
            )
        total = sum(self.unit_counts.values())
        return (
            '<table class="legend"><thead><tr><th></th><th>unit</th><th>name</th><th>age</th><th>Ma</th><th>lithology</th>'
            '<th class="n">polygons</th></tr></thead><tbody>'
            + "".join(rows)
            + f'<tr><td></td><th colspan="5">all units</th><td class="n"><b>{_int(total)}</b></td></tr>'
            + "</tbody></table>"
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


def _labels(layer, key: str) -> np.ndarray | None:
    """A layer's column named by manifest key ``key`` as stripped text (codes, kinds), or None.

    Read as the rules read identifiers (``7.0`` is ``7``), converting each
    distinct value once.
    """
    col = layer.field(key)
    if col is None:
        return None
    codes, uniques = pd.factorize(layer.frame[col], use_na_sentinel=True)
    text = np.array([as_text(u).strip() for u in uniques] + [""], dtype=object)
    return text[codes]


def _present(v) -> bool:
    if v is None:
        return False
    if isinstance(v, float) and math.isnan(v):
        return False
    return str(v).strip() != ""


def _json(value) -> str:
    """JSON safe inside a <script> element."""
    return json.dumps(value, ensure_ascii=False, separators=(",", ":")).replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def _kind_rank(kind: str) -> int:
    k = kind.lower()
    return 0 if k == "map-boundary" else 2 if "fault" in k else 1


def _line_style(kind: str, certainty: str) -> str:
    k, c = kind.lower(), certainty.lower()
    if "fault" in k:
        colour, width = "#111", 2.4
    elif k == "contact":
        colour, width = "#1a1a1a", 1.0
    elif "boundary" in k:
        colour, width = "#444", 1.6
    else:
        colour, width = "#6a3d9a", 1.2
    dash = {"approximate": "7 4", "approximately located": "7 4", "inferred": "3 4", "concealed": "1 4", "uncertain": "3 4"}.get(c)
    style = f"stroke:{colour};stroke-width:{width}px;fill:none;vector-effect:non-scaling-stroke"
    if dash:
        style += f";stroke-dasharray:{dash}"
    return style


def render_html(report: Report, project=None, *, rules: Iterable[registry.RuleInfo] | None = None) -> str:
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
    svg = page.map_svg()
    title = project.name if project is not None else report.project
    sections = [
        ("summary", "Summary", page.summary()),
        ("not-covered", "What the checks do not cover", page.not_covered()),
        ("map", "Map", page.map_section(svg)),
        ("findings", "Findings", page.findings_section()),
        ("legend", "Legend", page.legend_section()),
        ("rules", "Rules", page.rules_section()),
    ]
    nav = " · ".join(f'<a href="#{sid}">{_e(name)}</a>' for sid, name, _ in sections)
    body = "".join(f'<section id="{sid}"><h2>{_e(name)}</h2>{content}</section>' for sid, name, content in sections)
    csp = "default-src 'none'; style-src 'unsafe-inline'; script-src 'unsafe-inline'; img-src data:"
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="generator" content="archivist {_e(__version__)}">'
        f"<title>{_e(title)}: archivist check report</title>"
        f"<style>{CSS}</style></head><body>"
        f'<header><h1>{_e(title)}</h1><p class="sub">archivist check report · <span class="noprint">{nav}</span></p></header>'
        f"<main>{body}</main>"
        f"<footer>Written by archivist {_e(report.version)}. This page is self-contained: it loads nothing from the network.</footer>"
        f"<script>{JS}</script></body></html>\n"
    )


def write_html(report: Report, project, target: Path) -> None:
    """Write :func:`render_html` to ``target`` atomically (temporary sibling, then rename)."""
    atomic_write_text(Path(target), render_html(report, project))
