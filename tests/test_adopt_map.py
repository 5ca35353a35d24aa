"""``trimtab map``: a draft key map for a config in a layout trimtab does not know. Once the draft's
commented-out lines for the right keys are confirmed, every concept the file holds resolves."""
from __future__ import annotations

import json
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


def _truth(truth: dict, concept: str):
    """(key, per, scope) of a truth entry: a key path, or a table with the key's unit."""
    t = truth.get(concept)
    if isinstance(t, dict):
        return t["key"], t.get("per"), t.get("scope")
    return t, None, None


def confirm(text: str, truth: dict) -> str:
    """Uncomment exactly the draft lines that name the right key, and the right unit where the
    truth states one (what a user does)."""
    out = []
    for line in text.splitlines():
        m = LINE.match(line)
        if m and m["hash"]:
            key, per, scope = _truth(truth, m["concept"])
            unit = dict(re.findall(r'(per|scope) = "([^"]+)"', m["key"]))
            written = re.search(r'"([^"]+)"', m["key"]).group(1)
            if key == written and (per is None or (unit.get("per"), unit.get("scope")) == (per, scope)):
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
    keys = {c: _truth(truth, c)[0] for c in truth}
    # never guesses silently: every live line is right, every other right key is offered
    assert {c: k for c, k in live.items() if keys.get(c) != k} == {}
    missing = {c: k for c, k in keys.items() if c not in live and (c, k) not in commented}
    assert missing == {}, report
    (root / "pyproject.toml").write_text(confirm(draft, truth), encoding="utf-8")
    got = resolved_keys(root, config)
    assert {c: got.get(c) for c in truth} == keys
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
    # 'heat' is a generic word for the sampling temperature: name evidence, so a live line
    assert live["rollout.temperature"] == "decoder.heat"
    # every batch count states its unit, here the only reading the file's numbers make consistent
    # (64 prompts x 8 = 512 completions; 128 prompts would be 1024, more than a step holds)
    assert '"batch.mini" = { key = "learner.update_chunk", per = "completion", scope = "global" }' in draft
    assert "completions, global is the only reading the file's numbers make consistent" in draft


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
    truth = {c: (k if isinstance(k, str) else {"key": k["key"], "per": k.get("per"), "scope": k.get("scope")})
             for c, k in table.items()}
    check_resolves(tmp_path, demo / "configs" / "legacy" / "heron-1b-2025.yaml", truth)


def test_map_prints_the_draft_without_output_and_places_known_keys(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text("rollout:\n  group_size: 8\n  heat: 0.7\nlearning_rate: 1.0e-6\n",
                                       encoding="utf-8")
    r = run_cli("map", "run.yaml", cwd=tmp_path)
    assert r.code == 0
    assert "2 concept(s) placed" in r.out  # by the alias table
    assert "[tool.trimtab.keys]" in r.out
    assert '"rollout.temperature" = "rollout.heat"' in r.out.splitlines()[-1]


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
    assert ('# "batch.rollouts" = { key = "learner.answers_per_gpu_step", per = "completion", scope = "gpu" }'
            in r.out)
    assert "the name says scope = gpu (confirm)" in r.out
    # once uncommented, the line is a valid key-map entry with its unit
    tomllib.loads(r.out[r.out.index("[tool.trimtab.keys]"):].replace("# \"batch.rollouts\"", "\"batch.rollouts\"", 1))
    # the key names answers and a per-GPU count: never the prompts per step, however the words overlap
    assert '"batch.prompts" =' not in r.out


def test_an_alias_that_matches_twice_is_offered_both_ways(tmp_path):
    """VOC-1's bad fixture: `temperature` under two sections; the draft offers both, live neither."""
    _root, config, draft, report = draft_for(tmp_path, FIXTURES / "rules" / "VOC-1" / "bad.yaml")
    live, commented = parse_draft(draft)
    assert "rollout.temperature" not in live
    assert {k for c, k in commented if c == "rollout.temperature"} == {"actor.temperature", "policy.temperature"}
    assert "rollout.temperature (sampling temperature): ambiguous: 2 candidates" in report


def test_counts_the_alias_table_placed_are_asked_their_unit_too(tmp_path):
    """BAT-9's bad fixture: the alias table places rollout_batch_size and mini_batch_size, and only
    the prompt reading of both makes the numbers whole. The draft states exactly the key-map lines
    explain gives to settle it (arithmetic.keymap_line), and with them the check has no unit note."""
    root, _config, draft, report = draft_for(tmp_path, FIXTURES / "rules" / "BAT-9" / "bad.yaml")
    explained = run_cli("explain", "bad.yaml", cwd=root).out
    settle = explained[explained.index("To settle it, add to the key map:"):].splitlines()[1:3]
    assert len(settle) == 2
    live = [line.split("  # ", 1)[0] for line in draft.splitlines() if line.startswith('"batch.')]
    for line in settle:
        assert line.strip() in live
    assert "placed by the alias table ('mini_batch_size')" in draft
    assert "prompts, global is the only reading the file's numbers make consistent" in report
    assert "BAT-9" in run_cli("check", "bad.yaml", cwd=root).out
    (root / "pyproject.toml").write_text(draft, encoding="utf-8")
    after = run_cli("check", "bad.yaml", cwd=root)
    assert "BAT-" not in after.out, after.out


def test_enumerated_values_trimtab_does_not_know_get_a_value_synonym_line(tmp_path):
    """Placed by the alias table or the native layout, a value none of the concept's own is asked
    what it means: the draft proposes values = { ... } with why, commented out until confirmed.
    Once confirmed, the settings accept the lines and the estimator is read as the one meant."""
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(
        "algorithm: grpo\nclip_ratio: 0.2\nkl:\n  kl_coef: 0.01\n  kl_estimator: low_var_kl\n  placement: in_reward\n"
        "rollout:\n  group_size: 8\n  temperature: 1.0\nsandbox:\n  kind: subprocess\n", encoding="utf-8")
    r = run_cli("map", "run.yaml", cwd=tmp_path)
    draft = r.out[r.out.index("[tool.trimtab.keys]"):]
    for line in ('# "kl.estimator" = { key = "kl.kl_estimator", values = { "low_var_kl" = "k3" } }',
                 '# "kl.placement" = { key = "kl.placement", values = { "in_reward" = "reward" } }',
                 '# "sandbox.kind" = { key = "sandbox.kind", values = { "subprocess" = "process" } }'):
        assert line + "  # " in draft, line
    assert "its words fit k3 or k2: the line says k3, confirm which" in draft
    assert "placed by the native layout ('kind')" in draft
    assert "KL-4" in run_cli("check", "run.yaml", cwd=tmp_path).out
    (tmp_path / "pyproject.toml").write_text(draft.replace("# \"", "\"").replace("\n# kl.", "\n## kl.")
                                             .replace("\n# sandbox.", "\n## sandbox."), encoding="utf-8")
    after = run_cli("check", "run.yaml", cwd=tmp_path)
    assert after.code == 0 and "KL-4" not in after.out and "SEC-" not in after.out, after.out + after.err


def test_a_json_config_is_weighed_under_json_grammar(tmp_path):
    """json.dumps writes 1e-06 for a small float; JSON's own number grammar (RFC 8259, section 6)
    reads it as a number, so the learning rate is a candidate of the right type (YAML 1.1 would read
    the same text as a string)."""
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.json").write_text(json.dumps({"learner": {"step_size": 1e-06, "passes": 2}}), encoding="utf-8")
    assert '"step_size": 1e-06' in (tmp_path / "run.json").read_text(encoding="utf-8")
    r = run_cli("map", "run.json", cwd=tmp_path)
    assert r.code == 0, r.err
    assert '"optim.lr" = "learner.step_size"  # ' in r.out and "type number; 1e-06 within" in r.out
