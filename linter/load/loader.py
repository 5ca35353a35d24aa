"""Load: bytes on disk -> Document. Knows files and parsers, never rules.

The check path composes with libyaml through PyYAML's C loader when it is present and falls
back to ruamel.yaml (its C parser where installed). Only the node graph is built, never Python
objects, so aliases cost their text and nothing the user wrote is constructed or run.
"""
from __future__ import annotations

import codecs
import contextlib
import functools
import gc
import os
import stat
import warnings
from typing import Any

from ..common import scalars
from .document import _UNSET, LINE_BREAKS, Document, Lines, Mapping, Node, Problem, Scalar, Sequence, key_text
from ..common.findings import Location
from ..common.limits import Limits
from ..common.patterns import later
from ..common.redact import learn


_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)
_TAG_PREFIX = later(r"(?:&\S+[ \t]+)?(!\S*)")
_ANCHOR = later(r"(?:![^\s,\[\]{}]*[ \t]+)?&([^\s,\[\]{}]+)")


class _Backend:
    """The fastest located composer available: libyaml via PyYAML, else ruamel.yaml."""

    def __init__(self):
        self.name, self.compose_all, self.errors = self._pick()
        # perf: PyYAML's parsers (libyaml's or the pure one) also give the parser's events, from
        # which the located tree is built directly (_EventBuilder); ruamel.yaml's node graph is read
        self.events_loader = getattr(self.compose_all, "loader", None)

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

                compose_all.loader = loader  # type: ignore[attr-defined]
                return name, compose_all, (yaml.YAMLError,)
        from ruamel.yaml import YAML
        from ruamel.yaml.error import YAMLError as RuamelError

        def compose_all(text):
            parser = YAML(typ="safe")
            return parser.compose_all(text)

        return "ruamel", compose_all, (RuamelError,)


_backend: _Backend | None = None


def _untagged_loader(yaml):
    """libyaml's composer without PyYAML's tag resolution (perf, see docs/perf.md).

    PyYAML's C composer calls back into the pure-Python resolver for every node (``resolve``, with
    its regular expressions, plus ``descend_resolver``/``ascend_resolver``): over half the time of a
    compose. trimtab never uses a resolved tag: scalars are typed by trimtab itself from their text
    (scalars.py), and the builder reads ``node.tag`` only for a tag written in the file (other than
    the non-specific ``!``), which the composer takes from the parser event without calling the
    resolver. So the resolver here answers PyYAML's defaults (str / seq / map) at once. Everything
    else (parser, marks, anchors, aliases, errors) is libyaml's and PyYAML's own."""
    from yaml.nodes import MappingNode, ScalarNode

    str_tag, seq_tag, map_tag = (yaml.resolver.BaseResolver.DEFAULT_SCALAR_TAG,
                                 yaml.resolver.BaseResolver.DEFAULT_SEQUENCE_TAG,
                                 yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG)

    class UntaggedLoader(yaml.CSafeLoader):
        def resolve(self, kind, value, implicit):
            return str_tag if kind is ScalarNode else map_tag if kind is MappingNode else seq_tag

        def descend_resolver(self, current_node, current_index):
            pass

        def ascend_resolver(self):
            pass

    return UntaggedLoader


def backend() -> _Backend:
    global _backend
    if _backend is None:
        _backend = _Backend()
    return _backend


def load(path: str, shown: str | None = None, limits: Limits = Limits(), fmt: str | None = None,
         data: bytes | None = None) -> Document:
    """Read one file into a Document. Never raises for anything the file contains or for
    anything that goes wrong while reading it: each failure is a located Problem."""
    shown = shown or path
    if fmt is None:
        fmt = "json" if path.lower().endswith(".json") else "yaml"
    doc = Document(path=shown, fmt=fmt)
    if data is None:
        data, why = read(path, limits)
        if why:
            return _fail(doc, "io", why)
    if len(data) > limits.max_bytes:
        return _fail(doc, "size", f"is larger than the size limit of {limits.max_bytes} bytes "
                                  "(setting limits.max_bytes)")
    parse_bytes(doc, data, limits)
    learn(doc)  # every output masks the credentials of every file read (trimtab.common.redact)
    return doc


_O_FLAGS = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)


def _read_fd(fd: int, limit: int) -> bytes:
    """Up to ``limit`` bytes from an open file (a seam the tests use to simulate a writer)."""
    chunks, left = [], limit
    while left > 0:
        chunk = os.read(fd, min(left, 1 << 20))
        if not chunk:
            break
        chunks.append(chunk)
        left -= len(chunk)
    return b"".join(chunks)


def read(path: str, limits: Limits = Limits()) -> tuple[bytes | None, str]:
    """(bytes, "") or (None, why the file cannot be read). Reads at most max_bytes + 1 bytes.

    Opens without blocking (a pipe or device named as a config never hangs the check), refuses
    anything but a regular file, and notices a file that changes while it is read (the bytes
    would be a mix of two versions)."""
    try:
        fd = os.open(path, _O_FLAGS)
    except FileNotFoundError:
        if os.path.islink(path):
            target = os.readlink(path)
            return None, f"cannot be read: broken symbolic link (its target {target} does not exist)"
        return None, "cannot be read: no such file"
    except PermissionError:
        return None, "cannot be read: permission denied"
    except IsADirectoryError:
        return None, "is a directory, not a file"
    except OSError as exc:
        return None, f"cannot be read: {exc.strerror or type(exc).__name__}"
    try:
        before = os.fstat(fd)
        if stat.S_ISDIR(before.st_mode):
            return None, "is a directory, not a file"
        if not stat.S_ISREG(before.st_mode):
            return None, "is not a regular file (a pipe, socket or device), so it was not read"
        if hasattr(os, "set_blocking"):
            os.set_blocking(fd, True)
        data = _read_fd(fd, limits.max_bytes + 1)
        after = os.fstat(fd)
        try:
            now = os.stat(path)
        except OSError:
            now = None
    except OSError as exc:
        return None, f"cannot be read: {exc.strerror or type(exc).__name__}"
    finally:
        os.close(fd)
    changed = (before.st_size, before.st_mtime_ns) != (after.st_size, after.st_mtime_ns)
    if len(data) <= limits.max_bytes and after.st_size and len(data) != after.st_size:
        # (a size of 0 is what some pseudo file systems report for any file: not a change)
        changed = True
    if now is None or (now.st_ino, now.st_dev, now.st_size, now.st_mtime_ns) != (
            after.st_ino, after.st_dev, after.st_size, after.st_mtime_ns):
        changed = True
    if changed:
        return None, ("changed while it was being read (another program is writing it); "
                      "check it again once it is saved")
    return data, ""


def parse_bytes(doc: Document, data: bytes, limits: Limits) -> Document:
    text = _decode(doc, data)
    if text is None:
        return doc
    if text.startswith("\ufeff"):
        doc.bom, text = "\ufeff", text[1:]
    doc.text = text
    if doc.fmt == "json" and not _json_ok(doc, text, limits):
        return doc
    # Building the node graph creates many small objects and no garbage: pausing the cyclic
    # collector meanwhile cuts the time on a large file by about a third (measured here on a
    # 100,000-line file: 2.9-3.3 s CPU with the collector on, 1.6-2.2 s paused).
    paused = gc.isenabled()
    gc.disable()
    try:
        return _compose(doc, text, limits)
    finally:
        if paused:
            gc.enable()


def _compose(doc: Document, text: str, limits: Limits, events: bool = True) -> Document:
    """Build the located tree: from the parser's events where the parser gives them (``events``;
    False reads the parser's composed node graph instead, as with ruamel.yaml, which the tests use
    to prove both trees the same)."""
    be = backend()
    source = text
    if doc.fmt == "json":
        # valid JSON (checked above) holds tabs only as whitespace between tokens, never inside a
        # string; YAML refuses a tab before a top-level value. A space for each tab keeps every
        # column where it was.
        source = text.replace("\t", " ")
    if events and be.events_loader is not None:
        return _compose_events(doc, source, limits, be)
    try:
        with warnings.catch_warnings():  # a parser's own warnings (a reused anchor) are not output
            warnings.simplefilter("ignore")
            raw_roots = [r for r in be.compose_all(source) if r is not None]
    except be.errors as exc:
        _parse_problem(doc, exc, limits)
        if doc.fmt == "json" and doc.problems and doc.problems[-1].kind == "parse":
            p = doc.problems[-1]
            p.message = p.message.replace("cannot be parsed as YAML: ", "is valid JSON, but the YAML reader "
                                          "cannot follow it (a key longer than 1024 characters?): ", 1)
        return doc
    except RecursionError:
        line, col = _deep_mark(text, limits.max_depth)
        return _fail(doc, "depth", f"nests deeper than {limits.max_depth} levels (setting limits.max_depth)",
                     line, col)
    except Exception as exc:  # a reader defect must not become a traceback: say so, located at the file
        return _fail(doc, "parse", f"cannot be read: the YAML reader failed ({type(exc).__name__}: {exc})")
    builder = _Builder(doc, limits, be.name)
    raw_roots.reverse()
    while raw_roots:
        root = builder.build(raw_roots.pop())  # perf: each parser graph is let go as it is read
        if root is None:
            break
        doc.roots.append(root)
    builder.finish()
    doc.aliases = builder.aliases
    return doc


def _compose_events(doc: Document, source: str, limits: Limits, be: _Backend) -> Document:
    """The located tree built from the parser's events (perf and memory: the parser's node graph
    is never made; see _EventBuilder). A parse error anywhere leaves no tree, as a composer's would."""
    builder = _EventBuilder(doc, limits, be.name)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            roots = builder.run(be.events_loader(source))
    except be.errors as exc:
        _parse_problem(doc, exc, limits)
        if doc.fmt == "json" and doc.problems and doc.problems[-1].kind == "parse":
            p = doc.problems[-1]
            p.message = p.message.replace("cannot be parsed as YAML: ", "is valid JSON, but the YAML reader "
                                          "cannot follow it (a key longer than 1024 characters?): ", 1)
        return doc
    except Exception as exc:  # a reader defect must not become a traceback: say so, located at the file
        return _fail(doc, "parse", f"cannot be read: the YAML reader failed ({type(exc).__name__}: {exc})")
    doc.problems.extend(builder.problems)
    doc.roots.extend(roots)
    builder.finish()
    doc.aliases = builder.aliases
    if builder.whole and not builder.failed:
        doc.keyed = builder.keyed
    return doc


def _deep_mark(text: str, max_depth: int, upto: int | None = None) -> tuple[int, int]:
    """Where nesting first passes ``max_depth``, found with an event parser (which, unlike a
    composer, does not recurse): libyaml's, else (when libyaml stops before it yields the event,
    at its own limit of 1000 levels) PyYAML's pure-Python one on the text up to where libyaml
    stopped (``upto``). (0, 0) when it cannot be found."""
    import yaml

    readers = [yaml.SafeLoader]
    if getattr(yaml, "__with_libyaml__", False):
        readers.insert(0, yaml.CSafeLoader)
    for reader in readers:
        depth = 0
        try:
            part = text if reader is not yaml.SafeLoader or upto is None else text[:upto]
            for event in yaml.parse(part, Loader=reader):
                if isinstance(event, yaml.CollectionStartEvent):
                    depth += 1
                    if depth > max_depth:
                        return event.start_mark.line + 1, event.start_mark.column + 1
                elif isinstance(event, yaml.CollectionEndEvent):
                    depth -= 1
        except Exception:
            continue
    return 0, 0


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
        head = data[:256]
        if len(head) >= 4 and (not any(head[1::2]) or not any(head[0::2])):
            _fail(doc, "binary", "holds NUL bytes between its characters: it looks like UTF-16 without a "
                                 "byte-order mark; save it as UTF-8", 1, 1)
        else:
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


def _json_deep_mark(text: str, max_depth: int) -> tuple[int, int]:
    """Where JSON brackets (outside strings) first nest past ``max_depth``."""
    depth, in_str, escaped = 0, False, False
    for i, ch in enumerate(text):
        if in_str:
            if escaped:
                escaped = False
            elif ch == "\\":
                escaped = True
            elif ch == '"':
                in_str = False
        elif ch == '"':
            in_str = True
        elif ch in "[{":
            depth += 1
            if depth > max_depth:
                line = text.count("\n", 0, i) + 1
                return line, i - (text.rfind("\n", 0, i) + 1) + 1
        elif ch in "]}":
            depth -= 1
    return 0, 0


def _json_ok(doc: Document, text: str, limits: Limits = Limits()) -> bool:
    import json

    try:
        json.loads(text)
    except json.JSONDecodeError as exc:
        _fail(doc, "json", f"is not valid JSON: {exc.msg}", exc.lineno, exc.colno)
        return False
    except RecursionError:
        line, col = _json_deep_mark(text, limits.max_depth)
        _fail(doc, "depth", f"nests deeper than {limits.max_depth} levels (setting limits.max_depth)", line, col)
        return False
    except ValueError as exc:  # e.g. an integer longer than the interpreter converts
        _fail(doc, "json", f"is not readable as JSON: {exc}")
        return False
    return True


_NESTING = "exceeded maximum nesting depth"


def _parse_problem(doc: Document, exc: Exception, limits: Limits = Limits()) -> None:
    mark = getattr(exc, "problem_mark", None) or getattr(exc, "context_mark", None)
    problem = getattr(exc, "problem", None) or (str(exc).splitlines() or [type(exc).__name__])[0]
    context = getattr(exc, "context", None)
    message = f"{context}: {problem}" if context else str(problem)
    line = mark.line + 1 if mark is not None else 0
    col = mark.column + 1 if mark is not None else 0
    position = getattr(exc, "position", None)  # a reader error (a control character) has only this
    if mark is None and isinstance(position, int) and 0 <= position <= len(doc.text):
        before = doc.text[:position]
        line = before.count("\n") + 1
        col = position - (before.rfind("\n") + 1) + 1
        reason = getattr(exc, "reason", "") or "is not allowed"
        char = getattr(exc, "character", None)
        shown = f"#x{ord(char):04x}" if isinstance(char, str) else f"#x{char:04x}" if isinstance(char, int) else "a character"
        message = f"character {shown} {reason}" if "character" not in str(reason) else f"{shown}: {reason}"
    if _NESTING in str(problem):
        upto = mark.index + 1 if mark is not None else None
        line, col = _deep_mark(doc.text, limits.max_depth, upto) if limits.max_depth < 1000 else (0, 0)
        if not line:
            line, col = (mark.line + 1, mark.column + 1) if mark is not None else (0, 0)
        doc.problems.append(Problem("depth", f"nests deeper than {limits.max_depth} levels (setting "
                                    "limits.max_depth)", line, col))
        return
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


def _tag(raw_tag) -> str:
    return getattr(raw_tag, "value", raw_tag) or ""


MAX_NUMBER_PROBLEMS = 10  # integers past the limit reported per document


class _Builder:
    """Turns a parser node graph into located trimtab nodes, each parser node once.

    perf: the graph is let go as it is read (each parser node's slot in its parent is cleared once
    its trimtab node exists), so a large file's two trees never coexist whole; only the nodes an
    alias can reach again (collections and anchored scalars) are remembered by identity. The
    graph is the builder's own: nothing else holds it."""

    def __init__(self, doc: Document, limits: Limits, engine: str = ""):
        self.doc = doc
        self.limits = limits
        self.engine = engine
        self.problems: list[Problem] = doc.problems  # the event builder keeps its own until the end
        self.memo: dict[int, Node] = {}
        self.aliases = 0
        self.numbers = 0
        self.failed = False
        # empty plain scalars inside flow mappings: (node, "key" | "value")
        self.empties: list[tuple[Scalar, str]] = []

    def finish(self) -> None:
        """libyaml places an empty key or value of a flow mapping (``{a: }``, ``{? }``) at the next
        token; the YAML reference reader (PyYAML's pure composer) places it right after the ``:`` or
        ``?`` that introduced it, which is where a person looks. Move such nodes there."""
        if not self.empties or self.engine != "libyaml" or self.failed:
            return
        import yaml

        after: dict[tuple[int, type], Any] = {}
        prev = None
        try:
            for tok in yaml.scan(self.doc.text, Loader=yaml.CSafeLoader):
                if prev is not None and isinstance(prev, (yaml.KeyToken, yaml.ValueToken)):
                    after.setdefault((tok.start_mark.index, type(prev)), prev.end_mark)
                prev = tok
        except yaml.YAMLError:
            return
        for node, role in self.empties:
            want = yaml.KeyToken if role == "key" else yaml.ValueToken
            mark = after.get((node.start, want))
            if mark is not None:
                node.line, node.col = mark.line + 1, mark.column + 1
                node.end_line, node.end_col = node.line, node.col
                node.start = node.end = mark.index

    def build(self, raw) -> Node | None:
        node = self._node(raw, (), 0)
        return None if self.failed else node

    def _place(self, node: Node, raw, path: tuple) -> None:
        sm, em = raw.start_mark, raw.end_mark
        node.line, node.col = sm.line + 1, sm.column + 1
        node.end_line, node.end_col = em.line + 1, em.column + 1
        node.start, node.end = sm.index, em.index
        node.path = path
        node.anchor = getattr(raw, "anchor", None)
        text = self.doc.text
        if node.anchor is None and sm.index < len(text) and text[sm.index] in "!&":
            # PyYAML's nodes do not keep their anchor; a node's start mark is at its properties
            # (perf: the pattern is tried only where properties can start, '!' or '&')
            m = _ANCHOR.match(text, sm.index)
            if m:
                node.anchor = m.group(1)
        node.file = self.doc.path

    def _node(self, raw, path: tuple, depth: int, role: str = "") -> Node | None:
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
            text = self.doc.text
            start = raw.start_mark.index
            if start < len(text) and text[start] in "!&":
                m = _TAG_PREFIX.match(text, start)
                if m:
                    # the non-specific tag '!' means "a string" (YAML 1.2.2, section 6.9.1);
                    # some readers resolve it like a plain scalar
                    tag = "!" if m.group(1) == "!" else _tag(raw.tag)
            scalar = Scalar(raw.value, raw.style or None, tag)
            node: Node = scalar
            self._place(node, raw, path)
            if len(raw.value) > scalars.MAX_INT_TEXT and scalar.plain and tag is None and scalars.oversized(raw.value):
                self._oversized(scalar)
            if node.anchor is not None:  # only an anchored scalar can be met again (an alias)
                self.memo[id(raw)] = node
            if role and not raw.value and scalar.plain and node.start == node.end and not node.anchor:
                self.empties.append((scalar, role))
            return node
        if kind == "SequenceNode":
            node = Sequence()
            self._place(node, raw, path)
            self.memo[id(raw)] = node
            items = raw.value
            for i, item in enumerate(items):
                child = self._node(item, path + (str(i),), depth + 1)
                if child is None:
                    return node
                node.items.append(child)
                items[i] = None  # let go of the parser's node (see _Builder)
            return node
        node = Mapping()
        self._place(node, raw, path)
        self.memo[id(raw)] = node
        first: dict[str, Node] = {}
        flow = bool(getattr(raw, "flow_style", False))
        pairs = raw.value
        for i, (raw_k, raw_v) in enumerate(pairs):
            pairs[i] = None  # let go of the parser's nodes once read (see _Builder)
            k = self._node(raw_k, path, depth + 1, "key" if flow else "")
            if k is None:
                return node
            name = key_text(k)
            v = self._node(raw_v, path + (name,), depth + 1, "value" if flow else "")
            if v is None:
                return node
            node.pairs.append((k, v))
            if name == "<<" and isinstance(k, Scalar) and k.plain:
                self._merge(node, k, v)
                continue
            if isinstance(k, Scalar):
                _first_or_duplicate(first, name, k, self.doc.path, self.problems)
        return node

    def _oversized(self, node: Scalar) -> None:
        self.numbers += 1
        if self.numbers > MAX_NUMBER_PROBLEMS:
            return  # a file of thousands of them: the first few are reported
        text = node.text
        shown = text if len(text) <= 24 else f"{text[:12]}...{text[-6:]}"
        self.problems.append(Problem(
            "number", f"the integer {shown} ({len(text)} characters) is past trimtab's limit (10^30): it is "
            "read as text, and nothing that depends on it is checked", node.line, node.col))

    def _merge(self, node: Mapping, key: Scalar, value: Node) -> None:
        sources = value.items if isinstance(value, Sequence) else [value]
        for src in sources:
            if isinstance(src, Mapping) and src is not node:
                for _name, k, v, _via in src.entries():
                    node.merged.append((k, v, key))
            else:
                self.problems.append(Problem(
                    "merge", "a merge key '<<' must refer to a mapping or a list of mappings",
                    key.line, key.col))
                return

    def _stop(self, kind: str, message: str, raw) -> None:
        if not self.failed:
            self.failed = True
            self.problems.append(Problem(kind, message, raw.start_mark.line + 1, raw.start_mark.column + 1))


# --- the parser's events, light ----------------------------------------------------------------
# perf: PyYAML's event classes are pure Python: each event libyaml parses costs a call of a Python
# __init__ and an attribute dict (about a tenth of the whole check's time on the benchmark corpus,
# sampled: more than libyaml's own parse). The event builder needs each event's kind and fields only. So while it
# reads libyaml's events, the C parser makes them as light events: one class per kind whose
# constructor is BaseException's, written in C, which keeps the arguments as given (``args``) and
# runs no Python. The C parser passes each kind's fields in PyYAML's order (yaml/events.py):
#   scalar: anchor, tag, implicit, value, start_mark, end_mark, style
#   mapping/sequence start: anchor, tag, implicit, start_mark, end_mark, flow_style
#   alias: anchor, start_mark, end_mark;  ends: start_mark, end_mark
#   document start: start_mark, end_mark, explicit, version, tags;  document end: start_mark,
#   end_mark, explicit;  stream start: start_mark, end_mark, encoding;  stream end: start_mark, end_mark
# tests/test_tree_identity.py proves the tree the same as the pure composer's on every YAML and
# JSON file of the repository. PyYAML's own classes are put back as soon as the file is read (a
# check reads one file at a time in a process).
_EVENT_FIELDS = {
    "ScalarEvent": ("anchor", "tag", "implicit", "value", "start_mark", "end_mark", "style"),
    "MappingStartEvent": ("anchor", "tag", "implicit", "start_mark", "end_mark", "flow_style"),
    "SequenceStartEvent": ("anchor", "tag", "implicit", "start_mark", "end_mark", "flow_style"),
    "AliasEvent": ("anchor", "start_mark", "end_mark"),
    "MappingEndEvent": ("start_mark", "end_mark"),
    "SequenceEndEvent": ("start_mark", "end_mark"),
    "DocumentStartEvent": ("start_mark", "end_mark", "explicit", "version", "tags"),
    "DocumentEndEvent": ("start_mark", "end_mark", "explicit"),
    "StreamStartEvent": ("start_mark", "end_mark", "encoding"),
    "StreamEndEvent": ("start_mark", "end_mark"),
}


class _LightTypes:
    """One light event class per kind (see above), by PyYAML's class name."""

    ScalarEvent: type
    MappingStartEvent: type
    SequenceStartEvent: type
    AliasEvent: type
    MappingEndEvent: type
    SequenceEndEvent: type
    DocumentStartEvent: type
    DocumentEndEvent: type
    StreamStartEvent: type
    StreamEndEvent: type

    def __init__(self) -> None:
        for name in _EVENT_FIELDS:
            setattr(self, name, type(name, (BaseException,), {"__slots__": (), "__module__": __name__}))


_LIGHT: _LightTypes | None = None


def _light_types() -> _LightTypes:
    global _LIGHT
    if _LIGHT is None:
        _LIGHT = _LightTypes()
    return _LIGHT


@contextlib.contextmanager
def _light_events(parser):
    """``get()``: the parser's next event as a light event, None at the end. libyaml's parser makes
    them so itself; another parser's events are converted one by one. The parser is disposed of."""
    light = _light_types()
    c_parser = _c_parser_module(parser)
    try:
        if c_parser is None:
            get_event = parser.get_event

            def get():
                ev = get_event()
                if ev is None:
                    return None
                name = type(ev).__name__
                return getattr(light, name)(*(getattr(ev, f) for f in _EVENT_FIELDS[name]))

            yield get
            return
        saved = {name: getattr(c_parser, name) for name in _EVENT_FIELDS}
        for name in _EVENT_FIELDS:
            setattr(c_parser, name, getattr(light, name))
        try:
            yield parser.get_event
        finally:
            for name, cls in saved.items():
                setattr(c_parser, name, cls)
    finally:
        dispose = getattr(parser, "dispose", None)
        if dispose is not None:
            dispose()


def _c_parser_module(parser):
    """PyYAML's C extension module when ``parser`` is its libyaml parser (the module whose event
    classes it makes), else None."""
    module = _pyyaml()[0]
    return module if module is not None and isinstance(parser, module.CParser) else None


@functools.lru_cache(maxsize=1)
def _pyyaml() -> tuple[Any, type]:
    """(PyYAML's C extension module, or None where it is absent or names its events otherwise; the
    composer's error). perf: looked up once, not by import statements run for every file."""
    import yaml
    from yaml.composer import ComposerError

    module = getattr(yaml, "_yaml", None) if getattr(yaml, "__with_libyaml__", False) else None
    if module is not None and not all(isinstance(getattr(module, name, None), type) for name in _EVENT_FIELDS):
        module = None  # a PyYAML whose C parser names its events otherwise: convert them instead
    return module, ComposerError


class _Frame:
    """A collection being built from events: its node and key path, and for a mapping the key
    waiting for its value and the first node of each key name (duplicates). A node's depth is the
    number of frames open above it."""
    __slots__ = ("node", "path", "is_map", "flow", "key", "name", "first", "owner")

    def __init__(self, node, path: tuple, is_map: bool, flow: bool, owner: str | None = None):
        self.node = node
        self.path = path
        self.is_map = is_map
        self.flow = flow
        self.key: Node | None = None
        self.name = ""  # the waiting key's text
        self.first: dict[str, Node] = {}
        # the key a list's scalar items are under (Document.keyed); None inside a key: not recorded
        self.owner = owner


class _EventBuilder(_Builder):
    """The located tree built from the parser's events, without the parser's node graph.

    The same tree as _Builder makes from the composed graph (tests/test_tree_identity.py proves it
    on every YAML and JSON file of the repository): each node's marks are its event's (a
    collection ends at its end event), its anchor and tag are the event's own, and what a composer
    refuses (an undefined alias, an anchor defined twice) is refused with the composer's error.
    perf: no graph of parser nodes is made and let go (half the memory of a large file), and a
    loop over events replaces the recursion over nodes. Problems are kept apart until the stream
    has been read whole: a parse error anywhere leaves only that error, as with a composer."""

    def __init__(self, doc: Document, limits: Limits, engine: str = ""):
        super().__init__(doc, limits, engine)
        self.problems = []
        self.anchors: dict[str, tuple[Node | None, Any]] = {}
        self.keyed: list[tuple[str, Scalar]] = []  # Document.keyed, as the nodes are made
        self.whole = True  # False: Document.keyed cannot be made (an alias of a list)

    def run(self, parser) -> list[Node]:
        with _light_events(parser) as get:
            return self._run(get, _pyyaml()[1])

    def _run(self, get, composer_error) -> list[Node]:
        limits, shown = self.limits, self.doc.path
        max_depth, max_aliases = limits.max_depth, limits.max_aliases
        light = _light_types()
        scalar_ev, alias_ev = light.ScalarEvent, light.AliasEvent
        map_start, seq_start = light.MappingStartEvent, light.SequenceStartEvent
        map_end, seq_end = light.MappingEndEvent, light.SequenceEndEvent
        doc_start = light.DocumentStartEvent
        new = object.__new__
        # perf: a node keeps its offsets and the document's Lines; its line and column are worked
        # out when read (Node): 2.1% fewer instructions in a whole check of the 200-file corpus
        # (3,274 -> 3,206 million; loading 6.4% fewer). Where the offsets do not give libyaml's
        # marks, the marks are read (the nodes from offset ``marked`` on): at the end of a text
        # without a final line break (libyaml moves its last marks to a new line), and every node
        # for another parser or after a second byte-order mark (libyaml skips it uncounted).
        text = self.doc.text
        lines: Lines | None = None
        marked = -1
        if self.engine == "libyaml" and not text.startswith("\ufeff"):
            lines = Lines(text)
            marked = len(text) if text[-1:] not in LINE_BREAKS else len(text) + 1
        roots: list[Node] = []
        stack: list[_Frame] = []
        keyed = self.keyed
        while True:
            ev = get()
            if ev is None:
                break
            cls = type(ev)
            args = ev.args  # each kind's fields, in PyYAML's order (see _light_events)
            if cls is scalar_ev:
                anchor, tag, _implicit, value, sm, em, style = args
            elif cls is map_start or cls is seq_start:
                anchor, tag, _implicit, sm, em, flow = args
            elif cls is alias_ev:
                anchor, sm, em = args
            else:
                if cls is doc_start:
                    self.anchors = {}
                elif (cls is map_end or cls is seq_end) and stack:
                    frame = stack.pop()
                    if self.failed:
                        continue
                    node = frame.node
                    em = args[1]
                    node.end = end = em.index
                    if end >= marked:
                        if node.lines is not None:
                            node._line, node._col = node.lines.span(node.start, node.start)[:2]
                            node.lines = None
                        node._end_line, node._end_col = em.line + 1, em.column + 1
                    self._attach(node, stack, roots)
                continue
            if self.failed:  # nothing more is built; what a composer refuses is still refused
                if cls is alias_ev:
                    if anchor not in self.anchors:
                        raise composer_error(None, None, "found undefined alias", sm)
                    continue
                if anchor is not None:
                    self._anchor(anchor, None, sm, composer_error)
                if cls is not scalar_ev:
                    stack.append(_Frame(None, (), False, False))
                continue
            # where the new node goes: its key path and role
            if stack:
                parent = stack[-1]
                if parent.is_map:
                    if parent.key is None:
                        path, role = parent.path, "key" if parent.flow else ""
                    else:
                        path = parent.path + (parent.name,)
                        role = "value" if parent.flow else ""
                else:
                    path, role = parent.path + (str(len(parent.node.items)),), ""
            else:
                path, role = (), ""
            if cls is alias_ev:
                hit = self.anchors.get(anchor)
                if hit is None:
                    raise composer_error(None, None, "found undefined alias", sm)
                target = hit[0]
                self.aliases += 1
                if self.aliases > max_aliases:
                    self._stop_at("aliases", f"uses more than {max_aliases} alias references "
                                             "(setting limits.max_aliases)", target.line, target.col)
                    continue
                if type(target) is Sequence:
                    self.whole = False  # its items would be under this key too: Document.keyed is not made
                elif stack and type(target) is Scalar and parent.owner is not None:
                    if not parent.is_map:
                        keyed.append((parent.owner, target))
                    elif parent.key is not None:
                        keyed.append((parent.name, target))
                self._attach(target, stack, roots)
                continue
            if len(stack) > max_depth:  # its depth
                self._stop_at("depth", f"nests deeper than {max_depth} levels (setting limits.max_depth)",
                              sm.line + 1, sm.column + 1)
                if anchor is not None:
                    self._anchor(anchor, None, sm, composer_error)
                if cls is not scalar_ev:
                    stack.append(_Frame(None, (), False, False))
                continue
            if cls is scalar_ev:
                # perf: Scalar.__init__ inline (a call per scalar, the most common node)
                node = new(Scalar)
                node.text, node.style, node.tag = value, style or None, tag
                node._v11 = node._v12 = _UNSET
                start = sm.index
                end = em.index
                node.start, node.end = start, end
                node.path, node.anchor, node.file = path, anchor, shown
                if end < marked:
                    node.lines = lines
                else:
                    node._line, node._col = sm.line + 1, sm.column + 1
                    node._end_line, node._end_col = em.line + 1, em.column + 1
                    node.lines = None
                if anchor is not None:
                    self._anchor(anchor, node, sm, composer_error)
                if len(value) > scalars.MAX_INT_TEXT and node.style is None and tag is None \
                        and scalars.oversized(value):
                    self._oversized(node)
                if role and not value and node.style is None and start == end and anchor is None:
                    self.empties.append((node, role))
                # perf: _attach inline for a scalar
                if not stack:
                    roots.append(node)
                elif not parent.is_map:
                    parent.node.items.append(node)
                    if parent.owner is not None:
                        keyed.append((parent.owner, node))
                elif parent.key is None:
                    parent.key, parent.name = node, value
                else:
                    k, name = parent.key, parent.name
                    parent.key = None
                    parent.node.pairs.append((k, node))
                    if parent.owner is not None:
                        keyed.append((name, node))
                    if name == "<<" and type(k) is Scalar and k.style is None:
                        self._merge(parent.node, k, node)
                    elif type(k) is Scalar:
                        first = parent.first
                        if name in first:
                            _first_or_duplicate(first, name, k, shown, self.problems)
                        else:
                            first[name] = k
                continue
            # perf: the collections' and frames' __init__ inline (no call per collection)
            coll: Node
            frame = new(_Frame)
            if cls is map_start:
                coll = new(Mapping)
                coll.pairs, coll.merged, coll._index = [], [], None
                frame.is_map, frame.key, frame.name, frame.first = True, None, "", {}
            else:
                coll = new(Sequence)
                coll.items = []
                frame.is_map = False
            coll.start = start = sm.index
            coll.path, coll.anchor, coll.file = path, anchor, shown
            if start < marked:
                coll.lines = lines
            else:
                coll._line, coll._col = sm.line + 1, sm.column + 1
                coll.lines = None
            if anchor is not None:
                self._anchor(anchor, coll, sm, composer_error)
            frame.node, frame.path, frame.flow = coll, path, bool(flow)
            if not stack:
                frame.owner = ""
            elif parent.owner is None or not parent.is_map:
                frame.owner = parent.owner  # a list's items are under its key; nothing is under a key
            else:
                frame.owner = parent.name if parent.key is not None else None
            stack.append(frame)
        return roots

    def _anchor(self, name: str, node: Node | None, mark, error) -> None:
        seen = self.anchors.get(name)
        if seen is not None:
            raise error("found duplicate anchor; first occurrence", seen[1], "second occurrence", mark)
        self.anchors[name] = (node, mark)

    def _attach(self, node: Node, stack: list, roots: list) -> None:
        """A finished node joins its parent (a mapping's key waits for its value) or the roots."""
        if not stack:
            if not self.failed:
                roots.append(node)
            return
        parent = stack[-1]
        if not parent.is_map:
            parent.node.items.append(node)
            return
        k = parent.key
        if k is None:
            parent.key = node
            parent.name = key_text(node)
            return
        parent.key = None
        mapping = parent.node
        mapping.pairs.append((k, node))
        name = parent.name
        if name == "<<" and isinstance(k, Scalar) and k.style is None:
            self._merge(mapping, k, node)
            return
        if isinstance(k, Scalar):
            _first_or_duplicate(parent.first, name, k, self.doc.path, self.problems)

    def _stop_at(self, kind: str, message: str, line: int, col: int) -> None:
        if not self.failed:
            self.failed = True
            self.problems.append(Problem(kind, message, line, col))


def _first_or_duplicate(first: dict, name: str, key: Scalar, path, problems: list) -> None:
    """Remember the first key of each name in a mapping; a second one is a duplicate-key problem
    (both tree builders)."""
    if name not in first:
        first[name] = key
        return
    prev = first[name]
    problems.append(Problem("duplicate-key", f"key '{name}' is written twice in one mapping; which value wins "
                            "depends on the loader", key.line, key.col,
                            [Location(path, prev.line, prev.col, message=f"first '{name}' here")]))
