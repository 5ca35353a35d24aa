"""The located tree: one Document per file, built from the parser's node graph.

Every node has its 1-based line and column, end line and end column (a node built from the
parser's events works them out from its offsets when first read), and its character span in
the decoded text (without a byte-order mark), so the raw text of any scalar is a slice of
``Document.text``. Scalars keep their processed text and quoting style and are typed
on demand under YAML 1.2 and YAML 1.1.
"""
from __future__ import annotations

from bisect import bisect_right
from itertools import accumulate
from typing import Iterator

from ..common import scalars
from ..common.findings import Location
from ..common.record import Record


class Node:
    # perf: a node built from the parser's events keeps its two offsets (``start``, ``end``) and its
    # document's ``lines``; its line and column are worked out from them when first read (Lines).
    # Some 5% of the nodes are ever located on the benchmark corpus: reading libyaml's four marks
    # for every node cost more than working out the few (measured: see _EventBuilder._run).
    __slots__ = ("_line", "_col", "_end_line", "_end_col", "start", "end", "path", "anchor", "file", "lines")
    kind: str  # scalar, mapping, sequence (a class attribute of each kind)
    start: int  # character offsets in Document.text
    end: int
    path: tuple[str, ...]  # key path from the document's root
    anchor: str | None
    file: str | None  # the shown path of the file the node was written in
    # the lines of the node's text while its line and column are still to be worked out, else None
    lines: Lines | None

    def _locate(self) -> None:
        assert self.lines is not None
        self._line, self._col, self._end_line, self._end_col = self.lines.span(self.start, self.end)
        self.lines = None

    @property
    def line(self) -> int:
        if self.lines is not None:
            self._locate()
        return self._line

    @line.setter
    def line(self, value: int) -> None:
        if self.lines is not None:
            self._locate()
        self._line = value

    @property
    def col(self) -> int:
        if self.lines is not None:
            self._locate()
        return self._col

    @col.setter
    def col(self, value: int) -> None:
        if self.lines is not None:
            self._locate()
        self._col = value

    @property
    def end_line(self) -> int:
        if self.lines is not None:
            self._locate()
        return self._end_line

    @end_line.setter
    def end_line(self, value: int) -> None:
        if self.lines is not None:
            self._locate()
        self._end_line = value

    @property
    def end_col(self) -> int:
        if self.lines is not None:
            self._locate()
        return self._end_col

    @end_col.setter
    def end_col(self, value: int) -> None:
        if self.lines is not None:
            self._locate()
        self._end_col = value

    def location(self, message: str = "") -> Location:
        """Where this node was written: its own file (a composed run mixes files)."""
        if self.lines is not None:  # perf: the slots read here, not the properties
            self._locate()
        return Location(self.file, self._line, self._col, self._end_line, self._end_col, message,
                        ".".join(self.path))


class Lines:
    """Where each line of a text starts, made when first needed: 1-based line and column of a
    character offset as libyaml's marks give them, for a text libyaml has read whole."""

    __slots__ = ("text", "starts")

    def __init__(self, text: str):
        self.text = text
        self.starts: list[int] | None = None

    def span(self, start: int, end: int) -> tuple[int, int, int, int]:
        """(line, column, end line, end column) of two offsets (``start`` <= ``end``)."""
        starts = self.starts
        if starts is None:
            # str.splitlines breaks lines where libyaml does ("\r\n" is one break; "\r", "\n", NEL,
            # LS and PS alone are one each) and also at the control characters libyaml refuses
            # (\v, \f, \x1c to \x1e), which a text it has read does not hold
            text = self.text
            starts = self.starts = [0]
            starts += accumulate(map(len, text.splitlines(True)))
            if text and text[-1] not in LINE_BREAKS:
                starts.pop()  # the end of the text, not the start of a line
        i = bisect_right(starts, start) - 1
        j = bisect_right(starts, end, i) - 1
        return i + 1, start - starts[i] + 1, j + 1, end - starts[j] + 1


LINE_BREAKS = ("\r", "\n", "\x85", "\u2028", "\u2029")  # libyaml's


class Scalar(Node):
    __slots__ = ("text", "style", "tag", "_v11", "_v12")
    kind = "scalar"

    def __init__(self, text: str, style: str | None, tag: str | None):
        self.text = text
        self.style = style  # None (plain), "'", '"', "|", ">"
        self.tag = tag  # explicit tag or None
        self._v11 = self._v12 = _UNSET
        self.lines = None

    @property
    def plain(self) -> bool:
        return self.style is None

    @property
    def value12(self):
        v = self._v12
        if v is _UNSET:
            v = self._v12 = scalars.typed(self.text, self.style is None, self.tag, "1.2")
        return v

    @property
    def value11(self):
        v = self._v11
        if v is _UNSET:
            v = self._v11 = scalars.typed(self.text, self.style is None, self.tag, "1.1")
        return v

    def value(self, version: str = "1.2"):
        """The value under one reader (scalars.READERS): "1.2", "1.1", "1.1+floats", "json"."""
        # perf: value11 and value12 inline (resolve reads some 40 scalars a run through here)
        if version == "1.1":
            v = self._v11
            if v is _UNSET:
                v = self._v11 = scalars.typed(self.text, self.style is None, self.tag, "1.1")
            return v
        if version == "1.2":
            v = self._v12
            if v is _UNSET:
                v = self._v12 = scalars.typed(self.text, self.style is None, self.tag, "1.2")
            return v
        return scalars.typed(self.text, self.style is None, self.tag, version)

    def __repr__(self) -> str:
        return f"Scalar({self.text!r}@{self.line}:{self.col})"


class Mapping(Node):
    __slots__ = ("pairs", "merged", "_index")
    kind = "mapping"

    def __init__(self):
        self.pairs: list[tuple[Node, Node]] = []
        # (key, value, merge key node): entries brought in by a ``<<`` merge key, which
        # explicit keys override, as YAML loaders that implement merges do.
        self.merged: list[tuple[Node, Node, Node]] = []
        self._index: dict | None = None
        self.lines = None

    def entries(self) -> Iterator[tuple[str, Node, Node, Node | None]]:
        """(key text, key node, value node, merge-key node or None) in the order written.

        A key written twice keeps its last value (as most loaders do; the duplicate is a
        finding of its own). Entries brought in by a ``<<`` merge appear only where no
        explicit key of that name exists."""
        # perf: every walk of the tree reads each mapping through here; key_text inline, one tuple
        # per entry, and the entries handed out as they are kept
        chosen: dict[str, tuple[str, Node, Node, Node | None]] = {}
        for k, v in self.pairs:
            if isinstance(k, Scalar):
                name = k.text
                if name == "<<" and k.style is None:
                    continue
            else:
                name = "?"
            chosen[name] = (name, k, v, None)
        for k, v, via in self.merged:
            name = k.text if isinstance(k, Scalar) else "?"
            if name not in chosen:
                chosen[name] = (name, k, v, via)
        return iter(chosen.values())

    def get(self, name: str) -> Node | None:
        if self._index is None:
            self._index = {n: v for n, _k, v, _via in self.entries()}
        return self._index.get(name)

    def __repr__(self) -> str:
        return f"Mapping({len(self.pairs)}@{self.line}:{self.col})"


class Sequence(Node):
    __slots__ = ("items",)
    kind = "sequence"

    def __init__(self):
        self.items: list[Node] = []
        self.lines = None

    def __repr__(self) -> str:
        return f"Sequence({len(self.items)}@{self.line}:{self.col})"


class _Unset:
    __slots__ = ()


_UNSET = _Unset()


def key_text(node: Node) -> str:
    return node.text if isinstance(node, Scalar) else "?"


class Problem(Record):
    """A reason the file could not be read (wholly or in part), located where possible."""

    kind: str  # parse, duplicate-key, encoding, size, depth, aliases, tab, io, json
    message: str
    line: int
    col: int
    related: list[Location]

    def __init__(
            self, kind: str, message: str, line: int = 0, col: int = 0, related: list[Location] | None = None
    ) -> None:
        self.kind = kind
        self.message = message
        self.line = line
        self.col = col
        self.related = [] if related is None else related

    _fields = ("kind", "message", "line", "col", "related")  # repr, equality (common/record.py)


class Document(Record):
    path: str  # as shown to the user (relative to the repository root where possible)
    text: str
    roots: list[Node]
    problems: list[Problem]
    bom: str  # a byte-order mark that preceded ``text`` in the file, if any
    encoding: str
    fmt: str  # yaml, json or shell (a launch script)
    aliases: int
    runs: list  # a launch script's training commands (shell.LaunchRoot)
    # the other files a composed run of this document was built from (bases, the overrides file),
    # by shown path: the raw text of a node written there is read from them
    sources: dict[str, "Document"]
    # perf: (key text, scalar) of every scalar written as a mapping's value or a list's item (under
    # the key of the list), in the order written, an alias's target again under the alias's key;
    # made by the event builder as it makes the nodes, so that a rule over every value (the
    # credential walk) reads a list instead of walking the tree. None: not made (read the tree).
    keyed: list[tuple[str, Scalar]] | None = None

    def __init__(
            self, path: str, text: str = "", roots: list[Node] | None = None, problems: list[Problem] | None = None,
            bom: str = "", encoding: str = "utf-8", fmt: str = "yaml", aliases: int = 0, runs: list | None = None,
            sources: dict[str, "Document"] | None = None
    ) -> None:
        self.path = path
        self.text = text
        self.roots = [] if roots is None else roots
        self.problems = [] if problems is None else problems
        self.bom = bom
        self.encoding = encoding
        self.fmt = fmt
        self.aliases = aliases
        self.runs = [] if runs is None else runs
        self.sources = {} if sources is None else sources

    # repr, equality (common/record.py)
    _fields = (
        "path", "text", "roots", "problems", "bom", "encoding", "fmt", "aliases", "runs", "sources",
    )

    @property
    def readable(self) -> bool:
        return not any(p.kind in FATAL for p in self.problems)

    def loc(self, node: Node, message: str = "") -> Location:
        return node.location(message)

    def raw(self, node: Node) -> str:
        if node.file != self.path:  # a node of a composed run written in another file
            source = self.sources.get(node.file) if node.file is not None else None
            return source.text[node.start:node.end] if source is not None else getattr(node, "text", "")
        return self.text[node.start:node.end]


FATAL = frozenset({"parse", "encoding", "size", "depth", "aliases", "io", "json", "binary"})


def walk(root: Node) -> Iterator[Node]:
    """Every node once (aliases are the same object, visited once; cycles are safe)."""
    seen: set[int] = set()
    stack = [root]
    while stack:
        node = stack.pop()
        if id(node) in seen:
            continue
        seen.add(id(node))
        yield node
        if isinstance(node, Mapping):
            for k, v in reversed(node.pairs):
                stack.append(v)
                stack.append(k)
        elif isinstance(node, Sequence):
            stack.extend(reversed(node.items))
