"""LEN: token budgets against the context windows."""
from __future__ import annotations

import pytest

from support import expect_clean, expect_one


@pytest.mark.parametrize("rel", ["LEN-1/good.yaml", "LEN-2/good.yaml", "LEN-3/good.yaml"])
def test_good_fixtures_are_silent(rel):
    expect_clean(rel)


def test_len1_zero_budget():
    expect_one("LEN-1/bad.yaml", "LEN-1", "error", 9, 17, "length.response_max = 0")


def test_len2_prompt_plus_response_exceeds_the_engine_context():
    f = expect_one("LEN-2/bad.yaml", "LEN-2", "error", 12, 17, "prompt 1024 + response 4096 = 5120",
                   "context of 4096 by 1024", suggestion="at most 3072, or a context of 5120")
    assert [(r["line"], r["col"]) for r in f["related"]] == [(11, 15), (7, 16)]


def test_len2_response_fills_the_window():
    expect_one("LEN-2/bad-no-room.yaml", "LEN-2", "error", 10, 17, "8192 tokens fills the model's context of 8192")


def test_len2_prompt_fills_the_window():
    expect_one("LEN-2/bad-prompt.yaml", "LEN-2", "error", 9, 15, "prompt budget of 4096 tokens fills",
               suggestion="at most 3072")


def test_len3_engine_context_exceeds_the_model():
    expect_one("LEN-3/bad.yaml", "LEN-3", "error", 7, 16, "32768 tokens exceeds the model's 8192 by 24576")


@pytest.mark.parametrize("stated", [{"response_max": "0"}, {"response_max": "2048", "context_max": "0"},
                                    {"prompt_max": "-1", "response_max": "0"}])
def test_len1_checks_every_budget_whatever_is_missing_before_it(tmp_path, stated):
    # A token count is a positive whole number; each stated budget is checked even when an earlier one
    # (here the prompt budget) is not stated.
    from support import check_json

    body = "\n".join(f"  {k}: {v}" for k, v in stated.items() if k != "context_max")
    text = f"run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 1.0\nlength:\n{body}\n"
    if "context_max" in stated:
        text += f"model:\n  context_max: {stated['context_max']}\n"
    (tmp_path / "run.yaml").write_text(text)
    bad = sorted(k for k, v in stated.items() if int(v) <= 0)
    found = check_json(tmp_path / "run.yaml").of("LEN-1")
    assert sorted(f["message"].split(" = ")[0].split(".")[1] for f in found) == bad
