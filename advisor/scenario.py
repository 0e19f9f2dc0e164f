"""An invented demo service, "Saucepan Street", and a seeded generator of its logs.

Saucepan Street is a made-up online cooking school: short video classes of home cooking
(baking, knife skills, vegan, one-pot, grilling, pastry, regional kitchens), a few paid
masterclasses, and a twelve-week-old audience that is still growing. Nothing here is real;
every title, user and event is drawn from the word lists and random streams below, so the
demo shows the audit on data whose true structure is known.

Planted structure
-----------------
* **Catalogue.** About 260 back-catalogue classes added before the first logged week, then
  12 new classes every week (so every week has brand-new, cold items). Each class has a primary
  category out of ten and, for about a third, a second related one. Two class ids were
  withdrawn and are missing from the catalogue export; about 4% of classes are *dormant* and
  are never shown or played.
* **Growth.** New users per week follow ``first + (last - first) * t ** 1.5`` with
  ``t = (week - 1) / (weeks - 1)`` (40 in week 1 rising to 600 in week 12, about 3,300 in all),
  with Poisson noise. A user's activity multiplier is log-normal (sigma 0.8); sessions per
  active week are ``1 + Poisson(0.6 a)`` and plays per session ``1 + Poisson(0.7 a)``. After
  the arrival week a user comes back in each later week with a personal probability drawn
  from Beta(2, 2.5), decaying by 5% a week.
* **Taste clusters.** Each user belongs to one of six clusters (``CLUSTERS``), each with two or
  three favourite categories. A cluster ranks the classes of its categories in its own random
  order and weights rank ``r`` (from 1) by ``r ** -1.0`` (Zipf). Each play comes from the
  user's cluster with probability 0.75 and from global popularity (an independent Zipf
  ranking of every class, exponent 1.0) with probability 0.25. Only classes already added
  are playable. In-cluster classes are watched further and rated higher. This is what makes
  item-neighbourhood CF beat global popularity once enough users have history.
* **Events.** A session shows a few classes that are not played (``impression``), then for
  each class: ``play``; one ``progress`` row with the watch fraction; ``complete`` when the
  fraction reaches 0.95; sometimes a ``rating`` (1-5). Masterclasses need a ``purchase``
  (value = price); without one only a short preview is watched.

Planted data-quality problems (counts are exact; see ``PlantedProblems``)
--------------------------------------------------------------------------
* ``DUPLICATE_ROWS`` exact duplicate rows (a logging retry: the copy follows the original);
* ``EMPTY_USER_ROWS`` play rows whose ``user_id`` is empty;
* ``BAD_TIMESTAMP_ROWS`` rows whose timestamp cannot be parsed as ISO-8601;
* ``UNKNOWN_ITEM_ROWS`` play rows for the two withdrawn class ids, not in the catalogue;
* one bot-like account with ``BOT_PLAYS`` plays in three hours of one night (week 10),
  walking the catalogue in id order;
* one day with no events at all (a logging gap): the Thursday of week 9.

Every random step draws from ``numpy.random.Generator`` streams spawned from one seed, rows are
written in a fixed order and gzip headers carry no time or name, so the same seed gives
byte-identical files.
"""

from __future__ import annotations

import csv
import datetime as dt
import gzip
import io
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from advisor.errors import ConfigError, OutputError

__all__ = [
    "CLUSTERS",
    "DEFAULT_SEED",
    "PlantedProblems",
    "PlantedTruth",
    "ScenarioSummary",
    "generate_scenario",
    "planted_truth",
]

SERVICE_NAME = "Saucepan Street"
DEFAULT_SEED = 20261129
DEFAULT_WEEKS = 12
DEFAULT_END = dt.date(2026, 11, 29)

DUPLICATE_ROWS = 12
EMPTY_USER_ROWS = 8
BAD_TIMESTAMP_ROWS = 6
UNKNOWN_ITEM_ROWS = 4
BOT_PLAYS = 3000
_BOT_HOURS = 3
_BOT_LISTING = 50
_GAP_WEEK = 9  # Thursday of this week has no events
_BOT_WEEK = 10

_BACK_CATALOGUE = 262
_NEW_PER_WEEK = 12
_WITHDRAWN = 2
_DORMANT_SHARE = 0.04
_MASTERCLASSES = 8
_CLUSTER_SHARE = 0.75  # share of plays drawn from the user's cluster
_ZIPF_CLUSTER = 1.0
_ZIPF_GLOBAL = 1.0

CATEGORIES = ("baking", "pastry", "knife-skills", "vegan", "one-pot", "grilling",
              "east-asian", "mediterranean", "latin-american", "breakfast")
_RELATED = {
    "baking": ("breakfast", "pastry"), "pastry": ("baking", "breakfast"),
    "knife-skills": ("east-asian", "mediterranean"),
    "vegan": ("one-pot", "east-asian", "mediterranean", "breakfast"),
    "one-pot": ("vegan", "mediterranean", "latin-american"),
    "grilling": ("latin-american", "mediterranean"),
    "east-asian": ("vegan", "one-pot", "knife-skills"),
    "mediterranean": ("vegan", "grilling", "one-pot"),
    "latin-american": ("grilling", "one-pot", "vegan"), "breakfast": ("baking", "vegan"),
}
_DISHES = {
    "baking": ("Sourdough Loaf", "Focaccia", "Banana Bread", "Bagels", "Cinnamon Rolls",
               "Brioche", "Rye Bread", "Soft Pretzels", "Soda Bread", "Pita", "Scones",
               "Olive Bread", "Seeded Crackers", "Carrot Cake"),
    "pastry": ("Lemon Tart", "Croissants", "Choux Buns", "Puff Pastry", "Fruit Galette",
               "Eclairs", "Pear Frangipane", "Custard Tarts", "Palmiers", "Apple Strudel",
               "Shortcrust", "Fruit Pie"),
    "knife-skills": ("Onion Dicing", "Julienne Carrots", "Chicken Breakdown",
                     "Herb Chiffonade", "Fish Filleting", "Citrus Segments", "Garlic Prep",
                     "Brunoise Basics", "Squash Prep", "Knife Sharpening"),
    "vegan": ("Chickpea Curry", "Cashew Cheese", "Lentil Ragu", "Tofu Scramble",
              "Jackfruit Tacos", "Oat Custard", "Mushroom Stroganoff", "Black Bean Burgers",
              "Coconut Dal", "Aquafaba Meringues", "Tempeh Bowls"),
    "one-pot": ("Chicken Stew", "Risotto", "Chili", "Jambalaya", "Braised Beans", "Paella",
                "Orzo Bake", "Goulash", "Shakshuka", "Barley Soup", "Sausage Casserole"),
    "grilling": ("Flank Steak", "Grilled Corn", "Charred Peppers", "Lamb Skewers",
                 "Smoked Ribs", "Halloumi Skewers", "Grilled Fish", "Burgers",
                 "Grilled Peaches", "Spatchcock Chicken"),
    "east-asian": ("Pork Dumplings", "Ramen Broth", "Fried Rice", "Mapo Tofu", "Bibimbap",
                   "Scallion Pancakes", "Miso Soup", "Kimchi", "Bao Buns", "Dan Dan Noodles",
                   "Teriyaki Salmon"),
    "mediterranean": ("Hummus", "Falafel", "Moussaka", "Tabbouleh", "Spanakopita",
                      "Stuffed Peppers", "Lemon Chicken", "Baba Ganoush", "Fattoush",
                      "Grilled Octopus", "Orange Salad"),
    "latin-american": ("Arepas", "Empanadas", "Pozole", "Ceviche", "Tamales", "Mole Sauce",
                       "Pupusas", "Rice and Beans", "Street Corn", "Chimichurri"),
    "breakfast": ("Pancakes", "Omelette", "Granola", "Eggs Benedict", "French Toast",
                  "Waffles", "Overnight Oats", "Breakfast Burritos", "Crepes", "Frittata"),
}
_ADJECTIVES = ("Crisp", "Silky", "Rustic", "Golden", "Smoky", "Fresh", "Classic", "Quick",
               "Spiced", "Tangy", "Hearty", "Zesty", "Homely", "Perfect", "Weekend", "Bright",
               "Slow", "Sunday", "Herby", "Crunchy")
_SUFFIXES = ("", " in {n} Minutes", " for Beginners", " Step by Step", " Made Simple",
             ": The Basics", " Without Fuss", " for Two", " for a Crowd", " in {n} Minutes")

#: The planted taste clusters: (name, favourite categories, share of users).
CLUSTERS: tuple[tuple[str, tuple[str, ...], float], ...] = (
    ("weekend bakers", ("baking", "pastry", "breakfast"), 0.22),
    ("plant-based", ("vegan", "mediterranean"), 0.20),
    ("weeknight cooks", ("one-pot", "knife-skills", "breakfast"), 0.18),
    ("fire and smoke", ("grilling", "latin-american"), 0.15),
    ("noodles and dumplings", ("east-asian", "knife-skills"), 0.13),
    ("mediterranean table", ("mediterranean", "grilling", "one-pot"), 0.12),
)
_EVENT_TYPES = ("impression", "play", "progress", "complete", "rating", "purchase")
_IMP, _PLAY, _PROG, _DONE, _RATE, _BUY = range(6)
# Evening-heavy hour-of-day profile (UTC), relative weights.
_HOURS = np.array([2, 1, 1, 1, 1, 1, 2, 4, 5, 5, 5, 6, 7, 6, 5, 5, 6, 8, 11, 13, 12, 9, 6, 3],
                  dtype=float)
_RATING_IN = np.array([0.02, 0.04, 0.12, 0.37, 0.45])
_RATING_OUT = np.array([0.08, 0.15, 0.32, 0.30, 0.15])
# Each is invalid for any date parser, lenient or strict (no day-first guessing can save it).
_BAD_TS = ("hour25", "zero", "undefined", "month13", "day32", "feb30")


@dataclass(frozen=True, slots=True)
class PlantedProblems:
    """The data-quality problems planted in the logs, with exact counts."""

    duplicate_rows: int
    """Extra rows that exactly repeat the row before them."""
    empty_user_rows: int
    """Rows with an empty ``user_id``."""
    bad_timestamp_rows: int
    """Rows whose ``timestamp`` is not valid ISO-8601."""
    unknown_item_rows: int
    """Rows naming an item that is not in the catalogue."""
    unknown_items: tuple[str, ...]
    """The item ids of those rows (withdrawn classes)."""
    bot_user: str
    """The bot-like account."""
    bot_plays: int
    """Plays logged by the bot, all within ``bot_hours`` hours of one night."""
    bot_hours: int
    """Length of the bot's burst, in hours."""
    gap_day: str
    """ISO date of the day with no events (a logging gap)."""

    def to_dict(self) -> dict:
        return {
            "duplicate_rows": self.duplicate_rows,
            "empty_user_rows": self.empty_user_rows,
            "bad_timestamp_rows": self.bad_timestamp_rows,
            "unknown_item_rows": self.unknown_item_rows,
            "unknown_items": list(self.unknown_items),
            "bot_user": self.bot_user,
            "bot_plays": self.bot_plays,
            "bot_hours": self.bot_hours,
            "gap_day": self.gap_day,
        }


@dataclass(frozen=True, slots=True)
class ScenarioSummary:
    """What :func:`generate_scenario` wrote."""

    out_dir: str
    """The output folder."""
    catalog_path: str
    """Path of ``catalog.csv``."""
    event_paths: tuple[str, ...]
    """Paths of the weekly event files, oldest first."""
    readme_path: str
    """Path of ``README.md``."""
    seed: int
    """Seed of every random step."""
    start: str
    """ISO date of the first logged day (a Monday)."""
    end: str
    """ISO date of the last logged day (a Sunday)."""
    items: int
    """Classes in the catalogue."""
    items_never_played: int
    """Catalogue classes never played by a genuine user (the bot and empty ids not counted)."""
    users: int
    """Distinct non-empty user ids in the log, the bot included."""
    events: int
    """Data rows over all event files (planted problems included)."""
    events_per_week: tuple[int, ...]
    """Data rows per weekly file, oldest first."""
    new_users_per_week: tuple[int, ...]
    """Users whose first event falls in each week (bot excluded)."""
    active_users_per_week: tuple[int, ...]
    """Distinct users with an event in each week (bot excluded)."""
    items_added_per_week: tuple[int, ...]
    """Classes added to the catalogue in each week."""
    problems: PlantedProblems
    """The planted data-quality problems."""

    def to_dict(self) -> dict:
        return {
            "out_dir": self.out_dir,
            "catalog_path": self.catalog_path,
            "event_paths": list(self.event_paths),
            "readme_path": self.readme_path,
            "seed": self.seed,
            "start": self.start,
            "end": self.end,
            "items": self.items,
            "items_never_played": self.items_never_played,
            "users": self.users,
            "events": self.events,
            "events_per_week": list(self.events_per_week),
            "new_users_per_week": list(self.new_users_per_week),
            "active_users_per_week": list(self.active_users_per_week),
            "items_added_per_week": list(self.items_added_per_week),
            "problems": self.problems.to_dict(),
        }


@dataclass(frozen=True, slots=True)
class PlantedTruth:
    """The hidden structure behind a scenario, for tests and demonstrations."""

    user_cluster: dict[str, int]
    """User id -> index into ``CLUSTERS`` (bot excluded)."""
    cluster_items: tuple[tuple[str, ...], ...]
    """Per cluster, the catalogue ids its users favour, most favoured first."""

    def to_dict(self) -> dict:
        return {"user_cluster": dict(self.user_cluster),
                "cluster_items": [list(c) for c in self.cluster_items]}


# ---------------------------------------------------------------------------------------
# Building blocks. Each takes its own random stream, so the user draws (and the planted
# truth) do not depend on how many random numbers the session simulation consumed.


@dataclass(frozen=True, slots=True)
class _Catalog:
    ids: tuple[str, ...]  # in order of addition (ids increase with age order)
    titles: tuple[str, ...]
    cats: tuple[tuple[str, ...], ...]
    added_day: np.ndarray  # day index relative to the first logged day (negative: before)
    price: np.ndarray  # 0 for free classes
    minutes: np.ndarray
    dormant: np.ndarray  # bool
    withdrawn: tuple[str, ...]
    cluster_w: np.ndarray  # (clusters, items) Zipf weights; 0 outside the cluster's pool
    global_w: np.ndarray  # (items,)


def _check_args(seed: int, weeks: int, end: dt.date) -> None:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ConfigError(f"scenario seed must be a non-negative integer, got {seed!r}")
    if isinstance(weeks, bool) or not isinstance(weeks, (int, np.integer)) or not 2 <= weeks <= 52:
        raise ConfigError(f"scenario weeks must be an integer from 2 to 52, got {weeks!r}")
    if not isinstance(end, dt.date) or end.weekday() != 6:
        raise ConfigError(
            f"scenario end must be a date that is a Sunday (each file holds Monday-Sunday), "
            f"got {end!r}; pass for example datetime.date(2026, 11, 29)")


def _streams(seed: int) -> list[np.random.Generator]:
    return [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(4)]


def _make_title(rng: np.random.Generator, cat: str, used: set[str], master: bool) -> str:
    dishes = _DISHES[cat]
    while True:
        dish = dishes[rng.integers(len(dishes))]
        adj = _ADJECTIVES[rng.integers(len(_ADJECTIVES))]
        if master:
            title = f"The {dish} Masterclass"
        else:
            suffix = _SUFFIXES[rng.integers(len(_SUFFIXES))]
            title = f"{adj} {dish}" + suffix.format(n=int(rng.choice([15, 20, 25, 30, 40, 45])))
        if title not in used:
            used.add(title)
            return title


def _build_catalog(rng: np.random.Generator, weeks: int) -> _Catalog:
    n_new = _NEW_PER_WEEK * weeks
    n_alloc = _BACK_CATALOGUE + n_new
    # Back catalogue added over the 14 weeks before launch; new classes on a weekday each.
    back = np.sort(rng.integers(-98, 0, size=_BACK_CATALOGUE))
    new = np.concatenate([np.sort(7 * w + rng.integers(0, 7, size=_NEW_PER_WEEK))
                          for w in range(weeks)])
    added = np.concatenate([back, new])
    n_master = _MASTERCLASSES
    master_pos = set(rng.choice(_BACK_CATALOGUE, size=n_master, replace=False).tolist())
    used: set[str] = set()
    titles, cats = [], []
    prices = np.zeros(n_alloc)
    for i in range(n_alloc):
        primary = CATEGORIES[rng.integers(len(CATEGORIES))]
        c = (primary,)
        if rng.random() < 0.33:
            rel = _RELATED[primary]
            c = (primary, rel[rng.integers(len(rel))])
        cats.append(c)
        titles.append(_make_title(rng, primary, used, i in master_pos))
        if i in master_pos:
            prices[i] = float(rng.choice([19.0, 24.0, 29.0]))
    minutes = rng.choice([15, 20, 25, 30, 40, 45, 60], size=n_alloc).astype(float)
    withdrawn_pos = rng.choice([i for i in range(_BACK_CATALOGUE) if i not in master_pos],
                               size=_WITHDRAWN, replace=False)
    keep = np.ones(n_alloc, dtype=bool)
    keep[withdrawn_pos] = False
    alloc_ids = [f"c{i + 1:04d}" for i in range(n_alloc)]
    withdrawn = tuple(alloc_ids[i] for i in sorted(withdrawn_pos.tolist()))
    idx = np.flatnonzero(keep)
    ids = tuple(alloc_ids[i] for i in idx)
    titles = tuple(titles[i] for i in idx)
    cats = tuple(cats[i] for i in idx)
    added, prices, minutes = added[idx], prices[idx], minutes[idx]
    n = len(ids)
    # Dormant classes: never shown, never played (not the masterclasses, not the newest week,
    # so "never played" has two causes the audit can tell apart: dormant and brand-new).
    eligible = np.flatnonzero((prices == 0) & (added < 7 * (weeks - 1)))
    dormant = np.zeros(n, dtype=bool)
    dormant[rng.choice(eligible, size=int(round(_DORMANT_SHARE * n)), replace=False)] = True
    cluster_w = np.zeros((len(CLUSTERS), n))
    for k, (_, fav, _) in enumerate(CLUSTERS):
        pool = np.flatnonzero([bool(set(c) & set(fav)) for c in cats] & ~dormant)
        ranks = rng.permutation(len(pool)) + 1
        cluster_w[k, pool] = ranks.astype(float) ** -_ZIPF_CLUSTER
    live = np.flatnonzero(~dormant)
    global_w = np.zeros(n)
    global_w[live] = (rng.permutation(len(live)) + 1).astype(float) ** -_ZIPF_GLOBAL
    return _Catalog(ids, titles, cats, added, prices, minutes, dormant, withdrawn,
                    cluster_w, global_w)


@dataclass(frozen=True, slots=True)
class _Users:
    arrival_week: np.ndarray
    arrival_day: np.ndarray  # day of week 0..6 of the first visit
    cluster: np.ndarray
    activity: np.ndarray
    p_return: np.ndarray


def _build_users(rng: np.random.Generator, weeks: int, first: int, last: int) -> _Users:
    t = np.arange(weeks) / (weeks - 1)
    expected = first + (last - first) * t ** 1.5
    per_week = rng.poisson(expected)
    arrival_week = np.repeat(np.arange(weeks), per_week)
    n = len(arrival_week)
    shares = np.array([c[2] for c in CLUSTERS])
    return _Users(
        arrival_week=arrival_week,
        arrival_day=rng.integers(0, 7, size=n),
        cluster=rng.choice(len(CLUSTERS), size=n, p=shares / shares.sum()),
        activity=rng.lognormal(0.0, 0.8, size=n),
        p_return=rng.beta(2.0, 2.5, size=n),
    )


class _Rows:
    """Column buffers for event rows; users and items as indices until formatting."""

    def __init__(self) -> None:
        self.user: list[int] = []
        self.item: list[int] = []
        self.ts: list[int] = []
        self.kind: list[int] = []
        self.value: list[str] = []
        self.session: list[int] = []

    def add(self, user: int, item: int, ts: int, kind: int, value: str, session: int) -> None:
        self.user.append(user)
        self.item.append(item)
        self.ts.append(ts)
        self.kind.append(kind)
        self.value.append(value)
        self.session.append(session)


def _draw_item(rng, cdf: np.ndarray, n_avail: int) -> int:
    total = cdf[n_avail - 1]
    return int(np.searchsorted(cdf[:n_avail], rng.random() * total, side="right"))


def _simulate(rng: np.random.Generator, cat: _Catalog, users: _Users, weeks: int,
              gap_day: int) -> _Rows:
    """All genuine sessions, in user order then time order."""
    n_days = 7 * weeks
    # Classes are sorted by added day, so the playable ones on day d are a prefix.
    n_avail = np.searchsorted(cat.added_day, np.arange(n_days), side="right")
    cluster_cdf = np.cumsum(cat.cluster_w, axis=1)
    global_cdf = np.cumsum(cat.global_w)
    in_cluster = cat.cluster_w > 0
    hours_p = _HOURS / _HOURS.sum()
    rows = _Rows()
    session_no = 0
    owned: set[tuple[int, int]] = set()
    for u in range(len(users.arrival_week)):
        k = int(users.cluster[u])
        a = float(users.activity[u])
        seen: set[int] = set()
        w0 = int(users.arrival_week[u])
        for w in range(w0, weeks):
            if w > w0 and rng.random() >= users.p_return[u] * 0.95 ** (w - w0 - 1):
                continue
            # A new user's first session is on the arrival day, the others spread over the
            # rest of the week; a returning user's sessions spread over the whole week.
            n_extra = int(rng.poisson(0.6 * a))
            if w == w0:
                lo = int(users.arrival_day[u])
                days = np.concatenate([[lo], rng.integers(lo, 7, size=n_extra)])
            else:
                days = rng.integers(0, 7, size=n_extra + 1)
            days = np.sort(7 * w + days)
            for day in days.tolist():
                if day == gap_day:  # the outage: nothing was logged, as if nobody came
                    continue
                session_no += 1
                t = 86400 * day + 3600 * int(rng.choice(24, p=hours_p)) + int(rng.integers(3600))
                n_play = min(1 + int(rng.poisson(0.7 * a)), 12)
                plays = []
                for _ in range(n_play):
                    for _attempt in range(4):  # prefer classes not seen before
                        if rng.random() < _CLUSTER_SHARE:
                            i = _draw_item(rng, cluster_cdf[k], n_avail[day])
                        else:
                            i = _draw_item(rng, global_cdf, n_avail[day])
                        if i not in seen and i not in plays:
                            break
                    plays.append(i)
                shown: set[int] = set()
                for _ in range(int(rng.poisson(2.0))):
                    i = _draw_item(rng, global_cdf, n_avail[day])
                    if i not in plays and i not in shown:
                        shown.add(i)
                        rows.add(u, i, t, _IMP, "", session_no)
                        t += int(rng.integers(1, 4))
                for i in plays:
                    t += int(rng.integers(5, 40))
                    liked = bool(in_cluster[k, i])
                    if cat.price[i] > 0 and (u, i) not in owned:
                        if rng.random() < 0.35:
                            owned.add((u, i))
                            rows.add(u, i, t, _BUY, f"{cat.price[i]:.2f}", session_no)
                            t += int(rng.integers(20, 90))
                    rows.add(u, i, t, _PLAY, "", session_no)
                    if cat.price[i] > 0 and (u, i) not in owned:
                        frac = float(rng.uniform(0.02, 0.08))  # free preview only
                    elif liked:
                        frac = float(min(1.0, rng.beta(3.0, 1.2) * 1.05))
                    else:
                        frac = float(min(1.0, rng.beta(1.5, 1.8) * 1.05))
                    t += max(30, int(frac * cat.minutes[i] * 60 * rng.uniform(0.8, 1.3)))
                    rows.add(u, i, t, _PROG, f"{frac:.2f}", session_no)
                    if frac >= 0.95:
                        t += 1
                        rows.add(u, i, t, _DONE, "", session_no)
                    if rng.random() < (0.35 if frac >= 0.95 else 0.04):
                        t += int(rng.integers(5, 60))
                        p = _RATING_IN if liked else _RATING_OUT
                        rows.add(u, i, t, _RATE, str(1 + int(rng.choice(5, p=p))), session_no)
                    seen.add(i)
    return rows


@dataclass(frozen=True, slots=True)
class _Plan:
    """Where each planted problem goes, by genuine row position."""

    empty_user: frozenset[int]
    bad_ts: dict[int, str]  # row -> corruption style
    unknown_after: dict[int, str]  # row -> withdrawn item id of an extra row after it
    duplicate: frozenset[int]  # rows followed by an exact copy
    bot: _Rows


def _plan_problems(rng: np.random.Generator, rows: _Rows, cat: _Catalog, n_users: int,
                   weeks: int, gap_day: int) -> _Plan:
    """Choose the rows that carry each planted problem, and build the bot's rows."""
    ts = np.asarray(rows.ts)
    kind = np.asarray(rows.kind)
    # Only plays that survive the outage and the cut-off, so the planted counts are exact.
    ok = (kind == _PLAY) & (ts // 86400 != gap_day) & (ts < 86400 * 7 * weeks)
    sizes = (EMPTY_USER_ROWS, BAD_TIMESTAMP_ROWS, UNKNOWN_ITEM_ROWS, DUPLICATE_ROWS)
    picked = rng.choice(np.flatnonzero(ok), size=sum(sizes), replace=False)
    empty, bad, unknown, dup = (sorted(x.tolist()) for x in
                                np.split(picked, np.cumsum(sizes)[:-1]))
    # The bot: an ordinary-looking id replaying the 50 most popular classes in turn (a crawler
    # walking a listing page), about 1,000 plays an hour.
    bot_day = 7 * (min(_BOT_WEEK, weeks) - 1) + 1  # a Tuesday
    begin = 86400 * bot_day + 2 * 3600 + 13 * 60
    steps = rng.integers(1, 7, size=BOT_PLAYS).cumsum()
    steps = steps * (_BOT_HOURS * 3600 - 60) // steps[-1]
    avail = int(np.searchsorted(cat.added_day, bot_day, side="right"))
    listing = np.argsort(-cat.global_w[:avail], kind="stable")[:_BOT_LISTING]
    session = max(rows.session) + 1
    bot = _Rows()
    for j in range(BOT_PLAYS):
        bot.add(n_users, int(listing[j % len(listing)]), int(begin + steps[j]), _PLAY, "",
                session)
    return _Plan(
        empty_user=frozenset(empty),
        bad_ts={r: _BAD_TS[j % len(_BAD_TS)] for j, r in enumerate(bad)},
        unknown_after={r: cat.withdrawn[j % len(cat.withdrawn)] for j, r in enumerate(unknown)},
        duplicate=frozenset(dup),
        bot=bot,
    )


def _bad_timestamp(good: str, style: str) -> str:
    # good looks like 2026-10-14T19:07:13Z
    if style == "hour25":
        return good[:11] + "25" + good[13:]
    if style == "zero":
        return "0000-00-00T00:00:00Z"
    if style == "undefined":
        return "undefined"
    if style == "month13":
        return good[:5] + "13" + good[7:]
    if style == "day32":
        return good[:8] + "32" + good[10:]
    return good[:5] + "02-30" + good[10:]  # feb30


def _iso(start: dt.date, seconds: np.ndarray) -> np.ndarray:
    base = np.datetime64(start.isoformat(), "s")
    stamps = base + np.asarray(seconds, dtype=np.int64).astype("timedelta64[s]")
    return np.char.add(np.datetime_as_string(stamps, unit="s"), "Z")


def _atomic_write(path: Path, data: bytes) -> None:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o644)  # mkstemp makes 0600; these are ordinary shareable data files
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _csv_bytes(header: list[str], rows) -> bytes:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buf.getvalue().encode("utf-8")


def _gzip_bytes(raw: bytes) -> bytes:
    out = io.BytesIO()
    # mtime=0 and an empty name keep the gzip header free of anything that varies by run.
    with gzip.GzipFile(filename="", mode="wb", fileobj=out, compresslevel=9, mtime=0) as gz:
        gz.write(raw)
    return out.getvalue()


def _week_name(monday: dt.date) -> str:
    year, week, _ = monday.isocalendar()
    return f"{year}-w{week:02d}.csv.gz"


def _assemble(rows: _Rows, plan: _Plan, cat: _Catalog, start: dt.date, weeks: int,
              gap_day: int) -> list[list[list[str]]]:
    """Format every row as CSV fields, week by week, in time order, problems planted."""
    # Genuine rows are positions 0..n-1 and bot rows n..; one stable sort by time merges them
    # (ties keep generation order, so a session's events stay in order). Duplicates and
    # unknown-class rows are written right after their source row.
    bot = plan.bot
    all_ts = np.concatenate([np.asarray(rows.ts), np.asarray(bot.ts)])
    merged = np.argsort(all_ts, kind="stable")
    user = np.concatenate([rows.user, bot.user])
    item = np.concatenate([rows.item, bot.item])
    kind = np.concatenate([rows.kind, bot.kind])
    value = rows.value + bot.value
    session = np.concatenate([rows.session, bot.session])
    stamp = _iso(start, all_ts)
    horizon = 86400 * 7 * weeks

    def fmt(pos: int, item_id: str | None = None) -> list[str]:
        ts = str(stamp[pos])
        if pos in plan.bad_ts:
            ts = _bad_timestamp(ts, plan.bad_ts[pos])
        uid = "" if pos in plan.empty_user else f"u{int(user[pos]) + 1:06d}"
        iid = item_id if item_id is not None else cat.ids[int(item[pos])]
        return [uid, iid, ts, _EVENT_TYPES[int(kind[pos])], value[pos],
                f"s{int(session[pos]):06d}"]

    per_week: list[list[list[str]]] = [[] for _ in range(weeks)]
    for pos in merged.tolist():
        t = int(all_ts[pos])
        # Sessions that run past the gap day's midnight or past the end lose those events,
        # as a real outage or the export cut-off would.
        if t // 86400 == gap_day or t >= horizon:
            continue
        bucket = per_week[t // (7 * 86400)]
        row = fmt(pos)
        bucket.append(row)
        if pos in plan.duplicate:
            bucket.append(list(row))
        if pos in plan.unknown_after:
            bucket.append(fmt(pos, plan.unknown_after[pos]))
    return per_week


def _readme(s: ScenarioSummary, weeks: int) -> str:
    p = s.problems
    clusters = "\n".join(f"  - {name}: {', '.join(cats)} ({share:.0%} of users)"
                          for name, cats, share in CLUSTERS)
    table = "\n".join(
        f"| {Path(path).name} | {rows:,} | {new:,} | {act:,} | {added} |"
        for path, rows, new, act, added in zip(s.event_paths, s.events_per_week,
                                               s.new_users_per_week, s.active_users_per_week,
                                               s.items_added_per_week))
    return f"""# Sample logs: {SERVICE_NAME} (invented)

{SERVICE_NAME} is a made-up online cooking school: video classes of home cooking and a few
paid masterclasses. Every class, user and event here was drawn at random by
`advisor/scenario.py` (seed {s.seed}); nothing comes from a real service. The data are for
demonstrating and testing the audit on logs whose true structure is known.

- `catalog.csv`: `item_id,title,categories,added_at`, {s.items} classes in 10 categories
  (pipe-separated), new classes every week; {s.items_never_played} were never played.
- `events/YYYY-wNN.csv.gz`: one file per Monday-Sunday week (ISO week number),
  {weeks} weeks from {s.start} to {s.end}; columns
  `user_id,item_id,timestamp,event_type,value,session_id`. Event types: `impression`
  (shown, not played), `play`, `progress` (value = watched fraction, 0-1), `complete`,
  `rating` (value 1-5), `purchase` (value = price of a masterclass).
- {s.users:,} user ids (the bot included), {s.events:,} rows.

| file | rows | new users | active users | classes added |
|---|---:|---:|---:|---:|
{table}

## Planted structure

- Growth: new users per week rise convexly from about 40 to about 600, so the first weeks
  alone are thin and the last weeks are not. Activity per user is log-normal; users come
  back in later weeks with a personal probability.
- Six taste clusters, each favouring two or three categories:
{clusters}
  A cluster ranks its classes in its own order with Zipf weights; 75% of a user's plays come
  from their cluster, 25% from global popularity. Item-neighbourhood methods should beat
  global popularity once there is enough history.

## Planted data-quality problems

- {p.duplicate_rows} exact duplicate rows (the copy follows the original);
- {p.empty_user_rows} rows with an empty `user_id`;
- {p.bad_timestamp_rows} rows with an unparseable timestamp;
- {p.unknown_item_rows} rows for classes missing from the catalogue
  ({", ".join(p.unknown_items)}, withdrawn);
- one bot-like account, `{p.bot_user}`, with {p.bot_plays:,} plays within {p.bot_hours} hours;
- no events at all on {p.gap_day} (a logging gap).

## Regenerate

    advisor sample --out sample_logs

The same seed gives byte-identical files; a test checks that these files match the generator.
"""


def planted_truth(*, seed: int = DEFAULT_SEED, weeks: int = DEFAULT_WEEKS,
                  end: dt.date = DEFAULT_END, first_week_users: int = 40,
                  last_week_users: int = 600) -> PlantedTruth:
    """The hidden cluster of every user and the favoured classes of every cluster.

    Cheap: draws the catalogue and the users from their own random streams without
    simulating sessions, so it matches :func:`generate_scenario` with the same arguments.

    Parameters
    ----------
    seed, weeks, end, first_week_users, last_week_users
        As for :func:`generate_scenario`.

    Returns
    -------
    PlantedTruth
        User id -> cluster index, and per cluster its pool of classes in favour order.

    Examples
    --------
    >>> truth = planted_truth(weeks=4)
    >>> sorted(set(truth.user_cluster.values()))
    [0, 1, 2, 3, 4, 5]
    """
    _check_args(seed, weeks, end)
    r_cat, r_users, _, _ = _streams(seed)
    cat = _build_catalog(r_cat, weeks)
    users = _build_users(r_users, weeks, first_week_users, last_week_users)
    user_cluster = {f"u{u + 1:06d}": int(c) for u, c in enumerate(users.cluster.tolist())}
    cluster_items = []
    for k in range(len(CLUSTERS)):
        pool = np.flatnonzero(cat.cluster_w[k] > 0)
        pool = pool[np.argsort(-cat.cluster_w[k, pool], kind="stable")]
        cluster_items.append(tuple(cat.ids[i] for i in pool))
    return PlantedTruth(user_cluster=user_cluster, cluster_items=tuple(cluster_items))


def generate_scenario(out_dir: str | os.PathLike, *, seed: int = DEFAULT_SEED,
                      weeks: int = DEFAULT_WEEKS, end: dt.date = DEFAULT_END,
                      first_week_users: int = 40, last_week_users: int = 600) -> ScenarioSummary:
    """Write the Saucepan Street demo logs: ``catalog.csv``, ``events/*.csv.gz``, ``README.md``.

    Parameters
    ----------
    out_dir
        Folder to write into (created if missing). Files of the same names are replaced.
    seed
        Seed of every random step; the same arguments give byte-identical files.
    weeks
        Number of logged weeks (2-52), each a Monday-Sunday file named after its ISO week.
    end
        Last logged day; must be a Sunday.
    first_week_users, last_week_users
        Expected new users in the first and the last week (growth is convex in between).

    Returns
    -------
    ScenarioSummary
        Paths written and counts (users, items, rows per week, planted problems).

    Raises
    ------
    ConfigError
        If an argument is out of range.
    OutputError
        If the folder cannot be written, or ``events/`` already holds gzip files this
        scenario would not write (a mix of two scenarios would mislead an audit).

    Notes
    -----
    The planted structure and problems are described in the module docstring. Rows are
    written in time order (stable on ties, so a session keeps its order); rows with a bad
    timestamp stay where their real time put them. Generation takes a few seconds.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     summary = generate_scenario(folder, weeks=3)
    >>> len(summary.event_paths), summary.problems.duplicate_rows
    (3, 12)
    """
    _check_args(seed, weeks, end)
    if not 1 <= first_week_users <= last_week_users <= 100_000:
        raise ConfigError(
            "scenario needs 1 <= first_week_users <= last_week_users <= 100000, got "
            f"{first_week_users} and {last_week_users}")
    start = end - dt.timedelta(days=7 * weeks - 1)
    gap_day = 7 * (min(_GAP_WEEK, weeks) - 1) + 3  # a Thursday
    r_cat, r_users, r_sim, r_plant = _streams(seed)
    cat = _build_catalog(r_cat, weeks)
    users = _build_users(r_users, weeks, first_week_users, last_week_users)
    n_users = len(users.arrival_week)
    rows = _simulate(r_sim, cat, users, weeks, gap_day)
    plan = _plan_problems(r_plant, rows, cat, n_users, weeks, gap_day)
    per_week = _assemble(rows, plan, cat, start, weeks, gap_day)
    out = Path(out_dir)
    events_dir = out / "events"
    names = [_week_name(start + dt.timedelta(days=7 * w)) for w in range(weeks)]
    try:
        events_dir.mkdir(parents=True, exist_ok=True)
        strays = sorted(p.name for p in events_dir.glob("*.csv.gz") if p.name not in names)
    except OSError as exc:
        raise OutputError(f"cannot create {events_dir} ({exc}); choose a writable --out folder") \
            from None
    if strays:
        raise OutputError(
            f"{events_dir} already holds {len(strays)} event file(s) this scenario would not "
            f"write (first: {strays[0]}); an audit of the folder would mix two logs. Remove "
            "them or choose an empty --out folder")

    header = ["user_id", "item_id", "timestamp", "event_type", "value", "session_id"]
    cat_rows = [[cat.ids[i], cat.titles[i], "|".join(cat.cats[i]),
                 (start + dt.timedelta(days=int(cat.added_day[i]))).isoformat()]
                for i in range(len(cat.ids))]
    played = set()
    new_users, active, seen_users = [], [], set()
    bot_id = f"u{n_users + 1:06d}"
    event_paths: list[str] = []
    try:
        _atomic_write(out / "catalog.csv",
                      _csv_bytes(["item_id", "title", "categories", "added_at"], cat_rows))
        for w, bucket in enumerate(per_week):
            path = events_dir / names[w]
            _atomic_write(path, _gzip_bytes(_csv_bytes(header, bucket)))
            event_paths.append(str(path))
            week_users = {r[0] for r in bucket if r[0] and r[0] != bot_id}
            active.append(len(week_users))
            new_users.append(len(week_users - seen_users))
            seen_users |= week_users
            played.update(r[1] for r in bucket if r[3] == "play" and r[0] not in ("", bot_id))
    except OSError as exc:
        raise OutputError(f"cannot write the scenario into {out} ({exc}); choose a writable "
                          "--out folder") from None
    problems = PlantedProblems(
        duplicate_rows=DUPLICATE_ROWS, empty_user_rows=EMPTY_USER_ROWS,
        bad_timestamp_rows=BAD_TIMESTAMP_ROWS, unknown_item_rows=UNKNOWN_ITEM_ROWS,
        unknown_items=cat.withdrawn, bot_user=bot_id, bot_plays=BOT_PLAYS,
        bot_hours=_BOT_HOURS, gap_day=(start + dt.timedelta(days=gap_day)).isoformat())
    added_per_week = np.bincount(cat.added_day[cat.added_day >= 0] // 7, minlength=weeks)
    summary = ScenarioSummary(
        out_dir=str(out), catalog_path=str(out / "catalog.csv"),
        event_paths=tuple(event_paths), readme_path=str(out / "README.md"), seed=int(seed),
        start=start.isoformat(), end=end.isoformat(), items=len(cat.ids),
        items_never_played=sum(1 for i in cat.ids if i not in played),
        users=len(seen_users) + 1, events=sum(len(b) for b in per_week),
        events_per_week=tuple(len(b) for b in per_week),
        new_users_per_week=tuple(new_users), active_users_per_week=tuple(active),
        items_added_per_week=tuple(int(x) for x in added_per_week), problems=problems)
    try:
        _atomic_write(out / "README.md", _readme(summary, weeks).encode("utf-8"))
    except OSError as exc:
        raise OutputError(f"cannot write {out / 'README.md'} ({exc})") from None
    return summary
