"""Every finding archivist gives on every rule case, as one JSON file: a guard for restructuring.

Builds the failing and the passing case of every rule (the ``CASES`` of
``tests/test_rules_<family>.py``), runs the whole check on each (``audit`` for
the archive family), and writes every finding (rule, severity, layer,
features, message, place, measure, geometry) with the temporary folder's path
replaced by ``<tmp>``. Two runs on two versions of the code are compared with
``diff``: a change that should keep every finding must give identical files.

    python tests/benchmarks/findings_snapshot.py before.json
    ... change the code ...
    python tests/benchmarks/findings_snapshot.py after.json && diff before.json after.json

Not part of the test run (about a minute on a 2-core machine).
"""

from __future__ import annotations

import json
import os
import re
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import archivist  # noqa: E402
from archivist import registry  # noqa: E402
from rule_cases import all_cases  # noqa: E402


def report_of(path: Path, family: str, tmp: Path) -> list[dict]:
    run = archivist.audit if family == "archive" else archivist.check
    report = run(path)
    out = []
    for f in report.findings:
        row = {
            "rule": f.rule,
            "severity": f.severity.value,
            "layer": f.layer,
            "features": list(f.features),
            "message": f.message,
            "x": f.x,
            "y": f.y,
            "measure": f.measure,
            "wkt": f.wkt,
        }
        text = json.dumps(row).replace(str(tmp), "<tmp>")
        # test builders write GeoPackages whose bytes carry the time of writing: their digests vary from run to run
        out.append(json.loads(re.sub(r"\b[0-9a-f]{64}\b", "<sha256>", text)))
    return out


def main(target: str) -> None:
    os.environ.setdefault("SOURCE_DATE_EPOCH", "1767225600")  # packs made by the cases record one time
    snapshot: dict[str, list[dict]] = {}
    with tempfile.TemporaryDirectory(prefix="archivist-snapshot-") as work:
        tmp = Path(work)
        for rule_id, (make_failing, make_passing) in sorted(all_cases().items()):
            family = registry.get_rule(rule_id).family
            for kind, make in (("fail", make_failing), ("pass", make_passing)):
                where = tmp / rule_id / kind
                snapshot[f"{rule_id}/{kind}"] = report_of(make(where), family, tmp)
        snapshot["example_bundle"] = report_of(HERE.parent.parent / "example_bundle", "check", tmp)
    Path(target).write_text(json.dumps(snapshot, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    print(f"{sum(len(v) for v in snapshot.values())} findings in {len(snapshot)} projects -> {target}")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "findings-snapshot.json")
