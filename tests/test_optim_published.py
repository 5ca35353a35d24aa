"""Published recipes (hyperparameters from the papers named in each fixture, applied to invented
runs) are silent for the KL, CLP, ALG and OPT rules, apart from what the recipe does on purpose
and accepts with a reason."""
from __future__ import annotations

import re

import pytest

from support import FIXTURES, check_json
from support import noisy, places

PUBLISHED = FIXTURES / "rules" / "published"
RECIPES = sorted(p.name for p in PUBLISHED.glob("*.yaml"))
# What each recipe does on purpose (and accepts in place), with the line it would be reported on.
ON_PURPOSE = {
    "reasoning-2501.12948.yaml": ("CLP-3", 17, 12),  # clip 10: arXiv:2501.12948v2, from memory
    "decoupled-clip-2503.14476.yaml": ("KL-1", 11, 9),  # no KL term: arXiv:2503.14476
}


@pytest.mark.parametrize("name", RECIPES)
def test_trimtab_reads_every_sourced_figure_of_a_recipe_as_written(name):
    # Each figure line carries its source ("# arXiv:..."). trimtab must read that line into a concept, at
    # that line, with the value PyYAML (a reference reader, YAML 1.1) reads; a figure trimtab skipped or
    # misread would leave the rules silent for the wrong reason.
    import yaml

    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import Settings

    path = PUBLISHED / name
    runs, problems = models(str(path), Settings(root=PUBLISHED), Registry())
    assert problems == []
    (m,) = runs
    read = {v.location.line: v.value for v in m.values.values()}
    sourced = [(i, line) for i, line in enumerate(path.read_text().splitlines(), 1)
               if re.match(r"\s*\w+:\s*[-\d.]", line) and "# arXiv:" in line]
    assert sourced
    for i, line in sourced:
        reference = yaml.safe_load(line.split("#")[0].strip())
        assert i in read and [read[i]] == list(reference.values()), (name, i, line)


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


def test_demo_repository_audit():
    # The demo's old PPO run carries the optimisation defects; its reference recipe carries none.
    demo = FIXTURES / "demo"
    r = check_json(cwd=demo)
    mine = sorted((f["rule"], f["location"]["path"], f["location"]["line"], f["location"]["col"])
                  for f in noisy(r, ("KL", "CLP", "ALG", "OPT")) if f["level"] != "note")
    assert mine == [
        ("ALG-3", "configs/heron-3b-drift.yaml", 12, 11),  # lambda 1.3
        ("CLP-1", "configs/heron-3b-drift.yaml", 4, 14),  # PPO without a clip range
        ("KL-2", "configs/heron-3b-drift.yaml", 20, 9),  # KL 0.05, reference switched off
        ("OPT-2", "configs/heron-3b-drift.yaml", 25, 17),  # warm-up 2000 of 1500 steps
        ("OPT-4", "configs/heron-3b-ledger-bigbatch.yaml", 37, 8),  # the two share a checkpoint dir
        ("OPT-4", "configs/heron-3b-tidepool-code.yaml", 42, 8),
    ]
    assert not [f for f in r.findings if f["location"]["path"] == "configs/heron-3b-ledger-grpo.yaml"]
