"""CMP: composition of layered run configs (bases, ``${...}`` references, overrides).

The composer records what went wrong on the checked document, located in the file that holds
the offending line; these rules report it. They never compose anything themselves.
"""
from __future__ import annotations

from trimtab import Location, rule

_LAYERS = ("trimtab checks the run as it will launch: the bases of the file, the file, the settings' "
           "overrides file and --set values, merged in that order (docs: layered configs). ")


def _report(ctx, kind):
    doc = ctx.doc
    for p in doc.problems:
        if p.kind != kind:
            continue
        path = getattr(p, "path", doc.path)
        loc = Location(path, p.line, p.col, getattr(p, "end_line", 0), getattr(p, "end_col", 0),
                       key_path=getattr(p, "key_path", ""))
        yield ctx.finding(p.message, loc, related=p.related, subject=getattr(p, "subject", "") or p.message)


@rule(id="CMP-1", name="reference-cycle", level="error", summary="`${...}` references form a cycle.",
      rationale=_LAYERS + "A value that refers to itself, directly or through other references, has no value: the "
      "launcher's own resolver stops with an error, or (worse) leaves the reference text in place. "
      "The finding prints the cycle. Common practice of every interpolating config system.",
      rl_only=False, scope="file")
def reference_cycle(ctx):
    return _report(ctx, "compose-cycle")


@rule(id="CMP-2", name="reference-unknown", level="warning",
      summary="A `${...}` reference names a key the composed run does not have.",
      rationale=_LAYERS + "The reference resolves against the whole composed run (bases, file, overrides); a target "
      "that none of them has is usually a typo or a key a base renamed. The finding points at the line that "
      "refers. A warning, not an error: a launcher may supply variables of its own that no file shows. An "
      "upper-case name without dots (`${HOME}`) is taken for an environment variable and left alone. "
      "Common practice.",
      rl_only=False, scope="file")
def reference_unknown(ctx):
    return _report(ctx, "compose-unknown")


@rule(id="CMP-3", name="base-missing", level="error", summary="A base file does not exist or cannot be read.",
      rationale=_LAYERS + "Without its base the run is not the run that launches: every value the base gives is "
      "missing, and the rules that need them stay silent. The finding points at the line (or the settings "
      "entry) that names the base.",
      rl_only=False, scope="file")
def base_missing(ctx):
    return _report(ctx, "compose-base-missing")


@rule(id="CMP-4", name="base-cycle", level="error", summary="Base files name each other in a cycle.",
      rationale=_LAYERS + "A file that is (through other files) its own base cannot be composed; the finding prints "
      "the cycle of files.",
      rl_only=False, scope="file")
def base_cycle(ctx):
    return _report(ctx, "compose-base-cycle")


@rule(id="CMP-5", name="base-outside-repository", level="error", summary="A base file lies outside the repository.",
      rationale=_LAYERS + "trimtab reads only files inside the repository it checks (a run composed from a file "
      "elsewhere cannot be reviewed with the change, and is not the same on another machine). Move the "
      "base into the repository, or check from a folder that contains it.",
      rl_only=False, scope="file")
def base_outside(ctx):
    return _report(ctx, "compose-base-outside")


@rule(id="CMP-6", name="override-not-applied", level="error", summary="A --set override cannot be applied to the run.",
      rationale=_LAYERS + "`--set a.b=v` reaches key b inside section a; when a is a single value, or a list without "
      "that item, the override cannot take effect and the run checked would not be the run launched.",
      rl_only=False, scope="file")
def override_not_applied(ctx):
    return _report(ctx, "compose-override")


@rule(id="CMP-7", name="composition-malformed", level="error",
      summary="A bases entry or a reference cannot be used as written.",
      rationale=_LAYERS + "The bases key takes a path or a list of paths; a base holds a mapping of keys; a "
      "reference written inside text must name a single value, not a section or a list.",
      rl_only=False, scope="file")
def composition_malformed(ctx):
    return _report(ctx, "compose-malformed")


@rule(id="CMP-8", name="override-adds-key", level="error",
      summary="A --set override adds a key that no layer of the run has.",
      rationale=_LAYERS + "An override usually changes a value the run already has; one that adds a new key is often "
      "a misspelt key path (`--set rollout.group_sise=8`), which a trainer silently ignores, so the run "
      "checked is not the run launched. An error, so that a typo does not pass the gate: to add a key on "
      "purpose, give it with `--add KEY=VALUE` instead of `--set`. The finding suggests the nearest key some "
      "layer of the run has.",
      rl_only=False, scope="file")
def override_adds_key(ctx):
    return _report(ctx, "compose-override-new")


@rule(id="CMP-9", name="value-known-at-launch", level="note",
      summary="A value of the run is known only when it launches (a launch script, a resolver).",
      rationale=_LAYERS + "A launch script is read without running it: a command substitution, a variable the script "
      "never sets (it comes from the caller's environment), the script's own arguments or a value set in a "
      "loop cannot be known statically; nor can a resolver's value (`${name:args}`) other than an "
      "environment lookup with a default, which reads as its default while the environment can change it. "
      "Such a value is left out of the run, so no rule reasons about it (and none fires on a guess); this "
      "note says where it is and what trimtab would need: write the number in the script or the config.",
      rl_only=False)
def value_known_at_launch(ctx):
    seen = set()
    for p in list(ctx.model.notes) + [p for p in ctx.doc.problems if p.kind == "compose-value-unknown"]:
        key = (getattr(p, "path", None), p.line, p.col, p.message)
        if key in seen:
            continue
        seen.add(key)
        loc = Location(getattr(p, "path", None) or ctx.doc.path, p.line, p.col, getattr(p, "end_line", 0),
                       getattr(p, "end_col", 0), key_path=getattr(p, "key_path", ""))
        yield ctx.finding(p.message, loc, related=p.related, subject=getattr(p, "subject", "") or p.message)


@rule(id="CMP-10", name="optional-default-missing", level="note",
      summary="An optional entry of a defaults list names no file.",
      rationale=_LAYERS + "A defaults list (setting defaults_key) composes the files it names in its order; an entry "
      "marked optional may be absent, and the run is composed without it. The note says which file was "
      "looked for, in case its absence is a typo rather than a choice.",
      rl_only=False, scope="file")
def optional_default_missing(ctx):
    return _report(ctx, "compose-optional-missing")


@rule(id="CMP-11", name="reference-expansion-over-limit", level="error",
      summary="`${...}` references expand past trimtab's limit.",
      rationale=_LAYERS + "A few lines of references can ask for an exponential amount of text or values "
      "(`a: ${b}${b}`, `b: ${c}${c}`, ... doubles the text at each level; sections that refer to sections double "
      "the tree). trimtab stops at its limits (a million characters of text written by references in one run, "
      "ten thousand keys and items copied from sections, references leading through 64 others) and leaves the "
      "value unresolved, so the rules that need it stay silent; the launcher's own resolver would build the "
      "same amount, or stop. The finding points at the reference where the limit was passed.",
      rl_only=False, scope="file")
def expansion_over_limit(ctx):
    return _report(ctx, "compose-expansion")
