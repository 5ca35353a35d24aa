"""SMP: sampling. A group-relative estimator learns only from the differences inside a group of
completions of one prompt; a group of one, or a group sampled deterministically, has none."""
from __future__ import annotations

from trimtab import rule
from trimtab.resolve.arithmetic import related, settled

_GROUPS = ("Published group sizes: 64 completions per prompt (Shao et al. 2024, arXiv:2402.03300) and 16 "
           "(Guo et al. 2025, arXiv:2501.12948v2, the revised version, from memory).")


def _estimator(model) -> str | None:
    return model.text("run.estimator")


@rule(id="SMP-1", name="group-too-small", level="error",
      summary="A group-relative estimator is given fewer than 2 completions per prompt (warning under min_group).",
      rationale="A group-relative estimator (GRPO, leave-one-out and their variants) uses the group's own "
      "completions as the baseline: with one completion per prompt the completion is its own baseline "
      "and every advantage is zero, so the policy never moves (error). A small group is a noisy "
      "baseline (warning below the option min_group, default 4: common practice; " + _GROUPS + ") The "
      "estimators treated as group-relative are the option group_relative.",
      needs=("rollout.group_size", "run.estimator"),
      options={"min_group": 4, "group_relative": ["grpo", "rloo", "dr_grpo", "dapo"]})
def group_too_small(ctx):
    m = ctx.model
    est = _estimator(m)
    g = m.values.get("rollout.group_size")
    gs = settled(m, "rollout.group_size")
    if est not in [e.lower() for e in ctx.options["group_relative"]] or g is None or not gs:
        return
    if gs >= 2 and gs >= ctx.options["min_group"]:
        return
    rel = related(m, "run.estimator")  # perf: only for a finding
    if gs < 2:
        yield ctx.finding(f"a group of {gs} completion per prompt under the group-relative estimator {est}: "
                          "every advantage is zero (each completion is its own group's mean)", g.location,
                          related=rel, suggestion=f"sample at least {max(2, ctx.options['min_group'])} "
                                                  "completions per prompt", subject=(est, gs))
    elif gs < ctx.options["min_group"]:
        yield ctx.finding(f"a group of {gs} completions per prompt under {est} is a noisy baseline "
                          f"(under min_group {ctx.options['min_group']})", g.location, level="warning",
                          related=rel, suggestion=f"sample {ctx.options['min_group']} or more completions "
                                                  "per prompt", subject=(est, gs))


@rule(id="SMP-2", name="deterministic-group", level="error",
      summary="Several completions per prompt are sampled deterministically (or nearly).",
      rationale="With more than one completion per prompt, temperature 0, greedy decoding (sampling off, or top-k "
      "of 1) makes every completion of a group the same, so rewards inside a group are equal and a "
      "group-relative advantage is zero (error). A temperature below the option min_temperature "
      "(default 0.3, common practice: published group-relative recipes sample at temperature near 1) "
      "leaves little variation inside a group (warning).",
      needs=("rollout.group_size",), options={"min_temperature": 0.3})
def deterministic_group(ctx):
    m = ctx.model
    gs = settled(m, "rollout.group_size")
    if not gs or gs < 2:
        return

    def rel():  # perf: worked out only for a finding (related reads the run's sources)
        return related(m, "rollout.group_size")

    sampling = m.values.get("rollout.sampling")
    if sampling is not None and sampling.value is False:
        yield ctx.finding(f"sampling is switched off with {gs} completions per prompt: greedy decoding makes the "
                          f"{gs} completions of a group identical", sampling.location, related=rel(),
                          suggestion="switch sampling on", subject=("sampling", gs))
        return
    top_k = m.values.get("rollout.top_k")
    if top_k is not None and top_k.number == 1:
        yield ctx.finding(f"top-k of 1 is greedy decoding: the {gs} completions of a group are identical",
                          top_k.location, related=rel(), suggestion="raise top-k, or switch the cut-off off",
                          subject=("top_k", gs))
        return
    t = m.values.get("rollout.temperature")
    if t is None or t.number is None or t.number < 0:
        return  # negative: SMP-3
    if t.number == 0:
        yield ctx.finding(f"temperature 0 with {gs} completions per prompt: the completions of a group are "
                          "identical and every group-relative advantage is zero", t.location, related=rel(),
                          suggestion="sample at a temperature near 1", subject=("temperature", 0, gs))
    elif t.number < ctx.options["min_temperature"]:
        yield ctx.finding(f"temperature {t.number:g} with {gs} completions per prompt is under min_temperature "
                          f"{ctx.options['min_temperature']:g}: completions of a group will differ little",
                          t.location, level="warning", related=rel(),
                          suggestion="sample at a temperature near 1", subject=("temperature", t.number, gs))


@rule(id="SMP-3", name="sampling-out-of-range", level="error",
      summary="A sampling parameter is outside its range (temperature < 0, top-p outside (0, 1], top-k < 0).",
      rationale="Nucleus sampling keeps the smallest set of tokens whose probability reaches top-p, so top-p lies in "
      "(0, 1] (Holtzman et al. 2020, arXiv:1904.09751); top-k counts tokens and temperature divides the "
      "logits, so neither is negative. Many inference engines read top-k -1 as 'no cut-off' (common "
      "practice), which the option allow_top_k_minus_one accepts (default true).",
      options={"allow_top_k_minus_one": True})
def sampling_range(ctx):
    m = ctx.model
    t = m.values.get("rollout.temperature")
    if t is not None and t.number is not None and t.number < 0:
        yield ctx.finding(f"temperature {t.number:g} is negative", t.location, suggestion="use a temperature > 0",
                          subject=("temperature", t.number))
    p = m.values.get("rollout.top_p")
    if p is not None and p.number is not None and not 0 < p.number <= 1:
        yield ctx.finding(f"top-p {p.number:g} is outside (0, 1]", p.location,
                          suggestion="use a top-p in (0, 1]; 1 keeps the whole distribution",
                          subject=("top_p", p.number))
    k = m.values.get("rollout.top_k")
    if k is not None and k.number is not None and k.number < 0:
        if not (k.number == -1 and ctx.options["allow_top_k_minus_one"]):
            yield ctx.finding(f"top-k {k.number:g} is negative", k.location,
                              suggestion="use a positive top-k" + (", or -1 for no cut-off"
                                                                   if ctx.options["allow_top_k_minus_one"] else ""),
                              subject=("top_k", k.number))

