"""ALG: the advantage estimator agrees with the models and constants the config sets up."""
from __future__ import annotations

from trimtab import rule

from ._common import CRITIC_FREE, GAE_BASED, is_off, shown


def _critic(m):
    """('on', Value) | ('off', Value) | ('null', Value) | ('settings', Value) | ('unstated', None).

    'null': the value model's path is left null, which is not a configured critic (the trainer
    decides); 'settings': no value model is named, only a setting of one (a learning rate), which
    many shared templates carry whatever the estimator."""
    v = m.get("critic.source")
    if v is not None:
        if v.value is None:
            return "null", v
        return ("off" if is_off(v.value) else "on"), v
    lr = m.values.get("critic.lr")  # read even when dead: it is evidence, not a setting used
    if lr is not None:
        return "settings", lr
    return "unstated", None


@rule(id="ALG-1", name="critic-unused", level="warning",
      summary="A critic-free estimator is configured with a value model.",
      rationale="Group-relative estimators take the baseline from the other completions of the same prompt "
      "(arXiv:2402.03300: the group baseline replaces the value model; leave-one-out, arXiv:2402.14740, "
      "from memory), and REINFORCE-style estimators with a greedy or batch baseline need none either. A "
      "value model configured beside them is loaded, and in many trainers trained, but never used: "
      "memory and compute for nothing, and a sign that the estimator is not the intended one. A value "
      "model's path left null is not a configured value model, and a value-model setting without a "
      "value model named (a learning rate in a shared template) is dead under these estimators.")
def critic_unused(ctx):
    m = ctx.model
    est = m.text("run.estimator")
    if est not in CRITIC_FREE:
        return
    state, v = _critic(m)
    if state != "on":
        return
    yield ctx.finding(f"run.estimator = {est} needs no value model, but one is configured ({v.concept} = "
                      f"{shown(v)}): "
                      "it is never used", v.location,
                      related=[m.loc("run.estimator", "the critic-free estimator")], subject=est)


@rule(id="ALG-2", name="gae-without-critic", level="error", summary="A GAE-based estimator has no value model.",
      rationale="Generalised advantage estimation (Schulman et al. 2016, arXiv:1506.02438) computes advantages "
      "from a learned value function; PPO as published uses it (arXiv:1707.06347). With the value "
      "model switched off, or none configured, the advantages cannot be computed: the trainer fails, "
      "or falls back to something that is not the estimator the config names.")
def gae_without_critic(ctx):
    m = ctx.model
    est = m.text("run.estimator")
    if est not in GAE_BASED:
        return
    state, v = _critic(m)
    if state in ("on", "settings") or (state == "unstated" and "critic.source" in m.ambiguous):
        return
    if state == "null":
        yield ctx.finding(f"run.estimator = {est} computes GAE advantages from a value model, and the value "
                          f"model's path is left null ({v.concept} = {shown(v)}): the trainer decides whether "
                          "and from what weights it builds one (commonly the policy's); trimtab cannot tell, "
                          "state the value model to make it checkable", v.location, level="note",
                          related=[m.loc("run.estimator", "the GAE-based estimator")], subject="critic-null")
        return
    if state == "off":
        yield ctx.finding(f"run.estimator = {est} computes GAE advantages from a value model, but the value model "
                          f"is switched off ({v.concept} = {shown(v)})", v.location,
                          related=[m.loc("run.estimator", "the GAE-based estimator")], subject="critic-off")
    else:
        yield ctx.finding(f"run.estimator = {est} computes GAE advantages from a value model, but none is "
                          "configured (critic.source not found)", m.loc("run.estimator"),
                          subject="critic-unstated", key_path="critic.source",
                          suggestion="configure the value model (critic.source), or use a critic-free estimator")


@rule(id="ALG-3", name="gae-constant-range", level="error",
      summary="The discount gamma or the GAE lambda is outside [0, 1].",
      rationale="The discount gamma and the GAE parameter lambda are weights of a geometric sum "
      "(arXiv:1506.02438): outside [0, 1] the advantage estimate diverges or changes sign. PPO's "
      "published defaults are gamma = 0.99 and lambda = 0.95 (arXiv:1707.06347, from memory); "
      "language-model recipes often use 1.0 for both (common practice).")
def gae_range(ctx):
    for c, name in (("gae.gamma", "discount gamma"), ("gae.lambda", "GAE lambda")):
        v = ctx.model.get(c)
        if v is not None and v.number is not None and not 0 <= v.number <= 1:
            yield ctx.finding(f"{c} = {shown(v)}: the {name} must be in [0, 1]", v.location, subject=v.number)

