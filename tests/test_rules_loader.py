"""Tests for advisor.rules.loader: the shipped rules file and a user's overrides.

These check behaviour the rules-file format promises (README / module docstrings) rather
than numbers; each malformed file must give a RulesError that names the rule and the key.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import pytest

from advisor.errors import ConfigError, RulesError
from advisor.rules import loader
from advisor.rules.loader import load_rules, merge, shipped_rules_text
from advisor.rules.metrics import METRIC_DOCS
from advisor.rules.model import MISSING, OPS, SEVERITIES


if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def _user_file(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "my_rules.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_shipped_rules_load():
    """The shipped file parses into the five tiers in order, surfaces and rules."""
    rs = load_rules()
    assert [t.id for t in rs.tiers] == ["non_personalised", "segment_lists",
                                        "item_neighbourhood", "latent_factor", "deep_retrieval"]
    assert len(rs.rules) == len(tomllib.loads(shipped_rules_text())["rule"])  # stdlib parse
    assert len({r.id for r in rs.rules}) == len(rs.rules)
    assert all(r.origin == "shipped" for r in rs.rules)


def test_every_shipped_rule_is_documented_and_well_formed():
    """Every shipped rule has a rationale, a source, an existing scope and a known op."""
    rs = load_rules()
    scopes = {t.id for t in rs.tiers} | {s.id for s in rs.surfaces}
    for r in rs.rules:
        assert r.rationale.strip(), r.id
        assert r.source.strip(), r.id
        assert r.scope in scopes, r.id
        assert r.op in OPS and r.severity in SEVERITIES and r.missing in MISSING, r.id
    assert all(s.tier in {t.id for t in rs.tiers} for s in rs.surfaces)


def test_every_shipped_rule_reads_a_documented_metric():
    """Each rule's metric matches a documented metric name (M and K stand for numbers)."""
    patterns = []
    for name in METRIC_DOCS:
        pat = re.escape(name).replace(r"\*", r".+")
        pat = re.sub(r"_(M|K)(?=_|$)", r"_\\d+", pat)
        patterns.append(re.compile(pat + "$"))
    for r in load_rules().rules:
        assert any(p.match(r.metric) for p in patterns), (r.id, r.metric)


def test_every_tier_has_a_blocking_rule():
    """Every tier has at least one blocking rule (a tier without one would always be ready)."""
    rs = load_rules()
    for t in rs.tiers:
        assert any(r.severity == "blocking" for r in rs.for_scope(t.id)), t.id


def test_user_file_overriding_one_field_keeps_the_rest(tmp_path):
    """A user rule with a shipped id replaces only the fields it gives."""
    shipped = {r.id: r for r in load_rules().rules}["np.interactions"]
    path = _user_file(tmp_path, '[[rule]]\nid = "np.interactions"\nthreshold = 2000\n')
    got = {r.id: r for r in load_rules(path).rules}["np.interactions"]
    assert got.threshold == 2000.0
    assert got.origin == str(path)
    for field in ("scope", "metric", "op", "borderline", "severity", "missing", "rationale",
                  "source", "fix"):
        assert getattr(got, field) == getattr(shipped, field), field
    assert len(load_rules(path).rules) == len(load_rules().rules)


def test_user_file_can_add_a_rule_and_a_surface(tmp_path):
    """A new id adds a rule (defaults: missing = fail, no fix); a new surface can be added."""
    path = _user_file(tmp_path, """
[[surface]]
id = "weekend_picks"
name = "Weekend picks"
tier = "non_personalised"

[[rule]]
id = "my.returning"
scope = "weekend_picks"
metric = "activity.returning_share"
op = ">"
threshold = 0.2
severity = "advisory"
rationale = "Our own rule."
source = "common practice, no published source"
""")
    rs = load_rules(path)
    new = {r.id: r for r in rs.rules}["my.returning"]
    assert (new.op, new.threshold, new.borderline, new.missing, new.fix) == (
        ">", 0.2, None, "fail", "")
    assert new.origin == str(path)
    assert "weekend_picks" in {s.id for s in rs.surfaces}
    assert len(rs.rules) == len(load_rules().rules) + 1


_BAD = [
    # (case, user file text, words the message must contain)
    ("unknown key", '[[rule]]\nid = "np.interactions"\ntreshold = 10\n',
     ["np.interactions", "treshold", "threshold"]),
    ("wrong type", '[[rule]]\nid = "np.interactions"\nthreshold = "ten"\n',
     ["np.interactions", "threshold", "number", "ten"]),
    ("bad op", '[[rule]]\nid = "np.interactions"\nop = "=>"\n',
     ["np.interactions", "op", "=>"]),
    ("bad severity", '[[rule]]\nid = "np.interactions"\nseverity = "fatal"\n',
     ["np.interactions", "severity", "fatal"]),
    ("bad missing", '[[rule]]\nid = "np.interactions"\nmissing = "maybe"\n',
     ["np.interactions", "missing", "maybe"]),
    ("bad scope", '[[rule]]\nid = "np.interactions"\nscope = "nowhere"\n',
     ["np.interactions", "scope", "nowhere"]),
    ("borderline passing", '[[rule]]\nid = "np.interactions"\nborderline = 800\n',
     ["np.interactions", "borderline", "passing side"]),
    ("borderline passing, <=", '[[rule]]\nid = "x.q"\nscope = "popular"\nmetric = "m"\n'
     'op = "<="\nthreshold = 0.1\nborderline = 0.05\nseverity = "blocking"\n'
     'rationale = "r"\nsource = "s"\n', ["x.q", "borderline", "passing side"]),
    ("missing id", '[[rule]]\nthreshold = 3\n', ["rule #1", "'id'"]),
    ("missing key of a new rule", '[[rule]]\nid = "x.new"\nscope = "popular"\nmetric = "m"\n'
     'op = ">="\nthreshold = 1\nseverity = "blocking"\nrationale = "r"\n', ["x.new", "source"]),
    ("non-string rationale", '[[rule]]\nid = "np.interactions"\nrationale = 3\n',
     ["np.interactions", "rationale", "string"]),
    ("duplicate id", '[[rule]]\nid = "np.interactions"\nthreshold = 1000\n'
     '[[rule]]\nid = "np.interactions"\nthreshold = 900\n', ["np.interactions", "twice"]),
    ("unknown top-level key", 'rules = 3\n', ["rules", "top level"]),
    ("rule not an array of tables", 'rule = "x"\n', ["rule", "[[rule]]"]),
    ("invalid TOML", '[[rule]\nid = "np.interactions"\n', ["not valid TOML"]),
    ("tier in a user file", '[[tier]]\nid = "t"\nname = "T"\nsummary = "s"\n', ["[[tier]]"]),
    ("surface with unknown tier", '[[surface]]\nid = "s"\nname = "S"\ntier = "nowhere"\n',
     ["surface 's'", "tier", "nowhere"]),
]


@pytest.mark.parametrize(("case", "text", "words"), _BAD, ids=[b[0] for b in _BAD])
def test_malformed_user_rules_give_a_rules_error_naming_rule_and_key(tmp_path, case, text,
                                                                     words):
    """Each malformed user rules file raises RulesError whose message names what is wrong."""
    path = _user_file(tmp_path, text)
    with pytest.raises(RulesError) as info:
        load_rules(path)
    msg = str(info.value)
    assert str(path) in msg
    for w in words:
        assert w in msg, (case, w, msg)


def test_missing_rules_file_gives_a_rules_error(tmp_path):
    """A rules path that does not exist gives RulesError naming the path and the option."""
    path = tmp_path / "nope.toml"
    with pytest.raises(RulesError, match=re.escape(str(path)) + ".*not found.*--rules"):
        load_rules(path)


def test_rules_error_is_a_config_error_and_a_value_error(tmp_path):
    """RulesError belongs to the ConfigError family, so the CLI maps it to the same exit code."""
    with pytest.raises(ConfigError):
        load_rules(_user_file(tmp_path, "[[rule]]\n"))
    with pytest.raises(ValueError):
        load_rules(_user_file(tmp_path, "[[rule]]\n"))


def test_merge_applies_text_on_top_of_a_given_ruleset():
    """``merge`` works on text directly and leaves the base ruleset untouched."""
    base = load_rules()
    out = merge(base, '[[rule]]\nid = "np.interactions"\nseverity = "advisory"\n', "inline")
    assert {r.id: r for r in out.rules}["np.interactions"].severity == "advisory"
    assert {r.id: r for r in base.rules}["np.interactions"].severity == "blocking"
    assert out.tiers == base.tiers


def test_a_typo_in_the_shipped_file_is_caught_too(monkeypatch):
    """An unknown key in the shipped file is an error, not silently ignored."""
    text = shipped_rules_text().replace('fix = "Wait for more traffic',
                                        'fxi = "Wait for more traffic')
    assert "fxi" in text
    monkeypatch.setattr(loader, "shipped_rules_text", lambda: text)
    with pytest.raises(RulesError, match="rule 'np.interactions': unknown key 'fxi'"):
        loader.load_rules()
