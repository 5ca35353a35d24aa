"""Published recipes, reconstructed as fixtures, lint with no BAT/SMP/LEN error, and trimtab's
derived arithmetic reproduces the papers' own figures (each figure's source is named in the
fixture beside it; all are from memory)."""
from __future__ import annotations

import pytest

from support import arith
from support import FIXTURES, check_json

RECIPES = FIXTURES / "recipes"


@pytest.mark.parametrize("name", ["group-relative-64x16.yaml", "group-relative-32x16.yaml",
                                  "ppo-control-and-games.yaml"])
def test_published_recipes_have_no_arithmetic_error(name):
    res = check_json(RECIPES / name)
    assert res.json["summary"]["runs"] >= 1  # read as run configs, not skipped
    assert [f for f in arith(res.findings) if f["level"] == "error"] == []
    assert arith(res.findings) == []  # nor a warning or a note


def _models(name):
    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import Settings

    runs, problems = models(str(RECIPES / name), Settings(root=RECIPES), Registry())
    assert problems == []
    return runs


def test_group_relative_batch_of_1024_at_64_per_question():
    # Shao et al. 2024, arXiv:2402.03300, section 4.2 (from memory): 64 outputs per question, a
    # "training batch size" of 1024, a single update per exploration stage (the paper's stated result).
    # The fixture writes the batch, the group and the one update; the prompts are trimtab's inference.
    (m,) = _models("group-relative-64x16.yaml")
    assert "batch.prompts" not in m.values  # not written: derived
    assert m.derived["batch.prompts"].value == 16  # trimtab's reading: 1024 completions / 64
    assert m.derived["optim.updates_per_step"].value == 1  # the paper: a single update


def test_group_relative_32_questions_by_16_outputs():
    # Guo et al. 2025, arXiv:2501.12948v2, the revised version (from memory): 32 unique questions x
    # 16 outputs, "resulting in a training batch size of 512"; a rollout of 8192 outputs "split into
    # 16 mini-batches", a single inner epoch. The stated results (512, 16) are not in the fixture.
    first, second = _models("group-relative-32x16.yaml")
    assert "batch.rollouts" not in first.values
    assert first.derived["batch.rollouts"].value == 512  # the paper's training batch size
    assert "optim.updates_per_step" not in second.values
    assert second.derived["optim.updates_per_step"].value == 16  # the paper's 16 mini-batches


def test_ppo_game_and_control_updates_per_iteration():
    # Schulman et al. 2017, arXiv:1707.06347, appendix A (from memory). Game setting, Table 5: 8 actors x
    # horizon 128, minibatch 32 x 8, 3 epochs. Continuous-control setting, Table 3: horizon 2048,
    # minibatch 64, 10 epochs. The paper states no totals: these are the arithmetic of its figures.
    games, control = _models("ppo-control-and-games.yaml")
    assert games.derived["batch.rollouts"].value == 8 * 128
    assert games.derived["optim.updates_per_step"].value == 8 * 128 // (32 * 8) * 3
    assert games.derived["batch.grad_accum"].value == 1
    assert control.derived["optim.updates_per_step"].value == 2048 // 64 * 10
