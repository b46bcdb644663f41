"""JSON report: the Report dataclass as a dict (schema: schemas/report.schema.json)."""

from __future__ import annotations

import json

from ..model import Report
from ..printable import json_printable


def render_json(report: Report) -> str:
    """The report as JSON; values exact, terminal-unsafe characters as ``\\uXXXX`` escapes (same string when decoded)."""
    return json_printable(json.dumps(report.to_dict(), indent=2, ensure_ascii=False)) + "\n"
