"""``trimtab explain CONFIG``: every concept found, its value and origin, the derived arithmetic
with its inputs, and the concepts that were not found."""
from __future__ import annotations

from typing import TextIO

from ..resolve import arithmetic
from ..common.redact import for_text as _t
from ..common.vocabulary import CONCEPTS


def models(path: str, settings, registry, overrides=()) -> tuple[list, list[str]]:
    """The run models of one file (one per YAML document) and its read problems, as the pipeline
    checked them."""
    from ..pipeline import Pipeline, Request

    outcome = Pipeline(settings, registry).run(Request(paths=[path], overrides=list(overrides), confine=False,
                                                       dependants=False, keep_models=True))
    if not outcome.files:
        return [], [f"{m}: {getattr(m, 'reason', 'cannot be read: no such file or folder')}" for m in outcome.missing]
    shown = outcome.files[0][1]
    return outcome.models(shown), problems_of(outcome, shown)


def problems_of(outcome, shown: str) -> list[str]:
    """The read problems of one checked file, then its composition problems (located in the file
    that holds the line)."""
    doc = outcome.doc(shown)
    return [f"{getattr(p, 'path', shown) or '<command line>'}:{p.line}:{p.col}: {p.message}"
            for p in (doc.problems if doc is not None else ())]


def not_checked(outcome, err: TextIO) -> bool:
    """Say why the one file asked for was not checked (missing, outside the repository, excluded)."""
    if outcome.files:
        return False
    for m in outcome.missing:
        err.write(f"trimtab: error: {_t(m)}: {_t(getattr(m, 'reason', 'cannot be read: no such file or folder'))}\n")
    if not outcome.missing:
        err.write("trimtab: error: the file matches the settings' exclude globs; it is not checked\n")
    return True


def _show(value) -> str:
    from ..load.document import Node

    if isinstance(value, Node):
        return f"<{value.kind}>"
    if isinstance(value, float):
        return repr(value)
    # masked (a credential is never shown) and made visible (nothing reaches the terminal raw)
    return _t(value)


def _wrap(text: str, width: int = 96) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width, initial_indent="  ", subsequent_indent="  "))


def explain(outcome, out: TextIO, err: TextIO | None = None) -> int:
    """Explain the one file of a checked run (a pipeline Outcome with its models kept). Every text
    that came from a file goes through ``_t`` (``trimtab.common.redact.for_text``) or ``_show``."""
    import sys

    if not_checked(outcome, err or sys.stderr):
        return 2
    shown = outcome.files[0][1]
    runs, problems = outcome.models(shown), problems_of(outcome, shown)
    for p in problems:
        out.write(_t(p) + "\n")
    if not runs:
        if not problems:
            out.write(f"{_t(shown)}: empty: it holds no YAML document, so there is nothing to explain\n")
        return 1 if problems else 0
    for m in runs:
        script = m.doc.fmt == "shell"
        if script:
            cmd = m.doc.runs[m.index]
            out.write(f"--- training command {m.index + 1}: {_t(cmd.what)} (line {cmd.program.location().line})\n")
        elif len(runs) > 1:
            out.write(f"--- document {m.index + 1}\n")
        kind = "an RL run config" if m.is_rl else "not an RL run config (RL rules skip it)"
        given = any(v.location.path is None for v in m.values.values()) and m.version != "1.2"
        given = "; --set values as YAML 1.2" if given else ""
        stage = f"stage {_t(m.stage)}" if "run.stage" in m.values else f"stage not stated (checked as {_t(m.stage)})"
        out.write(f"{_t(m.path)}: {kind}; {stage}; values read as YAML {m.version}{given}\n\n")
        if len(m.files) > 1:
            out.write(f"composed from (first to last): {', '.join(map(_t, m.files))}\n\n")
        out.write("Concepts found:\n")
        width = max([len(c) for c in m.values] + [10])
        for name in sorted(m.values):
            v = m.values[name]
            layer = m.roles.get(v.key)
            origin = f"{_t(v.location.label())}  {_t(v.key)}  [{_t(v.via)}{'; ' + layer if layer else ''}]"
            if v.note:
                origin += f"  ({_t(v.note)})"
            switch = m.dead.get(name)
            if switch is not None:  # written, but its mechanism is switched off: not read, not checked
                said = getattr(switch.node, "text", None) or _show(switch.value)
                origin += (f"  dead: {_t(switch.concept)} = {_t(said)} at {_t(switch.location.label())} "
                           "switches its mechanism off")
            out.write(f"  {name:<{width}}  {_show(v.value):<16}  {origin}\n")
            for hop in v.chain:
                out.write(f"  {'':<{width}}  {'':<16}  <- {_t(hop.label())} {_t(hop.message)}\n")
        for c in m.components:
            fields = ", ".join(f"{_t(k)}={_show(v.value)}" for k, v in c.fields.items())
            out.write(f"  reward component {c.index + 1}: {fields}  {_t(c.location.label())}\n")
        if m.derived:
            out.write("\nDerived:\n")
            for name in sorted(m.derived):
                v = m.derived[name]
                stated = m.values.get(name)
                extra = f"  (stated: {_show(stated.value)})" if stated is not None else ""
                out.write(f"  {name:<{width}}  {_show(v.value):<16}  = {_t(v.note)}  from "
                          f"{', '.join(map(_t, v.inputs))}{extra}\n")
        out.write("\n".join(_t(line) for line in arithmetic.render(m).split("\n")))
        if m.unused:
            out.write("\nLook like concepts, not used (why):\n")
            seen = set()
            for u in sorted(m.unused, key=lambda u: (u.location.path or "", u.location.line, u.location.col, u.concept)):
                what = f" = {u.shown}" if u.shown else ""
                why = u.reason + (" (VOC-2)" if u.kind == "shape" else "")
                line = f"  {_t(u.location.label())}  {_t(u.key)}{_t(what)}  {u.concept}: {_t(why)}\n"
                if line not in seen:
                    seen.add(line)
                    out.write(line)
        if m.unknown:
            out.write("\nKnown only at launch (left out of the checks):\n")
            for name, v in sorted(m.unknown.items()):
                out.write(f"  {name}  {_t(v.location.label())}  {_t(v.key)}: {_t(v.note)}\n")
        shaped = {u.concept for u in m.unused if u.kind == "shape"}
        missing = [c for c in CONCEPTS if m.get(c) is None and c not in m.ambiguous and c not in m.unknown
                   and c not in shaped and c not in m.dead]
        out.write("\nNot found:\n" + _wrap(", ".join(missing)) + "\n")
    return 0
