"""The YAML test suite as a corpus (reference data: the YAML test suite, MIT licence, commit in
``SOURCE_COMMIT``; read through ``shared_path``, skipped with a reason when absent).

Three external references:
- the suite's own verdicts (an ``error`` file marks an invalid input) and expected JSON (``in.json``);
- PyYAML's pure-Python composer (``yaml.SafeLoader``) for node marks: the location oracle.
"""
from __future__ import annotations

import json
import time
from pathlib import Path

import pytest
import yaml

from support import MEASURED, bounded, run_cli, shared_path
from trimtab.load import loader
from trimtab.gate.runner import Checker
from trimtab.load.document import Mapping, Scalar, Sequence, walk
from trimtab.engine.registry import Registry
from trimtab.common.settings import Settings

PER_FILE_SECONDS = 10  # generous: every input here checks in milliseconds

# Measured when this test was written (libyaml 0.2.5 through PyYAML 6): of the suite's valid
# inputs with an in.json, this many read as the same YAML 1.2 value. A lower count is a regression.
JSON_AGREEMENT_FLOOR = 233
# The cases below the floor, each with the reason it disagrees.
DISAGREEMENTS = Path(__file__).parent / "data" / "yaml_suite_disagreements.txt"
# Invalid inputs libyaml accepts (measured; the issue's own survey: 16 of 94). Listed so that a
# change in the parser shows up here rather than silently.
ACCEPTED_INVALID = {"9C9N", "9HCY", "9JBA", "CVW2", "DK95/01", "EB22", "G5U8", "MUS6/00", "MUS6/01", "QB6E",
                    "RHX7", "S98Z", "SU5Z", "X4QW", "Y79Y/003", "YJV2"}


def _suite() -> Path:
    return shared_path("reference", "yaml-test-suite")


def _cases(root: Path) -> list[tuple[str, Path]]:
    return sorted((str(p.parent.relative_to(root)), p.parent) for p in root.rglob("in.yaml"))


@pytest.fixture(scope="module")
def checker():
    return Checker(Settings(root=_suite()), Registry())


@pytest.fixture(scope="module")
def results(checker):
    """Every suite input through the loader and the whole check, each under a time bound."""
    root = _suite()
    out = {}
    for cid, folder in _cases(root):
        path = folder / "in.yaml"
        start = time.perf_counter()
        with bounded(PER_FILE_SECONDS, cid):
            doc = loader.load(str(path), cid)
            res = checker.check_file(str(path), cid)
        out[cid] = (folder, doc, res, time.perf_counter() - start)
    return out


def test_every_input_checks_without_internal_error(results):
    assert len(results) == 402, "the suite README says 402 inputs"
    for cid, (_f, _doc, res, _t) in results.items():
        tool = [f.message for f in res.findings if f.rule_id.startswith("TOOL")]
        assert not tool and not res.crashed, (cid, tool)
    slowest = max(t for *_x, t in results.values())
    MEASURED.append(f"yaml-test-suite: {len(results)} inputs checked, slowest {slowest * 1000:.0f} ms")


def test_invalid_inputs_rejected_with_a_line_or_listed(results):
    invalid = {cid: v for cid, v in results.items() if (v[0] / "error").exists()}
    assert len(invalid) == 94
    accepted = set()
    for cid, (_folder, doc, res, _t) in invalid.items():
        parse = [f for f in res.findings if f.rule_id in ("YML-1", "YML-5")]
        if doc.readable:
            accepted.add(cid)
            continue
        assert parse, cid
        assert all(f.location.line >= 1 and f.location.col >= 1 for f in parse), (cid, parse)
    assert accepted == ACCEPTED_INVALID, sorted(accepted ^ ACCEPTED_INVALID)
    MEASURED.append(f"yaml-test-suite: {len(invalid) - len(accepted)} of {len(invalid)} invalid inputs reported "
                    f"with a line; accepted: {', '.join(sorted(accepted))}")


def test_invalid_input_exit_status_is_1(results):
    """Through the command line, a rejected invalid input exits 1 with a located YML-1."""
    rejected = [cid for cid, v in results.items() if (v[0] / "error").exists() and not v[1].readable]
    assert len(rejected) == 94 - len(ACCEPTED_INVALID)
    for cid in rejected:
        folder = results[cid][0]
        r = run_cli("check", "--format", "json", "in.yaml", cwd=folder)
        assert r.code == 1, (cid, r.err)
        located = [f for f in r.findings if f["rule"] in ("YML-1", "YML-5")]
        assert located and located[0]["location"]["line"] >= 1, (cid, r.findings)


def test_valid_inputs_rejected_are_clear_parse_findings(results):
    valid = {cid: v for cid, v in results.items() if not (v[0] / "error").exists()}
    assert len(valid) == 308
    rejected = []
    for cid, (_f, doc, res, _t) in valid.items():
        if not doc.readable:
            rejected.append(cid)
            found = [f for f in res.findings if f.rule_id in ("YML-1", "YML-5")]
            assert found and found[0].location.line >= 1, cid
    # the issue measured 53 for libyaml; exotic constructs (directives, tabs as separation,
    # adjacent flow values), each a located parse finding
    assert len(rejected) <= 53, rejected
    MEASURED.append(f"yaml-test-suite: {len(rejected)} of {len(valid)} valid inputs rejected by libyaml "
                    "(each a located parse finding)")


# --- location oracle: PyYAML's pure-Python composer ---------------------------------------
def reference_marks(data: bytes) -> list[tuple[str, int, int]]:
    """(kind, line, column) of every node, keys and values, in document order, as PyYAML's
    pure-Python composer (yaml.SafeLoader, the reference) marks them: mark.line + 1, mark.column + 1."""
    out, seen = [], set()

    def visit(n):
        if id(n) in seen:
            return
        seen.add(id(n))
        out.append((type(n).__name__[0], n.start_mark.line + 1, n.start_mark.column + 1))
        if isinstance(n, yaml.MappingNode):
            for k, v in n.value:
                visit(k)
                visit(v)
        elif isinstance(n, yaml.SequenceNode):
            for v in n.value:
                visit(v)

    roots = list(yaml.compose_all(data, Loader=yaml.SafeLoader))  # kept alive: ids stay unique
    for root in roots:
        if root is not None:
            visit(root)
    return out


def trimtab_marks(doc) -> list[tuple[str, int, int]]:
    """("M"apping or "S"other, line, col) of every node once, in document order (the engine's walk)."""
    return [("M" if isinstance(n, Mapping) else "S", n.line, n.col) for r in doc.roots for n in walk(r)]


def _kinds(marks):
    """Mapping or not (sequences and scalars share a letter in PyYAML's class names)."""
    return [("M" if k == "M" else "S", line, col) for k, line, col in marks]


def assert_marks_agree(data: bytes, name: str) -> bool:
    """True when compared; False when the reference itself cannot read the input."""
    try:
        ref = reference_marks(data)
    except yaml.YAMLError:
        return False
    doc = loader.parse_bytes(loader.Document(name), data, loader.Limits())
    assert doc.readable, (name, doc.problems)
    mine = trimtab_marks(doc)
    assert _kinds(mine) == _kinds(ref), (name, [(a, b) for a, b in zip(mine, ref) if a != b][:3])
    return True


def test_locations_equal_pyyaml_marks_on_valid_suite_inputs():
    compared = 0
    for cid, folder in _cases(_suite()):
        if (folder / "error").exists():
            continue
        data = (folder / "in.yaml").read_bytes()
        doc = loader.parse_bytes(loader.Document(cid), data, loader.Limits())
        if not doc.readable:
            continue  # rejected by libyaml: a parse finding, tested above
        compared += assert_marks_agree(data, cid)
    assert compared >= 240, compared
    MEASURED.append(f"location oracle: {compared} valid suite inputs, every node's line:col equals PyYAML's marks")


# --- YAML 1.2 typed tree vs the suite's in.json -------------------------------------------
class Incomparable(Exception):
    pass


def as_json_value(node, above=()):
    """trimtab's YAML 1.2 reading as a JSON-like value (scalars via Scalar.value12; explicit
    standard tags type the text as the tag says, local tags and '!' keep it as text)."""
    if isinstance(node, Scalar):
        return node.value12
    if id(node) in above:
        raise Incomparable("a recursive alias")
    above = above + (id(node),)
    if isinstance(node, Sequence):
        return [as_json_value(i, above) for i in node.items]
    out = {}
    for k, v in node.pairs:  # YAML 1.2 has no merge key: '<<' is an ordinary key here
        key = as_json_value(k, above)
        if isinstance(key, (dict, list)):
            raise Incomparable("a collection as a key (JSON has only string keys)")
        out[key if isinstance(key, str) else json.dumps(key)] = as_json_value(v, above)
    return out


def json_stream(text: str) -> list:
    dec, i, out = json.JSONDecoder(), 0, []
    while True:
        while i < len(text) and text[i].isspace():
            i += 1
        if i >= len(text):
            return out
        value, i = dec.raw_decode(text, i)
        out.append(value)


def same(a, b) -> bool:
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return a == b
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(map(same, a, b))
    return type(a) is type(b) and a == b


def test_yaml12_tree_agrees_with_in_json(results):
    agree, total, disagree = 0, 0, []
    for cid, (folder, doc, _res, _t) in results.items():
        if (folder / "error").exists() or not (folder / "in.json").exists():
            continue
        total += 1
        if not doc.readable:
            disagree.append(cid)
            continue
        try:
            mine = [as_json_value(r) for r in doc.roots]
        except Incomparable:
            disagree.append(cid)
            continue
        if same(mine, json_stream((folder / "in.json").read_text(encoding="utf-8"))):
            agree += 1
        else:
            disagree.append(cid)
    MEASURED.append(f"YAML 1.2 tree vs in.json: {agree} of {total} agree (floor {JSON_AGREEMENT_FLOOR}); "
                    f"differ: {', '.join(disagree)}")
    print(f"\nJSON agreement: {agree} of {total}")
    assert agree >= JSON_AGREEMENT_FLOOR, f"JSON agreement {agree} of {total} fell below {JSON_AGREEMENT_FLOOR}; " \
                                          f"differ: {disagree}"
    # Every disagreeing case is listed with its reason: a regression names the case, an improvement shows.
    listed = {line.split("\t")[0]: line.split("\t", 1)[1] for line in DISAGREEMENTS.read_text().splitlines()
              if line and not line.startswith("#")}
    assert all(reason.strip() for reason in listed.values())
    assert sorted(set(disagree) - set(listed)) == [], "newly disagreeing (a regression): add nothing, fix it"
    assert sorted(set(listed) - set(disagree)) == [], "now agreeing: remove from the list and raise the floor"
    assert total - agree == len(listed)
