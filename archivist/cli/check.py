"""``archivist check PATH``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from .. import engine
from ..fsutil import atomic_write_text, guard_output
from ..manifest import find_manifest
from ..report import render_json, render_text, write_text


@click.command("check")
@click.argument("path", type=click.Path(path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text", show_default=True, help="Report format.")
@click.option("--output", "-o", type=click.Path(path_type=Path), help="Write the report to FILE instead of stdout.")
@click.option("--strict", is_flag=True, help="Warnings fail the run too (exit 1).")
@click.option("--only", "only", multiple=True, metavar="FAMILY", help="Run only this rule family (repeatable).")
@click.option("--rule", "rules", multiple=True, metavar="RULE", help="Run only this rule (repeatable).")
@click.option("--force", is_flag=True, help="Replace existing output files.")
def check_command(path, fmt, output, strict, only, rules, force):
    """Check the map project at PATH (a folder or its archivist.toml).

    Exit 0: no errors. 1: errors (or warnings with --strict). 2: could not run.
    """
    from . import handle_errors

    @handle_errors
    def run():
        root, _ = find_manifest(path)
        if output is not None:
            guard_output(output, force=force, project_root=root)
        report = engine.check(path, only=only, rules=rules)
        if output is not None:
            atomic_write_text(output, render_json(report) if fmt == "json" else render_text(report))
        elif fmt == "json":
            sys.stdout.write(render_json(report))
        else:
            write_text(report, sys.stdout)
        sys.exit(1 if report.failed(strict) else 0)

    run()
