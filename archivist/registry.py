"""The rule registry.

A rule is a small function registered once with :func:`rule`::

    @rule("unit-overlap", family="topology", severity="error", needs=("units",))
    def unit_overlap(project: MapProject, ctx: CheckContext) -> Iterator[Hit]:
        \"\"\"Two unit polygons share area.

        Catches
        -------
        ...
        Why it matters
        --------------
        ...
        Fix
        ---
        ...
        Example
        -------
        ...
        \"\"\"
        yield Hit(...)

A rule has the type :class:`Rule`; mypy checks every decorated function
against it. The docstring is the rule's documentation: a one-line title, then the four
sections above (numpy-style underlined headings). `archivist rules` prints
them and a test makes sure no rule lacks one.
"""

from __future__ import annotations

import importlib
import inspect
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable, Iterable, Iterator, Protocol, TypeVar

from .model import Hit, Severity

if TYPE_CHECKING:
    from .analysis.context import CheckContext
    from .project import MapProject
    from .tally import Tally


class Rule(Protocol):
    """What a rule is: a function of the project and the check context yielding its hits."""

    __name__: str
    __qualname__: str
    __doc__: str | None

    def __call__(self, project: MapProject, ctx: CheckContext, /) -> Iterator[Hit]: ...


R = TypeVar("R", bound=Rule)


@dataclass(frozen=True)
class Settle:
    """How a rule whose findings read whole-map facts finishes its hits: the same code in one process and on partitions.

    The rule yields its hits place by place (each decided from what lies
    near it). ``tally`` gives the values behind the whole-map facts, each at
    a point (:class:`archivist.tally.Tally`); ``finish`` turns all the hits
    and the exact totals of the tallies into the findings' hits (one summary
    instead of many hits, a message naming a total). In one process every
    value counts and ``finish`` gets the rule's hits; on partitions
    (:mod:`archivist.parallel`) each partition counts the values in its own
    cells and ``finish`` gets the merged hits, so both give the same hits.
    ``finish`` must not depend on the order of its hits. ``partitions_can``
    says whether partitions can judge the rule on a project at all (else it
    runs on the whole map, decided before the partitions are sent).
    """

    tally: Callable[[MapProject, CheckContext], dict[str, Tally]]
    finish: Callable[[MapProject, list[Hit], dict[str, float]], list[Hit]]
    partitions_can: Callable[[MapProject], bool] | None = None

    def hits(self, project: MapProject, ctx: CheckContext, hits: Iterable[Hit]) -> list[Hit]:
        """The rule's hits finished in one process: every value of the tallies counts."""
        from .tally import totals

        found = list(hits)
        return self.finish(project, found, totals({k: t.total() for k, t in self.tally(project, ctx).items()}))

SECTIONS = ("Catches", "Why it matters", "Fix", "Example")
FAMILIES = ("metadata", "topology", "linework", "crs", "legend", "samples", "structures", "stations", "photos", "literature", "archive")
FAMILY_MODULES = {
    "metadata": "archivist.rules.metadata",
    "topology": "archivist.rules.topology",
    "linework": "archivist.rules.linework",
    "crs": "archivist.rules.crs",
    "legend": "archivist.rules.legend",
    "samples": "archivist.rules.samples",
    "structures": "archivist.rules.structures",
    "stations": "archivist.rules.stations",  # field stations, the links to them, and files handed in together
    "photos": "archivist.rules.photos",
    "literature": "archivist.rules.literature",
    "archive": "archivist.rules.archive",  # run by `archivist audit` only: its rules need the archive facts
}
_ID = re.compile(r"^[a-z][a-z0-9]*(-[a-z0-9]+)+$")


@dataclass(frozen=True)
class RuleInfo:
    """A registered rule: identity, default severity and documentation."""

    id: str
    family: str
    severity: Severity
    func: Rule
    needs: tuple[str, ...]
    title: str
    sections: tuple[tuple[str, str], ...]
    # may run on spatial partitions of the map (archivist.parallel): always, never, or on the maps a predicate accepts
    partitioned: bool | Callable[[MapProject], bool] = False
    settle: Settle | None = None  # finishes the hits from whole-map totals (see Settle)

    def partitions(self, project: MapProject) -> bool:
        """Whether this rule may run on spatial partitions of ``project`` (``partitioned``, or its answer for it)."""
        if callable(self.partitioned):
            return bool(self.partitioned(project))
        return bool(self.partitioned)

    @property
    def doc(self) -> dict[str, str]:
        return dict(self.sections)

    def markdown(self) -> str:
        lines = [f"### `{self.id}`", "", f"{self.title} *Family:* {self.family}; *default severity:* {self.severity.value}.", ""]
        for name, text in self.sections:
            lines += [f"**{name}.** {text}", ""]
        return "\n".join(lines).rstrip() + "\n"


_RULES: dict[str, RuleInfo] = {}


def parse_doc(doc: str | None) -> tuple[str, tuple[tuple[str, str], ...]]:
    """Split a rule docstring into its title and its named sections."""
    text = inspect.cleandoc(doc or "")
    lines = text.splitlines()
    title = lines[0].strip() if lines else ""
    sections: list[tuple[str, list[str]]] = []
    i = 1
    while i < len(lines):
        line = lines[i].rstrip()
        nxt = lines[i + 1].strip() if i + 1 < len(lines) else ""
        if line.strip() in SECTIONS and nxt and set(nxt) == {"-"}:
            sections.append((line.strip(), []))
            i += 2
            continue
        if sections:
            sections[-1][1].append(line.strip())
        i += 1
    out = tuple((name, " ".join(part for part in body if part).strip()) for name, body in sections)
    return title, out


def rule(id: str, *, family: str, severity: str, needs: tuple[str, ...] = (),
         partitioned: bool | Callable[[MapProject], bool] = False,
         settle: Settle | None = None) -> Callable[[R], R]:
    """Register a rule function under `id`.

    Parameters
    ----------
    id
        Kebab-case noun phrase, unique across archivist.
    family
        One of :data:`FAMILIES`.
    severity
        Default severity: `"error"`, `"warning"` or `"notice"`.
    needs
        Layer or table roles the rule reads; the rule is skipped when one is
        absent (the absence itself is reported by the metadata family).
    partitioned
        The rule decides each finding from what lies near it (within
        :func:`archivist.parallel.rule_reach` of the finding and its
        geometry), never from the whole map (no count over a layer, no
        summary; or only through its ``settle`` step): ``check --jobs N`` may
        run it on spatial partitions of the map and merge their findings
        (:mod:`archivist.parallel`). A predicate ``(project) -> bool``
        instead: the rule is partitioned on the maps it accepts only (the
        coverage rules need an extent layer; :meth:`RuleInfo.partitions`).
    settle
        What turns the rule's hits into its findings from whole-map totals
        (:class:`Settle`): a rule whose hits are local but whose summary or
        wording reads the whole map may then be ``partitioned`` too.
    """

    def register(func: R) -> R:
        if not _ID.match(id):
            raise ValueError(f"rule id {id!r} is not a kebab-case noun phrase")
        if id in _RULES and _RULES[id].func.__qualname__ != func.__qualname__:
            raise ValueError(f"rule id {id!r} registered twice")
        if family not in FAMILIES:
            raise ValueError(f"rule {id!r}: unknown family {family!r}")
        title, sections = parse_doc(func.__doc__)
        _RULES[id] = RuleInfo(id, family, Severity.parse(severity), func, tuple(needs), title, sections, partitioned, settle)
        return func

    return register


def load_all() -> None:
    """Import every family module so that its rules register."""
    for module in FAMILY_MODULES.values():
        try:
            importlib.import_module(module)
        except ModuleNotFoundError as exc:  # a family not written yet
            if exc.name != module:
                raise


def all_rules() -> list[RuleInfo]:
    """Every registered rule, ordered by family then id."""
    load_all()
    order = {f: i for i, f in enumerate(FAMILIES)}
    return sorted(_RULES.values(), key=lambda r: (order[r.family], r.id))


def get_rule(rule_id: str) -> RuleInfo:
    load_all()
    try:
        return _RULES[rule_id]
    except KeyError:
        raise KeyError(rule_id) from None


def select(only: Iterable[str] = (), rules: Iterable[str] = ()) -> list[RuleInfo]:
    """Rules chosen by family (`only`) and/or id (`rules`); all when both empty.

    Raises KeyError naming the first unknown family or rule id.
    """
    only, rules = list(only), list(rules)
    everything = all_rules()
    known = {r.id for r in everything}
    for fam in only:
        if fam not in FAMILIES:
            raise KeyError(f"family {fam!r}")
    for rid in rules:
        if rid not in known:
            raise KeyError(f"rule {rid!r}")
    if not only and not rules:
        return everything
    return [r for r in everything if r.family in only or r.id in rules]
