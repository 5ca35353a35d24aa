"""KL: regularisation towards a reference policy.

The KL term keeps the fine-tuned policy near its starting point. These rules check that it is
stated rather than left to a trainer default, that it has a reference to measure against, that
it is counted once, and that its strength is in the range published recipes use.
"""
from __future__ import annotations

from trimtab import rule
from trimtab.common.vocabulary import described_values

from ._common import (KL_COEFS, KL_MECHANISMS, anchor, clipped, estimator, is_off, kl_mechanisms, kl_state, num, shown,
                      toml_key, unresolved)

_ESTIMATORS = {
    "k1": "log ratio, unbiased, high variance",
    "k2": "half squared log ratio, biased, low variance",
    "k3": "ratio - 1 - log ratio, unbiased, low variance, never negative",
}
_K_SOURCE = "Schulman 2020, \"Approximating KL Divergence\" (blog note)"


@rule(id="KL-1", name="kl-unstated", level="warning",
      summary="A clipped policy-gradient run never states its KL regularisation.",
      rationale="Trainers differ in their default KL coefficient (some default to a positive value, some to none), "
      "so a run config that says nothing about KL is regularised by whatever the trainer version "
      "happens to ship. State kl.coef (or switch KL off explicitly). Applies to clipped policy-gradient "
      "runs: a clipped estimator (ppo, gae, grpo, dr_grpo, dapo, reinforce++) or a ratio clip in the "
      "file. An explicit 0 or off is reported as a note: several published recipes drop the KL term "
      "on purpose (arXiv:2503.14476 trains without it), so accept it with a reason where that is the "
      "intent: `# trimtab: accept KL-1 -- recipe trains without KL`. Basis: common practice; published "
      "coefficients 0.04 (arXiv:2402.03300) and 0.02 (arXiv:2203.02155, from memory) show that the "
      "value matters.")
def kl_unstated(ctx):
    m = ctx.model
    if not clipped(m):
        return
    state, v = kl_state(m)
    if state == "off":
        yield ctx.finding(
            f"KL regularisation is switched off ({v.concept} = {shown(v)}): nothing keeps the policy "
            "near its starting point; if the recipe intends this, accept it with a reason",
            v.location, level="note", subject=f"off:{v.concept}")
        return
    if state == "on" or "kl.coef" in m.ambiguous:
        return
    if state == "switched":
        coef = {sw: c for sw, c, _w in KL_MECHANISMS}[v.concept]
        yield ctx.finding(
            f"KL is switched on ({v.concept} = {shown(v)}) but {coef} is not stated: the "
            "trainer's default decides its strength", v.location, subject="no-coef", key_path=coef)
        return
    if any(unresolved(m, c) for c in KL_COEFS):
        return  # stated (a non-number or negative value is reported by VOC-2, YML-3 or KL-5), or ambiguous
    est = estimator(m)
    what = f"run.estimator = {est}" if est else "a ratio clip is set"
    yield ctx.finding(
        f"this clipped policy-gradient run ({what}) never states KL regularisation (no kl.coef, no "
        "explicit off): the trainer's default decides silently",
        anchor(m, "run.estimator", "clip.low", "clip.high", "clip.dual", key_path="kl.coef"),
        subject="unstated", suggestion="state kl.coef (e.g. 0.04 as in arXiv:2402.03300), or 0 to train "
                                       "without KL on purpose")


@rule(id="KL-2", name="kl-reference-mismatch", level="error",
      summary="KL is on without a reference model, or a reference model is loaded while KL is off.",
      rationale="The KL term measures the policy against a reference policy (usually the initial weights). A "
      "positive coefficient with the reference model written as absent or switched off (false, null, "
      "none, off) either fails at launch or, in trainers that quietly skip the term, trains without the "
      "regularisation the config asks for: an error. A reference that is simply not mentioned is "
      "reported only when the option report_unstated is true (default false: trainers commonly build "
      "the reference from the initial policy weights when KL is on, common practice). The reverse, a "
      "reference model configured while KL is explicitly off, keeps a second copy of the weights in "
      "memory (and a forward pass per batch) for nothing: a warning when KL is switched off by a switch "
      "and the reference is a model named in the file; a note when only a coefficient of 0 turns KL off "
      "(many trainers build the reference only for a positive coefficient, which trimtab cannot see). "
      "A reference left null is not a configured model: the trainer chooses it (a note when KL is on). "
      "KL is on when any KL mechanism is on (a term in the loss, a penalty in the reward, each with its "
      "own switch and coefficient). Basis: the KL-penalised objective "
      "(arXiv:2203.02155, from memory; arXiv:2402.03300).",
      options={"report_unstated": False})
def kl_reference(ctx):
    m = ctx.model
    state, v = kl_state(m)
    ref = m.get("reference.source")
    if state == "on":
        if ref is not None and ref.value is None:
            yield ctx.finding(
                f"{v.concept} = {shown(v)} and the reference model is left null (reference.source = "
                f"{shown(ref)}): the trainer decides what the KL term is measured against (commonly the "
                "initial policy weights); trimtab cannot tell, state the reference to make it checkable",
                ref.location, related=[v.location.with_message("KL is on here")], level="note",
                subject="reference-null")
        elif ref is not None and is_off(ref.value):
            yield ctx.finding(
                f"{v.concept} = {shown(v)} but the reference model is switched off (reference.source = "
                f"{shown(ref)}): the KL term has nothing to measure against", v.location,
                related=[ref.location.with_message("the reference is switched off here")],
                subject="reference-off")
        elif ref is None and ctx.options["report_unstated"] and "reference.source" not in m.ambiguous:
            yield ctx.finding(
                f"{v.concept} = {shown(v)} but no reference model is stated (reference.source not found): "
                "the KL term needs a reference policy", v.location, subject="reference-unstated",
                suggestion="state reference.source (the initial policy weights are usual)")
    elif state == "off" and ref is not None and not is_off(ref.value):
        if v.concept in KL_COEFS or not isinstance(ref.value, str):
            # off by a coefficient of 0 (or the reference is a section, not a model named): many
            # trainers build the reference only for a positive coefficient; trimtab cannot know which
            yield ctx.finding(
                f"a reference model is configured while KL is off ({v.concept} = {shown(v)}): if the trainer "
                "builds the reference regardless, a second copy of the weights is held for nothing; trimtab "
                "cannot tell whether yours builds it only when KL is on", ref.location,
                related=[v.location.with_message("KL is off here")], level="note", subject="reference-maybe-unused")
            return
        yield ctx.finding(
            f"a reference model is configured but KL is off ({v.concept} = {shown(v)}): a second copy of "
            "the weights is held in memory and run on every batch for nothing",
            ref.location, related=[v.location.with_message("KL is switched off here")], level="warning",
            subject="reference-unused")


@rule(id="KL-3", name="kl-counted-twice", level="warning",
      summary="The KL penalty is applied both in the reward and in the loss.",
      rationale="A KL penalty can be subtracted from the reward (a per-token penalty before the advantages, "
      "arXiv:2203.02155, from memory) or added to the loss as a separate term (arXiv:2402.03300). "
      "Doing both regularises twice with two coefficients that were tuned for one place: the "
      "effective strength is neither.")
def kl_twice(ctx):
    m = ctx.model
    p = m.get("kl.placement")
    if p is not None and isinstance(p.value, str) and p.value.strip().lower() == "both":
        state, v = kl_state(m)
        if state != "off":
            yield ctx.finding(f"kl.placement = {shown(p)}: the KL penalty is applied in the reward and in the loss",
                              p.location, subject="both", suggestion="choose loss or reward")
        return
    live = {coef: v for state, v, coef in kl_mechanisms(m) if state in ("on", "switched")}
    loss, reward = live.get("kl.loss_coef"), live.get("kl.reward_coef")
    if loss is not None and reward is not None:
        yield ctx.finding(f"a KL term in the loss ({loss.concept} = {shown(loss)}) and a KL penalty in the reward "
                          f"({reward.concept} = {shown(reward)}) are both on: KL is counted twice", loss.location,
                          related=[reward.location.with_message("the KL penalty in the reward")],
                          subject="loss-and-reward", suggestion="switch one of them off")


@rule(id="KL-4", name="kl-estimator-unknown", level="error", summary="The KL estimator is not k1, k2 or k3.",
      rationale="The per-sample KL between policy and reference is approximated by one of three estimators "
      f"({_K_SOURCE}): k1 = -log r ({_ESTIMATORS['k1']}), k2 = (log r)^2 / 2 ({_ESTIMATORS['k2']}), "
      f"k3 = (r - 1) - log r ({_ESTIMATORS['k3']}), with r = p_ref / p_policy. A value that is none of "
      "them is a typo or a trainer-specific name: the trainer refuses it or falls back to its default. "
      "A name that describes an estimator in words (low variance, squared, naive) is a note naming the "
      "key-map line that says which one it means (`values = { low_var_kl = \"k3\" }`); with that line "
      "the value is read as the estimator it stands for.")
def kl_estimator(ctx):
    v = ctx.model.get("kl.estimator")
    if v is None or not isinstance(v.value, str):
        return  # a non-text value is reported by VOC-2
    name = v.value.strip().lower()
    if name in _ESTIMATORS:
        return
    squeezed = "".join(ch for ch in name if ch.isalnum())
    described = described_values("kl.estimator", name)  # the one table of descriptive words (vocabulary)
    if described:
        # a name that describes an estimator in words (Schulman 2020: k1 naive, k2 and k3 low variance,
        # k3 the unbiased low-variance one): the trainer's own vocabulary, which trimtab cannot settle
        # alone; the key map's value synonyms say what it means
        written = v.node.text.strip() if hasattr(v.node, "text") else name
        line = (f'[tool.trimtab.keys] "kl.estimator" = {{ key = "{v.key}", values = {{ {toml_key(written)} = '
                f'"{described[0]}" }} }}')
        yield ctx.finding(f"kl.estimator = {shown(v)} describes {' or '.join(described)} in words "
                          f"({_K_SOURCE}); trimtab reads it once the key map says which", v.location,
                          level="note", subject=name, suggestion=line)
        return
    if squeezed in _ESTIMATORS:
        suggestion = f"write {squeezed}"
    else:
        suggestion = ("one of k1, k2, k3; k3 is the estimator of the group-relative objective in the loss "
                      "(arXiv:2402.03300)")
    yield ctx.finding(f"kl.estimator = {shown(v)} is not a KL estimator: expected k1, k2 or k3", v.location,
                      subject=name, suggestion=suggestion)


@rule(id="KL-5", name="kl-coef-range", level="warning", summary="The KL coefficient is outside the usual range.",
      rationale="Published recipes use coefficients from 0.001 (arXiv:2501.12948v2, the revised version, from "
      "memory) through 0.02 "
      "(arXiv:2203.02155, from memory) to 0.04 (arXiv:2402.03300). Far below, the term does nothing "
      "measurable; far above, the policy cannot move away from the reference and learns little. The "
      "range is the options min and max (defaults 1e-4 and 0.5: an order of magnitude beyond the "
      "published values on either side, common practice). 0 means off (see KL-1). A negative "
      "coefficient rewards divergence from the reference: an error.",
      options={"min": 1e-4, "max": 0.5})
def kl_range(ctx):
    m = ctx.model
    off = {coef for state, _v, coef in kl_mechanisms(m) if state == "off"}
    for coef in KL_COEFS:
        v = m.get(coef)  # a coefficient whose switch is off is dead: not read
        if v is None or v.number is None or v.number == 0 or coef in off:
            continue  # 0 or switched off: KL-1 reports it
        x, lo, hi = v.number, ctx.options["min"], ctx.options["max"]
        if x < 0:
            yield ctx.finding(f"{coef} = {shown(v)} is negative: the penalty becomes a bonus for moving away "
                              "from the reference", v.location, level="error", subject=x)
        elif x < lo or x > hi:
            side = "below" if x < lo else "above"
            yield ctx.finding(f"{coef} = {shown(v)} is {side} the usual range {num(lo)} … {num(hi)} "
                              "(published: 0.001, 0.02, 0.04)", v.location, subject=x)


@rule(id="KL-6", name="kl-adaptive-no-horizon", level="warning",
      summary="An adaptive KL target is set without a horizon.",
      rationale="An adaptive KL controller moves the coefficient so that the measured KL approaches a target. Two "
      "published forms: the adaptive penalty of the clipped-objective paper (Schulman et al. 2017, "
      "arXiv:1707.06347, section 4, from memory) halves or doubles the coefficient when the measured KL "
      "is below target / 1.5 or above target x 1.5 (fixed thresholds, no horizon); the proportional controller "
      "of Ziegler et al. 2019 (arXiv:1909.08593, section 2.2, from memory) moves it by a gain times the "
      "clipped relative error; trainers commonly state that gain as a horizon, the number of samples "
      "over which the error is corrected (the horizon wording is common practice, from memory; the paper "
      "states the gain). Only the second form has a horizon. With a target and no horizon the speed is "
      "the trainer's default, and a horizon of 0 or less makes the update undefined or run backwards. A "
      "controller stated as fixed reads neither target nor horizon: they are dead, and this rule is silent.")
def kl_adaptive(ctx):
    m = ctx.model
    t = m.get("kl.target")
    if t is None or t.number is None:
        return
    h = m.get("kl.horizon")
    if h is None:
        if "kl.horizon" in m.ambiguous or "kl.horizon" in m.values or "kl.controller" in m.ambiguous:
            return  # ambiguous, or written and dead
        yield ctx.finding(f"kl.target = {shown(t)} sets an adaptive KL controller but kl.horizon is not stated: "
                          "the trainer's default decides how fast the coefficient moves", t.location,
                          subject="no-horizon", key_path="kl.horizon")
    elif h.number is not None and h.number <= 0:
        yield ctx.finding(f"kl.horizon = {shown(h)} must be positive for the adaptive KL controller "
                          f"(kl.target = {shown(t)})", h.location,
                          related=[t.location.with_message("the adaptive target")], subject=h.number)

