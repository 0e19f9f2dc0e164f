"""Tests of the invented Saucepan Street scenario generator (advisor/scenario.py).

The scenario is invented data, so these are planted-structure tests: each checks that what the
module docstring says was planted is really in the files, read back with pandas directly.
Independent yardsticks are scipy, scikit-learn and pandas calls, named beside each check.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from scipy.stats import spearmanr
from sklearn.cluster import KMeans
from sklearn.metrics import adjusted_rand_score
from sklearn.preprocessing import normalize

from advisor.errors import ConfigError, OutputError
from advisor.scenario import (
    BAD_TIMESTAMP_ROWS,
    BOT_PLAYS,
    DUPLICATE_ROWS,
    EMPTY_USER_ROWS,
    UNKNOWN_ITEM_ROWS,
    generate_scenario,
    planted_truth,
)

SHIPPED = Path(__file__).resolve().parents[1] / "sample_logs"
EVENT_COLUMNS = ["user_id", "item_id", "timestamp", "event_type", "value", "session_id"]


def _files(root: Path) -> dict[str, bytes]:
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*"))
            if p.is_file()}


def _read_events(paths) -> pd.DataFrame:
    # Every field as the string written, empty fields as "" (not NaN), so ids stay opaque.
    frames = [pd.read_csv(p, dtype=str, keep_default_na=False).assign(week=w + 1)
              for w, p in enumerate(paths)]
    return pd.concat(frames, ignore_index=True)


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    """One full default generation, shared by the tests that read it."""
    out = tmp_path_factory.mktemp("scenario")
    summary = generate_scenario(out)
    events = _read_events(summary.event_paths)
    catalog = pd.read_csv(summary.catalog_path, dtype=str, keep_default_na=False)
    return summary, events, catalog


@pytest.fixture(scope="module")
def clean_plays(scenario):
    """Plays by genuine users of catalogue classes, with parseable timestamps."""
    summary, events, catalog = scenario
    ts = pd.to_datetime(events["timestamp"], format="ISO8601", errors="coerce", utc=True)
    keep = ((events["event_type"] == "play") & (events["user_id"] != "")
            & (events["user_id"] != summary.problems.bot_user)
            & events["item_id"].isin(catalog["item_id"]) & ts.notna())
    return events[keep].assign(ts=ts[keep])


def test_same_seed_gives_byte_identical_files(tmp_path):
    """Two runs with the same seed write the same bytes, gzip headers included."""
    a = generate_scenario(tmp_path / "a", seed=7, weeks=3)
    b = generate_scenario(tmp_path / "b", seed=7, weeks=3)
    assert a.events == b.events
    assert _files(tmp_path / "a") == _files(tmp_path / "b")


def test_different_seed_gives_different_events(tmp_path):
    """Changing the seed changes the event files."""
    generate_scenario(tmp_path / "a", seed=7, weeks=3)
    generate_scenario(tmp_path / "b", seed=8, weeks=3)
    a, b = _files(tmp_path / "a"), _files(tmp_path / "b")
    assert a.keys() == b.keys()
    assert all(a[k] != b[k] for k in a if k.startswith("events"))


def test_shipped_sample_logs_match_a_fresh_generation(scenario):
    """The committed sample_logs/ equals a fresh run with the default seed (no drift)."""
    summary, _, _ = scenario
    fresh, shipped = _files(Path(summary.out_dir)), _files(SHIPPED)
    assert sorted(shipped) == sorted(fresh)
    changed = [name for name in fresh if fresh[name] != shipped[name]]
    assert changed == [], f"regenerate with: advisor sample --out sample_logs ({changed})"


def test_shipped_sample_logs_stay_under_4_mb():
    """The committed sample is small enough to live in the repository."""
    assert sum(len(b) for b in _files(SHIPPED).values()) < 4_000_000


def test_event_files_have_documented_columns_and_values(scenario):
    """Columns, event types and value ranges are as the README documents."""
    summary, events, _ = scenario
    names = [Path(p).name for p in summary.event_paths]
    assert names[0] == "2026-w37.csv.gz" and names[-1] == "2026-w48.csv.gz"  # ISO weeks of
    # 2026-09-07 and 2026-11-23: datetime.date(...).isocalendar()
    assert list(events.columns[:-1]) == EVENT_COLUMNS
    kinds = set(events["event_type"])
    assert kinds == {"impression", "play", "progress", "complete", "rating", "purchase"}
    value = pd.to_numeric(events["value"].replace("", np.nan))
    by = events["event_type"]
    assert value[by.isin(["impression", "play", "complete"])].isna().all()
    ratings = value[by == "rating"]
    assert set(ratings.unique()) <= {1, 2, 3, 4, 5} and len(ratings.unique()) == 5
    assert events.loc[by == "rating", "value"].str.fullmatch(r"[1-5]").all()
    progress = value[by == "progress"]
    assert progress.between(0, 1).all() and progress.notna().all()
    assert (value[by == "purchase"] > 0).all() and (by == "purchase").sum() > 0
    ids = events.loc[events["user_id"] != "", "user_id"]
    assert ids.str.fullmatch(r"u\d{6}").all()
    assert events["item_id"].str.fullmatch(r"c\d{4}").all()
    assert events["session_id"].str.fullmatch(r"s\d{6}").all()


def test_catalog_grows_every_week_and_has_unplayed_classes(scenario):
    """300-450 classes in ~10 categories, new ones each week, some never played."""
    summary, events, catalog = scenario
    assert list(catalog.columns) == ["item_id", "title", "categories", "added_at"]
    assert 300 <= len(catalog) <= 450 and catalog["item_id"].is_unique
    assert catalog["title"].is_unique
    cats = catalog["categories"].str.split("|").explode()
    assert 8 <= cats.nunique() <= 12
    added = pd.to_datetime(catalog["added_at"], format="%Y-%m-%d")
    start = pd.Timestamp(summary.start)
    week = (added - start).dt.days // 7
    assert set(range(12)) <= set(week[week >= 0])  # a brand-new class in every week
    genuine = ~events["user_id"].isin(["", summary.problems.bot_user])
    played = events.loc[genuine & (events["event_type"] == "play"), "item_id"]
    never = ~catalog["item_id"].isin(played)
    assert 5 <= never.sum() <= 0.1 * len(catalog)
    assert never.sum() == summary.items_never_played


def test_classes_are_never_played_before_they_were_added(scenario, clean_plays):
    """Every genuine play of a catalogue class comes on or after its added_at date."""
    _, _, catalog = scenario
    added = pd.to_datetime(catalog.set_index("item_id")["added_at"], utc=True)
    assert (clean_plays["ts"] >= clean_plays["item_id"].map(added)).all()


def test_new_users_grow_from_tens_to_hundreds_a_week(scenario):
    """New users per week rise steadily (about 40 to about 600; 3,000-4,000 in all)."""
    summary, events, _ = scenario
    real = events[(events["user_id"] != "") & (events["user_id"] != summary.problems.bot_user)]
    first_week = real.groupby("user_id")["week"].min()
    new = first_week.value_counts().reindex(range(1, 13), fill_value=0).to_numpy()
    assert spearmanr(np.arange(12), new).statistic > 0.95  # scipy.stats.spearmanr
    assert new[0] < 80 and new[-1] > 450
    assert 3000 <= len(first_week) <= 4000
    assert tuple(new) == summary.new_users_per_week


def test_first_weeks_alone_are_thin(clean_plays):
    """The first three weeks hold under 5% of the plays; the last three over half."""
    share = clean_plays["week"].value_counts(normalize=True)
    assert share.reindex([1, 2, 3]).sum() < 0.05
    assert share.reindex([10, 11, 12]).sum() > 0.5


def test_users_return_in_later_weeks(scenario):
    """A good share of users is active in more than one week."""
    summary, events, _ = scenario
    real = events[(events["user_id"] != "") & (events["user_id"] != summary.problems.bot_user)]
    weeks = real.groupby("user_id")["week"].nunique()
    assert 0.3 < (weeks > 1).mean() < 0.8


def test_planted_clusters_share_more_classes_within_than_across(clean_plays):
    """Users of one cluster co-consume far more often than users of different clusters."""
    truth = planted_truth()
    pairs = clean_plays.drop_duplicates(["user_id", "item_id"])
    users = pd.Index(sorted(pairs["user_id"].unique()))
    items = pd.Index(sorted(pairs["item_id"].unique()))
    x = sp.csr_matrix((np.ones(len(pairs)), (users.get_indexer(pairs["user_id"]),
                                              items.get_indexer(pairs["item_id"]))))
    label = users.map(truth.user_cluster).to_numpy(dtype=int)
    co = (x @ x.T).tocoo()
    off = co.row != co.col
    same = label[co.row] == label[co.col]
    sizes = np.bincount(label)
    within_pairs = (sizes * (sizes - 1)).sum()
    across_pairs = len(label) * (len(label) - 1) - within_pairs
    within = (same & off).sum() / within_pairs
    across = (~same).sum() / across_pairs
    assert within > 2 * across


def test_planted_clusters_are_recoverable_without_labels(clean_plays):
    """k-means on users' class sets recovers the six planted clusters (active users)."""
    truth = planted_truth()
    pairs = clean_plays.drop_duplicates(["user_id", "item_id"])
    active = pairs["user_id"].value_counts()
    pairs = pairs[pairs["user_id"].isin(active.index[active >= 8])]
    users = pd.Index(sorted(pairs["user_id"].unique()))
    items = pd.Index(sorted(pairs["item_id"].unique()))
    x = sp.csr_matrix((np.ones(len(pairs)), (users.get_indexer(pairs["user_id"]),
                                              items.get_indexer(pairs["item_id"]))))
    found = KMeans(6, n_init=10, random_state=0).fit(normalize(x)).labels_
    # sklearn.metrics.adjusted_rand_score: 1 is perfect agreement, about 0 is chance
    assert adjusted_rand_score(users.map(truth.user_cluster), found) > 0.8


def test_item_neighbours_beat_popularity_on_the_last_week(clean_plays):
    """Item-item cosine top-10 recalls clearly more of week 12 than global popularity."""
    train = clean_plays[clean_plays["week"] <= 11].drop_duplicates(["user_id", "item_id"])
    test = clean_plays[clean_plays["week"] == 12].drop_duplicates(["user_id", "item_id"])
    users = pd.Index(sorted(train["user_id"].unique()))
    items = pd.Index(sorted(clean_plays["item_id"].unique()))
    x = sp.csr_matrix((np.ones(len(train)), (users.get_indexer(train["user_id"]),
                                              items.get_indexer(train["item_id"]))),
                      shape=(len(users), len(items)))
    count = np.asarray(x.sum(axis=0)).ravel()
    co = (x.T @ x).toarray()
    np.fill_diagonal(co, 0)
    sim = co / np.sqrt(np.maximum(np.outer(count, count), 1))
    test = test[test["user_id"].isin(users)]
    recall = {"neighbours": [], "popularity": []}
    for user, rows in test.groupby("user_id"):
        seen = x[users.get_loc(user)].indices
        target = set(items.get_indexer(rows["item_id"])) - set(seen)
        if len(seen) < 3 or not target:
            continue
        for name, score in (("neighbours", sim[seen].sum(axis=0)), ("popularity", count)):
            score = score.astype(float)
            score[seen] = -np.inf
            top = np.argsort(-score, kind="stable")[:10]
            recall[name].append(len(target & set(top)) / len(target))
    assert len(recall["neighbours"]) > 300
    assert np.mean(recall["neighbours"]) > 1.4 * np.mean(recall["popularity"])


def test_planted_problems_are_present_in_stated_numbers(scenario):
    """Duplicates, empty users, bad timestamps, unknown classes: exactly as stated."""
    summary, events, catalog = scenario
    p = summary.problems
    raw = events.drop(columns="week")
    assert raw.duplicated().sum() == DUPLICATE_ROWS == p.duplicate_rows
    assert (events["user_id"] == "").sum() == EMPTY_USER_ROWS == p.empty_user_rows
    ts = pd.to_datetime(events["timestamp"], format="ISO8601", errors="coerce", utc=True)
    assert ts.isna().sum() == BAD_TIMESTAMP_ROWS == p.bad_timestamp_rows
    # A lenient parser (pandas format="mixed", dateutil underneath) cannot rescue them either.
    lenient = pd.to_datetime(events.loc[ts.isna(), "timestamp"], format="mixed",
                             errors="coerce", utc=True)
    assert lenient.isna().all()
    unknown = events[~events["item_id"].isin(catalog["item_id"])]
    assert len(unknown) == UNKNOWN_ITEM_ROWS == p.unknown_item_rows
    assert set(unknown["item_id"]) == set(p.unknown_items) and len(p.unknown_items) == 2


def test_bot_plays_thousands_within_a_few_hours(scenario):
    """One account logs BOT_PLAYS plays within three hours; no person comes close."""
    summary, events, _ = scenario
    plays = events[events["event_type"] == "play"]
    per_user = plays["user_id"].value_counts()
    assert per_user.index[0] == summary.problems.bot_user
    assert per_user.iloc[0] == BOT_PLAYS and per_user.iloc[1] < BOT_PLAYS / 5
    ts = pd.to_datetime(plays.loc[plays["user_id"] == summary.problems.bot_user, "timestamp"])
    assert ts.max() - ts.min() <= pd.Timedelta(hours=summary.problems.bot_hours)
    assert set(plays.loc[plays["user_id"] == summary.problems.bot_user, "week"]) == {10}


def test_exactly_one_day_of_week_nine_has_no_events(scenario):
    """The logging gap: one day (in week 9) with no events, every other day has some."""
    summary, events, _ = scenario
    ts = pd.to_datetime(events["timestamp"], format="ISO8601", errors="coerce", utc=True)
    days = pd.date_range(summary.start, summary.end, freq="D", tz="UTC")
    per_day = ts.dropna().dt.floor("D").value_counts().reindex(days, fill_value=0)
    empty = per_day[per_day == 0].index
    assert [d.date().isoformat() for d in empty] == [summary.problems.gap_day]
    gap = dt.date.fromisoformat(summary.problems.gap_day)
    assert (gap - dt.date.fromisoformat(summary.start)).days // 7 + 1 == 9


def test_summary_agrees_with_the_files_and_is_json_safe(scenario):
    """Counts in the returned summary match the files, and to_dict round-trips as JSON."""
    summary, events, catalog = scenario
    assert summary.events == len(events)
    assert summary.events_per_week == tuple(events["week"].value_counts().sort_index())
    assert summary.items == len(catalog)
    assert summary.users == events.loc[events["user_id"] != "", "user_id"].nunique()
    assert json.loads(json.dumps(summary.to_dict())) == summary.to_dict()


def test_planted_truth_covers_every_logged_user(scenario):
    """planted_truth names a cluster for every genuine user in the log."""
    summary, events, _ = scenario
    truth = planted_truth()
    logged = set(events["user_id"]) - {"", summary.problems.bot_user}
    assert logged <= set(truth.user_cluster)
    assert len(truth.cluster_items) == 6


@pytest.mark.parametrize("kwargs", [
    {"weeks": 1}, {"weeks": 53}, {"seed": -1}, {"end": dt.date(2026, 11, 28)},
    {"first_week_users": 700},
])
def test_out_of_range_arguments_raise_config_error(tmp_path, kwargs):
    """Bad arguments fail with a ConfigError before anything is written."""
    with pytest.raises(ConfigError):
        generate_scenario(tmp_path / "out", **kwargs)
    assert not (tmp_path / "out").exists()


def test_foreign_event_files_in_the_output_are_refused(tmp_path):
    """An events/ folder holding other gzip files is not silently mixed with the scenario."""
    (tmp_path / "events").mkdir()
    (tmp_path / "events" / "2025-w01.csv.gz").write_bytes(b"")
    with pytest.raises(OutputError, match="2025-w01.csv.gz"):
        generate_scenario(tmp_path, weeks=2)
