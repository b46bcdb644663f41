"""Generated documentation: the README's rule list and ``docs/rules.md``, kept in step by a test.

Run ``python -m archivist.docs`` to rewrite the README section between the
``<!-- rules:start -->`` and ``<!-- rules:end -->`` markers (the rule list,
each id linking to its section of ``docs/rules.md``) and ``docs/rules.md``
itself (``archivist rules --format markdown``).
"""

from __future__ import annotations

import sys
from pathlib import Path

from .cli.rules import rules_markdown, rules_reference

START, END = "<!-- rules:start -->", "<!-- rules:end -->"
REFERENCE = "docs/rules.md"


def splice(text: str, body: str) -> str:
    head, rest = text.split(START, 1)
    _, tail = rest.split(END, 1)
    return f"{head}{START}\n{body}{END}{tail}"


def main(readme: Path = Path(__file__).resolve().parent.parent / "README.md") -> int:
    text = readme.read_text(encoding="utf-8")
    new = splice(text, rules_markdown(link=REFERENCE))
    if new != text:
        readme.write_text(new, encoding="utf-8")
        print(f"updated {readme}")
    reference = readme.parent / REFERENCE
    body = rules_reference()
    if not reference.exists() or reference.read_text(encoding="utf-8") != body:
        reference.parent.mkdir(exist_ok=True)
        reference.write_text(body, encoding="utf-8")
        print(f"updated {reference}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
