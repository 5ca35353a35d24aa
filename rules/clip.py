"""CLP: ratio clipping of the policy objective, and gradient-norm clipping.

The clipped surrogate (Schulman et al. 2017, arXiv:1707.06347) bounds the probability ratio
r = pi / pi_old to [1 - eps, 1 + eps] (or [1 - eps, 1 + eps_high] with decoupled bounds,
arXiv:2503.14476), optionally with a dual clip c for negative advantages (arXiv:1912.09729).
"""
from __future__ import annotations

from trimtab.resolve.arithmetic import judge
from trimtab import rule

from ._common import CLIPPED, anchor, clipped, estimator, num, shown, unresolved


@rule(id="CLP-1", name="clip-unstated", level="warning",
      summary="A clipped objective does not state its clip range epsilon.",
      rationale="PPO and the group-relative estimators clip the probability ratio to [1 - eps, 1 + eps] "
      "(arXiv:1707.06347; arXiv:2402.03300). Left out, eps is the trainer's default, which differs "
      "between trainers and versions (0.2 is the published value, arXiv:1707.06347, from memory). "
      "Applies when run.estimator is one of " + ", ".join(sorted(CLIPPED)) + ", or an upper or dual "
      "clip is written without the lower one.")
def clip_unstated(ctx):
    m = ctx.model
    if unresolved(m, "clip.low"):
        return
    est = estimator(m)
    if est in CLIPPED:
        why = f"run.estimator = {est} uses a clipped objective"
    elif m.get("clip.high") is not None or m.get("clip.dual") is not None:
        why = "an upper or dual clip is set"
    else:
        return
    yield ctx.finding(f"{why} but the clip range epsilon (clip.low) is not stated: the trainer's default applies",
                      anchor(m, "run.estimator", "clip.high", "clip.dual", key_path="clip.low"),
                      subject="unstated", suggestion="state the clip range, e.g. 0.2 (arXiv:1707.06347)")


def _eps(m):
    for c in ("clip.low", "clip.high"):
        v = m.get(c)
        if v is not None and v.number is not None:
            yield c, v


@rule(id="CLP-2", name="clip-not-positive", level="error", summary="A ratio clip epsilon is zero or negative.",
      rationale="With eps <= 0 the clip interval [1 - eps, 1 + eps] is a point or empty: every token's ratio is "
      "clipped, the clipped term has no gradient, and the policy does not learn (arXiv:1707.06347).")
def clip_not_positive(ctx):
    for c, v in _eps(ctx.model):
        if v.number <= 0:
            yield ctx.finding(f"{c} = {shown(v)}: the clip epsilon must be positive", v.location, subject=v.number)


@rule(id="CLP-3", name="clip-lower-inactive", level="warning",
      summary="The lower clip epsilon is 1 or more, so it never acts.",
      rationale="The ratio r = pi / pi_old is positive, so with eps >= 1 the lower bound 1 - eps <= 0 can never be "
      "reached: tokens with negative advantage are not clipped at all (arXiv:1707.06347). Some recipes "
      "do this on purpose; then accept it with a reason: `# trimtab: accept CLP-3 -- reason`.")
def clip_lower_inactive(ctx):
    v = ctx.model.get("clip.low")
    if v is not None and v.number is not None and v.number >= 1:
        yield ctx.finding(f"clip.low = {shown(v)}: the lower bound 1 - {shown(v)} = {num(1 - v.number)} is not "
                          "above 0, so the lower clip never acts", v.location, subject=v.number)


@rule(id="CLP-4", name="clip-high-below-low", level="warning",
      summary="The upper clip epsilon_high is smaller than the lower epsilon.",
      rationale="Decoupled clipping (arXiv:2503.14476) raises the upper bound above the lower one to leave room "
      "for low-probability tokens to grow (published: eps_low 0.2, eps_high 0.28). An upper bound "
      "below the lower one does the opposite of what the setting is for, and is usually two values "
      "swapped.")
def clip_high_below_low(ctx):
    m = ctx.model
    lo, hi = m.get("clip.low"), m.get("clip.high")
    if lo is None or hi is None or lo.number is None or hi.number is None or lo.number <= 0 or hi.number <= 0:
        return
    if hi.number < lo.number:
        yield ctx.finding(f"clip.high = {shown(hi)} is below clip.low = {shown(lo)}: decoupled clipping expects "
                          "the upper epsilon at least the lower one", hi.location,
                          related=[lo.location.with_message("the lower epsilon")], subject=hi.number,
                          suggestion=f"swap them? clip.low = {shown(hi)}, clip.high = {shown(lo)}")


@rule(id="CLP-5", name="dual-clip-too-small", level="error", summary="The dual-clip constant c is 1 or less.",
      rationale="Dual clipping bounds the objective of tokens with negative advantage at c x A, with c > 1 "
      "(Ye et al. 2020, arXiv:1912.09729, from memory: published c = 3). With c <= 1 the bound cuts "
      "into the ordinary clipped region and changes the objective of ratios near 1.")
def dual_clip(ctx):
    v = ctx.model.get("clip.dual")
    if v is not None and v.number is not None and v.number <= 1:
        yield ctx.finding(f"clip.dual = {shown(v)}: the dual-clip constant must be greater than 1 (published: 3)",
                          v.location, subject=v.number)


@rule(id="CLP-6", name="clip-never-acts", level="note",
      summary="One optimiser update per rollout batch: the ratio clip never acts.",
      rationale="With exactly one optimiser update per rollout batch, the update is computed with the weights that "
      "sampled the batch, so the probability ratio pi / pi_old is 1 for every token (up to numerical "
      "differences between the sampler and the trainer) and the clip (arXiv:1707.06347) has nothing to "
      "bound: the objective is the plain policy gradient. This is not wrong (arXiv:2402.03300 trains with "
      "a single update per exploration stage, from memory), but the clip settings "
      "then have no effect, and any tuning of them is wasted. updates = rollouts / mini-batch x epochs; an "
      "unstated optim.epochs counts as 1.")
def clip_never_acts(ctx):
    m = ctx.model
    u = m.get("optim.updates_per_step")
    if u is None or u.number != 1 or not clipped(m):
        return
    verdict = judge(m)
    if verdict.ambiguous and any(a.value("optim.updates_per_step") != 1 for a, status in verdict.considered
                                 if status != "broken"):
        return  # another reading of an unstated batch unit gives more updates: the clip may act
    tail = ("= 1 optimiser update per rollout batch: the probability ratio is 1 at that update, so the ratio "
            "clip never acts")
    if u.via != "derived":  # stated as such
        yield ctx.finding(f"optim.updates_per_step = {shown(u)}: one optimiser update per rollout batch, so the "
                          "probability ratio is 1 at that update and the ratio clip never acts", u.location,
                          subject=1)
        return
    rollouts, mini, epochs = m.get("batch.rollouts"), m.get("batch.mini"), m.get("optim.epochs")
    parts = []
    prompts, group = m.get("batch.prompts"), m.get("rollout.group_size")
    if rollouts.via == "derived" and prompts is not None and group is not None:
        parts.append(f"{num(rollouts.value)} completions per step ({num(prompts.value)} prompts x group "
                     f"size {num(group.value)})")
    else:
        parts.append(f"{num(rollouts.value)} completions per step")
    parts.append(f"/ {num(mini.value)} per mini-batch")
    if epochs is not None:
        parts.append(f"x {num(epochs.value)} epoch{'' if epochs.value == 1 else 's'}")
    else:
        parts.append("x 1 epoch (optim.epochs not stated)")
    related = []
    for c, what in (("batch.rollouts", "completions per step"), ("batch.prompts", "prompts per step"),
                    ("rollout.group_size", "group size"), ("optim.epochs", "epochs")):
        v = m.values.get(c)
        if v is not None:
            related.append(v.location.with_message(what))
    yield ctx.finding(" ".join(parts) + " " + tail, m.loc("batch.mini"), related=related, subject=1,
                      key_path="optim.updates_per_step")


@rule(id="CLP-7", name="grad-clip-not-positive", level="error",
      summary="The maximum gradient norm is zero or negative.",
      rationale="Gradient-norm clipping rescales the gradient to at most the given norm. A maximum of 0 scales "
      "every update to nothing (or, in trainers that read 0 as off, silently disables the clip); a "
      "negative maximum is refused or undefined. Write a positive norm (1.0 is common practice), or "
      "leave clipping off explicitly in the trainer's own way.")
def grad_clip_not_positive(ctx):
    v = ctx.model.get("optim.grad_clip")
    if v is not None and v.number is not None and v.number <= 0:
        yield ctx.finding(f"optim.grad_clip = {shown(v)}: the maximum gradient norm must be positive", v.location,
                          subject=v.number)


@rule(id="CLP-8", name="grad-clip-unstated", level="note", summary="No maximum gradient norm is stated.",
      rationale="Policy-gradient updates on language models have heavy-tailed gradient norms; clipping the norm "
      "(1.0 is common practice) keeps one bad batch from wrecking the weights. Unstated, the trainer's "
      "default decides, and defaults differ (some clip, some do not).")
def grad_clip_unstated(ctx):
    m = ctx.model
    if unresolved(m, "optim.grad_clip"):
        return
    yield ctx.finding("no maximum gradient norm (optim.grad_clip) is stated: the trainer's default decides "
                      "whether gradients are clipped", anchor(m, "optim.lr", "optim.warmup_steps", "run.estimator",
                                                               key_path="optim.grad_clip"),
                      subject="unstated", suggestion="state it, e.g. max_grad_norm: 1.0 (common practice)")

