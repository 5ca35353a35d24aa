"""Helpers shared by the run-arithmetic tests (BAT, SMP, LEN)."""
from __future__ import annotations

from support import FIXTURES, check_json

AREAS = ("BAT", "SMP", "LEN")


def arith(findings):
    return [f for f in findings if f["rule"].split("-")[0] in AREAS]


def expect_one(rel: str, rule: str, level: str, line: int, col: int, *texts: str, suggestion: str = ""):
    """Check one fixture: exactly one finding of ``rule``, at line and column, with the numbers."""
    res = check_json(FIXTURES / "rules" / rel)
    found = res.of(rule)
    assert len(found) == 1, [f["message"] for f in res.findings]
    f = found[0]
    assert (f["level"], f["location"]["line"], f["location"]["col"]) == (level, line, col), f
    for t in texts:
        assert t in f["message"], (t, f["message"])
    if suggestion:
        assert suggestion in f["suggestion"], (suggestion, f["suggestion"])
    return f


def expect_clean(rel: str):
    res = check_json(FIXTURES / "rules" / rel, args=("--only", ",".join(AREAS)))
    assert res.code == 0, res.out + res.err
    assert arith(res.findings) == []
    return res
