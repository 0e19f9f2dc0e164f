"""Show the effective rules and the metric names (for ``advisor rules``)."""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from advisor.rules.metrics import METRIC_DOCS
from advisor.rules.model import RuleSet


def render_rules(rs: RuleSet, console: Console) -> None:
    """Per tier / surface, each rule: id, severity, test, then rationale and source indented."""
    scopes = [(t.id, f"Tier: {t.name}") for t in rs.tiers]
    scopes += [(s.id, f"Surface: {s.name} (needs tier {s.tier})") for s in rs.surfaces]
    for scope, title in scopes:
        rules = rs.for_scope(scope)
        if not rules:
            continue
        console.print(Text(title, style="bold underline"))
        for r in rules:
            test = f"{r.metric} {r.op} {r.threshold:g}"
            if r.borderline is not None:
                test += f" (borderline from {r.borderline:g})"
            head = Text("  ")
            head.append(r.id, style="bold")
            head.append(f"  [{r.severity}]  {test}")
            console.print(head)
            body = Text(r.rationale)
            body.append(f"\nSource: {r.source}", style="dim")
            if r.fix:
                body.append(f"\nIf it fails: {r.fix}")
            if r.origin != "shipped":
                body.append(f"\nFrom {r.origin}", style="italic")
            console.print(Padding(body, (0, 0, 0, 6)))
        console.print()


def render_metrics(console: Console) -> None:
    """The metric names a rule may read, with their meaning."""
    t = Table(title="Metrics a rule can read", box=box.SIMPLE_HEAD, title_justify="left")
    t.add_column("Metric", no_wrap=True)
    t.add_column("Meaning", overflow="fold")
    for name, doc in METRIC_DOCS.items():
        t.add_row(Text(name), Text(doc))
    console.print(t)
