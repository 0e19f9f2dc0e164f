"""Tests for advisor.config: reading a TOML config file, rejecting typos and bad values.

The config file is parsed with the stdlib TOML reader; these tests check the promised
behaviour (unknown keys are errors naming the key, types are checked, ranges validated).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

from advisor.config import (
    DEFAULT_EVENT_RULES,
    AuditConfig,
    EventRule,
    apply_config,
    load_config,
    validate_config,
)
from advisor.errors import ConfigError


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "advisor.toml"
    p.write_text(text, encoding="utf-8")
    return p


FULL = """
[columns]
user = "member_id"
item = "sku"
ts = "when"

[catalog]
category_separator = ";"

[catalog.columns]
item = "sku"
categories = "genres"

[events.rating]
value = "rating"
min = 1
max = 5

[events.Stream]
counts = true

[events.impression]
counts = false

[audit]
as_of = "2024-06-30"
history_cap = 50
confidence = 0.9
implausible_factor = 4
backtest = false
seed = 7
"""


def test_load_config_reads_columns_events_and_audit(tmp_path):
    """A full config file sets column names, event treatment and audit settings."""
    cfg = load_config(_write(tmp_path, FULL))
    assert cfg.columns.given() == {"user": "member_id", "item": "sku", "ts": "when"}
    assert cfg.catalog_columns.given() == {"item": "sku", "categories": "genres"}
    assert cfg.catalog_columns.category_separator == ";"
    assert cfg.event_rule("RATING") == EventRule("rating", True, "rating", 1.0, 5.0)
    assert cfg.event_rule("stream") == EventRule("Stream", True, "none", None, None)
    assert cfg.event_rule("impression").counts is False
    assert (cfg.as_of, cfg.history_cap, cfg.confidence, cfg.backtest, cfg.seed) == (
        "2024-06-30", 50, 0.9, False, 7)
    assert cfg.implausible_factor == 4.0 and isinstance(cfg.implausible_factor, float)
    # Untouched settings keep their defaults.
    assert cfg.min_pair_users == AuditConfig().min_pair_users
    assert cfg.event_rule("purchase") == next(r for r in DEFAULT_EVENT_RULES
                                              if r.name == "purchase")


def test_no_config_file_gives_the_base_config():
    """Without a path the base (or default) config comes back unchanged."""
    assert load_config(None) == AuditConfig()
    base = AuditConfig(seed=3)
    assert load_config(None, base) is base


def test_config_file_applies_on_top_of_a_given_base(tmp_path):
    """Settings from the file override the base; the rest of the base is kept."""
    cfg = load_config(_write(tmp_path, "[audit]\nseed = 11\n"), AuditConfig(history_cap=77))
    assert (cfg.seed, cfg.history_cap) == (11, 77)


@pytest.mark.parametrize(("text", "key", "where"), [
    ("[audit]\nhistroy_cap = 10\n", "histroy_cap", "[audit]"),
    ("[colums]\nuser = 'u'\n", "colums", "[top level]"),
    ("[columns]\nusr = 'u'\n", "usr", "[columns]"),
    ("[catalog.columns]\ngenre = 'g'\n", "genre", "[catalog.columns]"),
    ("[catalog]\nseparator = ';'\n", "separator", "[catalog]"),
    ("[events.play]\ncount = true\n", "count", "[events.play]"),
])
def test_unknown_key_is_an_error_naming_the_key(tmp_path, text, key, where):
    """A misspelled key is never ignored: the error names it, its section and the file."""
    path = _write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    msg = str(info.value)
    assert f"'{key}'" in msg and where in msg and str(path) in msg
    assert "expected one of" in msg


@pytest.mark.parametrize(("text", "key"), [
    ("[audit]\nhistory_cap = 'ten'\n", "audit.history_cap"),
    ("[audit]\nhistory_cap = 10.5\n", "audit.history_cap"),
    ("[audit]\nhistory_cap = true\n", "audit.history_cap"),
    ("[audit]\nconfidence = '95%'\n", "audit.confidence"),
    ("[audit]\nbacktest = 1\n", "audit.backtest"),
    ("[audit]\nas_of = 2024\n", "audit.as_of"),
    ("[columns]\nuser = 3\n", "columns.user"),
    ("columns = 'user'\n", "columns"),
    ("[events.play]\ncounts = 'yes'\n", "events.play.counts"),
    ("[events.rating]\nmin = 'zero'\n", "events.rating.min"),
    ("[events.rating]\nmax = true\n", "events.rating.max"),
    ("[events]\nplay = 1\n", "events.play"),
])
def test_wrong_type_is_an_error_naming_the_key(tmp_path, text, key):
    """A value of the wrong type gives a ConfigError naming the key and what arrived."""
    with pytest.raises(ConfigError, match=f"'{key}' must be"):
        load_config(_write(tmp_path, text))


def test_bad_value_kind_is_an_error_listing_the_kinds(tmp_path):
    """An event's value kind must be one of rating, progress, price, none."""
    with pytest.raises(ConfigError, match="events.play.value is 'score'.*rating, progress"):
        load_config(_write(tmp_path, "[events.play]\nvalue = 'score'\n"))


def test_event_range_with_min_above_max_is_an_error(tmp_path):
    """An event's plausible range must not be empty."""
    with pytest.raises(ConfigError, match="events.rating.*min 5.0 is above max 1.0"):
        load_config(_write(tmp_path, "[events.rating]\nmin = 5\nmax = 1\n"))


def test_missing_config_file_is_an_error_naming_the_path(tmp_path):
    """A config path that does not exist gives a ConfigError naming it and the option."""
    path = tmp_path / "absent.toml"
    with pytest.raises(ConfigError, match="absent.toml not found.*--config"):
        load_config(path)


def test_invalid_toml_is_an_error_naming_the_file(tmp_path):
    """A syntax error gives a ConfigError naming the file, not a raw TOML exception."""
    path = _write(tmp_path, "[audit\nseed = 1\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(path)


def test_non_utf8_file_is_an_error(tmp_path):
    """A file that is not UTF-8 text gives a ConfigError asking for UTF-8."""
    path = tmp_path / "latin.toml"
    path.write_bytes("[columns]\nuser = 'n\xfamero'\n".encode("latin-1"))
    with pytest.raises(ConfigError, match="UTF-8"):
        load_config(path)


@pytest.mark.parametrize(("change", "name"), [
    ({"confidence": 0.5}, "confidence"),
    ({"confidence": 1.0}, "confidence"),
    ({"confidence": 95}, "confidence"),
    ({"history_cap": 1}, "history_cap"),
    ({"min_pair_users": 0}, "min_pair_users"),
    ({"implausible_quantile": 0.5}, "implausible_quantile"),
    ({"implausible_quantile": 1.0}, "implausible_quantile"),
    ({"backtest_users": 9}, "backtest_users"),
    ({"implausible_factor": 0.5}, "implausible_factor"),
    ({"max_events_per_hour": 0}, "max_events_per_hour"),
    ({"seed": -1}, "seed"),
])
def test_validate_config_rejects_out_of_range_settings(change, name):
    """Each numeric setting outside its range gives a ConfigError naming the setting."""
    with pytest.raises(ConfigError, match=name):
        validate_config(replace(AuditConfig(), **change))


def test_validate_config_accepts_defaults_and_range_edges():
    """Defaults and the inclusive edges of each range pass."""
    validate_config(AuditConfig())
    validate_config(AuditConfig(confidence=0.51, history_cap=2, min_pair_users=1,
                                implausible_quantile=0.51, backtest_users=10,
                                implausible_factor=1.0, max_events_per_hour=1, seed=0))


def test_out_of_range_setting_in_a_file_is_rejected(tmp_path):
    """Range checks run on settings read from a file too."""
    with pytest.raises(ConfigError, match="confidence"):
        load_config(_write(tmp_path, "[audit]\nconfidence = 1.5\n"))


def test_apply_config_names_the_source_given():
    """``apply_config`` on a parsed mapping names the source passed in its errors."""
    with pytest.raises(ConfigError, match="from-cli: unknown key 'x'"):
        apply_config({"x": 1}, AuditConfig(), "from-cli")


def test_event_weight_key_is_refused_with_what_to_do(tmp_path):
    """``weight`` under an event type is an error saying weights are not used: delete it."""
    with pytest.raises(ConfigError, match=r"events\.purchase\.weight.*delete the key"):
        load_config(_write(tmp_path, "[events.purchase]\nweight = 3.0\n"))
