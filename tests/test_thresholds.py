"""Every threshold a rule states, tested just below, at and just above, each row naming the source of
the threshold (a paper, a standard, or "common practice" where that is the basis), so that moving a
comparison by one (``<`` for ``<=``, a limit off by one) fails a test that says where the value comes
from.

Each case writes one run: a base run that every rule is silent on (checked below), with the values of
the case put in, and runs ``trimtab check`` on it. Numbers are written so that YAML 1.1 and YAML 1.2
readers read the same float (a dot in the mantissa, a signed exponent).
"""
from __future__ import annotations

import math

import pytest

from support import check_json

BASE = {
    "run": {"estimator": "grpo", "seed": "17"},
    "reference": {"path": "lowfield/wren-7b-chat"},
    "rollout": {"group_size": "8", "temperature": "1.0"},
    "kl": {"coef": "0.04"},
    "clip": {"low": "0.2", "high": "0.28", "dual": "3.0"},
    "optim": {"lr": "1.0e-6", "max_grad_norm": "1.0", "warmup_steps": "10", "total_steps": "100", "epochs": "2"},
    "batch": {"rollouts": "512", "mini": "128"},
    "gae": {"gamma": "0.99", "lambda": "0.95"},
}
SANDBOX = {
    "run": {"estimator": "grpo", "seed": "17"},
    "rollout": {"group_size": "8", "temperature": "1.0"},
    "kl_coef": "0.001",
    "clip": {"epsilon": "0.2"},
    "optim": {"max_grad_norm": "1.0"},
    "rewards": "\n  - name: tidepool_tests\n    kind: code\n    ref: tidepool_unit_tests\n    weight: 1.0",
    "sandbox": {"kind": "container", "network": "false", "timeout_s": "10", "memory_mb": "1024",
                "processes": "16", "filesystem": "read-only", "user": "sandbox", "privileged": "false"},
}


def num(x: float) -> str:
    """A float as text both YAML 1.1 and 1.2 read as that float."""
    text = repr(float(x))
    if "e" in text:
        mant, exp = text.split("e")
        mant = mant if "." in mant else mant + ".0"
        exp = exp if exp[0] in "+-" else "+" + exp
        text = f"{mant}e{exp}"
    return text


def below(x: float) -> float:
    return math.nextafter(x, -math.inf) if x else -1e-9


def above(x: float) -> float:
    return math.nextafter(x, math.inf) if x else 1e-9


def write(tmp_path, values: dict, base=BASE) -> str:
    doc = {k: (dict(v) if isinstance(v, dict) else v) for k, v in base.items()}
    for path, text in values.items():
        section, _, key = path.partition(".")
        if text is None:
            doc[section].pop(key, None)
        else:
            doc.setdefault(section, {})[key] = text
    lines = []
    for section, body in doc.items():
        if isinstance(body, dict):
            lines.append(f"{section}:")
            lines += [f"  {k}: {v}" for k, v in body.items()]
        else:
            lines.append(f"{section}: {body}" if "\n" not in body else f"{section}:{body}")
    p = tmp_path / "run.yaml"
    p.write_text("\n".join(lines) + "\n")
    return p


def findings(tmp_path, values, rule_id, base=BASE):
    res = check_json(write(tmp_path, values, base), cwd=tmp_path)
    assert res.code in (0, 1), res.err
    return res.of(rule_id)


@pytest.mark.parametrize("base", [BASE, SANDBOX], ids=["base", "sandbox"])
def test_the_base_runs_are_silent(tmp_path, base):
    res = check_json(write(tmp_path, {}, base), cwd=tmp_path)
    assert res.code == 0 and [f for f in res.findings if f["level"] != "note"] == []


# (rule, {key: text}, expected level or None, source of the threshold)
GAMMA = "gamma, lambda in [0, 1]: Schulman et al. 2016, arXiv:1506.02438"
EPS = "clip epsilon > 0: Schulman et al. 2017, arXiv:1707.06347 (interval [1 - eps, 1 + eps])"
LOW1 = "lower clip acts only while 1 - eps > 0, the ratio being positive: arXiv:1707.06347"
DECOUPLED = "eps_high >= eps_low: Yu et al. 2025, arXiv:2503.14476 (0.2 / 0.28)"
DUAL = "dual-clip c > 1: Ye et al. 2020, arXiv:1912.09729, from memory"
GRAD = "gradient-norm clip > 0: common practice"
KLR = "KL range 1e-4 .. 0.5: one order of magnitude beyond 0.001 (arXiv:2501.12948v2) and 0.04 (arXiv:2402.03300)"
HOR = "adaptive KL horizon > 0: arXiv:1909.08593 (from memory)"
LR = "learning-rate range 1e-8 .. 1e-4: two orders of magnitude either side of 1e-6 (arXiv:2402.03300)"
TOP_P = "top-p in (0, 1]: Holtzman et al. 2020, arXiv:1904.09751"
GROUP = "group of 2 or more for a group baseline (arXiv:2402.03300); min_group 4: common practice"
TEMP = "min_temperature 0.3: common practice (published recipes sample near 1)"
WARM = "warm-up shorter than the run: common practice"
TIMEOUT = "max_timeout_s 60: common practice"
LONG = "long_run_steps 1000 for a run without checkpoints: common practice"
CKPT = "a checkpoint before the last step (every < total steps): common practice"
FIT = "prompt + response <= the context window: common practice of rollout engines"

CASES = [
    ("ALG-3", {"gae.gamma": num(below(0.0))}, "error", GAMMA),
    ("ALG-3", {"gae.gamma": "0.0"}, None, GAMMA),
    ("ALG-3", {"gae.gamma": num(above(0.0))}, None, GAMMA),
    ("ALG-3", {"gae.gamma": num(below(1.0))}, None, GAMMA),
    ("ALG-3", {"gae.gamma": "1.0"}, None, GAMMA),
    ("ALG-3", {"gae.gamma": num(above(1.0))}, "error", GAMMA),
    ("ALG-3", {"gae.lambda": num(below(0.0))}, "error", GAMMA),
    ("ALG-3", {"gae.lambda": "0.0"}, None, GAMMA),
    ("ALG-3", {"gae.lambda": "1.0"}, None, GAMMA),
    ("ALG-3", {"gae.lambda": num(above(1.0))}, "error", GAMMA),
    ("CLP-2", {"clip.low": num(below(0.0))}, "error", EPS),
    ("CLP-2", {"clip.low": "0.0"}, "error", EPS),
    ("CLP-2", {"clip.low": num(above(0.0)), "clip.high": "0.28"}, None, EPS),
    ("CLP-2", {"clip.high": "0.0"}, "error", EPS),
    ("CLP-3", {"clip.low": num(below(1.0)), "clip.high": "1.5"}, None, LOW1),
    ("CLP-3", {"clip.low": "1.0", "clip.high": "1.5"}, "warning", LOW1),
    ("CLP-3", {"clip.low": num(above(1.0)), "clip.high": "1.5"}, "warning", LOW1),
    ("CLP-4", {"clip.high": num(below(0.2))}, "warning", DECOUPLED),
    ("CLP-4", {"clip.high": "0.2"}, None, DECOUPLED),
    ("CLP-4", {"clip.high": num(above(0.2))}, None, DECOUPLED),
    ("CLP-5", {"clip.dual": num(below(1.0))}, "error", DUAL),
    ("CLP-5", {"clip.dual": "1.0"}, "error", DUAL),
    ("CLP-5", {"clip.dual": num(above(1.0))}, None, DUAL),
    ("CLP-7", {"optim.max_grad_norm": num(below(0.0))}, "error", GRAD),
    ("CLP-7", {"optim.max_grad_norm": "0.0"}, "error", GRAD),
    ("CLP-7", {"optim.max_grad_norm": num(above(0.0))}, None, GRAD),
    ("KL-5", {"kl.coef": num(below(1e-4))}, "warning", KLR),
    ("KL-5", {"kl.coef": num(1e-4)}, None, KLR),
    ("KL-5", {"kl.coef": num(above(1e-4))}, None, KLR),
    ("KL-5", {"kl.coef": num(below(0.5))}, None, KLR),
    ("KL-5", {"kl.coef": "0.5"}, None, KLR),
    ("KL-5", {"kl.coef": num(above(0.5))}, "warning", KLR),
    ("KL-5", {"kl.coef": num(below(0.0))}, "error", KLR + "; a negative coefficient is a bonus"),
    ("KL-6", {"kl.target": "6.0", "kl.horizon": "-1"}, "warning", HOR),
    ("KL-6", {"kl.target": "6.0", "kl.horizon": "0"}, "warning", HOR),
    ("KL-6", {"kl.target": "6.0", "kl.horizon": "1"}, None, HOR),
    ("OPT-1", {"optim.lr": num(below(1e-8))}, "warning", LR),
    ("OPT-1", {"optim.lr": num(1e-8)}, None, LR),
    ("OPT-1", {"optim.lr": num(1e-4)}, None, LR),
    ("OPT-1", {"optim.lr": num(above(1e-4))}, "warning", LR),
    ("OPT-1", {"optim.lr": "0.0"}, "error", LR + "; 0 learns nothing"),
    ("OPT-1", {"optim.lr": num(below(0.0))}, "error", LR + "; a negative rate climbs the loss"),
    ("OPT-1", {"optim.lr": "-1.0e-6"}, "error", LR + "; a negative rate climbs the loss"),
    ("OPT-2", {"optim.warmup_steps": "99"}, None, WARM),
    ("OPT-2", {"optim.warmup_steps": "100"}, "warning", WARM),
    ("OPT-2", {"optim.warmup_steps": "101"}, "warning", WARM),
    ("OPT-3", {"checkpoint.every": "0", "optim.total_steps": "1000", "optim.warmup_steps": "10"}, None, LONG),
    ("OPT-3", {"checkpoint.every": "0", "optim.total_steps": "1001", "optim.warmup_steps": "10"}, "warning", LONG),
    ("OPT-3", {"checkpoint.every": "99"}, None, CKPT),
    ("OPT-3", {"checkpoint.every": "100"}, "warning", CKPT),
    ("OPT-3", {"checkpoint.every": "101"}, "warning", CKPT),
    ("LEN-2", {"length.prompt_max": "1024", "length.response_max": "3071", "model.context_max": "4096"}, None, FIT),
    ("LEN-2", {"length.prompt_max": "1024", "length.response_max": "3072", "model.context_max": "4096"}, None, FIT),
    ("LEN-2", {"length.prompt_max": "1024", "length.response_max": "3073", "model.context_max": "4096"}, "error", FIT),
    ("LEN-2", {"length.response_max": "4095", "model.context_max": "4096"}, None, FIT),
    ("LEN-2", {"length.response_max": "4096", "model.context_max": "4096"}, "error", FIT),
    ("SMP-1", {"rollout.group_size": "1"}, "error", GROUP),
    ("SMP-1", {"rollout.group_size": "2"}, "warning", GROUP),
    ("SMP-1", {"rollout.group_size": "3"}, "warning", GROUP),
    ("SMP-1", {"rollout.group_size": "4"}, None, GROUP),
    ("SMP-1", {"rollout.group_size": "5"}, None, GROUP),
    ("SMP-2", {"rollout.temperature": "0.0"}, "error", TEMP),
    ("SMP-2", {"rollout.temperature": num(below(0.3))}, "warning", TEMP),
    ("SMP-2", {"rollout.temperature": "0.3"}, None, TEMP),
    ("SMP-2", {"rollout.temperature": num(above(0.3))}, None, TEMP),
    ("SMP-2", {"rollout.top_k": "1"}, "error", "top-k of 1 is greedy decoding: common practice"),
    ("SMP-2", {"rollout.top_k": "2"}, None, "top-k of 1 is greedy decoding: common practice"),
    ("SMP-3", {"rollout.top_p": "0.0"}, "error", TOP_P),
    ("SMP-3", {"rollout.top_p": num(above(0.0))}, None, TOP_P),
    ("SMP-3", {"rollout.top_p": "1.0"}, None, TOP_P),
    ("SMP-3", {"rollout.top_p": num(above(1.0))}, "error", TOP_P),
    ("SMP-3", {"rollout.temperature": num(below(0.0))}, "error", "temperature >= 0: it divides the logits"),
    ("SMP-3", {"rollout.top_k": "-2"}, "error", "top-k >= 0, -1 for no cut-off: common practice"),
    ("SMP-3", {"rollout.top_k": "-1"}, None, "top-k >= 0, -1 for no cut-off: common practice"),
    ("SMP-3", {"rollout.top_k": "0"}, None, "top-k >= 0, -1 for no cut-off: common practice"),
]


@pytest.mark.parametrize("rule_id, values, level, source", CASES,
                         ids=[f"{c[0]}-{'-'.join(f'{k}={v}' for k, v in c[1].items())}" for c in CASES])
def test_threshold(tmp_path, rule_id, values, level, source):
    got = findings(tmp_path, values, rule_id)
    assert [f["level"] for f in got] == ([level] if level else []), source


SANDBOX_CASES = [
    ("EXE-4", {"sandbox.timeout_s": "59"}, None, TIMEOUT),
    ("EXE-4", {"sandbox.timeout_s": "60"}, None, TIMEOUT),
    ("EXE-4", {"sandbox.timeout_s": "60.5"}, "warning", TIMEOUT),
    ("EXE-4", {"sandbox.timeout_s": "61"}, "warning", TIMEOUT),
    ("EXE-3", {"sandbox.timeout_s": "0"}, "error", "a wall-clock limit must be a positive time: common practice"),
    ("EXE-3", {"sandbox.timeout_s": "1"}, None, "a wall-clock limit must be a positive time: common practice"),
    ("EXE-5", {"sandbox.memory_mb": "0"}, "warning", "a memory limit of 0 is no limit: common practice"),
    ("EXE-5", {"sandbox.memory_mb": "1"}, None, "a memory limit of 0 is no limit: common practice"),
    ("EXE-5", {"sandbox.processes": "0"}, "warning", "a process limit of 0 is no limit: common practice"),
    ("EXE-5", {"sandbox.processes": "1"}, None, "a process limit of 0 is no limit: common practice"),
]


@pytest.mark.parametrize("rule_id, values, level, source", SANDBOX_CASES,
                         ids=[f"{c[0]}-{'-'.join(f'{k}={v}' for k, v in c[1].items())}" for c in SANDBOX_CASES])
def test_sandbox_threshold(tmp_path, rule_id, values, level, source):
    got = findings(tmp_path, values, rule_id, SANDBOX)
    assert [f["level"] for f in got] == ([level] if level else []), source


def test_random_looking_value_thresholds():
    # SEC-1's min_length 24 and min_entropy_bits 4.0 (common practice; Shannon entropy per character,
    # log2 of 16 equally frequent characters is exactly 4.0). Values built so that only the tested measure
    # changes: letters beyond f (not hexadecimal), three classes, a class switch at every character.
    from trimtab.common.redact import MIN_BITS, MIN_LENGTH, high_entropy

    opts = {k: v for k, v in (line.strip().split(" = ") for line in
                                  run_options("SEC-1"))}
    assert (int(opts["min_length"]), float(opts["min_entropy_bits"])) == (MIN_LENGTH, MIN_BITS) == (24, 4.0)
    varied = "gG0hH1iI2jJ3kK4mnN5pP6qQ7rR8"
    assert not high_entropy(varied[:23]) and high_entropy(varied[:24]) and high_entropy(varied[:25])
    exactly_four = "gG0hH1iI2jJ3kK4m" * 2  # 16 characters, each twice: 4.0 bits
    assert high_entropy(exactly_four)
    assert not high_entropy(exactly_four[:-1] + "g")  # one character repeated once more: below 4.0 bits


def run_options(rule_id):
    from support import run_cli

    out = run_cli("rules", rule_id).out
    return [line for line in out.splitlines() if line.startswith("  ") and " = " in line]
