"""The audit page's pictures as data: the batch arithmetic step by step and the token budget,
read from the run's one arithmetic (``trimtab.resolve.arithmetic``); nothing here draws or escapes."""
from __future__ import annotations

from dataclasses import dataclass, field

from ..common.findings import Location
from ..resolve import arithmetic
from ..resolve.model import RunModel


def num(n) -> str:
    if isinstance(n, float) and n.is_integer():
        n = int(n)
    return f"{n:,}".replace(",", "\u2009") if isinstance(n, int) and abs(n) >= 10000 else str(n)


# --- what the page is made of ------------------------------------------------------------------
@dataclass
class Quantity:
    """One number of the picture: its value and where it came from."""

    concept: str
    value: int | None
    origin: str  # "path:line", "derived (64 x 8)", "command line" or "not found"
    loc: Location | None = None  # where it was written (for a link)
    shown: str = ""  # what is written beside what it means, when they differ ("24 prompts = 192 completions")


@dataclass
class Step:
    """One step of the batch arithmetic; broken when it does not divide (or disagrees)."""

    key: str  # prompts, groups, completions, mini, micro, updates
    title: str
    text: str  # the arithmetic in words
    quantities: list[Quantity] = field(default_factory=list)
    broken: str = ""  # why, with the numbers
    remainder: int | None = None
    known: bool = True  # False when an input is missing: shown as unknown, never as broken or fine


@dataclass
class Picture:
    steps: list[Step]
    P: int | None = None
    G: int | None = None
    R: int | None = None
    M: int | None = None
    u: int | None = None
    D: int | None = None
    A: int | None = None
    E: int | None = None
    mini_parts: int | None = None  # whole mini-batches and what is left (the arithmetic's mini step)
    mini_left: int = 0
    columns: int | None = None  # whole micro-batch columns of a mini-batch and what is left (its lanes step)
    columns_left: int = 0


def _int(x):
    """A count the picture can label: an int, or an integral float as an int; else None."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    if isinstance(x, float):
        return int(x) if x.is_integer() else None
    return x


def _x(text: str) -> str:
    """The arithmetic's words with the multiplication sign of the page."""
    return text.replace(" x ", " \u00d7 ")


def quantity(a: arithmetic.Arithmetic, concept: str) -> Quantity:
    """One number of the picture, read from the run's arithmetic: what it means (in the concept's
    unit) and, when it was converted, what is written in the file beside it."""
    t, d = a.term(concept), a.derived(concept)
    if t is not None and t.source is not None:
        v = t.source
        n = _int(t.value)
        loc = v.location
        if n is None:
            why = f"not converted ({t.missing} unknown)" if t.missing else f"not a whole number ({t.value!r})"
            return Quantity(concept, None, why, loc)
        if loc.path is None:
            return Quantity(concept, n, "command line", shown=t.shown() if t.converted else "")
        return Quantity(concept, n, f"{loc.path}:{loc.line}", loc, shown=t.shown() if t.converted else "")
    if d is not None:
        return Quantity(concept, _int(d.value), f"derived ({d.formula})" if d.formula else "derived")
    if concept == "train.data_parallel" and arithmetic.world_conflict(a):
        return Quantity(concept, None, arithmetic.world_conflict(a))  # stated, but in conflict: not "not found"
    return Quantity(concept, None, "not found")


def batch_steps(model: RunModel) -> Picture:
    """The batch arithmetic of one run, step by step, as ``trimtab.resolve.arithmetic`` computed it (the
    same steps the BAT rules and ``explain`` read). A step whose inputs are missing is shown as
    unknown, never as broken."""
    a = arithmetic.of(model)
    q = {c: quantity(a, c) for c in ("batch.prompts", "rollout.group_size", "batch.rollouts", "batch.mini",
                                     "batch.micro_per_gpu", "batch.grad_accum", "train.data_parallel",
                                     "optim.epochs", "optim.updates_per_step", "cluster.world_size")}
    P, G = q["batch.prompts"].value, q["rollout.group_size"].value
    R, M = q["batch.rollouts"].value, q["batch.mini"].value
    u, A, D = q["batch.micro_per_gpu"].value, q["batch.grad_accum"].value, q["train.data_parallel"].value
    E = q["optim.epochs"].value
    stated_R = model.values.get("batch.rollouts") is not None
    steps = [
        Step("prompts", "Prompts per step", f"{_v(P)} unique prompts per training step", [q["batch.prompts"]],
             known=P is not None),
        Step("groups", "Groups of G completions",
             f"each prompt is sampled {_v(G)} times: {_v(P)} groups of {_v(G)}", [q["rollout.group_size"]],
             known=G is not None),
    ]
    comp = Step("completions", "Completions per step", "", [q["batch.rollouts"]])
    s = a.step("completions")
    if s is not None and s.agrees is False:
        comp.broken = f"{R} completions are stated, but {P} prompts \u00d7 {G} = {s.value}"
        comp.remainder = abs(R - s.value)
        comp.text = f"stated {R}; {P} \u00d7 {G} = {s.value}"
    else:
        comp.text = f"{_v(P)} \u00d7 {_v(G)} = {_v(R)} completions" if not stated_R else f"{_v(R)} completions"
        comp.known = R is not None
    steps.append(comp)
    mini = Step("mini", "Mini-batches", "", [q["batch.mini"]])
    s = a.step("mini")
    if s is not None and s.divides is False:
        k = s.parts
        mini.broken = f"{R} completions do not split into mini-batches of {M}: {_x(s.formula)}"
        mini.remainder = s.remainder
        mini.text = f"{_x(s.formula)}: {k} whole mini-batches, remainder {s.remainder}"
    elif s is not None:
        mini.text = f"{_x(s.formula)} = {s.value} mini-batch{'es' if s.value != 1 else ''} of {M}"
    elif M is not None and M <= 0:
        mini.broken, mini.text = f"a mini-batch of {M} completions", f"mini-batch {M}"
    else:
        mini.text = f"mini-batch of {_v(M)} completions; completions per step {_v(R)}"
        mini.known = False
    steps.append(mini)
    micro = Step("micro", "Per-rank micro-batches \u00d7 accumulation", "",
                 [q["train.data_parallel"], q["batch.micro_per_gpu"], q["batch.grad_accum"]])
    per_rank, acc, ranks = a.step("per_rank"), a.step("accum"), a.step("ranks")
    only = a.step("accum_only")  # no micro-batch stated: the accumulation alone splits the share of a rank
    if only is not None and only.divides is False:
        micro.broken = (f"a mini-batch of {M} over {D} ranks is {per_rank.value} per rank, which does not split "
                        f"into {A} accumulation steps: {_x(only.formula)}")
        micro.remainder = only.remainder
        micro.text = _x(only.formula)
    elif per_rank is not None and acc is not None or per_rank is not None and per_rank.divides is False:
        bad = per_rank if per_rank.divides is False else acc
        if bad.divides is False:
            micro.broken = (f"a mini-batch of {M} does not split into micro-batches of {_v(u)} on {D} ranks: "
                            f"{_x(bad.formula)}")
            micro.remainder = bad.remainder
            micro.text = _x(bad.formula)
        else:
            micro.text = f"{_x(acc.formula)} = {acc.value} accumulation steps"
            if acc.agrees is False:
                micro.broken = f"accumulation {A} is stated, but {_x(acc.formula)} = {acc.value}"
                micro.remainder = abs(A - acc.value)
                micro.text += f"; stated {A}"
            A = acc.value if acc.agrees is not False else A
    else:
        micro.text = (f"{_v(D)} data-parallel ranks \u00d7 {_v(u)} per micro-batch \u00d7 {_v(A)} accumulation "
                      f"steps")
        micro.known = False
        if ranks is not None and ranks.divides is False:
            # the ranks themselves cannot be counted: the world does not split into model-parallel groups
            world, X = ranks.terms[0].whole, a.step("replica").value
            group = " \u00d7 ".join(str(t.whole) for t in ranks.terms[1:]) if len(ranks.terms) > 2 else str(X)
            k, r = ranks.parts, ranks.remainder
            micro.broken = (f"{world} GPUs do not split into model-parallel groups of {group}: "
                            f"{world} = {k} \u00d7 {X} + {r}")
            micro.remainder = r
            micro.text = f"data-parallel ranks: {world} GPUs = {k} \u00d7 {X} + {r}"
            micro.known = True
    steps.append(micro)
    upd = Step("updates", "Optimiser updates per step", "", [q["optim.epochs"]])
    s, split = a.step("updates"), a.step("mini")
    if s is not None and s.divides is not False and not isinstance(s.value, float):
        k, e = split.parts, E or 1
        upd.text = (f"{k} mini-batch{'es' if k != 1 else ''} \u00d7 {e} epoch{'s' if e != 1 else ''} = "
                    f"{s.value} update{'s' if s.value != 1 else ''}")
        if s.agrees is False:
            upd.broken = f"{s.stated.whole} updates per step are stated, but {_x(s.formula)} = {s.value}"
    elif s is not None:
        k = split.parts
        upd.text = (f"{_x(s.formula)} = {arithmetic.fmt(s.value)} updates per step: not a whole number; "
                    f"{k} whole mini-batch{'es' if k != 1 else ''}, the {split.remainder} completions left over make no "
                    "whole mini-batch")
    else:
        upd.text = f"{_v(E)} epoch(s) over each step's completions"
        upd.known = False
    steps.append(upd)
    pic = Picture(steps, P, G, R, M, u, D, A, E)
    for key, whole, left in (("mini", "mini_parts", "mini_left"), ("lanes", "columns", "columns_left")):
        s = a.step(key)
        if s is not None and s.parts is not None:
            setattr(pic, whole, s.parts)
            setattr(pic, left, s.remainder or 0)
    return pic


def _v(n) -> str:
    return "?" if n is None else str(n)


@dataclass
class Budget:
    prompt: Quantity
    response: Quantity
    engine: Quantity
    model: Quantity
    broken: list[tuple[str, str, int]] = field(default_factory=list)  # (key, why, excess)


def budget_words(b: Budget) -> str:
    """What a budget with nothing broken says: what was compared with what, or what is missing."""
    lengths = [x.concept for x in (b.prompt, b.response) if x.value is None]
    windows = [x for x in (b.engine, b.model) if x.value is not None]
    if lengths:
        return f"not found: {', '.join(lengths)}; nothing to compare"
    if not windows:
        return (f"no context window found ({b.engine.concept}, {b.model.concept}): prompt + response "
                "is compared with nothing")
    return "prompt + response fit " + " and ".join(f"{x.concept} {num(x.value)}" for x in windows)


def token_budget(model: RunModel) -> Budget:
    """The token budget against each context window, as ``trimtab.resolve.arithmetic`` computed it (the
    steps LEN-2 and LEN-3 read)."""
    a = arithmetic.of(model)
    b = Budget(quantity(a, "length.prompt_max"), quantity(a, "length.response_max"),
               quantity(a, "rollout.context_max"), quantity(a, "model.context_max"))
    for key, name in (("fit_engine", "engine"), ("fit_model", "model")):
        s = a.step(key)
        if s is None or not s.broken:
            continue
        limit = s.terms[-1].whole
        if len(s.terms) == 3 and s.terms[0].whole >= limit:
            why = f"the prompt budget of {s.terms[0].whole} tokens fills the {name} context of {limit}: no room for " \
                  "any response"
        elif len(s.terms) == 3:
            why = f"prompt {s.terms[0].whole} + response {s.terms[1].whole} = {s.value} tokens exceed the {name} " \
                  f"context of {limit} by {s.excess}"
        else:
            why = f"the response budget of {s.value} tokens fills the {name} context of {limit}: no room for the prompt"
        b.broken.append((f"sequence-{name}", why, s.excess))
        break
    s = a.step("engine_model")
    if s is not None and s.broken:
        b.broken.append(("engine-model", f"the engine context {s.value} exceeds the model context "
                                         f"{s.terms[1].whole} by {s.excess}", s.excess))
    return b
