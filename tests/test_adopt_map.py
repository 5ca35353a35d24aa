"""``trimtab map``: a draft key map for a config in a layout trimtab does not know. Once the draft's
commented-out lines for the right keys are confirmed, every concept the file holds resolves."""
from __future__ import annotations

import re
import shutil
import sys
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


from support import FIXTURES, run_cli

KESTREL = FIXTURES / "adopt" / "map" / "kestrel-layout.yaml"

# What each key of the invented layout means (the fixture's author's intent).
KESTREL_TRUTH = {
    "run.estimator": "recipe.objective",
    "rollout.group_size": "recipe.answers_per_question",
    "batch.prompts": "recipe.questions_per_step",
    "rollout.temperature": "decoder.heat",
    "rollout.top_p": "decoder.nucleus",
    "length.response_max": "decoder.answer_tokens",
    "length.prompt_max": "decoder.question_tokens",
    "optim.lr": "learner.step_size",
    "optim.epochs": "learner.passes",
    "batch.mini": "learner.update_chunk",
    "batch.micro_per_gpu": "learner.chunk_per_device",
    "optim.grad_clip": "learner.gradient_cap",
    "optim.warmup_steps": "learner.warmup_iters",
    "schedule.total_steps": "learner.total_iters",
    "kl.coef": "regulariser.divergence_coef",
    "reference.source": "regulariser.frozen_weights",
    "clip.low": "trust_region.ratio_band",
    "clip.high": "trust_region.ratio_band_upper",
    "cluster.nodes": "hardware.machines",
    "cluster.gpus_per_node": "hardware.devices_each",
}

LINE = re.compile(r'^(?P<hash>#\s*)?"(?P<concept>[^"]+)"\s*=\s*(?P<key>"[^"]+"|\{[^}]*\})')


def parse_draft(text: str):
    """(live {concept: key}, commented [(concept, key)]) of a draft block."""
    live, commented = {}, []
    for line in text.splitlines():
        m = LINE.match(line)
        if not m:
            continue
        key = re.search(r'"([^"]+)"', m["key"]).group(1) if m["key"].startswith("{") else m["key"].strip('"')
        if m["hash"]:
            commented.append((m["concept"], key))
        else:
            live[m["concept"]] = key
    return live, commented


def confirm(text: str, truth: dict[str, str]) -> str:
    """Uncomment exactly the draft lines that name the right key (what a user does)."""
    out = []
    for line in text.splitlines():
        m = LINE.match(line)
        if m and m["hash"] and truth.get(m["concept"]) == m["key"].strip('"'):
            line = line[len(m["hash"]):]
        out.append(line)
    return "\n".join(out) + "\n"


def resolved_keys(root: Path, config: Path) -> dict[str, str]:
    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import load

    settings = load(root / "pyproject.toml")
    runs, problems = models(str(config), settings, Registry())
    assert not problems
    return {c: v.key for c, v in runs[0].values.items()}


def draft_for(tmp_path: Path, source: Path) -> tuple[Path, Path, str, str]:
    (tmp_path / ".git").mkdir()
    config = tmp_path / source.name
    shutil.copy(source, config)
    r = run_cli("map", config.name, "--output", "keys.draft.toml", cwd=tmp_path)
    assert r.code == 0, r.err
    return tmp_path, config, (tmp_path / "keys.draft.toml").read_text(encoding="utf-8"), r.out


def check_resolves(tmp_path, source, truth):
    root, config, draft, report = draft_for(tmp_path, source)
    tomllib.loads(draft)  # the draft is valid TOML as written
    live, commented = parse_draft(draft)
    # never guesses silently: every live line is right, every other right key is offered
    assert {c: k for c, k in live.items() if truth.get(c) != k} == {}
    missing = {c: k for c, k in truth.items() if c not in live and (c, k) not in commented}
    assert missing == {}, report
    (root / "pyproject.toml").write_text(confirm(draft, truth), encoding="utf-8")
    got = resolved_keys(root, config)
    assert {c: got.get(c) for c in truth} == truth
    return draft, report, got


def test_map_of_an_unfamiliar_layout_resolves_every_concept_once_confirmed(tmp_path):
    draft, report, got = check_resolves(tmp_path, KESTREL, KESTREL_TRUTH)
    # before the map, nothing in this layout resolved
    assert "0 concept(s) placed" in report
    # the logging section is nobody's hyperparameter: nothing resolves to it
    assert not [c for c, k in got.items() if k.startswith("logging.")]
    live, commented = parse_draft(draft)
    # the names carry most of it: these need no confirmation
    for concept in ("optim.lr", "rollout.group_size", "batch.prompts", "run.estimator", "kl.coef"):
        assert concept in live
    # ambiguous ones are left commented out, with every candidate
    assert ("clip.low", "trust_region.ratio_band") in commented
    assert ("clip.low", "trust_region.ratio_band_upper") in commented
    assert ("rollout.temperature", "decoder.heat") in commented


def test_report_lists_candidates_with_why(tmp_path):
    _root, _config, _draft, report = draft_for(tmp_path, KESTREL)
    block = report[report.index("  rollout.top_p"):].split("\n  ", 2)
    assert "decoder.nucleus  line 9: 0.95" in block[1]
    assert "name: 'nucleus' ~ 'top_p'" in block[1]
    assert "section 'decoder' ~ rollout" in block[1]
    assert "type number" in block[1] and "within the usual 0..1" in block[1]
    assert "clip.low (ratio clip epsilon (lower, or both)): ambiguous: " in report
    assert "No candidate key in this file:" in report and "sandbox.kind" in report
    assert "logging.project (line 30)" in report  # keys nothing matched are listed too
    assert "Draft key map written to keys.draft.toml." in report


def test_map_of_the_demo_legacy_layout_agrees_with_the_demo_key_map(tmp_path):
    """The demo repository maps its old layout by hand in its pyproject.toml: the draft agrees."""
    demo = FIXTURES / "demo"
    table = tomllib.loads((demo / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["trimtab"]["keys"]
    truth = {c: (k if isinstance(k, str) else k["key"]) for c, k in table.items()}
    check_resolves(tmp_path, demo / "configs" / "legacy" / "heron-1b-2025.yaml", truth)


def test_map_prints_the_draft_without_output_and_places_known_keys(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text("rollout:\n  group_size: 8\n  heat: 0.7\nlearning_rate: 1.0e-6\n",
                                       encoding="utf-8")
    r = run_cli("map", "run.yaml", cwd=tmp_path)
    assert r.code == 0
    assert "2 concept(s) placed" in r.out  # by the alias table
    assert "[tool.trimtab.keys]" in r.out
    assert '# "rollout.temperature" = "rollout.heat"' in r.out


def test_map_of_an_unreadable_file_is_a_clear_error(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "bad.yaml").write_text("a: [1, 2\n", encoding="utf-8")
    r = run_cli("map", "bad.yaml", cwd=tmp_path)
    assert r.code == 2 and "nothing to map" in r.err and "Traceback" not in r.err


def test_a_unit_the_key_name_states_is_offered_never_live(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text("recipe:\n  objective: grpo\nlearner:\n  answers_per_gpu_step: 4\n",
                                       encoding="utf-8")
    r = run_cli("map", "run.yaml", cwd=tmp_path)
    live, commented = parse_draft(r.out)
    assert "batch.rollouts" not in live
    assert '# "batch.rollouts" = { key = "learner.answers_per_gpu_step", scope = "gpu" }' in r.out
    assert "the name says scope = gpu (confirm)" in r.out
    # once uncommented, the line is a valid key-map entry with its unit
    tomllib.loads(r.out[r.out.index("[tool.trimtab.keys]"):].replace("# \"batch.rollouts\"", "\"batch.rollouts\"", 1))


def test_an_alias_that_matches_twice_is_offered_both_ways(tmp_path):
    """VOC-1's bad fixture: `temperature` under two sections; the draft offers both, live neither."""
    _root, config, draft, report = draft_for(tmp_path, FIXTURES / "rules" / "VOC-1" / "bad.yaml")
    live, commented = parse_draft(draft)
    assert "rollout.temperature" not in live
    assert {k for c, k in commented if c == "rollout.temperature"} == {"actor.temperature", "policy.temperature"}
    assert "rollout.temperature (sampling temperature): ambiguous: 2 candidates" in report
