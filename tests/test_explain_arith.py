"""`trimtab explain` prints the run arithmetic as a table whose rows say where their inputs came
from (file:line) or how they were derived."""
from __future__ import annotations

from support import FIXTURES, run_cli


def _table(out: str) -> dict[str, tuple[str, str]]:
    lines = out.split("Run arithmetic:\n", 1)[1].split("\n\n", 1)[0].splitlines()
    rows = {}
    for line in lines:
        parts = line.strip().split("  ")
        parts = [p.strip() for p in parts if p.strip()]
        rows[parts[0]] = (parts[1], "  ".join(parts[2:]))
    return rows


def test_explain_shows_the_table_on_a_recipe():
    path = FIXTURES / "recipes" / "group-relative-64x16.yaml"
    res = run_cli("explain", path, cwd=path.parent)
    assert res.code == 0
    rows = _table(res.out)
    shown = "fixtures/recipes/group-relative-64x16.yaml"  # relative to the repository root
    assert rows["completions per step"][0] == "1024"
    assert rows["completions per step"][1].startswith("stated at " + shown + ":19")
    # the prompts are trimtab's inference from the paper's two figures (arXiv:2402.03300, section 4.2)
    assert rows["prompts per step"] == ("16", f"= 1024 / 64; from batch.rollouts {shown}:19, "
                                              f"rollout.group_size {shown}:27")
    assert rows["updates per step"][0] == "1"
    assert rows["data-parallel ranks"][0] == "16"
    assert rows["accumulation steps"] == ("16", f"= 1024 / (4 x 16); from batch.mini {shown}:20, "
                                                f"batch.micro_per_gpu {shown}:21, cluster.nodes {shown}:16, "
                                                f"cluster.gpus_per_node {shown}:17")
    # 1024 completions x 1024 tokens at the budget
    assert rows["tokens generated per step (at the budget)"][0] == "1,048,576"
    assert rows["tokens generated over the run (at the budget)"] == ("?", "not found: schedule.total_steps")


def test_explain_tokens_over_the_run_and_remainders(tmp_path):
    (tmp_path / "run.yaml").write_text(
        "# invented run\nrun:\n  estimator: grpo\ncluster:\n  nodes: 1\n  gpus_per_node: 8\n"
        "batch:\n  prompts: 64\n  mini: 96\nrollout:\n  group_size: 16\n  temperature: 1.0\n"
        "length:\n  response_max: 2048\nschedule:\n  total_steps: 300\n")
    rows = _table(run_cli("explain", tmp_path / "run.yaml", cwd=tmp_path).out)
    assert rows["mini-batches per step"] == ("-", "does not divide: 1024 = 10 x 96 + 64")
    assert rows["updates per step"] == ("-", "not whole: 1024 / 96 x 1 = 10.67")
    assert rows["tokens generated per step (at the budget)"][0] == f"{1024 * 2048:,}"
    assert rows["tokens generated over the run (at the budget)"][0] == f"{1024 * 2048 * 300:,}"
    assert "schedule.total_steps run.yaml:16" in rows["tokens generated over the run (at the budget)"][1]
