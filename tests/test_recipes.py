"""Published recipes, reconstructed as fixtures, lint with no BAT/SMP/LEN error, and trimtab's
derived arithmetic reproduces the papers' own figures (each figure's source is named in the
fixture beside it; all are from memory)."""
from __future__ import annotations

import pytest

from support import arith
from support import FIXTURES, check_json

RECIPES = FIXTURES / "recipes"


@pytest.mark.parametrize("name", ["group-relative-64x16.yaml", "group-relative-32x16.yaml",
                                  "ppo-atari-mujoco.yaml"])
def test_published_recipes_have_no_arithmetic_error(name):
    res = check_json(RECIPES / name)
    assert res.json["summary"]["runs"] >= 1  # read as run configs, not skipped
    assert [f for f in arith(res.findings) if f["level"] == "error"] == []
    assert arith(res.findings) == []  # nor a warning or a note


def _models(name):
    from trimtab.engine import Registry
    from trimtab.explain import models
    from trimtab.settings import Settings

    runs, problems = models(str(RECIPES / name), Settings(root=RECIPES), Registry())
    assert problems == []
    return runs


def test_group_relative_64_per_prompt_is_one_update_of_1024():
    # Shao et al. 2024, arXiv:2402.03300 (from memory): 64 completions per question, batch 1024,
    # a single update per exploration stage.
    (m,) = _models("group-relative-64x16.yaml")
    assert m.derived["batch.rollouts"].value == 16 * 64 == 1024
    assert m.derived["optim.updates_per_step"].value == 1


def test_group_relative_32_prompts_by_16():
    # Guo et al. 2025, arXiv:2501.12948 (from memory): 32 x 16 = 512 per update; or 8192 completions
    # in 16 mini-batches of 512.
    first, second = _models("group-relative-32x16.yaml")
    assert first.derived["batch.rollouts"].value == 512
    assert first.derived["optim.updates_per_step"].value == 1
    assert second.derived["optim.updates_per_step"].value == 16


def test_ppo_atari_and_mujoco_updates_per_iteration():
    # Schulman et al. 2017, arXiv:1707.06347 (from memory): Atari 1024 timesteps / 256 x 3 epochs;
    # MuJoCo 2048 / 64 x 10 epochs.
    atari, mujoco = _models("ppo-atari-mujoco.yaml")
    assert atari.derived["optim.updates_per_step"].value == 12
    assert atari.derived["batch.grad_accum"].value == 1
    assert mujoco.derived["optim.updates_per_step"].value == 320
