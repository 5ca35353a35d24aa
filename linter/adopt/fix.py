"""Safe fixes: apply the ``Edit`` a rule attached to a finding, and prove the result.

A rule declares a safe fix by attaching ``fix=Edit(path, start, end, old, new[, value])`` to its
finding: the character span of one scalar in ``Document.text`` and the text that replaces it. A
rule attaches one only when the change keeps the meaning exact (a respelling both YAML versions
read alike, quoting text that YAML 1.1 would read as a boolean) or corrects a value the rule can
prove (``value=`` the corrected value, e.g. the product of the factors it was derived from).

This module never trusts the edit. For each file it splices the new text into the original (so
every byte outside the edited spans stays as it was: comments, blank lines, key order, quoting,
indentation, line endings, byte-order mark, encoding), then reads the original and the result
with ruamel.yaml's round-trip loader (YAML 1.2) and with PyYAML's safe loader (YAML 1.1) -- or
with the json module for a .json file -- and refuses the whole file's fixes unless, for every
reader, the edited scalars now read as intended and every other value, key and container of
every document is unchanged. An edit never adds a key, so a fix never invents a hyperparameter.
"""
from __future__ import annotations

import codecs
import difflib
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable

from ..common.redact import for_text
from ..common.findings import KEEP, Edit, Finding

_BOMS = (codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE, codecs.BOM_UTF8, codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)
MAX_LEAVES = 200_000
_PROPERTIES = re.compile(r"(?:[&!]\S*[ \t]+)*")  # an anchor or tag before the scalar's own text


class Refused(Exception):
    """A fix that cannot be proved safe; the message says why."""


@dataclass
class FileFix:
    path: str  # as shown to the user
    disk: Path
    before: bytes = b""
    after: bytes = b""
    text_before: str = ""
    text_after: str = ""
    applied: list[Finding] = field(default_factory=list)
    refused: list[tuple[Finding, str]] = field(default_factory=list)

    @property
    def changed(self) -> bool:
        return bool(self.applied) and self.after != self.before

    def diff(self) -> str:
        """A unified diff of the fix (difflib), paths as shown to the user."""
        rel = not self.path.startswith("/")
        lines = difflib.unified_diff(self.text_before.splitlines(keepends=True),
                                     self.text_after.splitlines(keepends=True),
                                     fromfile=f"a/{self.path}" if rel else self.path,
                                     tofile=f"b/{self.path}" if rel else self.path)
        out = []
        for line in lines:
            # every line masked and its control characters made visible (trimtab.common.redact): the context
            # lines around a fix are the file's own and can hold a credential or a terminal command
            body = line[:-1] if line.endswith("\n") else line
            out.append(for_text(body) + ("\n" if line.endswith("\n") else "\n\\ No newline at end of file\n"))
        return "".join(out)

    def write(self) -> None:
        if self.changed:
            from ..common.paths import write_atomic

            # through a link (inside the repository) to the file itself: the link stays a link
            write_atomic(os.path.realpath(self.disk), self.after)


def plan(findings: Iterable[Finding], locate: Callable[[str], Path | None]) -> list[FileFix]:
    """The fixes of these findings, grouped by file, proved or refused. Nothing is written."""
    by_file: dict[str, list[Finding]] = {}
    for f in findings:
        if isinstance(f.fix, Edit):
            by_file.setdefault(f.fix.path, []).append(f)
    out = []
    for path in sorted(by_file):
        disk = locate(path)
        ff = FileFix(path, disk if disk is not None else Path(path))
        if disk is None:
            ff.refused = [(f, "the file is not on disk") for f in by_file[path]]
        else:
            _plan_file(ff, by_file[path])
        out.append(ff)
    return out


def _plan_file(ff: FileFix, findings: list[Finding]) -> None:
    from ..load import loader

    try:
        ff.before = ff.disk.read_bytes()
    except OSError as exc:
        ff.refused = [(f, f"cannot be read: {exc.strerror}") for f in findings]
        return
    fmt = "json" if ff.path.lower().endswith(".json") else "yaml"
    doc = loader.parse_bytes(loader.Document(path=ff.path, fmt=fmt), ff.before, loader.Limits())
    if not doc.readable or not doc.roots:
        ff.refused = [(f, "the file no longer reads cleanly") for f in findings]
        return
    prefix = next((b for b in _BOMS if ff.before.startswith(b)), b"")
    if prefix + (doc.bom + doc.text).encode(doc.encoding) != ff.before:
        ff.refused = [(f, f"the file cannot be written back byte for byte as {doc.encoding}") for f in findings]
        return
    text = doc.text
    # one edit per span; findings that ask for the same edit share it
    edits: dict[tuple[int, int], tuple[Edit, list[Finding]]] = {}
    for f in findings:
        e = f.fix
        key = (e.start, e.end)
        if key in edits:
            if (edits[key][0].new, repr(edits[key][0].value)) == (e.new, repr(e.value)):
                edits[key][1].append(f)
            else:
                ff.refused.append((f, "another fix edits the same scalar differently"))
            continue
        edits[key] = (e, [f])
    scalars = _value_scalars(doc)
    chosen: list[tuple[Edit, list[Finding], object]] = []
    last_end = -1
    for (start, end), (e, fs) in sorted(edits.items()):
        try:
            node = _check_span(e, text, scalars)
            if start < last_end:
                raise Refused("it overlaps another fix")
        except Refused as exc:
            ff.refused.extend((f, str(exc)) for f in fs)
            continue
        chosen.append((e, fs, node))
        last_end = end
    if not chosen:
        return
    try:
        new_text = _prove(doc, text, chosen, fmt)
    except Refused as exc:
        if len(chosen) == 1:
            ff.refused.extend((f, str(exc)) for f in chosen[0][1])
            return
        # prove each edit alone, then the ones that pass together
        passing = []
        for item in chosen:
            try:
                _prove(doc, text, [item], fmt)
                passing.append(item)
            except Refused as one:
                ff.refused.extend((f, str(one)) for f in item[1])
        try:
            new_text = _prove(doc, text, passing, fmt) if passing else None
        except Refused as together:
            ff.refused.extend((f, f"{together} (with the other fixes of this file)") for _e, fs, _n in passing
                              for f in fs)
            new_text = None
        if new_text is None:
            return
        chosen = passing
    ff.text_before, ff.text_after = text, new_text
    ff.after = prefix + (doc.bom + new_text).encode(doc.encoding)
    ff.applied = [f for _e, fs, _n in chosen for f in fs]


def _prove(doc, text: str, chosen: list, fmt: str) -> str:
    """The text with these edits applied, once every reader confirms it; else Refused."""
    new_text = text
    for e, _fs, _node in reversed(chosen):
        new_text = new_text[:e.start] + e.new + new_text[e.end:]
    intended = {}
    for e, _fs, loc in chosen:
        value = loc.value12 if e.value is KEEP else e.value
        intended[(_root_index(doc, loc),) + tuple(loc.path)] = _norm(value)
    verify(text, new_text, intended, fmt)
    return new_text


def _value_scalars(doc) -> dict[int, tuple]:
    """Scalar nodes that are mapping values or sequence items (never keys), by end offset."""
    from ..load.document import Mapping, Scalar, Sequence, walk

    out: dict[int, tuple] = {}
    for root in doc.roots:
        for node in walk(root):
            if isinstance(node, Mapping):
                out.update((v.end, (v, root)) for _k, v in node.pairs if isinstance(v, Scalar))
            elif isinstance(node, Sequence):
                out.update((v.end, (v, root)) for v in node.items if isinstance(v, Scalar))
        if isinstance(root, Scalar):
            out[root.end] = (root, root)
    return out


def _check_span(e: Edit, text: str, scalars: dict) -> object:
    if not (0 <= e.start < e.end <= len(text)):
        raise Refused("its span lies outside the file")
    if text[e.start:e.end] != e.old:
        raise Refused(f"the file changed since the check (expected {e.old!r} at that place)")
    if any(c in e.new for c in "\r\n"):
        raise Refused("the new text spans lines")
    hit = scalars.get(e.end)
    if hit is None or hit[0].start > e.start:
        raise Refused("its span is not one scalar value of the file")
    node, root = hit
    if not _PROPERTIES.fullmatch(text[node.start:e.start]):
        raise Refused("its span is not the whole text of one scalar")
    return _Located(node, root)


class _Located:
    """A scalar node and the document root it belongs to."""

    def __init__(self, node, root):
        self.node, self.root = node, root
        self.path, self.value12 = node.path, node.value12


def _root_index(doc, located: _Located) -> int:
    return next(i for i, r in enumerate(doc.roots) if r is located.root)


# --- verification ------------------------------------------------------------------------------
def verify(before: str, after: str, intended: dict[tuple, tuple], fmt: str = "yaml") -> None:
    """Raise Refused unless every reader reads ``after`` as ``before`` except at the ``intended``
    paths (document index, key, key, ...), which must read as intended."""
    readers = [("json", _read_json)] if fmt == "json" else [("ruamel.yaml", _read_ruamel),
                                                           ("PyYAML", _read_pyyaml)]
    for name, read in readers:
        try:
            old = _flatten(read(before))
        except Refused:
            raise
        except Exception as exc:  # any reader failure means "cannot prove"
            raise Refused(f"{name} cannot read the original file ({type(exc).__name__}), so the fix "
                          "cannot be proved") from None
        try:
            new = _flatten(read(after))
        except Exception as exc:
            raise Refused(f"{name} cannot read the fixed file ({type(exc).__name__})") from None
        if list(old) != list(new):
            raise Refused(f"{name} reads a different set of keys after the fix")
        for path, value in new.items():
            if path in intended:
                if value != intended[path]:
                    raise Refused(f"{name} reads {_show(value)} at {_dotted(path)} after the fix, not "
                                  f"{_show(intended[path])}")
            elif value != old[path]:
                raise Refused(f"{name} reads {_dotted(path)} differently after the fix "
                              "(the edited value is also used elsewhere, e.g. through an alias)")
        missing = [p for p in intended if p not in new]
        if missing:
            raise Refused(f"{name} does not find {_dotted(missing[0])} where the fix expects it")


def _read_ruamel(text: str):
    from ruamel.yaml import YAML

    y = YAML(typ="rt")
    y.allow_duplicate_keys = True
    return list(y.load_all(text))


def _read_pyyaml(text: str):
    import yaml

    base = getattr(yaml, "CSafeLoader", yaml.SafeLoader)

    class _Loader(base):  # type: ignore[misc, valid-type]
        pass

    def unknown(loader, suffix, node):
        if isinstance(node, yaml.ScalarNode):
            return ("!tag", node.tag, loader.construct_scalar(node))
        if isinstance(node, yaml.SequenceNode):
            return ("!tag", node.tag, loader.construct_sequence(node))
        return ("!tag", node.tag, loader.construct_mapping(node))

    _Loader.add_multi_constructor("", unknown)
    return list(yaml.load_all(text, Loader=_Loader))


def _read_json(text: str):
    import json

    return [json.loads(text)]


def _flatten(docs: list) -> dict[tuple, tuple]:
    """(document index, key, ...) -> normalised value, for every container and leaf, in order."""
    out: dict[tuple, tuple] = {}
    for i, d in enumerate(docs):
        _walk(d, (i,), out, set())
    return out


def _walk(value, path: tuple, out: dict, stack: set) -> None:
    if len(out) > MAX_LEAVES:
        raise Refused("the file expands to too many values to prove the fix")
    if isinstance(value, dict):
        if id(value) in stack:
            out[path] = ("cycle",)
            return
        stack.add(id(value))
        keys = [_key(k) for k in value]
        out[path] = ("map", tuple(keys))
        for k, v in zip(keys, value.values()):
            _walk(v, path + (k,), out, stack)
        stack.discard(id(value))
    elif isinstance(value, (list, tuple)) and not (isinstance(value, tuple) and value[:1] == ("!tag",)):
        if id(value) in stack:
            out[path] = ("cycle",)
            return
        stack.add(id(value))
        out[path] = ("seq", len(value))
        for n, v in enumerate(value):
            _walk(v, path + (str(n),), out, stack)
        stack.discard(id(value))
    elif isinstance(value, tuple):  # an unknown tag read by PyYAML
        out[path] = ("tag", value[1])
        _walk(value[2], path + ("!",), out, stack)
    else:
        tag = getattr(value, "tag", None)  # ruamel.yaml keeps unknown tags on the value
        tag_value = getattr(tag, "value", None) if tag is not None else None
        norm = _norm(value)
        out[path] = norm + ((tag_value,) if tag_value else ())


def _key(k) -> str:
    if isinstance(k, bool):
        return str(k).lower()
    return str(k)


def _norm(value) -> tuple:
    """A value as (type, value), the same whichever reader built it."""
    if value is None:
        return ("null",)
    if isinstance(value, bool):
        return ("bool", bool(value))
    if isinstance(value, int):
        return ("int", int(value))
    if isinstance(value, float):
        v = float(value)
        return ("float", "nan" if math.isnan(v) else v)
    if isinstance(value, str):
        return ("str", str(value))
    if isinstance(value, (bytes, bytearray)):
        return ("binary", bytes(value))
    if hasattr(value, "isoformat"):
        return ("time", value.isoformat())
    return (type(value).__name__, repr(value))


def _show(norm: tuple) -> str:
    kind = norm[0]
    if kind == "null":
        return "null"
    if kind == "str":
        return f"the string {norm[1]!r}"
    if kind in ("int", "float", "bool"):
        return f"the {'boolean' if kind == 'bool' else ('integer' if kind == 'int' else kind)} {norm[1]!r}"
    return kind


def _dotted(path: tuple) -> str:
    doc, *keys = path
    return (f"document {doc + 1}: " if doc else "") + (".".join(keys) or "(top)")
