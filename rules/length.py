"""LEN: token budgets. The prompt and the response share one context window: the rollout engine's,
which must itself fit the model's."""
from __future__ import annotations

from trimtab import rule
from trimtab.resolve import arithmetic
from trimtab.resolve.arithmetic import related

LENGTHS = ("length.prompt_max", "length.response_max", "rollout.context_max", "model.context_max")


def _len(model, concept):
    """A stated budget as a positive whole number, else None (LEN-1 reports the others)."""
    v = model.values.get(concept)
    return v.whole if v is not None else None


@rule(id="LEN-1", name="length-not-positive", level="error",
      summary="A token budget or context window is not a positive whole number.",
      rationale="Prompt and response budgets and context windows count tokens: zero or a negative number makes the "
      "engine refuse the request or generate nothing, and a fraction is not a token count. (Text and other "
      "non-numbers are reported by VOC-2.)")
def length_not_positive(ctx):
    for c in LENGTHS:
        v = ctx.model.values.get(c)
        if v is None or v.number is None:
            continue
        n = v.number
        if n <= 0:
            yield ctx.finding(f"{c} = {n:g}: a token count must be a positive whole number", v.location,
                              subject=(c, n))


@rule(id="LEN-2", name="budget-exceeds-context", level="error",
      summary="The prompt budget plus the response budget do not fit the context window.",
      rationale="A rollout engine holds the prompt and the generated response in one context window: prompt "
      "max + response max must not exceed the rollout engine's window, or long prompts are cut, generation "
      "stops early, or the engine refuses the request; nor the model's, whose positions the sequence runs "
      "through (common practice). The engine's window is checked first, then the model's. With no prompt "
      "budget stated, a response budget that fills the whole window leaves no room for any prompt.")
def budget_exceeds_context(ctx):
    m = ctx.model
    a = arithmetic.of(m)
    # the engine's window first; the model's too, since the engine generates with the model's positions
    step = next((a.step(k) for k in ("fit_engine", "fit_model") if a.step(k) is not None and a.step(k).broken), None)
    if step is None:
        return
    ctx_c = step.terms[-1].concept
    window = step.terms[-1].whole
    prompt, response = _len(m, "length.prompt_max"), _len(m, "length.response_max")
    which = "the rollout engine's context" if ctx_c == "rollout.context_max" else "the model's context"
    if prompt:
        if prompt >= window:
            yield ctx.finding(f"the prompt budget of {prompt} tokens fills {which} of {window}: no room for any "
                              "response", m.values["length.prompt_max"].location,
                              related=related(m, ctx_c, "length.response_max"),
                              suggestion=f"use a prompt budget of at most {window - response}"
                              if window > response else "", subject=(prompt, response, window))
            return
        yield ctx.finding(f"prompt {prompt} + response {response} = {step.value} tokens exceed {which} "
                          f"of {window} by {step.excess}", m.values["length.response_max"].location,
                          related=related(m, "length.prompt_max", ctx_c),
                          suggestion=f"use a response budget of at most {window - prompt}, or a context of "
                                     f"{prompt + response}", subject=(prompt, response, window))
    else:
        yield ctx.finding(f"the response budget of {response} tokens fills {which} of {window}: no room for the "
                          "prompt", m.values["length.response_max"].location, related=related(m, ctx_c),
                          suggestion=f"use a response budget under {window}, and state the prompt budget",
                          subject=(response, window))


@rule(id="LEN-3", name="engine-context-exceeds-model", level="error",
      summary="The rollout engine's context window is larger than the model's.",
      rationale="A model is trained for a fixed number of positions; an engine configured for more either refuses to "
      "start or generates past the positions the model knows, where quality collapses (common practice). "
      "If positional scaling extends the model's window, state the extended window as model.context_max, "
      "or accept the finding with its reason.",
      needs=("rollout.context_max", "model.context_max"))
def engine_context(ctx):
    m = ctx.model
    engine, model_ctx = _len(m, "rollout.context_max"), _len(m, "model.context_max")
    step = arithmetic.of(m).step("engine_model")
    if step is not None and step.broken:
        yield ctx.finding(f"the rollout engine's context of {engine} tokens exceeds the model's {model_ctx} "
                          f"by {engine - model_ctx}", m.values["rollout.context_max"].location,
                          related=related(m, "model.context_max"),
                          suggestion=f"use an engine context of at most {model_ctx}", subject=(engine, model_ctx))

