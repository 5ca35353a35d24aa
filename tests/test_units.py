"""Unit conversions: the same run described through key maps that count the mini-batch (and the
other batch quantities) per prompt or per completion, per GPU or globally, gives the same
findings as the run written in trimtab's own units."""
from __future__ import annotations

import pytest

from support import check_json

RUN = """\
# Lowfield Labs: wren-7b on tidepool arithmetic (invented scenario).
run:
  estimator: grpo
cluster:
  nodes: 1
  gpus_per_node: 8
batch:
  prompts: {prompts}
  mini: {mini}
  micro_per_gpu: {micro}
rollout:
  group_size: 16
  temperature: 1.0
"""

# Two runs, each written in trimtab's units: 64 prompts x 16 = 1024 completions per step over 8
# data-parallel ranks. The first has a mini-batch of 384 (1024 = 2 x 384 + 256: BAT-2), the second
# a micro-batch of 6 that does not divide the 32 completions per rank of a 256 mini-batch (BAT-3).
RUNS = {"mini": dict(prompts=64, mini=384, micro=6), "micro": dict(prompts=64, mini=256, micro=6)}

# (key-map entries, how to write each value in that unit)
VARIANTS = {
    "mini per prompt": ({"batch.mini": ("prompt", "")}, {"mini": lambda v: v // 16}),
    "mini per GPU": ({"batch.mini": ("", "gpu")}, {"mini": lambda v: v // 8}),
    "mini per prompt per GPU": ({"batch.mini": ("prompt", "gpu")}, {"mini": lambda v: v // 16 // 8}),
    "micro global": ({"batch.micro_per_gpu": ("", "global")}, {"micro": lambda v: v * 8}),
    "prompts counted in completions": ({"batch.prompts": ("completion", "")}, {"prompts": lambda v: v * 16}),
    "prompts per GPU": ({"batch.prompts": ("", "gpu")}, {"prompts": lambda v: v // 8}),
    "everything at once": ({"batch.mini": ("prompt", "gpu"), "batch.micro_per_gpu": ("", "global"),
                            "batch.prompts": ("", "gpu")},
                           {"mini": lambda v: v // 128, "micro": lambda v: v * 8, "prompts": lambda v: v // 8}),
}


def _shape(findings):
    return [(f["rule"], f["level"], f["location"]["line"], f["location"]["col"], f["message"],
             [(r["line"], r["col"]) for r in f["related"]]) for f in findings]


def _write(folder, values, keys=None):
    folder.mkdir()
    if keys:
        rows = []
        for concept, (per, scope) in keys.items():
            extra = "".join(f', {k} = "{v}"' for k, v in (("per", per), ("scope", scope)) if v)
            rows.append(f'"{concept}" = {{ key = "{concept}"{extra} }}')
        (folder / "trimtab.toml").write_text("[keys]\n" + "\n".join(rows) + "\n")
    (folder / "run.yaml").write_text(RUN.format(**values))
    return folder / "run.yaml"


@pytest.mark.parametrize("run", sorted(RUNS))
@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_key_map_units_give_the_same_findings(tmp_path, run, variant):
    values = RUNS[run]
    native = check_json(_write(tmp_path / "native", values)).findings
    assert {f["rule"] for f in native if f["rule"].split("-")[0] in ("BAT", "SMP", "LEN")} == {
        "BAT-2" if run == "mini" else "BAT-3"}
    keys, convert = VARIANTS[variant]
    written = {k: convert[k](v) if k in convert else v for k, v in values.items()}
    assert written != values
    mapped = check_json(_write(tmp_path / "mapped", written, keys)).findings
    assert _shape(mapped) == _shape(native)


def test_conversion_is_shown_in_explain(tmp_path):
    from support import run_cli

    path = _write(tmp_path / "m", dict(prompts=64, mini=3, micro=6), {"batch.mini": ("prompt", "gpu")})
    out = run_cli("explain", path, cwd=path.parent).out
    assert "3 as written (per prompt, gpu) x group size 16 x 8 data-parallel ranks" in out
    assert "mini-batch (completions per update)" in out and " 384 " in out


def test_no_conversion_with_a_disputed_rank_count(tmp_path):
    # A stated world of 12 on 1 node x 8 GPUs: the ranks are in dispute, so a mini-batch counted per
    # GPU is not converted with either count; BAT-4 reports the dispute, BAT-8 notes the skipped value.
    text = RUN.format(prompts=64, mini=48, micro=6).replace("gpus_per_node: 8", "gpus_per_node: 8\n  world_size: 12")
    folder = tmp_path / "w"
    folder.mkdir()
    (folder / "trimtab.toml").write_text('[keys]\n"batch.mini" = { key = "batch.mini", scope = "gpu" }\n')
    (folder / "run.yaml").write_text(text)
    found = [(f["rule"], f["level"], f["location"]["line"]) for f in check_json(folder / "run.yaml").findings
             if f["rule"].startswith("BAT-")]
    assert found == [("BAT-4", "error", 7), ("BAT-8", "note", 10)]
