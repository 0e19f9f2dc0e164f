"""Seeded synthetic interaction logs for the speed and memory benchmark.

Writes one Parquet file with the columns ``user_id`` (string), ``item_id`` (string),
``timestamp`` (timestamp[us, UTC]) and ``event_type`` (string, mostly ``play``), one row
group per chunk of about ``chunk_rows`` events, so a 100M-event log never has to be in
memory at once (peak memory is set by the per-user arrays: about 40 bytes per user).

What is planted (all of it steered by :class:`LogSpec` and one seed):

* **Zipf-like item popularity.** Every item has a global rank ``r`` (a seeded permutation
  of the item numbers) and weight ``r ** -zipf_exponent``.
* **Log-normal user activity.** Each user gets a weight drawn from a log-normal
  distribution with ``sigma = activity_sigma``; the events are shared out in proportion to
  it (every user has at least one, and the total is exactly ``events``).
* **Taste clusters.** Every item and every user belongs to one of ``clusters`` clusters.
  A user's event picks an item of the user's own cluster with probability
  ``in_cluster_share`` (Zipf weights restricted to the cluster), otherwise an item from
  the whole catalogue (global Zipf weights). Repeats of the same item happen naturally.
* **A growing service.** Users join over ``weeks`` weeks, more of them late (the join time
  is ``start + span * sqrt(U)`` with ``U`` uniform); each user's events are uniform
  between the join time and the end of the span.

Rows are written in blocks of consecutive users (one block per row group); within a row
group they are in time order. The same seed, sizes and ``chunk_rows`` give the same rows.

Example::

    python bench/generate.py --events 10M --out bench/out/10M.parquet --seed 1
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import re
import sys
import time
from collections.abc import Iterator
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

#: Event types and their shares (all of them count as interactions under the default rules).
EVENT_TYPES: tuple[str, ...] = ("play", "complete", "like")
EVENT_SHARES: tuple[float, ...] = (0.90, 0.07, 0.03)

#: Key of the Parquet schema metadata that records the spec and seed of a generated file.
METADATA_KEY = b"bench.generator"

SCHEMA = pa.schema([
    ("user_id", pa.string()),
    ("item_id", pa.string()),
    ("timestamp", pa.timestamp("us", tz="UTC")),
    ("event_type", pa.string()),
])

_SUFFIX = {"": 1, "K": 10**3, "M": 10**6, "B": 10**9, "G": 10**9}


@dataclass(frozen=True, slots=True)
class LogSpec:
    """Shape of one synthetic log."""

    events: int
    """Rows to write (every row is one event)."""
    users: int
    """Users; each has at least one event."""
    items: int
    """Items in the catalogue (popular ones are seen; a few tail items may not be)."""
    clusters: int = 20
    """Planted taste clusters (users and items each belong to one)."""
    in_cluster_share: float = 0.7
    """Probability that an event picks an item from the user's own cluster."""
    zipf_exponent: float = 1.0
    """Exponent ``s`` of the item weights ``rank ** -s``."""
    activity_sigma: float = 1.0
    """Shape ``sigma`` of the log-normal user activity weights."""
    weeks: int = 52
    """Length of the covered span, in weeks."""
    end: str = "2026-11-30"
    """End of the span (a Monday, 00:00 UTC, exclusive)."""

    def to_dict(self) -> dict:
        return asdict(self)


#: Named sizes: 10M events over 1M users and 100k items (issue 5); the others keep the same
#: 10 events per user and 100 events per item.
SIZES: dict[str, LogSpec] = {
    "1M": LogSpec(events=1_000_000, users=100_000, items=10_000),
    "10M": LogSpec(events=10_000_000, users=1_000_000, items=100_000),
    "100M": LogSpec(events=100_000_000, users=10_000_000, items=1_000_000),
}


def parse_count(text: str) -> int:
    """Parse an event count such as ``10M``, ``2.5M``, ``300k`` or ``50000``.

    >>> parse_count("10M"), parse_count("2.5m"), parse_count("300k"), parse_count("50000")
    (10000000, 2500000, 300000, 50000)
    """
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*([kKmMbBgG]?)\s*", text)
    if m is None:
        raise ValueError(f"event count {text!r} is not a number with an optional k, M or B "
                         "suffix (for example 10M or 250000)")
    value = float(m.group(1)) * _SUFFIX[m.group(2).upper()]
    if value < 1 or value != int(value):
        raise ValueError(f"event count {text!r} must be a whole number of at least 1")
    return int(value)


def size_name(events: int) -> str:
    """Short name of an event count (``10M``, ``250k``, ``1234``).

    >>> size_name(10_000_000), size_name(250_000), size_name(1234)
    ('10M', '250k', '1234')
    """
    for div, suffix in ((10**9, "B"), (10**6, "M"), (10**3, "k")):
        if events >= div and events % div == 0:
            return f"{events // div}{suffix}"
    return str(events)


def spec_for(events: int, *, users: int | None = None, items: int | None = None,
             **options) -> LogSpec:
    """The spec of a named size, or 10 events per user and 100 per item for another count.

    >>> spec_for(10_000_000).users, spec_for(20_000).items
    (1000000, 200)
    """
    base = next((s for s in SIZES.values() if s.events == events), None)
    users = users or (base.users if base else max(1, events // 10))
    items = items or (base.items if base else max(2, events // 100))
    spec = LogSpec(events=events, users=users, items=items, **options)
    _check_spec(spec)
    return spec


def _check_spec(spec: LogSpec) -> None:
    if spec.users > spec.events:
        raise ValueError(f"{spec.users} users need at least as many events, got {spec.events}")
    if not 1 <= spec.clusters <= spec.items:
        raise ValueError(f"clusters must be between 1 and the {spec.items} items, "
                         f"got {spec.clusters}")
    if not 0.0 <= spec.in_cluster_share <= 1.0:
        raise ValueError(f"in_cluster_share must be in [0, 1], got {spec.in_cluster_share}")
    if spec.weeks < 1:
        raise ValueError(f"weeks must be at least 1, got {spec.weeks}")


def zipf_weights(n: int, exponent: float) -> np.ndarray:
    """Weights ``r ** -exponent`` of the ranks ``r = 1..n`` (not normalised).

    >>> zipf_weights(3, 1.0).tolist()
    [1.0, 0.5, 0.3333333333333333]
    """
    return np.arange(1, n + 1, dtype=np.float64) ** -exponent


def user_event_counts(n_events: int, n_users: int, *, sigma: float,
                      rng: np.random.Generator) -> np.ndarray:
    """Events per user: one each, the rest shared in proportion to log-normal weights.

    The shares are rounded down and the leftover events go to the users with the largest
    remainders (Hamilton's method), so the counts sum exactly to ``n_events``.

    >>> c = user_event_counts(1000, 50, sigma=1.0, rng=np.random.default_rng(0))
    >>> int(c.sum()), int(c.min()) >= 1
    (1000, True)
    """
    weights = rng.lognormal(mean=0.0, sigma=sigma, size=n_users)
    quota = weights * ((n_events - n_users) / weights.sum())
    counts = np.floor(quota).astype(np.int64)
    left = n_events - n_users - int(counts.sum())
    if left > 0:
        counts[np.argpartition(counts - quota, left - 1)[:left]] += 1
    return counts + 1


@dataclass(frozen=True, slots=True)
class Plan:
    """Per-user and per-item truth drawn before any event (kept for tests and checks)."""

    spec: LogSpec
    user_events: np.ndarray
    """Events of each user number (int64)."""
    user_cluster: np.ndarray
    """Planted cluster of each user number (int16)."""
    user_join: np.ndarray
    """Join time of each user, epoch seconds (int64)."""
    user_key: np.ndarray
    """Number written in each user's id (a seeded permutation, so ids carry no order)."""
    item_cluster: np.ndarray
    """Planted cluster of each item number (int16)."""
    item_rank: np.ndarray
    """Global popularity rank of each item number (1 = most popular)."""
    start: int
    """Start of the span, epoch seconds."""
    end: int
    """End of the span (exclusive), epoch seconds."""


def make_plan(spec: LogSpec, seed: int) -> Plan:
    """Draw users, items and clusters for ``spec`` with ``seed``."""
    _check_spec(spec)
    rng = np.random.default_rng([seed, 0])
    end = int(dt.datetime.fromisoformat(spec.end).replace(tzinfo=dt.timezone.utc).timestamp())
    start = end - spec.weeks * 7 * 86400
    counts = user_event_counts(spec.events, spec.users, sigma=spec.activity_sigma, rng=rng)
    user_cluster = rng.integers(spec.clusters, size=spec.users).astype(np.int16)
    join = start + np.floor((end - start) * np.sqrt(rng.random(spec.users))).astype(np.int64)
    join = np.minimum(join, end - 1)
    user_key = rng.permutation(spec.users).astype(np.int64)
    # Every cluster gets at least one item: deal a permutation round-robin.
    item_cluster = (rng.permutation(spec.items) % spec.clusters).astype(np.int16)
    item_rank = rng.permutation(spec.items).astype(np.int64) + 1
    return Plan(spec, counts, user_cluster, join, user_key, item_cluster, item_rank, start, end)


class _Sampler:
    """Draws items: globally by Zipf weight, or inside a cluster by the same weights."""

    def __init__(self, plan: Plan) -> None:
        spec = plan.spec
        w = zipf_weights(spec.items, spec.zipf_exponent)[plan.item_rank - 1]
        self.global_cdf = np.cumsum(w)
        self.global_cdf /= self.global_cdf[-1]
        # Items sorted by cluster; each cluster's cumulative weights are normalised to 1 and
        # shifted by the cluster number, so one searchsorted on ``cluster + U`` picks an item
        # inside that cluster for many events at once.
        order = np.lexsort((plan.item_rank, plan.item_cluster))
        clus = plan.item_cluster[order].astype(np.int64)
        cum = np.cumsum(w[order])
        starts = np.searchsorted(clus, np.arange(spec.clusters))  # no cluster is empty
        self.cluster_last = np.r_[starts[1:], clus.size] - 1
        before = np.r_[0.0, cum][starts]
        total = cum[self.cluster_last] - before
        within = (cum - before[clus]) / total[clus]
        within[self.cluster_last] = 1.0  # exact ends against rounding
        self.cluster_cdf = clus + within
        self.cluster_order = order

    def draw(self, clusters: np.ndarray, in_cluster: np.ndarray,
             rng: np.random.Generator) -> np.ndarray:
        u = rng.random(clusters.size)
        out = np.empty(clusters.size, dtype=np.int64)
        g = ~in_cluster
        out[g] = np.minimum(np.searchsorted(self.global_cdf, u[g], side="right"),
                            self.global_cdf.size - 1)
        c = clusters[in_cluster]
        pos = np.searchsorted(self.cluster_cdf, c + u[in_cluster], side="right")
        # c + u can round up to c + 1 when u is within 2**-53 of 1; stay inside cluster c.
        out[in_cluster] = self.cluster_order[np.minimum(pos, self.cluster_last[c])]
        return out


def _labels(prefix: str, numbers: np.ndarray, width: int) -> pa.Array:
    """``prefix`` + zero-padded numbers, built in Arrow (no Python string per row)."""
    digits = pc.utf8_lpad(pc.cast(pa.array(numbers, type=pa.int64()), pa.string()),
                          width=width, padding="0")
    return pc.binary_join_element_wise(prefix, digits, "")


def iter_batches(plan: Plan, seed: int, *, chunk_rows: int = 1_000_000
                 ) -> Iterator[pa.RecordBatch]:
    """Yield the log as record batches of consecutive users, about ``chunk_rows`` rows each."""
    spec = plan.spec
    sampler = _Sampler(plan)
    item_labels = _labels("i", np.arange(spec.items), len(str(spec.items - 1)))
    user_width = len(str(spec.users - 1))
    event_names = pa.array(EVENT_TYPES, type=pa.string())
    event_cdf = np.cumsum(EVENT_SHARES)
    event_cdf /= event_cdf[-1]
    ends = np.cumsum(plan.user_events)
    # Block boundaries: the first user whose cumulative events reach each multiple of
    # chunk_rows closes a block (a block may overshoot by one user's events).
    cuts = np.unique(np.searchsorted(ends, np.arange(chunk_rows, spec.events, chunk_rows)) + 1)
    bounds = np.r_[0, cuts[cuts < spec.users], spec.users]
    for block, (u0, u1) in enumerate(zip(bounds[:-1], bounds[1:])):
        rng = np.random.default_rng([seed, 1, block])
        counts = plan.user_events[u0:u1]
        users = np.repeat(np.arange(u0, u1), counts)
        n = users.size
        clusters = plan.user_cluster[users].astype(np.int64)
        in_cluster = rng.random(n) < spec.in_cluster_share
        items = sampler.draw(clusters, in_cluster, rng)
        join = plan.user_join[users]
        secs = join + np.floor((plan.end - join) * rng.random(n)).astype(np.int64)
        micros = secs * 1_000_000 + rng.integers(0, 1_000_000, size=n)
        kinds = np.searchsorted(event_cdf, rng.random(n), side="right").astype(np.int32)
        order = np.argsort(micros, kind="stable")
        user_labels = _labels("u", plan.user_key[u0:u1], user_width)
        yield pa.record_batch([
            user_labels.take(pa.array(users[order] - u0)),
            item_labels.take(pa.array(items[order])),
            pa.array(micros[order], type=pa.timestamp("us", tz="UTC")),
            event_names.take(pa.array(kinds[order])),
        ], schema=SCHEMA)


def file_metadata(spec: LogSpec, seed: int, chunk_rows: int) -> dict:
    """What is recorded in the Parquet schema metadata of a generated file."""
    return {"spec": spec.to_dict(), "seed": seed, "chunk_rows": chunk_rows}


def read_file_metadata(path: str | Path) -> dict | None:
    """The generator's record in a Parquet file, or None when it has none."""
    meta = pq.read_schema(path).metadata or {}
    raw = meta.get(METADATA_KEY)
    return None if raw is None else json.loads(raw)


def write_log(spec: LogSpec, path: str | Path, *, seed: int,
              chunk_rows: int = 1_000_000) -> int:
    """Write the log for ``spec`` to ``path`` (atomically); return the row groups written."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    plan = make_plan(spec, seed)
    meta = {METADATA_KEY: json.dumps(file_metadata(spec, seed, chunk_rows)).encode()}
    schema = SCHEMA.with_metadata(meta)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    groups = 0
    try:
        with pq.ParquetWriter(tmp, schema, compression="snappy") as writer:
            for batch in iter_batches(plan, seed, chunk_rows=chunk_rows):
                writer.write_table(pa.Table.from_batches([batch], schema=schema),
                                   row_group_size=max(batch.num_rows, 1))
                groups += 1
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return groups


#: Defaults of the tunable fields (a slotted dataclass has no class-level defaults to read).
_DEFAULTS = LogSpec(events=1, users=1, items=1)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--events", required=True,
                   help="events to write: 1M, 10M, 100M (named sizes) or any count")
    p.add_argument("--out", required=True, type=Path, help="Parquet file to write")
    p.add_argument("--seed", type=int, default=1, help="seed (default 1)")
    p.add_argument("--users", type=int, help="users (default: the named size's, or events/10)")
    p.add_argument("--items", type=int, help="items (default: the named size's, or events/100)")
    p.add_argument("--clusters", type=int, default=_DEFAULTS.clusters)
    p.add_argument("--in-cluster-share", type=float, default=_DEFAULTS.in_cluster_share)
    p.add_argument("--zipf-exponent", type=float, default=_DEFAULTS.zipf_exponent)
    p.add_argument("--activity-sigma", type=float, default=_DEFAULTS.activity_sigma)
    p.add_argument("--chunk-rows", type=int, default=1_000_000,
                   help="events per row group (default 1,000,000)")
    args = p.parse_args(argv)
    try:
        spec = spec_for(parse_count(args.events), users=args.users, items=args.items,
                        clusters=args.clusters, in_cluster_share=args.in_cluster_share,
                        zipf_exponent=args.zipf_exponent, activity_sigma=args.activity_sigma)
    except ValueError as exc:
        p.error(str(exc))
    if args.chunk_rows < 1:
        p.error(f"--chunk-rows must be at least 1, got {args.chunk_rows}")
    t0 = time.perf_counter()
    groups = write_log(spec, args.out, seed=args.seed, chunk_rows=args.chunk_rows)
    print(f"wrote {args.out}: {spec.events:,} events, {spec.users:,} users, {spec.items:,} "
          f"items, {spec.clusters} clusters, {groups} row groups, seed {args.seed}, "
          f"{time.perf_counter() - t0:.1f} s", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
