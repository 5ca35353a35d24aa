"""``trimtab explain CONFIG``: every concept found, its value and origin, the derived arithmetic
with its inputs, and the concepts that were not found."""
from __future__ import annotations

import re
from typing import TextIO

from . import arithmetic, loader
from .check import CheckOptions, Checker
from .model import RunModel
from .resolve import resolve
from .vocabulary import CONCEPTS

_USERINFO = re.compile(r"(?<=://)[^/@\s]+@")  # a URL's user information (may hold a password)


def models(path: str, settings, registry, overrides=()) -> tuple[list[RunModel], list[str]]:
    """The RunModels of one file (one per YAML document) and its read problems."""
    from .discover import relpath
    from pathlib import Path

    checker = Checker(settings, registry, CheckOptions(overrides=list(overrides)))
    shown = relpath(Path(path), settings.root.resolve())
    from .shell import load, runs_of

    doc = load(path, shown, settings)
    out = []
    if doc.readable:
        for i, root in enumerate(runs_of(doc)):
            composed = checker.composer.compose(doc, root, path)
            m = resolve(doc, composed.root, checker.resolve_opts, i)
            m.settings = settings
            m.files = composed.files
            out.append(m)
    # read problems, then composition problems (located in the file that holds the line)
    problems = [f"{getattr(p, 'path', shown) or '<command line>'}:{p.line}:{p.col}: {p.message}"
                for p in doc.problems]
    return out, problems


def _show(value) -> str:
    from .document import Node

    if isinstance(value, Node):
        return f"<{value.kind}>"
    if isinstance(value, float):
        return repr(value)
    # a URL's user information can hold a password: never show it
    return _USERINFO.sub("****@", str(value))


def _wrap(text: str, width: int = 96) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width, initial_indent="  ", subsequent_indent="  "))


def explain(path: str, settings, registry, overrides, out: TextIO) -> int:
    runs, problems = models(path, settings, registry, overrides)
    for p in problems:
        out.write(p + "\n")
    if not runs:
        return 1 if problems else 0
    for m in runs:
        script = m.doc.fmt == "shell"
        if script:
            cmd = m.doc.runs[m.index]
            out.write(f"--- training command {m.index + 1}: {cmd.what} (line {cmd.program.location().line})\n")
        elif len(runs) > 1:
            out.write(f"--- document {m.index + 1}\n")
        kind = "an RL run config" if m.is_rl else "not an RL run config (RL rules skip it)"
        out.write(f"{m.path}: {kind}; stage {m.stage}; values read as YAML {m.version}\n\n")
        if len(m.files) > 1:
            out.write(f"composed from (first to last): {', '.join(m.files)}\n\n")
        out.write("Concepts found:\n")
        width = max([len(c) for c in m.values] + [10])
        for name in sorted(m.values):
            v = m.values[name]
            layer = m.roles.get(v.key)
            origin = f"{v.location.label()}  {v.key}  [{v.via}{'; ' + layer if layer else ''}]"
            if v.note:
                origin += f"  ({v.note})"
            out.write(f"  {name:<{width}}  {_show(v.value):<16}  {origin}\n")
            for hop in v.chain:
                out.write(f"  {'':<{width}}  {'':<16}  <- {hop.label()} {hop.message}\n")
        for c in m.components:
            fields = ", ".join(f"{k}={_show(v.value)}" for k, v in c.fields.items())
            out.write(f"  reward component {c.index + 1}: {fields}  {c.location.label()}\n")
        if m.derived:
            out.write("\nDerived:\n")
            for name in sorted(m.derived):
                v = m.derived[name]
                stated = m.values.get(name)
                extra = f"  (stated: {_show(stated.value)})" if stated is not None else ""
                out.write(f"  {name:<{width}}  {_show(v.value):<16}  = {v.note}  from {', '.join(v.inputs)}{extra}\n")
        out.write(arithmetic.render(m))
        if m.ambiguous:
            out.write("\nAmbiguous (set them in [tool.trimtab.keys]):\n")
            for name, locs in sorted(m.ambiguous.items()):
                out.write(f"  {name}: " + "; ".join(f"{l.key_path} at {l.label()}" for l in locs) + "\n")
        if m.unknown:
            out.write("\nKnown only at launch (left out of the checks):\n")
            for name, v in sorted(m.unknown.items()):
                out.write(f"  {name}  {v.location.label()}  {v.key}: {v.note}\n")
        missing = [c for c in CONCEPTS if m.get(c) is None and c not in m.ambiguous and c not in m.unknown]
        out.write("\nNot found:\n" + _wrap(", ".join(missing)) + "\n")
    return 0
