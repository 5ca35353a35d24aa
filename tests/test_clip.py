"""CLP rules: ratio clipping and gradient-norm clipping."""
from __future__ import annotations

import re

import pytest

from support import check_json, run_cli
from support import check_fixtures as check, fx, noisy, places


# The bad fixtures state their findings (line, column, level) in their own comments: tests/test_fixtures.py.
GOOD = [
    ("CLP-1", "good.yaml"), ("CLP-2", "good.yaml"), ("CLP-3", "good.yaml"), ("CLP-3", "good-accepted.yaml"),
    ("CLP-4", "good.yaml"), ("CLP-5", "good.yaml"), ("CLP-6", "good.yaml"), ("CLP-6", "good-epochs.yaml"),
    ("CLP-7", "good.yaml"), ("CLP-8", "good.yaml"),
]


@pytest.mark.parametrize("rule_id,name", GOOD, ids=[f"{r}-{n}" for r, n in GOOD])
def test_good_fixture_is_silent(rule_id, name):
    assert noisy(check(rule_id, name)) == []


def test_clip_never_acts_states_the_arithmetic():
    r = check("CLP-6", "bad.yaml")
    first, second = (f["message"] for f in r.of("CLP-6"))
    prompts, group, mini = 64, 8, 512  # the fixture's values
    assert first.startswith(f"{prompts * group} completions per step ({prompts} prompts x group size {group}) "
                            f"/ {mini} per mini-batch x 1 epoch (optim.epochs not stated) = 1 optimiser update")
    assert second.startswith("256 completions per step / 256 per mini-batch x 1 epoch = 1 optimiser update")
    related = [(x["line"], x["col"]) for x in r.of("CLP-6")[0]["related"]]
    assert related == [(11, 12), (8, 15)]  # batch.prompts, rollout.group_size


def test_lower_clip_of_one_is_acceptable_with_a_reason(tmp_path):
    text = fx("CLP-3", "good-accepted.yaml").read_text()
    unaccepted = "\n".join(l for l in text.splitlines() if "trimtab: accept" not in l) + "\n"
    p = tmp_path / "u.yaml"
    p.write_text(unaccepted)
    assert places(check_json(p), "CLP-3") == [("u.yaml", 13, 8, "warning")]


def test_clip_rules_are_silent_without_their_inputs(tmp_path):
    # A REINFORCE run with no clip anywhere: no clipped objective, nothing to report.
    p = tmp_path / "r.yaml"
    text = fx("CLP-1", "good.yaml").read_text().replace("grpo", "reinforce")
    plain = re.sub(r"clip:\n  epsilon: 0\.2.*\n", "", text)
    assert plain != text and "\nclip:" not in plain  # the clip section is gone
    p.write_text(plain)
    r = check_json(p)
    assert [f for f in r.findings if f["rule"].startswith("CLP-")] == []
    # ... but an upper or a dual clip written without the lower epsilon is a clipped objective
    for extra in ("clip:\n  high: 0.28\n", "clip:\n  dual: 3.0\n"):
        p.write_text(plain + extra)
        assert [f["rule"] for f in check_json(p).findings if f["rule"] == "CLP-1"] == ["CLP-1"], extra


@pytest.mark.parametrize("rule_id", [f"CLP-{n}" for n in range(1, 9)])
def test_rules_command_shows_the_rationale(rule_id):
    from trimtab.engine.registry import Registry

    rule = Registry().rules[rule_id]
    out = run_cli("rules", rule_id).out
    assert rule.rationale in out  # the sources' figures are compared in test_published_values.py


def test_clip_never_acts_on_a_stated_update_count(tmp_path):
    p = tmp_path / "u.yaml"
    p.write_text(fx("CLP-1", "good.yaml").read_text().replace("optim:\n", "optim:\n  updates_per_step: 1\n"))
    r = check_json(p)
    assert places(r, "CLP-6") == [("u.yaml", 18, 21, "note")]
    assert r.of("CLP-6")[0]["message"].startswith("optim.updates_per_step = 1: one optimiser update per rollout batch")
