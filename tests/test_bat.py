"""BAT: batch and topology arithmetic, on the good and bad fixture of every rule."""
from __future__ import annotations

import pytest

from support import expect_clean, expect_one

GOOD = ["BAT-1/good.yaml", "BAT-2/good.yaml", "BAT-3/good.yaml", "BAT-3/good-alias.yaml", "BAT-4/good.yaml",
        "BAT-5/good.yaml", "BAT-6/good.yaml", "BAT-7/good.yaml", "BAT-8/good.yaml", "BAT-8/convert/good.yaml"]


@pytest.mark.parametrize("rel", GOOD)
def test_good_fixtures_are_silent(rel):
    expect_clean(rel)


def test_bat1_product_mismatch_points_at_the_stated_product():
    f = expect_one("BAT-1/bad.yaml", "BAT-1", "error", 9, 13, "1000 completions per step",
                   "64 prompts per step x 16 completions per prompt = 1024",
                   suggestion="completions per step of 1024")
    assert [(r["line"], r["col"]) for r in f["related"]] == [(8, 12), (13, 15)]


def test_bat2_partial_mini_batch_states_the_remainder_and_nearest_mini_batches():
    f = expect_one("BAT-2/bad.yaml", "BAT-2", "error", 9, 9, "1024 = 10 x 96 + 64",
                   "1024 / 96 x 2 = 21.33", suggestion="a mini-batch of 64 or 128")
    assert "960 or 1056 completions per step" in f["suggestion"]
    assert {r["line"] for r in f["related"]} == {8, 14, 12}  # prompts, group size, epochs


def test_bat2_stated_updates_per_step_disagree():
    expect_one("BAT-2/bad-updates.yaml", "BAT-2", "error", 13, 21, "8 updates per step are stated",
               "1024 / 128 x 2 epochs = 16", suggestion="use 16 updates per step")


def test_bat3_micro_batch_remainder_suggests_mini_and_micro():
    f = expect_one("BAT-3/bad.yaml", "BAT-3", "error", 10, 18, "256 completions over 16 data-parallel ranks",
                   "16 = 2 x 6 + 4", suggestion="use a mini-batch of 192 or 288, or a micro-batch of 4")
    assert (9, 9) in [(r["line"], r["col"]) for r in f["related"]]


def test_bat3_stated_accumulation_disagrees_with_the_implied_one():
    expect_one("BAT-3/bad-accum.yaml", "BAT-3", "error", 11, 15, "stated as 2",
               "256 = 4 per GPU x 16 ranks x 4",
               suggestion="use 4 accumulation steps, or a mini-batch of 128")  # 4 x 16 x 2 as stated


def test_bat3_in_generic_alias_layout():
    expect_one("BAT-3/bad-alias.yaml", "BAT-3", "error", 14, 32, "stated as 2",
               "128 = 4 per GPU x 8 ranks x 4 accumulation steps")


def test_bat3_mini_batch_over_ranks():
    expect_one("BAT-3/bad-ranks.yaml", "BAT-3", "error", 9, 9, "24 completions does not split over 16",
               "24 = 1 x 16 + 8", suggestion="a mini-batch of 16 or 32")


def test_bat4_world_size():
    expect_one("BAT-4/bad.yaml", "BAT-4", "error", 7, 15, "stated as 12", "2 nodes x 8 GPUs per node = 16",
               suggestion="a world size of 16")


def test_bat5_model_parallel_points_at_the_degree_that_does_not_divide():
    expect_one("BAT-5/bad.yaml", "BAT-5", "error", 8, 20, "16 GPUs does not divide by tensor 3 x pipeline 2 = 6",
               "16 = 2 x 6 + 4", suggestion="a tensor-parallel degree of 2 or 4")


def test_bat5_no_data_parallel_rank():
    expect_one("BAT-5/bad-no-rank.yaml", "BAT-5", "error", 9, 22, "= 32 needs 32 GPUs per model replica",
               "world has 16 GPUs: no data-parallel rank", suggestion="a pipeline-parallel degree of 4")


def test_bat5_stated_data_parallel():
    expect_one("BAT-5/bad-stated.yaml", "BAT-5", "error", 10, 18, "8 data-parallel ranks are stated",
               "16 GPUs / 4 per model replica = 4")


def test_bat6_rollout_tensor_parallel():
    expect_one("BAT-6/bad.yaml", "BAT-6", "error", 13, 20, "degree 3 does not divide the 16 GPUs", "16 = 5 x 3 + 1",
               suggestion="2 or 4")
    expect_one("BAT-6/bad-gpus.yaml", "BAT-6", "error", 13, 20, "6 GPUs of the rollout engine", "6 = 1 x 4 + 2",
               suggestion="3 or 6")


def test_bat7_completions_cut_the_last_group():
    expect_one("BAT-7/bad.yaml", "BAT-7", "error", 8, 13, "1000 = 62 x 16 + 8", "8 completions short",
               suggestion="992 or 1008")


def test_bat7_group_split_across_ranks_and_mini_batches_are_warnings():
    expect_one("BAT-7/bad-ranks.yaml", "BAT-7", "warning", 8, 12, "8 per rank, not whole groups of 16",
               "8 completions short on each",  # 16 - 8 % 16
               suggestion="16 prompts per step")
    expect_one("BAT-7/bad-mini.yaml", "BAT-7", "warning", 9, 9, "256 = 21 x 12 + 4", "8 completions short",
               suggestion="192 or 384")


def test_bat7_options_turn_the_warnings_off(tmp_path):
    from support import FIXTURES, check_json

    (tmp_path / "trimtab.toml").write_text('[rules."BAT-7"]\ncheck_ranks = false\ncheck_mini = false\n')
    for name in ("bad-ranks.yaml", "bad-mini.yaml"):
        (tmp_path / name).write_text((FIXTURES / "rules" / "BAT-7" / name).read_text())
        assert check_json(tmp_path / name).of("BAT-7") == []


def test_bat8_non_positive_count():
    expect_one("BAT-8/bad.yaml", "BAT-8", "error", 10, 18, "batch.micro_per_gpu = 0")


def test_bat8_key_map_conversion_leaves_a_fraction():
    expect_one("BAT-8/convert/bad.yaml", "BAT-8", "error", 8, 23, "12 as written", "/ 8 data-parallel ranks = 1.5")


def test_bat8_unconvertible_value_is_a_note_and_no_arithmetic_runs_on_it():
    from support import arith
    from support import FIXTURES, check_json

    expect_one("BAT-8/convert/bad-unconverted.yaml", "BAT-8", "note", 8, 23, "group size unknown")
    res = check_json(FIXTURES / "rules" / "BAT-8/convert/bad-unconverted.yaml")
    assert [f["rule"] for f in arith(res.findings)] == ["BAT-8"]
