"""Tests of the benchmark's synthetic log generator (bench/generate.py).

The logs are invented, so these are planted-structure tests: each checks that what the
generator's docstring promises is in the file, read back with pyarrow. Yardsticks outside
the project: scipy.stats (linregress, skew) and the parameters the generator was given.
Small sizes only; the whole file runs in a few seconds.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import stats

_PATH = Path(__file__).resolve().parents[1] / "bench" / "generate.py"
_spec = importlib.util.spec_from_file_location("bench_generate", _PATH)
gen = importlib.util.module_from_spec(_spec)
sys.modules["bench_generate"] = gen  # dataclasses look their module up while building
_spec.loader.exec_module(gen)

SMALL = gen.LogSpec(events=40_000, users=2_000, items=400, clusters=4)


@pytest.fixture(scope="module")
def small_log(tmp_path_factory) -> tuple[Path, pa.Table]:
    path = tmp_path_factory.mktemp("bench") / "small.parquet"
    gen.write_log(SMALL, path, seed=7, chunk_rows=10_000)
    return path, pq.read_table(path)


def test_file_has_the_promised_columns_types_and_row_groups(small_log):
    """Four columns with the promised Arrow types, exactly `events` rows, one group a chunk."""
    path, table = small_log
    assert table.schema.names == ["user_id", "item_id", "timestamp", "event_type"]
    assert table.schema.field("user_id").type == pa.string()
    assert table.schema.field("item_id").type == pa.string()
    assert table.schema.field("timestamp").type == pa.timestamp("us", tz="UTC")
    assert table.schema.field("event_type").type == pa.string()
    assert table.num_rows == SMALL.events
    # 40,000 events in chunks of about 10,000 (a chunk may overshoot by one user's events).
    assert pq.ParquetFile(path).metadata.num_row_groups in (3, 4, 5)
    assert sum(col.null_count for col in table.columns) == 0


def test_every_user_appears_and_play_is_the_main_event_type(small_log):
    """Every user has at least one event; about 90 % of events are plays (the planted mix)."""
    _, table = small_log
    assert len(set(table.column("user_id").to_pylist())) == SMALL.users
    kinds = np.asarray(table.column("event_type").to_pylist())
    assert set(kinds) <= set(gen.EVENT_TYPES)
    assert abs((kinds == "play").mean() - gen.EVENT_SHARES[0]) < 0.01


def test_same_seed_gives_same_rows_and_another_seed_differs(small_log, tmp_path):
    """Writing again with the same seed reproduces the rows; another seed does not."""
    _, table = small_log
    again = tmp_path / "again.parquet"
    gen.write_log(SMALL, again, seed=7, chunk_rows=10_000)
    assert pq.read_table(again).equals(table)
    other = tmp_path / "other.parquet"
    gen.write_log(SMALL, other, seed=8, chunk_rows=10_000)
    assert not pq.read_table(other).equals(table)
    assert gen.read_file_metadata(again) == gen.file_metadata(SMALL, 7, 10_000)


def test_timestamps_fall_inside_the_span(small_log):
    """Every timestamp lies in the `weeks` weeks before the span's end."""
    _, table = small_log
    micros = table.column("timestamp").cast(pa.int64()).to_numpy()
    plan = gen.make_plan(SMALL, 7)
    assert micros.min() >= plan.start * 1_000_000
    assert micros.max() < plan.end * 1_000_000


def test_item_popularity_follows_the_planted_zipf_exponent():
    """Rank-frequency slope of the head items is near -zipf_exponent (scipy linregress).

    With every event drawn from the global weights (``in_cluster_share = 0``) the expected
    count of the rank-r item is proportional to r**-s, so the log-log slope over the 50 most
    popular items estimates -s (Zipf 1949; the planted s here is 1.0).
    """
    spec = gen.LogSpec(events=200_000, users=5_000, items=2_000, clusters=1,
                       in_cluster_share=0.0)
    plan = gen.make_plan(spec, 3)
    items = np.concatenate([b.column(1).to_numpy(zero_copy_only=False)
                            for b in gen.iter_batches(plan, 3, chunk_rows=50_000)])
    counts = np.sort(np.unique(items, return_counts=True)[1])[::-1][:50]
    fit = stats.linregress(np.log(np.arange(1, 51)), np.log(counts))
    assert fit.slope == pytest.approx(-1.0, abs=0.1)


def test_user_activity_is_log_normal_and_sums_to_the_event_count():
    """Events per user sum exactly; their logs have the planted sigma and little skew.

    With 200 events per user on average the ``+1`` floor and the rounding barely matter,
    so log(counts) should look normal: standard deviation near sigma = 1.0 and skewness near
    0 (scipy.stats.skew), while the raw counts are strongly right-skewed.
    """
    counts = gen.user_event_counts(1_000_000, 5_000, sigma=1.0, rng=np.random.default_rng(5))
    assert counts.sum() == 1_000_000
    assert counts.min() >= 1
    logs = np.log(counts)
    assert logs.std() == pytest.approx(1.0, abs=0.05)
    assert abs(stats.skew(logs)) < 0.15
    assert stats.skew(counts) > 2.0


def test_users_mostly_pick_items_of_their_planted_cluster(small_log):
    """About in_cluster_share + (1 - share) / clusters of events stay in the user's cluster.

    Each event picks the own cluster with probability 0.7 and otherwise a global item, which
    lands in the own cluster about a quarter of the time with 4 equal clusters (not exactly,
    because clusters differ in popularity), so the share is near 0.7 + 0.3 / 4 = 0.775 and
    far above the 0.25 of no structure; and the user's most played cluster is the planted one.
    """
    _, table = small_log
    plan = gen.make_plan(SMALL, 7)
    # Ids carry the numbers: item "i0123" is item number 123; user ids are a permutation.
    item_no = np.array([int(s[1:]) for s in table.column("item_id").to_pylist()])
    user_key = np.array([int(s[1:]) for s in table.column("user_id").to_pylist()])
    user_no = np.argsort(plan.user_key)[user_key]
    same = plan.item_cluster[item_no] == plan.user_cluster[user_no]
    assert same.mean() == pytest.approx(0.775, abs=0.05)
    per_user = np.zeros((SMALL.users, SMALL.clusters))
    np.add.at(per_user, (user_no, plan.item_cluster[item_no]), 1)
    busy = plan.user_events >= 10
    recovered = per_user.argmax(axis=1) == plan.user_cluster
    assert recovered[busy].mean() > 0.95


def test_named_sizes_scale_users_and_items_with_events():
    """10M is 1M users and 100k items (issue 5); other counts keep 10 events a user."""
    assert (gen.SIZES["10M"].users, gen.SIZES["10M"].items) == (1_000_000, 100_000)
    assert gen.spec_for(gen.parse_count("100M")).users == 10_000_000
    spec = gen.spec_for(gen.parse_count("30k"))
    assert (spec.users, spec.items) == (3_000, 300)
    with pytest.raises(ValueError, match="not a number"):
        gen.parse_count("ten")
