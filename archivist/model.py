"""Plain data: severities, findings and reports.

Findings and reports are frozen dataclasses. Writers format them; they never
compute anything a rule has not already measured.
"""

from __future__ import annotations

import enum
from dataclasses import asdict, dataclass, field
from typing import Any


class Severity(str, enum.Enum):
    """How much a finding matters. Ordered: error > warning > notice."""

    ERROR = "error"
    WARNING = "warning"
    NOTICE = "notice"

    @property
    def rank(self) -> int:
        return _RANKS[self.value]

    @classmethod
    def parse(cls, value: str) -> "Severity":
        return cls(str(value).strip().lower())


_RANKS = {"error": 0, "warning": 1, "notice": 2}  # the order of a report's findings (one dict, not one per call)
SEVERITY_CHOICES = ("error", "warning", "notice", "off")


@dataclass(frozen=True)
class Hit:
    """What a rule yields: one problem, without the rule's identity.

    The engine turns a hit into a :class:`Finding` by adding the rule id,
    family and effective severity, and by deriving ``x``, ``y`` and ``wkt``
    from ``geometry`` when a geometry is given.

    Parameters
    ----------
    message
        One sentence a mapper understands, with the measured size where there is one.
    layer
        The layer or table role (``units``, ``legend``...) or a file name.
    features
        Feature ids (always text) the problem involves.
    measure
        Area in m², length in m or a distance, when there is one.
    geometry
        A shapely geometry locating the problem, in the map CRS.
    x, y
        An explicit location when no geometry is given.
    severity
        Overrides the rule's default severity for this hit only (e.g. a
        milder case of the same problem).
    detail
        What the rule's settle step reads of the hit (:class:`archivist.registry.Settle`);
        never reported.
    """

    message: str
    layer: str | None = None
    features: tuple[str, ...] = ()
    measure: float | None = None
    geometry: Any = None
    x: float | None = None
    y: float | None = None
    severity: Severity | None = None
    rule: str | None = None  # set by the loader for problems found while loading
    detail: Any = None


@dataclass(frozen=True)
class Finding:
    """One problem in the map, as reported.

    ``x``/``y`` are a representative point in the map CRS (or None);
    ``measure`` is an area in m², a length in m or a distance (or None);
    ``wkt`` is the problem's geometry (or None).
    """

    rule: str
    family: str
    severity: Severity
    message: str
    layer: str | None = None
    features: tuple[str, ...] = ()
    x: float | None = None
    y: float | None = None
    measure: float | None = None
    wkt: str | None = None

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["severity"] = self.severity.value
        d["features"] = list(self.features)
        return d


@dataclass(frozen=True)
class Summary:
    errors: int = 0
    warnings: int = 0
    notices: int = 0

    @classmethod
    def of(cls, findings: tuple[Finding, ...]) -> "Summary":
        counts = {s: 0 for s in Severity}
        for f in findings:
            counts[f.severity] += 1
        return cls(counts[Severity.ERROR], counts[Severity.WARNING], counts[Severity.NOTICE])


@dataclass(frozen=True)
class Report:
    """The result of a check run.

    ``notes`` are statements about how the run was made (roles inferred from
    the data, which extent was used...), printed at the top of the text report.
    """

    tool: str
    version: str
    project: str
    crs: str | None
    findings: tuple[Finding, ...]
    notes: tuple[str, ...] = ()
    rules_run: tuple[str, ...] = ()
    # Decimals of a location in the text, HTML and README listings: 1 in metres (0.1 m), 6 in degrees
    # (about 0.1 m); the JSON report keeps x and y as the engine rounded them.
    place_decimals: int = 1
    summary: Summary = field(init=False)

    def __post_init__(self) -> None:
        ordered = tuple(
            sorted(self.findings, key=lambda f: (f.severity.rank, f.family, f.rule, f.layer or "", f.features))
        )
        object.__setattr__(self, "findings", ordered)
        object.__setattr__(self, "summary", Summary.of(ordered))

    @property
    def ok(self) -> bool:
        return self.summary.errors == 0

    def place(self, f: Finding) -> str:
        """``x, y`` of a finding to the decimals its CRS needs, or ``""`` when it has no place."""
        if f.x is None or f.y is None:
            return ""
        return f"{f.x:.{self.place_decimals}f}, {f.y:.{self.place_decimals}f}"

    def failed(self, strict: bool = False) -> bool:
        """True when the run should exit 1: errors, or warnings under ``strict``."""
        return self.summary.errors > 0 or (strict and self.summary.warnings > 0)

    def to_dict(self) -> dict[str, Any]:
        return {
            "tool": self.tool,
            "version": self.version,
            "project": self.project,
            "crs": self.crs,
            "notes": list(self.notes),
            "rules_run": list(self.rules_run),
            "summary": asdict(self.summary),
            "findings": [f.to_dict() for f in self.findings],
        }
