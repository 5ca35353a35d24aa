"""Helpers for the tests of the optimisation-settings rules (KL, CLP, ALG, OPT)."""
from __future__ import annotations

from pathlib import Path

from support import FIXTURES, REPO, check_json

MINE = ("KL", "CLP", "ALG", "OPT")
# Areas a good fixture must also keep quiet: a published value written so that YAML 1.1 and 1.2
# disagree would make YML-3 fire, a misspelt key or value VOC-*.
HYGIENE = ("YML", "VOC", "ACC", "TOOL")


def fx(rule_id: str, name: str) -> Path:
    return FIXTURES / "rules" / rule_id / name


def check(rule_id: str, *names: str, args=()):
    r = check_json(*[fx(rule_id, n) for n in names], args=args, cwd=REPO)
    assert r.code in (0, 1), r.err
    assert not r.of("TOOL-1"), r.of("TOOL-1")
    return r


def places(result, rule_id: str) -> list[tuple]:
    """(file name, line, column, level) of each finding of one rule, in report order."""
    return [(Path(f["location"]["path"]).name, f["location"]["line"], f["location"]["col"], f["level"])
            for f in result.of(rule_id)]


def noisy(result, areas=MINE + HYGIENE) -> list[dict]:
    return [f for f in result.findings if f["rule"].split("-")[0] in areas]
