"""One harness for every rule's fixtures: each bad fixture states what it expects (rule id, line,
column, level) in its own comments; each good fixture keeps its rule silent; every registered
rule has both."""
from __future__ import annotations

import pytest

from support import RULE_FIXTURES, expectations, fixture_rule, rule_fixtures, run_fixture

FIXTURES = rule_fixtures()


def _id(item) -> str:
    return item[1].relative_to(RULE_FIXTURES).as_posix()


@pytest.mark.parametrize("kind,path", FIXTURES, ids=[_id(f) for f in FIXTURES])
def test_fixture(tmp_path, kind, path):
    rule = fixture_rule(path)
    expected, _args = expectations(path)
    res, _here, found = run_fixture(path, tmp_path)
    assert not res.of("TOOL-1"), res.of("TOOL-1")
    if kind == "good":
        assert expected == [], "a good fixture expects nothing"
        assert [f for f in found if f[0] == rule] == []
        return
    # usually its own rule; a fixture may also show the rule silent where another one speaks
    assert expected, f"{_id((kind, path))} states no expectation"
    named = {e[0] for e in expected} | {rule}
    got = [f for f in found if f[0] in named]
    # a level left out of an expectation matches any level; the expectations are written in report order
    want = [e if e[4] else e[:4] for e in expected]
    got = [g if any(e[:4] == g[:4] and e[4] for e in expected) else g[:4] for g in got]
    assert got == want  # in report order


def test_every_registered_rule_has_a_good_and_a_bad_fixture():
    from trimtab.engine.registry import Registry

    have: dict[str, set[str]] = {}
    for kind, path in FIXTURES:
        have.setdefault(fixture_rule(path), set()).add(kind)
    missing = sorted(r for r in Registry().rules if have.get(r) != {"good", "bad"})
    assert missing == [], f"rules without a good and a bad fixture under fixtures/rules: {missing}"


def test_the_harness_reads_every_form_of_expectation(tmp_path):
    f = tmp_path / "bad.yaml"
    f.write_text("a: 1\n# expect: BAT-3 12:5 error\n# expect: OPT-4 other.yaml:19:8\n# expect: YML-6 note\n"
                 "# expect: CMP-6 --set:0:0 error\n# with: --accepted x.json other.yaml\n", encoding="utf-8")
    assert expectations(f) == ([("BAT-3", "bad.yaml", 12, 5, "error"), ("OPT-4", "other.yaml", 19, 8, None),
                                ("YML-6", "bad.yaml", 0, 0, "note"), ("CMP-6", "--set", 0, 0, "error")],
                               ["--accepted", "x.json", "other.yaml"])
