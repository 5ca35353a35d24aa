"""Shared test helpers.

``../shared`` (reference data: the YAML test suite, the SARIF 2.1.0 schema) is found through ONE
path: the environment variable TRIMTAB_SHARED, else the folder ``shared`` beside the repository.
Tests that need it skip with a reason when it is absent.
"""
from __future__ import annotations

import io
import json
import os
import signal
from contextlib import contextmanager, redirect_stderr, redirect_stdout
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
FIXTURES = REPO / "fixtures"
SHARED = Path(os.environ.get("TRIMTAB_SHARED", REPO.parent / "shared"))
# A check of some files keeps a cache of the other runs in git's own folder, else in the user's cache
# folder (linter/gate/context.py): the suite's repositories without git use a folder of its own.
if "XDG_CACHE_HOME" not in os.environ:
    import tempfile

    os.environ["XDG_CACHE_HOME"] = tempfile.mkdtemp(prefix="trimtab-test-cache-")


def shared_path(*parts: str) -> Path:
    """A path inside ../shared, or skip the test with the reason."""
    p = SHARED.joinpath(*parts)
    if not p.exists():
        pytest.skip(f"reference data not available: {p} (set TRIMTAB_SHARED to the shared folder)")
    return p


class Result:
    def __init__(self, code: int, out: str, err: str):
        self.code, self.out, self.err = code, out, err

    @property
    def json(self) -> dict:
        return json.loads(self.out)

    @property
    def findings(self) -> list[dict]:
        return self.json["findings"]

    def ids(self) -> list[str]:
        return [f["rule"] for f in self.findings]

    def of(self, rule_id: str) -> list[dict]:
        return [f for f in self.findings if f["rule"] == rule_id]



# A small run config that every rule passes: the starting point of tests that break one thing.
RUN_CONFIG = """\
run: {estimator: grpo, seed: 1, ref_model: ./weights/base}
optim: {max_grad_norm: 1.0, clip_ratio: 0.2}
rollout:
  group_size: 8
  temperature: 0.9
batch:
  prompts: 64
kl:
  coef: 0.04
"""


def composed_nodes(roots) -> list:
    """Every node of PyYAML's composed graphs once (an alias is its target, met once), keys and
    values, in document order: the reference tests read PyYAML's marks from."""
    import yaml

    out, seen = [], set()

    def visit(n):
        if id(n) in seen:
            return
        seen.add(id(n))
        out.append(n)
        if isinstance(n, yaml.MappingNode):
            for k, v in n.value:
                visit(k)
                visit(v)
        elif isinstance(n, yaml.SequenceNode):
            for v in n.value:
                visit(v)

    for root in roots:
        visit(root)
    return out


def run_repo(tmp_path: Path) -> Path:
    """A repository (a bare ``.git`` folder) holding ``run.yaml`` = ``RUN_CONFIG``."""
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(RUN_CONFIG, encoding="utf-8")
    return tmp_path

def run_cli(*args: str, cwd: Path | str | None = None) -> Result:
    """Run the trimtab command line in this process (fast), capturing its output."""
    from trimtab.cli import main

    out, err = io.StringIO(), io.StringIO()
    old = os.getcwd()
    if cwd is not None:
        os.chdir(cwd)
    try:
        with redirect_stdout(out), redirect_stderr(err):
            try:
                code = main([str(a) for a in args])
            except SystemExit as exc:  # argparse
                code = exc.code if isinstance(exc.code, int) else 2
    finally:
        os.chdir(old)
    return Result(code, out.getvalue(), err.getvalue())


def check_json(*paths, args=(), cwd=None) -> Result:
    """``trimtab check --format json PATHS...``; cwd defaults to the folder of the first path."""
    if cwd is None:
        first = Path(paths[0]) if paths else Path.cwd()
        cwd = first if first.is_dir() else first.parent
    return run_cli("check", "--format", "json", *args, *[str(p) for p in paths], cwd=cwd)


@pytest.fixture
def run():
    return run_cli


@pytest.fixture
def check():
    return check_json


# Property tests (hypothesis): one settings profile for every property, selected here. In CI (CI=true)
# the examples are derived from each test's name (derandomize: the same examples on every run, so a
# failure is reproducible and nothing flakes) and each example has a deadline, generous against a slow
# shared machine but short of a hang. Locally the examples are random (more coverage over many runs)
# under the same deadline. A property that once caught a bug by chance keeps that case as an
# @example beside it. Set HYPOTHESIS_PROFILE to choose a profile by hand.
def _hypothesis_profiles() -> None:
    from datetime import timedelta

    from hypothesis import settings

    deadline = timedelta(seconds=20)
    settings.register_profile("ci", derandomize=True, deadline=deadline, print_blob=True)
    settings.register_profile("dev", deadline=deadline)
    ci = os.environ.get("CI", "").lower() in ("true", "1")
    settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE") or ("ci" if ci else "dev"))


_hypothesis_profiles()


# Figures a test measures (counts, timings) for the terminal summary: ``MEASURED.append(text)``.
MEASURED: list[str] = []


def pytest_terminal_summary(terminalreporter):
    if MEASURED:
        terminalreporter.section("trimtab measurements")
        for line in MEASURED:
            terminalreporter.write_line(line)


class TimeBoundExceeded(BaseException):
    """Raised by ``bounded`` when the time is up. Not an OSError (as TimeoutError is) nor even an
    Exception: the code under test catches those, and a blocked ``open`` of a named pipe
    interrupted by the alarm would be taken for an unreadable file and the hang go unseen."""


@contextmanager
def bounded(seconds: int, what: str = "the check"):
    """A hard time bound: a hang fails the test instead of stalling the suite."""
    def expire(_sig, _frame):
        raise TimeBoundExceeded(f"{what} took longer than {seconds} s")

    old = signal.signal(signal.SIGALRM, expire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


# --- the fixture harness ---------------------------------------------------------------------------
# Every rule has a good and a bad fixture under fixtures/rules/<ID>/ (files, or folders, whose names
# start with "good" or "bad"). A bad fixture states what it expects in comment lines, written after
# its content so that no line moves:
#
#     # expect: BAT-3 12:5 error             a finding of BAT-3 at line 12, column 5, at level error
#     # expect: OPT-4 bad-b.yaml:19:8 warning   ... in another file (relative to the fixture's folder)
#     # expect: YML-6 error                    ... about the file as a whole (line and column 0)
#     # expect: CMP-6 --set:0:0 error          ... about a value given on the command line
#     # with: --accepted bad.accepted.json     arguments of the check (other files checked with it)
#
# A fixture that cannot hold a comment (JSON, a link, a parse error at the end of the text, which a
# line after it would move) has the same lines in ``<name>.expect`` beside it. The findings of every rule named in the expectations, and of the fixture's own rule, must be
# exactly those expected; a good fixture's own rule must be silent.
import re as _re
import shutil as _shutil

RULE_FIXTURES = FIXTURES / "rules"
_EXPECT = _re.compile(r"^#\s*expect:\s*(?P<rule>[A-Z]+-\d+)(?:\s+(?:(?P<path>\S+?):)?(?P<line>\d+):(?P<col>\d+))?"
                      r"(?:\s+(?P<level>error|warning|note))?\s*$")
_WITH = _re.compile(r"^#\s*with:\s*(?P<args>.*?)\s*$")
_CONFIG_SUFFIXES = (".yaml", ".yml", ".json")


def fixture_rule(path: Path) -> str:
    return path.relative_to(RULE_FIXTURES).parts[0]


def _kind(path: Path) -> str:
    parts = path.relative_to(RULE_FIXTURES).parts[1:]
    for part in parts:
        for kind in ("good", "bad"):
            if part.startswith(kind):
                return kind
    return ""


def _directives(path: Path) -> list[str]:
    sidecar = path.with_name(path.name + ".expect")
    if sidecar.is_file():
        return sidecar.read_text(encoding="utf-8").splitlines()
    if path.is_symlink() or not path.is_file():
        return []
    return [ln.strip() for ln in path.read_bytes().decode("utf-8", "replace").splitlines()
            if ln.lstrip().startswith("#")]


def expectations(path: Path) -> tuple[list[tuple], list[str]]:
    """((rule, path relative to the fixture's folder, line, col, level or None) ..., extra arguments)."""
    expected, args = [], []
    for line in _directives(path):
        m = _EXPECT.match(line)
        if m:
            expected.append((m["rule"], m["path"] or path.name, int(m["line"] or 0), int(m["col"] or 0),
                             m["level"]))
            continue
        m = _WITH.match(line)
        if m:
            args.extend(m["args"].split())
    return expected, args


def rule_fixtures() -> list[tuple[str, Path]]:
    """(good or bad, path) of every fixture config; a bad fixture's companions (named in its
    ``# with:`` line) are checked with it, not on their own."""
    found = []
    for p in sorted(RULE_FIXTURES.rglob("*")):
        if p.suffix in _CONFIG_SUFFIXES and (p.is_file() or p.is_symlink()) and _kind(p):
            found.append((_kind(p), p))
    companions = set()
    for _k, p in found:
        companions |= {(p.parent / a).resolve() for a in expectations(p)[1] if not a.startswith("-")}
    return [(k, p) for k, p in found if p.resolve() not in companions]


def run_fixture(path: Path, tmp: Path) -> tuple[Result, Path, list[tuple]]:
    """Check a fixture in a copy of its rule's folder (a repository of its own, so that paths and
    fingerprints do not depend on where the tests run). Returns (result, folder of the fixture in
    the copy, findings as (rule, path relative to that folder, line, col, level))."""
    import os

    rule = fixture_rule(path)
    copy = tmp / rule
    if not copy.exists():
        _shutil.copytree(RULE_FIXTURES / rule, copy, symlinks=True)
        (copy / ".git").mkdir()
    here = copy / path.parent.relative_to(RULE_FIXTURES / rule)
    _expected, args = expectations(path)
    res = run_cli("check", "--format", "json", *args, path.name, cwd=here)
    assert res.code in (0, 1), res.out + res.err
    root = next((d for d in (here, *here.parents) if (d / "trimtab.toml").is_file() or (d / ".git").is_dir()), here)
    found = []
    for f in res.findings:
        loc = f["location"]
        shown = loc["path"]
        if shown is None:
            rel = "--set"  # a value given on the command line
        else:
            where = Path(shown) if Path(shown).is_absolute() else root / shown
            rel = os.path.relpath(where, here)
        found.append((f["rule"], rel.replace(os.sep, "/"), loc["line"], loc["col"], f["level"]))
    return res, here, found


# --- rule tests: one fixture, its findings ----------------------------------------------------------
ARITH = ("BAT", "SMP", "LEN")  # the run-arithmetic areas
OPTIM = ("KL", "CLP", "ALG", "OPT")  # the optimisation-settings areas
# Areas a good fixture must also keep quiet: a published value written so that YAML 1.1 and 1.2
# disagree would make YML-3 fire, a misspelt key or value VOC-*.
HYGIENE = ("YML", "VOC", "ACC", "TOOL")


def fx(rule_id: str, name: str) -> Path:
    """A fixture of one rule."""
    return RULE_FIXTURES / rule_id / name


def check_fixtures(rule_id: str, *names: str, args=()) -> Result:
    """Check fixtures of one rule together (from the repository root); no rule may crash."""
    r = check_json(*[fx(rule_id, n) for n in names], args=args, cwd=REPO)
    assert r.code in (0, 1), r.err
    assert not r.of("TOOL-1"), r.of("TOOL-1")
    return r


def places(result: Result, rule_id: str) -> list[tuple]:
    """(file name, line, column, level) of each finding of one rule, in report order."""
    return [(Path(f["location"]["path"]).name, f["location"]["line"], f["location"]["col"], f["level"])
            for f in result.of(rule_id)]


def noisy(result: Result, areas=OPTIM + HYGIENE) -> list[dict]:
    """The findings of these areas (by default the optimisation areas and the hygiene ones)."""
    return [f for f in result.findings if f["rule"].split("-")[0] in areas]


def arith(findings) -> list[dict]:
    """The findings of the run-arithmetic areas."""
    return [f for f in findings if f["rule"].split("-")[0] in ARITH]


def expect_one(rel: str, rule: str, level: str, line: int, col: int, *texts: str, suggestion: str = ""):
    """Check one fixture: exactly one finding of ``rule``, at line and column, with the numbers."""
    res = check_json(RULE_FIXTURES / rel)
    found = res.of(rule)
    assert len(found) == 1, [f["message"] for f in res.findings]
    f = found[0]
    assert (f["level"], f["location"]["line"], f["location"]["col"]) == (level, line, col), f
    for t in texts:
        assert t in f["message"], (t, f["message"])
    if suggestion:
        assert suggestion in f["suggestion"], (suggestion, f["suggestion"])
    return f


def expect_clean(rel: str) -> Result:
    """A fixture on which the run-arithmetic areas are silent."""
    res = check_json(RULE_FIXTURES / rel, args=("--only", ",".join(ARITH)))
    assert res.code == 0, res.out + res.err
    assert arith(res.findings) == []
    return res
