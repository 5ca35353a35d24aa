"""VOC: how the file's keys reached trimtab's concepts."""
from __future__ import annotations

from trimtab import rule
from trimtab.scalars import oversized, same_value
from trimtab.vocabulary import CONCEPTS

# Enumerations whose unknown values a rule of their own area reports with its own reasoning.
OWNED_ELSEWHERE = frozenset({"kl.estimator"})


@rule(id="VOC-1", name="ambiguous-key", level="warning", summary="Two keys in the file could each be the same concept.",
      rationale="trimtab never guesses: when a generic key name matches in two places with the same strength, "
      "the concept stays unresolved and the rules that need it stay silent. Name the right key in "
      "[tool.trimtab.keys] (`trimtab map` drafts the block).", rl_only=False)
def ambiguous(ctx):
    for concept, locs in sorted(ctx.model.ambiguous.items()):
        first, *rest = locs
        yield ctx.finding(
            f"{concept} is ambiguous: {' and '.join(l.key_path for l in locs)} both match; it is left "
            "unresolved", first, related=[l.with_message(f"also matches {concept}") for l in rest],
            subject=concept, suggestion=f'[tool.trimtab.keys] "{concept}" = "{first.key_path}"')


def _type_name(t: str) -> str:
    return {"int": "an integer", "number": "a number", "bool": "true or false", "str": "text"}.get(t, t)


@rule(id="VOC-2", name="wrong-type", level="error", summary="A concept's value has the wrong type.",
      rationale="A count that is text, a rate that is a boolean: the trainer either refuses the value or "
      "converts it in a way the author did not intend. Values are typed as the settings' yaml_version "
      "reads them.", rl_only=False)
def wrong_type(ctx):
    for v, expected in ctx.model.mistyped:
        node = v.node
        if node is not None and getattr(node, "plain", False) and not same_value(node.value11, node.value12):
            continue  # YML-3 reports it with the reason (the two YAML versions disagree)
        if node is not None and getattr(node, "plain", False) and oversized(node.text):
            continue  # YML-5 reports it: an integer past trimtab's limit, read as text
        shown = v.node.text if hasattr(v.node, "text") else v.value
        yield ctx.finding(f"{v.concept} = {shown!s}: expected {_type_name(expected)} "
                          f"(read under YAML {ctx.model.version})", v.location, subject=shown)


@rule(id="VOC-3", name="unknown-value", level="warning", summary="A concept's value is not one trimtab knows.",
      rationale="Enumerated settings (estimator, stage, sandbox kind, KL placement, ...) accept a known set of "
      "values; an unknown one is often a typo, and the rules that depend on it cannot reason about it.",
      rl_only=False)
def unknown_value(ctx):
    for name, v in sorted(ctx.model.values.items()):
        c = CONCEPTS.get(name)
        if not c or not c.values or name in OWNED_ELSEWHERE or not isinstance(v.value, str):
            continue
        if v.value.strip().lower() not in c.values:
            yield ctx.finding(f"{name} = {v.value!r} is not one of {', '.join(c.values)}", v.location,
                              subject=v.value)

