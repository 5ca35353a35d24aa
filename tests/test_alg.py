"""ALG rules: estimator, value model and GAE constants agree."""
from __future__ import annotations

import pytest
from hypothesis import given, settings, strategies as st

from support import check_json, run_cli
from support import check_fixtures as check, fx, noisy, places

# The bad fixtures state their findings (line, column, level) in their own comments: tests/test_fixtures.py.
GOOD = [("ALG-1", "good.yaml"), ("ALG-2", "good.yaml"), ("ALG-3", "good.yaml")]


@pytest.mark.parametrize("rule_id,name", GOOD, ids=[r for r, _n in GOOD])
def test_good_fixture_is_silent(rule_id, name):
    assert noisy(check(rule_id, name)) == []


def test_critic_unused_points_at_the_estimator_too():
    f = check("ALG-1", "bad.yaml").of("ALG-1")[0]
    assert [(x["line"], x["col"]) for x in f["related"]] == [(3, 14)]
    assert "run.estimator = grpo needs no value model" in f["message"]


_TEMPLATE = fx("ALG-2", "good.yaml").read_text()


@settings(max_examples=25)
@given(st.floats(min_value=-3, max_value=3, allow_nan=False))
def test_gamma_outside_unit_interval_is_an_error(tmp_path_factory, x):
    text = f"{x:.6e}"  # a point and a signed exponent: the same float under YAML 1.1 and 1.2
    written = float(text)
    p = tmp_path_factory.mktemp("g") / "g.yaml"
    p.write_text(_TEMPLATE.replace("gamma: 0.99", f"gamma: {text}"))
    r = check_json(p)
    assert r.of("YML-3") == []
    expected = [] if 0 <= written <= 1 else [("g.yaml", 19, 10, "error")]
    assert places(r, "ALG-3") == expected


@pytest.mark.parametrize("rule_id", ["ALG-1", "ALG-2", "ALG-3"])
def test_rules_command_shows_the_rationale(rule_id):
    from trimtab.engine.registry import Registry

    rule = Registry().rules[rule_id]
    out = run_cli("rules", rule_id).out
    assert rule.rationale in out  # the sources' figures are compared in test_published_values.py


# --- live settings (issue 16, class 5): a null value-model path is not a configured value model ----------
def test_a_null_critic_path_is_not_a_configured_critic():
    assert check("ALG-1", "good-null.yaml").of("ALG-1") == []
    [f] = check("ALG-2", "bad-null.yaml").of("ALG-2")
    assert f["level"] == "note" and "left null" in f["message"] and "cannot tell" in f["message"]
    # written as switched off (none), it is still the error of the bad fixture
    assert [g["level"] for g in check("ALG-2", "bad.yaml").of("ALG-2")] == ["error", "error"]


def test_a_model_section_names_its_weights_by_its_path():
    # critic.model.path is the value model's path (not the policy's), and a null one names no model
    out = run_cli("explain", str(fx("ALG-1", "good-section-null.yaml"))).out
    rows = {line.split()[0]: line for line in out.split("Concepts found:")[1].split("\n\n")[0].splitlines()
            if line.strip()}
    assert "critic.model.path" in rows["critic.source"] and "None" in rows["critic.source"]
    assert "policy.path" in rows["model.source"]
