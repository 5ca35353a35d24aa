"""``trimtab map`` on three invented layouts (issue #18), each with the key map its author meant:

- brightwater/: two configs of one layout whose mini-batch counts prompts on each device (no key
  says so; only that reading makes the numbers whole);
- copperline-tern-1b.yaml: evaluation and validation blocks that mirror the training keys;
- marrowfield-plover-7b.yaml: null, empty and ``${...}`` values filled at launch, and a KL
  estimator written in the team's own words.

Each draft is compared line by line with its expected key map (``*.expected.toml`` beside the
fixture: the draft's key-map lines without their reasons, and the first line of each unit
question). Then the user's confirmation is made (the commented lines the layout's author would
uncomment) and a check of the configs must hold no finding of the run arithmetic or the
vocabulary: following the draft gives no false finding.
"""
from __future__ import annotations

import json
import re
import shutil
import sys
from pathlib import Path

import pytest

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from support import FIXTURES, run_cli

MAPS = FIXTURES / "adopt" / "map"
LINE = re.compile(r'^(#\s*)?"[a-z_]+\.[a-z_]+" = ')

# layout -> (what map is given, the commented lines the author confirms, what each concept must read)
LAYOUTS = {
    "brightwater": (("brightwater",), ('# "kl.coef" = "optimiser_cfg.anchor_coef"',), {
        "batch.mini": ("optimiser_cfg.update_chunk", "prompt", "gpu"),
        "batch.micro_per_gpu": ("optimiser_cfg.device_chunk", "completion", "gpu"),
        "batch.prompts": ("method.prompts_per_round", "prompt", "global"),
        "rollout.group_size": ("method.answers_per_prompt",),
        "cluster.nodes": ("cluster_cfg.hosts",),
        "cluster.gpus_per_node": ("cluster_cfg.devices_each",),
        "optim.epochs": ("optimiser_cfg.passes",),
        "optim.lr": ("optimiser_cfg.step_size",),
        "rollout.temperature": ("sampler.temp",),
        "length.prompt_max": ("sampler.prompt_tokens",),
        "length.response_max": ("sampler.answer_tokens",),
        "run.estimator": ("method.family",),
        "kl.coef": ("optimiser_cfg.anchor_coef",),
    }),
    "copperline": (("copperline-tern-1b.yaml",), (
        '# "batch.mini" = { key = "learner.update_chunk", per = "completion", scope = "global" }',), {
        "rollout.temperature": ("rollout.heat",),
        "rollout.top_p": ("rollout.nucleus",),
        "length.response_max": ("rollout.answer_tokens",),
        "length.prompt_max": ("rollout.prompt_tokens",),
        "rollout.group_size": ("scheme.draws_per_prompt",),
        "batch.prompts": ("scheme.prompts_per_round", "prompt", "global"),
        "batch.mini": ("learner.update_chunk", "completion", "global"),
        "run.estimator": ("scheme.family",),
        "optim.lr": ("learner.step_size",),
        "optim.grad_clip": ("learner.gradient_cap",),
        "kl.coef": ("learner.anchor.divergence_coef",),
        "reference.source": ("learner.anchor.frozen_weights",),
    }),
    "marrowfield": (("marrowfield-plover-7b.yaml",), (
        '# "batch.mini" = { key = "learner.samples_per_update", per = "completion", scope = "global" }',
        '# "kl.estimator" = { key = "learner.regulariser.divergence_estimator", values = { "unbiased_low_var" = "k3" } }',
        '# "schedule.total_steps" = "job.total_rounds"'), {
        "run.estimator": ("job.family",),
        "rollout.group_size": ("job.answers_per_prompt",),
        "batch.prompts": ("job.prompts_per_round", "prompt", "global"),
        "batch.mini": ("learner.samples_per_update", "completion", "global"),
        "batch.micro_per_gpu": ("learner.samples_per_device", "completion", "gpu"),
        "rollout.temperature": ("gen.temp",),
        "length.response_max": ("gen.answer_tokens",),
        "optim.lr": ("learner.step_size",),
        "kl.coef": ("learner.regulariser.divergence_coef",),
        "kl.estimator": ("learner.regulariser.divergence_estimator",),
        "cluster.gpus_per_node": ("hosting.devices_each",),
        "cluster.nodes": ("hosting.machines",),
        "model.source": ("hosting.policy_weights",),
        "schedule.total_steps": ("job.total_rounds",),
    }),
}


def key_map_lines(draft: str) -> list[str]:
    """The draft's key-map lines without their reasons, and the first line of each unit question."""
    out = []
    for line in draft.splitlines():
        if LINE.match(line):
            out.append(line.split("  # ", 1)[0])
        elif line.startswith("# unit of "):
            out.append(line)
    return out


def expected_lines(name: str) -> list[str]:
    text = (MAPS / f"{name}.expected.toml").read_text(encoding="utf-8")
    return [line for line in text.splitlines() if line and not line.startswith("## ")]


def drafted(name: str, tmp_path: Path) -> tuple[Path, str, str]:
    given, _confirm, _truth = LAYOUTS[name]
    root = tmp_path / name
    root.mkdir()
    (root / ".git").mkdir()
    for g in given:
        src = MAPS / g
        (shutil.copytree if src.is_dir() else shutil.copy)(src, root / g)
    r = run_cli("map", *given, "--output", "keys.draft.toml", cwd=root)
    assert r.code == 0, r.err
    return root, (root / "keys.draft.toml").read_text(encoding="utf-8"), r.out


def confirmed(draft: str, confirm: tuple[str, ...]) -> str:
    lines = draft.splitlines()
    for c in confirm:
        hits = [i for i, line in enumerate(lines) if line.split("  # ", 1)[0] == c]
        assert len(hits) == 1, c
        lines[hits[0]] = lines[hits[0]][2:]
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("name", sorted(LAYOUTS))
def test_the_draft_is_the_expected_key_map_line_by_line(name, tmp_path):
    _root, draft, _report = drafted(name, tmp_path)
    tomllib.loads(draft)
    assert key_map_lines(draft) == expected_lines(name)


@pytest.mark.parametrize("name", sorted(LAYOUTS))
def test_following_the_draft_reads_every_concept_right_and_gives_no_false_finding(name, tmp_path):
    root, draft, _report = drafted(name, tmp_path)
    given, confirm, truth = LAYOUTS[name]
    (root / "pyproject.toml").write_text(confirmed(draft, confirm), encoding="utf-8")
    table = tomllib.loads((root / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["trimtab"]["keys"]
    got = {c: (s,) if isinstance(s, str) else (s["key"], s["per"], s["scope"]) if "per" in s else (s["key"],)
           for c, s in table.items()}
    assert got == truth
    r = run_cli("check", *given, "--format", "json", cwd=root)
    report = json.loads(r.out)
    assert report["summary"]["runs"] == report["summary"]["files"] >= 1  # each config is read as a run
    # nothing of the arithmetic (units), the vocabulary or the estimator's value: what the draft
    # decided. Other findings (a clip range the layout leaves to the trainer) are true of the files.
    wrong = [f for f in report["findings"] if f["rule"].split("-")[0] in ("BAT", "SMP", "LEN", "VOC")
             or f["rule"] == "KL-4"]
    assert wrong == [], wrong


def test_evaluation_blocks_are_never_candidates_for_the_training_run(tmp_path):
    _root, draft, report = drafted("copperline", tmp_path)
    assert "evaluation." not in draft and "validation_sampling." not in draft
    listed = report[report.index("Keys in evaluation, validation or test sections"):]
    for key in ("evaluation.heat", "evaluation.draws_per_prompt", "validation_sampling.heat",
                "validation_sampling.answer_tokens"):
        assert key in listed


def test_values_set_at_launch_are_candidates_shown_as_set_elsewhere(tmp_path):
    _root, draft, report = drafted("marrowfield", tmp_path)
    for key, how in (("job.total_rounds", "null"), ("hosting.policy_weights", "empty"),
                     ("hosting.machines", "a reference")):
        assert f"{key}  line " in report and f"set elsewhere ({how})" in report, key
    # the machine count is set at launch: the ranks are unknown, so per GPU cannot be ruled out
    assert "# unit of learner.samples_per_update = 128 (batch.mini): the file's numbers do not settle it" in draft
    assert "completions, per GPU: unknown (needs the data-parallel ranks)" in draft


def test_an_estimator_written_in_words_gets_a_value_synonym_with_why(tmp_path):
    _root, draft, _report = drafted("marrowfield", tmp_path)
    line = next(x for x in draft.splitlines() if x.startswith('# "kl.estimator"'))
    assert 'values = { "unbiased_low_var" = "k3" }' in line
    assert "its words describe k3" in line


def test_without_the_stated_unit_the_same_key_gives_a_false_finding(tmp_path):
    """The unit the draft states is what keeps the check right: the same key mapped without it
    (read as completions, global) breaks the run's arithmetic."""
    root, draft, _report = drafted("brightwater", tmp_path)
    plain = draft.replace('"batch.mini" = { key = "optimiser_cfg.update_chunk", per = "prompt", scope = "gpu" }',
                          '"batch.mini" = "optimiser_cfg.update_chunk"')
    assert plain != draft
    (root / "pyproject.toml").write_text(plain, encoding="utf-8")
    r = run_cli("check", "brightwater", "--format", "json", cwd=root)
    assert {f["rule"] for f in json.loads(r.out)["findings"]} & {"BAT-2", "BAT-3", "BAT-7"}


def test_several_configs_make_one_draft_and_a_concept_in_some_is_still_placed(tmp_path):
    (tmp_path / ".git").mkdir()
    base = "recipe:\n  family: rloo\n  answers_per_prompt: 4\nlearner:\n  step_size: 1.0e-6\n"
    (tmp_path / "a.yaml").write_text(base + "regulariser:\n  divergence_coef: 0.02\n", encoding="utf-8")
    (tmp_path / "b.yaml").write_text(base.replace("1.0e-6", "2.0e-6"), encoding="utf-8")
    r = run_cli("map", "a.yaml", "b.yaml", cwd=tmp_path)
    assert r.code == 0, r.err
    assert r.out.startswith("2 configs of one layout (a.yaml, b.yaml)")
    draft = r.out[r.out.index("[tool.trimtab.keys]"):]
    assert '"kl.coef" = "regulariser.divergence_coef"  # ' in draft and "in 1 of 2 configs" in draft
    assert "in all 2 configs, always 4" in draft  # the same value in every config: stronger evidence
    assert "in all 2 configs (2 different values)" in draft
    assert [line.split("  # ")[0] for line in draft.splitlines() if line.startswith('"')] == [
        '"kl.coef" = "regulariser.divergence_coef"', '"optim.lr" = "learner.step_size"',
        '"rollout.group_size" = "recipe.answers_per_prompt"', '"run.estimator" = "recipe.family"']
