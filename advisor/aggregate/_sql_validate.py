"""The validation rules of ``advisor.validate`` written in DuckDB SQL (private).

Every rule here mirrors one in ``advisor/validate/checks.py`` and ``timestamps.py``; a change
there must be made here too (``tests/test_aggregate_duckdb.py`` compares both engines on logs
with every quarantine reason). Where SQL could read a value differently from pandas, the value
goes to the pandas code instead:

* Timestamps: integers, Parquet timestamps and strict ISO-8601 text
  (``YYYY-MM-DD[( |T)hh:mm:ss[.ffffff][Z|+hh:mm]]``) are read in SQL. Any other text
  (other ISO forms, decimal epochs, ``YYYYMMDD``, garbage) is collected as distinct values and
  read by :func:`advisor.validate.parse_timestamps`, then joined back. Cost grows with the
  number of distinct odd values, not with the log.
* Event types: the distinct event texts are lower-cased and mapped to rules in Python.
* Ids and text are stripped of the same whitespace characters Python's ``str.strip`` removes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from advisor.config import AuditConfig, EventRule
from advisor.validate.checks import _default_rule
from advisor.validate.timestamps import (
    _BASIC_DATE,
    _DATE_ONLY,
    _HI,
    _LO,
    _ZONED,
    NUMBER_PATTERN,
    parse_timestamps,
)

#: Characters ``str.strip()`` removes (and Arrow's ``utf8_trim_whitespace``, checked equal).
_WHITESPACE = (list(range(9, 14)) + list(range(0x1C, 0x21)) + [0x85, 0xA0, 0x1680]
               + list(range(0x2000, 0x200B)) + [0x2028, 0x2029, 0x202F, 0x205F, 0x3000])
_WHOLE = r"[+-]?[0-9]{1,18}"
_ISO = (r"([0-9]{4}-[0-9]{2}-[0-9]{2})(?:[T ]((?:[01][0-9]|2[0-3]):[0-5][0-9]:[0-5][0-9]"
        r"(?:\.[0-9]{1,6})?)(Z|[+-](?:[01][0-9]|2[0-3]):[0-5][0-9])?)?")
_LO_US, _HI_US = _LO.value // 1000, _HI.value // 1000
_LO_DAY, _HI_DAY = _LO.value // 86_400_000_000_000, _HI.value // 86_400_000_000_000
#: Timestamp kinds (``ts_kind``) in the order ``parse_timestamps`` reports them.
KIND_NAMES = {1: "iso8601", 2: "epoch_seconds", 3: "epoch_milliseconds",
              4: "epoch_microseconds", 5: "epoch_nanoseconds"}
_EPOCH_BUCKETS = ((1e11, 2), (1e14, 3), (1e17, 4), (np.inf, 5))

REASON_CODES = {
    "empty_timestamp": 1, "bad_timestamp": 2, "after_as_of": 3, "empty_user": 4,
    "empty_item": 5, "empty_event": 6, "bad_value": 7, "value_out_of_range": 8,
    "unknown_item": 9,
}


def _lit(pattern: str) -> str:
    return "'" + pattern.replace("'", "''") + "'"


def create_macros(con) -> None:
    """Helper macros used by the views."""
    ws = " || ".join(f"chr({c})" for c in _WHITESPACE)
    # trim() with a character set is slow; only values whose first or last character is
    # not printable ASCII (rare in ids) go through it.
    con.execute(f"CREATE OR REPLACE TEMP MACRO adv_clean(x) AS CASE WHEN unicode(x) BETWEEN "
                f"33 AND 126 AND unicode(reverse(x)) BETWEEN 33 AND 126 THEN x "
                f"ELSE nullif(trim(x, {ws}), '') END")
    # Floor division (DuckDB's // truncates toward zero, as C does).
    con.execute("CREATE OR REPLACE TEMP MACRO adv_fdiv(a, b) AS "
                "CASE WHEN a >= 0 THEN a // b ELSE -((-a - 1) // b) - 1 END")
    con.execute("CREATE OR REPLACE TEMP MACRO adv_ekind(x) AS CASE "
                + " ".join(f"WHEN abs(x::DOUBLE) < {b:.0e} THEN {k}"
                           for b, k in _EPOCH_BUCKETS[:-1]) + " ELSE 5 END")
    con.execute("CREATE OR REPLACE TEMP MACRO adv_efactor(k) AS CASE k WHEN 2 THEN 1000000000 "
                "WHEN 3 THEN 1000000 WHEN 4 THEN 1000 ELSE 1 END")
    con.execute("CREATE OR REPLACE TEMP MACRO adv_efits(x) AS "
                f"x::DOUBLE * adv_efactor(adv_ekind(x))::DOUBLE > {_LO.value}::DOUBLE AND "
                f"x::DOUBLE * adv_efactor(adv_ekind(x))::DOUBLE < {_HI.value}::DOUBLE")


def create_row_views(con, union_sql: str) -> None:
    """``adv_t3``: every row with cleaned keys and the SQL reading of its timestamp."""
    con.execute(f"""
        CREATE OR REPLACE TEMP VIEW adv_t1 AS
        SELECT f, line, (f::BIGINT << 40) + line AS pos,
               adv_clean(user_s) AS u_key, adv_clean(item_s) AS i_key,
               adv_clean(event_s) AS ev_key, adv_clean(session_s) AS s_key,
               ts_c, ts_i, CASE WHEN ts_c = 0 THEN adv_clean(ts_s) END AS ts_key,
               adv_clean(value_s) AS v_key, value_d,
               user_s, item_s, ts_s, event_s, value_s, session_s
        FROM ({union_sql})""")
    con.execute(f"""
        CREATE OR REPLACE TEMP VIEW adv_t2 AS
        SELECT *,
          CASE WHEN ts_c = 1 THEN ts_i
               WHEN ts_key IS NOT NULL AND regexp_full_match(ts_key, {_lit(_WHOLE)})
                    AND NOT regexp_full_match(ts_key, {_lit(_BASIC_DATE)})
               THEN CAST(ts_key AS BIGINT) END AS ep,
          CASE WHEN ts_key IS NOT NULL AND regexp_full_match(ts_key, {_lit(_ISO)})
               THEN CASE WHEN length(ts_key) = 10 THEN 'D'
                         WHEN ts_key[-1] = 'Z' THEN 'Z'
                         WHEN ts_key[-6] IN ('+', '-') THEN 'O'
                         ELSE 'N' END END AS iso
        FROM adv_t1""")
    # The strict pattern fixes the layout: a date (10 characters), then optionally a time of
    # 8 characters, a fraction, and 'Z' or an offset of 6 characters (+hh:mm).
    con.execute("""
        CREATE OR REPLACE TEMP VIEW adv_t3 AS
        SELECT *,
          CASE WHEN iso IS NOT NULL THEN
          epoch_us(try_cast(CASE iso WHEN 'Z' THEN ts_key[:-2] WHEN 'O' THEN ts_key[:-7]
                                 ELSE ts_key END AS TIMESTAMP))
          - CASE WHEN iso = 'O' THEN
                 (CASE WHEN ts_key[-6] = '-' THEN -1 ELSE 1 END)
                 * (CAST(ts_key[-5:-4] AS BIGINT) * 3600 + CAST(ts_key[-2:] AS BIGINT) * 60)
                 * 1000000 ELSE 0 END END AS iso_us
        FROM adv_t2""")


def odd_timestamp_keys(con) -> list[str]:
    """Distinct timestamp texts SQL does not read itself."""
    rows = con.execute("SELECT DISTINCT ts_key FROM adv_t3 WHERE ts_c = 0 AND ts_key IS NOT "
                       "NULL AND ep IS NULL AND iso_us IS NULL").fetchall()
    return [r[0] for r in rows]


def read_odd_timestamps(keys: list[str]) -> pd.DataFrame:
    """Read timestamp texts with the pandas reference reader, one row per text.

    Returns columns ``key``, ``ns`` (int64 or NA), ``st`` (1 read, 2 unreadable), ``kind``
    (see :data:`KIND_NAMES`), ``naive`` and ``date`` (bool), as ``parse_timestamps`` counts
    them.
    """
    if not keys:
        return pd.DataFrame({"key": pd.Series([], dtype="str"),
                             "ns": pd.Series([], dtype="Int64"),
                             "st": pd.Series([], dtype=np.int8),
                             "kind": pd.Series([], dtype=np.int8),
                             "naive": pd.Series([], dtype=bool),
                             "date": pd.Series([], dtype=bool)})
    text = pd.Series(keys, dtype="str")
    parsed = parse_timestamps(text)
    ok = ~parsed.bad & ~parsed.missing
    basic = text.str.fullmatch(_BASIC_DATE).fillna(False).to_numpy(dtype=bool)
    numeric = text.str.fullmatch(NUMBER_PATTERN).fillna(False).to_numpy(dtype=bool) & ~basic
    iso = ~numeric
    kind = np.where(ok & iso, 1, 0).astype(np.int8)
    if numeric.any():
        whole = text.str.fullmatch(_WHOLE).fillna(False).to_numpy(dtype=bool)
        num = np.zeros(len(text))
        sel = numeric & ~whole
        num[sel] = text[sel].astype("float64").to_numpy()
        sel = numeric & whole
        num[sel] = text[sel].astype("int64").to_numpy()
        mag = np.abs(num)
        lower = 0.0
        for upper, k in _EPOCH_BUCKETS:
            kind[numeric & ok & (mag >= lower) & (mag < upper)] = k
            lower = upper
    zoned = text.str.fullmatch(_ZONED).fillna(False).to_numpy(dtype=bool)
    date_only = text.str.fullmatch(_DATE_ONLY).fillna(False).to_numpy(dtype=bool)
    ns = parsed.values.dt.tz_localize(None).to_numpy("datetime64[ns]").view(np.int64)
    return pd.DataFrame({
        "key": text,
        "ns": pd.Series(np.where(ok, ns, 0), dtype="Int64").where(ok, pd.NA),
        "st": np.where(ok, 1, 2).astype(np.int8),
        "kind": kind,
        "naive": iso & ok & ~zoned & ~date_only,
        "date": iso & ok & date_only,
    })


def create_timestamp_view(con) -> None:
    """``adv_t5``: rows with ``ts_st`` (0 missing, 1 read, 2 unreadable, 3 unresolved),
    ``ts_ns``, ``ts_kind``, ``ts_naive`` and ``ts_date``; needs table ``adv_lk``."""
    con.execute(f"""
        CREATE OR REPLACE TEMP VIEW adv_t4 AS
        SELECT t.*, lk.ns AS lk_ns, lk.kind AS lk_kind, lk.naive AS lk_naive,
               lk.date AS lk_date,
          CASE WHEN t.ts_c = 0 AND t.ts_key IS NULL THEN 0
               WHEN t.ts_c > 0 AND t.ts_i IS NULL THEN 0
               WHEN t.ep IS NOT NULL THEN CASE WHEN adv_efits(t.ep) THEN 1 ELSE 2 END
               WHEN t.ts_c = 0 AND t.iso_us IS NOT NULL THEN
                    CASE WHEN t.iso_us BETWEEN {_LO_US} AND {_HI_US} THEN 1 ELSE 2 END
               WHEN t.ts_c = 0 THEN coalesce(lk.st, 3)
               WHEN t.ts_c IN (2, 4) THEN
                    CASE WHEN t.ts_i BETWEEN {_LO_US} AND {_HI_US} THEN 1 ELSE 2 END
               WHEN t.ts_c = 3 THEN
                    CASE WHEN t.ts_i BETWEEN {_LO.value} AND {_HI.value} THEN 1 ELSE 2 END
               ELSE CASE WHEN t.ts_i BETWEEN {_LO_DAY} AND {_HI_DAY} THEN 1 ELSE 2 END
          END AS ts_st
        FROM adv_t3 t LEFT JOIN adv_lk lk ON t.ts_c = 0 AND lk.key = t.ts_key""")
    con.execute("""
        CREATE OR REPLACE TEMP VIEW adv_t5 AS
        SELECT *,
          CASE WHEN ts_st = 1 THEN
            CASE WHEN ep IS NOT NULL THEN ep * adv_efactor(adv_ekind(ep))
                 WHEN ts_c = 0 AND iso_us IS NOT NULL THEN iso_us * 1000
                 WHEN ts_c = 0 THEN lk_ns
                 WHEN ts_c IN (2, 4) THEN ts_i * 1000
                 WHEN ts_c = 3 THEN ts_i
                 ELSE ts_i * 86400000000000 END END AS ts_ns,
          CASE WHEN ts_st = 1 THEN
            CASE WHEN ep IS NOT NULL THEN adv_ekind(ep)
                 WHEN ts_c = 0 AND iso_us IS NULL THEN lk_kind
                 ELSE 1 END END AS ts_kind,
          ts_st = 1 AND CASE WHEN ep IS NOT NULL THEN false
                             WHEN ts_c = 0 AND iso_us IS NOT NULL THEN iso = 'N'
                             WHEN ts_c = 0 THEN lk_naive
                             ELSE ts_c IN (2, 3) END AS ts_naive,
          ts_st = 1 AND CASE WHEN ep IS NOT NULL THEN false
                             WHEN ts_c = 0 AND iso_us IS NOT NULL THEN iso = 'D'
                             WHEN ts_c = 0 THEN lk_date
                             ELSE ts_c = 5 END AS ts_date
        FROM adv_t4""")


def scan_stats(con) -> tuple[pd.DataFrame, dict]:
    """One pass over the rows: event texts with counts, and timestamp statistics."""
    per = con.execute("""
        SELECT ev_key, count(*) AS n, min(pos) AS first,
               max(ts_ns) FILTER (WHERE ts_st = 1) AS ts_max,
               count(*) FILTER (WHERE ts_kind = 1) AS k1, count(*) FILTER (WHERE ts_kind = 2) AS k2,
               count(*) FILTER (WHERE ts_kind = 3) AS k3, count(*) FILTER (WHERE ts_kind = 4) AS k4,
               count(*) FILTER (WHERE ts_kind = 5) AS k5,
               count(*) FILTER (WHERE ts_naive) AS naive, count(*) FILTER (WHERE ts_date) AS dates,
               count(*) FILTER (WHERE ts_st = 3) AS unresolved
        FROM adv_t5 GROUP BY ev_key""").df()
    if int(per["unresolved"].sum()):
        raise RuntimeError("internal: timestamps left unread by the DuckDB engine")
    kinds = {}
    for k, name in KIND_NAMES.items():
        n = int(per[f"k{k}"].sum())
        if n:
            kinds[name] = n
    ts_max = per["ts_max"].dropna()
    stats = {
        "rows": int(per["n"].sum()),
        "kinds": dict(sorted(kinds.items(), key=lambda kv: -kv[1])),
        "naive": int(per["naive"].sum()),
        "date_only": int(per["dates"].sum()),
        "ts_max": pd.Timestamp(int(ts_max.max()), unit="ns", tz="UTC") if len(ts_max)
        else pd.NaT,
    }
    return per[["ev_key", "n", "first"]], stats


def event_rules(keys: pd.Series | None, config: AuditConfig, value_column: str | None
                ) -> tuple[pd.DataFrame | None, pd.DataFrame, int, str | None]:
    """Event map (``ev_key`` -> lower-cased ``event``, rule ``r``), the rules table, the rule
    of a missing event type, and a note; as ``checks._event_rules`` decides them."""
    if keys is None:
        rule, note = _default_rule(config, value_column)
        rules, mapped = [rule], [True]
        em = None
        missing_r = 0
    else:
        lowered = pd.Series(keys.to_numpy(dtype=object), dtype="str").str.lower()
        uniques = list(dict.fromkeys(lowered.tolist()))
        found = [config.event_rule(str(u)) for u in uniques]
        unmapped = EventRule("", config.unmapped_events_count, 1.0)
        rules = [r if r is not None else unmapped for r in found] + [unmapped]
        mapped = [r is not None for r in found] + [True]
        code = {u: i for i, u in enumerate(uniques)}
        em = pd.DataFrame({"ev_key": pd.Series(keys.to_numpy(dtype=object), dtype="str"),
                           "event": lowered,
                           "r": np.asarray([code[x] for x in lowered], dtype=np.int32)})
        missing_r = len(uniques)
        note = None
    names = ["interaction"] if keys is None else uniques + [None]
    table = pd.DataFrame({
        "r": np.arange(len(rules), dtype=np.int32),
        "event": pd.Series(names, dtype="str"),
        "counts": [bool(r.counts) for r in rules],
        "kind": pd.Series([r.value_kind for r in rules], dtype="str"),
        "lo": [np.nan if r.value_min is None else float(r.value_min) for r in rules],
        "hi": [np.nan if r.value_max is None else float(r.value_max) for r in rules],
        "mapped": mapped,
    })
    return em, table, missing_r, note


def create_dictionaries(con) -> None:
    """``adv_udict`` and ``adv_idict``: every distinct user and item id with an integer code
    in sorted order (so sorting codes sorts ids); items carry ``in_cat`` when a catalogue
    table ``adv_cat`` exists."""
    con.execute("""
        CREATE OR REPLACE TEMP TABLE adv_udict AS
        SELECT u_key AS key, (row_number() OVER (ORDER BY u_key) - 1)::INTEGER AS code
        FROM (SELECT DISTINCT u_key FROM adv_t1 WHERE u_key IS NOT NULL)""")
    has_cat = bool(con.execute("SELECT count(*) FROM duckdb_tables() "
                               "WHERE table_name = 'adv_cat'").fetchall()[0][0])
    in_cat = ("i_key IN (SELECT item FROM adv_cat)" if has_cat else "true")
    con.execute(f"""
        CREATE OR REPLACE TEMP TABLE adv_idict AS
        SELECT i_key AS key, (row_number() OVER (ORDER BY i_key) - 1)::INTEGER AS code,
               {in_cat} AS in_cat
        FROM (SELECT DISTINCT i_key FROM adv_t1 WHERE i_key IS NOT NULL)""")


def create_rows(con, *, has_event: bool, missing_r: int, as_of_ns: int | None,
                has_catalog: bool) -> None:
    """``adv_rows``: every row typed, with user and item codes, its rule ``r`` and its
    quarantine ``reason`` (0 = usable; else :data:`REASON_CODES`)."""
    if has_event:
        rule = f"coalesce(em.r, {missing_r})"
        join_em = "LEFT JOIN adv_em em ON em.ev_key = t.ev_key"
    else:
        rule, join_em = "0", ""
    after = f"WHEN t.ts_ns > {as_of_ns} THEN 3" if as_of_ns is not None else ""
    empty_event = "WHEN t.ev_key IS NULL THEN 6" if has_event else ""
    unknown = "WHEN NOT id.in_cat THEN 9" if has_catalog else ""
    con.execute(f"""
        CREATE OR REPLACE TEMP TABLE adv_rows AS
        SELECT t.pos, ud.code AS u, id.code AS i, t.ts_ns AS ts, ru.r,
               CASE WHEN t.nonnum THEN NULL ELSE t.v_num END AS value, t.s_key AS "session",
               t.nonnum AND ru.kind = 'none' AS ignored,
               (CASE WHEN t.ts_st = 0 THEN 1 WHEN t.ts_st = 2 THEN 2 {after}
                    WHEN t.u_key IS NULL THEN 4 WHEN t.i_key IS NULL THEN 5 {empty_event}
                    WHEN t.nonnum AND ru.kind <> 'none' THEN 7
                    WHEN coalesce(t.v_num < ru.lo OR t.v_num > ru.hi, false)
                         AND NOT t.nonnum THEN 8
                    {unknown}
                    ELSE 0 END)::TINYINT AS reason
        FROM (SELECT *, (v_key IS NOT NULL OR value_d IS NOT NULL)
                        AND (v_num IS NULL OR NOT isfinite(v_num)) AS nonnum
              FROM (SELECT *, CASE WHEN v_key IS NOT NULL THEN
                                     CASE WHEN regexp_full_match(v_key, {_lit(NUMBER_PATTERN)})
                                          THEN TRY_CAST(v_key AS DOUBLE) END
                                   ELSE value_d END AS v_num
                    FROM adv_t5)) t
        {join_em}
        JOIN adv_rules ru ON ru.r = {rule}
        LEFT JOIN adv_udict ud ON ud.key = t.u_key
        LEFT JOIN adv_idict id ON id.key = t.i_key""")


def create_events(con) -> None:
    """``adv_ev``: usable events, exact duplicates merged (``n`` copies, first at ``pos``).

    The rule ``r`` stands for the lower-cased event type (one rule per type)."""
    con.execute("""
        CREATE OR REPLACE TEMP TABLE adv_ev AS
        SELECT u, i, ts, r, value, "session",
               min(pos) AS pos, count(*) AS n, count(*) FILTER (WHERE ignored) AS ign
        FROM adv_rows WHERE reason = 0
        GROUP BY u, i, ts, r, value, "session" """)


def first_duplicate(con) -> int | None:
    """Position of the first row that repeats an earlier event exactly (None when none)."""
    got = con.execute("""
        WITH d AS (SELECT u, i, ts, r, value, "session" FROM adv_ev WHERE n > 1),
        c AS (SELECT t.pos, row_number() OVER (PARTITION BY t.u, t.i, t.ts, t.r, t.value,
                                               t."session" ORDER BY t.pos) AS k
              FROM adv_rows t SEMI JOIN d
                ON t.u = d.u AND t.i = d.i AND t.ts = d.ts AND t.r = d.r
                   AND t.value IS NOT DISTINCT FROM d.value
                   AND t."session" IS NOT DISTINCT FROM d."session"
              WHERE t.reason = 0)
        SELECT min(pos) FROM c WHERE k = 2""").fetchall()[0][0]
    return None if got is None else int(got)
