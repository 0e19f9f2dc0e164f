"""Show the effective rules and the metric names (for ``advisor rules``)."""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.table import Table

from advisor.rules.metrics import METRIC_DOCS
from advisor.rules.model import RuleSet


def render_rules(rs: RuleSet, console: Console) -> None:
    """One table per tier / surface: rule, metric, threshold, severity, rationale, source."""
    scopes = [(t.id, f"Tier: {t.name}") for t in rs.tiers]
    scopes += [(s.id, f"Surface: {s.name} (needs tier {s.tier})") for s in rs.surfaces]
    for scope, title in scopes:
        rules = rs.for_scope(scope)
        if not rules:
            continue
        t = Table(title=title, box=box.SIMPLE_HEAD, title_justify="left")
        t.add_column("Rule", no_wrap=True)
        t.add_column("Test", no_wrap=True)
        t.add_column("Severity", no_wrap=True)
        t.add_column("Rationale / source", overflow="fold")
        for r in rules:
            test = f"{r.metric} {r.op} {r.threshold:g}"
            if r.borderline is not None:
                test += f"\n(borderline from {r.borderline:g})"
            origin = "" if r.origin == "shipped" else f"\n[from {r.origin}]"
            t.add_row(r.id, test, r.severity, f"{r.rationale}\nSource: {r.source}{origin}")
        console.print(t)


def render_metrics(console: Console) -> None:
    """The metric names a rule may read, with their meaning."""
    t = Table(title="Metrics a rule can read", box=box.SIMPLE_HEAD, title_justify="left")
    t.add_column("Metric", no_wrap=True)
    t.add_column("Meaning", overflow="fold")
    for name, doc in METRIC_DOCS.items():
        t.add_row(name, doc)
    console.print(t)
