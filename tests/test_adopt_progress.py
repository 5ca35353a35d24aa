"""Progress on long audits: a bar on standard error when it is a terminal (files done, findings so
far, elapsed), none otherwise or under pre-commit; a summary line at the end."""
from __future__ import annotations

import io
import os
import re
from contextlib import redirect_stderr, redirect_stdout
from types import SimpleNamespace

from trimtab.cli import main
from trimtab.report.progress import Progress

RUN = "run:\n  estimator: grpo\nrollout:\n  group_size: 8\n  temperature: 0.9\n"


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_bar_counts_files_findings_and_time():
    out = FakeTerminal()
    p = Progress(4, out, width=8)
    for n in range(4):
        p(SimpleNamespace(findings=[1] * n))  # 0 + 1 + 2 + 3 findings
    text = out.getvalue()
    last = text.rsplit("\r", 1)[-1]
    assert re.fullmatch(r"\[########\] 4/4 files, 6 findings, \d+\.\ds", last), last
    p.close()
    assert out.getvalue().endswith("\r\033[K")  # the bar is wiped before the report


def make_repo(tmp_path, runs: int, others: int):
    (tmp_path / ".git").mkdir()
    for i in range(runs):
        text = RUN if i else RUN + "  temperature: 1.0\n"  # one YML-2 warning in the first file
        (tmp_path / f"run-{i:02d}.yaml").write_text(text, encoding="utf-8")
    for i in range(others):
        (tmp_path / f"data-{i:02d}.yaml").write_text(f"shard: {i}\n", encoding="utf-8")


def run_with(stderr, tmp_path, *args):
    old = os.getcwd()
    os.chdir(tmp_path)
    try:
        with redirect_stdout(io.StringIO()), redirect_stderr(stderr):
            return main(["check", *args, "--skip", "KL,CLP,ALG,OPT"])  # (areas about unstated values)
    finally:
        os.chdir(old)


def test_bar_on_a_terminal_only(tmp_path, monkeypatch):
    monkeypatch.delenv("PRE_COMMIT", raising=False)
    make_repo(tmp_path, runs=22, others=3)
    tty = FakeTerminal()
    assert run_with(tty, tmp_path) == 1
    assert "25/25 files, 1 findings" in tty.getvalue()

    pipe = io.StringIO()  # not a terminal
    run_with(pipe, tmp_path)
    assert "files, " not in pipe.getvalue() and "\r" not in pipe.getvalue()

    tty = FakeTerminal()  # asked not to
    run_with(tty, tmp_path, "--no-progress")
    assert "\r" not in tty.getvalue()

    monkeypatch.setenv("PRE_COMMIT", "1")  # the pre-commit framework sets it for its hooks
    tty = FakeTerminal()
    run_with(tty, tmp_path)
    assert "\r" not in tty.getvalue()


def test_summary_line(tmp_path, monkeypatch):
    monkeypatch.delenv("PRE_COMMIT", raising=False)
    make_repo(tmp_path, runs=2, others=3)
    err = io.StringIO()
    assert run_with(err, tmp_path) == 1
    assert err.getvalue().strip().splitlines()[-1] == (
        "trimtab: 2 checked, 3 skipped as not run configs, of 5 file(s); 0 error(s), 1 warning(s), 0 note(s)")
