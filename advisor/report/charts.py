"""Charts for the HTML report: matplotlib figures rendered to inline SVG strings.

Each public function takes plain numbers (or a frozen result) and returns one ``<svg>``
element as text, ready to be placed inside an HTML page. The figures are drawn on the Agg
canvas of a bare :class:`matplotlib.figure.Figure`: no pyplot, so no global backend switch and
no figure registry that a notebook user would notice, and safe to call from several threads.

Safety and self-containment
---------------------------
- Text is drawn as paths (``svg.fonttype = "path"``): the page needs no font file and no
  network access, and looks the same on every machine.
- Every chart's ids (clip paths, glyphs) get a per-chart prefix, so several charts can share
  one HTML document without one chart's ``url(#id)`` resolving to another's definition.
- XML prolog, doctype and comments are removed; any text that could come from the data is
  passed through :func:`_literal` so matplotlib's mathtext never interprets ``$``. The
  result is checked to hold no ``<script`` and no ``on...=`` attribute.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Sequence

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

__all__ = ["history_svg", "learning_curve_svg", "lorenz_svg", "support_bins", "support_svg",
           "weekly_growth_svg"]

#: Colours: one accent for "the data", grey for references, a second hue for comparisons.
ACCENT = "#1f5f99"
SECOND = "#c46a1b"
THIRD = "#4f8f4f"
GREY = "#8a8f98"
INK = "#222831"

_RC = {
    "svg.fonttype": "path",
    # Fixed salt: ids are deterministic, so the same audit renders the same bytes.
    "svg.hashsalt": "advisor-report",
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 9,
    "axes.edgecolor": "#b8bcc4",
    "axes.labelcolor": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": "#e4e6ea",
    "grid.linewidth": 0.6,
    "xtick.color": "#4a4f57",
    "ytick.color": "#4a4f57",
    "legend.frameon": False,
    "legend.fontsize": 8,
    "text.color": INK,
    "text.usetex": False,
}

_ID_RE = re.compile(r'\bid="([^"]+)"')


def _literal(text: object) -> str:
    """Text from the data, drawn literally: ``$`` would otherwise start matplotlib mathtext."""
    return str(text).replace("\\", "\\\\").replace("$", r"\$")


def _figure(width: float, height: float) -> Figure:
    fig = Figure(figsize=(width, height), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _to_svg(fig: Figure, name: str, label: str) -> str:
    """Serialise ``fig`` to a scrubbed ``<svg>`` element with ids prefixed by ``name``."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    svg = buf.getvalue()
    svg = svg[svg.index("<svg"):]
    svg = re.sub(r"<!--.*?-->", "", svg, flags=re.S)
    svg = re.sub(r"<metadata>.*?</metadata>", "", svg, flags=re.S)
    ids = set(_ID_RE.findall(svg))
    if ids:
        alt = "|".join(re.escape(i) for i in sorted(ids, key=len, reverse=True))
        svg = re.sub(r'\bid="(%s)"' % alt, lambda m: f'id="{name}-{m.group(1)}"', svg)
        svg = re.sub(r'(url\(#|href="#)(%s)([)"])' % alt,
                     lambda m: f"{m.group(1)}{name}-{m.group(2)}{m.group(3)}", svg)
    # Scale with the page: drop the fixed size in points, keep the viewBox.
    svg = re.sub(r'^<svg([^>]*?) width="[^"]*" height="[^"]*"', r"<svg\1", svg, count=1)
    svg = svg.replace("<svg", f'<svg role="img" aria-label="{_attr(label)}" '
                              f'class="chart" preserveAspectRatio="xMidYMid meet"', 1)
    low = svg.lower()
    if "<script" in low or re.search(r"\son[a-z]+\s*=", low) or "<foreignobject" in low:
        raise RuntimeError("matplotlib produced SVG with active content; refusing to embed it")
    return svg.strip()


def _attr(text: str) -> str:
    return (text.replace("&", "&amp;").replace('"', "&quot;").replace("<", "&lt;")
            .replace(">", "&gt;"))


def _count(x: float, _pos=None) -> str:
    if x >= 1_000_000:
        return f"{x / 1_000_000:g}M"
    if x >= 10_000:
        return f"{x / 1000:g}k"
    return f"{x:,.0f}"


def lorenz_svg(population_share: Sequence[float], value_share: Sequence[float], *,
               gini: float, top20_share: float | None = None) -> str:
    """Lorenz curve of item popularity with the line of equality, Gini in the title.

    Parameters
    ----------
    population_share, value_share : sequence of float
        Cumulative share of items (least popular first) and of interactions, both 0 to 1.
    gini : float
        Gini coefficient shown in the title (population form).
    top20_share : float, optional
        Share of interactions on the top 20% of items, marked on the curve.

    Returns
    -------
    str
        One ``<svg>`` element.

    Examples
    --------
    >>> lorenz_svg([0, 0.5, 1], [0, 0.25, 1], gini=0.25).startswith("<svg")
    True
    """
    x = np.asarray(population_share, dtype=float)
    y = np.asarray(value_share, dtype=float)
    with matplotlib.rc_context(_RC):
        fig = _figure(4.6, 3.5)
        ax = fig.add_subplot()
        ax.plot([0, 1], [0, 1], color=GREY, lw=1, ls="--", label="equal popularity")
        ax.fill_between(x, y, x, color=ACCENT, alpha=0.10, lw=0)
        ax.plot(x, y, color=ACCENT, lw=2, label="this catalogue")
        if top20_share is not None and math.isfinite(top20_share):
            y80 = 1.0 - top20_share
            ax.plot([0.8], [y80], "o", color=SECOND, ms=5)
            ax.annotate(f"top 20% of items:\n{top20_share:.0%} of interactions",
                        xy=(0.8, y80), xytext=(0.06, 0.62), fontsize=8, color=INK,
                        arrowprops={"arrowstyle": "-", "color": GREY, "lw": 0.8})
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_aspect("equal")
        pct = FuncFormatter(lambda v, _p: f"{v:.0%}")
        ax.xaxis.set_major_formatter(pct)
        ax.yaxis.set_major_formatter(pct)
        ax.set_xlabel("items, least popular first (cumulative share)")
        ax.set_ylabel("interactions (cumulative share)")
        ax.set_title(f"Popularity concentration (Gini {gini:.2f})")
        ax.legend(loc="upper left")
        return _to_svg(fig, "lorenz", f"Lorenz curve of item popularity, Gini {gini:.2f}")


def support_bins(levels: Sequence[int], items_at_least: Sequence[int], total_items: int
                 ) -> tuple[list[str], list[int], list[int]]:
    """Items per support bin from "items with at least m users" counts.

    Returns
    -------
    labels : list of str
        ``"0"``, then one label per gap between consecutive levels (``"5-9"``), last ``"m+"``.
    counts : list of int
        Items in each bin; they add up to ``total_items``.
    lows : list of int
        Smallest support in each bin.

    Examples
    --------
    >>> support_bins([1, 5, 10], [90, 40, 15], 100)
    (['0', '1-4', '5-9', '10+'], [10, 50, 25, 15], [0, 1, 5, 10])
    """
    lv = [int(v) for v in levels]
    at = [int(v) for v in items_at_least]
    labels = ["0"]
    counts = [int(total_items) - (at[0] if at else 0)]
    lows = [0]
    for i, lo in enumerate(lv):
        hi = lv[i + 1] - 1 if i + 1 < len(lv) else None
        labels.append(f"{lo}+" if hi is None else (f"{lo}" if hi == lo else f"{lo}-{hi}"))
        counts.append(at[i] - (at[i + 1] if i + 1 < len(at) else 0))
        lows.append(lo)
    return labels, counts, lows


def support_svg(levels: Sequence[int], items_at_least: Sequence[int], total_items: int, *,
                min_users: int | None = None) -> str:
    """Bar chart of catalogue items by distinct users, on log-spaced bins.

    Parameters
    ----------
    levels : sequence of int
        Ascending thresholds m (e.g. 1, 5, 10, 20, 50, 100).
    items_at_least : sequence of int
        Items with at least m distinct users, for each level.
    total_items : int
        Catalogue items (unseen included): the first bar holds items with no user.
    min_users : int, optional
        Support an item needs before it can have neighbours; bars below it are shaded as cold.

    Returns
    -------
    str
        One ``<svg>`` element.

    Notes
    -----
    Bins are the gaps between consecutive levels, so the bars add up exactly to the
    catalogue and match the profile's counts; log-spaced levels give a log x axis in effect.

    Examples
    --------
    >>> support_svg([1, 5], [8, 3], 10, min_users=5).startswith("<svg")
    True
    """
    labels, counts, lows = support_bins(levels, items_at_least, total_items)
    with matplotlib.rc_context(_RC):
        fig = _figure(4.6, 3.5)
        ax = fig.add_subplot()
        colours = [GREY if (min_users is not None and lo < min_users) else ACCENT
                   for lo in lows]
        bars = ax.bar(range(len(counts)), counts, color=colours, width=0.72)
        top = max(counts) if counts else 1
        for b, c in zip(bars, counts):
            ax.text(b.get_x() + b.get_width() / 2, b.get_height() + top * 0.015, f"{c:,}",
                    ha="center", va="bottom", fontsize=8)
        ax.set_xticks(range(len(labels)), labels)
        ax.set_ylim(0, top * 1.15 + 1)
        ax.yaxis.set_major_formatter(FuncFormatter(_count))
        ax.grid(axis="x", visible=False)
        ax.set_xlabel("distinct users per item")
        ax.set_ylabel("catalogue items")
        ax.set_title("How many users each item has")
        if min_users is not None:
            from matplotlib.patches import Patch
            ax.legend(handles=[Patch(color=GREY, label=f"cold (< {min_users} users)"),
                               Patch(color=ACCENT, label="enough users")], loc="upper right")
        return _to_svg(fig, "support", "Catalogue items by number of distinct users")


def weekly_growth_svg(weeks: Sequence[str], interactions: Sequence[int],
                      active_users: Sequence[int], new_users: Sequence[int], *,
                      returning_users: Sequence[int] | None = None) -> str:
    """Weekly growth: interactions per week (bars) beside active, new and returning users.

    Parameters
    ----------
    weeks : sequence of str
        Week start dates (ISO), oldest first.
    interactions, active_users, new_users : sequence of int
        Per-week counts.
    returning_users : sequence of int, optional
        Users active in the week and the one before it.

    Returns
    -------
    str
        One ``<svg>`` element with two panels sharing the week axis.

    Examples
    --------
    >>> weekly_growth_svg(["2026-01-05", "2026-01-12"], [10, 20], [3, 5], [3, 2]).startswith("<svg")
    True
    """
    labels = [_literal(str(w)[5:10]) for w in weeks]
    x = np.arange(len(labels))
    step = max(1, math.ceil(len(labels) / 12))
    with matplotlib.rc_context(_RC):
        fig = _figure(9.2, 3.3)
        ax1, ax2 = fig.subplots(1, 2)
        ax1.bar(x, interactions, color=ACCENT, width=0.72)
        ax1.set_title("Interactions per week")
        ax1.yaxis.set_major_formatter(FuncFormatter(_count))
        ax1.grid(axis="x", visible=False)
        ax2.plot(x, active_users, color=ACCENT, lw=2, marker="o", ms=3, label="active users")
        ax2.plot(x, new_users, color=SECOND, lw=2, marker="o", ms=3, label="new users")
        if returning_users is not None:
            ax2.plot(x, returning_users, color=THIRD, lw=1.5, ls="--", marker="o", ms=2.5,
                     label="returning from the week before")
        ax2.set_title("Users per week")
        ax2.yaxis.set_major_formatter(FuncFormatter(_count))
        ax2.set_ylim(bottom=0)
        ax2.legend(loc="best")
        for ax in (ax1, ax2):
            ax.set_xticks(x[::step], labels[::step])
            ax.set_xlabel("week starting (month-day)")
            ax.tick_params(axis="x", labelrotation=45, labelsize=7.5)
        return _to_svg(fig, "weekly", "Weekly growth of interactions and users")


def learning_curve_svg(train_users: Sequence[int], lift: Sequence[float],
                       lift_low: Sequence[float | None], lift_high: Sequence[float | None], *,
                       candidate: str, projections: Sequence[tuple[int, float, float, float]] = (),
                       target_lift: float | None = None,
                       markers: Sequence[tuple[str, float, float | None, float | None]] = (),
                       ) -> str:
    """Lift over popularity against training users, with intervals and the fitted forecast.

    Parameters
    ----------
    train_users, lift, lift_low, lift_high : sequence
        Measured points (smallest first): training users, mean lift and its interval
        (NDCG@k units; a missing interval end is None).
    candidate : str
        Name of the personalised candidate (drawn literally).
    projections : sequence of (users, lift, low, high)
        The fitted curve with its interval at today's size and beyond (an extrapolation).
    target_lift : float, optional
        Lift counted as worth having, drawn as a horizontal line.
    markers : sequence of (label, users, low, high)
        Forecast user counts at future dates (e.g. from the history store), drawn as vertical
        lines with their interval shaded; labels are drawn literally.

    Returns
    -------
    str
        One ``<svg>`` element; the x axis is logarithmic (base 2), as in the fitted form.

    Examples
    --------
    >>> learning_curve_svg([100, 200], [0.01, 0.02], [0.0, 0.01], [0.02, 0.03],
    ...                    candidate="latent").startswith("<svg")
    True
    """
    n = np.asarray(train_users, dtype=float)
    y = np.asarray(lift, dtype=float)
    lo = np.array([np.nan if v is None else v for v in lift_low], dtype=float)
    hi = np.array([np.nan if v is None else v for v in lift_high], dtype=float)
    with matplotlib.rc_context(_RC):
        fig = _figure(6.4, 4.0)
        ax = fig.add_subplot()
        ax.axhline(0, color=GREY, lw=1)
        if projections:
            pu = np.array([p[0] for p in projections], dtype=float)
            pl = np.array([p[1] for p in projections], dtype=float)
            ax.fill_between(pu, [p[2] for p in projections], [p[3] for p in projections],
                            color=SECOND, alpha=0.15, lw=0)
            ax.plot(pu, pl, color=SECOND, lw=1.8, ls="--",
                    label="fitted trend and forecast (extrapolation)")
        if target_lift is not None and math.isfinite(target_lift):
            ax.axhline(target_lift, color=THIRD, lw=1.2, ls=":",
                       label=f"lift worth having ({target_lift:.3f})")
        for i, (label, users, m_lo, m_hi) in enumerate(markers):
            if users is None or not math.isfinite(users) or users <= 0:
                continue
            if m_lo is not None and m_hi is not None and m_hi > m_lo > 0:
                ax.axvspan(m_lo, m_hi, color=GREY, alpha=0.12, lw=0)
            ax.axvline(users, color=GREY, lw=1, ls="-.")
            ax.annotate(_literal(label), xy=(users, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(-3, -10 - 10 * (i % 3)), textcoords="offset points",
                        ha="right", fontsize=7.5, color=INK)
        ok = np.isfinite(lo) & np.isfinite(hi)
        yerr = np.vstack([np.where(ok, y - lo, 0), np.where(ok, hi - y, 0)])
        ax.errorbar(n, y, yerr=yerr, fmt="o-", color=ACCENT, lw=2, ms=5, capsize=3,
                    label=f"measured lift of {_literal(candidate)} (with interval)")
        ax.set_xscale("log", base=2)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _p: f"{v:,.0f}"))
        ax.set_xlabel("users in the training data (log scale)")
        ax.set_ylabel("lift over popularity (NDCG)")
        ax.set_title("Does personalisation keep improving as users grow?")
        fig.legend(loc="outside lower center", ncols=2)
        return _to_svg(fig, "learning-curve", "Learning curve: lift over popularity against "
                                              "training users")


def history_svg(dates: Sequence[str], users: Sequence[float | None],
                interactions: Sequence[float | None], *,
                users_forecast: Sequence[tuple[str, float, float, float]] = (),
                interactions_forecast: Sequence[tuple[str, float, float, float]] = ()) -> str:
    """Users and interactions at each stored audit, with the growth forecast and its interval.

    Parameters
    ----------
    dates : sequence of str
        As-of dates (``YYYY-MM-DD``), oldest first.
    users, interactions : sequence of float or None
        Values at each audit (None: not recorded).
    users_forecast, interactions_forecast : sequence of (date, value, low, high)
        Projected values after the last audit with their prediction interval.

    Returns
    -------
    str
        One ``<svg>`` element with two panels on a shared date axis.

    Examples
    --------
    >>> history_svg(["2026-01-04", "2026-01-11"], [10, 12], [50, 70],
    ...             users_forecast=[("2026-01-18", 14, 12, 16)]).startswith("<svg")
    True
    """
    def days(values):
        return np.array([np.datetime64(str(v)[:10], "D") for v in values])

    x = days(dates)
    with matplotlib.rc_context(_RC):
        fig = _figure(9.2, 3.2)
        axes = fig.subplots(1, 2, sharex=True)
        for ax, values, fc, title in ((axes[0], users, users_forecast, "Users"),
                                      (axes[1], interactions, interactions_forecast,
                                       "Interactions")):
            y = np.array([np.nan if v is None else v for v in values], dtype=float)
            ax.plot(x, y, "o-", color=ACCENT, lw=2, ms=4, label="audits")
            if fc:
                fx = np.concatenate([x[-1:], days([f[0] for f in fc])])
                ax.fill_between(fx, np.r_[y[-1], [f[2] for f in fc]],
                                np.r_[y[-1], [f[3] for f in fc]], color=SECOND, alpha=0.15,
                                lw=0)
                ax.plot(fx, np.r_[y[-1], [f[1] for f in fc]], color=SECOND, lw=1.8, ls="--",
                        label="forecast")
            ax.set_title(f"{title} at each audit")
            ax.yaxis.set_major_formatter(FuncFormatter(_count))
            ax.set_ylim(bottom=0)
            ax.tick_params(axis="x", labelrotation=45, labelsize=7.5)
            ax.legend(loc="upper left")
        from matplotlib.dates import DateFormatter
        axes[0].xaxis.set_major_formatter(DateFormatter("%Y-%m-%d"))
        return _to_svg(fig, "history", "Users and interactions at each audit, with forecast")
