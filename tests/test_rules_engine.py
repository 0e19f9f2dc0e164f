"""Tests for advisor.rules.engine: rule outcomes, tier and surface verdicts, go / no-go.

The engine's contract is written in its docstrings (pass / borderline band / missing
handling, the headline is the highest ready tier, surfaces take the worse of their tier and
their own rules); rulesets here are invented to hit each case.
"""

from __future__ import annotations

import json

import pytest

from advisor.rules.engine import PERSONALISED_TIER, decide, evaluate_rule
from advisor.rules.loader import load_rules
from advisor.rules.model import Rule, RuleSet, Surface, Tier


def _rule(rid="r", scope="t", metric="m", op=">=", threshold=10.0, borderline=None,
          severity="blocking", missing="fail") -> Rule:
    return Rule(rid, scope, metric, op, threshold, borderline, severity, missing,
                "why", "common practice, no published source", "", "test")


@pytest.mark.parametrize(("op", "t", "b", "value", "outcome"), [
    (">=", 10, 5, 12, "pass"),
    (">=", 10, 5, 10, "pass"),  # the threshold itself passes
    (">=", 10, 5, 9.99, "borderline"),
    (">=", 10, 5, 5, "borderline"),  # the band's edge is inside the band
    (">=", 10, 5, 4.99, "fail"),
    (">=", 10, None, 9.99, "fail"),  # no band: just below fails
    (">", 0, None, 0, "fail"),  # strict: equality does not pass
    (">", 0, None, 1e-9, "pass"),
    (">", 10, 5, 10, "borderline"),  # strict threshold, inclusive band
    ("<=", 0.1, 0.2, 0.1, "pass"),
    ("<=", 0.1, 0.2, 0.15, "borderline"),
    ("<=", 0.1, 0.2, 0.2, "borderline"),
    ("<=", 0.1, 0.2, 0.2001, "fail"),
    ("<", 0.1, None, 0.1, "fail"),
    ("<", 0.1, None, 0.0999, "pass"),
])
def test_evaluate_rule_outcomes_at_and_around_the_edges(op, t, b, value, outcome):
    """Values at, inside and outside the threshold and band give the documented outcome."""
    res = evaluate_rule(_rule(op=op, threshold=t, borderline=b), value)
    assert res.outcome == outcome
    assert res.value == pytest.approx(value)


@pytest.mark.parametrize("value", [None, float("nan")])
def test_unmeasured_metric_is_not_measured_or_skipped(value):
    """A missing or NaN value is ``not_measured``, or ``skipped`` when the rule says skip."""
    for missing in ("fail", "borderline"):
        res = evaluate_rule(_rule(missing=missing), value)
        assert (res.outcome, res.value, res.gap) == ("not_measured", None, None)
    assert evaluate_rule(_rule(missing="skip"), value).outcome == "skipped"


def test_gap_is_distance_to_passing_in_the_metric_unit():
    """The gap is how far the value must move to pass, zero once it passes."""
    assert evaluate_rule(_rule(op=">=", threshold=10), 7).gap == 3.0
    assert evaluate_rule(_rule(op="<=", threshold=0.1), 0.15).gap == pytest.approx(0.05)
    assert evaluate_rule(_rule(op=">=", threshold=10), 12).gap == 0.0


def test_boolean_metrics_compare_as_zero_and_one():
    """A yes/no signal passes a ``>= 1`` rule when true and fails when false."""
    assert evaluate_rule(_rule(threshold=1), True).outcome == "pass"
    assert evaluate_rule(_rule(threshold=1), False).outcome == "fail"


def _single_tier(*rules: Rule) -> RuleSet:
    return RuleSet((Tier("t", "T", ""), Tier(PERSONALISED_TIER, "CF", "")), (), rules)


@pytest.mark.parametrize(("rules", "metrics", "status"), [
    ([_rule(metric="a")], {"a": 20}, "ready"),
    ([_rule(metric="a", borderline=5)], {"a": 7}, "borderline"),
    ([_rule(metric="a", borderline=5)], {"a": 1}, "not_ready"),
    ([_rule(metric="a", severity="advisory")], {"a": 1}, "ready"),  # advisory never blocks
    ([_rule(metric="a", missing="fail")], {}, "not_ready"),
    ([_rule(metric="a", missing="borderline")], {}, "borderline"),
    ([_rule(metric="a", missing="skip")], {}, "ready"),
    ([_rule("r1", metric="a", borderline=5), _rule("r2", metric="b")],
     {"a": 7, "b": 1}, "not_ready"),  # the worst blocking outcome wins
    ([_rule("r1", metric="a", borderline=5), _rule("r2", metric="b", missing="borderline")],
     {"a": 20}, "borderline"),
])
def test_tier_status_follows_its_blocking_rules(rules, metrics, status):
    """Blocking failures make a tier not ready, borderlines borderline; advisories never count."""
    d = decide(_single_tier(*rules), metrics)
    v = d.tier("t")
    assert v.status == status
    assert (v.reasons == ()) == (status == "ready")
    assert len(v.results) == len(rules)


def _ladder(statuses_by_metric: dict[str, float]) -> tuple[RuleSet, dict]:
    tiers = (Tier("low", "Low", ""), Tier("mid", "Mid", ""), Tier(PERSONALISED_TIER, "CF", ""),
             Tier("top", "Top", ""))
    rules = tuple(_rule(f"{t.id}.r", t.id, f"{t.id}.m", borderline=5) for t in tiers)
    return RuleSet(tiers, (), rules), statuses_by_metric


def test_headline_is_the_highest_ready_tier_even_above_a_lower_one_not_ready():
    """A tier can be ready while a lower one is not; the headline is the highest ready."""
    rs, m = _ladder({"low.m": 1, "mid.m": 20, f"{PERSONALISED_TIER}.m": 7, "top.m": 1})
    d = decide(rs, m)
    assert [v.status for v in d.tiers] == ["not_ready", "ready", "borderline", "not_ready"]
    assert d.headline_tier == "mid"
    assert d.next_tier == PERSONALISED_TIER


def test_headline_is_none_when_no_tier_is_ready_and_next_is_none_at_the_top():
    """No ready tier: headline None, next the first tier. Top ready: next None."""
    rs, _ = _ladder({})
    d = decide(rs, {})
    assert (d.headline_tier, d.next_tier) == (None, "low")
    d = decide(rs, {"top.m": 50})
    assert (d.headline_tier, d.next_tier) == ("top", None)


def test_personalised_go_iff_item_neighbourhood_tier_is_ready():
    """Go for personalised rows exactly when the item-neighbourhood tier is ready."""
    key = f"{PERSONALISED_TIER}.m"
    for value, go in ((20, True), (7, False), (1, False)):
        rs, m = _ladder({key: value})
        d = decide(rs, m)
        assert d.personalised_go is go
        assert (d.tier(PERSONALISED_TIER).status == "ready") is go
        if go:
            assert "ready" in d.personalised_reasons[0]
        else:
            assert d.personalised_reasons == d.tier(PERSONALISED_TIER).reasons
            assert key in d.personalised_reasons[0]


def test_surfaces_inherit_their_tiers_status():
    """A surface is never better than its tier; its own rules can make it worse."""
    tiers = (Tier("np", "NP", ""), Tier(PERSONALISED_TIER, "CF", ""))
    surfaces = (Surface("s_ok", "OK row", "np"), Surface("s_own_bad", "Own bad", "np"),
                Surface("s_cf", "CF row", PERSONALISED_TIER),
                Surface("s_cf_bad", "CF bad", PERSONALISED_TIER))
    rules = (_rule("np.r", "np", "np.m"),
             _rule("cf.r", PERSONALISED_TIER, "cf.m", borderline=5),
             _rule("own.r", "s_own_bad", "own.m", borderline=5),
             _rule("cfbad.r", "s_cf_bad", "cfbad.m"))
    d = decide(RuleSet(tiers, surfaces, rules),
               {"np.m": 20, "cf.m": 7, "own.m": 6, "cfbad.m": 0})
    got = {s.id: s.status for s in d.surfaces}
    assert got == {"s_ok": "ready", "s_own_bad": "borderline", "s_cf": "borderline",
                   "s_cf_bad": "not_ready"}
    cf_row = next(s for s in d.surfaces if s.id == "s_cf")
    assert any("CF" in r and "borderline" in r for r in cf_row.reasons)


def test_each_verdict_carries_measured_values_and_thresholds():
    """Verdicts list every rule with its value, threshold, band and outcome; reasons quote them."""
    rs = _single_tier(_rule("cf.users", "t", "activity.users_ge_5", threshold=300,
                            borderline=150))
    d = decide(rs, {"activity.users_ge_5": 120})
    v = d.tier("t")
    res = v.to_dict()["rules"][0]
    assert res["value"] == 120.0 and res["threshold"] == 300.0 and res["borderline"] == 150.0
    assert res["op"] == ">=" and res["outcome"] == "fail" and res["gap"] == 180.0
    assert res["rationale"] and res["source"]
    assert v.reasons == ("cf.users: activity.users_ge_5 = 120, needs >= 300",)
    json.dumps(d.to_dict(), allow_nan=False)


def test_shipped_rules_give_go_when_every_item_neighbourhood_rule_passes():
    """With the shipped rules, metrics clearing every CF rule give a go; without the backtest
    the evidence rules are unmeasured and the tier is borderline (no go)."""
    rs = load_rules()
    cf_rules = rs.for_scope(PERSONALISED_TIER)
    passing = {}
    for r in cf_rules:
        passing[r.metric] = r.threshold + 1 if r.op in (">=", ">") else r.threshold - 1
    d = decide(rs, passing)
    assert d.personalised_go is True
    assert d.tier(PERSONALISED_TIER).status == "ready"

    no_backtest = {k: v for k, v in passing.items() if not k.startswith("evidence.")}
    d = decide(rs, no_backtest)
    assert d.tier(PERSONALISED_TIER).status == "borderline"
    assert d.personalised_go is False
    assert any("not measured" in r for r in d.personalised_reasons)


def test_shipped_rules_on_an_empty_audit_give_no_ready_tier():
    """With no metric measured at all, no tier is ready and nothing is a go."""
    d = decide(load_rules(), {})
    assert d.headline_tier is None and d.personalised_go is False
    assert all(v.status != "ready" for v in d.tiers)
    assert d.surfaces and all(s.status != "ready" for s in d.surfaces)
