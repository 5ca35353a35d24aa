"""A node built from the parser's events keeps its character offsets and works out its line and
column when first read (document.Lines). Reference: PyYAML's own marks (libyaml's, through the C
composer): every node's line, column, end line and end column must be the marks' (plus one),
whatever line breaks, tabs, characters, byte-order mark, collections and documents the text holds;
and on the YAML test suite (read through ``shared_path``, skipped when absent)."""
from __future__ import annotations

import pytest
import yaml

from support import composed_nodes, shared_path
from trimtab.load import loader
from trimtab.load.document import Document, Lines, Mapping, Scalar, Sequence, walk

BREAKS = ["\n", "\r\n", "\r", "\x85", "\u2028", "\u2029"]

TEXTS = [
    "a: 1{n}b: [x, y]{n}c: {{k: v, l: [1, 2]}}{n}",
    "a:{n}  - 1{n}  -  two{n}  - {{p: q}}{n}b: 'quoted{n}  on two lines'{n}c: \"dq\\{n}  more\"{n}",
    "a: |{n}  one{n}  two{n}{n}b: >-{n}  folded{n}  text{n}c: |+{n}  kept{n}{n}{n}d: end{n}",
    "é: ünïcode{n}日本: 語{n}emoji: \U0001f600 x{n}after: [\U0001f600, 日本, é]{n}",
    "a:\t1{n}b: 'tab\there'{n}c: [1,\t2]{n}# a comment\twith a tab{n}d: 3 # trailing{n}",
    "--- &x 1{n}--- y{n}...{n}---{n}a: b{n}--- [1, 2]{n}",
    "? [complex, key]{n}: value{n}? {{m: 1}}{n}: other{n}",
    "a: &b {{x: 1}}{n}c:{n}  <<: *b{n}  y: 2{n}list: &l [1, 2]{n}again: *l{n}",
    "a:{n}  b:{n}    c:{n}      d: deep{n}  e: [[1, [2, [3]]], {{f: {{g: h}}}}]{n}",
    "   {n}{n}a: 1   {n}   {n}b: 2{n}",
    "plain: a{n}  continued{n}  lines{n}next: 1{n}",
    # no final line break: libyaml moves the marks at the end of the text to a new line
    "a: 1{n}b: 2",
    "a:{n}  b:{n}    - [1]",
    "a: 1   ",
    "? a",
    "---",
    "[a, b]",
    "a: 'x'{n}b: {{c: d}}",
    "- 1{n}- - 2{n}  - 3",
    "",
    "# only a comment",
    "{n}{n}",
]


def _texts() -> list[str]:
    out = []
    for t in TEXTS:
        for n in BREAKS:
            out.append(t.format(n=n))
    out.append("a: 1\r\nb: 2\rc: 3\x85d: 4\u2028e: 5\u2029f: [6,\r\n 7]\n")  # every break in one text
    return out


def _marks(text: str) -> list[tuple]:
    """(kind, line, col, end line, end col, start, end) of every node, as PyYAML's C composer marks it."""
    roots = [r for r in yaml.compose_all(text, Loader=yaml.CSafeLoader) if r is not None]
    return [(type(n).__name__[0], n.start_mark.line + 1, n.start_mark.column + 1, n.end_mark.line + 1,
             n.end_mark.column + 1, n.start_mark.index, n.end_mark.index) for n in composed_nodes(roots)]


def _positions(doc: Document) -> list[tuple]:
    return [("M" if isinstance(n, Mapping) else "S", n.line, n.col, n.end_line, n.end_col, n.start, n.end)
            for r in doc.roots for n in walk(r)]


def _kinds(rows):
    return [("M" if r[0] == "M" else "S",) + tuple(r[1:]) for r in rows]


@pytest.mark.parametrize("text", _texts())
def test_positions_worked_out_from_offsets_are_libyamls_marks(text):
    doc = loader.parse_bytes(Document(path="x.yaml"), text.encode("utf-8"), loader.Limits())
    assert doc.readable, doc.problems
    assert _kinds(_positions(doc)) == _kinds(_marks(text))


@pytest.mark.parametrize("bom", ["\ufeff", "\ufeff\ufeff"])
@pytest.mark.parametrize("text", ["a: 1\nb: [x, é]\n", "a: 1\r\nb: {c: d}"])
def test_positions_after_a_byte_order_mark_are_libyamls_marks(bom, text):
    """The loader drops one mark before the parser reads the text; libyaml itself drops a second
    one at the start, without counting it (so the node's offsets in the text are not its marks)."""
    data = (bom + text).encode("utf-8")
    doc = loader.parse_bytes(Document(path="x.yaml"), data, loader.Limits())
    assert doc.readable, doc.problems
    assert _kinds(_positions(doc)) == _kinds(_marks(doc.text))


def test_a_node_built_from_events_is_located_when_first_read():
    doc = loader.parse_bytes(Document(path="x.yaml"), b"a:\n  b: [1, 2]\nc: d\n", loader.Limits())
    nodes = [n for r in doc.roots for n in walk(r)]
    assert all(n.lines is not None for n in nodes)  # not located yet
    seq = doc.roots[0].get("a").get("b")
    assert (seq.end_col, seq.end_line, seq.col, seq.line) == (12, 2, 6, 2)  # any order
    assert seq.lines is None
    loc = doc.roots[0].get("c").location("here")
    assert (loc.line, loc.col, loc.end_line, loc.end_col, loc.key_path) == (3, 4, 3, 5, "c")


def test_setting_one_position_of_a_node_not_yet_located_keeps_the_others():
    doc = loader.parse_bytes(Document(path="x.yaml"), b"a: [1, 2]\n", loader.Limits())
    seq = doc.roots[0].get("a")
    seq.line = 9
    assert (seq.line, seq.col, seq.end_line, seq.end_col) == (9, 4, 1, 10)


def test_nodes_made_elsewhere_keep_the_positions_they_are_given():
    for node in (Scalar("x", None, None), Mapping(), Sequence()):
        with pytest.raises(AttributeError):
            _ = node.line  # never placed, as before
        assert getattr(node, "text", "") == (node.text if isinstance(node, Scalar) else "")
        node.line, node.col, node.end_line, node.end_col = 3, 4, 5, 6
        node.start, node.end, node.path, node.anchor, node.file = 0, 0, (), None, "f"
        assert (node.line, node.col, node.end_line, node.end_col) == (3, 4, 5, 6)
        loc = node.location()
        assert (loc.line, loc.col, loc.end_line, loc.end_col) == (3, 4, 5, 6)


def test_lines_are_split_where_libyaml_splits_them():
    text = "- a\r\n- b\r- c\x85- d\u2028- e\u2029- f\n- g\n\n- h"
    lines = Lines(text)
    want = [(t.start_mark.line + 1, t.start_mark.column + 1, t.end_mark.line + 1, t.end_mark.column + 1)
            for t in yaml.scan(text, Loader=yaml.CSafeLoader) if isinstance(t, yaml.ScalarToken)]
    got = [lines.span(text.index(c), text.index(c) + 1) for c in "abcdefgh"]
    assert got == want


def test_other_parsers_and_the_graph_give_the_same_positions(monkeypatch):
    """The pure-Python parser's marks differ from libyaml's at the end of a text without a final line
    break; its nodes read their marks (no Lines)."""
    monkeypatch.setenv("TRIMTAB_PARSER", "pyyaml-pure")
    monkeypatch.setattr(loader, "_backend", None)
    text = "a: 1\nb: [x, y]"
    doc = loader.parse_bytes(Document(path="x.yaml"), text.encode(), loader.Limits())
    assert all(n.lines is None for r in doc.roots for n in walk(r))
    ref = [r for r in yaml.compose_all(text, Loader=yaml.SafeLoader)][0]
    assert (doc.roots[0].end_line, doc.roots[0].end_col) == (ref.end_mark.line + 1, ref.end_mark.column + 1)


def test_positions_on_the_yaml_test_suite_are_libyamls_marks():
    root = shared_path("reference", "yaml-test-suite")
    compared = 0
    for path in sorted(root.rglob("in.yaml")):
        data = path.read_bytes()
        doc = loader.parse_bytes(Document(path="in.yaml"), data, loader.Limits())
        if not doc.readable:
            continue
        events, graph = [], []
        for built, out in ((True, events), (False, graph)):
            d = Document(path="in.yaml")
            d.text = doc.text
            loader._compose(d, doc.text, loader.Limits(), events=built)
            out.extend(_positions(d))
        assert events == graph, path.parent.name
        assert _positions(doc) == events, path.parent.name
        compared += 1
    assert compared >= 240, compared
