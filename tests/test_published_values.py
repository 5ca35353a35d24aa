"""The values trimtab reports (an option's default as ``trimtab rules`` prints it, the number it reads
from a recipe, the published figures a message quotes) compared with the values their sources state.
The source is named beside each figure; "from memory" where the figure was not checked against the
paper's text."""
from __future__ import annotations

import re

import pytest

from support import FIXTURES, check_json, run_cli

# The published figures, one place, each with its source.
KL_COEFS = {0.04: "Shao et al. 2024, arXiv:2402.03300, section 4.2 (from memory)",
            0.02: "Ouyang et al. 2022, arXiv:2203.02155 (from memory)",
            0.001: "Guo et al. 2025, arXiv:2501.12948v2, the revised version (from memory)"}
LEARNING_RATES = {1e-6: "arXiv:2402.03300, section 4.2 (from memory)",
                  3e-6: "arXiv:2501.12948v2, the revised version (from memory)"}
GROUP_SIZES = {64: "arXiv:2402.03300, section 4.2 (from memory)",
               16: "arXiv:2501.12948v2, the revised version (from memory)"}
DECOUPLED = (0.2, 0.28)  # eps_low, eps_high: Yu et al. 2025, arXiv:2503.14476
DUAL_C = 3.0  # Ye et al. 2020, arXiv:1912.09729 (from memory)
PPO_GAE = (0.99, 0.95)  # gamma, lambda: Schulman et al. 2017, arXiv:1707.06347, appendix A tables (from memory)
PPO_EPS = 0.2  # arXiv:1707.06347, Table 3 (from memory)
SAMPLING_TEMPERATURE = 1.0  # arXiv:2501.12948v2 (from memory)


def options(rule_id: str) -> dict:
    """The option defaults as ``trimtab rules ID`` reports them."""
    out = run_cli("rules", rule_id).out
    return {k: v for k, v in re.findall(r"^  (\w+) = (\S+)$", out, re.M)}


def _models(path):
    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import Settings

    runs, problems = models(str(path), Settings(root=path.parent), Registry())
    assert problems == []
    return runs


def _numbers(rel, concept):
    return [m.values[concept].number for m in _models(FIXTURES / "rules" / rel)]


# --- the check points: trimtab reads the published figure from the fixture, and its rule is silent ------

def test_trimtab_reads_the_published_kl_coefficients_and_is_silent_on_them():
    assert _numbers("KL-5/good.yaml", "kl.coef") == list(KL_COEFS)
    assert check_json(FIXTURES / "rules" / "KL-5" / "good.yaml").of("KL-5") == []


def test_trimtab_reads_the_published_learning_rates_and_is_silent_on_them():
    assert _numbers("OPT-1/good.yaml", "optim.lr") == list(LEARNING_RATES)
    assert check_json(FIXTURES / "rules" / "OPT-1" / "good.yaml").of("OPT-1") == []


def test_trimtab_reads_the_published_clip_values_and_is_silent_on_them():
    (m,) = _models(FIXTURES / "rules" / "CLP-4" / "good.yaml")
    assert (m.values["clip.low"].number, m.values["clip.high"].number) == DECOUPLED
    assert check_json(FIXTURES / "rules" / "CLP-4" / "good.yaml").of("CLP-4") == []
    (m,) = _models(FIXTURES / "rules" / "CLP-5" / "good.yaml")
    assert m.values["clip.dual"].number == DUAL_C
    assert check_json(FIXTURES / "rules" / "CLP-5" / "good.yaml").of("CLP-5") == []


def test_trimtab_reads_the_published_gae_constants_and_is_silent_on_them():
    first = _models(FIXTURES / "rules" / "ALG-3" / "good.yaml")[0]
    assert (first.values["gae.gamma"].number, first.values["gae.lambda"].number) == PPO_GAE
    assert check_json(FIXTURES / "rules" / "ALG-3" / "good.yaml").of("ALG-3") == []


# --- option defaults against the published values they are set from ------------------------------------

def test_kl_range_default_is_an_order_of_magnitude_beyond_the_published_coefficients():
    opt = options("KL-5")
    lo, hi = float(opt["min"]), float(opt["max"])
    assert lo == pytest.approx(min(KL_COEFS) / 10)  # one order below 0.001 (arXiv:2501.12948v2)
    assert hi >= max(KL_COEFS) * 10  # at least one order above 0.04 (arXiv:2402.03300)
    assert all(lo <= c <= hi for c in KL_COEFS)
    # The message quotes the published coefficients: the same figures as the sources.
    res = check_json(FIXTURES / "rules" / "KL-5" / "bad.yaml")
    quoted = re.search(r"\(published: ([^)]*)\)", res.of("KL-5")[0]["message"]).group(1)
    assert sorted(float(x) for x in quoted.split(",")) == sorted(KL_COEFS)


def test_learning_rate_default_is_two_orders_of_magnitude_either_side_of_the_published_rate():
    opt = options("OPT-1")
    lo, hi = float(opt["min"]), float(opt["max"])
    assert lo == pytest.approx(1e-6 / 100) and hi == pytest.approx(1e-6 * 100)  # arXiv:2402.03300
    assert all(lo <= r <= hi for r in LEARNING_RATES)


def test_min_group_default_passes_the_published_group_sizes(tmp_path):
    # The published group sizes pass SMP-1 at its default; a group of 2 (below the default 4, common
    # practice) warns.
    assert int(options("SMP-1")["min_group"]) <= min(GROUP_SIZES)
    text = (FIXTURES / "rules" / "SMP-1" / "bad-small.yaml").read_text()
    assert "group_size: 2" in text
    for size, source in GROUP_SIZES.items():
        p = tmp_path / f"g{size}.yaml"
        p.write_text(text.replace("group_size: 2", f"group_size: {size}"))
        assert check_json(p).of("SMP-1") == [], source
    assert [f["level"] for f in check_json(FIXTURES / "rules" / "SMP-1" / "bad-small.yaml").of("SMP-1")] == ["warning"]


def test_min_temperature_default_is_below_the_published_sampling_temperature():
    assert float(options("SMP-2")["min_temperature"]) < SAMPLING_TEMPERATURE  # arXiv:2501.12948v2


def test_decoupled_and_dual_clip_messages_quote_the_published_values():
    res = check_json(FIXTURES / "rules" / "CLP-5" / "bad.yaml")
    assert f"(published: {DUAL_C:g})" in res.of("CLP-5")[0]["message"]  # arXiv:1912.09729, from memory


def test_unstated_clip_suggestion_quotes_the_published_epsilon():
    res = check_json(FIXTURES / "rules" / "CLP-1" / "bad.yaml")
    assert f"e.g. {PPO_EPS:g} (arXiv:1707.06347)" in res.of("CLP-1")[0]["suggestion"]


def test_unstated_kl_suggestion_quotes_the_published_coefficient():
    res = check_json(FIXTURES / "rules" / "KL-1" / "bad.yaml")
    suggestions = [f.get("suggestion") or "" for f in res.of("KL-1")]
    assert any("0.04 as in arXiv:2402.03300" in s for s in suggestions), suggestions
