"""Units by evidence (issue 16, first class): a batch count whose unit is not stated keeps every
reading its key allows, and the arithmetic rules give an error or a warning only when no reading is
consistent. The fixtures in fixtures/rules/BAT-9 state their expected verdict in an ``# expect:``
comment; the arithmetic behind each verdict is written beside it (completions = prompts x group
size, and so on: facts of the trade, as in test_one_arithmetic)."""
from __future__ import annotations

import atexit
import re
import shutil
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from support import FIXTURES, check_json, expectations, run_cli

from trimtab.resolve import arithmetic
from trimtab.gate.runner import Checker
from trimtab.engine.registry import Registry
from trimtab.report.explain import models
from trimtab.common.settings import load

BAT9 = FIXTURES / "rules" / "BAT-9"
ARITH = ("BAT", "SMP", "LEN")


def _expected(path: Path) -> list[tuple[str, str, int, int]]:
    """(rule, level, line, col) from the fixture's '# expect: RULE LINE:COL LEVEL' comments (the
    fixture harness's reading, support.expectations)."""
    return [(r, lvl, line, col) for r, _path, line, col, lvl in expectations(path)[0]]


@pytest.mark.parametrize("rel", ["bad.yaml", "good.yaml", "bad-every-reading.yaml", "settled/run.yaml"])
def test_fixtures_give_the_verdict_written_in_them(rel):
    path = BAT9 / rel
    res = check_json(path, cwd=path.parent)
    got = [(f["rule"], f["level"], f["location"]["line"], f["location"]["col"]) for f in res.findings
           if f["rule"].split("-")[0] in ARITH]
    assert got == _expected(path), [f["message"] for f in res.findings]


def test_the_note_names_the_readings_and_the_key_map_line_that_settles_them():
    (f,) = check_json(BAT9 / "bad.yaml", cwd=BAT9).of("BAT-9")
    # read as completions: 64 = 12 x 5 + 4 is not whole groups of 5; read as prompts: 64 x 5 = 320
    assert "64 = 12 x 5 + 4" in f["message"]
    assert "64 prompts = 320 completions, 32 prompts = 160 completions" in f["message"]
    assert '"batch.rollouts" = { key = "data.rollout_batch_size", per = "prompt", scope = "global" }' in f["suggestion"]
    assert '"batch.mini" = { key = "optimizer.mini_batch_size", per = "prompt", scope = "global" }' in f["suggestion"]
    # the suggested lines are exactly the settled fixture's key map, and with them the run is silent
    toml = (BAT9 / "settled" / "trimtab.toml").read_text()
    for line in re.findall(r'"batch\.[a-z]+" = \{[^}]*\}', f["suggestion"]):
        assert line in toml


def test_an_error_that_holds_under_every_reading_says_so():
    (f,) = check_json(BAT9 / "bad-every-reading.yaml", cwd=BAT9).of("BAT-2")
    assert f["level"] == "error" and "320 = 2 x 120 + 80" in f["message"]
    assert "the same under every reading of optimizer.mini_batch_size" in f["message"]


def test_explain_shows_the_readings_and_the_one_the_numbers_support():
    out = run_cli("explain", BAT9 / "bad.yaml", cwd=BAT9).out
    block = out.split("Units by evidence", 1)[1].split("\n\n", 1)[0]
    assert block.count("\n  - ") == 8  # 2 readings of the rollout batch x 4 of the mini-batch
    assert "data.rollout_batch_size in prompts, global; optimizer.mini_batch_size in prompts, global: consistent" in block
    assert "The file's own numbers support: data.rollout_batch_size in prompts, global" in block


@pytest.mark.parametrize("section, key, concept, readings", [
    ("optimizer", "mini_batch_size", "batch.mini", 4),  # prompts or completions, per GPU or global
    ("optimizer", "micro_batch_size", "batch.micro_per_gpu", 2),  # completions, per GPU or global
    ("optimizer", "micro_batch_size_per_gpu", "batch.micro_per_gpu", 1),
    ("data", "rollout_batch_size", "batch.rollouts", 2),  # prompts or completions (a step is global)
    ("data", "samples_per_step", "batch.rollouts", 1),
    ("data", "prompt_batch_size", "batch.prompts", 1),
])
def test_a_keys_own_words_narrow_its_readings(tmp_path, section, key, concept, readings):
    path = tmp_path / "run.yaml"
    path.write_text(f"algorithm: grpo\ngeneration:\n  samples_per_prompt: 4\n  temperature: 1.0\n{section}:\n"
                    f"  {key}: 64\n")
    (m,), _ = models(str(path), load(None, tmp_path), Registry())
    assert m.values[concept].key == f"{section}.{key}"
    assert len(arithmetic.admissible(m.values[concept])) == readings


@pytest.mark.parametrize("key, expected", [
    ("train.global_mini_batch_size", {("completion", "global"), ("prompt", "global")}),
    ("train.mini_batch_size_per_device", {("completion", "gpu"), ("prompt", "gpu")}),
    ("train.mini_batch_prompts", {("prompt", "global"), ("prompt", "gpu")}),
    ("train.local_mini_batch_samples", {("completion", "gpu")}),
])
def test_word_evidence_for_any_key_a_key_map_or_alias_brings(key, expected):
    from trimtab.common.findings import Location
    from trimtab.resolve.model import Value

    v = Value("batch.mini", 64, Location("run.yaml", 1, 1), via="alias", key=key, raw=64)
    assert {(u.per, u.scope) for u in arithmetic.admissible(v)} == expected
    # the usual reading (completions, global) comes first whenever the words allow it
    assert arithmetic.admissible(v)[0] == sorted(arithmetic.admissible(v),
                                                 key=lambda u: (u.per != "completion", u.scope != "global"))[0]


def test_one_update_per_step_is_no_note_when_another_reading_gives_more(tmp_path):
    # 64 prompts x 8 = 512 completions; mini_batch_size 512 is one update read as completions, but
    # 512 per GPU on 1 GPU... is the same; read as prompts (4096) it is larger than the step. So the
    # readings that hold all give 1 update: CLP-6 stays. With 8 GPUs, 64 per GPU = 512 (1 update)
    # while 64 completions globally = 8 updates: CLP-6 must not claim the clip never acts.
    base = ("algorithm: grpo\ntrainer:\n  num_nodes: 1\n  n_gpus_per_node: {gpus}\ngeneration:\n"
            "  samples_per_prompt: 8\n  temperature: 1.0\ndata:\n  prompt_batch_size: 64\noptimizer:\n"
            "  mini_batch_size: {mini}\nclip:\n  epsilon: 0.2\n")
    path = tmp_path / "one.yaml"
    path.write_text(base.format(gpus=1, mini=512))
    assert check_json(path, cwd=tmp_path).of("CLP-6")
    path.write_text(base.format(gpus=8, mini=64))
    assert not check_json(path, cwd=tmp_path).of("CLP-6")


# --- property: a run whose units are stated gives the findings it gave before the evidence ---------
_TMP = Path(tempfile.mkdtemp(prefix="trimtab-units-"))
atexit.register(shutil.rmtree, _TMP, True)


@st.composite
def stated_runs(draw):
    gpus = draw(st.sampled_from([1, 2, 4, 8]))
    group = draw(st.integers(1, 8))
    units = {c: (draw(st.sampled_from(pers)), draw(st.sampled_from(scopes)))
             for c, pers, scopes in (("batch.rollouts", ["prompt", "completion"], ["global"]),
                                     ("batch.mini", ["prompt", "completion"], ["global", "gpu"]),
                                     ("batch.micro_per_gpu", ["completion"], ["gpu", "global"]))}
    written = {"batch.rollouts": draw(st.integers(1, 256)), "batch.mini": draw(st.integers(1, 128)),
               "batch.micro_per_gpu": draw(st.integers(1, 8))}
    if units["batch.micro_per_gpu"][1] == "global":
        written["batch.micro_per_gpu"] *= gpus  # a global micro-batch of whole micro-batches per GPU
    epochs = draw(st.integers(1, 3))
    return gpus, group, units, written, epochs


def _native(gpus, group, units, written):
    out = {}
    for c, n in written.items():
        per, scope = units[c]
        n = n * (group if per == "prompt" else 1)
        if c == "batch.micro_per_gpu":
            n = n // gpus if scope == "global" else n
        else:
            n = n * (gpus if scope == "gpu" else 1)
        out[c] = n
    return out


def _findings(folder: Path, text: str):
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "run.yaml"
    path.write_text(text)
    checker = Checker(load(None, folder), Registry())
    return [(f.rule_id, str(f.level), f.message) for f in checker.check_file(str(path), "run.yaml").findings
            if f.rule_id.split("-")[0] in ARITH or f.rule_id == "CLP-6"]


@settings(max_examples=30, suppress_health_check=[HealthCheck.too_slow])
@given(stated_runs())
def test_stated_units_give_the_same_findings_as_the_native_layout(run):
    gpus, group, units, written, epochs = run
    head = (f"# invented run for a property test\nrun:\n  estimator: grpo\ncluster:\n  nodes: 1\n"
            f"  gpus_per_node: {gpus}\nrollout:\n  group_size: {group}\n  temperature: 1.0\n"
            f"optim:\n  epochs: {epochs}\nclip:\n  low: 0.2\n")
    native = _native(gpus, group, units, written)
    n = _findings(_TMP / "native", head + "batch:\n" + "".join(
        f"  {c.split('.')[1]}: {v}\n" for c, v in native.items()))
    keys = {"batch.rollouts": "data.rollout_batch_size", "batch.mini": "optimizer.mini_batch_size",
            "batch.micro_per_gpu": "optimizer.micro_batch_size"}
    folder = _TMP / "mapped"
    folder.mkdir(exist_ok=True)
    (folder / "trimtab.toml").write_text("[keys]\n" + "".join(
        f'"{c}" = {{ key = "{k}", per = "{units[c][0]}", scope = "{units[c][1]}" }}\n' for c, k in keys.items()))
    mapped = _findings(folder, head + "data:\n" + f"  rollout_batch_size: {written['batch.rollouts']}\n"
                       + "optimizer:\n" + f"  mini_batch_size: {written['batch.mini']}\n"
                       + f"  micro_batch_size: {written['batch.micro_per_gpu']}\n")
    assert mapped == n
    assert "BAT-9" not in {r for r, _l, _m in n + mapped}  # a stated unit is never in doubt


def test_suggestions_are_in_the_keys_own_unit(tmp_path):
    # a mini-batch counted in prompts (key map): 24 prompts x group size 8 = 192 completions, which do
    # not divide 64 x 8 = 512 completions per step (512 = 2 x 192 + 128); the nearest mini-batches that
    # divide the step in whole micro-batches on every rank are 128 and 256 completions: 16 and 32 prompts
    (tmp_path / "trimtab.toml").write_text('[keys]\n"batch.mini" = { key = "train.mini_prompts", per = "prompt" }\n')
    path = tmp_path / "run.yaml"
    path.write_text("# invented run\nrun:\n  estimator: grpo\ncluster:\n  nodes: 1\n  gpus_per_node: 8\n"
                    "batch:\n  prompts: 64\ntrain:\n  mini_prompts: 24\nrollout:\n  group_size: 8\n  temperature: 1.0\n")
    (f,) = check_json(path, cwd=tmp_path).of("BAT-2")
    assert "512 = 2 x 192 + 128" in f["message"]
    assert "a mini-batch of 16 prompts (128 completions) or 32 prompts (256 completions)" in f["suggestion"]


def test_a_reading_that_makes_a_fraction_is_no_way_out(tmp_path):
    # micro_batch_size 3 does not say per GPU or global. Per GPU: 256 / 8 ranks = 32 per rank, which
    # does not split into micro-batches of 3 (32 = 10 x 3 + 2). Global: 3 / 8 ranks = 0.375 per GPU,
    # no whole count. No reading is consistent, so the error stands (and says so).
    path = tmp_path / "run.yaml"
    path.write_text("# invented run\nrun:\n  estimator: grpo\ncluster:\n  nodes: 1\n  gpus_per_node: 8\n"
                    "batch:\n  prompts: 16\n  mini: 256\ntrainer:\n  micro_batch_size: 3\n"
                    "rollout:\n  group_size: 16\n  temperature: 1.0\n")
    res = check_json(path, cwd=tmp_path)
    (f,) = res.of("BAT-3")
    assert f["level"] == "error" and "32 = 10 x 3 + 2" in f["message"]
    assert "the same under every reading of trainer.micro_batch_size" in f["message"]
    assert not res.of("BAT-9")
