"""No silent drops (issue #16, class 3): a concept key whose value has the wrong shape is either
understood (a list of KL placements, a list of GPU ids) or reported (VOC-2) at its line, and
`trimtab explain` lists every key that looks like a concept but was not used, with the reason."""
from __future__ import annotations

from pathlib import Path

from support import run_cli


def _resolved(tmp_path: Path, text: str):
    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import load

    (tmp_path / ".git").mkdir(exist_ok=True)
    cfg = tmp_path / "run.yaml"
    cfg.write_text(text, encoding="utf-8")
    runs, problems = models(str(cfg), load(None, tmp_path), Registry())
    assert not problems
    return runs[0]


def test_a_list_of_placements_names_each_place(tmp_path):
    m = _resolved(tmp_path, "kl:\n  coef: 0.1\n  placement: [reward, loss]\n")
    assert m.values["kl.placement"].value == "both"
    m = _resolved(tmp_path, "kl:\n  coef: 0.1\n  placement:\n    - reward\n")
    assert m.values["kl.placement"].value == "reward"
    # a list with a word the enumeration does not know is not guessed at
    m = _resolved(tmp_path, "kl:\n  coef: 0.1\n  placement: [loss, advantage]\n")
    assert "kl.placement" not in m.values
    assert [(u.concept, u.kind) for u in m.unused] == [("kl.placement", "shape")]


def test_a_one_element_list_of_a_number_is_not_unwrapped(tmp_path):
    m = _resolved(tmp_path, "rollout:\n  group_size: [8]\n  temperature: 1.0\n")
    assert "rollout.group_size" not in m.values and "batch.rollouts" not in m.derived
    assert m.unusable == {"rollout.group_size"}
    (u,) = m.unused
    assert (u.key, u.shown, u.location.line, u.location.col) == ("rollout.group_size", "[8]", 2, 15)


def test_a_list_of_the_things_counted_is_their_number(tmp_path):
    m = _resolved(tmp_path, "cluster:\n  nodes: [gull-a, gull-b]\n  gpus_per_node: 8\nrollout:\n  gpus: [0, 1, 2, 3]\n")
    assert (m.values["cluster.nodes"].value, m.values["rollout.gpus"].value) == (2, 4)
    assert m.derived["cluster.world_size"].value == 16
    # a count key that is not the things' own plural noun is not counted
    m = _resolved(tmp_path, "cluster:\n  num_nodes: [2]\n")
    assert "cluster.nodes" not in m.values and m.unusable == {"cluster.nodes"}


def test_a_section_named_like_a_concept_is_a_section(tmp_path):
    m = _resolved(tmp_path, "rollout:\n  sampling:\n    temperature: 1.0\nalgorithm:\n  name: grpo\n")
    assert m.unused == [] and m.values["rollout.temperature"].value == 1.0


def test_a_right_shaped_key_wins_and_the_other_is_listed(tmp_path):
    m = _resolved(tmp_path, "actor:\n  learning_rate: [1.0e-6, 2.0e-6]\noptim:\n  lr: 1.0e-6\n")
    assert m.values["optim.lr"].key == "optim.lr" and m.unusable == set()
    assert [(u.key, u.kind) for u in m.unused] == [("actor.learning_rate", "lost")]
    assert "is read from optim.lr" in m.unused[0].reason


def test_rules_that_need_an_unusable_concept_stay_silent_and_voc2_speaks(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text("run:\n  estimator: grpo\n  seed: 1\nrollout:\n  group_size: [1]\n"
                                      "  temperature: 1.0\nkl:\n  coef: [0.1]\n", encoding="utf-8")
    res = run_cli("check", "--format", "json", "run.yaml", cwd=tmp_path)
    ids = res.ids()
    # SMP-1 would need the group size and KL-1 would say KL is never stated: neither guesses
    assert "SMP-1" not in ids and "KL-1" not in ids
    assert [(f["location"]["line"], f["level"]) for f in res.of("VOC-2")] == [(5, "error"), (8, "error")]


def test_explain_lists_keys_not_used_with_the_reason(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(
        "run:\n  estimator: grpo\nrollout:\n  group_size: [8]\n  temperature: 1.0\nactor:\n  temperature: 0.9\n"
        "policy:\n  temperature: 1.0\neval:\n  top_p: 0.9\n", encoding="utf-8")
    res = run_cli("explain", "run.yaml", cwd=tmp_path)
    assert res.code == 0, res.err
    listed = res.out.split("Look like concepts, not used (why):\n", 1)[1].split("\n\n", 1)[0].splitlines()
    assert [line.strip() for line in listed] == [
        "run.yaml:4:15  rollout.group_size = [8]  rollout.group_size: a list where a whole number is expected (VOC-2)",
        "run.yaml:5:16  rollout.temperature  rollout.temperature: ambiguous: 3 keys match as closely; name one in "
        "[tool.trimtab.keys]",
        "run.yaml:7:16  actor.temperature  rollout.temperature: ambiguous: 3 keys match as closely; name one in "
        "[tool.trimtab.keys]",
        "run.yaml:9:16  policy.temperature  rollout.temperature: ambiguous: 3 keys match as closely; name one in "
        "[tool.trimtab.keys]",
        "run.yaml:11:10  eval.top_p  rollout.top_p: in the evaluation section 'eval'",
    ]
    assert "rollout.group_size" not in res.out.split("Not found:", 1)[1]


def test_a_list_of_placements_may_use_the_key_maps_value_synonyms(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "trimtab.toml").write_text('[keys]\n"kl.placement" = { key = "penalty.where", values = '
                                           '{ in_objective = "loss", in_return = "reward" } }\n', encoding="utf-8")
    m = _resolved(tmp_path, "penalty:\n  where: [in_objective, in_return]\n")
    assert m.values["kl.placement"].value == "both" and m.unused == []
