"""Evaluation, validation and test sections (issue #16, class 4): one function recognises them by
their section words in any layout, and their keys never compete with the training run's."""
from __future__ import annotations

from pathlib import Path

import pytest

from support import run_cli


@pytest.mark.parametrize("sections", [
    ("eval",), ("evaluation",), ("evaluation", "sampling"), ("eval_config",), ("val_kwargs",),
    ("validation", "generation"), ("test",), ("testSampling",), ("test-generation",), ("benchmark_generation",),
    ("trainer", "evalRollout"), ("data", "val"), ("holdout",), ("actor", "validation_sampling", "0"),
])
def test_evaluation_sections_are_recognised_by_their_words(sections):
    from trimtab.common.vocabulary import evaluation_section

    assert evaluation_section(sections) is not None


@pytest.mark.parametrize("sections", [
    (), ("rollout",), ("actor_rollout", "sampling"), ("reward", "test_cases"), ("rewards", "0", "tests"),
    ("code_reward", "evaluator"), ("sandbox", "test"), ("verifier", "validation"), ("unit_tests",),
    ("test_cases",), ("interval",), ("value_model",), ("retest",), ("evalue",), ("batch",),
])
def test_sections_that_are_not_evaluation_blocks(sections):
    from trimtab.common.vocabulary import evaluation_section

    # a code reward's tests and grader are part of the reward; words merely containing the
    # letters of an evaluation word (interval, value) are not evaluation words
    assert evaluation_section(sections) is None


def test_the_function_names_the_section_that_makes_the_block():
    from trimtab.common.vocabulary import evaluation_section

    assert evaluation_section(("trainer", "val_kwargs", "sampling")) == "val_kwargs"


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


EVAL_MIRROR = """\
run:
  estimator: grpo
rollout:
  group_size: 8
  temperature: 1.0
  top_p: 1.0
  max_response_length: 2048
evaluation:
  sampling:
    temperature: 0.6
    top_p: 0.95
    n: 4
  max_response_length: 4096
val_kwargs:
  temperature: 0.0
  do_sample: false
sandbox:
  kind: container
evaluator_settings:
  sandbox:
    network: true
"""


def test_evaluation_keys_neither_compete_nor_win(tmp_path):
    m = _resolved(tmp_path, EVAL_MIRROR)
    assert m.ambiguous == {}
    assert {c: m.values[c].key for c in ("rollout.group_size", "rollout.temperature", "rollout.top_p",
                                          "length.response_max")} == {
        "rollout.group_size": "rollout.group_size", "rollout.temperature": "rollout.temperature",
        "rollout.top_p": "rollout.top_p", "length.response_max": "rollout.max_response_length"}
    assert "rollout.sampling" not in m.values  # the validation block's greedy switch is not the run's
    unused = {(u.key, u.concept) for u in m.unused if u.kind == "evaluation"}
    assert {("evaluation.sampling.temperature", "rollout.temperature"),
            ("evaluation.sampling.n", "rollout.group_size"),
            ("val_kwargs.do_sample", "rollout.sampling")} <= unused
    # where generated code runs matters in any loop: an evaluation block's sandbox is read when the
    # training run states none of its own
    assert m.values["sandbox.network"].key == "evaluator_settings.sandbox.network"


def test_explain_says_why_evaluation_keys_were_not_used(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(EVAL_MIRROR, encoding="utf-8")
    res = run_cli("explain", "run.yaml", cwd=tmp_path)
    assert res.code == 0, res.err
    assert ("run.yaml:10:18  evaluation.sampling.temperature  rollout.temperature: in the evaluation "
            "section 'evaluation'") in res.out
    assert "run.yaml:16:14  val_kwargs.do_sample  rollout.sampling: in the evaluation section 'val_kwargs'" \
        in res.out
