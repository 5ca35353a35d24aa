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
# folder (linter/context.py): the suite's repositories without git use a folder of its own.
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


@contextmanager
def bounded(seconds: int, what: str = "the check"):
    """A hard time bound: a hang fails the test instead of stalling the suite."""
    def expire(_sig, _frame):
        raise TimeoutError(f"{what} took longer than {seconds} s")

    old = signal.signal(signal.SIGALRM, expire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
