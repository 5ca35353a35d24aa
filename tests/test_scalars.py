"""trimtab types plain scalars itself; the readings are checked against two reference libraries:
PyYAML's ``safe_load`` for YAML 1.1 (PyYAML implements the YAML 1.1 implicit types) and
ruamel.yaml's safe loader for YAML 1.2 (ruamel.yaml implements the YAML 1.2 core schema)."""
import io
import math

import pytest
import yaml
from ruamel.yaml import YAML

from trimtab.common.scalars import same_value, type11, type12, typed

SCALARS = [
    # numbers as run configs write them
    "3e-6", "3.0e-6", "1e5", "1.0e+5", "1.0e5", "0.04", ".5", "-0.2", "+1.5", "1_000", "10", "-3", "0",
    "010", "0o17", "0x1F", "0b101", "1:30", "-1:30", "+1:30", "1:30.5", "-1:30.5", "-1:00:30", "6.02e+23",
    "1.", "1.e-3",
    ".inf", "-.inf", ".Inf", ".NAN", ".nan",
    # booleans and nulls
    # every YAML 1.1 boolean spelling PyYAML reads (y/n are text to it), and near misses that stay text
    "true", "True", "TRUE", "false", "False", "FALSE", "on", "On", "ON", "off", "Off", "OFF",
    "yes", "Yes", "YES", "no", "No", "NO", "y", "Y", "n", "N", "yEs", "oN", "tRUE", "ofF",
    "null", "~", "Null", "NULL",
    # text that must stay text
    "grpo", "k3", "v1.2", "1.2.3", "0.0.1-alpha", "1e", "e5", "12abc", "+", ".", "0x", "0o", "08", "09",
    "2026-12-01", "main",
]


def _pyyaml(text):
    return yaml.safe_load(f"v: {text}\n")["v"]


_RUAMEL = YAML(typ="safe", pure=True)

# ruamel.yaml extends the core schema with `_` digit separators and 0b binary integers; the core
# schema itself (YAML 1.2.2 section 10.3.2) reads both as text.
RUAMEL_EXTENSIONS = {"1_000", "0b101"}


def _ruamel(text):
    return _RUAMEL.load(io.StringIO(f"v: {text}\n"))["v"]


def _agree(ours, theirs):
    if isinstance(theirs, float) and math.isnan(theirs):
        return isinstance(ours, float) and math.isnan(ours)
    return same_value(ours, theirs)


@pytest.mark.parametrize("text", SCALARS)
def test_yaml11_reading_matches_pyyaml_safe_load(text):
    # Reference: PyYAML safe_load (YAML 1.1 implicit resolvers).
    theirs = _pyyaml(text)
    assert _agree(type11(text), theirs), (text, type11(text), theirs)


@pytest.mark.parametrize("text", [s for s in SCALARS if ":" not in s])
def test_yaml12_reading_matches_ruamel_core_schema(text):
    # Reference: ruamel.yaml safe loader, YAML 1.2 core schema (YAML 1.2.2 section 10.3.2).
    theirs = _ruamel(text)
    ours = type12(text)
    if text == "2026-12-01":
        # ruamel.yaml keeps the YAML 1.1 timestamp type under 1.2; the 1.2 core schema has no
        # timestamp, so the spec reading is the string.
        assert ours == "2026-12-01"
        return
    if text in RUAMEL_EXTENSIONS:
        assert ours == text and theirs != text
        return
    assert _agree(ours, theirs), (text, ours, theirs)


def test_sexagesimal_is_yaml11_only():
    # YAML 1.1 type repository (int, float): base 60; the YAML 1.2 core schema has no such form.
    assert type11("1:30") == 90 and type12("1:30") == "1:30"
    assert _pyyaml("1:30") == 90


@pytest.mark.parametrize("text,disagree", [("3e-6", True), ("3.0e-6", False), ("on", True), ("010", True),
                                           ("1:30", True), ("0.04", False), ("true", False)])
def test_known_disagreements(text, disagree):
    # The design's examples: 3e-6, on/no, 010, 1:30 read differently; the others agree.
    assert (not same_value(type11(text), type12(text))) is disagree


# Explicitly tagged scalars (YAML 1.2.2 section 6.9.1 node tags; the standard tags of the YAML type
# repository): the tag, not the text's look, decides the type, quoted or not.
TAGGED = [("!!int", '"12"'), ("!!int", "12"), ("!!float", "1"), ("!!float", '"1.5"'), ("!!float", "2"),
          ("!!bool", '"true"'), ("!!null", '""'), ("!!null", "~"), ("!!str", "12"), ("!!str", "true"),
          ("!!int", "0x1F")]


def _node(text: str):
    node = yaml.compose(f"v: {text}\n").value[0][1]
    return node.value, node.style is None, node.tag


@pytest.mark.parametrize("tag, text", TAGGED)
def test_explicit_tags_match_pyyaml(tag, text):
    raw, plain, full_tag = _node(f"{tag} {text}")
    ours = typed(raw, plain, full_tag, "1.1")
    assert _agree(ours, _pyyaml(f"{tag} {text}")), (tag, text, ours)


@pytest.mark.parametrize("tag, text", [t for t in TAGGED if t[1] not in ("0x1F",)])
def test_explicit_tags_match_ruamel(tag, text):
    raw, plain, full_tag = _node(f"{tag} {text}")
    ours = typed(raw, plain, full_tag, "1.2")
    assert _agree(ours, _ruamel(f"{tag} {text}")), (tag, text, ours)
