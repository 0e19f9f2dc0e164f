"""Terminal and JSON views of the audit history: the trend table and the readiness forecast."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from advisor.history.entry import HistoryEntry
from advisor.history.forecast import Crossing, Forecast, GrowthFit, forecast_readiness
from advisor.history.store import schema_version
from advisor.history.trend import ASCII_GLYPHS, GLYPHS, Trend, trend_table

__all__ = ["history_sections", "history_to_dict", "render_history"]

_COLUMNS = (  # (entry field, header, formatter); the JSON view has every key metric
    ("users", "Users", "int"),
    ("users_ge_5", "5+ items", "int"),
    ("interactions", "Interactions", "int"),
    ("cooc_share", "Co-occ.", "pct"),
    ("itemknn_lift", "kNN lift", "lift"),
)


def _value(x: float | None, kind: str) -> str:
    if x is None:
        return "n/a"
    if kind == "int":
        return f"{x:,.0f}"
    if kind == "pct":
        return f"{x:.0%}"
    return f"{x:+.3f}"


def _change(c: float | None) -> str:
    """Size of a change; its direction is in the glyph beside it."""
    if c is None:
        return ""
    c = abs(c)
    return f"{c:.0%}" if c < 10 else f"x{1 + c:.0f}"


def _weeks(w: int | None, d: str | None) -> str:
    if w is None:
        return "-"
    return f"{w} wk, {d}" if d else f"{w} wk"


def _interval(lo: int | None, hi: int | None, horizon: int) -> str:
    if lo is None:
        return "-"
    return f"{lo}-{hi} wk" if hi is not None else f"{lo}-? wk (beyond {horizon})"


#: Like rich's SIMPLE_HEAD (a rule under the header only), drawn with ASCII hyphens.
_ASCII_HEAD = box.Box("    \n    \n -- \n    \n    \n    \n    \n    \n", ascii=True)


def _box(ascii_only: bool) -> box.Box:
    return _ASCII_HEAD if ascii_only else box.SIMPLE_HEAD


def _trend_table(tr: Trend) -> Table:
    t = Table(title="Audit history (change since the previous audit)", box=_box(tr.ascii_only),
              title_justify="left", padding=(0, 1), collapse_padding=True, pad_edge=False,
              show_edge=False)
    t.add_column("As of", no_wrap=True)
    for _, head, _ in _COLUMNS:
        t.add_column(head, justify="right", no_wrap=True)
    t.add_column("Headline tier")
    t.add_column("Go", no_wrap=True)
    for row in tr.rows:
        cells = [row.as_of_date + ("" if row.days_since_previous in (None, 7)
                                   else f" (+{row.days_since_previous}d)")]
        for key, _, kind in _COLUMNS:
            glyph = row.glyphs[key]
            same = glyph.strip() in ("", GLYPHS["same"], ASCII_GLYPHS["same"])
            ch = "" if kind == "lift" or same else _change(row.change[key])
            cells.append(f"{_value(row.values[key], kind)} {glyph}{ch}".rstrip())
        move = {"up": " (up)", "down": " (down)"}.get(row.headline_change, "")
        cells.append(f"{row.headline_tier or 'none'}{move}")
        go = "go" if row.personalised_go else "no-go"
        if row.go_change:
            go += " (flipped)"
        cells.append(go)
        t.add_row(*cells)
    return t


def _growth_line(name: str, g: GrowthFit | None, confidence: float) -> str:
    if g is None:
        return f"{name}: not fitted."
    if g.form == "exponential":
        rate = (f"{g.weekly_growth:+.1%}/week [{g.weekly_growth_low:+.1%}, "
                f"{g.weekly_growth_high:+.1%}]")
    else:
        rate = (f"{g.weekly_growth:+,.0f}/week [{g.weekly_growth_low:+,.0f}, "
                f"{g.weekly_growth_high:+,.0f}]")
    text = f"{name}: {g.form} growth {rate} ({confidence:.0%} interval; {g.points} audits"
    if g.durbin_watson is not None:
        text += f"; Durbin-Watson {g.durbin_watson:.2f}"
        # Below 1 the residuals are clearly serially correlated at any audit count (rule of
        # thumb, common practice, no published source; exact bounds depend on n).
        if g.durbin_watson < 1.0:
            text += ", serially correlated: intervals too narrow"
    text += ")."
    if g.reason:
        text += f" {g.reason[0].upper()}{g.reason[1:]}."
    return text


def _crossing_row(c: Crossing, horizon: int) -> list[str]:
    label = "learning curve (users)" if c.target == "learning_curve" else c.target
    return [label,
            "n/a" if c.latest is None else f"{c.latest:,.0f}", f"{c.threshold:,.0f}",
            _weeks(c.weeks, c.date), _interval(c.weeks_low, c.weeks_high, horizon),
            c.reason or ""]


def _forecast_parts(fc: Forecast, ascii_only: bool) -> list:
    out: list = []
    head = Text()
    head.append("Readiness forecast: ", style="bold")
    if fc.reason:
        head.append(f"{fc.reason[0].upper()}{fc.reason[1:]}.")
        out.append(head)
        return out
    head.append(f"{fc.points} audits, {fc.first_as_of} to {fc.last_as_of}; weeks are counted "
                f"from the last audit; intervals are {fc.confidence:.0%} prediction "
                f"intervals; looking up to {fc.horizon_weeks} weeks ahead.")
    out.append(head)
    out.append(Text(_growth_line("Users", fc.users, fc.confidence)))
    out.append(Text(_growth_line("Interactions", fc.interactions, fc.confidence)))
    rows = list(fc.crossings) + ([fc.learning_curve] if fc.learning_curve else [])
    if rows:
        t = Table(title="When each failing count rule is forecast to pass", box=_box(ascii_only),
                  title_justify="left", padding=(0, 1), collapse_padding=True, pad_edge=False,
                  show_edge=False)
        for col in ("Rule", "Now", "Needs", "Forecast", "Interval", "Note"):
            t.add_column(col, justify="right" if col in ("Now", "Needs") else "left",
                         no_wrap=col != "Note")
        for c in rows:
            t.add_row(*_crossing_row(c, fc.horizon_weeks))
        out.append(t)
    nt = fc.next_tier
    line = Text()
    line.append("Next tier: ", style="bold")
    if nt is None:
        line.append("none above the headline.")
    elif nt.weeks is None:
        line.append(f"{nt.tier}: no date. {nt.reason[0].upper()}{nt.reason[1:]}.")
    else:
        line.append(f"{nt.tier} within reach in about {nt.weeks} weeks ({nt.date}); interval "
                    f"{_interval(nt.weeks_low, nt.weeks_high, fc.horizon_weeks)}"
                    + (f" ({nt.date_low} to {nt.date_high})" if nt.date_high else "")
                    + f", from {', '.join(nt.forecast)}.")
        if nt.reason:
            line.append(f" {nt.reason[0].upper()}{nt.reason[1:]}.")
    out.append(line)
    out.append(Text(f"Assumption: {fc.assumption} The fitted form and its window are stated "
                    "above; the interval for several requirements is the latest of theirs, "
                    "not a joint interval.", style="dim"))
    return out


def history_sections(entries: Sequence[HistoryEntry], *, confidence: float = 0.95,
                     form: str = "auto", ascii_only: bool = False) -> list:
    """Renderables for the history view: trend table, sparklines, forecast."""
    if not entries:
        return [Text("No audits in the history yet.")]
    ordered = sorted(entries, key=lambda e: e.as_of_date)
    tr = trend_table(ordered, ascii_only=ascii_only)
    out: list = [_trend_table(tr)]
    out.append(Text(f"Users        {tr.sparklines['users']}  "
                    f"({_value(ordered[0].users, 'int')} -> {_value(ordered[-1].users, 'int')})\n"
                    f"Interactions {tr.sparklines['interactions']}  "
                    f"({_value(ordered[0].interactions, 'int')} -> "
                    f"{_value(ordered[-1].interactions, 'int')})"))
    fc = forecast_readiness(ordered, confidence=confidence, form=form)
    out.extend(_forecast_parts(fc, ascii_only))
    return out


def render_history(entries: Sequence[HistoryEntry], console: Console, *,
                   confidence: float = 0.95, form: str = "auto",
                   ascii_only: bool | None = None) -> None:
    """Print the trend and the readiness forecast.

    ``ascii_only=None`` picks plain-ASCII glyphs when the console's encoding is not UTF.
    """
    if ascii_only is None:
        ascii_only = not (console.encoding or "").lower().startswith("utf")
    parts = history_sections(entries, confidence=confidence, form=form, ascii_only=ascii_only)
    for part in parts:
        console.print(part)
        console.print()


def history_to_dict(entries: Sequence[HistoryEntry], *, confidence: float = 0.95,
                    form: str = "auto") -> dict[str, Any]:
    """JSON-safe history: every entry, the trend and the forecast."""
    ordered = sorted(entries, key=lambda e: e.as_of_date)
    return {
        "history_schema": schema_version(),
        "entries": [e.to_dict() for e in ordered],
        "trend": trend_table(ordered).to_dict(),
        "forecast": forecast_readiness(ordered, confidence=confidence, form=form).to_dict(),
    }
