"""Safe fixes (``check --fix``, ``--fix --diff``): only the edited scalars change, byte for byte;
PyYAML (YAML 1.1) and ruamel.yaml (YAML 1.2) both read the fixed values as intended; a fix that
cannot be proved is refused and the file left alone."""
from __future__ import annotations

import codecs
import difflib
import json
from pathlib import Path

import pytest
import yaml

from support import FIXTURES, check_json, run_cli
from trimtab import Edit, hookimpl, rule

ODD = FIXTURES / "adopt" / "fix" / "lowfield-odd.yaml"

# (line, old text, new text) of the fixable values in lowfield-odd.yaml. The spans come from
# PyYAML's own node marks below, not from trimtab.
EXPECTED = [
    (4, "yes", "'yes'"),  # run.name: text that YAML 1.1 reads as the boolean true -> quoted
    (6, "5e-1", "5.0e-1"),  # in a flow mapping; YAML 1.1 needs a point and a signed exponent
    (9, "3e-6", "3.0e-6"),
    (12, "1E-3", "1.0e-3"),
]


def pyyaml_value_spans(text: str) -> dict[int, tuple[int, int]]:
    """line -> (start, end) character offsets of each mapping value scalar, from PyYAML's
    composer marks (the reference library's own reading of where a scalar is)."""
    out = {}
    stack = [yaml.compose(text, Loader=yaml.SafeLoader)]
    while stack:
        node = stack.pop()
        if isinstance(node, yaml.MappingNode):
            for _k, v in node.value:
                if isinstance(v, yaml.ScalarNode):
                    out[v.start_mark.line + 1] = (v.start_mark.index, v.end_mark.index)
                else:
                    stack.append(v)
    return out


def expected_text(original: str) -> str:
    spans = pyyaml_value_spans(original)
    text = original
    for line, old, new in sorted(EXPECTED, key=lambda e: -spans[e[0]][0]):
        start, end = spans[line]
        assert text[start:end] == old
        text = text[:start] + new + text[end:]
    return text


def setup_repo(tmp_path: Path, data: bytes) -> Path:
    (tmp_path / ".git").mkdir()
    target = tmp_path / "configs" / "wren-7b.yaml"
    target.parent.mkdir()
    target.write_bytes(data)
    return target


@pytest.mark.parametrize("variant", ["as-is", "crlf", "bom"])
def test_fix_changes_only_the_edited_scalars(tmp_path, variant):
    original = ODD.read_text(encoding="utf-8")
    if variant == "crlf":
        original = original.replace("\n", "\r\n")
    data = original.encode("utf-8")
    if variant == "bom":
        data = codecs.BOM_UTF8 + data
    target = setup_repo(tmp_path, data)

    r = run_cli("check", "--fix", "configs/wren-7b.yaml", cwd=tmp_path)
    assert "applied 4 safe fix(es) in 1 file(s)" in r.err
    after = target.read_bytes()

    # byte level: the file is the original with exactly the four scalars replaced
    prefix = codecs.BOM_UTF8 if variant == "bom" else b""
    assert after == prefix + expected_text(original).encode("utf-8")
    # and every changed region lies inside an edited scalar's span
    spans = pyyaml_value_spans(original)
    edited = [spans[line] for line, _o, _n in EXPECTED]
    fixed_text = after[len(prefix):].decode("utf-8")
    for op, i1, i2, _j1, _j2 in difflib.SequenceMatcher(None, original, fixed_text, autojunk=False).get_opcodes():
        if op != "equal":
            assert any(s <= i1 and i2 <= e for s, e in edited), (op, original[i1:i2])

    # both readers see the intended types (YAML 1.1: PyYAML; YAML 1.2: ruamel.yaml)
    from ruamel.yaml import YAML

    old11 = yaml.safe_load(original)
    new11 = yaml.safe_load(fixed_text)
    new12 = YAML(typ="rt").load(fixed_text)
    for reading in (new11, new12):
        assert reading["run"]["run_name"] == "yes" and isinstance(reading["run"]["run_name"], str)
        assert reading["optim"]["lr"] == 3e-6 and isinstance(reading["optim"]["lr"], float)
        assert reading["kl"]["coef"] == 1e-3 and isinstance(reading["kl"]["coef"], float)
        assert reading["rollout"]["temperature"] == 0.5
    assert old11["optim"]["lr"] == "3e-6"  # what a YAML 1.1 loader read before the fix
    assert new11["optim"]["warmup_steps"] == old11["optim"]["warmup_steps"] == 8  # left alone

    # the fixed file re-checks clean for the fixed values; the unfixable one stays reported
    again = check_json("configs/wren-7b.yaml", args=["--only", "YML-3"], cwd=tmp_path)
    assert [(f["location"]["line"], f["fixable"]) for f in again.findings] == [(10, False)]
    # the run after --fix reports what is left
    assert "optim.warmup_steps = 010" in r.out


def test_fix_diff_prints_a_unified_diff_and_writes_nothing(tmp_path):
    target = setup_repo(tmp_path, ODD.read_bytes())
    before = target.read_bytes()
    r = run_cli("check", "--fix", "--diff", "configs/wren-7b.yaml", cwd=tmp_path)
    assert target.read_bytes() == before
    assert r.code == 1  # there is something to fix
    original = before.decode("utf-8")
    want = "".join(difflib.unified_diff(original.splitlines(True), expected_text(original).splitlines(True),
                                        "a/configs/wren-7b.yaml", "b/configs/wren-7b.yaml"))
    assert r.out == want
    assert "4 safe fix(es) in 1 file(s) would be applied; nothing written" in r.err
    # nothing to fix: exit 0, no diff
    clean = tmp_path / "configs" / "clean.yaml"
    clean.write_text("run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 0.9\n", encoding="utf-8")
    r = run_cli("check", "--fix", "--diff", "configs/clean.yaml", cwd=tmp_path)
    assert r.code == 0 and r.out == ""


def test_fix_writes_only_files_with_safe_fixes(tmp_path):
    setup_repo(tmp_path, ODD.read_bytes())
    cfg = tmp_path / "configs"
    unfixable = cfg / "dup.yaml"  # YML-2 duplicate key: no safe fix exists
    unfixable.write_text("run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  group_size: 16\n  temperature: 1\n",
                         encoding="utf-8")
    other = cfg / "manifest.yaml"  # not a run config, holds a 1.1/1.2 disagreement nobody checks
    other.write_text("shards: 3e-6\n", encoding="utf-8")
    stamps = {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in (unfixable, other)}
    r = run_cli("check", "--fix", cwd=tmp_path)
    assert "applied 4 safe fix(es) in 1 file(s)" in r.err
    for p, (data, mtime) in stamps.items():
        assert (p.read_bytes(), p.stat().st_mtime_ns) == (data, mtime), p
    assert r.code == 1  # the duplicate key is still there
    assert "dup.yaml:5:3: warning YML-2" in r.out


def test_accepted_findings_are_not_fixed(tmp_path):
    target = setup_repo(tmp_path, ODD.read_bytes())
    run_cli("check", "--write-accepted", "accepted.json", cwd=tmp_path)
    before = target.read_bytes()
    r = run_cli("check", "--fix", "--accepted", "accepted.json", cwd=tmp_path)
    assert target.read_bytes() == before and r.code == 0


def test_diff_needs_fix(tmp_path):
    setup_repo(tmp_path, ODD.read_bytes())
    r = run_cli("check", "--diff", cwd=tmp_path)
    assert r.code == 2 and "use --fix --diff" in r.err
    r = run_cli("check", "--fix", "--write-accepted", "a.json", cwd=tmp_path)
    assert r.code == 2 and "run --fix first" in r.err and not (tmp_path / "a.json").exists()


# --- the fixer refuses what it cannot prove -------------------------------------------------------
def plan_for(tmp_path: Path, text: str, edits) -> "list":
    from trimtab.adopt import fix
    from trimtab.common.findings import Finding, Level, Location

    p = tmp_path / "run.yaml"
    p.write_text(text, encoding="utf-8")
    findings = [Finding("TST-1", Level.WARNING, "m", Location("run.yaml", 1, 1), fix=e) for e in edits]
    return fix.plan(findings, lambda shown: tmp_path / shown)


def span(text: str, needle: str, occurrence: int = 0) -> tuple[int, int]:
    start = -1
    for _ in range(occurrence + 1):
        start = text.index(needle, start + 1)
    return start, start + len(needle)


def test_refuses_a_respelling_that_changes_the_value(tmp_path):
    text = "optim:\n  lr: 3e-6\n"
    s, e = span(text, "3e-6")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "3e-6", "3.0e-5")])
    assert not ff.applied and "reads the float 3e-05" in ff.refused[0][1]


def test_refuses_an_edit_that_adds_a_key(tmp_path):
    # a fix never invents a hyperparameter
    text = "optim: {lr: 3e-6}\n"
    s, e = span(text, "3e-6")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "3e-6", "3.0e-6, kl_coef: 0.1")])
    assert not ff.applied and "different set of keys" in ff.refused[0][1]
    block = "optim:\n  lr: 3e-6\n"
    s, e = span(block, "3e-6")
    [ff] = plan_for(tmp_path, block, [Edit("run.yaml", s, e, "3e-6", "3.0e-6\n  kl: 1")])
    assert not ff.applied and "spans lines" in ff.refused[0][1]


def test_refuses_a_value_shared_through_an_alias(tmp_path):
    text = "optim:\n  lr: &lr 3e-6\ncritic:\n  lr: *lr\n"
    s, e = span(text, "3e-6")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "3e-6", "3.0e-6")])
    assert not ff.applied and "used elsewhere" in ff.refused[0][1]


def test_refuses_stale_spans_and_partial_scalars(tmp_path):
    text = "optim:\n  lr: 3e-6\n"
    s, e = span(text, "3e-6")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "4e-6", "4.0e-6")])
    assert "file changed since the check" in ff.refused[0][1]
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s + 1, e, "e-6", ".0e-6")])
    assert "not the whole text of one scalar" in ff.refused[0][1]
    k, _ = span(text, "optim")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", k, k + 5, "optim", "optimiser")])
    assert "not one scalar value" in ff.refused[0][1]


def test_refuses_quoting_in_json(tmp_path):
    from trimtab.adopt import fix
    from trimtab.common.findings import Finding, Level, Location

    p = tmp_path / "run.json"
    p.write_text('{"run": {"name": "x"}, "flag": true}\n', encoding="utf-8")
    s, e = span(p.read_text(), "true")
    f = Finding("TST-1", Level.WARNING, "m", Location("run.json", 1, 1), fix=Edit("run.json", s, e, "true", "'true'"))
    [ff] = fix.plan([f], lambda shown: tmp_path / shown)
    assert not ff.applied and "json cannot read the fixed file" in ff.refused[0][1]


# --- a rule that corrects a value it can prove: the mechanism for "stated product disagrees" ------
@rule(id="TST-9", name="stated-product-test", level="warning",
      summary="test only: a stated product that disagrees with its factors",
      rationale="Test rule: batch.rollouts = batch.prompts x rollout.group_size (the identity trimtab derives).",
      needs=("batch.rollouts", "batch.prompts", "rollout.group_size"))
def _product_rule(ctx):
    m = ctx.model
    stated = m.stated("batch.rollouts")
    product = m.int("batch.prompts") * m.int("rollout.group_size")
    if stated.value != product:
        node = stated.node
        yield ctx.finding(f"batch.rollouts = {stated.value}, but {m.int('batch.prompts')} x "
                          f"{m.int('rollout.group_size')} = {product}", stated.location, subject=stated.value,
                          fix=Edit(node.file, node.start, node.end, node.text, str(product), value=product))


class _Plugin:
    @hookimpl
    def trimtab_rules(self):
        return [_product_rule]


def test_a_rule_can_declare_a_value_correcting_fix(tmp_path):
    from trimtab.adopt import fix
    from trimtab.gate.runner import Checker
    from trimtab.engine.registry import Registry
    from trimtab.common.settings import Settings

    text = ("run:\n  estimator: grpo   # factors below\nbatch:\n  prompts: 64\n  rollouts:  500   # stated\n"
            "rollout:\n  group_size: 8\n  temperature: 0.9\n")
    p = tmp_path / "run.yaml"
    p.write_text(text, encoding="utf-8")
    checker = Checker(Settings(root=tmp_path), Registry(plugins=[_Plugin()]))
    res = checker.check_file(str(p), "run.yaml")
    [f] = [f for f in res.findings if f.rule_id == "TST-9"]
    [ff] = fix.plan([f], lambda shown: tmp_path / shown)
    assert [x.rule_id for x in ff.applied] == ["TST-9"], ff.refused
    assert ff.after.decode() == text.replace("rollouts:  500", "rollouts:  512")
    assert yaml.safe_load(ff.after)["batch"]["rollouts"] == 512

    # the fixer checks the declared value: an edit whose text does not read as it is refused
    bad = Edit(f.fix.path, f.fix.start, f.fix.end, f.fix.old, "0x200", value=500)
    f.fix = bad
    [ff] = fix.plan([f], lambda shown: tmp_path / shown)
    assert not ff.applied and "not the integer 500" in ff.refused[0][1]


def test_one_unprovable_fix_does_not_block_the_others(tmp_path):
    target = setup_repo(tmp_path, b"run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 0.9\n"
                                  b"optim:\n  lr: &lr 3e-6   # shared below\ncritic:\n  lr: *lr\nkl:\n  coef: 1e-3\n")
    r = run_cli("check", "--fix", "configs/wren-7b.yaml", cwd=tmp_path)
    assert "applied 1 safe fix(es) in 1 file(s)" in r.err
    assert "not fixed: configs/wren-7b.yaml:7:7 YML-3" in r.err and "used elsewhere" in r.err
    text = target.read_text()
    assert "coef: 1.0e-3" in text and "lr: &lr 3e-6   # shared below" in text


# --- property: any exponent spelling is respelled exactly, or not touched --------------------------
from hypothesis import given, settings as hsettings, strategies as st


@st.composite
def exponent_numbers(draw):
    whole = draw(st.integers(0, 999))
    frac = draw(st.one_of(st.just(""), st.just("."), st.integers(0, 999).map(lambda n: f".{n}")))
    lead = str(whole) if not (frac.startswith(".") and len(frac) > 1 and draw(st.booleans())) else ""
    sign = draw(st.sampled_from(["", "-", "+"]))
    e = draw(st.sampled_from(["e", "E"]))
    esign = draw(st.sampled_from(["", "-", "+"]))
    exp = draw(st.integers(0, 30))
    return f"{sign}{lead}{frac}{e}{esign}{exp}"


@hsettings(max_examples=40)
@given(number=exponent_numbers(), pad=st.sampled_from(["", " ", "   "]),
       comment=st.sampled_from(["", "  # lr", " #: keep"]))
def test_property_exponent_respelling_keeps_value_and_bytes(number, pad, comment):
    """Reference: PyYAML (YAML 1.1) and Python's float() (the YAML 1.2 reading of a float)."""
    import tempfile

    from trimtab.adopt import fix
    from trimtab.gate.runner import Checker
    from trimtab.engine.registry import Registry
    from trimtab.common.settings import Settings

    text = (f"run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 0.9\n"
            f"optim:\n  lr:{pad} {number}{comment}\n")
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "run.yaml"
        p.write_text(text, encoding="utf-8")
        res = Checker(Settings(root=Path(tmp)), Registry()).check_file(str(p), "run.yaml")
        fixes = [f for f in res.findings if f.fix is not None]
        plans = fix.plan(fixes, lambda shown: Path(tmp) / shown)
    if not fixes:
        # no fix offered: the spelling already reads alike under both versions
        assert yaml.safe_load(text)["optim"]["lr"] == float(number)
        return
    [ff] = plans
    assert ff.applied and not ff.refused, ff.refused
    after = ff.after.decode("utf-8")
    new = fixes[0].fix.new
    assert after == text.replace(f" {number}{comment}\n", f" {new}{comment}\n")
    reading = yaml.safe_load(after)["optim"]["lr"]
    assert isinstance(reading, float) and reading == float(number)


def test_an_edit_keeps_its_meaning_across_worker_processes():
    """--jobs N returns findings from worker processes by pickling: KEEP must stay the one object."""
    import pickle

    from trimtab.common.findings import KEEP

    e = pickle.loads(pickle.dumps(Edit("run.yaml", 1, 5, "3e-6", "3.0e-6")))
    assert e.value is KEEP


def test_a_value_written_in_a_base_is_fixed_in_the_base(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "pyproject.toml").write_text('[tool.trimtab]\nbases_key = "inherit"\ninclude = ["configs/*.yaml"]\n',
                                             encoding="utf-8")
    (tmp_path / "bases").mkdir()
    (tmp_path / "configs").mkdir()
    base = tmp_path / "bases" / "optim.yaml"
    base.write_text("# shared by every wren-7b run\noptim:\n  lr: 3e-6   # base lr\n", encoding="utf-8")
    run = "inherit: ../bases/optim.yaml\nrun:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 0.9\n"
    for name in ("a.yaml", "b.yaml"):
        (tmp_path / "configs" / name).write_text(run, encoding="utf-8")
    r = run_cli("check", "--fix", "--skip", "KL,CLP,ALG,OPT", cwd=tmp_path)  # (areas about unstated values)
    assert "applied 1 safe fix(es) in 1 file(s)" in r.err
    assert base.read_text() == "# shared by every wren-7b run\noptim:\n  lr: 3.0e-6   # base lr\n"
    assert all((tmp_path / "configs" / n).read_text() == run for n in ("a.yaml", "b.yaml"))
    assert r.code == 0


def test_no_quoting_fix_where_the_boolean_may_be_meant(tmp_path):
    """reference.source takes a path or false ("no reference"): `off` read as false by a YAML 1.1
    loader may be what the author meant, so quoting it would change the run. Only concepts that
    take text alone get the quoting fix."""
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text("run:\n  estimator: grpo\n  run_name: off\nrollout:\n  group_size: 8\n"
                                       "  temperature: 0.9\nref_model: off\n", encoding="utf-8")
    r = check_json(tmp_path / "run.yaml", args=["--only", "YML-3"], cwd=tmp_path)
    fixable = {f["location"]["line"]: f["fixable"] for f in r.findings}
    assert fixable == {3: True, 7: False}


# --- every guard of the fixer, each on its own (a guard switched off must fail one of these) --------------
def test_refuses_a_line_break_of_either_kind_in_the_new_text(tmp_path):
    # A fix is one scalar on one line: a bare LF written into a CRLF file (or a CR into an LF file) would
    # mix line endings and, for YAML, start a new line (YAML 1.2.2, section 5.4: CR and LF are line breaks).
    crlf = "optim:\r\n  lr: 3e-6\r\n"
    s, e = span(crlf, "3e-6")
    for new in ("3.0e-6\n", "3.0e-6\r", "3.0e-6\r\n"):
        [ff] = plan_for(tmp_path, crlf, [Edit("run.yaml", s, e, "3e-6", new)])
        assert not ff.applied and "spans lines" in ff.refused[0][1], repr(new)
    [ff] = plan_for(tmp_path, crlf, [Edit("run.yaml", s, e, "3e-6", "3.0e-6")])
    assert ff.applied and b"\n" not in ff.after.replace(b"\r\n", b"")  # every line still ends CRLF


def test_refuses_a_span_outside_the_file(tmp_path):
    text = "optim:\n  lr: 3e-6\n"
    for s, e in ((-1, 3), (len(text) - 1, len(text) + 4), (5, 5)):
        [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, text[max(s, 0):e], "x")])
        assert not ff.applied and "outside the file" in ff.refused[0][1], (s, e)


def test_refuses_overlapping_and_conflicting_edits(tmp_path):
    text = "optim:\n  lr: 3e-6\n"
    s, e = span(text, "3e-6")
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "3e-6", "3.0e-6"),
                                     Edit("run.yaml", s, e, "3e-6", "'3e-6'")])
    assert len(ff.applied) == 1  # the first; the second is refused
    assert [why for _f, why in ff.refused] == ["another fix edits the same scalar differently"]
    # the same edit asked twice is one edit, applied for both findings
    [ff] = plan_for(tmp_path, text, [Edit("run.yaml", s, e, "3e-6", "3.0e-6")] * 2)
    assert len(ff.applied) == 2 and ff.refused == []


@pytest.mark.parametrize("variant", ["as-is", "crlf"])
def test_sarif_fix_replacements_applied_to_the_file_give_the_fixed_file(tmp_path, variant):
    # SARIF 2.1.0, section 3.30 (region: charOffset / charLength, zero-based character offsets into the
    # artifact) and 3.57 (replacement: deletedRegion, insertedContent; section numbers from memory).
    # Applying the log's replacements to the file, as any SARIF consumer would, must give exactly what
    # `--fix` writes.
    original = ODD.read_text(encoding="utf-8")
    if variant == "crlf":
        original = original.replace("\n", "\r\n")
    target = setup_repo(tmp_path, original.encode("utf-8"))
    log = json.loads(run_cli("check", "--format", "sarif", "configs/wren-7b.yaml", cwd=tmp_path).out)
    reps = [rep for res in log["runs"][0]["results"] for fx in res.get("fixes", ())
            for change in fx["artifactChanges"] for rep in change["replacements"]]
    assert len(reps) == len(EXPECTED)
    text = target.read_bytes().decode("utf-8")  # newline="" semantics: every \r is a character
    for rep in sorted(reps, key=lambda r: -r["deletedRegion"]["charOffset"]):
        start = rep["deletedRegion"]["charOffset"]
        text = text[:start] + rep["insertedContent"]["text"] + text[start + rep["deletedRegion"]["charLength"]:]
    assert text == expected_text(original)
    run_cli("check", "--fix", "configs/wren-7b.yaml", cwd=tmp_path)
    assert target.read_bytes().decode("utf-8") == text
