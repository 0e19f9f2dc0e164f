"""Run settings: column mapping, event types, thresholds; read from options and a TOML file.

The config file is parsed as data (TOML), never evaluated. Unknown sections or keys are
errors that name the key, so a typo can never be silently ignored.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from advisor.errors import ConfigError

__all__ = ["AuditConfig", "CatalogColumns", "EventRule", "LogColumns", "DEFAULT_EVENT_RULES",
           "load_config"]

VALUE_KINDS = ("rating", "progress", "price", "none")


@dataclass(frozen=True, slots=True)
class LogColumns:
    """Source column names for the log fields; ``None`` means auto-detect."""

    user: str | None = None
    item: str | None = None
    ts: str | None = None
    event: str | None = None
    value: str | None = None
    session: str | None = None

    def given(self) -> dict[str, str]:
        """Canonical field -> source column, for the fields the user named."""
        return {k: getattr(self, k) for k in self.__slots__ if getattr(self, k)}


@dataclass(frozen=True, slots=True)
class CatalogColumns:
    """Source column names for the catalogue fields; ``None`` means auto-detect."""

    item: str | None = None
    title: str | None = None
    categories: str | None = None
    added: str | None = None
    rating: str | None = None
    rating_count: str | None = None
    category_separator: str = "|"
    """Separator between several categories in one cell."""

    def given(self) -> dict[str, str]:
        names = ("item", "title", "categories", "added", "rating", "rating_count")
        return {k: getattr(self, k) for k in names if getattr(self, k)}


@dataclass(frozen=True, slots=True)
class EventRule:
    """How one event type is treated."""

    name: str
    """Event type as it appears in the log (matched case-insensitively)."""
    counts: bool = True
    """Whether it counts as an interaction (an impression does not; a play does)."""
    value_kind: str = "none"
    """What the value column means for this event: rating, progress, price or none."""
    value_min: float | None = None
    """Smallest plausible value (inclusive); outside it the row is quarantined."""
    value_max: float | None = None
    """Largest plausible value (inclusive)."""


def _r(name, counts=True, kind="none", lo=None, hi=None):
    return EventRule(name, counts, kind, lo, hi)


#: Defaults for common event names: exposures and searches do not count as interactions,
#: everything a user chose to do does (common practice for implicit feedback, no published
#: source); set your own in the config file. Every counted event is one interaction: the
#: audit asks how much evidence there is, not how strong each signal is.
DEFAULT_EVENT_RULES: tuple[EventRule, ...] = (
    _r("impression", counts=False),
    _r("shown", counts=False),
    _r("exposure", counts=False),
    _r("search", counts=False),
    _r("click"),
    _r("view"),
    _r("play"),
    _r("start"),
    _r("listen"),
    _r("watch"),
    _r("read"),
    _r("progress", kind="progress", lo=0.0, hi=1.0),
    _r("complete"),
    _r("finish"),
    _r("like"),
    _r("favourite"),
    _r("add_to_cart"),
    _r("purchase", kind="price", lo=0.0),
    _r("buy", kind="price", lo=0.0),
    _r("order", kind="price", lo=0.0),
    _r("rating", kind="rating", lo=0.0, hi=10.0),
    _r("rate", kind="rating", lo=0.0, hi=10.0),
)


@dataclass(frozen=True, slots=True)
class AuditConfig:
    """Everything that steers one audit, besides the input paths."""

    columns: LogColumns = field(default_factory=LogColumns)
    catalog_columns: CatalogColumns = field(default_factory=CatalogColumns)
    events: tuple[EventRule, ...] = DEFAULT_EVENT_RULES
    unmapped_events_count: bool = True
    """Whether event types with no rule count as interactions (reported either way)."""
    as_of: str | None = None
    """ISO date or datetime; events after it are set aside. ``None``: the latest event."""
    history_cap: int = 200
    """Most recent distinct items per user kept for co-occurrence (bounds cost)."""
    confidence: float = 0.95
    """Confidence level of every interval in the report."""
    min_pair_users: int = 2
    """Pairs co-consumed by fewer users are not scored (one user proves nothing)."""
    exclude_implausible: bool = True
    """Leave implausible accounts out of co-occurrence and the backtest."""
    implausible_quantile: float = 0.999
    """Activity quantile above which (times ``implausible_factor``) an account is implausible."""
    implausible_factor: float = 3.0
    """How far above the quantile an account must be to be flagged."""
    max_events_per_hour: int = 300
    """More counted events than this in one clock hour is beyond a person (common practice)."""
    seed: int = 20261201
    """Seed of every random step (printed in the report)."""
    backtest: bool = True
    """Run the offline backtest and learning curve (the evidence stage)."""
    backtest_users: int = 5000
    """Test users sampled for the backtest (seeded)."""
    backtest_sample_users: int = 100_000
    """Users the backtest trains and tests on; a log with more is backtested on a seeded
    sample of this many (a cost bound: the fits grow with users and items), and the report
    says so. Raise it for a slower estimate closer to the whole log's."""
    rules_file: str | None = None
    """A user's rules TOML that overrides or adds to the shipped rules."""
    engine: str = "auto"
    """Engine of the read, validate and aggregate stages: ``duckdb`` (embedded, out of
    core), ``pandas`` (in memory, reads every supported format), ``spark`` (Apache Spark,
    for Parquet on a cluster or in a data lake; needs the ``spark`` extra and Java), or
    ``auto``: duckdb, falling back to pandas for input duckdb does not read (JSON Lines,
    for one); the report names the engine that ran."""
    threads: int | None = None
    """Threads the ``duckdb`` engine, a local Spark and the backtest's ranking of test users
    may use; ``None``: every core."""
    engine_memory_gib: float | None = None
    """Memory the ``duckdb`` engine may use before it spills to disk, GiB; ``None``: a
    quarter of the machine's memory, at most 2 GiB."""
    spark_master: str | None = None
    """Spark master URL (``local[4]``, ``spark://host:7077``, ``yarn``); ``None``: the active
    Spark session if there is one, else ``local[threads]``."""

    def event_rule(self, name: str) -> EventRule | None:
        key = name.strip().lower()
        for rule in self.events:
            if rule.name.lower() == key:
                return rule
        return None


_TOP_KEYS = {"columns", "catalog", "events", "audit"}
_AUDIT_KEYS = {
    "unmapped_events_count", "as_of", "history_cap", "confidence", "min_pair_users",
    "exclude_implausible", "implausible_quantile", "implausible_factor",
    "max_events_per_hour", "seed", "backtest", "backtest_users", "backtest_sample_users",
    "rules_file", "engine", "threads", "engine_memory_gib", "spark_master",
}
#: Engines that can compute the aggregates.
ENGINES = ("auto", "duckdb", "pandas", "spark")
_EVENT_KEYS = {"counts", "value", "min", "max"}


def _check_keys(where: str, table: dict, allowed: set[str], path: str) -> None:
    for key in table:
        if key not in allowed:
            hint = ", ".join(sorted(allowed))
            raise ConfigError(
                f"{path}: unknown key '{key}' in [{where}]; expected one of: {hint}. "
                "Fix the spelling or remove the key."
            )


def _expect(value: Any, types: tuple[type, ...], key: str, path: str) -> Any:
    if isinstance(value, bool) and bool not in types:
        raise ConfigError(f"{path}: '{key}' must be {types[0].__name__}, got a boolean")
    if not isinstance(value, types):
        want = " or ".join(t.__name__ for t in types)
        raise ConfigError(
            f"{path}: '{key}' must be {want}, got {type(value).__name__} {value!r}"
        )
    return value


def load_config(path: str | Path | None, base: AuditConfig | None = None) -> AuditConfig:
    """Read a TOML config file on top of ``base`` (defaults when ``None``).

    Raises
    ------
    ConfigError
        If the file cannot be read or parsed, or a key is unknown or of the wrong type.
    """
    cfg = base or AuditConfig()
    if path is None:
        return cfg
    p = Path(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"config file {p} not found; check the path given to --config") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: not valid TOML ({exc}); fix the syntax") from None
    except (UnicodeDecodeError, OSError) as exc:
        raise ConfigError(f"{p}: cannot be read ({exc}); save it as UTF-8 text") from None
    return apply_config(data, cfg, str(p))


def apply_config(data: dict, cfg: AuditConfig, where: str = "config") -> AuditConfig:
    """Apply a parsed config mapping to ``cfg`` (see :func:`load_config`)."""
    _check_keys("top level", data, _TOP_KEYS, where)
    if "columns" in data:
        cols = _expect(data["columns"], (dict,), "columns", where)
        allowed = set(LogColumns.__slots__)
        _check_keys("columns", cols, allowed, where)
        for k, v in cols.items():
            _expect(v, (str,), f"columns.{k}", where)
        cfg = replace(cfg, columns=replace(cfg.columns, **cols))
    if "catalog" in data:
        cat = _expect(data["catalog"], (dict,), "catalog", where)
        _check_keys("catalog", cat, {"columns", "category_separator"}, where)
        kw = {}
        if "columns" in cat:
            cc = _expect(cat["columns"], (dict,), "catalog.columns", where)
            _check_keys("catalog.columns", cc, set(CatalogColumns().given()) | {
                "item", "title", "categories", "added", "rating", "rating_count"}, where)
            for k, v in cc.items():
                _expect(v, (str,), f"catalog.columns.{k}", where)
            kw.update(cc)
        if "category_separator" in cat:
            kw["category_separator"] = _expect(
                cat["category_separator"], (str,), "catalog.category_separator", where)
        cfg = replace(cfg, catalog_columns=replace(cfg.catalog_columns, **kw))
    if "events" in data:
        ev = _expect(data["events"], (dict,), "events", where)
        rules = {r.name.lower(): r for r in cfg.events}
        for name, spec in ev.items():
            spec = _expect(spec, (dict,), f"events.{name}", where)
            if "weight" in spec:
                raise ConfigError(
                    f"{where}: events.{name}.weight: event weights are not used (every counted "
                    "event is one interaction; counts = false leaves a type out); delete the key")
            _check_keys(f"events.{name}", spec, _EVENT_KEYS, where)
            old = rules.get(name.lower(), EventRule(name))
            kind = spec.get("value", old.value_kind)
            if kind not in VALUE_KINDS:
                raise ConfigError(
                    f"{where}: events.{name}.value is {kind!r}; expected one of "
                    f"{', '.join(VALUE_KINDS)}"
                )
            bounds = {}
            for key, prev in (("min", old.value_min), ("max", old.value_max)):
                v = spec.get(key, prev)
                bounds[key] = None if v is None else float(
                    _expect(v, (int, float), f"events.{name}.{key}", where))
            if (bounds["min"] is not None and bounds["max"] is not None
                    and bounds["min"] > bounds["max"]):
                raise ConfigError(
                    f"{where}: events.{name}: min {bounds['min']} is above max {bounds['max']}; "
                    "swap them or widen the range"
                )
            rules[name.lower()] = EventRule(
                name=name,
                counts=_expect(spec.get("counts", old.counts), (bool,), f"events.{name}.counts",
                               where),
                value_kind=kind,
                value_min=bounds["min"],
                value_max=bounds["max"],
            )
        cfg = replace(cfg, events=tuple(rules.values()))
    if "audit" in data:
        aud = _expect(data["audit"], (dict,), "audit", where)
        _check_keys("audit", aud, _AUDIT_KEYS, where)
        defaults = AuditConfig()
        kw = {}
        for k, v in aud.items():
            want = {"threads": int, "engine_memory_gib": float}.get(
                k, type(getattr(defaults, k)))
            types = (int, float) if want is float else (str,) if want is type(None) else (want,)
            kw[k] = _expect(v, types, f"audit.{k}", where)
            if want is float:
                kw[k] = float(v)
        cfg = replace(cfg, **kw)
    validate_config(cfg)
    return cfg


def validate_config(cfg: AuditConfig) -> None:
    """Check ranges of numeric settings; raise :class:`ConfigError` naming the setting."""
    if not 0.5 < cfg.confidence < 1.0:
        raise ConfigError(f"confidence must be between 0.5 and 1 (exclusive), got {cfg.confidence}")
    if cfg.history_cap < 2:
        raise ConfigError(f"history_cap must be at least 2 items, got {cfg.history_cap}")
    if cfg.min_pair_users < 1:
        raise ConfigError(f"min_pair_users must be at least 1, got {cfg.min_pair_users}")
    if not 0.5 < cfg.implausible_quantile < 1.0:
        raise ConfigError(
            f"implausible_quantile must be between 0.5 and 1, got {cfg.implausible_quantile}")
    if cfg.backtest_users < 10:
        raise ConfigError(f"backtest_users must be at least 10, got {cfg.backtest_users}")
    if cfg.backtest_sample_users < 1000:
        raise ConfigError(
            f"backtest_sample_users must be at least 1000 (fewer leaves the models too little "
            f"to learn from), got {cfg.backtest_sample_users}")
    if cfg.implausible_factor < 1.0:
        raise ConfigError(
            f"implausible_factor must be at least 1 (a multiple of the activity quantile), got "
            f"{cfg.implausible_factor}")
    if cfg.max_events_per_hour < 1:
        raise ConfigError(
            f"max_events_per_hour must be at least 1, got {cfg.max_events_per_hour}")
    if cfg.seed < 0:
        raise ConfigError(f"seed must be a non-negative integer, got {cfg.seed}")
    if cfg.engine not in ENGINES:
        raise ConfigError(
            f"engine must be one of {', '.join(ENGINES)}, got {cfg.engine!r}; leave it unset "
            "(auto), or use --engine duckdb (out of core), pandas (in memory) or spark "
            "(Parquet on a cluster)")
    if cfg.engine_memory_gib is not None and not (
            isinstance(cfg.engine_memory_gib, (int, float))
            and not isinstance(cfg.engine_memory_gib, bool) and cfg.engine_memory_gib >= 0.25):
        raise ConfigError(f"engine_memory_gib must be a number of GiB, at least 0.25, got "
                          f"{cfg.engine_memory_gib!r}; leave it unset for the automatic limit")
    if cfg.threads is not None and (isinstance(cfg.threads, bool) or cfg.threads < 1):
        raise ConfigError(f"threads must be at least 1, got {cfg.threads!r}; leave it unset "
                          "to use every core")
