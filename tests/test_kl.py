"""KL rules: fixtures with line-exact findings, published coefficients as check points."""
from __future__ import annotations

import pytest

from support import run_cli
from support import check_fixtures as check, fx, noisy, places


# The bad fixtures state their findings (line, column, level) in their own comments: tests/test_fixtures.py.
GOOD = [
    ("KL-1", "good.yaml"), ("KL-1", "good-accepted.yaml"), ("KL-2", "good.yaml"), ("KL-2", "good-off.yaml"),
    ("KL-3", "good.yaml"), ("KL-4", "good.yaml"), ("KL-5", "good.yaml"), ("KL-6", "good.yaml"),
]


@pytest.mark.parametrize("rule_id,name", GOOD, ids=[f"{r}-{n}" for r, n in GOOD])
def test_good_fixture_is_silent(rule_id, name):
    r = check(rule_id, name)
    assert noisy(r) == []


def test_kl_off_note_is_suppressed_by_an_acceptance(tmp_path):
    text = fx("KL-1", "bad-off.yaml").read_text()
    before = check_text(tmp_path / "a.yaml", text)
    assert places(before, "KL-1") == [("a.yaml", 12, 9, "note")]
    accepted = text.replace("  coef: 0.0\n", "  coef: 0.0  # trimtab: accept KL-1 -- recipe trains without KL\n")
    assert accepted != text
    after = check_text(tmp_path / "b.yaml", accepted)
    assert after.of("KL-1") == []
    assert [f for f in after.findings if f["rule"].startswith("ACC-")] == []
    # Without a reason the acceptance accepts nothing (and says so).
    bare = text.replace("  coef: 0.0\n", "  coef: 0.0  # trimtab: accept KL-1\n")
    r = check_text(tmp_path / "c.yaml", bare)
    assert places(r, "KL-1") == [("c.yaml", 12, 9, "note")]
    assert [f["rule"] for f in r.findings if f["rule"].startswith("ACC-")] == ["ACC-1"]


def check_text(path, text):
    from support import check_json

    path.write_text(text)
    return check_json(path)


def test_kl_off_is_not_reported_for_a_run_without_a_clipped_objective(tmp_path):
    r = check_text(tmp_path / "r.yaml", fx("KL-2", "good-off.yaml").read_text())
    assert r.of("KL-1") == []  # run.estimator = reinforce, no clip: KL-1 does not apply


def test_kl_range_is_an_option(tmp_path):
    (tmp_path / "trimtab.toml").write_text('[rules."KL-5"]\nmax = 3.0\n')
    (tmp_path / "bad.yaml").write_text(fx("KL-5", "bad.yaml").read_text())
    from support import check_json

    r = check_json(tmp_path / "bad.yaml", cwd=tmp_path)
    assert places(r, "KL-5") == [("bad.yaml", 24, 9, "warning"), ("bad.yaml", 37, 9, "error")]


def test_messages_state_the_numbers():
    r = check("KL-5", "bad.yaml")
    msgs = [f["message"] for f in r.of("KL-5")]
    assert "kl.coef = 2.0 is above the usual range 0.0001 … 0.5" in msgs[0]
    assert "kl.coef = 1.0e-6 is below" in msgs[1]
    r = check("KL-4", "bad.yaml")
    assert r.of("KL-4")[0]["suggestion"] == "write k3"


KL_IDS = ["KL-1", "KL-2", "KL-3", "KL-4", "KL-5", "KL-6"]


@pytest.mark.parametrize("rule_id", KL_IDS)
def test_rules_command_shows_the_rationale(rule_id):
    from trimtab.engine.registry import Registry

    rule = Registry().rules[rule_id]
    r = run_cli("rules", rule_id)
    assert r.code == 0
    assert rule.rationale in r.out and rule.summary in r.out  # figures: test_published_values.py


def test_rules_command_lists_the_kl_estimators():
    out = run_cli("rules", "KL-4").out
    assert "Approximating KL Divergence" in out and all(k in out for k in ("k1", "k2", "k3"))


def test_an_ambiguous_kl_coefficient_is_not_called_missing(tmp_path):
    text = fx("KL-1", "bad.yaml").read_text() + "actor:\n  kl_coef: 0.04\nreward:\n  kl_coef: 0.02\n"
    r = check_text(tmp_path / "amb.yaml", text)
    assert [f["rule"] for f in r.findings if f["rule"] in ("VOC-1", "KL-1", "KL-2", "KL-5")] == ["VOC-1"]


def test_unstated_reference_is_reported_only_when_asked(tmp_path):
    text = fx("KL-2", "strict/bad-unstated.yaml").read_text()
    # default: the trainer builds the reference from the initial weights (common practice)
    assert check_text(tmp_path / "u.yaml", text).of("KL-2") == []
    d = tmp_path / "strict"
    d.mkdir()
    (d / "trimtab.toml").write_text('[rules."KL-2"]\nreport_unstated = true\n')
    (d / "u.yaml").write_text(text)
    from support import check_json

    r = check_json(d / "u.yaml", cwd=d)
    assert places(r, "KL-2") == [("u.yaml", 12, 9, "error")]
    assert "no reference model is stated" in r.of("KL-2")[0]["message"]


# --- live settings (issue 16, class 5) ----------------------------------------------------------------
# A KL penalty can sit in the reward (arXiv:2203.02155, from memory) or be a term of the loss
# (arXiv:2402.03300): keys say which by their words, each mechanism with its own switch and coefficient.
@pytest.mark.parametrize("leaf, parent, concept", [
    ("kl_loss_coef", "", "kl.loss_coef"), ("loss_kl_weight", "", "kl.loss_coef"),
    ("use_kl_in_loss", "", "kl.loss_enabled"), ("kl_in_reward", "", "kl.reward_enabled"),
    ("kl_in_reward_coef", "", "kl.reward_coef"), ("coef", "kl_loss", "kl.loss_coef"),
    ("enabled", "kl_reward", "kl.reward_enabled"),
    ("kl_loss_type", "", None),  # not a coefficient, not a switch
    ("kl_coef", "", None),  # no place named: the generic coefficient (alias table)
    ("reward_loss_kl", "", None),  # two places: not guessed
    ("coef", "loss", None),  # no KL word
])
def test_kl_place_and_role_by_words(leaf, parent, concept):
    from trimtab.common.vocabulary import word_concept

    found = word_concept(leaf, parent)
    assert (found[0] if found else None) == concept


def test_kl_in_reward_at_zero_beside_a_kl_loss_that_is_on_is_not_kl_off():
    r = check("KL-1", "good-places.yaml")
    assert r.of("KL-1") == [] and r.of("KL-2") == [] and r.of("KL-5") == []
    r = check("KL-1", "bad-places.yaml")
    [f] = r.of("KL-1")
    assert "kl.loss_enabled = true" in f["message"] and "kl.loss_coef is not stated" in f["message"]


def test_kl_counted_twice_names_both_places():
    [f] = check("KL-3", "bad-places.yaml").of("KL-3")
    assert "kl.loss_coef = 0.04" in f["message"] and "kl.reward_coef = 0.02" in f["message"]
    assert f["related"][0]["line"] == 9


def test_reference_for_nothing_is_a_note_when_only_a_zero_coefficient_turns_kl_off():
    [f] = check("KL-2", "bad-zero.yaml").of("KL-2")
    assert f["level"] == "note" and "cannot tell" in f["message"]
    [f] = check("KL-2", "bad-unused.yaml").of("KL-2")  # switched off by a switch: still a warning
    assert f["level"] == "warning"


def test_explain_marks_dead_settings():
    out = run_cli("explain", str(fx("KL-6", "good-fixed.yaml"))).out
    first = out.split("--- document 2")[0]
    target = [line for line in first.splitlines() if line.strip().startswith("kl.target")]
    assert target and "dead: kl.controller = fixed" in target[0], first
    assert "kl.target" not in first.split("Not found:")[1]
    second = out.split("--- document 2")[1]
    assert "dead:" not in second  # an adaptive controller reads its target and horizon
    assert any(line.strip().startswith("kl.horizon") for line in second.splitlines())


def test_a_dead_value_is_kept_but_not_read(tmp_path):
    from trimtab.load.loader import load
    from trimtab.resolve.concepts import ResolveOptions, resolve

    (tmp_path / "run.yaml").write_text("kl:\n  enabled: false\n  coef: 0.5\n  estimator: k9\n")
    doc = load(str(tmp_path / "run.yaml"))
    m = resolve(doc, doc.roots[0], ResolveOptions(force_rl=True))
    assert m.values["kl.coef"].value == 0.5 and m.get("kl.coef") is None
    assert m.dead["kl.estimator"].concept == "kl.enabled"
    assert m.get("kl.enabled").value is False  # the switch itself stays live
