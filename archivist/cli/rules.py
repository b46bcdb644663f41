"""``archivist rules [RULE]``."""

from __future__ import annotations

import json

import click

from .. import registry
from .errors import CommandFailed, handle_errors


def _text(info: registry.RuleInfo) -> str:
    out = [f"{info.id}  [{info.family}, {info.severity.value}]", f"  {info.title}"]
    for name, body in info.sections:
        out.append(f"  {name}: {body}")
    return "\n".join(out)


def rules_markdown(link: str | None = None) -> str:
    """The rule list as a Markdown table; with ``link``, each id links to its section there (``docs/rules.md``)."""
    out = ["| rule | family | default | what it catches |", "|---|---|---|---|"]
    for info in registry.all_rules():
        rid = f"[`{info.id}`]({link}#{info.id})" if link is not None else f"`{info.id}`"
        title = info.title.replace("|", "\\|")
        out.append(f"| {rid} | {info.family} | {info.severity.value} | {title} |")
    return "\n".join(out) + "\n"


def rules_reference() -> str:
    """The full rule reference as Markdown: the list, then every rule's documentation by family.

    ``archivist rules --format markdown`` prints it; ``python -m archivist.docs``
    writes it to ``docs/rules.md`` and the list into the README.
    """
    infos = registry.all_rules()
    out = [
        "# archivist rules",
        "",
        "Generated from the rule registry by `archivist rules --format markdown`; do not edit by hand.",
        "Each rule has an id, a family and a default severity. In `archivist.toml`,",
        "`[checks.severity]` sets a rule to `error`, `warning`, `notice` or `off`.",
        "A clean run is not a statement that the geology is right: the rules check the form and",
        "consistency of the data, not the interpretation.",
        "",
        rules_markdown(link="").rstrip("\n"),
    ]
    for family in registry.FAMILIES:
        group = [i for i in infos if i.family == family]
        if not group:
            continue
        out += ["", f"## {family}", ""]
        for info in group:
            out += [
                f"### `{info.id}`",
                "",
                f"{info.title} Family: {info.family}; default severity: {info.severity.value}.",
                "",
            ]
            for name, body in info.sections:
                out += [f"**{name}.** {body}", ""]
            out.pop()
    return "\n".join(out) + "\n"


@click.command("rules", short_help="List the rules, or print one RULE's documentation.")
@click.argument("rule", required=False)
@click.option("--format", "fmt", type=click.Choice(["text", "markdown", "json"]), default="text", show_default=True)
@handle_errors
def rules_command(rule: str | None, fmt: str) -> None:
    """List every rule with its documentation, or print one RULE's doc."""
    if rule:
        try:
            infos = [registry.get_rule(rule)]
        except KeyError:
            raise CommandFailed(f"no rule '{rule}'; 'archivist rules' lists them") from None
    else:
        infos = registry.all_rules()
    if fmt == "json":
        click.echo(json.dumps([{"id": i.id, "family": i.family, "severity": i.severity.value, "title": i.title, **i.doc} for i in infos], indent=2))
    elif fmt == "markdown":
        click.echo(rules_reference() if not rule else infos[0].markdown(), nl=False)
    else:
        click.echo("\n\n".join(_text(i) for i in infos))
