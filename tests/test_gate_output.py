"""Output a reviewer reads in one glance (issue 19 items 11 and 13): explain never contradicts
itself, and the audit page puts the failing configs first and says exactly what is missing."""
from __future__ import annotations

import re

import pytest

from support import FIXTURES, RUN_CONFIG, run_cli, run_repo

DEMO = FIXTURES / "demo"
RUN = RUN_CONFIG


@pytest.fixture
def repo(tmp_path):
    return run_repo(tmp_path)


def _row(out: str, label: str) -> str:
    (line,) = [ln for ln in out.splitlines() if ln.strip().startswith(label)]
    return line


# --- 11. explain ---------------------------------------------------------------------------------
def test_explain_header_says_when_the_stage_is_not_stated(repo):
    r = run_cli("explain", "run.yaml", cwd=repo)
    assert r.code == 0
    assert "stage not stated (checked as rl)" in r.out.splitlines()[0]
    assert "run.stage" in r.out.split("Not found:")[1]
    (repo / "sft.yaml").write_text(RUN.replace("seed: 1,", "seed: 1, stage: rl,"), encoding="utf-8")
    assert "; stage rl;" in run_cli("explain", "sft.yaml", cwd=repo).out.splitlines()[0]


def test_explain_shows_a_conflicting_world_size_as_a_conflict():
    r = run_cli("explain", "configs/heron-3b-ledger-bigbatch.yaml", cwd=DEMO)
    ranks = _row(r.out, "data-parallel ranks")
    assert "not found" not in ranks
    assert "conflict: the world size is stated as 12 at configs/heron-3b-ledger-bigbatch.yaml:14, but 2 x 8 = 16" \
        in ranks
    accum = _row(r.out, "accumulation steps")
    # only what is missing is named: the mini-batch and the micro-batch were found
    assert "not found: batch.grad_accum; or train.data_parallel (conflict: the world size" in accum
    assert accum.endswith("(found: batch.mini, batch.micro_per_gpu)")


def test_explain_not_found_names_exactly_what_is_missing(repo):
    (repo / "half.yaml").write_text(RUN + "cluster:\n  nodes: 2\n", encoding="utf-8")
    r = run_cli("explain", "half.yaml", cwd=repo)
    gpus = _row(r.out, "GPUs (world size)")
    assert gpus.split("not found: ", 1)[1] == "cluster.world_size; or cluster.gpus_per_node (found: cluster.nodes)"


def test_explain_labels_a_key_at_the_concepts_own_path_native(repo):
    r = run_cli("explain", "run.yaml", cwd=repo)
    assert re.search(r"^  rollout\.group_size\s+8\s+run\.yaml:4:\d+\s+rollout\.group_size\s+\[native\]", r.out, re.M), r.out
    assert re.search(r"^  optim\.grad_clip\s+1\.0\s+.*optim\.max_grad_norm\s+\[alias\]", r.out, re.M), r.out


def test_explain_of_an_empty_file_says_so_and_of_a_folder_is_a_usage_error(repo):
    (repo / "empty.yaml").write_text("", encoding="utf-8")
    r = run_cli("explain", "empty.yaml", cwd=repo)
    assert r.code == 0 and "empty.yaml: empty: it holds no YAML document" in r.out
    (repo / "configs").mkdir()
    r = run_cli("explain", "configs", cwd=repo)
    assert r.code == 2 and r.out == ""
    assert r.err.strip() == "trimtab: error: configs: is a folder; explain takes one run config file"
    # map drafts one key map from a folder of one layout's configs (#18); an empty one has none
    r = run_cli("map", "configs", cwd=repo)
    assert r.code == 2 and r.out == ""
    assert r.err.strip() == "trimtab: error: configs: no config to map (no file the settings include)"


# --- 13. the audit page --------------------------------------------------------------------------
def _page(tmp_path, *args, cwd) -> tuple:
    page = tmp_path / "audit.html"
    r = run_cli("audit", *args, "--html", str(page), cwd=cwd)
    return r, page.read_text(encoding="utf-8")


def test_audit_puts_failing_configs_first(tmp_path):
    r, page = _page(tmp_path, "configs", cwd=DEMO)
    assert r.code == 1
    sections = re.findall(r'<section class="config[^"]*"[^>]*>\s*<h2>([^<]*(?:<wbr>[^<]*)*)</h2>', page)
    names = [s.replace("<wbr>", "") for s in sections]
    assert names, page[:2000]
    # the clean shared base and the clean run come after every config with findings at the gate
    assert names.index("configs/heron-3b-ledger-grpo.yaml") > names.index("configs/heron-3b-ledger-bigbatch.yaml")
    assert names[0] != "configs/bases/heron-3b-grpo.yaml"


def test_audit_budget_and_ranks_say_what_was_found(tmp_path, repo):
    (repo / "budget.yaml").write_text(RUN + "length:\n  prompt_max: 512\n  response_max: 1024\n", encoding="utf-8")
    r, page = _page(tmp_path, "budget.yaml", cwd=repo)
    assert "context windows that were found" not in page
    assert "no context window found (rollout.context_max, model.context_max)" in page
    r, page = _page(tmp_path, "configs/heron-3b-ledger-bigbatch.yaml", cwd=DEMO)
    m = re.search(r'data-origin-of="train.data_parallel"[^>]*>([^<]*)<', page)
    assert m and m.group(1).startswith("conflict: the world size is stated as 12"), m
    assert "data-parallel ranks D = </tspan><tspan class=\"num\" data-concept=\"train.data_parallel\">not found" not in page


def test_audit_concepts_table_breaks_at_separators_not_inside_words(tmp_path):
    r, page = _page(tmp_path, "configs/heron-3b-ledger-grpo.yaml", cwd=DEMO)
    css = re.search(r"<style>(.*?)</style>", page, re.S).group(1)
    concepts = [rule for rule in css.split("}") if ".concepts" in rule or rule.lstrip().startswith("h2")]
    # a cell wraps only where a word ends (a token longer than the column scrolls inside its box)
    assert concepts and not any("word-break" in rule for rule in concepts), concepts
    assert any("overflow-wrap:break-word" in rule for rule in concepts)
    assert '<div class="scroll"><table class="concepts">' in page


def test_check_summary_parts_add_up_to_the_files_given():
    r = run_cli("check", "--format", "json", cwd=DEMO)
    s = r.json["summary"]
    assert s["skipped"] == 1
    line = r.err.strip().splitlines()[-1]
    assert line.startswith(f"trimtab: {s['files'] - 1} checked, 1 skipped as not run configs, of {s['files']} file(s);")
