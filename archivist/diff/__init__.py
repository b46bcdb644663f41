"""Compare two versions of a map (projects or packages) and list what changed.

Feature ids are not stable between editors, so features are matched by
geometry and attributes, not by id:

* polygons: pairs that share area, kept when each is the other's largest
  overlap (STRtree bulk query, intersection areas computed in one call);
* lines: pairs within a search distance, kept when each is the other's
  closest by Hausdorff distance; a line split or merged at a new node, whose
  linework is otherwise unchanged, is no change;
* samples: by sample id, then by place for ids that changed;
* structures: by place (mutual nearest);
* legend entries by unit code, analyses by sample id (and order of repeats).

A moved or reshaped feature is therefore one change, not a removal plus an
addition. Polygon reshapes caused by another change (the two polygons either
side of a moved contact, the polygon a new polygon was carved from) are folded
into that change, which then carries the area gained and lost per unit.

"Same place" means within the old map's tolerance (``[checks] tolerance``,
default 0.1 mm at map scale). A line or point is looked for as moved up to
5 mm at map scale away (125 m at 1:25 000), a design choice: beyond that an
edit is a removal and an addition.

What diff does not judge: whether a change is geologically right. It states
what differs between the two data sets.

Layout: :mod:`.result` (``Change``, ``DiffReport``), :mod:`.common` (the
comparison settings and array helpers), one module per kind of matching
(:mod:`.polygons` with the extent, :mod:`.lines`, :mod:`.reshapes`,
:mod:`.points`, :mod:`.tables` for the legend, units and analyses), and
:mod:`.driver`, which runs them in turn, handing each step's results to the
next as values.
"""

from .common import MOVE_SEARCH_MM, exact_pairs, fmt_area, fmt_units, mutual_best
from .driver import compare, diff
from .result import LAYER_ORDER, Change, DiffReport

__all__ = [
    "LAYER_ORDER",
    "MOVE_SEARCH_MM",
    "Change",
    "DiffReport",
    "compare",
    "diff",
    "exact_pairs",
    "fmt_area",
    "fmt_units",
    "mutual_best",
]
