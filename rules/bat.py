"""BAT: batch and topology arithmetic.

Every rule reads resolved concepts only (stated values and what ``derive()`` computed from them),
so it applies to any trainer a key map can describe. Derived quantities are built only on
settled values: where a stated value and its factors disagree, one rule reports the
disagreement and the rules downstream stay silent instead of repeating it.
"""
from __future__ import annotations

from trimtab import rule
from trimtab.resolve import arithmetic
from trimtab.resolve.arithmetic import PARALLEL, either, judge, keymap_line, lcm, near_divisors, near_multiples, related, remainder

_GROUP_RELATIVE_BASIS = ("Group-relative estimators sample a group of completions per prompt and use the "
                         "group's statistics as the baseline (Shao et al. 2024, arXiv:2402.03300, "
                         "section 4.2, from memory: 64 outputs per question and a training batch size of 1024; that the batch counts "
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
    verdict = judge(m)
    a = verdict.arithmetic
    step = a.step("completions")
    if step is None or not verdict.reportable(step) or not step.stated:
        return
    r, p, g = step.stated.whole, a.stated("batch.prompts"), a.stated("rollout.group_size")
    if not (r and p and g):
        return
    hints = [f"completions per step of {p * g}"]
    if r % g == 0:
        hints.append(f"{r // g} prompts per step")
    if r % p == 0:
        hints.append(f"a group size of {r // p}")
    yield ctx.finding(
        f"{r} completions per step are stated, but {p} prompts per step x {g} completions per prompt = "
        f"{p * g}{verdict.suffix(step)}", m.values["batch.rollouts"].location,
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
    verdict = judge(m)
    a = verdict.arithmetic
    step = a.step("mini")
    if step is None or step.disputed:
        return
    rollouts, mini = a.value("batch.rollouts"), a.value("batch.mini")
    loc = m.values["batch.mini"].location if "batch.mini" in m.values else m.loc("batch.mini")
    if step.divides is False:
        if not verdict.reportable(step):
            return
        upd = a.step("updates")
        gs = a.value("rollout.group_size") or 1
        dp = a.value("train.data_parallel")
        micro = a.value("batch.micro_per_gpu")
        unit = lcm(gs if gs > 1 else 1, (micro or 1) * (dp or 1))
        minis = near_divisors(rollouts, mini, unit) or near_divisors(rollouts, mini)
        steps = near_multiples(rollouts, lcm(mini, gs))
        hints = []
        if minis:
            hints.append(f"a mini-batch of {_in_own_unit(a, 'batch.mini', minis)}")
        if steps:
            hints.append(f"{either(steps)} completions per step")
        if mini > rollouts:
            msg = (f"a mini-batch of {mini} completions is larger than the {rollouts} completions per step: "
                   f"not one whole update per step")
        else:
            msg = f"{rollouts} completions per step do not split into mini-batches of {mini}: {step.formula}"
            if upd is not None:
                msg += f"; updates per step would be {upd.formula} = {arithmetic.fmt(upd.value)}"
        yield ctx.finding(msg + verdict.suffix(step), loc, related=related(m, "batch.rollouts", "optim.epochs"),
                          suggestion="use " + ", or ".join(hints) if hints else "", subject=(rollouts, mini))
        return
    upd = a.step("updates")
    stated = m.values.get("optim.updates_per_step")
    if upd is not None and stated is not None and upd.agrees is False and verdict.reportable(upd):
        yield ctx.finding(
            f"{_show(stated.value)} updates per step are stated, but {upd.formula} = {upd.value}{verdict.suffix(upd)}",
            stated.location, related=related(m, "batch.rollouts", "batch.mini", "optim.epochs"),
            suggestion=f"use {upd.value} updates per step, or change the mini-batch or the epochs",
            subject=(stated.value, upd.value))


def _in_own_unit(a, concept: str, values: list[int]) -> str:
    """Suggested values of a count, in the unit its key is written in (a key counted in prompts
    gets prompts): each completion count converted back, keeping only whole ones."""
    t = a.term(concept)
    if t is None or not t.converted or t.value is None or not t.written:
        return either(values)
    ratio = t.value / t.written  # completions (global) per unit as written
    back = [v / ratio for v in values]
    whole_back = [int(b) for b in back if abs(b - round(b)) < 1e-9 and b > 0]
    if not whole_back:
        return either(values) + " completions"
    noun = t.read_as.noun(2) + (" per GPU" if t.read_as.scope == "gpu" else "")
    return " or ".join(f"{b} {noun} ({int(b * ratio)} completions)" for b in whole_back)


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
    verdict = judge(m)
    a = verdict.arithmetic
    mini, dp = a.value("batch.mini"), a.value("train.data_parallel")
    micro = a.value("batch.micro_per_gpu")
    accum_v = m.values.get("batch.grad_accum")
    accum = a.stated("batch.grad_accum")
    per_rank = a.step("per_rank")
    if per_rank is None:
        return
    gs = a.value("rollout.group_size") or 1
    rollouts = a.value("batch.rollouts")

    def minis(unit):
        found = (near_divisors(rollouts, mini, unit) if rollouts else []) or near_multiples(mini, unit)
        return _own(a, found)

    mini_loc = m.values["batch.mini"].location if "batch.mini" in m.values else m.loc("batch.mini")
    if per_rank.divides is False:
        if not verdict.reportable(per_rank):
            return
        unit = lcm(dp * (micro or 1), gs if gs > 1 else 1)
        yield ctx.finding(
            f"a mini-batch of {mini} completions does not split over {dp} data-parallel ranks: "
            f"{per_rank.formula}{verdict.suffix(per_rank)}", mini_loc, related=related(m, "train.data_parallel"),
            suggestion=f"use a mini-batch of {minis(unit)}", subject=(mini, dp))
        return
    share = per_rank.value
    step = a.step("accum")
    if step is not None:
        micro_v = m.values.get("batch.micro_per_gpu")
        if step.divides is False:
            if not verdict.reportable(step):
                return
            unit = lcm(dp * micro, gs if gs > 1 else 1)
            micros = [d for d in near_divisors(share, micro) if d < micro][:1]
            hints = [f"a mini-batch of {minis(unit)}"]
            if micros:
                hints.append(f"a micro-batch of {_own(a, micros, 'batch.micro_per_gpu')}")
            loc = micro_v.location if micro_v is not None else mini_loc
            yield ctx.finding(
                f"a mini-batch of {mini} completions over {dp} data-parallel ranks is {share} per rank, which "
                f"does not split into micro-batches of {micro}: {step.formula}{verdict.suffix(step)}", loc,
                related=related(m, "batch.mini", "train.data_parallel"),
                suggestion="use " + ", or ".join(hints), subject=(mini, dp, micro))
            return
        implied = step.value
        if accum_v is not None and step.agrees is False and verdict.reportable(step):
            yield ctx.finding(
                f"gradient accumulation is stated as {accum}, but a mini-batch of {mini} = {micro} per GPU x "
                f"{dp} ranks x {implied} accumulation steps{verdict.suffix(step)}", accum_v.location,
                related=related(m, "batch.mini", "batch.micro_per_gpu", "train.data_parallel"),
                suggestion=f"use {implied} accumulation steps, or a mini-batch of "
                           f"{_own(a, [micro * dp * accum])}",
                subject=(mini, dp, micro, accum))
        return
    step = a.step("accum_only")
    if step is not None and step.divides is False and verdict.reportable(step):
        accums = [d for d in near_divisors(share, accum)]
        yield ctx.finding(
            f"a mini-batch of {mini} completions over {dp} data-parallel ranks is {share} per rank, which "
            f"does not split into {accum} accumulation steps: {step.formula}{verdict.suffix(step)}", accum_v.location,
            related=related(m, "batch.mini", "train.data_parallel"),
            suggestion=f"use {either(accums)} accumulation steps" if accums else "", subject=(mini, dp, accum))


def _own(a, values, concept="batch.mini"):
    return _in_own_unit(a, concept, values)


@rule(id="BAT-4", name="world-size-mismatch", level="error",
      summary="A stated world size differs from nodes x GPUs per node.",
      rationale="The training world is the job's machines times the GPUs on each (common practice of "
      "distributed launchers). A stated world size that disagrees means either the launcher or the "
      "batch arithmetic works with the wrong number of ranks.",
      needs=("cluster.world_size", "cluster.nodes", "cluster.gpus_per_node"))
def world_size(ctx):
    m = ctx.model
    a = arithmetic.of(m)
    step = a.step("world")
    if step is None or step.agrees is not False:
        return
    w, n, g = step.stated.whole, a.value("cluster.nodes"), a.value("cluster.gpus_per_node")
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
    a = arithmetic.of(m)
    step = a.step("ranks")
    if step is None:
        return  # no world size, or a degree that is not a positive whole number (BAT-8 reports it)
    world = a.value("cluster.world_size")
    degrees = {t.concept: t.whole for t in step.terms[1:]}
    par = a.step("replica").value if "replica" in a.steps else 1
    product = " x ".join(f"{_NAMES[c].split('-')[0]} {d}" for c, d in degrees.items())
    if step.divides is False:
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
            msg = f"a world of {world} GPUs does not divide by {by}: {step.formula}"
        yield ctx.finding(msg, m.values[culprit].location,
                          related=related(m, "cluster.world_size", *[c for c in degrees if c != culprit]),
                          suggestion="use " + ", or ".join(hints), subject=(world, tuple(degrees.values())))
        return
    stated = m.values.get("train.data_parallel")
    if stated is not None and step.agrees is False:
        yield ctx.finding(
            f"{_show(stated.value)} data-parallel ranks are stated, but {world} GPUs / {par} per model replica = "
            f"{step.value}", stated.location, related=related(m, "cluster.world_size", *degrees),
            suggestion=f"use {step.value} data-parallel ranks", subject=(stated.value, world, par))


@rule(id="BAT-6", name="rollout-parallel-misfit", level="error",
      summary="The rollout engine's tensor-parallel degree does not divide the GPUs it runs on.",
      rationale="The inference engine runs whole instances of the model, each over as many GPUs as its "
      "tensor-parallel degree; the GPUs it is given (rollout.gpus, else the training world) must divide "
      "by that degree, or some GPUs idle and the launch may refuse (common practice).",
      needs=("rollout.tensor_parallel",))
def rollout_parallel(ctx):
    m = ctx.model
    step = arithmetic.of(m).step("engines")
    if step is None or step.divides is not False:
        return
    gpus_t, rt_t = step.terms
    gpus_c, gpus, rt = gpus_t.concept, gpus_t.whole, rt_t.whole
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
    verdict = judge(m)
    a = verdict.arithmetic
    gs = a.value("rollout.group_size")
    if not gs or gs < 2:
        return

    def rel_g():  # perf: worked out only for a finding (related reads the run's sources)
        return related(m, "rollout.group_size")

    stated = m.values.get("batch.rollouts")
    step = a.step("prompts")
    if stated is not None and step is not None and step.divides is False:
        if verdict.reportable(step):
            r = a.value("batch.rollouts")
            yield ctx.finding(
                f"{r} completions per step are not whole groups of {gs}: {step.formula}; the last group "
                f"is {gs - r % gs} completions short{verdict.suffix(step)}", stated.location, related=rel_g(),
                suggestion=f"use {either(near_multiples(r, gs))} completions per step", subject=(r, gs))
        return
    rollouts, dp = a.value("batch.rollouts"), a.value("train.data_parallel")
    step = a.step("groups_ranks")
    if ctx.options["check_ranks"] and step is not None and step.divides is False and verdict.reportable(step):
        share = rollouts // dp
        prompts = rollouts // gs
        where_c = "batch.prompts" if "batch.prompts" in m.values else "batch.rollouts"
        yield ctx.finding(
            f"{rollouts} completions per step over {dp} data-parallel ranks are {share} per rank, not "
            f"whole groups of {gs}: {step.formula}; a group is split across ranks, "
            f"{gs - share % gs} completions short on each{verdict.suffix(step)}",
            m.values[where_c].location if where_c in m.values else m.loc("batch.rollouts"),
            level="warning", related=rel_g() + related(m, "train.data_parallel"),
            suggestion=f"use {either(near_multiples(prompts, dp))} prompts per step (a multiple of the "
                       f"{dp} ranks)", subject=("ranks", rollouts, dp, gs))
    mini = a.value("batch.mini")
    step = a.step("groups_mini")
    if ctx.options["check_mini"] and step is not None and step.divides is False and "batch.mini" in m.values \
            and verdict.reportable(step):
        unit = lcm(gs, (a.value("batch.micro_per_gpu") or 1) * (dp or 1))
        options = (near_divisors(rollouts, mini, unit) if rollouts else []) or near_multiples(mini, unit)
        yield ctx.finding(
            f"a mini-batch of {mini} completions is not whole groups of {gs}: {step.formula}; "
            f"one group is cut across two updates, {gs - mini % gs} completions short{verdict.suffix(step)}",
            m.values["batch.mini"].location, level="warning", related=rel_g(),
            suggestion=f"use a mini-batch of {_own(a, options)}", subject=("mini", mini, gs))


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


@rule(id="BAT-9", name="unit-unsettled", level="note",
      summary="A batch count's unit is not stated, and the file's numbers are consistent under another reading "
      "than the usual one.",
      rationale="Trainers count batch keys differently: a rollout batch may be prompts or completions, a mini-batch "
      "prompts or completions, per GPU or over all ranks (common practice differs between trainers). Where "
      "neither a key map, the concept's own name nor the key's own words (per_gpu, n_prompts, ...) state "
      "the unit, trimtab evaluates every reading: an error or warning only when no reading is consistent; "
      "when the usual reading breaks and another holds, this note names the readings and the key-map line "
      "that settles it.")
def unit_unsettled(ctx):
    m = ctx.model
    verdict = judge(m)
    if not verdict.mute:
        return
    usual = verdict.arithmetic
    keys = [c for c, _u in usual.reading]
    first = m.values[keys[0]]
    def counts(a):
        shown = ", ".join(a.term(c).shown() for c, _u in a.reading if a.term(c).converted)
        return f" ({shown})" if shown else ""

    parts = [f"read as {usual.label()} (the usual reading): {'; '.join(arithmetic.breaks(usual))}"]
    fine = [a for a, status in verdict.considered if status == "consistent"]
    unknown = [a for a, status in verdict.considered if status == "unknown"]
    if fine:
        parts.append("consistent only " + " or ".join(f"as {a.label()}{counts(a)}" for a in fine))
    for a in unknown:
        missing = " and ".join(sorted({t.missing for t in a.terms.values() if t.missing and t.ambiguous}))
        parts.append(f"as {a.label()} it cannot be checked without {missing}")
    others = len(verdict.considered) - 1 - len(fine) - len(unknown)
    if others:
        parts.append(f"{others} other reading{'s' if others != 1 else ''} break{'' if others != 1 else 's'} too")
    supported = verdict.supported()
    names = ", ".join(f"{m.values[c].key} = {_show(m.values[c].raw)}" for c in keys)
    if len(supported) == 1:
        fix = "state the unit in the key map ([tool.trimtab.keys]): " + "; ".join(
            keymap_line(m.values[c], u) for c, u in supported[0].reading if len(arithmetic.admissible(m.values[c])) > 1)
    else:
        fix = "state the unit in the key map ([tool.trimtab.keys]), e.g. " + "; ".join(
            keymap_line(m.values[c], u) for c, u in (supported or [a for a, _s in verdict.considered[1:]])[0].reading)
    yield ctx.finding(f"{names}: the unit is not stated and the readings disagree; " + "; ".join(parts),
                      first.location, related=[m.values[c].location.with_message(f"{c}: unit not stated")
                                               for c in keys[1:]],
                      suggestion=fix, subject=("readings", tuple(keys)))

