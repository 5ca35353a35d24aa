"""YML: file hygiene. Reading failures of the loader, and YAML 1.1 / 1.2 disagreements."""
from __future__ import annotations

from trimtab import Level, Location, rule
from trimtab.common.findings import Edit  # perf: not through the package's lazy names, once per run
from trimtab.common.scalars import READER_NAMES, YAML_READERS, same_value, type11, type12

from ._common import misread, suspects

_PARSE_WHY = ("A run config that does not parse cannot launch; where a loader is lenient, it may read "
              "something other than what was written. Line and column are the parser's.")


def _problems(ctx, kinds, level=None):
    doc = ctx.doc
    for p in doc.problems:
        if p.kind in kinds:
            yield ctx.finding(f"{doc.path} {p.message}" if not p.line else p.message,
                              Location(doc.path, p.line, p.col), related=p.related, level=level,
                              subject=p.kind)


@rule(id="YML-1", name="parse-error", level="error",
      summary="The file is not valid YAML (or, for .json, not valid JSON).",
      rationale=_PARSE_WHY, rl_only=False, scope="file")
def parse_error(ctx):
    return _problems(ctx, {"parse", "json"})


@rule(id="YML-2", name="duplicate-key", level="warning", summary="A key is written twice in one mapping.",
      rationale="YAML requires keys of a mapping to be unique (YAML 1.2.2, section 3.2.1.1). Loaders differ: "
      "some keep the last value, some the first, some refuse the file, so the run depends on the loader.",
      rl_only=False, scope="file")
def duplicate_key(ctx):
    for p in ctx.doc.problems:
        if p.kind == "duplicate-key":
            yield ctx.finding(p.message, Location(ctx.doc.path, p.line, p.col), related=p.related,
                              subject=p.message.split("'")[1] if "'" in p.message else p.message)


@rule(id="YML-4", name="encoding", level="error", summary="The file is not UTF-8 text.",
      rationale="YAML streams are Unicode (YAML 1.2.2, section 5.2); most training stacks read configs as UTF-8. "
      "Undecodable bytes or binary content stop the loader; UTF-16 or UTF-32 with a byte-order mark is "
      "valid YAML but not every loader reads it (a note).",
      rl_only=False, scope="file")
def encoding(ctx):
    yield from _problems(ctx, {"encoding", "binary"})
    yield from _problems(ctx, {"encoding-other"}, level=Level.NOTE)


@rule(id="YML-5", name="limit-exceeded", level="error", summary="The file exceeds a size, nesting, alias or number limit.",
      rationale="Limits keep the check bounded in time and memory on crafted input (a nested-alias document "
      "expands exponentially in a loader that builds objects). The limits are settings "
      "(limits.max_bytes, limits.max_depth, limits.max_aliases), and an integer of 10^30 or more (a "
      "literal of thousands of digits costs time to convert and cannot be printed) is read as text "
      "and reported, the first ten of a document.",
      rl_only=False, scope="file")
def limits(ctx):
    return _problems(ctx, {"size", "depth", "aliases", "number"})


@rule(id="YML-6", name="unreadable", level="error", summary="The file cannot be read.",
      rationale="A path given to the check that cannot be opened (missing, a folder, a broken link, no "
      "permission) is reported so that a gate never passes a file it did not see.",
      rl_only=False, scope="file")
def unreadable(ctx):
    return _problems(ctx, {"io"})


@rule(id="YML-7", name="bad-merge", level="error", summary="A merge key '<<' does not refer to mappings.",
      rationale="The merge key type (YAML 1.1 type repository, 'merge') takes a mapping or a list of mappings; "
      "anything else is refused by loaders that implement merges and kept as a plain key by others.",
      rl_only=False, scope="file")
def bad_merge(ctx):
    return _problems(ctx, {"merge"})


def _kind(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, int):
        return f"the integer {value}"
    if isinstance(value, float):
        return f"the float {value!r}"
    return f"the string {str(value)!r}"


def compatible_number(text: str) -> str | None:
    """A spelling of a YAML 1.2 float that YAML 1.1 loaders also read as the same float
    (a digit before the point and a signed exponent), or None."""
    v12 = type12(text)
    if not isinstance(v12, float):
        return None
    mantissa, e, exp = text.lower().partition("e")
    sign = ""
    if mantissa[:1] in "+-":
        sign, mantissa = mantissa[0], mantissa[1:]
    if mantissa.startswith("."):
        mantissa = "0" + mantissa
    if "." not in mantissa:
        mantissa += ".0"
    elif mantissa.endswith("."):
        mantissa += "0"
    out = sign + mantissa
    if e:
        if exp[:1] not in "+-":
            exp = "+" + exp
        out += "e" + exp
    if same_value(type11(out), v12) and same_value(type12(out), v12):
        return out
    return None


@rule(id="YML-3", name="yaml-version-disagreement", level="warning",
      summary="A value a concept uses is misread by the YAML reader its file meets.",
      rationale="YAML 1.2 (core schema, YAML 1.2.2 section 10.3.2) and YAML 1.1 (type repository) type plain "
      "scalars differently: `3e-6` is a float in 1.2 and a string in 1.1 (1.1 floats need a point and a "
      "signed exponent); `on`, `off`, `yes`, `no` are booleans only in 1.1; `010` is octal 8 in 1.1 and "
      "decimal 10 in 1.2; `1:30` is the base-60 number 90 in 1.1. Several widely used config libraries read "
      "YAML 1.1 with a float fix (`1e-6` is a float, dates stay text). The settings name the reader a file "
      "meets (yaml_version, and readers by glob): the rule then reports only a value that reader misreads "
      "(text where the concept takes a number or a switch, or a number other than YAML 1.2 reads). When "
      "they name none, a value any of the three readers misreads is a note: the reader is not known, so the "
      "misreading is a possibility, and naming the reader settles it. JSON files are read under "
      "JSON's own grammar (RFC 8259) and never reported. Write the value so that every reader agrees.",
      rl_only=False)
def version_disagreement(ctx):
    m = ctx.model
    for name, v in suspects(m):
        reader, who, stated = misread(m, v)
        if not who:
            continue
        node = v.node
        a, b = node.value11, node.value12
        if stated:
            mine = node.value(reader)
            other = next(o for o in ("1.2", *YAML_READERS) if not same_value(node.value(o), mine))
            said = (f"{READER_NAMES[reader]} reads {_kind(mine)}, {READER_NAMES[other]} reads "
                    f"{_kind(node.value(other))}; {READER_NAMES[reader]} is the reader the settings name for this file")
        else:
            # which reader meets the file is not stated: the misreading is a possibility, not a fact
            said = (f"YAML 1.1 reads {_kind(a)}, YAML 1.2 reads {_kind(b)}; the settings name no reader for this "
                    "file (yaml_version, or readers by glob): name it to know whether this is misread")
        suggestion, fix = "", None
        better = compatible_number(node.text)
        if better:
            suggestion = f"write {better} (a float under both versions)"
            raw = ctx.doc.raw(node)
            if raw.endswith(node.text) and "\n" not in raw:
                start = node.end - len(node.text)
                fix = Edit(node.file, start, node.end, node.text, better)
        elif isinstance(a, bool) and isinstance(b, str):
            if v.via and reader in ("1.1", "1.1+floats") and _expects_text(name):
                suggestion = f"quote it: '{node.text}'"
                fix = Edit(node.file, node.end - len(node.text), node.end, node.text, f"'{node.text}'")
            else:
                suggestion = f"write {str(a).lower()} for a boolean, or quote '{node.text}' for text"
        elif isinstance(a, int) and isinstance(b, int):
            suggestion = f"write {b} (decimal), or 0o{b:o} for octal under YAML 1.2"
        yield ctx.finding(f"{name} = {node.text}: {said}", v.location, subject=node.text,
                          suggestion=suggestion, fix=fix, level=None if stated else "note")


def _expects_text(concept: str) -> bool:
    from trimtab.common.vocabulary import CONCEPTS

    c = CONCEPTS.get(concept)
    return c is not None and c.type == "str"  # "any" concepts (reference.source) give false a meaning

