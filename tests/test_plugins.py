"""Rules are declarative units: keyword metadata, collected from their modules, every field
checked when a plugin registers; a plugin may declare the concepts its rules speak of."""
from __future__ import annotations

import types

import pytest

from support import run_cli

RUN = """\
run:
  estimator: grpo
rollout:
  group_size: 8
  temperature: 1.0
  retries: 5
batch:
  prompts: 64
"""


@pytest.fixture
def vocabulary():
    """The vocabulary as it was before the test (a plugin's concepts are added to it)."""
    from trimtab.common.vocabulary import CONCEPTS

    saved = dict(CONCEPTS)
    yield CONCEPTS
    CONCEPTS.clear()
    CONCEPTS.update(saved)


def _plugin(monkeypatch, name: str, source: str) -> types.ModuleType:
    """Install a plugin module under the entry-point group, as an installed distribution is."""
    import sys

    from trimtab.engine import registry as engine

    module = types.ModuleType(f"{name}_rules")
    monkeypatch.setitem(sys.modules, module.__name__, module)
    exec(compile(source, f"{name}_rules.py", "exec"), module.__dict__)
    found = list(engine.entry_points("trimtab"))
    monkeypatch.setitem(engine._ENTRY_POINTS, "trimtab",
                        found + [(name, module.__name__, lambda: module)])
    return module


def _repo(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(RUN, encoding="utf-8")
    return tmp_path


BAD_RULE = '''
from trimtab import collect, hookimpl, rule

@rule(id="ACM-1", name="mini-batch-check", level="warning", summary="test rule", rationale="test only",
      needs=("batch.mni",))
def check(ctx):
    yield ctx.finding("never", ctx.model.loc("batch.mini"))

@hookimpl
def trimtab_rules():
    return collect(__name__)
'''


def test_a_rule_needing_an_unknown_concept_is_refused_naming_plugin_and_field(tmp_path, monkeypatch):
    repo = _repo(tmp_path)
    _plugin(monkeypatch, "acme", BAD_RULE)
    r = run_cli("check", "--format", "json", "run.yaml", cwd=repo)
    assert r.code == 2, r.err
    (line,) = [ln for ln in r.err.splitlines() if "ACM-1" in ln]
    assert "plugin 'acme'" in line and "field needs" in line and "'batch.mni'" in line, line
    assert "did you mean batch.mini" in line, line
    assert "ACM-1" not in r.ids()
    assert run_cli("rules", cwd=repo).code == 2


@pytest.mark.parametrize("field,written", [
    ("id", 'id="acm1"'), ("name", 'name="Mini Batch"'), ("level", 'level="fatal"'),
    ("scope", 'scope="global"'), ("options.limit", 'options={"limit": None}'), ("cwe", 'cwe="78"'),
    ("summary", 'summary=""'),
])
def test_every_field_is_checked_at_registration(tmp_path, monkeypatch, field, written):
    from trimtab.engine.registry import Registry

    fields = {"id": 'id="ACM-2"', "name": 'name="mini-batch-check"', "level": 'level="note"',
              "summary": 'summary="test rule"'}
    key = field.split(".")[0]
    if key in fields:
        fields[key] = written
    else:
        fields[key] = fields["summary"] + ", " + written
        fields["summary"] = ""
        fields = {k: v for k, v in fields.items() if v}
    source = BAD_RULE.replace('id="ACM-1", name="mini-batch-check", level="warning", summary="test rule"',
                              ", ".join(fields.values()))
    source = source.replace('needs=("batch.mni",)', 'needs=("batch.mini",)')
    _plugin(monkeypatch, "acme", source)
    errors = Registry().errors
    assert len(errors) == 1, errors
    assert errors[0].startswith("plugin 'acme': rule ") and f"field {field}:" in errors[0], errors[0]


def test_builtin_rules_are_collected_from_their_modules_and_all_valid():
    import ast
    from pathlib import Path

    from trimtab.engine.registry import Registry

    reg = Registry()
    assert reg.errors == []
    # every @rule written in rules/*.py is registered (ids read from the source with ast)
    written = set()
    for path in Path(__file__).resolve().parents[1].joinpath("rules").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and getattr(node.func, "id", "") == "rule":
                written |= {k.value.value for k in node.keywords if k.arg == "id"}
    assert written and written == set(reg.rules)


CONCEPT_PLUGIN = '''
from trimtab import Concept, collect, hookimpl, rule

@hookimpl
def trimtab_concepts():
    return [Concept("rollout.retries", "int", "attempts", "times a failed generation is sampled again")]

@rule(id="ACM-3", name="too-many-retries", level="warning", summary="test rule", rationale="test only",
      needs=("rollout.retries",))
def retries(ctx):
    n = ctx.model.int("rollout.retries")
    if n > 3:
        yield ctx.finding(f"{n} retries", ctx.model.loc("rollout.retries"), subject=n)

@hookimpl
def trimtab_rules():
    return collect(__name__)
'''


def test_a_plugin_declares_a_concept_its_rule_needs(tmp_path, monkeypatch, vocabulary):
    repo = _repo(tmp_path)
    _plugin(monkeypatch, "acme", CONCEPT_PLUGIN)
    r = run_cli("check", "--format", "json", "run.yaml", cwd=repo)
    assert r.code in (0, 1), r.err
    assert [(f["location"]["line"], f["location"]["col"], f["message"]) for f in r.of("ACM-3")] == [
        (6, 12, "5 retries")]
    # and through the user's key map, like a built-in concept
    (repo / "run.yaml").write_text(RUN.replace("  retries: 5\n", "  attempts_max: 4\n"), encoding="utf-8")
    (repo / "trimtab.toml").write_text('[keys]\n"rollout.retries" = "rollout.attempts_max"\n', encoding="utf-8")
    r = run_cli("check", "--format", "json", "run.yaml", cwd=repo)
    assert [f["message"] for f in r.of("ACM-3")] == ["4 retries"], r.err


def test_a_bad_concept_is_refused_naming_plugin_and_field(monkeypatch, vocabulary):
    from trimtab.engine.registry import Registry

    _plugin(monkeypatch, "acme", CONCEPT_PLUGIN.replace('"rollout.retries", "int"', '"rollout.retries", "float"'))
    errors = Registry().errors
    assert errors[0] == ("plugin 'acme': concept 'rollout.retries': field type: expected one of int, number, "
                         "bool, str, list, any, found 'float'")
    # its rule then needs an unknown concept, and is refused too
    assert "rule 'ACM-3': field needs" in errors[1]
