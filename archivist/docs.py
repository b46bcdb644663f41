"""Generated parts of the README: the rule list, kept in step by a test.

Run ``python -m archivist.docs`` to rewrite the README section between the
``<!-- rules:start -->`` and ``<!-- rules:end -->`` markers.
"""

from __future__ import annotations

import sys
from pathlib import Path

from .cli.rules import rules_markdown

START, END = "<!-- rules:start -->", "<!-- rules:end -->"


def splice(text: str, body: str) -> str:
    head, rest = text.split(START, 1)
    _, tail = rest.split(END, 1)
    return f"{head}{START}\n{body}{END}{tail}"


def main(readme: Path = Path(__file__).resolve().parent.parent / "README.md") -> int:
    text = readme.read_text(encoding="utf-8")
    new = splice(text, rules_markdown())
    if new != text:
        readme.write_text(new, encoding="utf-8")
        print(f"updated {readme}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
