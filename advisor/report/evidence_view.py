"""Terminal tables for the evidence stage: candidates, paired lifts, bands, learning curve."""

from __future__ import annotations

from rich import box
from rich.table import Table
from rich.text import Text

from advisor.evidence import Evidence


def _num(x, digits: int = 3) -> str:
    return "n/a" if x is None else f"{x:.{digits}f}"


def _ci(lo, hi, digits: int = 3) -> str:
    return "" if lo is None or hi is None else f"[{lo:.{digits}f}, {hi:.{digits}f}]"


def _p(p) -> str:
    if p is None:
        return "n/a"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def evidence_tables(ev: Evidence) -> list:
    """Renderables for the evidence section (empty list when nothing was evaluated)."""
    out: list = []
    s = ev.split
    head = Text()
    head.append("Backtest: ", style="bold")
    if s is None or not ev.candidates:
        head.append("not possible on this log. " + " ".join(ev.notes))
        return [head]
    proto = ("global time split" if s.is_temporal
             else "per-user hold-out of each user's latest items (leakier: no global timeline)")
    head.append(f"{proto}; {s.test_users:,} test users"
                + (f" sampled from {s.eligible_test_users:,}" if s.sampled else "")
                + f", {s.train_pairs:,} training pairs"
                + (f" from a seeded sample of {s.train_users:,} training users of the log's "
                   f"{s.population_users:,} users (lifts likely understated)"
                   if s.users_sampled else "")
                + "; ranked over the full catalogue; "
                  f"k = {ev.k}; {ev.confidence:.0%} bootstrap intervals; seed {ev.seed}. "
                + s.reason)
    out.append(head)

    t = Table(title=f"Candidates, ranked over the full catalogue (k = {ev.k}; intervals: "
                    f"{ev.confidence:.0%} bootstrap)", box=box.SIMPLE_HEAD, title_justify="left",
              padding=(0, 1), collapse_padding=True, pad_edge=False, show_edge=False)
    for col in ("Candidate", f"NDCG@{ev.k}", f"Recall@{ev.k}", "Cover",
                "Lift vs popularity", "p", "d_z"):
        t.add_column(col, justify="left" if col == "Candidate" else "right", no_wrap=True)
    for c in ev.candidates:
        cmp = ev.comparison(c.name)
        t.add_row(
            c.name + (" *" if c.name == ev.best_candidate else ""),
            f"{_num(c.ndcg)} {_ci(c.ndcg_low, c.ndcg_high)}", _num(c.recall),
            _num(c.coverage, 2),
            "-" if cmp is None else f"{cmp.lift:+.3f} {_ci(cmp.lift_low, cmp.lift_high)}",
            "" if cmp is None else _p(cmp.p_value),
            "" if cmp is None or cmp.effect_size is None else f"{cmp.effect_size:.2f}",
        )
    out.append(t)
    lvi = ev.latent_vs_itemknn
    if lvi is not None:
        out.append(Text(f"Latent vs item neighbours: {lvi.lift:+.3f} "
                        f"{_ci(lvi.lift_low, lvi.lift_high)}, p {_p(lvi.p_value)}. "
                        "(* best personalised candidate; Cover: share of the catalogue "
                        "recommended; "
                        "p: paired t-test "
                        "on per-user NDCG; d_z: mean difference / its standard deviation.)"))

    if ev.bands:
        b = Table(title=f"Lift of {ev.best_candidate} over popularity by user history "
                        "(training items)", box=box.SIMPLE_HEAD, title_justify="left")
        for col in ("History", "Users", "Lift", "interval", "Verdict"):
            b.add_column(col, justify="left" if col in ("History", "Verdict") else "right")
        for band in ev.bands:
            label = f"{band.low}+" if band.high is None else f"{band.low}-{band.high}"
            c = band.comparison
            if c is None or not band.enough_users:
                b.add_row(label, f"{band.users:,}", "-", "", "too few users to tell")
                continue
            verdict = ("personalisation wins" if c.lift_low is not None and c.lift_low > 0 else
                       "popularity wins" if c.lift_high is not None and c.lift_high < 0 else
                       "no clear difference")
            b.add_row(label, f"{band.users:,}", f"{c.lift:+.3f}", _ci(c.lift_low, c.lift_high),
                      verdict)
        out.append(b)

    lc = ev.learning_curve
    if lc is not None and lc.points:
        t2 = Table(title=f"Learning curve ({lc.form})", box=box.SIMPLE_HEAD, title_justify="left")
        for col in ("Training users", "Popularity", lc.candidate, "Lift", "interval"):
            t2.add_column(col, justify="right")
        for p in lc.points:
            t2.add_row(f"{p.train_users:,}", _num(p.baseline_ndcg), _num(p.candidate_ndcg),
                       f"{p.lift:+.3f}", _ci(p.lift_low, p.lift_high))
        out.append(t2)
        line = Text()
        if lc.slope is not None:
            line.append(f"Lift per doubling of users: {lc.slope:+.4f} "
                        f"{_ci(lc.slope_low, lc.slope_high, 4)}; "
                        + ("still climbing. " if lc.still_climbing else "not clearly climbing. "))
        reason = lc.reason.strip()
        line.append(reason[:1].upper() + reason[1:] + ("" if reason.endswith(".") else "."))
        if lc.projections:
            line.append(" Projected lift (extrapolation): " + "; ".join(
                f"{pr.train_users:,} users {pr.lift:+.3f} [{pr.low:.3f}, {pr.high:.3f}]"
                for pr in lc.projections))
        out.append(line)
    r = ev.reliability
    if r is not None and r.reliability is not None:
        out.append(Text(
            f"Neighbour reliability: split-half agreement {r.half_agreement:.2f}, "
            f"{r.reliability:.2f} projected to all users (Spearman-Brown); top-{r.neighbours} "
            f"overlap between halves {_num(r.top_k_overlap, 2)}. "
            + (f"About {r.users_needed:,} more users for {r.target:.1f}."
               if r.users_needed else
               f"Target {r.target:.1f} {'met' if r.status == 'met' else 'not estimable'}.")))
    if ev.notes:
        out.append(Text("Backtest notes: " + " ".join(ev.notes), style="dim"))
    return out
