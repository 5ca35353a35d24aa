"""BAT: batch and topology arithmetic.

Every rule reads resolved concepts only (stated values and what ``derive()`` computed from them),
so it applies to any trainer a key map can describe. Derived quantities are built only on
settled values: where a stated value and its factors disagree, one rule reports the
disagreement and the rules downstream stay silent instead of repeating it.
"""
from __future__ import annotations

from trimtab import rule
from trimtab.model import whole
from trimtab.arithmetic import (PARALLEL, either, lcm, near_divisors, near_multiples, related, remainder,
                                settled)

_GROUP_RELATIVE_BASIS = ("Group-relative estimators sample a group of completions per prompt and use the "
                         "group's statistics as the baseline (Shao et al. 2024, arXiv:2402.03300, section 4.2: 64 "
                         "outputs per question and a training batch size of 1024; that the batch counts "
                         "completions, 16 prompts of 64, is trimtab's reading, not the paper's words).")

_NAMES = {
    "train.tensor_parallel": "tensor-parallel degree",
    "train.pipeline_parallel": "pipeline-parallel degree",
    "train.context_parallel": "context-parallel degree",
}


@rule(id="BAT-1", name="completions-product-mismatch", level="error",
      summary="Stated completions per step differ from prompts per step x group size.",
      rationale="Completions per step are prompts per step times completions per prompt (the group size); a "
      "recipe gives them as such (Guo et al. 2025, arXiv:2501.12948v2, the revised version, from memory: "
      "32 questions x 16 outputs, a training batch size of 512). Where the product and both factors are "
      "written, a trainer uses one of them and silently ignores the others, so the run is not the one "
      "its config describes.",
      needs=("batch.rollouts", "batch.prompts", "rollout.group_size"))
def completions_product(ctx):
    m = ctx.model
    r, p, g = (whole(getattr(m.values.get(c), "value", None))
               for c in ("batch.rollouts", "batch.prompts", "rollout.group_size"))
    if not (r and p and g) or r == p * g:
        return
    hints = [f"completions per step of {p * g}"]
    if r % g == 0:
        hints.append(f"{r // g} prompts per step")
    if r % p == 0:
        hints.append(f"a group size of {r // p}")
    yield ctx.finding(
        f"{r} completions per step are stated, but {p} prompts per step x {g} completions per prompt = "
        f"{p * g}", m.values["batch.rollouts"].location,
        related=related(m, "batch.prompts", "rollout.group_size"),
        suggestion="use " + ", or ".join(hints), subject=(r, p, g))


@rule(id="BAT-2", name="partial-mini-batch", level="error",
      summary="Completions per step do not split into whole mini-batches.",
      rationale="Each training step's completions are cut into mini-batches, one optimiser update each; "
      "updates per step = completions per step / mini-batch x epochs must be a whole number (PPO's "
      "own recipe, Schulman et al. 2017, arXiv:1707.06347, appendix A, from memory: 2048 timesteps "
      "in mini-batches of 64 for 10 epochs in the continuous-control setting, Table 3; 128 x 8 actors "
      "in mini-batches of 32 x 8 for 3 epochs in the game setting, Table 5). A "
      "remainder is dropped or becomes a short last update, depending on the trainer; a mini-batch "
      "larger than the step makes no whole update at all. A stated updates-per-step that disagrees "
      "with the arithmetic is reported too.",
      needs=("batch.mini",))
def partial_mini_batch(ctx):
    m = ctx.model
    rollouts, mini = settled(m, "batch.rollouts"), settled(m, "batch.mini")
    if not rollouts or not mini:
        return
    epochs = settled(m, "optim.epochs") or 1
    loc = m.values["batch.mini"].location if "batch.mini" in m.values else m.loc("batch.mini")
    if rollouts % mini:
        gs = settled(m, "rollout.group_size") or 1
        dp = settled(m, "train.data_parallel")
        micro = settled(m, "batch.micro_per_gpu")
        unit = lcm(gs if gs > 1 else 1, (micro or 1) * (dp or 1))
        minis = near_divisors(rollouts, mini, unit) or near_divisors(rollouts, mini)
        steps = near_multiples(rollouts, lcm(mini, gs))
        hints = []
        if minis:
            hints.append(f"a mini-batch of {either(minis)}")
        if steps:
            hints.append(f"{either(steps)} completions per step")
        if mini > rollouts:
            msg = (f"a mini-batch of {mini} completions is larger than the {rollouts} completions per step: "
                   f"not one whole update per step")
        else:
            msg = (f"{rollouts} completions per step do not split into mini-batches of {mini}: "
                   f"{remainder(rollouts, mini)}; updates per step would be {rollouts} / {mini} x {epochs} = "
                   f"{rollouts * epochs / mini:.2f}")
        yield ctx.finding(msg, loc, related=related(m, "batch.rollouts", "optim.epochs"),
                          suggestion="use " + ", or ".join(hints) if hints else "", subject=(rollouts, mini))
        return
    stated = m.values.get("optim.updates_per_step")
    derived = m.derived.get("optim.updates_per_step")
    if stated is not None and derived is not None and whole(stated.value) and stated.value != derived.value:
        yield ctx.finding(
            f"{_show(stated.value)} updates per step are stated, but {derived.note} = {derived.value}",
            stated.location, related=related(m, "batch.rollouts", "batch.mini", "optim.epochs"),
            suggestion=f"use {derived.value} updates per step, or change the mini-batch or the epochs",
            subject=(stated.value, derived.value))


def _show(x):
    return str(int(x)) if isinstance(x, float) and x.is_integer() else str(x)


@rule(id="BAT-3", name="micro-batch-misfit", level="error",
      summary="A mini-batch does not split into micro-batch per GPU x data-parallel ranks x accumulation.",
      rationale="One optimiser update consumes a mini-batch: every data-parallel rank runs whole micro-batches and "
      "accumulates their gradients, so mini-batch = micro-batch per GPU x ranks x accumulation steps "
      "(common practice of data-parallel training). A remainder either crashes the launch or leaves "
      "ranks with unequal work; a stated accumulation that differs from the implied one changes the "
      "effective batch size.",
      needs=("batch.mini",))
def micro_batch_fit(ctx):
    m = ctx.model
    mini, dp = settled(m, "batch.mini"), settled(m, "train.data_parallel")
    micro = settled(m, "batch.micro_per_gpu")
    accum_v = m.values.get("batch.grad_accum")
    accum = whole(accum_v.value) if accum_v is not None else None
    if not mini or not dp:
        return
    gs = settled(m, "rollout.group_size") or 1
    rollouts = settled(m, "batch.rollouts")

    def minis(unit):
        return (near_divisors(rollouts, mini, unit) if rollouts else []) or near_multiples(mini, unit)

    mini_loc = m.values["batch.mini"].location if "batch.mini" in m.values else m.loc("batch.mini")
    rel = related(m, "train.data_parallel")
    if mini % dp:
        unit = lcm(dp * (micro or 1), gs if gs > 1 else 1)
        yield ctx.finding(
            f"a mini-batch of {mini} completions does not split over {dp} data-parallel ranks: "
            f"{remainder(mini, dp)}", mini_loc, related=rel,
            suggestion=f"use a mini-batch of {either(minis(unit))}", subject=(mini, dp))
        return
    share = mini // dp
    if micro:
        micro_v = m.values.get("batch.micro_per_gpu")
        if share % micro:
            unit = lcm(dp * micro, gs if gs > 1 else 1)
            micros = [d for d in near_divisors(share, micro) if d < micro][:1]
            hints = [f"a mini-batch of {either(minis(unit))}"]
            if micros:
                hints.append(f"a micro-batch of {micros[0]}")
            loc = micro_v.location if micro_v is not None else mini_loc
            yield ctx.finding(
                f"a mini-batch of {mini} completions over {dp} data-parallel ranks is {share} per rank, which "
                f"does not split into micro-batches of {micro}: {remainder(share, micro)}", loc,
                related=related(m, "batch.mini", "train.data_parallel"),
                suggestion="use " + ", or ".join(hints), subject=(mini, dp, micro))
            return
        implied = share // micro
        if accum_v is not None and accum and accum != implied:
            yield ctx.finding(
                f"gradient accumulation is stated as {accum}, but a mini-batch of {mini} = {micro} per GPU x "
                f"{dp} ranks x {implied} accumulation steps", accum_v.location,
                related=related(m, "batch.mini", "batch.micro_per_gpu", "train.data_parallel"),
                suggestion=f"use {implied} accumulation steps, or a mini-batch of {micro * dp * accum}",
                subject=(mini, dp, micro, accum))
        return
    if accum_v is not None and accum and share % accum:
        accums = [d for d in near_divisors(share, accum)]
        yield ctx.finding(
            f"a mini-batch of {mini} completions over {dp} data-parallel ranks is {share} per rank, which "
            f"does not split into {accum} accumulation steps: {remainder(share, accum)}", accum_v.location,
            related=related(m, "batch.mini", "train.data_parallel"),
            suggestion=f"use {either(accums)} accumulation steps" if accums else "", subject=(mini, dp, accum))


@rule(id="BAT-4", name="world-size-mismatch", level="error",
      summary="A stated world size differs from nodes x GPUs per node.",
      rationale="The training world is the job's machines times the GPUs on each (common practice of "
      "distributed launchers). A stated world size that disagrees means either the launcher or the "
      "batch arithmetic works with the wrong number of ranks.",
      needs=("cluster.world_size", "cluster.nodes", "cluster.gpus_per_node"))
def world_size(ctx):
    m = ctx.model
    w, n, g = (whole(getattr(m.values.get(c), "value", None))
               for c in ("cluster.world_size", "cluster.nodes", "cluster.gpus_per_node"))
    if not (w and n and g) or w == n * g:
        return
    hints = [f"a world size of {n * g}"]
    if w % n == 0:
        hints.append(f"{w // n} GPUs per node")
    yield ctx.finding(f"the world size is stated as {w}, but {n} nodes x {g} GPUs per node = {n * g}",
                      m.values["cluster.world_size"].location,
                      related=related(m, "cluster.nodes", "cluster.gpus_per_node"),
                      suggestion="use " + ", or ".join(hints), subject=(w, n, g))


def _culprit(world: int, degrees: dict[str, int]) -> str:
    """The model-parallel degree most likely wrong: one whose removal makes the world divide,
    preferring one that does not itself divide the world, then the largest."""
    par = 1
    for d in degrees.values():
        par *= d
    fixes = [c for c, d in degrees.items() if world % (par // d) == 0]
    pool = fixes or list(degrees)
    return max(pool, key=lambda c: (world % degrees[c] != 0, degrees[c], -PARALLEL.index(c)))


@rule(id="BAT-5", name="model-parallel-misfit", level="error",
      summary="The world size does not divide by tensor x pipeline x context parallel, or leaves no "
      "data-parallel rank.",
      rationale="Data-parallel ranks = world size / (tensor x pipeline x context parallel degree) must be a whole "
      "number of at least 1 (common practice of model-parallel training: every replica of the model "
      "occupies the same number of GPUs). A stated data-parallel size that disagrees is reported too.")
def model_parallel(ctx):
    m = ctx.model
    world = settled(m, "cluster.world_size")
    if not world:
        return
    degrees = {c: settled(m, c) for c in PARALLEL if c in m.values}
    if any(v is None for v in degrees.values()):
        return  # not positive whole numbers: BAT-8 reports them
    par = 1
    for d in degrees.values():
        par *= d
    product = " x ".join(f"{_NAMES[c].split('-')[0]} {d}" for c, d in degrees.items())
    if degrees and (par > world or world % par):
        culprit = _culprit(world, degrees)
        rest = par // degrees[culprit]
        options = [d for d in near_divisors(world // rest, degrees[culprit])] if world % rest == 0 else []
        hints = []
        if options:
            hints.append(f"a {_NAMES[culprit]} of {either(options)}")
        hints.append(f"a world size of {either(near_multiples(world, par))}")
        by = f"{product} = {par}" if len(degrees) > 1 else f"a {_NAMES[culprit]} of {par}"
        if par > world:
            msg = (f"{by} needs {par} GPUs per model replica, but the world has {world} GPUs: "
                   "no data-parallel rank")
        else:
            msg = f"a world of {world} GPUs does not divide by {by}: {remainder(world, par)}"
        yield ctx.finding(msg, m.values[culprit].location,
                          related=related(m, "cluster.world_size", *[c for c in degrees if c != culprit]),
                          suggestion="use " + ", or ".join(hints), subject=(world, tuple(degrees.values())))
        return
    stated = m.values.get("train.data_parallel")
    if stated is not None and whole(stated.value) and stated.value != world // par:
        yield ctx.finding(
            f"{_show(stated.value)} data-parallel ranks are stated, but {world} GPUs / {par} per model replica = "
            f"{world // par}", stated.location, related=related(m, "cluster.world_size", *degrees),
            suggestion=f"use {world // par} data-parallel ranks", subject=(stated.value, world, par))


@rule(id="BAT-6", name="rollout-parallel-misfit", level="error",
      summary="The rollout engine's tensor-parallel degree does not divide the GPUs it runs on.",
      rationale="The inference engine runs whole instances of the model, each over as many GPUs as its "
      "tensor-parallel degree; the GPUs it is given (rollout.gpus, else the training world) must divide "
      "by that degree, or some GPUs idle and the launch may refuse (common practice).",
      needs=("rollout.tensor_parallel",))
def rollout_parallel(ctx):
    m = ctx.model
    rt = settled(m, "rollout.tensor_parallel")
    gpus_c = "rollout.gpus" if "rollout.gpus" in m.values else "cluster.world_size"
    gpus = settled(m, gpus_c)
    if not rt or not gpus or gpus % rt == 0:
        return
    label = "the rollout engine" if gpus_c == "rollout.gpus" else "the world"
    if rt > gpus:
        msg = f"the rollout engine's tensor-parallel degree {rt} needs {rt} GPUs, but {label} has {gpus}"
    else:
        msg = (f"the rollout engine's tensor-parallel degree {rt} does not divide the {gpus} GPUs of {label}: "
               f"{remainder(gpus, rt)}")
    options = near_divisors(gpus, rt)
    yield ctx.finding(msg, m.values["rollout.tensor_parallel"].location, related=related(m, gpus_c),
                      suggestion=f"use a rollout tensor-parallel degree of {either(options)}" if options else "",
                      subject=(rt, gpus))


@rule(id="BAT-7", name="group-split", level="error",
      summary="A batch that is split before advantages are computed does not hold whole groups.",
      rationale=_GROUP_RELATIVE_BASIS + " A group's completions must stay together until its baseline is "
      "computed. Completions per step that are not a multiple of the group size cut the last group "
      "(error). Where advantages are normalised per rank or per update, a per-rank share or a "
      "mini-batch that is not whole groups mixes two groups' baselines (warning; options check_ranks "
      "and check_mini turn these parts off for trainers that normalise over the whole step).",
      needs=("rollout.group_size",), options={"check_ranks": True, "check_mini": True})
def group_split(ctx):
    m = ctx.model
    gs = settled(m, "rollout.group_size")
    if not gs or gs < 2:
        return
    rel_g = related(m, "rollout.group_size")
    stated = m.values.get("batch.rollouts")
    if stated is not None and "batch.prompts" not in m.values:
        r = settled(m, "batch.rollouts")
        if r and r % gs:
            yield ctx.finding(
                f"{r} completions per step are not whole groups of {gs}: {remainder(r, gs)}; the last group "
                f"is {gs - r % gs} completions short", stated.location, related=rel_g,
                suggestion=f"use {either(near_multiples(r, gs))} completions per step", subject=(r, gs))
            return
    rollouts, dp = settled(m, "batch.rollouts"), settled(m, "train.data_parallel")
    if ctx.options["check_ranks"] and rollouts and dp and dp > 1 and rollouts % dp == 0 and rollouts % gs == 0:
        share = rollouts // dp
        if share % gs:
            prompts = rollouts // gs
            where_c = "batch.prompts" if "batch.prompts" in m.values else "batch.rollouts"
            yield ctx.finding(
                f"{rollouts} completions per step over {dp} data-parallel ranks are {share} per rank, not "
                f"whole groups of {gs}: {remainder(share, gs)}; a group is split across ranks, "
                f"{gs - share % gs} completions short on each",
                m.values[where_c].location if where_c in m.values else m.loc("batch.rollouts"),
                level="warning", related=rel_g + related(m, "train.data_parallel"),
                suggestion=f"use {either(near_multiples(prompts, dp))} prompts per step (a multiple of the "
                           f"{dp} ranks)", subject=("ranks", rollouts, dp, gs))
    mini = settled(m, "batch.mini")
    if ctx.options["check_mini"] and mini and mini % gs and "batch.mini" in m.values:
        unit = lcm(gs, (settled(m, "batch.micro_per_gpu") or 1) * (dp or 1))
        options = (near_divisors(rollouts, mini, unit) if rollouts else []) or near_multiples(mini, unit)
        yield ctx.finding(
            f"a mini-batch of {mini} completions is not whole groups of {gs}: {remainder(mini, gs)}; "
            f"one group is cut across two updates, {gs - mini % gs} completions short",
            m.values["batch.mini"].location, level="warning", related=rel_g,
            suggestion=f"use a mini-batch of {either(options)}", subject=("mini", mini, gs))


COUNTS = ("cluster.nodes", "cluster.gpus_per_node", "cluster.world_size", *PARALLEL, "train.data_parallel",
          "rollout.tensor_parallel", "rollout.gpus", "batch.prompts", "rollout.group_size", "batch.rollouts",
          "batch.mini", "batch.micro_per_gpu", "batch.grad_accum", "optim.epochs", "optim.updates_per_step")


@rule(id="BAT-8", name="count-not-positive", level="error",
      summary="A batch or topology count is zero, negative, or not whole after unit conversion.",
      rationale="GPUs, parallel degrees, prompts, completions, micro-batches and accumulation steps are counts: a "
      "zero or negative one cannot launch, and one that a key map's unit conversion (per prompt / per "
      "GPU) turns into a fraction does not describe whole completions. A count that cannot be converted "
      "because the group size or the ranks are unknown is a note: the arithmetic rules skip it.")
def count_not_positive(ctx):
    m = ctx.model
    for c in COUNTS:
        v = m.values.get(c)
        if v is None:
            continue
        if v.value is None and v.note:
            yield ctx.finding(f"{c}: {v.note}; the arithmetic rules skip it", v.location, level="note",
                              subject=("unconverted", c))
            continue
        n = v.number
        if n is None:
            continue  # not a number: VOC-2 reports it
        if isinstance(n, float) and not n.is_integer():
            if v.raw is not None and v.raw != v.value:
                yield ctx.finding(f"{c}: {v.note} = {n:g}, not a whole count",
                                  v.location, subject=(c, v.raw, n))
            continue  # a fraction as written: VOC-2 reports it
        if n <= 0:
            yield ctx.finding(f"{c} = {_show(n)}: a count must be a positive whole number", v.location,
                              subject=(c, n))

