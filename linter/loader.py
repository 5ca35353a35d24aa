"""Load: bytes on disk -> Document. Knows files and parsers, never rules.

The check path composes with libyaml through PyYAML's C loader when it is present and falls
back to ruamel.yaml (its C parser where installed). Only the node graph is built, never Python
objects, so aliases cost their text and nothing the user wrote is constructed or run.
"""
from __future__ import annotations

import codecs
import os
import re
from dataclasses import dataclass

from .document import Document, Mapping, Node, Problem, Scalar, Sequence, key_text
from .findings import Location


@dataclass(frozen=True)
class Limits:
    max_bytes: int = 10 * 1024 * 1024
    max_depth: int = 200
    max_aliases: int = 1000


_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)
_TAG_PREFIX = re.compile(r"(?:&\S+[ \t]+)?(!\S*)")


class _Backend:
    """The fastest located composer available: libyaml via PyYAML, else ruamel.yaml."""

    def __init__(self):
        self.name, self.compose_all, self.errors = self._pick()

    @staticmethod
    def _pick():
        forced = os.environ.get("TRIMTAB_PARSER", "")
        if forced != "ruamel":
            import yaml

            if getattr(yaml, "__with_libyaml__", False) and forced != "pyyaml-pure":
                loader = _untagged_loader(yaml)  # perf: see _untagged_loader
                name = "libyaml"
            elif forced == "pyyaml-pure":
                loader = yaml.SafeLoader
                name = "pyyaml"
            else:
                loader = None
            if loader is not None:
                def compose_all(text, _loader=loader):
                    return yaml.compose_all(text, Loader=_loader)

                return name, compose_all, (yaml.YAMLError,)
        from ruamel.yaml import YAML
        from ruamel.yaml.error import YAMLError as RuamelError

        def compose_all(text):
            parser = YAML(typ="safe")
            return parser.compose_all(text)

        return "ruamel", compose_all, (RuamelError,)


def _untagged_loader(yaml):
    """libyaml's composer without PyYAML's tag resolution (perf, see docs/perf.md).

    PyYAML's C composer calls back into the pure-Python resolver for every node (``resolve``, with
    its regular expressions, plus ``descend_resolver``/``ascend_resolver``): over half the time of a
    compose. trimtab never uses a resolved tag: scalars are typed by trimtab itself from their text
    (scalars.py) and the builder reads ``node.tag`` only for a tag written in the file, which the
    composer takes from the parser event without calling the resolver, with one exception: a
    plain scalar tagged ``!`` alone is resolved as if untagged. Such a scalar gets the marker
    _UNRESOLVED here, and the builder resolves it with PyYAML's own resolver (_tag). Everything
    else (parser, marks, anchors, aliases, errors) is libyaml's and PyYAML's own."""
    from yaml.nodes import MappingNode, ScalarNode

    str_tag, seq_tag, map_tag = (yaml.resolver.BaseResolver.DEFAULT_SCALAR_TAG,
                                 yaml.resolver.BaseResolver.DEFAULT_SEQUENCE_TAG,
                                 yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG)

    class UntaggedLoader(yaml.CSafeLoader):
        def resolve(self, kind, value, implicit):
            if kind is ScalarNode:
                return _UNRESOLVED if implicit[0] else str_tag
            return map_tag if kind is MappingNode else seq_tag

        def descend_resolver(self, current_node, current_index):
            pass

        def ascend_resolver(self):
            pass

    return UntaggedLoader


_backend: _Backend | None = None


def backend() -> _Backend:
    global _backend
    if _backend is None:
        _backend = _Backend()
    return _backend


def load(path: str, shown: str | None = None, limits: Limits = Limits(), fmt: str | None = None,
         data: bytes | None = None) -> Document:
    """Read one file into a Document. Never raises for anything the file contains."""
    shown = shown or path
    if fmt is None:
        fmt = "json" if path.lower().endswith(".json") else "yaml"
    doc = Document(path=shown, fmt=fmt)
    if data is None:
        try:
            if os.path.isdir(path):
                return _fail(doc, "io", "is a directory, not a file")
            with open(path, "rb") as fh:
                data = fh.read(limits.max_bytes + 1)
        except OSError as exc:
            reason = exc.strerror or type(exc).__name__
            if isinstance(exc, FileNotFoundError) and os.path.islink(path):
                reason = "broken symbolic link"
            return _fail(doc, "io", f"cannot be read: {reason}")
    if len(data) > limits.max_bytes:
        return _fail(doc, "size", f"is larger than the size limit of {limits.max_bytes} bytes "
                                  "(setting limits.max_bytes)")
    return parse_bytes(doc, data, limits)


def parse_bytes(doc: Document, data: bytes, limits: Limits) -> Document:
    # perf: no cyclic garbage collection while the trees are built. Every node is alive until the
    # file is done, so each collection would only rescan them; on a 100,000-line file that made
    # the time grow faster than the length (measured: 3.4x slower). Cycles (a recursive alias)
    # are collected as usual once the collector runs again.
    import gc

    paused = gc.isenabled()
    if paused:
        gc.disable()
    try:
        return _parse_bytes(doc, data, limits)
    finally:
        if paused:
            gc.enable()


def _parse_bytes(doc: Document, data: bytes, limits: Limits) -> Document:
    text = _decode(doc, data)
    if text is None:
        return doc
    if text.startswith("\ufeff"):
        doc.bom, text = "\ufeff", text[1:]
    doc.text = text
    if doc.fmt == "json" and not _json_ok(doc, text):
        return doc
    be = backend()
    try:
        raw_roots = [r for r in be.compose_all(text) if r is not None]
    except be.errors as exc:
        _parse_problem(doc, exc)
        return doc
    except RecursionError:
        return _fail(doc, "depth", f"nests deeper than the parser can follow (limit {limits.max_depth})")
    builder = _Builder(doc, limits)
    for i, raw in enumerate(raw_roots):
        raw_roots[i] = None  # perf: released while built (see _Builder)
        root = builder.build(raw)
        if root is None:
            break
        doc.roots.append(root)
    doc.aliases = builder.aliases
    return doc


def _fail(doc: Document, kind: str, message: str, line: int = 0, col: int = 0) -> Document:
    doc.problems.append(Problem(kind, message, line, col))
    return doc


def _decode(doc: Document, data: bytes) -> str | None:
    encoding = "utf-8"
    for bom, name in _BOMS:
        if data.startswith(bom):
            encoding = name
            data = data[len(bom):]
            break
    if encoding == "utf-8" and b"\x00" in data:
        line = data.count(b"\n", 0, data.index(b"\x00")) + 1
        _fail(doc, "binary", "holds binary content (a NUL byte), not text", line, 1)
        return None
    try:
        text = data.decode(encoding)
    except UnicodeDecodeError as exc:
        before = data[:exc.start]
        line = before.count(b"\n") + 1
        col = len(before[before.rfind(b"\n") + 1:].decode(encoding, "replace")) + 1
        _fail(doc, "encoding", f"is not valid {encoding.upper()}: byte 0x{data[exc.start]:02x} "
                               f"cannot be decoded", line, col)
        return None
    doc.encoding = encoding
    if encoding != "utf-8":
        doc.problems.append(Problem("encoding-other", f"is encoded as {encoding.upper()}, not "
                                    "UTF-8; some loaders read only UTF-8", 1, 1))
    return text


def _json_ok(doc: Document, text: str) -> bool:
    import json

    try:
        json.loads(text)
    except json.JSONDecodeError as exc:
        _fail(doc, "json", f"is not valid JSON: {exc.msg}", exc.lineno, exc.colno)
        return False
    except RecursionError:
        _fail(doc, "depth", "nests deeper than the JSON reader can follow")
        return False
    return True


def _parse_problem(doc: Document, exc: Exception) -> None:
    mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
    problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
    context = getattr(exc, "context", None)
    message = f"{context}: {problem}" if context else str(problem)
    line = mark.line + 1 if mark is not None else 0
    col = mark.column + 1 if mark is not None else 0
    related = []
    cmark = getattr(exc, "context_mark", None)
    if cmark is not None and mark is not None and cmark is not mark and (cmark.line, cmark.column) != (
            mark.line, mark.column):
        related.append(Location(doc.path, cmark.line + 1, cmark.column + 1, message=context or "context"))
    if line:
        lines = doc.text.splitlines()
        if 0 < line <= len(lines) and "\t" in lines[line - 1][: len(lines[line - 1]) - len(lines[line - 1].lstrip())]:
            message += " (this line is indented with a tab; YAML indents with spaces only)"
    doc.problems.append(Problem("parse", f"cannot be parsed as YAML: {message}", line, col, related))


_UNRESOLVED = "tag:trimtab,2026:unresolved"  # see _untagged_loader


def _tag(raw_tag, raw=None) -> str:
    if raw_tag == _UNRESOLVED and raw is not None:
        import yaml

        return yaml.resolver.Resolver().resolve(type(raw), raw.value, (True, False))
    return getattr(raw_tag, "value", raw_tag) or ""


class _Builder:
    """Turns a parser node graph into located trimtab nodes, each parser node once."""

    def __init__(self, doc: Document, limits: Limits):
        self.doc = doc
        self.limits = limits
        self.memo: dict[int, Node] = {}
        self.aliases = 0
        self.failed = False
        # perf: looked up once per file, not once per node
        self._text, self._len, self._file = doc.text, len(doc.text), doc.path
        self._anchored: bool | None = None  # do the parser's nodes carry .anchor (ruamel) or not (PyYAML)

    # perf: the parser's graph is dropped while it is built (``values[i] = None`` below), so a
    # large file never holds both trees at their full size. Safe: every parser node was alive at
    # once (the whole graph is composed first), so the ids in ``memo`` stay unique; and a node
    # reached again through an alias is found in ``memo`` before its children would be read.

    def build(self, raw) -> Node | None:
        node = self._node(raw, (), 0)
        return None if self.failed else node

    def _place(self, node: Node, raw, path: tuple) -> None:
        sm, em = raw.start_mark, raw.end_mark
        node.line, node.col = sm.line + 1, sm.column + 1
        node.end_line, node.end_col = em.line + 1, em.column + 1
        node.start, node.end = sm.index, em.index
        node.path = path
        if self._anchored is None:  # perf: a getattr with a default costs an exception per node
            self._anchored = hasattr(raw, "anchor")
        node.anchor = raw.anchor if self._anchored else None
        node.file = self._file

    def _node(self, raw, path: tuple, depth: int) -> Node | None:
        if self.failed:
            return None
        seen = self.memo.get(id(raw))
        if seen is not None:
            self.aliases += 1
            if self.aliases > self.limits.max_aliases:
                self._stop("aliases", f"uses more than {self.limits.max_aliases} alias references "
                                      "(setting limits.max_aliases)", raw)
            return seen
        if depth > self.limits.max_depth:
            self._stop("depth", f"nests deeper than {self.limits.max_depth} levels "
                                "(setting limits.max_depth)", raw)
            return None
        kind = type(raw).__name__
        if kind == "ScalarNode":
            tag = None
            text = self._text
            start = raw.start_mark.index
            if start < self._len and text[start] in "!&":
                m = _TAG_PREFIX.match(text, start)
                if m:
                    tag = _tag(raw.tag, raw)
            node: Node = Scalar(raw.value, raw.style or None, tag)
            self._place(node, raw, path)
            self.memo[id(raw)] = node
            return node
        if kind == "SequenceNode":
            node = Sequence()
            self._place(node, raw, path)
            self.memo[id(raw)] = node
            items, build = node.items, self._node  # perf: bound once per collection
            values = raw.value
            release = type(values) is list
            for i, item in enumerate(values):
                child = build(item, path + (str(i),), depth + 1)
                if child is None:
                    return node
                items.append(child)
                if release:
                    values[i] = None
            return node
        node = Mapping()
        self._place(node, raw, path)
        self.memo[id(raw)] = node
        first: dict[str, Node] = {}
        pairs, build = node.pairs, self._node  # perf: bound once per collection
        values = raw.value
        release = type(values) is list
        for i, (raw_k, raw_v) in enumerate(values):
            if release:
                values[i] = None
            k = build(raw_k, path, depth + 1)
            if k is None:
                return node
            name = key_text(k)
            v = build(raw_v, path + (name,), depth + 1)
            if v is None:
                return node
            pairs.append((k, v))
            if name == "<<" and isinstance(k, Scalar) and k.plain:
                self._merge(node, k, v)
                continue
            if isinstance(k, Scalar):
                if name in first:
                    prev = first[name]
                    self.doc.problems.append(Problem(
                        "duplicate-key", f"key '{name}' is written twice in one mapping; which value "
                        "wins depends on the loader", k.line, k.col,
                        [Location(self.doc.path, prev.line, prev.col, message=f"first '{name}' here")]))
                else:
                    first[name] = k
        return node

    def _merge(self, node: Mapping, key: Scalar, value: Node) -> None:
        sources = value.items if isinstance(value, Sequence) else [value]
        for src in sources:
            if isinstance(src, Mapping) and src is not node:
                for _name, k, v, _via in src.entries():
                    node.merged.append((k, v, key))
            else:
                self.doc.problems.append(Problem(
                    "merge", "a merge key '<<' must refer to a mapping or a list of mappings",
                    key.line, key.col))
                return

    def _stop(self, kind: str, message: str, raw) -> None:
        if not self.failed:
            self.failed = True
            self.doc.problems.append(Problem(kind, message, raw.start_mark.line + 1, raw.start_mark.column + 1))
