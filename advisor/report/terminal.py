"""The terminal report (rich): readable at 100 columns, and with colour off."""

from __future__ import annotations

from rich import box
from rich.console import Console, Group
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from advisor.pipeline import AuditResult
from advisor.report.evidence_view import evidence_tables

STATUS_TEXT = {"ready": "READY", "borderline": "BORDERLINE", "not_ready": "NOT READY"}
STATUS_STYLE = {"ready": "bold green", "borderline": "bold yellow", "not_ready": "bold red"}
OUTCOME_MARK = {"pass": "ok", "borderline": "~", "fail": "x", "not_measured": "?",
                "skipped": "-"}


def fmt(x, digits: int = 3) -> str:
    """A number for people: thousands separators for counts, 3 significant digits otherwise."""
    if x is None:
        return "n/a"
    if isinstance(x, bool):
        return "yes" if x else "no"
    x = float(x)
    if x != x:
        return "n/a"
    if x.is_integer() and abs(x) >= 1:
        return f"{int(x):,}"
    if abs(x) >= 100:
        return f"{x:,.0f}"
    return f"{x:.{digits}g}"


def pct(x) -> str:
    return "n/a" if x is None or x != x else f"{100 * float(x):.1f}%"


def status(s: str) -> Text:
    return Text(STATUS_TEXT[s], style=STATUS_STYLE[s])


def render(result: AuditResult, console: Console, *, written: list[str] | None = None,
           editorial_rows: int = 10, privacy_note: str | None = None) -> None:
    """Print the whole audit to ``console``; ``privacy_note`` says how user ids were treated
    in the report files (shown under data quality)."""
    for part in sections(result, written=written, editorial_rows=editorial_rows,
                         privacy_note=privacy_note):
        console.print(part)


def sections(result: AuditResult, *, written=None, editorial_rows=10,
             privacy_note: str | None = None) -> list:
    r = result
    out = [_headline(r), _ladder(r), _surfaces(r)]
    if r.evidence is not None:
        out.extend(evidence_tables(r.evidence))
    out.extend([_profile(r), _quality(r, privacy_note), _cold(r, editorial_rows),
                _assumptions(r)])
    if written:
        out.append(Text("Written: " + ", ".join(written), style="dim"))
    return out


def _headline(r: AuditResult) -> Panel:
    d = r.decision
    tiers = {t.id: t for t in d.tiers}
    head = tiers[d.headline_tier].name if d.headline_tier else "no tier"
    v = r.profile.volume
    lines = Text()
    lines.append("Supported now: ", style="bold")
    lines.append(f"{head}\n", style="bold green" if d.headline_tier else "bold red")
    lines.append("Personalised rows: ", style="bold")
    lines.append("GO" if d.personalised_go else "NO-GO",
                 style="bold green" if d.personalised_go else "bold red")
    if d.personalised_reasons:
        lines.append("  (" + "; ".join(d.personalised_reasons[:2]) + ")")
    lines.append("\n")
    if d.next_tier:
        nt = tiers[d.next_tier]
        lines.append("Next tier: ", style="bold")
        lines.append(f"{nt.name} is {STATUS_TEXT[nt.status].lower()}")
        if nt.reasons:
            lines.append(f": {nt.reasons[0]}")
        lines.append("\n")
    lines.append(
        f"Data: {fmt(v.interactions)} interactions from {fmt(v.users)} users on "
        f"{fmt(v.items_seen)} of {fmt(v.catalogue_items)} items over {fmt(v.span_days)} days "
        f"({v.weeks} weeks); density {v.density:.2e}\n")
    conf = r.run.config["confidence"]
    lines.append(f"How sure: {conf:.0%} intervals throughout; seed {r.run.seed}; "
                 f"as of {r.run.as_of[:19].replace('T', ' ')} UTC")
    return Panel(lines, title="Recommendation readiness audit", title_align="left",
                 box=box.ROUNDED)


def _rule_cell(results) -> Text:
    parts = []
    for res in results:
        rule = res.rule
        if rule.severity != "blocking" and res.outcome in ("pass", "skipped"):
            continue
        note = "" if rule.severity == "blocking" else "note: "
        parts.append(f"[{OUTCOME_MARK[res.outcome]}] {note}{rule.metric} {fmt(res.value)} "
                     f"(needs {rule.op} {fmt(rule.threshold)})")
    return Text("\n".join(parts) or "-")


def _ladder(r: AuditResult) -> Table:
    t = Table(title="Tier ladder (lowest first)", box=box.SIMPLE_HEAD, title_justify="left",
              expand=False)
    t.add_column("Tier", no_wrap=True)
    t.add_column("Verdict", no_wrap=True)
    t.add_column(Text("Blocking rules: measured (needed)   [ok] pass  [~] borderline  [x] fail  "
                      "[?] not measured"), overflow="fold")
    for v in r.decision.tiers:
        t.add_row(Text(v.name), status(v.status), _rule_cell(v.results))
    return t


def _surfaces(r: AuditResult) -> Table:
    t = Table(title="Surfaces", box=box.SIMPLE_HEAD, title_justify="left")
    t.add_column("Row", no_wrap=True)
    t.add_column("Verdict", no_wrap=True)
    t.add_column("Why, and what is missing", overflow="fold")
    for v in r.decision.surfaces:
        why = []
        for res in v.results:
            if res.rule.severity == "blocking" and res.outcome not in ("pass", "skipped"):
                why.append(res.rule.fix or res.rule.rationale)
        why += [x for x in v.reasons if x.startswith("tier ")]
        t.add_row(Text(v.name), status(v.status), Text("\n".join(dict.fromkeys(why)) or "ok"))
    return t


def _profile(r: AuditResult) -> Table:
    p = r.profile
    t = Table(title="Data profile", box=box.SIMPLE_HEAD, title_justify="left", show_header=False)
    t.add_column("Measure", no_wrap=True)
    t.add_column("Value", overflow="fold")
    a = p.activity
    t.add_row("Users with >= 1/2/3/5/10/20 items",
              " / ".join(f"{fmt(n)} ({pct(s)})"
                         for n, s in zip(a.users_at_least, a.share_at_least)))
    t.add_row("Returning week over week", pct(a.returning_share))
    s = p.support
    t.add_row("Items with >= " + "/".join(map(str, s.levels)) + " users",
              " / ".join(f"{fmt(n)}" for n in s.items_at_least)
              + f"  (catalogue coverage {pct(s.coverage)})")
    lt = p.long_tail
    t.add_row("Long tail", f"top 20% of items hold {pct(lt.top20_share)} of interactions; "
                           f"Gini {lt.gini:.3f} (population form)")
    c = p.cooccurrence
    k3 = c.k_thresholds.index(3) if 3 in c.k_thresholds else 0
    t.add_row("Co-occurrence",
              f"{fmt(c.pairs_significant)} of {fmt(c.pairs_scored)} scored item pairs above "
              f"chance; items with >= {c.k_thresholds[k3]} significant neighbours: "
              f"{pct(c.item_share[k3])} of items, {pct(c.interaction_share[k3])} of "
              f"interactions; histories capped at the {p.history_cap} most recent items"
              + (f"; {p.users_excluded} implausible accounts left out" if p.users_excluded else ""))
    if p.ratings is not None:
        rt = p.ratings
        t.add_row("Ratings", f"{fmt(rt.ratings)} ratings on {fmt(rt.rated_items)} items; items "
                  f"with >= 20 ratings: {fmt(rt.items_at_least[rt.levels.index(20)])}")
    if p.categories is not None:
        ct = p.categories
        t.add_row("Categories", f"{ct.categories} categories, {ct.rows_supportable} can fill a "
                  f"{ct.row_length}-item row; {pct(ct.share_focused)} of users keep half their "
                  "items in one category")
    return t


def _quality(r: AuditResult, privacy_note: str | None = None) -> Group:
    q = r.quality
    head = Text()
    head.append("Data quality: ", style="bold")
    head.append(f"{fmt(q.rows_read)} rows read, {fmt(q.rows_used)} used, "
                f"{fmt(q.rows_quarantined)} set aside (quarantine.csv), "
                f"{fmt(q.duplicates_dropped)} exact duplicates dropped; timestamps read as "
                f"{q.timestamp_format}.")
    lines = [head]
    shown = q.issues[:8]
    for i in shown:
        line = Text("- ")
        line.append(f"{i.code}", style="bold")
        unit = i.unit[:-1] if i.count == 1 and i.unit.endswith("s") else i.unit
        line.append(f" ({fmt(i.count)} {unit}, {i.severity}): ")
        line.append(i.message)
        lines.append(line)
    if not q.issues:
        lines.append(Text("- no problems found"))
    if len(q.issues) > len(shown):
        lines.append(Text(f"- ... {len(q.issues) - len(shown)} more in audit.json"))
    if privacy_note:
        lines.append(Text(f"User ids: {privacy_note}"))
    return Group(*lines)


def _cold(r: AuditResult, rows: int) -> Group:
    u, it = r.cold_users, r.cold_items
    head = Text()
    head.append("Cold users: ", style="bold")
    origin = ("the backtest: the first history band where personalisation beat popularity"
              if u.threshold_source == "backtest" else "common practice, no published source")
    head.append(f"{fmt(u.cold_active_users)} of {fmt(u.active_users)} users active in the last "
                f"{u.active_days} days ({pct(u.cold_share)}) are below the personalisation "
                f"threshold of {u.threshold} distinct item{'s' if u.threshold != 1 else ''} "
                f"({origin}).\n")
    head.append("Cold items: ", style="bold")
    head.append(f"{fmt(it.cold)} of {fmt(it.catalogue_items)} ({pct(it.share)}): "
                f"{fmt(it.never_seen)} never consumed, {fmt(it.low_support)} with fewer than "
                f"{it.min_users} users, {fmt(it.no_neighbours)} without a neighbour above chance.")
    t = Table(title=f"Editorial placement (first {min(rows, len(it.placement))} of "
                    f"{len(it.placement)}; full list in editorial_placement.csv)",
              box=box.SIMPLE_HEAD, title_justify="left")
    for col, kw in (("#", {"justify": "right"}), ("Item", {"no_wrap": True}),
                    ("Title", {"overflow": "fold", "max_width": 28}), ("Added", {"no_wrap": True}),
                    ("Users", {"justify": "right"}), ("Reason", {"overflow": "fold"}),
                    ("More users needed", {"justify": "right"})):
        t.add_column(col, **kw)
    for row in it.placement.head(rows).itertuples():
        added = row.added if row.added == row.added and row.added is not None else row.first_seen
        added_s = "-" if added is None or added != added else str(added)[:10]
        title = "" if row.title is None or row.title != row.title else str(row.title)
        need = row.more_users_needed
        t.add_row(str(row.rank), Text(str(row.item)), Text(title), added_s, fmt(row.users),
                  Text(row.reason), "?" if need != need else fmt(need))
    return Group(head, t)


def _assumptions(r: AuditResult) -> Panel:
    notes = list(r.quality.notes)
    notes.append("Verdicts come from the rules in the shipped rules file"
                 + (f" with overrides from {r.run.config['rules_file']}"
                    if r.run.config.get("rules_file") else "")
                 + "; `advisor rules` shows each threshold with its rationale and source.")
    notes.append("Significant neighbour: Wilson lower bound of P(x|y) above x's base rate among "
                 "users active after x first appeared (exposure inferred from activity, not "
                 "impressions); with many pairs tested some are false positives.")
    notes.append("'More users needed' assumes the item's strongest observed co-consumption rate "
                 "holds as data grows; the strongest of many observed pairs tends to overstate "
                 "its rate, so read it as an optimistic lower bound for planning, not a "
                 "promise.")
    if r.evidence is None:
        notes.append("The backtest was switched off: rules that need it are borderline at best.")
    notes.append(f"Events read, validated and counted by the {r.run.engine} engine (the "
                 "engines give identical counts on the test logs).")
    # Text, not a markup string: notes carry file names and config sections such as
    # "[events.interaction]" that rich would otherwise take for style tags and drop.
    return Panel(Text("\n".join(f"- {n}" for n in notes)), title="Assumptions",
                 title_align="left", box=box.ROUNDED)
