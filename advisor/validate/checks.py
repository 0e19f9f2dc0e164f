"""Turn raw rows into clean, typed events; set aside and account for every row that is not.

Every row read ends in exactly one place: the events, the quarantine (with one reason), or
the count of exact duplicates dropped. Checks run in a fixed order and a row takes the reason
of the first check it fails, so the counts add up:
``rows_read == rows_used + rows_quarantined + duplicates_dropped``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from advisor.config import AuditConfig, EventRule
from advisor.errors import InsufficientDataError
from advisor.load.columns import fold_name
from advisor.load.model import LINE_COL, LOG_FIELDS, SOURCE_COL, RawCatalog, RawLog
from advisor.validate.anomalies import MIN_USERS_FOR_QUANTILE, anomaly_issues, implausible_users
from advisor.validate.model import Catalog, QualityIssue, QualityReport, ValidatedLog
from advisor.validate.timestamps import NUMBER_PATTERN, parse_timestamps, resolve_as_of

__all__ = ["QUARANTINE_REASONS", "build_catalog", "validate"]

#: Quarantine reasons in the order the checks run (a row gets the first that applies).
#: Timestamps come first so that rows after the audit date, expected when replaying a past
#: week, do not inflate the counts of other problems.
QUARANTINE_REASONS = (
    "empty_timestamp",
    "bad_timestamp",
    "after_as_of",
    "empty_user",
    "empty_item",
    "empty_event",
    "bad_value",
    "value_out_of_range",
    "unknown_item",
)
_CODE = {name: i + 1 for i, name in enumerate(QUARANTINE_REASONS)}

_KIND_BY_VALUE_NAME = {
    "rating": "rating", "score": "rating", "stars": "rating",
    "progress": "progress", "watchfraction": "progress", "completion": "progress",
    "price": "price", "amount": "price", "revenue": "price",
}
_RULE_FOR_KIND = {"rating": "rating", "progress": "progress", "price": "purchase"}


def _clean(col: pd.Series) -> pd.Series:
    """Strings stripped of surrounding spaces; empty becomes missing."""
    s = col.astype("str").str.strip()
    return s.where(s.ne("") & s.notna(), None)


def _count(n: int, noun: str) -> str:
    return f"{n:,} {noun}{'' if n == 1 else 's'}"


def _num(x: float | None, missing: str) -> str:
    return missing if x is None or np.isnan(x) else f"{x:g}"


def _numbers(text: pd.Series) -> np.ndarray:
    """Decimal numbers as float64; NaN where missing or not a plain finite number."""
    # A regular expression run by Arrow, then a cast, is several times faster than
    # pandas.to_numeric(errors="coerce") on string columns.
    ok = text.str.fullmatch(NUMBER_PATTERN).fillna(False).to_numpy(dtype=bool)
    out = np.full(len(text), np.nan)
    out[ok] = text[ok].astype("float64").to_numpy()
    out[~np.isfinite(out)] = np.nan
    return out


def _at(rows: pd.DataFrame, mask: np.ndarray) -> tuple[str | None, int | None, int | None]:
    """File, line and position of the first row in ``mask``."""
    hits = np.flatnonzero(mask)
    if len(hits) == 0:
        return None, None, None
    i = int(hits[0])
    return str(rows[SOURCE_COL].iat[i]), int(rows[LINE_COL].iat[i]), i


def _where(file: str | None, line: int | None) -> str:
    return f"first at {file} line {line}" if file is not None else "no row to point at"


def _default_rule(config: AuditConfig, value_column: str | None) -> tuple[EventRule, str]:
    """The rule for every row of a log without an event column."""
    rule = config.event_rule("interaction")
    if rule is not None:
        return rule, ("The log has no event column: every row is an 'interaction', treated as "
                      "the [events.interaction] rule of the config says.")
    kind = _KIND_BY_VALUE_NAME.get(fold_name(value_column), "none") if value_column else "none"
    base = config.event_rule(_RULE_FOR_KIND[kind]) if kind != "none" else None
    lo, hi = (base.value_min, base.value_max) if base is not None else (None, None)
    note = "The log has no event column: every row counts as one interaction."
    if kind != "none":
        bounds = (f" within [{_num(lo, '-inf')}, {_num(hi, 'inf')}]"
                  if lo is not None or hi is not None else "")
        note += (f" Its value column {value_column!r} is read as a {kind}{bounds}, judged by "
                 "its name.")
    return EventRule("interaction", True, kind, lo, hi), note


def _event_rules(event: pd.Series | None, n: int, config: AuditConfig,
                 value_column: str | None) -> tuple[dict[str, np.ndarray], str | None]:
    """Per-row rule arrays (counts, kind, lo, hi, mapped) and a note."""
    if event is None:
        rule, note = _default_rule(config, value_column)
        rules, mapped = [rule], [True]
        codes = np.zeros(n, dtype=np.intp)
    else:
        codes, uniques = pd.factorize(event)
        found = [config.event_rule(str(u)) for u in uniques]
        unmapped = EventRule("", config.unmapped_events_count)
        # Unmapped types get the unmapped rule; the last entry serves missing events (code -1).
        rules = [r if r is not None else unmapped for r in found] + [unmapped]
        mapped = [r is not None for r in found] + [True]
        note = None

    def spread(values: list, dtype) -> np.ndarray:
        return np.asarray(values, dtype=dtype)[codes]

    return {
        "counts": spread([r.counts for r in rules], bool),
        "kind": spread([r.value_kind for r in rules], object),
        "lo": spread([np.nan if r.value_min is None else r.value_min for r in rules], float),
        "hi": spread([np.nan if r.value_max is None else r.value_max for r in rules], float),
        "mapped": spread(mapped, bool),
    }, note


def build_catalog(
    raw: RawCatalog, *, separator: str = "|"
) -> tuple[Catalog, tuple[QualityIssue, ...]]:
    """Type the catalogue: unique item ids, category tuples, dates and numbers.

    Parameters
    ----------
    raw : RawCatalog
        Rows as read by the load stage.
    separator : str, default "|"
        Separator between several categories in one cell.

    Returns
    -------
    (Catalog, tuple of QualityIssue)
        Rows with no item id and repeated item ids (after the first) are dropped and
        reported; unreadable dates and numbers become missing and are reported.

    Examples
    --------
    >>> from advisor.load.model import ColumnDetection, InputFile
    >>> rows = pd.DataFrame({"item": ["a", "a", "b"], "categories": ["x| y", "z", None],
    ...                      "_source": "c.csv", "_line": [2, 3, 4]})
    >>> info = InputFile("c.csv", "csv", False, 0, "", 3)
    >>> cat, issues = build_catalog(RawCatalog(rows, info, ColumnDetection({}, (), ())))
    >>> cat.items["categories"].tolist(), [i.code for i in issues]
    ([('x', 'y'), ()], ['catalog_duplicate_item'])
    """
    rows = raw.rows.reset_index(drop=True)
    n = len(rows)
    item = _clean(rows["item"])
    empty = item.isna().to_numpy()
    dup = (item.duplicated(keep="first") & item.notna()).to_numpy()
    keep = ~empty & ~dup
    issues: list[QualityIssue] = []
    src = raw.file.path

    def report(code: str, mask: np.ndarray, severity: str, what: str, then: str) -> None:
        file, line, i = _at(rows, mask)
        issues.append(QualityIssue(
            code=code, count=int(mask.sum()), unit="rows", severity=severity, first_file=file,
            first_line=line, message=f"{what} ({_where(file, line)}{then(i)}"))

    if empty.any():
        report("catalog_empty_item", empty, "dropped",
               _count(int(empty.sum()), "catalogue row") + " with no item id",
               lambda i: f"); they are left out. Fill the item column of {src} or remove "
                         "those rows.")
    if dup.any():
        report("catalog_duplicate_item", dup, "dropped",
               _count(int(dup.sum()), "catalogue row") + " repeating an item id already listed",
               lambda i: f", item {item.iat[i]!r}); the first row of each item is kept. Remove "
                         f"the repeats from {src}.")

    def text(name: str) -> pd.Series:
        return _clean(rows[name]) if name in rows else pd.Series([None] * n, dtype="str")

    title = text("title")
    categories = [tuple(p for p in (x.strip() for x in c.split(separator)) if p)
                  if isinstance(c, str) else () for c in text("categories").tolist()]
    if "added" in rows:
        parsed = parse_timestamps(rows["added"], years=True)
        added = parsed.values
        bad = parsed.bad & keep
        if bad.any():
            report("catalog_bad_added", bad, "flagged",
                   _count(int(bad.sum()), "catalogue date") + " that cannot be read",
                   lambda i: f", got {rows['added'].iat[i]!r}); expected ISO-8601 (2024-03-01), "
                             "a year or epoch seconds. Those items are treated as having no "
                             "date; fix the dates to use them.")
    else:
        added = pd.Series(pd.NaT, index=rows.index, dtype="datetime64[ns, UTC]")
    numbers = {}
    for name in ("rating", "rating_count"):
        t = text(name)
        num = pd.Series(_numbers(t), index=t.index)
        bad = t.notna().to_numpy() & num.isna().to_numpy() & keep
        if bad.any():
            report(f"catalog_bad_{name}", bad, "flagged",
                   _count(int(bad.sum()), f"catalogue {name} cell") + " not readable as a number",
                   lambda i, t=t, name=name: f", got {t.iat[i]!r}); they are treated as missing. "
                                             f"Fix the {name} column of {src}.")
        numbers[name] = num
    items = pd.DataFrame({
        "item": item.astype("str"),
        "title": title,
        "categories": pd.Series(categories, dtype=object),
        "added": added.astype("datetime64[ns, UTC]"),
        "rating": numbers["rating"],
        "rating_count": numbers["rating_count"],
    })[keep].reset_index(drop=True)
    return Catalog(items=items), tuple(issues)


def _row_issues(rows: pd.DataFrame, reason: np.ndarray, dup: np.ndarray,
                rule: dict[str, np.ndarray], kept: np.ndarray, typed: pd.DataFrame,
                as_of: pd.Timestamp, config: AuditConfig,
                cat_src: str | None) -> list[QualityIssue]:
    """One issue per quarantine reason found, plus duplicates and unmapped event types."""
    issues: list[QualityIssue] = []
    for code in QUARANTINE_REASONS:
        mask = reason == _CODE[code]
        if not mask.any():
            continue
        file, line, i = _at(rows, mask)
        k = _count(int(mask.sum()), "row")
        at = _where(file, line)
        if code == "empty_timestamp":
            msg = (f"{k} with no timestamp ({at}); every event needs its time. Fill the "
                   "timestamp column or drop those rows.")
        elif code == "bad_timestamp":
            msg = (f"{k} with a timestamp that cannot be read ({at}, got "
                   f"{rows['ts'].iat[i]!r}); expected ISO-8601 such as 2024-03-01T14:05:00Z or "
                   "epoch seconds or milliseconds. Convert those values to one of these.")
        elif code == "after_as_of":
            msg = (f"{k} after the audit date {as_of:%Y-%m-%d %H:%M:%S} UTC ({at}); "
                   "they are set aside. This is expected when replaying a past week with "
                   "as_of; otherwise check the clock of the system that writes the log.")
        elif code in ("empty_user", "empty_item", "empty_event"):
            what = {"empty_user": "user id", "empty_item": "item id",
                    "empty_event": "event type"}[code]
            col = code.split("_")[1]
            msg = (f"{k} with no {what} ({at}); every event needs one. Fill the {col} "
                   "column or drop those rows.")
        elif code == "bad_value":
            kinds = sorted(set(rule["kind"][mask]))
            msg = (f"{k} with a value that is not a number ({at}, got "
                   f"{rows['value'].iat[i]!r}); expected a number for {', '.join(kinds)} "
                   "events. Fix the value column or leave those cells empty.")
        elif code == "value_out_of_range":
            rng = f"[{_num(rule['lo'][i], '-inf')}, {_num(rule['hi'][i], 'inf')}]"
            ev = typed["event"].iat[i]
            msg = (f"{k} with a value outside the plausible range of their event type "
                   f"({at}: event {ev!r}, value {typed['value'].iat[i]:g}, expected {rng}). Fix "
                   f"the values, or set min and max under [events.{ev}] in the config file.")
        else:  # unknown_item
            distinct = typed["item"][mask].nunique()
            msg = (f"{k} ({_count(distinct, 'distinct item')}) naming an item that is not in the "
                   f"catalogue {cat_src} ({at}, item {typed['item'].iat[i]!r}); they are set "
                   "aside. Add the items to the catalogue, or drop --catalog.")
        issues.append(QualityIssue(code=code, count=int(mask.sum()), unit="rows",
                                   severity="quarantined", first_file=file, first_line=line,
                                   message=msg))
    if dup.any():
        file, line, _ = _at(rows, dup)
        issues.append(duplicate_issue(int(dup.sum()), file, line))
    unmapped = kept & ~rule["mapped"]
    if unmapped.any():
        per = typed["event"][unmapped].value_counts()
        file, line, _ = _at(rows, unmapped)
        issues.append(unmapped_issue(list(per.index), per.to_numpy(), file, line, config))
    return issues


def all_set_aside(n_rows: int, parts: list[str], mapping: dict) -> InsufficientDataError:
    """The error when no row survives the checks; ``parts`` says why, reason by reason."""
    cols = ", ".join(f"{k}={v!r}" for k, v in mapping.items())
    return InsufficientDataError(
        f"every one of the {n_rows:,} rows read was set aside: {'; '.join(parts)}. Fix "
        f"those problems in the input, or check the column mapping ({cols}) and name the "
        "right columns with the --user-col/--item-col/--ts-col options or [columns].")


def duplicate_issue(dups: int, file: str | None, line: int | None) -> QualityIssue:
    """The ``duplicate_event`` issue (exact repeats, first copy kept); every engine's."""
    return QualityIssue(
        code="duplicate_event", count=dups, unit="rows", severity="dropped",
        first_file=file, first_line=line,
        message=(f"{_count(dups, 'row')} repeating an earlier event exactly "
                 f"(same user, item, time, event type, value and session; "
                 f"{_where(file, line)}); the "
                 "first copy is kept. A double export or a retrying logger is the usual "
                 "cause; check the export if there are many."))


def unmapped_issue(names: list, counts: np.ndarray, file: str | None, line: int | None,
                   config: AuditConfig) -> QualityIssue:
    """The ``unmapped_event_type`` issue from the event types with no rule (most rows
    first) and their row counts; every engine's."""
    shown = ", ".join(f"{t!r} ({_count(int(c), 'row')})"
                      for t, c in zip(names[:10], counts[:10]))
    more = f" and {len(names) - 10} more" if len(names) > 10 else ""
    treat = ("count as interactions" if config.unmapped_events_count
             else "do not count as interactions")
    return QualityIssue(
        code="unmapped_event_type", count=int(np.sum(counts)), unit="rows",
        severity="flagged", first_file=file, first_line=line,
        message=(f"{_count(len(names), 'event type')} with no rule: {shown}{more}; they {treat} "
                 f"({_where(file, line)}). Add [events.<type>] with counts (and value) to the "
                 "config file to say how each is treated."))


def _check_enough(rows: pd.DataFrame, reason: np.ndarray, events: pd.DataFrame,
                  mapping: dict[str, str]) -> None:
    """Raise :class:`InsufficientDataError` when nothing is left to audit."""
    if len(rows) == 0:
        raise InsufficientDataError("the log has no rows; nothing to audit.")
    if len(events) == 0:
        parts = []
        for code in QUARANTINE_REASONS:
            mask = reason == _CODE[code]
            if mask.any():
                file, line, _ = _at(rows, mask)
                parts.append(f"{code} {int(mask.sum()):,} ({_where(file, line)})")
        raise all_set_aside(len(rows), parts, mapping)
    if not events["counts"].any():
        per = events["event"].value_counts()
        shown = ", ".join(f"{t!r} {c:,}" for t, c in per.head(10).items())
        raise InsufficientDataError(
            f"none of the {len(events):,} events kept counts as an interaction (event types: "
            f"{shown}). Mark the type that records use (a play, a view, a purchase) with "
            "counts = true under [events.<type>] in the config file."
        )


def validate(raw: RawLog, catalog: RawCatalog | None, config: AuditConfig) -> ValidatedLog:
    """Check, type and de-duplicate the raw log; account for every row set aside.

    Parameters
    ----------
    raw : RawLog
        Rows as read by the load stage.
    catalog : RawCatalog or None
        The catalogue, if one was given; events whose item is not in it are set aside.
    config : AuditConfig
        Event rules, audit date and anomaly thresholds.

    Returns
    -------
    ValidatedLog

    Raises
    ------
    InsufficientDataError
        If no row survives the checks, or none of the kept events counts as an interaction.
    ConfigError
        If ``config.as_of`` cannot be read.

    Notes
    -----
    Checks, in order (a row takes the first reason that applies): empty or unreadable
    timestamp, after the audit date, empty user, empty item, empty event type, unreadable or
    out-of-range value, item missing from the catalogue. Then exact duplicates (same user,
    item, instant, event, value and session) among the remaining rows are dropped, keeping the
    first. Implausible accounts, days without events and sudden drops in volume are reported
    but not removed. All thresholds are common practice, no published source.

    Examples
    --------
    >>> from advisor.load.model import ColumnDetection, InputFile
    >>> rows = pd.DataFrame({"user": ["1", "1", ""], "item": ["00123", "00123", "9"],
    ...                      "ts": ["1709290800"] * 3, "_source": "a.csv", "_line": [2, 3, 4]})
    >>> raw = RawLog(rows, (InputFile("a.csv", "csv", False, 0, "", 3),),
    ...              ColumnDetection({}, (), ()))
    >>> v = validate(raw, None, AuditConfig())
    >>> v.quality.rows_used, v.quality.duplicates_dropped, v.quarantine["reason"].tolist()
    (1, 1, ['empty_user'])
    """
    rows = raw.rows.reset_index(drop=True)
    n = len(rows)
    present = [f for f in LOG_FIELDS if f in rows]
    reason = np.zeros(n, dtype=np.int8)

    def mark(code: str, mask) -> None:
        reason[(reason == 0) & np.asarray(mask, dtype=bool)] = _CODE[code]

    notes: list[str] = []
    skipped = getattr(raw, "skipped_files", ())
    if skipped:
        notes.append(f"Files skipped in the log folder (unsupported type): "
                     f"{', '.join(skipped[:10])}{' ...' if len(skipped) > 10 else ''}.")

    # Timestamps and the audit date.
    parsed = parse_timestamps(rows["ts"])
    ts = parsed.values
    mark("empty_timestamp", parsed.missing)
    mark("bad_timestamp", parsed.bad)
    as_of, as_of_note = resolve_as_of(config.as_of, ts.max())
    notes.extend(parsed.notes())
    notes.append(as_of_note)
    mark("after_as_of", (ts > as_of).to_numpy(dtype=bool) if pd.notna(as_of) else False)

    user = _clean(rows["user"])
    item = _clean(rows["item"])
    mark("empty_user", user.isna())
    mark("empty_item", item.isna())

    # Event types and their rules.
    event = _clean(rows["event"]).str.lower() if "event" in rows else None
    rule, note = _event_rules(event, n, config, raw.columns.mapping.get("value"))
    if note:
        notes.append(note)
    if event is not None:
        mark("empty_event", event.isna())
    else:
        event = pd.Series("interaction", index=rows.index, dtype="str")

    # Values.
    value = np.full(n, np.nan)
    if "value" in rows:
        vtext = _clean(rows["value"])
        num = _numbers(vtext)
        nonnum = vtext.notna().to_numpy() & ~np.isfinite(num)
        needs = rule["kind"] != "none"
        mark("bad_value", nonnum & needs)
        value = np.where(nonnum, np.nan, num)
        with np.errstate(invalid="ignore"):
            mark("value_out_of_range", (value < rule["lo"]) | (value > rule["hi"]))
        ignored = int((nonnum & ~needs & (reason == 0)).sum())
        if ignored:
            notes.append(f"{ignored:,} values that are not numbers belong to event types whose "
                         "value is not used; they were read as missing.")

    # Catalogue.
    cat_obj = None
    cat_issues: tuple[QualityIssue, ...] = ()
    if catalog is not None:
        cat_obj, cat_issues = build_catalog(
            catalog, separator=config.catalog_columns.category_separator)
        mark("unknown_item", item.notna() & ~item.isin(cat_obj.items["item"]))

    session = _clean(rows["session"]) if "session" in rows else pd.Series(
        None, index=rows.index, dtype="str")
    clean = reason == 0
    typed = pd.DataFrame({
        "user": user, "item": item, "ts": ts, "event": event, "value": value,
        "session": session,
    })
    dup = np.zeros(n, dtype=bool)
    dup[np.flatnonzero(clean)] = typed[clean].duplicated(keep="first").to_numpy()
    kept = clean & ~dup

    events = typed[kept].assign(
        value_kind=pd.Series(rule["kind"][kept], dtype="str").to_numpy(),
        counts=rule["counts"][kept],
    )
    events[SOURCE_COL] = rows[SOURCE_COL].to_numpy()[kept]
    events[LINE_COL] = rows[LINE_COL].to_numpy()[kept]
    events = events[["user", "item", "ts", "event", "value", "value_kind", "session", "counts",
                     SOURCE_COL, LINE_COL]].reset_index(drop=True)
    for name in ("user", "item", "event"):
        events[name] = events[name].astype("str")

    bad = reason > 0
    quarantine = rows.loc[bad, present].reset_index(drop=True)
    quarantine["reason"] = np.asarray(QUARANTINE_REASONS, dtype=object)[reason[bad] - 1]
    quarantine["reason"] = quarantine["reason"].astype("str")
    quarantine[SOURCE_COL] = rows[SOURCE_COL].to_numpy()[bad]
    quarantine[LINE_COL] = rows[LINE_COL].to_numpy()[bad]

    issues = _row_issues(rows, reason, dup, rule, kept, typed, as_of, config,
                         catalog.file.path if catalog is not None else None)
    _check_enough(rows, reason, events, dict(raw.columns.mapping))

    # Anomalies: reported, never removed here.
    bots = implausible_users(
        events, quantile=config.implausible_quantile, factor=config.implausible_factor,
        max_per_hour=config.max_events_per_hour)
    if bots.volume_threshold is None:
        notes.append(
            f"Only {bots.users_considered:,} users count interactions (fewer than "
            f"{MIN_USERS_FOR_QUANTILE:,}): the rule 'more than {config.implausible_factor:g} x "
            f"the {config.implausible_quantile:g} quantile of activity' was skipped, as so few "
            "users cannot define it; the hourly rule "
            f"(more than {config.max_events_per_hour} counted events in a clock hour) applies.")
    found, said = anomaly_issues(events, bots, as_of=as_of, config=config)
    issues.extend(found)
    notes.extend(said)
    issues.extend(cat_issues)
    issues.sort(key=lambda i: (i.unit != "rows", -i.count))

    quality = QualityReport(
        rows_read=n,
        rows_used=len(events),
        rows_quarantined=len(quarantine),
        duplicates_dropped=int(dup.sum()),
        issues=tuple(issues),
        timestamp_format=parsed.format,
        notes=tuple(notes),
    )
    return ValidatedLog(events=events, quarantine=quarantine, quality=quality,
                        implausible_users=bots.users, as_of=as_of, catalog=cat_obj)
