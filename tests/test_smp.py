"""SMP: sampling rules on their good and bad fixtures."""
from __future__ import annotations

import pytest

from support import expect_clean, expect_one


@pytest.mark.parametrize("rel", ["SMP-1/good.yaml", "SMP-1/good-ppo.yaml", "SMP-2/good.yaml", "SMP-3/good.yaml"])
def test_good_fixtures_are_silent(rel):
    expect_clean(rel)


def test_smp1_group_of_one_is_an_error():
    expect_one("SMP-1/bad.yaml", "SMP-1", "error", 5, 15, "a group of 1 completion", "every advantage is zero")


def test_smp1_small_group_is_a_warning_with_the_threshold():
    # Basis of the default 4: common practice; published groups of 64 (arXiv:2402.03300) and 16
    # (arXiv:2501.12948v2, from memory) per prompt are far above it.
    expect_one("SMP-1/bad-small.yaml", "SMP-1", "warning", 5, 15, "a group of 2", "min_group 4")


def test_smp1_threshold_is_an_option(tmp_path):
    from support import FIXTURES, check_json

    (tmp_path / "trimtab.toml").write_text('[rules."SMP-1"]\nmin_group = 2\n')
    (tmp_path / "c.yaml").write_text((FIXTURES / "rules/SMP-1/bad-small.yaml").read_text())
    assert check_json(tmp_path / "c.yaml").of("SMP-1") == []


def test_smp2_temperature_zero():
    expect_one("SMP-2/bad.yaml", "SMP-2", "error", 6, 16, "temperature 0 with 8 completions per prompt")


def test_smp2_low_temperature_warning():
    expect_one("SMP-2/bad-low.yaml", "SMP-2", "warning", 6, 16, "temperature 0.2", "min_temperature 0.3")


def test_smp2_greedy_decoding():
    expect_one("SMP-2/bad-greedy.yaml", "SMP-2", "error", 7, 13, "sampling is switched off with 8 completions")
    expect_one("SMP-2/bad-topk.yaml", "SMP-2", "error", 7, 10, "top-k of 1 is greedy decoding")


def test_smp3_out_of_range_values_each_at_their_line():
    from support import FIXTURES, check_json

    found = check_json(FIXTURES / "rules/SMP-3/bad.yaml").of("SMP-3")
    got = [(f["level"], f["location"]["line"], f["location"]["col"], f["message"]) for f in found]
    assert got == [("error", 6, 16, "temperature -0.5 is negative"),
                   ("error", 7, 10, "top-p 1.5 is outside (0, 1]"),
                   ("error", 8, 10, "top-k -5 is negative")]
    expect_one("SMP-3/bad-zero.yaml", "SMP-3", "error", 7, 10, "top-p 0 is outside (0, 1]")


def test_smp3_top_k_minus_one_needs_the_option(tmp_path):
    from support import FIXTURES, check_json

    (tmp_path / "trimtab.toml").write_text('[rules."SMP-3"]\nallow_top_k_minus_one = false\n')
    (tmp_path / "c.yaml").write_text((FIXTURES / "rules/SMP-3/good.yaml").read_text())
    found = check_json(tmp_path / "c.yaml").of("SMP-3")
    assert [(f["location"]["line"], f["message"]) for f in found] == [(8, "top-k -1 is negative")]
