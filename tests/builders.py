"""Build small validated logs by hand for tests, without running the validate stage.

Event types are treated as the default config treats them (an impression does not count, a
rating carries a rating value, ...); an unknown event type counts.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from advisor.config import AuditConfig
from advisor.validate.model import Catalog, QualityReport, ValidatedLog

_DEFAULTS = AuditConfig()


def build_catalog(items: Iterable[str | Mapping]) -> Catalog:
    """A typed catalogue from item ids or dicts with ``item`` and optional ``title``,
    ``categories`` (tuple of str, or one string split on ``|``), ``added`` (ISO time),
    ``rating`` and ``rating_count``."""
    rows = []
    for it in items:
        d = {"item": it} if isinstance(it, str) else dict(it)
        cats = d.get("categories", ())
        if isinstance(cats, str):
            cats = tuple(c for c in cats.split("|") if c)
        rows.append({
            "item": str(d["item"]),
            "title": d.get("title"),
            "categories": tuple(cats),
            "added": d.get("added"),
            "rating": d.get("rating", np.nan),
            "rating_count": d.get("rating_count", np.nan),
        })
    df = pd.DataFrame(rows, columns=["item", "title", "categories", "added", "rating",
                                     "rating_count"])
    df["item"] = df["item"].astype(str)
    df["title"] = df["title"].astype("str")
    df["categories"] = pd.Series([r["categories"] for r in rows], dtype=object, index=df.index)
    df["added"] = pd.to_datetime(df["added"], utc=True).astype("datetime64[ns, UTC]")
    df["rating"] = df["rating"].astype(np.float64)
    df["rating_count"] = df["rating_count"].astype(np.float64)
    return Catalog(items=df)


def build_log(rows: Sequence[tuple], *, catalog: Catalog | Iterable | None = None,
              implausible: Iterable[str] = (), as_of: str | None = None) -> ValidatedLog:
    """A :class:`ValidatedLog` from ``(user, item, ts[, event[, value]])`` tuples.

    ``ts`` is an ISO-8601 string (or a ``pd.Timestamp``); ``event`` defaults to
    ``interaction`` (counts); ``value`` to NaN. ``catalog`` is a :class:`Catalog` or
    anything :func:`build_catalog` accepts. ``as_of`` defaults to the latest event.
    """
    recs = [(r[0], r[1], r[2], r[3] if len(r) > 3 else "interaction",
             r[4] if len(r) > 4 and r[4] is not None else np.nan) for r in rows]
    ev = pd.DataFrame(recs, columns=["user", "item", "ts", "event", "value"])
    ev["user"] = ev["user"].map(str).astype(str)
    ev["item"] = ev["item"].map(str).astype(str)
    ev["ts"] = pd.to_datetime(ev["ts"], utc=True, format="ISO8601").astype("datetime64[ns, UTC]")
    ev["event"] = ev["event"].astype(str)
    ev["value"] = ev["value"].astype(np.float64)
    # Each event type treated as the default config treats it.
    treat = {}
    for name in ev["event"].unique():
        rule = _DEFAULTS.event_rule(name)
        treat[name] = (rule.value_kind, rule.counts) if rule else ("none", True)
    ev["value_kind"] = ev["event"].map(lambda e: treat[e][0]).astype(str)
    ev["session"] = pd.Series(None, index=ev.index, dtype="str")
    ev["counts"] = ev["event"].map(lambda e: treat[e][1]).astype(bool)
    ev["_source"] = "log.csv"
    ev["_line"] = np.arange(2, len(ev) + 2, dtype=np.int64)
    if catalog is not None and not isinstance(catalog, Catalog):
        catalog = build_catalog(catalog)
    quality = QualityReport(rows_read=len(ev), rows_used=len(ev), rows_quarantined=0,
                            duplicates_dropped=0, issues=(), timestamp_format="iso8601")
    stamp = pd.Timestamp(as_of) if as_of is not None else ev["ts"].max()
    if stamp.tzinfo is None:
        stamp = stamp.tz_localize("UTC")
    quarantine = pd.DataFrame({"reason": pd.Series(dtype=str),
                               "_source": pd.Series(dtype=str),
                               "_line": pd.Series(dtype=np.int64)})
    return ValidatedLog(events=ev, quarantine=quarantine, quality=quality,
                        implausible_users=tuple(str(u) for u in implausible), as_of=stamp,
                        catalog=catalog)
