"""Published recipes (hyperparameters from the papers named in each fixture, applied to invented
runs) are silent for the KL, CLP, ALG and OPT rules, apart from what the recipe does on purpose
and accepts with a reason."""
from __future__ import annotations

import re

import pytest

from conftest import FIXTURES, check_json
from optim_support import noisy, places

PUBLISHED = FIXTURES / "rules" / "published"
RECIPES = sorted(p.name for p in PUBLISHED.glob("*.yaml"))
# What each recipe does on purpose (and accepts in place), with the line it would be reported on.
ON_PURPOSE = {
    "reasoning-2501.12948.yaml": ("CLP-3", 17, 12),  # clip 10: arXiv:2501.12948, from memory
    "decoupled-clip-2503.14476.yaml": ("KL-1", 11, 9),  # no KL term: arXiv:2503.14476
}


def test_every_recipe_names_its_paper():
    assert len(RECIPES) == 4
    for name in RECIPES:
        arxiv = re.search(r"\d{4}\.\d{5}", name).group(0)
        assert f"arXiv:{arxiv}" in (PUBLISHED / name).read_text()


@pytest.mark.parametrize("name", RECIPES)
def test_published_recipe_is_silent(name):
    r = check_json(PUBLISHED / name)
    assert r.code == 0 and noisy(r) == []


@pytest.mark.parametrize("name", sorted(ON_PURPOSE))
def test_the_acceptance_in_a_recipe_is_needed(tmp_path, name):
    rule_id, line, col = ON_PURPOSE[name]
    text = (PUBLISHED / name).read_text()
    # Remove only the acceptance comment, keep every line where it was (so line numbers hold).
    stripped = re.sub(r"[ \t]*# trimtab: accept .*", "", text)
    assert stripped.count("\n") == text.count("\n")
    p = tmp_path / name
    p.write_text(stripped)
    assert [(n, l, c) for n, l, c, _level in places(check_json(p), rule_id)] == [(name, line, col)]
