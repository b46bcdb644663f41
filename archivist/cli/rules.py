"""``archivist rules [RULE]``."""

from __future__ import annotations

import json
import sys

import click

from .. import registry


def _text(info: registry.RuleInfo) -> str:
    out = [f"{info.id}  [{info.family}, {info.severity.value}]", f"  {info.title}"]
    for name, body in info.sections:
        out.append(f"  {name}: {body}")
    return "\n".join(out)


def rules_markdown() -> str:
    """The rule reference as Markdown, grouped by family."""
    out = ["| rule | family | default | what it catches |", "|---|---|---|---|"]
    for info in registry.all_rules():
        out.append(f"| `{info.id}` | {info.family} | {info.severity.value} | {info.title} |")
    return "\n".join(out) + "\n"


@click.command("rules")
@click.argument("rule", required=False)
@click.option("--format", "fmt", type=click.Choice(["text", "markdown", "json"]), default="text", show_default=True)
def rules_command(rule, fmt):
    """List every rule with its documentation, or print one RULE's doc."""
    if rule:
        try:
            infos = [registry.get_rule(rule)]
        except KeyError:
            click.echo(f"archivist: no rule '{rule}'; 'archivist rules' lists them", err=True)
            sys.exit(2)
    else:
        infos = registry.all_rules()
    if fmt == "json":
        click.echo(json.dumps([{"id": i.id, "family": i.family, "severity": i.severity.value, "title": i.title, **i.doc} for i in infos], indent=2))
    elif fmt == "markdown":
        click.echo(rules_markdown() if not rule else infos[0].markdown(), nl=False)
    else:
        click.echo("\n\n".join(_text(i) for i in infos))
