"""The located tree built from the parser's events is the tree built from the parser's composed node
graph (the way trimtab read files before, and still reads them with ruamel.yaml).

Reference: PyYAML's own composer (libyaml's, through the C loader) makes the node graph; the old
builder turned it into the located tree. The event builder must give the same nodes (kind, marks,
character span, key path, anchor, tag, style, text, pairs, merged entries, items, shared nodes), the
same problems in the same order, and the same alias count, on every YAML and JSON file of the
repository and on hand-written edge cases (aliases, anchors, merges, limits, flow mappings with empty
keys or values, several documents, errors after a good document)."""
from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given, settings, strategies as st

from trimtab.load import loader
from trimtab.load.document import Document, Mapping, Scalar, Sequence, walk

from support import REPO

SKIP = {".git", ".venv", "node_modules", "__pycache__", ".mypy_cache", ".ruff_cache"}


def _repository_files() -> list[Path]:
    out = []
    for path in sorted(REPO.rglob("*")):
        if SKIP & set(path.relative_to(REPO).parts) or not path.is_file():
            continue
        if path.suffix.lower() in (".yaml", ".yml", ".json"):
            out.append(path)
    return out


EDGE = [
    "a: &x 1\nb: *x\n",
    "a: *x\n",  # undefined alias
    "a: &x 1\nb: &x 2\nc: *x\n",  # an anchor defined twice
    "a: &x [1, *x]\n",  # a recursive alias
    "a: &x {p: 1, q: {<<: *x}}\n",  # a merge of a mapping still being built
    "base: &b {lr: 1, wd: 2}\nrun:\n  <<: *b\n  lr: 3\n",
    "base: &b {lr: 1}\nother: &o {wd: 2}\nrun:\n  <<: [*b, *o]\n",
    "run:\n  <<: 5\n",  # a merge of a scalar
    "run:\n  '<<': {a: 1}\n",  # a quoted '<<' is a key
    "a: 1\na: 2\nb: {c: 1, c: 2}\n",  # duplicate keys
    "{a: , ? b, c: d}\n",  # empty keys and values in a flow mapping
    "[a, {b: }, {? }]\n",
    "a: !!str 1\nb: ! 2\nc: !local 3\nd: &x !!int 4\ne: !!str &y 5\n",
    "--- &x 1\n--- *x\n",  # anchors belong to one document
    "--- 1\n--- {a: [b\n",  # a parse error after a good document
    "--- {a: 1, a: 2}\n--- [1, 2\n",
    "",
    "---\n...\n",
    "# only a comment\n",
    "a: |\n  one\n  two\nb: >-\n  folded\n  text\n",
    "a:\n- 1\n- - 2\n  - 3\n- {x: [y, z]}\n",
    "? [complex, key]\n: value\n? {m: 1}\n: other\n",
    "a: 123456789012345678901234567890123456789\n",  # an integer past trimtab's limit
    "a: &big [" + ", ".join("*s" if False else "x" for _ in range(3)) + "]\nb: *big\nc: *big\n",
    "l0: &l0 [a, a]\n" + "".join(f"l{i}: &l{i} [*l{i - 1}, *l{i - 1}]\n" for i in range(1, 8)),
    "a:\n" + "".join("  " * (i + 1) + f"k{i}:\n" for i in range(8)) + "  " * 9 + "v\n",
    "\ta: 1\n",
    "a: 'unterminated\n",
    "{\"json\": [1, 2, {\"k\": null}], \"t\": true}\n",
]


def _rows(doc: Document) -> list:
    rows = []
    ids: dict[int, int] = {}
    for root in doc.roots:
        for n in walk(root):
            ids.setdefault(id(n), len(ids))
    for root in doc.roots:
        for n in walk(root):
            row = [type(n).__name__, n.line, n.col, n.end_line, n.end_col, n.start, n.end, n.path, n.anchor, n.file]
            if isinstance(n, Scalar):
                row += [n.text, n.style, n.tag]
            elif isinstance(n, Mapping):
                row += [[(ids[id(k)], ids[id(v)]) for k, v in n.pairs],
                        [(ids[id(k)], ids[id(v)], ids[id(m)]) for k, v, m in n.merged]]
            elif isinstance(n, Sequence):
                row += [[ids[id(i)] for i in n.items]]
            rows.append(tuple(row))
    return rows


def _problems(doc: Document) -> list:
    return [(p.kind, p.message, p.line, p.col, [(r.path, r.line, r.col, r.message) for r in p.related])
            for p in doc.problems]


def _both(text: str, fmt: str = "yaml", limits: loader.Limits = loader.Limits()) -> tuple[Document, Document]:
    out = []
    for events in (True, False):
        doc = Document(path="x." + fmt, fmt=fmt)
        text_ = text.lstrip("\ufeff")
        doc.text = text_
        if fmt == "json" and not loader._json_ok(doc, text_, limits):
            out.append(doc)
            continue
        out.append(loader._compose(doc, text_, limits, events=events))
    return out[0], out[1]


def _same(text: str, fmt: str = "yaml", limits: loader.Limits = loader.Limits()) -> None:
    ev, nodes = _both(text, fmt, limits)
    assert _rows(ev) == _rows(nodes)
    assert _problems(ev) == _problems(nodes)
    assert ev.aliases == nodes.aliases


def test_a_tag_on_the_line_after_its_anchor_is_read_as_pyyaml_reads_it():
    """The one place the trees differ, on purpose: the old builder found a scalar's tag by reading the
    text at the node's start, and missed a tag written on the line after the anchor. The event
    carries the tag itself. Reference: PyYAML's C composer reads the tag ``!t``."""
    import yaml

    text = "a: &x\n  !t v\n"
    want = yaml.compose(text, Loader=yaml.CSafeLoader).value[0][1].tag
    ev, nodes = _both(text)
    assert want == "!t"
    assert ev.roots[0].get("a").tag == want
    assert nodes.roots[0].get("a").tag is None  # the old reading (a defect the event reading removes)


def test_the_events_are_read_where_the_parser_gives_them():
    assert loader.backend().events_loader is not None  # PyYAML is a chosen dependency


@pytest.mark.parametrize("path", _repository_files(), ids=lambda p: str(p.relative_to(REPO)))
def test_every_repository_file_gives_the_same_tree(path):
    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        pytest.skip("not UTF-8 (the decoder's own test covers it)")
    _same(text, "json" if path.suffix.lower() == ".json" else "yaml")


@pytest.mark.parametrize("text", EDGE)
def test_edge_cases_give_the_same_tree(text):
    _same(text)


@pytest.mark.parametrize("limits", [loader.Limits(max_aliases=3), loader.Limits(max_depth=3),
                                    loader.Limits(max_aliases=0, max_depth=1)])
@pytest.mark.parametrize("text", EDGE)
def test_limits_stop_at_the_same_place(text, limits):
    _same(text, limits=limits)


_words = st.sampled_from(["a", "b", "lr", "<<", "", "1", "1.0", "~", "yes", "x y"])


def _yaml_value(depth: int):
    leaf = _words.map(lambda w: f"'{w}'" if w in ("", "x y") else w)
    if depth <= 0:
        return leaf
    inner = _yaml_value(depth - 1)
    flow_map = st.lists(st.tuples(_words, inner), max_size=4).map(
        lambda kv: "{" + ", ".join(f"{k or 'e'}: {v}" for k, v in kv) + "}")
    flow_seq = st.lists(inner, max_size=4).map(lambda vs: "[" + ", ".join(vs) + "]")
    return st.one_of(leaf, flow_map, flow_seq)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(_words, _yaml_value(3), st.booleans(), st.booleans()), min_size=1, max_size=8))
def test_generated_documents_give_the_same_tree(entries):
    """Generated block mappings of flow values, some anchored, some referring to earlier anchors."""
    lines, anchors = [], []
    for i, (key, value, anchored, refer) in enumerate(entries):
        name = key if key not in ("", "x y") else f"k{i}"
        if refer and anchors:
            lines.append(f"{name}: *{anchors[i % len(anchors)]}")
        elif anchored:
            anchors.append(f"a{i}")
            lines.append(f"{name}: &a{i} {value}")
        else:
            lines.append(f"{name}: {value}")
    _same("\n".join(lines) + "\n")


@pytest.mark.parametrize("text", ["a: {b: [1, &x 2, *x]}\n", "a: [1\n", "a: *nowhere\n", "x: &a 1\ny: &a 2\n"])
def test_pyyaml_s_own_event_classes_are_back_after_each_file(text):
    """The event builder has libyaml's parser make light events while it reads a file
    (loader._light_events); afterwards, read well or not, PyYAML's parser makes PyYAML's own
    events again (reference: yaml.events, the classes PyYAML documents)."""
    import yaml
    import yaml.events

    loader.parse_bytes(Document(path="x.yaml"), text.encode(), loader.Limits())
    module = getattr(yaml, "_yaml", None)
    if module is not None:
        for name in loader._EVENT_FIELDS:
            assert getattr(module, name) is getattr(yaml.events, name)
    events = list(yaml.parse("k: v\n", Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader)))
    assert [type(e) for e in events] == [yaml.events.StreamStartEvent, yaml.events.DocumentStartEvent,
                                        yaml.events.MappingStartEvent, yaml.events.ScalarEvent,
                                        yaml.events.ScalarEvent, yaml.events.MappingEndEvent,
                                        yaml.events.DocumentEndEvent, yaml.events.StreamEndEvent]
    assert events[3].value == "k" and events[4].start_mark.column == 3


def test_light_events_carry_pyyaml_s_fields_in_its_order():
    """The fields the builder unpacks from a light event are PyYAML's own event attributes, in the
    order of each class's constructor (reference: yaml.events and the events PyYAML's pure parser
    gives for the same text)."""
    import inspect

    import yaml
    import yaml.events

    for name, fields in loader._EVENT_FIELDS.items():
        params = [p for p in inspect.signature(getattr(yaml.events, name)).parameters if p != "self"]
        assert tuple(params) == fields, name
    text = "a: &x {b: 'c'}\nd: [*x, !t e]\n"
    with loader._light_events(yaml.SafeLoader(text)) as get:
        light = list(iter(get, None))
    pure = list(yaml.parse(text, Loader=yaml.SafeLoader))
    assert [type(e).__name__ for e in light] == [type(e).__name__ for e in pure]

    def plain(x):  # a mark by its place (two parses make two mark objects)
        return (x.index, x.line, x.column) if isinstance(x, yaml.Mark) else x

    for lev, pev in zip(light, pure):
        want = tuple(plain(getattr(pev, f)) for f in loader._EVENT_FIELDS[type(pev).__name__])
        assert tuple(map(plain, lev.args)) == want


def _keyed_both(text: str, fmt: str = "yaml"):
    from collections import Counter

    from trimtab.common import redact

    doc, _nodes = _both(text, fmt)
    walked = Counter((k, id(n)) for k, n in redact.tree_values(doc))
    return doc, walked


@pytest.mark.parametrize("path", _repository_files(), ids=lambda p: str(p.relative_to(REPO)))
def test_the_builder_s_keyed_values_are_the_tree_s(path):
    """Document.keyed, made by the event builder as it makes the nodes, holds what a walk of the
    finished tree finds (redact.tree_values: each mapping's pairs, a list's items under the list's key,
    an alias's target again where the alias is), on every YAML and JSON file of the repository."""
    from collections import Counter

    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        pytest.skip("not UTF-8 (the decoder's own test covers it)")
    doc, walked = _keyed_both(text, "json" if path.suffix.lower() == ".json" else "yaml")
    if doc.keyed is None:
        assert not doc.readable or doc.aliases, "made unless the file cannot be read or aliases a list"
        return
    assert Counter((k, id(n)) for k, n in doc.keyed) == walked


@pytest.mark.parametrize("text,want", [
    ("a: &s Tide7pool9Secret\npassword: *s\n", [("a", "Tide7pool9Secret"), ("password", "Tide7pool9Secret")]),
    ("x: [1, [2, {k: 3}]]\n? [4]\n: 5\n", [("x", "1"), ("x", "2"), ("k", "3"), ("?", "5")]),
    ("- top\n- {a: b}\n", [("", "top"), ("a", "b")]),
    ("plain scalar\n", []),
    ("a: {b: c, b: d}\n<<: {e: f}\n", [("b", "c"), ("b", "d"), ("e", "f")]),
])
def test_keyed_values_name_the_key_each_value_is_under(text, want):
    doc, walked = _keyed_both(text)
    assert doc.keyed is not None
    assert [(k, n.text) for k, n in doc.keyed] == want
    assert sum(walked.values()) == len(want)


def test_an_alias_of_a_list_leaves_the_tree_to_be_walked():
    """A list reached through an alias has its items under the alias's key too: the builder does not
    make the list of keyed values then, and the credential walk reads the tree (the same answers)."""
    from trimtab.common import redact

    text = "a: &s [Tide7pool9Secret]\npassword: *s\n"
    doc, _walked = _keyed_both(text)
    assert doc.keyed is None
    assert ("password", "Tide7pool9Secret") in [(k, n.text) for k, n, _w in redact.credentials(doc)]
