"""Property tests (hypothesis) for the batch and topology arithmetic.

Consistent runs are built from divisors, so every division the BAT rules check is exact: they must
give no BAT finding. Then one value is changed so that exactly one divisibility (or one stated
product) breaks: exactly the matching finding must appear, at the changed line.
"""
from __future__ import annotations

import atexit
import shutil
import tempfile
from math import gcd
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from trimtab.gate.runner import Checker
from trimtab.engine.registry import Registry
from trimtab.common.settings import Settings

_TMP = Path(tempfile.mkdtemp(prefix="trimtab-props-"))
atexit.register(shutil.rmtree, _TMP, True)
_CHECKER = Checker(Settings(root=_TMP), Registry())


def _divisors(n):
    return [d for d in range(1, n + 1) if n % d == 0]


@st.composite
def runs(draw):
    """A consistent run: (ordered [(section, key, value)], facts)."""
    nodes = draw(st.integers(1, 4))
    gpn = draw(st.sampled_from([1, 2, 4, 8]))
    world = nodes * gpn
    tp = draw(st.sampled_from(_divisors(world)))
    pp = draw(st.sampled_from(_divisors(world // tp)))
    cp = draw(st.sampled_from(_divisors(world // tp // pp)))
    dp = world // (tp * pp * cp)
    rtp = draw(st.sampled_from(_divisors(world)))
    gs = draw(st.integers(2, 16))
    micro = draw(st.integers(1, 8))
    accum = gs // gcd(gs, micro) * draw(st.integers(1, 3))  # so that gs divides micro x accum
    mini = micro * accum * dp  # whole groups, whole micro-batches on every rank
    rollouts = mini * draw(st.integers(1, 4))
    prompts = rollouts // gs
    epochs = draw(st.integers(1, 3))
    rows = [("run", "estimator", "grpo"), ("cluster", "nodes", nodes), ("cluster", "gpus_per_node", gpn)]
    flags = draw(st.fixed_dictionaries({k: st.booleans() for k in
                                        ("world", "tp", "pp", "cp", "dp", "rollouts", "accum", "updates")}))
    if flags["world"]:
        rows.append(("cluster", "world_size", world))
    for name, value in (("tensor_parallel", tp), ("pipeline_parallel", pp), ("context_parallel", cp)):
        if value > 1 or flags[name[0] + "p"]:
            rows.append(("train", name, value))
    if flags["dp"]:
        rows.append(("train", "data_parallel", dp))
    rows.append(("batch", "prompts", prompts))
    if flags["rollouts"]:
        rows.append(("batch", "rollouts", rollouts))
    rows += [("batch", "mini", mini), ("batch", "micro_per_gpu", micro)]
    if flags["accum"]:
        rows.append(("batch", "grad_accum", accum))
    rows.append(("optim", "epochs", epochs))
    if flags["updates"]:
        rows.append(("optim", "updates_per_step", rollouts // mini * epochs))
    rows += [("rollout", "group_size", gs), ("rollout", "temperature", 1.0), ("rollout", "tensor_parallel", rtp)]
    facts = dict(world=world, tp=tp, pp=pp, cp=cp, dp=dp, gs=gs, micro=micro, accum=accum, mini=mini,
                 rollouts=rollouts, prompts=prompts, epochs=epochs, nodes=nodes, gpn=gpn)
    return rows, facts


def _text(rows):
    """YAML text and the line of each (section, key)."""
    lines, where, sections = ["# invented run for a property test"], {}, {}
    for section, key, value in rows:
        sections.setdefault(section, []).append((key, value))
    for section, entries in sections.items():
        lines.append(f"{section}:")
        for key, value in entries:
            lines.append(f"  {key}: {value}")
            where[(section, key)] = len(lines)
    return "\n".join(lines) + "\n", where


def _bat(rows):
    text, where = _text(rows)
    path = _TMP / "run.yaml"
    path.write_text(text)
    res = _CHECKER.check_file(str(path), "run.yaml")
    return [f for f in res.findings if f.rule_id.startswith("BAT")], where, text


_SETTINGS = settings(max_examples=40, suppress_health_check=[HealthCheck.too_slow])


@_SETTINGS
@given(runs())
def test_consistent_runs_have_no_bat_finding(run):
    rows, _facts = run
    found, _where, text = _bat(rows)
    assert found == [], (text, [f.message for f in found])


def _replace(rows, section, key, value):
    return [(s, k, value if (s, k) == (section, key) else v) for s, k, v in rows]


def _non_divisor(n, data, low=2):
    """A number >= low that does not divide n."""
    return data.draw(st.integers(low, 4 * n + 4).filter(lambda x: n % x != 0))


KINDS = ("tp", "world", "rollouts", "mini", "micro", "accum", "rollout_tp", "dp")


@_SETTINGS
@given(runs(), st.sampled_from(KINDS), st.data())
def test_one_broken_divisibility_gives_exactly_its_finding(run, kind, data):
    rows, f = run
    keys = {(s, k) for s, k, _v in rows}
    if kind == "tp":
        new, target, rule = _non_divisor(f["world"], data), ("train", "tensor_parallel"), "BAT-5"
        if target not in keys:
            rows = rows[:3] + [("train", "tensor_parallel", 1)] + rows[3:]
        rows = [r for r in rows if r[:2] != ("train", "data_parallel")]
    elif kind == "world":
        new, target, rule = f["world"] + data.draw(st.integers(1, 8)), ("cluster", "world_size"), "BAT-4"
        if target not in keys:
            rows = rows[:3] + [("cluster", "world_size", 0)] + rows[3:]
    elif kind == "rollouts":
        new, target, rule = f["rollouts"] + data.draw(st.integers(1, 64)), ("batch", "rollouts"), "BAT-1"
        if target not in keys:
            i = [r[:2] for r in rows].index(("batch", "prompts")) + 1
            rows = rows[:i] + [("batch", "rollouts", 0)] + rows[i:]
    elif kind == "mini":
        # still whole micro-batches on every rank and whole groups, but no longer a divisor of the step
        unit = f["micro"] * f["dp"] * f["gs"] // gcd(f["micro"] * f["dp"], f["gs"])
        new = data.draw(st.integers(1, 8).map(lambda k: f["mini"] + k * unit).filter(
            lambda m: f["rollouts"] % m != 0))
        target, rule = ("batch", "mini"), "BAT-2"
        rows = [r for r in rows if r[:2] not in (("batch", "grad_accum"), ("optim", "updates_per_step"))]
    elif kind == "micro":
        new, target, rule = _non_divisor(f["mini"] // f["dp"], data), ("batch", "micro_per_gpu"), "BAT-3"
    elif kind == "accum":
        new, target, rule = f["accum"] + data.draw(st.integers(1, 5)), ("batch", "grad_accum"), "BAT-3"
        if target not in keys:
            i = [r[:2] for r in rows].index(("batch", "micro_per_gpu")) + 1
            rows = rows[:i] + [("batch", "grad_accum", 0)] + rows[i:]
    elif kind == "rollout_tp":
        new, target, rule = _non_divisor(f["world"], data), ("rollout", "tensor_parallel"), "BAT-6"
    else:  # a stated data-parallel size that disagrees
        new, target, rule = f["dp"] + data.draw(st.integers(1, 8)), ("train", "data_parallel"), "BAT-5"
        if target not in keys:
            i = [r[:2] for r in rows].index(("cluster", "gpus_per_node")) + 1
            rows = rows[:i] + [("train", "data_parallel", 0)] + rows[i:]
        rows = [r for r in rows if r[:2] != ("batch", "micro_per_gpu") and r[:2] != ("batch", "grad_accum")]
    rows = _replace(rows, *target, new)
    found, where, text = _bat(rows)
    got = [(x.rule_id, x.location.line) for x in found]
    assert got == [(rule, where[target])], (kind, text, [x.message for x in found])
