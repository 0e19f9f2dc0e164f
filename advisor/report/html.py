"""The HTML report: one self-contained, printable page per audit, for people without a terminal.

The page shows what the terminal report shows, laid out for reading and printing: the
headline verdict first, in plain words, then the numbers behind it. It needs no network:
styles are inline, charts are inline SVG drawn by :mod:`advisor.report.charts`, there is no
script at all, and a Content-Security-Policy meta tag forbids loading anything.

Every piece of text that comes from the logs, the catalogue, the config or the rules (ids,
titles, categories, messages, file names) passes through :func:`esc`; only fragments this
module builds itself are marked trusted (:class:`_Html`).
"""

from __future__ import annotations

import html as _html
import math
import re
from collections.abc import Iterable, Sequence
from pathlib import PurePath
from typing import Any

import pandas as pd

from advisor.pipeline import AuditResult
from advisor.report import charts
from advisor.report.terminal import STATUS_TEXT, fmt, pct
from advisor.rules.engine import PERSONALISED_TIER
from advisor.rules.metrics import METRIC_DOCS
from advisor.rules.model import RuleResult

__all__ = ["SECTION_IDS", "esc", "render_html"]

#: Section ids, in page order (``trend`` only appears with a history or a forecast).
SECTION_IDS = ("headline", "tiers", "surfaces", "charts", "evidence", "trend", "cold-users",
               "cold-items", "editorial", "quality", "assumptions", "inputs")
#: Rows of the editorial list shown in the page (the CSV has all of them).
EDITORIAL_ROWS = 50
CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"

_OUTCOME = {"pass": ("pass", "\u2713 pass"), "borderline": ("borderline", "~ borderline"),
            "fail": ("fail", "\u2717 fail"), "not_measured": ("unknown", "? not measured"),
            "skipped": ("skipped", "\u2013 skipped")}
_OP = {">=": "\u2265", ">": ">", "<=": "\u2264", "<": "<"}
#: Plain words for the backtest metrics the shipped rules read.
_EVIDENCE_WORDS = {
    "evidence.itemknn_lift_low": "gain of item neighbours over popularity, lower end (NDCG)",
    "evidence.itemknn_relative_lift": "gain of item neighbours over popularity (relative)",
    "evidence.latent_vs_itemknn_low": "gain of latent factors over item neighbours, lower end",
    "evidence.best_lift_low": "gain of the best personalised model over popularity, lower end",
    "evidence.curve_still_climbing": "learning curve still climbing",
    "evidence.neighbour_reliability": "reliability of item neighbour lists",
}


class _Html(str):
    """A fragment of HTML built by this module (trusted; never passed through :func:`esc`)."""

    __slots__ = ()


def esc(value: Any) -> str:
    """Escape any text for HTML (element content and quoted attributes); None becomes "".

    Examples
    --------
    >>> esc('<script>"x"</script>')
    '&lt;script&gt;&quot;x&quot;&lt;/script&gt;'
    """
    if isinstance(value, _Html):
        return value
    return _html.escape("" if value is None else str(value), quote=True)


def _h(template: str, *args: Any) -> _Html:
    """``template`` with every ``{}`` filled by an escaped argument."""
    return _Html(template.format(*(esc(a) for a in args)))


def _missing(x: Any) -> bool:
    if x is None or x is pd.NaT:
        return True
    try:
        return bool(x != x)
    except (TypeError, ValueError):
        return False


def _table(headers: Sequence[str], rows: Iterable[Sequence[Any]], *, num: Sequence[int] = (),
           cls: str = "") -> _Html:
    """A table; cells are escaped unless trusted; columns in ``num`` are right-aligned."""
    head = "".join(f'<th{" class=num" if i in num else ""} scope="col">{esc(h)}</th>'
                   for i, h in enumerate(headers))
    body = []
    for row in rows:
        tds = "".join(f'<td{" class=num" if i in num else ""}>{esc(c)}</td>'
                      for i, c in enumerate(row))
        body.append(f"<tr>{tds}</tr>")
    return _Html(f'<table class="{esc(cls)}"><thead><tr>{head}</tr></thead>'
                 f'<tbody>{"".join(body)}</tbody></table>')


def _badge(status: str) -> _Html:
    return _h('<span class="badge {}">{}</span>', status, STATUS_TEXT.get(status, status))


def _section(sid: str, title: str, lede: str | None, *body: str) -> _Html:
    lede_html = _h('<p class="lede">{}</p>', lede) if lede else ""
    return _Html(f'<section id="{esc(sid)}"><h2>{esc(title)}</h2>{lede_html}'
                 f'{"".join(esc(b) for b in body)}</section>')


def _with_ci(value: str, lo, hi) -> _Html:
    """A number with its interval on a second, smaller line."""
    return _h('{}<div class="small">{}</div>', value, _ci(lo, hi))


def _ci(lo, hi, digits: int = 3) -> str:
    return "" if lo is None or hi is None else f"[{lo:.{digits}f}, {hi:.{digits}f}]"


def _get(obj: Any, name: str, default: Any = None) -> Any:
    """Read ``name`` from a mapping or an object (history objects are duck-typed)."""
    if obj is None:
        return default
    if isinstance(obj, dict):
        return obj.get(name, default)
    return getattr(obj, name, default)


# ----------------------------------------------------------------------------- rule words

def _metric_words(metric: str) -> str:
    """Plain words for a metric name, from the rules' metric documentation."""
    if metric in _EVIDENCE_WORDS:
        return _EVIDENCE_WORDS[metric]
    m = re.fullmatch(r"cooc\.share_(items|interactions)_ge_(\d+)_neighbours", metric)
    if m:
        return (f"share of {'seen items' if m.group(1) == 'items' else 'interactions on items'}"
                f" with at least {m.group(2)} neighbours above chance")
    doc = METRIC_DOCS.get(metric)
    m = re.fullmatch(r"(.*_ge_)(\d+)", metric)
    if doc is None and m:
        doc = METRIC_DOCS.get(f"{m.group(1)}M")
        if doc:
            doc = re.sub(r"\s*\(M = [^)]*\)", "", doc)
            doc = re.sub(r"\bM\b", m.group(2), doc)
    if doc is None:
        return metric
    flag = re.fullmatch(r"1 if (.*), else 0", doc)
    return flag.group(1) if flag else doc


def _is_share(metric: str) -> bool:
    return any(w in metric for w in ("share", "coverage", "relative_lift"))


def _is_flag(metric: str) -> bool:
    return metric.startswith("signals.") or metric == "evidence.curve_still_climbing"


def _value(metric: str, value) -> str:
    if value is None:
        return "not measured"
    if _is_flag(metric):
        return "yes" if value >= 1 else "no"
    return pct(value) if _is_share(metric) else fmt(value)


def _needs(res: RuleResult) -> str:
    r = res.rule
    if _is_flag(r.metric) and r.op in (">=", ">") and r.threshold in (0.0, 1.0):
        return "yes"
    limit = pct(r.threshold) if _is_share(r.metric) else fmt(r.threshold)
    return f"{_OP.get(r.op, r.op)}\u00a0{limit}"  # no break between the sign and the number


def _plain_rule(res: RuleResult, *, fix: bool = True) -> str:
    """One sentence on a rule that did not pass: what was measured, what is needed, the fix."""
    r = res.rule
    return (f"{_metric_words(r.metric)}: {_value(r.metric, res.value)}, needs {_needs(res)}"
            + (f" \u2014 {r.fix}" if fix and r.fix else ""))


def _blocking_misses(results) -> list[RuleResult]:
    return [x for x in results if x.rule.severity == "blocking"
            and x.outcome not in ("pass", "skipped")]


# ----------------------------------------------------------------------------- sections

def _headline(r: AuditResult) -> _Html:
    d, v = r.decision, r.profile.volume
    tiers = {t.id: t for t in d.tiers}
    summaries = {t.id: t.summary for t in r.rules.tiers}
    head = tiers[d.headline_tier].name if d.headline_tier else "No tier yet"
    go = d.personalised_go
    if PERSONALISED_TIER in tiers and not go:
        why = [_plain_rule(x, fix=False)
               for x in _blocking_misses(tiers[PERSONALISED_TIER].results)]
    else:
        why = []
    why = why or list(d.personalised_reasons)
    cards = [_h('<div class="verdict main"><div class="label">Supported now</div>'
                '<div class="big" data-field="headline-tier">{}</div><div class="sub">{}</div>'
                '</div>', head, summaries.get(d.headline_tier, "Not even the simplest lists "
                                                               "are supported yet."))]
    cards.append(_Html(
        f'<div class="verdict {"go" if go else "nogo"}"><div class="label">Personalised rows'
        f'</div><div class="big" data-field="personalised">{"GO" if go else "NO-GO"}</div>'
        f'<ul class="why">{"".join(_h("<li>{}</li>", w) for w in why)}</ul></div>'))
    if d.next_tier:
        nt = tiers[d.next_tier]
        missing = ([_plain_rule(x, fix=False) for x in _blocking_misses(nt.results)]
                   or list(nt.reasons))
        cards.append(_Html(
            _h('<div class="verdict next"><div class="label">Next tier</div>'
               '<div class="big">{}</div><div class="sub">', nt.name)
            + _badge(nt.status) + "</div>"
            + f'<ul class="why">{"".join(_h("<li>{}</li>", w) for w in missing)}</ul></div>'))
    else:
        cards.append(_Html('<div class="verdict next"><div class="label">Next tier</div>'
                           '<div class="big">Top of the ladder</div></div>'))
    dens = ("n/a" if not math.isfinite(v.density) else
            pct(v.density) if v.density >= 0.001 else f"{v.density:.1e}")
    kpis = [("interactions", fmt(v.interactions)), ("users", fmt(v.users)),
            ("catalogue items seen", f"{fmt(v.items_seen)} of {fmt(v.catalogue_items)}"),
            (f"of data ({fmt(v.span_days)} days)", f"{v.weeks} weeks"),
            ("of user-item pairs filled", dens)]
    kpi_html = "".join(_h('<div class="kpi"><div class="n">{}</div><div class="l">{}</div>'
                          '</div>', n, label) for label, n in kpis)
    conf = r.run.config.get("confidence", 0.95)
    as_of = r.run.as_of[:19].replace("T", " ")
    sure = (f"How sure: {conf:.0%} intervals throughout; seed {r.run.seed} (a rerun with the "
            f"same seed gives the same numbers); data as of {as_of} UTC.")
    return _Html(f'<section id="headline" class="hero"><h2>The verdict</h2>'
                 f'<div class="verdicts">{"".join(cards)}</div>'
                 f'<div class="kpis">{kpi_html}</div>'
                 f'{_h("<p class=sure>{}</p>", sure)}</section>')


def _tiers(r: AuditResult) -> _Html:
    rows = []
    summaries = {t.id: t.summary for t in r.rules.tiers}
    for v in r.decision.tiers:
        results = v.results or ()
        span = max(1, len(results))
        first = _h('<td rowspan="{}" class="tier"><strong>{}</strong><div class="small">{}'
                   '</div></td>', span, v.name, summaries.get(v.id, "")) + \
            _Html(f'<td rowspan="{span}">{_badge(v.status)}</td>')
        if not results:
            rows.append(f"<tr>{first}<td colspan=4>no rules</td></tr>")
        for i, res in enumerate(results):
            cls, word = _OUTCOME.get(res.outcome, ("unknown", res.outcome))
            adv = res.rule.severity != "blocking"
            cells = _h('<td>{}<div class="small mono">{}{}</div></td><td class="num">{}</td>'
                       '<td class="num">{}</td><td><span class="out {}">{}</span></td>',
                       _metric_words(res.rule.metric), res.rule.id,
                       " \u00b7 advisory, does not decide" if adv else "",
                       _value(res.rule.metric, res.value), _needs(res), cls, word)
            rows.append(f'<tr class="{"adv" if adv else ""}">{first if i == 0 else ""}'
                        f"{cells}</tr>")
    table = _Html('<table class="ladder"><thead><tr><th scope="col">Tier</th>'
                  '<th scope="col">Verdict</th><th scope="col">What is checked</th>'
                  '<th scope="col" class="num">Measured</th><th scope="col" class="num">Needed'
                  '</th><th scope="col">Outcome</th></tr></thead><tbody>'
                  + "".join(rows) + "</tbody></table>")
    return _section("tiers", "Tier ladder", "Each tier is a family of methods, simplest first. "
                    "A tier is ready when every blocking rule passes; the measured value and "
                    "the threshold are shown so you can argue with them.", table)


def _surfaces(r: AuditResult) -> _Html:
    tier_names = {t.id: t.name for t in r.decision.tiers}
    needs = {s.id: tier_names.get(s.tier, s.tier) for s in r.rules.surfaces}
    rows = []
    for v in r.decision.surfaces:
        why = [_plain_rule(x) for x in _blocking_misses(v.results)]
        why += [x for x in v.reasons if x.startswith("tier ")]
        why_html = (_Html("<ul>" + "".join(_h("<li>{}</li>", w) for w in dict.fromkeys(why))
                          + "</ul>") if why else "nothing: ready to show")
        rows.append((v.name, needs.get(v.id, ""), _badge(v.status), why_html))
    return _section("surfaces", "Rows you could show", "Each row of a home page needs its tier "
                    "to be ready and its own data (dates, ratings, progress) to be there.",
                    _table(("Row", "Needs tier", "Verdict", "What is missing"), rows,
                           cls="surfaces"))


def _figure(fid: str, svg: str | None, caption: str) -> _Html:
    body = svg if svg else _h('<p class="nochart">{}</p>', "Not enough data for this chart.")
    return _Html(f'<figure id="{esc(fid)}">{body}'
                 f"<figcaption>{esc(caption)}</figcaption></figure>")


def _safe_chart(draw, *args, **kwargs) -> str | None:
    """Draw a chart; None when the numbers cannot be drawn (the page still renders)."""
    try:
        return draw(*args, **kwargs)
    except (ValueError, OverflowError, ZeroDivisionError):
        return None


def _charts(r: AuditResult) -> _Html:
    p = r.profile
    lt, s, v, a = p.long_tail, p.support, p.volume, p.activity
    lorenz = (_safe_chart(charts.lorenz_svg, lt.lorenz_population, lt.lorenz_value,
                          gini=lt.gini, top20_share=lt.top20_share)
              if len(lt.lorenz_population) > 1 and math.isfinite(lt.gini) else None)
    support = (_safe_chart(charts.support_svg, s.levels, s.items_at_least, v.catalogue_items,
                           min_users=r.cold_items.min_users) if s.levels else None)
    w = v.weekly
    weekly = (_safe_chart(charts.weekly_growth_svg, [str(x) for x in w["week"]],
                          w["interactions"].tolist(), w["active_users"].tolist(),
                          w["new_users"].tolist(),
                          returning_users=w["returning_users"].tolist()
                          if "returning_users" in w else None)
              if len(w) else None)
    figs = _Html('<div class="figrow">'
                 + _figure("chart-lorenz", lorenz,
                           f"The further the curve sags below the diagonal, the more "
                           f"interactions pile onto few items. Top 20% of items: "
                           f"{pct(lt.top20_share)} of interactions; Gini {lt.gini:.3f} "
                           "(population form, unseen catalogue items count as zero).")
                 + _figure("chart-support", support,
                           f"Items left of {r.cold_items.min_users} users are too thin for "
                           f"neighbours. Catalogue coverage {pct(s.coverage)}; median "
                           f"{fmt(s.median_users)} users per item.")
                 + "</div>"
                 + _figure("chart-weekly", weekly,
                           "Weekly totals, weeks starting Monday (UTC); the last week may be "
                           "partial. A service whose new and returning users grow each week "
                           "moves up the ladder sooner."))
    facts = [("Users with at least 1 / 2 / 3 / 5 / 10 / 20 items" if a.levels ==
              (1, 2, 3, 5, 10, 20) else "Users with at least " + " / ".join(map(str, a.levels))
              + " items", " / ".join(f"{fmt(n)} ({pct(x)})" for n, x in
                                    zip(a.users_at_least, a.share_at_least))),
             ("Median items per user", fmt(a.median_items)),
             ("Users back the next week", pct(a.returning_share)),
             ("Items with at least " + " / ".join(map(str, s.levels)) + " users",
              " / ".join(fmt(n) for n in s.items_at_least))]
    c = p.cooccurrence
    facts.append(("Item pairs consumed together more than chance",
                  f"{fmt(c.pairs_significant)} of {fmt(c.pairs_scored)} pairs scored"))
    facts += [(f"Items with at least {k} such neighbours", f"{pct(si)} of items, "
               f"{pct(sx)} of interactions")
              for k, si, sx in zip(c.k_thresholds, c.item_share, c.interaction_share)]
    if p.ratings is not None:
        facts.append(("Ratings", f"{fmt(p.ratings.ratings)} on {fmt(p.ratings.rated_items)} "
                                 "items"))
    body = [figs, _h("<h3>{}</h3>", "The numbers"),
            _table(("Measure", "Value"), facts, cls="facts")]
    if p.categories is not None:
        ct = p.categories
        body.append(_h("<h3>{}</h3><p>{}</p>", "Categories",
                       f"{ct.categories} categories; {ct.rows_supportable} can fill a "
                       f"{ct.row_length}-item row with items of at least {ct.min_item_users} "
                       f"users; {pct(ct.share_focused)} of users keep half their items in one "
                       "category."))
        t = ct.table.head(12)
        body.append(_table(("Category", "Items", "Seen", "With enough users", "User-item pairs"),
                           [(row.category, fmt(row.items), fmt(row.items_seen),
                             fmt(row.supported_items), fmt(row.pairs))
                            for row in t.itertuples()], num=(1, 2, 3, 4), cls="compact"))
        if len(ct.table) > 12:
            body.append(_h('<p class="small">{}</p>', f"{len(ct.table) - 12} more categories "
                                                      "in the JSON report."))
    return _section("charts", "The data at a glance", "How much data there is, how it spreads "
                    "over the catalogue, and how fast it grows.", *body)


def _evidence(r: AuditResult, forecast: Any) -> _Html:
    ev = r.evidence
    if ev is None:
        return _section("evidence", "Does personalisation beat popularity here?",
                        "The backtest was switched off for this audit, so rules that need it "
                        "are borderline at best.")
    s = ev.split
    if s is None or not ev.candidates:
        return _section("evidence", "Does personalisation beat popularity here?",
                        "A backtest was not possible on this log. " + " ".join(ev.notes))
    proto = ("one global time cut-off: models learn from the past and are tested on the "
             "following weeks" if s.is_temporal else "each user's latest items held out "
             "(leakier: there is no global timeline)")
    lede = (f"We replayed the past: {proto}. {s.test_users:,} test users"
            + (f" (a seeded sample of {s.eligible_test_users:,})" if s.sampled else "")
            + f", {s.train_pairs:,} training pairs"
            + (f" (the backtest ran on a seeded sample of the log's {s.population_users:,} "
               "users to bound its cost; with fewer users to learn from, the models usually "
               "score lower, so the lifts are likely understated)" if s.users_sampled else "")
            + ", every list ranked over the whole catalogue. "
            f"NDCG@{ev.k} is higher when the items a user really took next sit nearer the top "
            f"of a {ev.k}-item row. {s.reason}")
    rows = []
    for cand in ev.candidates:
        cmp = ev.comparison(cand.name)
        tag = ("personalised, best" if cand.name == ev.best_candidate else
               "personalised" if cand.personalised else "same for everyone")
        name = _h('<strong>{}</strong> <span class="tag">{}</span><div class="small">{}</div>',
                  cand.name, tag, cand.method)
        rows.append((name,
                     _with_ci(f"{cand.ndcg:.3f}", cand.ndcg_low, cand.ndcg_high),
                     f"{cand.recall:.3f}", f"{cand.coverage:.2f}", f"{cand.long_tail_share:.2f}",
                     "\u2013" if cmp is None else
                     _with_ci(f"{cmp.lift:+.3f}", cmp.lift_low, cmp.lift_high),
                     "" if cmp is None or cmp.p_value is None else
                     ("<0.001" if cmp.p_value < 0.001 else f"{cmp.p_value:.3f}"),
                     "" if cmp is None or cmp.effect_size is None else f"{cmp.effect_size:.2f}"))
    body: list[str] = [_table(("Candidate", f"NDCG@{ev.k}", f"Recall@{ev.k}", "Coverage",
                               "Long tail", "Lift vs popularity", "p-value", "Effect size"), rows,
                              num=tuple(range(1, 8)), cls="candidates"),
                       _h('<p class="small">{}</p>', f"Intervals: {ev.confidence:.0%} seeded "
                          f"bootstrap (seed {ev.seed}). Lift: mean per-user NDCG difference; "
                          "p-value from a paired t-test; effect size d_z = mean difference / its "
                          "standard deviation. Coverage: share of the catalogue recommended to "
                          "anyone; long tail: share of slots outside the top 20% of items.")]
    lvi = ev.latent_vs_itemknn
    if lvi is not None:
        body.append(_h("<p>{}</p>", f"Latent factors against item neighbours: {lvi.lift:+.3f} "
                       f"{_ci(lvi.lift_low, lvi.lift_high)}."))
    if ev.bands:
        brows = []
        for band in ev.bands:
            label = f"{band.low}+" if band.high is None else f"{band.low}-{band.high}"
            c = band.comparison
            if c is None or not band.enough_users:
                brows.append((label, f"{band.users:,}", "\u2013", "", "too few users to tell"))
                continue
            verdict = ("personalisation wins" if c.lift_low is not None and c.lift_low > 0 else
                       "popularity wins" if c.lift_high is not None and c.lift_high < 0 else
                       "no clear difference")
            brows.append((label, f"{band.users:,}", f"{c.lift:+.3f}",
                          _ci(c.lift_low, c.lift_high), verdict))
        body += [_h("<h3>{}</h3>", f"Who gains: lift of {ev.best_candidate} over popularity by "
                    "user history"),
                 _table(("Items in history", "Users", "Lift", "interval", "Verdict"), brows,
                        num=(1, 2, 3), cls="compact")]
    body.append(_learning_curve(ev, forecast, r.profile.volume.users))
    rel = ev.reliability
    if rel is not None and rel.reliability is not None:
        body.append(_h("<p>{}</p>", (
            f"Neighbour lists are {rel.reliability:.2f} reliable (split-half agreement "
            f"{rel.half_agreement:.2f}, projected to all users with Spearman-Brown); "
            + (f"about {rel.users_needed:,} more users for {rel.target:.1f}."
               if rel.users_needed else f"target {rel.target:.1f} "
               f"{'met' if rel.status == 'met' else 'not estimable'}."))))
    if ev.notes:
        body.append(_h('<p class="small">{}</p>', "Backtest notes: " + " ".join(ev.notes)))
    return _section("evidence", "Does personalisation beat popularity here?", lede, *body)


def _curve_markers(forecast: Any, users_now: int, train_now: int) -> list:
    """Forecast user counts (4 and 8 weeks ahead) on the learning curve's training-user axis.

    The users fit forecasts all users; training users are taken to stay the same share of
    them as today (the assumption the readiness forecast makes for the learning curve).
    """
    proj = _get(_get(forecast, "users"), "projections", None) or ()
    if not proj or users_now <= 0:
        return []
    share = train_now / users_now
    by_week = {_get(p, "weeks_ahead"): p for p in proj}
    chosen = [by_week[w] for w in (4, 8) if w in by_week] or [proj[-1]]
    out = []
    for p in chosen:
        lo, hi = _get(p, "low"), _get(p, "high")
        out.append((f"in {_get(p, 'weeks_ahead')} weeks" + (f" ({_get(p, 'date')})"
                    if _get(p, "date") else ""), float(_get(p, "value")) * share,
                    None if lo is None else float(lo) * share,
                    None if hi is None else float(hi) * share))
    return out


def _learning_curve(ev, forecast: Any, users_now: int) -> _Html:
    lc = ev.learning_curve
    if lc is None or not lc.points:
        return _Html("")
    markers = _curve_markers(forecast, users_now, lc.points[-1].train_users)
    svg = _safe_chart(charts.learning_curve_svg, [p.train_users for p in lc.points],
                      [p.lift for p in lc.points], [p.lift_low for p in lc.points],
                      [p.lift_high for p in lc.points], candidate=lc.candidate,
                      projections=[(x.train_users, x.lift, x.low, x.high)
                                   for x in lc.projections],
                      target_lift=lc.target_lift, markers=markers)
    words = []
    if lc.slope is not None:
        words.append(f"Each doubling of users adds {lc.slope:+.4f} "
                     f"{_ci(lc.slope_low, lc.slope_high, 4)} of lift: "
                     + ("still climbing." if lc.still_climbing else "not clearly climbing."))
    words.append(lc.reason[:1].upper() + lc.reason[1:] + ".")
    if lc.projections:
        words.append("Forecast lift (an extrapolation of the fitted trend): " + "; ".join(
            f"{x.train_users:,} users {x.lift:+.3f} [{x.low:.3f}, {x.high:.3f}]"
            for x in lc.projections) + ".")
    rows = [(f"{p.train_users:,}", f"{p.baseline_ndcg:.3f}", f"{p.candidate_ndcg:.3f}",
             f"{p.lift:+.3f}", _ci(p.lift_low, p.lift_high)) for p in lc.points]
    return _Html(_h("<h3>{}</h3>", "Learning curve: will more users help?")
                 + _figure("chart-learning-curve", svg,
                           f"Models refitted on a share of the training users; fitted form: "
                           f"{lc.form}. Dashed: the fitted trend carried forward, with its "
                           "interval." + (" Vertical lines: training users expected at future "
                                          "dates from the growth forecast (shaded: its "
                                          "prediction interval)." if markers else ""))
                 + _h("<p>{}</p>", " ".join(words))
                 + _table(("Training users", "Popularity NDCG", f"{lc.candidate} NDCG", "Lift",
                           "interval"), rows, num=(0, 1, 2, 3, 4), cls="compact"))


def _change(now, before) -> str:
    if now is None or before is None or before == 0:
        return ""
    return f"{(now - before) / abs(before):+.0%}"


def _as_of_date(e: Any) -> str:
    return str(_get(e, "as_of_date", None) or _get(e, "as_of", ""))[:10]


def _projected(fit: Any) -> list[tuple[str, float, float, float]]:
    return [(str(_get(p, "date")), float(_get(p, "value")), float(_get(p, "low")),
             float(_get(p, "high")))
            for p in (_get(fit, "projections", None) or ()) if _get(p, "date")]


def _when(c: Any) -> str:
    """'2027-01-10 (2026-12-27 to 2027-02-07)' for a crossing or tier reach."""
    if _get(c, "date") is None:
        return "no date"
    hi = _get(c, "date_high") or "beyond the horizon"
    return f"{_get(c, 'date')} ({_get(c, 'date_low')} to {hi})"


def _trend(r: AuditResult, history: Any, forecast: Any) -> _Html:
    entries = sorted(history or (), key=_as_of_date)
    if not entries and forecast is None:
        return _Html("")
    names = {t.id: t.name for t in r.decision.tiers}
    body: list[str] = []
    if forecast is not None:
        reach = _get(forecast, "next_tier")
        if _get(forecast, "reason"):
            line = f"No forecast yet: {_get(forecast, 'reason')}."
        elif reach is None:
            line = "The top tier is already supported: nothing left to forecast."
        elif _get(reach, "date"):
            tier = names.get(_get(reach, "tier"), _get(reach, "tier"))
            line = (f"{tier} could be within reach around {_get(reach, 'date')}, in about "
                    f"{_get(reach, 'weeks')} weeks (between {_get(reach, 'date_low')} and "
                    f"{_get(reach, 'date_high') or 'beyond the forecast horizon'}).")
            if _get(reach, "reason"):
                line += f" Note: {_get(reach, 'reason')}."
        else:
            tier = names.get(_get(reach, "tier"), _get(reach, "tier"))
            line = f"No date for {tier} yet: {_get(reach, 'reason')}."
        body.append(_h('<p class="forecast">{}</p>', line))
        conf = _get(forecast, "confidence", 0.95)
        body.append(_h('<p class="small">{}</p>', f"Intervals are {conf:.0%} prediction "
                       f"intervals of a growth fit over {_get(forecast, 'points')} audits. "
                       f"{_get(forecast, 'assumption') or ''}"))
    if entries or forecast is not None:
        users_fit = _get(forecast, "users")
        inter_fit = _get(forecast, "interactions")
        svg = (_safe_chart(charts.history_svg, [_as_of_date(e) for e in entries],
                           [_get(e, "users") for e in entries],
                           [_get(e, "interactions") for e in entries],
                           users_forecast=_projected(users_fit),
                           interactions_forecast=_projected(inter_fit))
               if len(entries) >= 2 else None)
        if svg:
            body.append(_figure("chart-history", svg, "One point per stored audit; dashed: the "
                                "fitted growth carried forward, shaded: its prediction "
                                "interval."))
    crossings = list(_get(forecast, "crossings", None) or ())
    lc_cross = _get(forecast, "learning_curve")
    if lc_cross is not None:
        crossings.append(lc_cross)
    if crossings:
        rows = []
        for c in crossings:
            target = _get(c, "target")
            what = ("users the learning curve asks for" if target == "learning_curve"
                    else _metric_words(str(_get(c, "metric"))))
            rows.append((_h('{}<div class="small mono">{}</div>', what, target),
                         fmt(_get(c, "latest")), fmt(_get(c, "threshold")), _when(c),
                         _get(c, "reason") or ""))
        body += [_h("<h3>{}</h3>", "When each missing requirement is forecast to be met"),
                 _table(("Requirement", "Now", "Needed", "Forecast date (interval)", "Note"),
                        rows, num=(1, 2), cls="crossings")]
    if entries:
        rows, prev = [], None
        for e in entries:
            go = _get(e, "personalised_go")
            rows.append((_as_of_date(e), fmt(_get(e, "users")),
                         _change(_get(e, "users"), _get(prev, "users")),
                         fmt(_get(e, "users_ge_5")), fmt(_get(e, "interactions")),
                         _change(_get(e, "interactions"), _get(prev, "interactions")),
                         names.get(_get(e, "headline_tier"), _get(e, "headline_tier")) or "none",
                         "" if go is None else ("GO" if go else "NO-GO")))
            prev = e
        body += [_h("<h3>{}</h3>", "Audit by audit"),
                 _table(("As of", "Users", "change", "Users with 5+ items", "Interactions",
                         "change", "Supported tier", "Personalised rows"), rows,
                        num=(1, 2, 3, 4, 5), cls="compact")]
    return _section("trend", "Week after week", "How the service grew from audit to audit, "
                    "and when the next tier may be within reach if growth continues.", *body)


def _quality(r: AuditResult) -> _Html:
    q = r.quality
    lede = (f"{fmt(q.rows_read)} rows read: {fmt(q.rows_used)} used, {fmt(q.rows_quarantined)} "
            f"set aside (each with its reason, in quarantine.csv), {fmt(q.duplicates_dropped)} "
            f"exact duplicates dropped. Timestamps read as {q.timestamp_format}.")
    rows = [(i.code.replace("_", " "),
             f"{fmt(i.count)} {i.unit[:-1] if i.count == 1 and i.unit.endswith('s') else i.unit}",
             i.severity, _h('<span class="nowrap">{}</span><div class="small">line {}</div>',
                            i.first_file, i.first_line) if i.first_file else "\u2013",
             i.message) for i in q.issues]
    body = (_table(("Problem", "How many", "Handling", "First at", "What it means, what to do"),
                   rows, num=(1,), cls="quality") if rows
            else _h("<p>{}</p>", "No data problems found."))
    return _section("quality", "Data quality", lede, body)


def _cold_users(r: AuditResult) -> _Html:
    u = r.cold_users
    src = "from the backtest" if u.threshold_source == "backtest" else "from common practice"
    items = f"{u.threshold} item{'s' if u.threshold != 1 else ''}"
    if u.cold_active_users:
        lede = (f"{fmt(u.cold_active_users)} of {fmt(u.active_users)} users active in the last "
                f"{u.active_days} days ({pct(u.cold_share)}) have fewer than {items}, the point "
                f"where personalised rows start to help (threshold {src}). Show them the "
                "non-personalised rows until they have more history.")
    else:
        lede = (f"None of the {fmt(u.active_users)} users active in the last {u.active_days} "
                f"days is cold: personalised rows help from {items} of history (threshold "
                f"{src}), and every active user has that many.")
    b = u.bands
    top = max(1, int(b["active_users"].max())) if len(b) else 1
    rows = []
    has_cold_count = "cold_active_users" in b.columns
    for row in b.to_dict(orient="records"):
        active = int(row["active_users"])
        cold = int(row["cold_active_users"]) if has_cold_count else (active if row["cold"]
                                                                     else 0)
        bar = _Html(f'<span class="bar" style="width:{100 * active / top:.1f}%"></span>')
        serve = ("popular rows" if row["cold"] or (active and cold == active) else
                 f"popular rows until {items}, then personalised" if cold else
                 "personalised rows")
        rows.append((row["band"], fmt(row["users"]), fmt(active), fmt(cold), bar, serve))
    return _section("cold-users", "Cold users", lede,
                    _table(("Items in history", "Users", "Active", "Active and cold", "",
                            "Serve with"), rows, num=(1, 2, 3), cls="compact bands"))


def _cold_items(r: AuditResult) -> _Html:
    it = r.cold_items
    lede = (f"{fmt(it.cold)} of {fmt(it.catalogue_items)} catalogue items ({pct(it.share)}) "
            "cannot be placed by a collaborative method yet; editors can place them by hand.")
    rows = [("never consumed", fmt(it.never_seen)),
            (f"fewer than {it.min_users} distinct users", fmt(it.low_support)),
            ("enough users, but no neighbour above chance" if it.min_neighbours <= 1 else
             f"enough users, but fewer than {it.min_neighbours} neighbours above chance",
             fmt(it.no_neighbours))]
    return _section("cold-items", "Cold items", lede,
                    _table(("Why cold", "Items"), rows, num=(1,), cls="compact"))


def _date(x) -> str:
    return "\u2013" if _missing(x) else str(x)[:10]


def _editorial(r: AuditResult) -> _Html:
    pl = r.cold_items.placement
    head = pl.head(EDITORIAL_ROWS)
    rows = []
    for row in head.itertuples():
        added = row.added if not _missing(row.added) else row.first_seen
        need = ("no estimate" if _missing(row.more_users_needed)
                else _h('{} <span class="small">({})</span>', fmt(row.more_users_needed),
                        row.estimate_basis))
        rows.append((row.rank, row.item, "" if _missing(row.title) else row.title, _date(added),
                     fmt(row.users), row.reason, need))
    lede = (f"Cold items in the order to place them: newest first, then those closest to warm. "
            f"Showing {len(head)} of {len(pl)}; editorial_placement.csv has all of them.")
    body = (_table(("#", "Item", "Title", "Added", "Users", "Why cold", "More users needed"),
                   rows, num=(0, 4, 6), cls="editorial") if rows
            else _h("<p>{}</p>", "No cold items: nothing needs placing by hand."))
    return _section("editorial", "Editorial placement list", lede, body)


def _assumptions(r: AuditResult) -> _Html:
    notes = list(r.quality.notes)
    rules_file = r.run.config.get("rules_file")
    notes.append("Verdicts come from the shipped rules"
                 + (f" with overrides from {rules_file}" if rules_file else "")
                 + "; `advisor rules` lists each threshold with its rationale and source.")
    notes.append("An item pair counts as neighbours when the Wilson lower bound of P(x|y) is "
                 "above x's base rate; with many pairs tested, some are false positives.")
    notes.append("'More users needed' assumes an item's strongest co-consumption rate holds as "
                 "data grows: a planning estimate, not a promise.")
    notes.append("Forecasts on the learning curve extrapolate a fitted trend beyond the data.")
    if r.evidence is None:
        notes.append("The backtest was switched off: rules that need it are borderline at best.")
    return _section("assumptions", "Assumptions", None,
                    _Html("<ul>" + "".join(_h("<li>{}</li>", n) for n in notes) + "</ul>"))


def _size(n: int) -> str:
    for unit in ("bytes", "KB", "MB", "GB"):
        if n < 1024 or unit == "GB":
            return f"{n:,} {unit}" if unit == "bytes" else f"{n:,.1f} {unit}"
        n /= 1024
    return str(n)


def _shown_path(path: str) -> str:
    """A file as the report names it: absolute paths lose their folders (the report travels,
    the local folder layout need not); paths relative to the LOGS folder stay as they are."""
    p = PurePath(path)
    return p.name if p.is_absolute() else path


def _inputs(r: AuditResult) -> _Html:
    files = _table(("File", "Format", "Size", "Rows", "SHA-256 (first 12)"),
                   [(_shown_path(f.path), f.format + (" (gzip)" if f.compressed else ""),
                     _size(f.size_bytes), fmt(f.rows),
                     _h('<span class="mono">{}</span>', f.sha256[:12]))
                    for f in r.inputs], num=(2, 3), cls="compact")
    maps = []
    for label, det in (("log", r.columns), ("catalogue", r.catalog_columns)):
        if det is None:
            continue
        for field, col in det.mapping.items():
            maps.append((label, field, col, "detected" if field in det.detected else "given"))
    run = r.run
    facts = [("Tool version", run.tool_version), ("Started (UTC)", run.started_utc),
             ("Duration", f"{run.seconds:.1f} s"), ("Engine", run.engine), ("Seed", run.seed),
             ("As of", run.as_of),
             ("Confidence", f"{run.config.get('confidence', 0.95):.0%}"),
             ("Rules file", run.config.get("rules_file") or "shipped rules only")]
    return _section("inputs", "Input fingerprint", "The files this audit read; compare hashes "
                    "to know two reports came from the same data (full hashes in audit.json).",
                    files, _h("<h3>{}</h3>", "Columns"),
                    _table(("File", "Field", "Column", "How"), maps, cls="compact"),
                    _h("<h3>{}</h3>", "Run"), _table(("Setting", "Value"), facts, cls="facts"))


# ----------------------------------------------------------------------------- page

def render_html(result: AuditResult, *, history: Sequence[Any] | None = None,
                forecast: Any = None) -> str:
    """The whole audit as one self-contained HTML page.

    Parameters
    ----------
    result : AuditResult
        The audit to show.
    history : sequence of HistoryEntry, optional
        Stored audits (any order; objects or their ``to_dict()`` mappings). Adds the
        "Week after week" section with the trend table and chart. None: no such section.
    forecast : Forecast, optional
        The readiness forecast over ``history`` (object or ``to_dict()`` mapping). Adds the
        forecast sentence, the crossings table, the forecast band on the history chart, and
        the users expected in 4 and 8 weeks on the learning curve. None: left out.

    Returns
    -------
    str
        The HTML document (UTF-8 text), with no script, no external resource and every piece
        of data-derived text escaped.

    Examples
    --------
    >>> import advisor  # doctest: +SKIP
    >>> page = render_html(advisor.audit("sample_logs/events"))  # doctest: +SKIP
    """
    r = result
    d = r.decision
    tiers = {t.id: t.name for t in d.tiers}
    title = f"Readiness audit, {r.run.as_of[:10]}"
    parts = [_headline(r), _tiers(r), _surfaces(r), _charts(r), _evidence(r, forecast),
             _trend(r, history, forecast), _cold_users(r), _cold_items(r), _editorial(r),
             _quality(r), _assumptions(r), _inputs(r)]
    trend = [("trend", "Trend")] if history or forecast is not None else []
    links = (("headline", "Verdict"), ("tiers", "Tiers"), ("surfaces", "Rows"),
             ("charts", "Data"), ("evidence", "Backtest"), *trend, ("cold-users", "Cold users"),
             ("cold-items", "Cold items"), ("editorial", "Editorial"), ("quality", "Quality"),
             ("assumptions", "Assumptions"), ("inputs", "Inputs"))
    nav = "".join(_h('<a href="#{}">{}</a>', sid, label) for sid, label in links)
    footer = f"advisor {r.run.tool_version}; generated {r.run.started_utc}; seed {r.run.seed}."
    subtitle = (f"Data as of {r.run.as_of[:19].replace('T', ' ')} UTC \u00b7 "
                f"supported tier: {tiers.get(d.headline_tier, 'none')} \u00b7 personalised "
                f"rows: {'GO' if d.personalised_go else 'NO-GO'}")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            '<meta name="referrer" content="no-referrer">'
            f"<title>{esc(title)}</title><style>{_CSS}</style></head><body>"
            f'<header><div class="kicker">Recommendation readiness audit</div>'
            f"<h1>{esc(title)}</h1><p class=\"subtitle\">{esc(subtitle)}</p>"
            f"<nav>{nav}</nav></header><main>{''.join(parts)}</main>"
            f"<footer>{esc(footer)}</footer></body></html>\n")


_CSS = """
:root{--ink:#222831;--muted:#5d636d;--line:#e1e4e8;--bg:#f5f6f8;--card:#fff;--accent:#1f5f99;
--ok:#1b7a3d;--okbg:#e4f4e9;--mid:#8a5a00;--midbg:#fff2d3;--bad:#a4262c;--badbg:#fde8ea}
*{box-sizing:border-box}
html{-webkit-text-size-adjust:100%}
body{margin:0;background:var(--bg);color:var(--ink);font:15px/1.5 system-ui,-apple-system,
"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;-webkit-print-color-adjust:exact;
print-color-adjust:exact}
header{background:#17324d;color:#fff;padding:28px max(24px,calc((100% - 1100px)/2)) 0}
header .kicker{text-transform:uppercase;letter-spacing:.08em;font-size:12px;opacity:.75}
header h1{margin:4px 0 4px;font-size:28px;font-weight:650}
header .subtitle{margin:0 0 16px;opacity:.85}
nav{display:flex;flex-wrap:wrap;gap:2px 18px;padding:10px 0 12px;border-top:1px solid #2d4a66}
nav a{color:#cfe0f1;text-decoration:none;font-size:13px}
nav a:hover{color:#fff;text-decoration:underline}
main{max-width:1100px;margin:0 auto;padding:8px 24px 24px}
section{background:var(--card);border:1px solid var(--line);border-radius:10px;
padding:20px 24px;margin:18px 0}
h2{margin:0 0 8px;font-size:20px}
h3{margin:20px 0 8px;font-size:16px}
p{margin:8px 0}
.lede{color:var(--muted);margin:0 0 14px;max-width:78ch}
.small{font-size:12px;color:var(--muted)}
.mono{font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace}
.nowrap{white-space:nowrap}
table.quality td:first-child{min-width:9em}
table{border-collapse:collapse;width:100%;font-size:13.5px;margin:6px 0 4px}
th{text-align:left;font-weight:600;color:var(--muted);font-size:12px;text-transform:uppercase;
letter-spacing:.03em;border-bottom:2px solid var(--line);padding:6px 8px;vertical-align:bottom}
td{padding:6px 8px;border-bottom:1px solid var(--line);vertical-align:top}
tbody tr:nth-child(even) td{background:#fafbfc}
.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
th.num{white-space:normal}
.tag{font-size:11px;color:var(--muted);border:1px solid var(--line);border-radius:4px;
padding:0 4px;white-space:nowrap}
table.candidates td:first-child{min-width:10em;max-width:16em}
table.compact{width:auto;min-width:50%}
table.facts td:first-child{color:var(--muted);width:40%}
table.ladder td.tier{background:#fff !important;border-right:1px solid var(--line);width:22%}
table.ladder tr.adv td{color:var(--muted)}
td ul,.why{margin:0;padding-left:18px}
.badge{display:inline-block;padding:2px 9px;border-radius:999px;font-size:12px;font-weight:700;
letter-spacing:.03em;white-space:nowrap}
.badge.ready{background:var(--okbg);color:var(--ok)}
.badge.borderline{background:var(--midbg);color:var(--mid)}
.badge.not_ready{background:var(--badbg);color:var(--bad)}
.out{white-space:nowrap;font-weight:600}
.out.pass{color:var(--ok)}.out.borderline{color:var(--mid)}.out.fail{color:var(--bad)}
.out.unknown,.out.skipped{color:var(--muted)}
.hero{border-top:5px solid var(--accent)}
.verdicts{display:grid;grid-template-columns:1.1fr 1fr 1.3fr;gap:14px;margin:10px 0 16px}
.verdict{border:1px solid var(--line);border-radius:8px;padding:14px 16px}
.verdict .label{font-size:12px;text-transform:uppercase;letter-spacing:.06em;color:var(--muted)}
.verdict .big{font-size:24px;font-weight:700;margin:2px 0 4px;line-height:1.2}
.verdict .sub{color:var(--muted);font-size:13.5px}
.verdict .why{font-size:13px;color:var(--ink);margin-top:6px}
.verdict.main .big{color:var(--accent)}
.verdict.go{background:var(--okbg);border-color:#b9e0c5}.verdict.go .big{color:var(--ok)}
.verdict.nogo{background:var(--badbg);border-color:#f3c2c7}.verdict.nogo .big{color:var(--bad)}
.kpis{display:grid;grid-template-columns:repeat(5,1fr);gap:10px}
.kpi{background:var(--bg);border-radius:8px;padding:10px 12px}
.kpi .n{font-size:19px;font-weight:700;font-variant-numeric:tabular-nums}
.kpi .l{font-size:12px;color:var(--muted)}
.sure{font-size:13px;color:var(--muted);margin-top:14px}
figure{margin:8px 0 12px}
figcaption{font-size:12.5px;color:var(--muted);margin-top:4px;max-width:90ch}
.figrow{display:grid;grid-template-columns:1fr 1fr;gap:20px}
svg.chart{display:block;width:100%;height:auto}
#chart-learning-curve svg.chart{max-width:760px}
.nochart{color:var(--muted);font-style:italic}
.bar{display:inline-block;height:10px;background:var(--accent);border-radius:2px}
table.bands td:nth-child(5){width:24%;min-width:120px}
.forecast{font-weight:600}
footer{max-width:1100px;margin:0 auto;padding:0 24px 32px;font-size:12px;color:var(--muted)}
@media screen and (max-width:800px){.verdicts,.figrow{grid-template-columns:1fr}
.kpis{grid-template-columns:repeat(2,1fr)}}
@page{size:A4;margin:14mm}
@media print{body{background:#fff;font-size:10pt}.verdict .big{font-size:17px}
.kpi .n{font-size:15px}.verdict{padding:10px 12px}table{font-size:9pt}
th,td{padding:4px 5px}td.num,td.num .small,.out{white-space:normal}
header{background:#fff;color:var(--ink);padding:0 0 8px;border-bottom:2px solid var(--ink)}
header .subtitle{opacity:1}nav{display:none}
main{padding:0;max-width:none}section{border:none;border-radius:0;padding:0;margin:0 0 18px}
h2{break-after:avoid;border-bottom:1px solid var(--line);padding-bottom:4px}
h3{break-after:avoid}table,figure,.verdicts,.kpis{break-inside:avoid}
table.editorial,table.quality,table.ladder{break-inside:auto}
thead{display:table-header-group}tr{break-inside:avoid}
tbody tr:nth-child(even) td{background:#fff}}
"""
