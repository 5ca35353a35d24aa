"""VOC: how the file's keys reached trimtab's concepts."""
from __future__ import annotations

from trimtab import rule
from trimtab.common.scalars import READER_NAMES, oversized
from trimtab.common.vocabulary import CONCEPTS, RL_MARKERS, RL_MIN_MARKERS

from ._common import misread, toml_key

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


@rule(id="VOC-2", name="wrong-type", level="error",
      summary="A concept's value has the wrong type or shape.",
      rationale="A count that is text, a rate that is a boolean: the trainer either refuses the value or "
      "converts it in a way the author did not intend. Values are typed as the reader the settings name "
      "for the file reads them (yaml_version, readers; JSON files under JSON's grammar). A list or a mapping "
      "where one number, word or switch is expected (`group_size: [8]`, "
      "`clip_ratio: {low: 0.2, high: 0.28}`) cannot be used either, and the rules that need the concept "
      "would otherwise stay silent and pass the run: it is reported at its line. A list is read only where "
      "its meaning is plain: a list of KL placements names each place (`[loss, reward]` is both). A "
      "one-element list of a number is not read as the number, since a trainer may read a list as one "
      "value per stage, dataset or worker: write the number, or name the key that holds it in "
      "[tool.trimtab.keys]. `trimtab explain` lists every key that looks like a concept but was not used, "
      "with the reason.", rl_only=False)
def wrong_type(ctx):
    for u in ctx.model.unused:
        if u.kind == "shape":
            # a list of texts (patterns, paths, templates) is often a form the trainer accepts: a warning;
            # a list or mapping where a number or a switch is expected is an error
            level = "warning" if CONCEPTS[u.concept].type == "str" else None
            yield ctx.finding(f"{u.concept} = {u.shown}: {u.reason}; trimtab cannot use it, so no rule that needs "
                              f"{u.concept} checked this run", u.location, subject=u.shown, level=level,
                              suggestion=f"write one value, or name the key that holds it: [tool.trimtab.keys] "
                                         f'"{u.concept}" = "{u.key}.<key>"' if u.shown.startswith("{") else
                                         "write one value")
    for v, expected in ctx.model.mistyped:
        node = v.node
        reader, misreaders, _stated = misread(ctx.model, v)
        if misreaders:
            continue  # YML-3 reports it with the reason (the readers disagree)
        if node is not None and getattr(node, "plain", False) and oversized(node.text):
            continue  # YML-5 reports it: an integer past trimtab's limit, read as text
        shown = v.node.text if hasattr(v.node, "text") else v.value
        yield ctx.finding(f"{v.concept} = {shown!s}: expected {_type_name(expected)} "
                          f"(read under {READER_NAMES.get(reader or ctx.model.version, 'YAML ' + ctx.model.version)})",
                          v.location, subject=shown)


@rule(id="VOC-3", name="unknown-value", level="warning", summary="A concept's value is not one trimtab knows.",
      rationale="Enumerated settings (estimator, stage, sandbox kind, KL placement, ...) accept a known set of "
      "values; an unknown one is often a typo, and the rules that depend on it cannot reason about it.",
      rl_only=False)
def unknown_value(ctx):
    # perf: the few values written as text are sorted, not all of them (~34 a run)
    for name, v in sorted((name, v) for name, v in ctx.model.values.items() if isinstance(v.value, str)):
        c = CONCEPTS.get(name)
        if not c or not c.values or name in OWNED_ELSEWHERE:
            continue
        if v.value.strip().lower() not in c.values:
            # if it is the trainer's own word for one of them, the key map's value synonyms say which
            written = v.node.text.strip() if hasattr(v.node, "text") else str(v.value)
            key = v.key or name
            yield ctx.finding(f"{name} = {v.value!r} is not one of {', '.join(c.values)}", v.location,
                              subject=v.value,
                              suggestion=(f"if it is your trainer's word for one of them: [tool.trimtab.keys] "
                                          f'"{name}" = {{ key = "{key}", values = {{ {toml_key(written)} = '
                                          f'"<one of {", ".join(c.values)}>" }} }}'))



# Clear signs that a document is an RL run: an estimator trimtab knows, a group size, a KL or a clip key.
EVIDENCE = ("run.estimator", "rollout.group_size", "kl.coef", "kl.enabled", "kl.estimator", "clip.low", "clip.high")


@rule(id="VOC-4", name="not-checked-as-run", level="warning",
      summary="A file with clear signs of an RL run is not checked as a run.",
      rationale="trimtab checks a document as an RL run when it resolves enough of the run's core concepts "
      f"(at least {RL_MIN_MARKERS} of them, or an estimator and one more); other YAML (CI workflows, data "
      "manifests) is skipped silently. A document that states an estimator trimtab knows, a group size, or a KL "
      "or clip key, but resolves too few concepts, is most likely a run whose keys trimtab cannot place, and no "
      "rule about runs has looked at it; under a pre-commit hook the output of a passing check is hidden, so "
      "nobody would learn that it was skipped. Describe the layout in [tool.trimtab.keys] (`trimtab map FILE` "
      "drafts the block), or name the file in the settings' run_configs. A file that other files name as a "
      "base, and a document whose stated stage is not rl, are not reported.",
      rl_only=False, scope="not-run")
def not_checked_as_run(ctx):
    m = ctx.model
    if "run.stage" in m.values and m.stage != "rl":
        return
    evidence = [m.values[c] for c in EVIDENCE if c in m.values]
    known = CONCEPTS["run.estimator"].values
    evidence = [v for v in evidence if v.concept != "run.estimator" or str(v.value).strip().lower() in known]
    own = [v for v in evidence if v.location.path == ctx.doc.path] or evidence
    if not own:
        return
    first = min(own, key=lambda v: (v.location.path is None, v.location.line, v.location.col))
    found = sorted(c for c in RL_MARKERS if c in m.values)
    missing = sorted(c for c in RL_MARKERS if c not in m.values)
    need = RL_MIN_MARKERS - len(found)
    if "run.estimator" in m.values:
        need = min(need, 2 - len(found))
    shown = ", ".join(f"{c} ({m.values[c].key})" for c in found)
    yield ctx.finding(f"not checked as a run: found {shown}, missing {need} more of {', '.join(missing)}; "
                      "describe the layout with `trimtab map`", first.location, subject=",".join(found),
                      suggestion=f"trimtab map {ctx.doc.path}")
