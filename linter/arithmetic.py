"""Run arithmetic: small helpers the batch, sampling and length rules share (nearest valid
values, remainders, where a quantity's inputs were written), and the table that
``trimtab explain`` prints.

Knows concepts, never key names; reads only a RunModel (stated values and what ``derive()``
computed from them).
"""
from __future__ import annotations

from math import gcd

from .model import RunModel, Value
from .resolve import PARALLEL, settled

__all__ = ["settled", "sources", "where", "remainder", "lcm", "near_multiples", "near_divisors", "rows",
           "render", "PARALLEL"]


def lcm(*numbers: int) -> int:
    out = 1
    for n in numbers:
        if n:
            out = out * n // gcd(out, n)
    return out


def remainder(total: int, part: int) -> str:
    """'1024 = 10 x 96 + 64'."""
    return f"{total} = {total // part} x {part} + {total % part}"


def near_multiples(x: int, unit: int, limit: int = 0) -> list[int]:
    """The multiples of ``unit`` nearest to ``x`` below and above it (positive, not ``x`` itself;
    at most ``limit`` when given)."""
    unit = max(1, unit)
    below = (x - 1) // unit * unit
    above = (x // unit + 1) * unit
    out = [m for m in (below, above) if m > 0 and m != x and (not limit or m <= limit)]
    return out


def near_divisors(n: int, x: int, unit: int = 1, budget: int = 100_000) -> list[int]:
    """The divisors of ``n`` that are multiples of ``unit`` nearest to ``x`` below and above it.

    The search walks outward from ``x`` over multiples of ``unit`` and gives up after ``budget``
    candidates each way (``n`` itself still counts above), so a huge count costs no time."""
    unit = max(1, unit)
    below = above = None
    k, steps = (x - 1) // unit, 0
    while k >= 1 and steps < budget:
        if n % (k * unit) == 0:
            below = k * unit
            break
        k, steps = k - 1, steps + 1
    k, steps = x // unit + 1, 0
    while k * unit <= n and steps < budget:
        if n % (k * unit) == 0:
            above = k * unit
            break
        k, steps = k + 1, steps + 1
    if above is None and n > x and n % unit == 0:
        above = n
    return [d for d in (below, above) if d is not None]


def either(values: list[int]) -> str:
    return " or ".join(str(v) for v in values)


def where(v: Value) -> str:
    """file:line of a stated value ('<command line>' for an override)."""
    loc = v.location
    if loc.path is None:
        return "<command line>"
    return f"{loc.path}:{loc.line}" if loc.line else loc.path


def sources(model: RunModel, concept: str) -> list[Value]:
    """The stated values a quantity rests on: itself when stated, else (recursively) the stated
    inputs of its derivation."""
    v = model.values.get(concept)
    if v is not None:
        return [v]
    d = model.derived.get(concept)
    if d is None:
        return []
    out: list[Value] = []
    for name in d.inputs:
        for s in sources(model, name):
            if s not in out:
                out.append(s)
    return out


def related(model: RunModel, *concepts: str, skip: tuple = ()) -> list:
    """Related locations for the stated inputs of ``concepts``, each with a short message."""
    out, seen = [], set()
    for c in concepts:
        for v in sources(model, c):
            if v.concept in skip or v.concept in seen:
                continue
            seen.add(v.concept)
            out.append(v.location.with_message(f"{v.concept} = {_num(v.value)}" + (f" ({v.note})" if v.note else "")))
    return out


def _num(value) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


# --- the explain table ----------------------------------------------------------------------
def _origin(model: RunModel, concept: str) -> str:
    v = model.values.get(concept)
    if v is not None:
        text = f"stated at {where(v)}"
        if v.note:
            text += f" ({v.note})"
        d = model.derived.get(concept)
        if d is not None and _num(d.value) != _num(v.value):
            text += f"; but {d.note} = {_num(d.value)}"
        elif d is not None:
            text += f"; agrees with {d.note}"
        return text
    d = model.derived.get(concept)
    if d is None:
        return ""
    inputs = ", ".join(f"{s.concept} {where(s)}" for s in sources(model, concept))
    return f"= {d.note}; from {inputs}"


def _row(model: RunModel, label: str, concept: str, needs: str = "") -> tuple[str, str, str]:
    v = model.get(concept)
    if v is None:
        return (label, "?", f"not found ({needs or concept})")
    return (label, _num(v.value), _origin(model, concept))


def rows(model: RunModel) -> list[tuple[str, str, str]]:
    """(quantity, value, how it was derived or where its inputs came from) for the run's
    arithmetic; a quantity that does not divide shows the remainder."""
    out = []
    s = lambda c: settled(model, c)
    out.append(_row(model, "GPUs (world size)", "cluster.world_size", "cluster.world_size, or cluster.nodes and "
                                                                       "cluster.gpus_per_node"))
    par = 1
    named = []
    for c in PARALLEL:
        if s(c):
            par *= s(c)
            named.append(f"{c} {where(model.values[c])}")
    if named:
        out.append(("GPUs per model replica", str(par), f"= tensor x pipeline x context parallel; from "
                                                        f"{', '.join(named)}"))
    world = s("cluster.world_size")
    if "train.data_parallel" not in model.derived and "train.data_parallel" not in model.values and world:
        out.append(("data-parallel ranks", "-", f"does not divide: {remainder(world, par)}"
                    if world % par else "not found"))
    else:
        out.append(_row(model, "data-parallel ranks", "train.data_parallel", "the world size"))
    out.append(_row(model, "prompts per step", "batch.prompts"))
    out.append(_row(model, "group size (completions per prompt)", "rollout.group_size"))
    out.append(_row(model, "completions per step", "batch.rollouts", "batch.rollouts, or batch.prompts and "
                                                                      "rollout.group_size"))
    out.append(_row(model, "mini-batch (completions per update)", "batch.mini"))
    rollouts, mini, epochs = s("batch.rollouts"), s("batch.mini"), s("optim.epochs")
    if rollouts and mini:
        if rollouts % mini:
            out.append(("mini-batches per step", "-", f"does not divide: {remainder(rollouts, mini)}"))
        else:
            out.append(("mini-batches per step", str(rollouts // mini), f"= {rollouts} / {mini}"))
    out.append(_row(model, "epochs over each batch", "optim.epochs"))
    if rollouts and mini and rollouts % mini and "optim.updates_per_step" not in model.values:
        out.append(("updates per step", "-", f"not whole: {rollouts} / {mini} x {epochs or 1} = "
                                             f"{rollouts * (epochs or 1) / mini:.2f}"))
    else:
        out.append(_row(model, "updates per step", "optim.updates_per_step", "batch.rollouts and batch.mini"))
    out.append(_row(model, "micro-batch per GPU", "batch.micro_per_gpu"))
    micro, dp = s("batch.micro_per_gpu"), s("train.data_parallel")
    if rollouts and micro and dp:
        per_rank = rollouts * (epochs or 1)
        if per_rank % (micro * dp):
            out.append(("micro-batches per rank per step", "-",
                        f"does not divide: {remainder(per_rank, micro * dp)}"))
        else:
            out.append(("micro-batches per rank per step", str(per_rank // (micro * dp)),
                        f"= {rollouts}{f' x {epochs} epoch' + ('s' if epochs != 1 else '') if epochs else ''} / "
                        f"({micro} x {dp} ranks)"))
    if mini and micro and dp and mini % (micro * dp):
        out.append(("accumulation steps (implied)", "-", f"does not divide: {remainder(mini, micro * dp)}"))
    else:
        out.append(_row(model, "accumulation steps", "batch.grad_accum", "batch.mini, batch.micro_per_gpu and "
                                                                          "the data-parallel ranks"))
    out.append(_row(model, "response budget (tokens)", "length.response_max"))
    response = s("length.response_max")
    if rollouts and response:
        per_step = rollouts * response
        inputs = ", ".join(f"{v.concept} {where(v)}" for v in sources(model, "batch.rollouts")
                           + sources(model, "length.response_max"))
        out.append(("tokens generated per step (at the budget)", f"{per_step:,}",
                    f"= {rollouts} completions x {response} tokens; from {inputs}"))
        steps = s("schedule.total_steps")
        if steps:
            out.append(("tokens generated over the run (at the budget)", f"{per_step * steps:,}",
                        f"= {per_step:,} x {steps} steps; schedule.total_steps {where(model.values['schedule.total_steps'])}"))
        else:
            out.append(("tokens generated over the run (at the budget)", "?", "not found (schedule.total_steps)"))
    return out


def render(model: RunModel) -> str:
    """The table as text for ``trimtab explain`` (empty when the run states no arithmetic)."""
    table = rows(model)
    if all(value == "?" for _q, value, _h in table):
        return ""
    qw = max(len(q) for q, _v, _h in table)
    vw = max(len(v) for _q, v, _h in table)
    lines = ["", "Run arithmetic:"]
    for q, v, h in table:
        lines.append(f"  {q:<{qw}}  {v:>{vw}}  {h}")
    return "\n".join(lines) + "\n"
