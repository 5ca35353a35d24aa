"""Settings are validated without jsonschema on the fast path (issue 20, start-up): a check of the
subset of JSON Schema draft 7 the settings schema is written in answers "surely valid" or "not sure";
jsonschema (the reference implementation of the standard, JSON Schema draft 7) stays the authority
and decides, and words the message, whenever the fast check is not sure. Here both are compared on
the settings of this repository's fixtures and docs, on values generated from the schema itself
(valid by construction) and on mutations of them (mostly invalid)."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import jsonschema
import pytest
from hypothesis import given
from hypothesis import strategies as st

from support import REPO
from trimtab.common.settings import SCHEMA_PATH, SettingsError, surely_valid, validate

SCHEMA = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
REFERENCE = jsonschema.Draft7Validator(SCHEMA)


def _tables() -> list[tuple[Path, dict]]:
    import tomllib

    out = []
    for path in sorted(list(REPO.glob("fixtures/**/trimtab.toml")) + list(REPO.glob("fixtures/**/pyproject.toml"))):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        table = data.get("tool", {}).get("trimtab") if path.name == "pyproject.toml" else data
        if isinstance(table, dict):
            out.append((path, table))
    return out


def test_the_repositorys_own_settings_take_the_fast_path_and_jsonschema_agrees():
    tables = _tables()
    assert len(tables) >= 20
    for path, table in tables:
        if REFERENCE.is_valid(table):
            assert surely_valid(SCHEMA, table), path  # the fast path is taken for valid settings
        else:
            assert not surely_valid(SCHEMA, table), path


_SCALARS = st.one_of(st.booleans(), st.integers(-5, 70000), st.floats(allow_nan=True), st.text(max_size=6),
                     st.none())


def _instance(schema, depth=0):
    """Values valid under ``schema`` (by construction, for the subset the settings schema uses)."""
    if schema is True or not isinstance(schema, dict) or depth > 6:
        return _SCALARS
    if "anyOf" in schema:
        return st.one_of([_instance(s, depth + 1) for s in schema["anyOf"]])
    if "enum" in schema:
        return st.sampled_from(schema["enum"])
    t = schema.get("type")
    t = t if isinstance(t, str) else st.sampled_from(t) if t else None
    if isinstance(t, st.SearchStrategy):
        return t.flatmap(lambda name: _instance({**schema, "type": name}, depth))
    if t == "string":
        return st.text(min_size=schema.get("minLength", 0), max_size=8)
    if t == "boolean":
        return st.booleans()
    if t in ("integer", "number"):
        lo, hi = schema.get("minimum", -1000), schema.get("maximum", 1 << 40)
        ints = st.integers(int(lo) if lo == int(lo) else int(lo) + 1, int(hi))
        return ints if t == "integer" else st.one_of(ints, st.floats(lo, hi))
    if t == "array":
        return st.lists(_instance(schema.get("items", True), depth + 1), max_size=3)
    if t == "object" or "properties" in schema:
        props = schema.get("properties", {})
        required = schema.get("required", [])
        extra = schema.get("additionalProperties", True)
        fixed = st.fixed_dictionaries({k: _instance(props[k], depth + 1) for k in required if k in props},
                                      optional={k: _instance(v, depth + 1) for k, v in props.items()
                                                if k not in required})
        if extra is False:
            return fixed
        more = st.dictionaries(st.text(min_size=1, max_size=6), _instance(extra, depth + 1), max_size=2)
        return st.tuples(more, fixed).map(lambda ab: {**ab[0], **ab[1]})
    return _SCALARS


def _mutate(value, data):
    """One change somewhere in the value: a wrong kind, an unknown key, a removed key."""
    if isinstance(value, dict) and value and data.draw(st.booleans()):
        key = data.draw(st.sampled_from(sorted(value)))
        value[key] = _mutate(value[key], data)
        return value
    if isinstance(value, list) and value and data.draw(st.booleans()):
        i = data.draw(st.integers(0, len(value) - 1))
        value[i] = _mutate(value[i], data)
        return value
    if isinstance(value, dict) and data.draw(st.booleans()):
        value[data.draw(st.text(min_size=1, max_size=6))] = data.draw(_SCALARS)
        return value
    return data.draw(st.one_of(_SCALARS, st.lists(_SCALARS, max_size=2), st.dictionaries(st.text(max_size=3), _SCALARS,
                                                                                          max_size=2)))


@given(_instance(SCHEMA))
def test_generated_valid_settings_take_the_fast_path(table):
    assert REFERENCE.is_valid(table)
    assert surely_valid(SCHEMA, table)


@given(_instance(SCHEMA), st.data())
def test_fast_check_never_passes_what_jsonschema_refuses(table, data):
    table = _mutate(table, data)
    if surely_valid(SCHEMA, table):
        assert REFERENCE.is_valid(table), table
    if not REFERENCE.is_valid(table):
        # the message is jsonschema's reading, as it was before the fast path
        with pytest.raises(SettingsError) as fast:
            validate(table, Path("trimtab.toml"), "")
        assert fast.value.args[0].startswith("trimtab.toml: setting ")


@pytest.mark.parametrize("table", [{"gate": "errors"}, {"jobs": 1.5}, {"jobs": True}, {"limits": {"max_bytes": -1}},
                                   {"keys": {"batch.mini": ""}}, {"include": "configs/*.yaml"}, {"nope": 1}])
def test_each_kind_of_wrong_setting_goes_to_jsonschema(table):
    assert not REFERENCE.is_valid(table)
    assert not surely_valid(SCHEMA, table)


def test_plain_check_with_a_settings_table_imports_no_jsonschema(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "pyproject.toml").write_text('[tool.trimtab]\ngate = "error"\nyaml_version = "1.2"\n'
                                             'include = ["*.yaml"]\n', encoding="utf-8")
    (tmp_path / "run.yaml").write_text("run:\n  estimator: grpo\n", encoding="utf-8")
    code = ("import sys, runpy; sys.argv = ['trimtab', 'check', 'run.yaml']\n"
            "try:\n    runpy.run_module('trimtab', run_name='__main__')\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'jsonschema'))")
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert out.stdout.strip().splitlines()[-1] == "[]", out.stdout + out.stderr
    # and a wrong setting still gets jsonschema's reading (the same message as without the fast path)
    (tmp_path / "pyproject.toml").write_text('[tool.trimtab]\ngate = "errors"\n', encoding="utf-8")
    out = subprocess.run([sys.executable, "-m", "trimtab", "check", "run.yaml"], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120)
    assert out.returncode == 2
    assert 'setting tool.trimtab.gate: expected one of "error", "warning", "note", found \'errors\'' in out.stderr
