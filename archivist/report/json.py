"""JSON report: the Report dataclass as a dict (schema: schemas/report.schema.json)."""

from __future__ import annotations

import json

from ..model import Report


def render_json(report: Report) -> str:
    return json.dumps(report.to_dict(), indent=2, ensure_ascii=False) + "\n"
