"""Bounded time and memory on hostile input (issue 14, part C; issue 21, the cycle through sections).

Each test is an attack a repository can make on the person or the CI job that checks it. Each
asserts the safe outcome — a finding where one is due, no traceback, no internal error — under a
hard time bound of the test harness (support.bounded) against hangs. Speed targets live in
tests/perf/bench.py, not here: the bounds below are generous and only stop a hang."""
from __future__ import annotations

from pathlib import Path

import pytest

from support import FIXTURES, bounded, run_cli

RULES = FIXTURES / "rules"


@pytest.fixture
def repo(tmp_path):
    (tmp_path / ".git").mkdir()  # tmp_path is the repository root
    return tmp_path


def check(path: Path, *args, cwd: Path | None = None, seconds: int = 60):
    with bounded(seconds, f"checking {path.name}"):
        r = run_cli("check", "--format", "json", *args, str(path), cwd=cwd or path.parent)
    assert "Traceback" not in r.err, r.err
    assert not [f for f in r.findings if f["rule"].startswith("TOOL")], r.out
    return r


def where(f) -> tuple:
    return f["location"]["path"], f["location"]["line"], f["location"]["col"]


# --- references: expansion and cycles (compose) -----------------------------------------------------
def test_cmp_11_bad_and_good():
    bad = check(RULES / "CMP-11" / "bad.yaml", "--only", "CMP", cwd=RULES / "CMP-11")
    [f] = bad.of("CMP-11")
    assert where(f) == ("fixtures/rules/CMP-11/bad.yaml", 14, 7), f
    assert f["message"].startswith("names.r7: references expand to more than 1000000 characters"), f
    good = check(RULES / "CMP-11" / "good.yaml", "--only", "CMP", cwd=RULES / "CMP-11")
    assert not good.findings, good.out


def test_text_references_that_double_at_each_level_stop_at_the_limit(repo):
    # 40 levels would be 4 * 2**40 characters (the issue: 1 GB at 27 levels, a MemoryError at 40)
    lines = [f"l{i}: ${{l{i + 1}}}${{l{i + 1}}}" for i in range(40)] + ["l40: wren"]
    (repo / "run.yaml").write_text("\n".join(lines) + "\n")
    r = check(repo / "run.yaml", "--only", "CMP", cwd=repo)
    [f] = r.of("CMP-11")  # once, where the limit was passed; the references above it stay unresolved
    assert where(f)[:2] == ("run.yaml", 24) and f["message"].startswith("l23: references expand"), f


def test_sections_that_double_at_each_level_stop_at_the_limit(repo):
    # each section holds two copies of the next: 2**40 values once expanded
    lines = [f"l{i}:\n  x: ${{l{i + 1}}}\n  y: ${{l{i + 1}}}" for i in range(40)] + ["l40: {v: 1}"]
    (repo / "run.yaml").write_text("\n".join(lines) + "\n")
    r = check(repo / "run.yaml", "--only", "CMP", cwd=repo)
    [f] = r.of("CMP-11")
    assert "copy more than 10000 keys and items" in f["message"], f
    assert "${" in (repo / "run.yaml").read_text().splitlines()[f["location"]["line"] - 1], f


def test_a_long_chain_of_references_is_a_finding_not_a_recursion_error(repo):
    lines = [f"l{i}: ${{l{i + 1}}}" for i in range(3000)] + ["l3000: 1"]
    (repo / "run.yaml").write_text("\n".join(lines) + "\n")
    r = check(repo / "run.yaml", "--only", "CMP", cwd=repo)
    [f] = r.of("CMP-11")
    assert "references lead through more than 64 other references" in f["message"], f


# issue 21: a case a property test of composition drew (it hung about one run in eight)
MUTUAL_SECTIONS = """\
a:
  c: ${rollout}
  a: ${rollout}
rollout:
  b: ${a}
b:
  b: ${a}
"""


def test_sections_that_refer_to_each_other_are_a_cycle(repo):
    (repo / "run.yaml").write_text(MUTUAL_SECTIONS)
    r = check(repo / "run.yaml", "--only", "CMP", cwd=repo, seconds=30)
    cycles = r.of("CMP-1")
    through = [f for f in cycles if "cycle through sections" in f["message"]]
    # b.b brings in a, whose c brings in rollout, whose b brings in a again: reported at rollout.b
    assert [(where(f), f["message"].split(" (")[0]) for f in through] == [
        (("run.yaml", 5, 6), "interpolation cycle through sections: a -> rollout -> a")], r.out
    assert not r.of("CMP-11"), r.out


# --- the answer-format pattern: compiled and tried within a CPU-time budget (REW-9, REW-11) --------
def _with_pattern(repo: Path, pattern: str) -> Path:
    text = (RULES / "REW-11" / "bad.yaml").read_text().replace("format_pattern: '^(.+)+!$'", "format_pattern: PATTERN")
    path = repo / "run.yaml"
    path.write_text(text.replace("PATTERN", "'" + pattern.replace("'", "''") + "'"))
    return path


def test_rew_11_bad_and_good():
    bad = check(RULES / "REW-11" / "bad.yaml", "--only", "REW", cwd=RULES / "REW-11")
    [f] = bad.of("REW-11")
    assert where(f) == ("fixtures/rules/REW-11/bad.yaml", 18, 17), f
    assert f["message"].startswith("reward.format_pattern: matching a 82-character answer built from the "
                                   "template takes more than 1 s of CPU time"), f
    assert not bad.of("REW-10"), bad.out  # not tested to the end: no claim that it rejects the answer
    good = check(RULES / "REW-11" / "good.yaml", "--only", "REW", cwd=RULES / "REW-11")
    assert not good.findings, good.out


@pytest.mark.parametrize("pattern", [r"(.+)+!", r"(\s*\S+\s*)+!", r"(?s)(.*?,?)*!"])
def test_backtracking_patterns_stop_at_the_budget(repo, pattern):
    r = check(_with_pattern(repo, pattern), "--only", "REW", cwd=repo, seconds=30)
    [f] = r.of("REW-11")
    assert "takes more than 1 s of CPU time" in f["message"], f


@pytest.mark.parametrize("pattern, why", [
    ("(" * 5000 + ")" * 5000, "nests too deeply"),
    ("a{4294967296}", "the repetition number is too large"),
    ("(?:" * 300 + "a" + ")" * 300 + "{99999999999999999999}", "too large"),
])
def test_patterns_that_crash_the_compiler_are_rew_9(repo, pattern, why):
    r = check(_with_pattern(repo, pattern), "--only", "REW", cwd=repo, seconds=30)
    [f] = r.of("REW-9")
    assert f["message"].startswith("reward.format_pattern does not compile") and why in f["message"], f


def test_a_pattern_too_costly_to_compile_in_the_budget_is_rew_11():
    # an alternation of 100,000 words costs seconds of CPU time to compile (Python's re); with the
    # budget at a twentieth of a second, compiling is what runs out. Run in a fresh interpreter:
    # in the whole suite's process this compile once finished inside the budget (not understood yet).
    import subprocess
    import sys

    code = ("from trimtab_rules import reward\n"
            "reward.PATTERN_BUDGET_S = 0.05\n"
            "t = reward.trial('|'.join(f'w{i}' for i in range(100_000)), ('<answer>42</answer>',))\n"
            "print(t.over, t.costly, bool(t.invalid), t.matched)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.stdout.split() == ["True", "0", "False", "None"], (out.stdout, out.stderr[-2000:])


def test_the_budget_interrupts_a_match_and_restores_the_signal_handler():
    import re
    import signal
    import threading

    from trimtab.common import budget

    before = signal.getsignal(signal.SIGPROF)
    with bounded(30, "a budgeted match"):
        with pytest.raises(budget.OverBudget):
            with budget.cpu_budget(0.2):
                re.search(r"(.+)+!", "a" * 40)
    assert signal.getsignal(signal.SIGPROF) is before
    assert signal.getitimer(signal.ITIMER_PROF) == (0.0, 0.0)
    assert _budget_from_a_thread(threading.Thread.start) == ["refused"]  # never run unbounded


def _budget_from_a_thread(start) -> list[str]:
    """What a CPU budget asked for in another thread did (``start`` starts that thread)."""
    import threading

    from trimtab.common import budget

    seen: list[str] = []

    def elsewhere():
        try:
            with budget.cpu_budget(0.2):
                seen.append("ran")
        except budget.NoBudget:
            seen.append("refused")

    t = threading.Thread(target=elsewhere)
    start(t)
    t.join()
    return seen


def test_the_budget_refuses_a_thread_it_was_not_told_of(monkeypatch):
    """A thread started while ``threading`` is not imported (the budget then takes this for the
    main thread) is refused where the signal handler is set: never run unbounded."""
    import signal
    import sys


    before = signal.getsignal(signal.SIGPROF)

    def start_unseen(t):
        monkeypatch.delitem(sys.modules, "threading")
        t.start()

    assert _budget_from_a_thread(start_unseen) == ["refused"]
    assert signal.getsignal(signal.SIGPROF) is before and signal.getitimer(signal.ITIMER_PROF) == (0.0, 0.0)


# --- integers of thousands of digits ---------------------------------------------------------------
HUGE = {
    "group_size: 8": "group_size: 0b" + "1" * 20_000,  # binary: 20,000 digits
    "kl_coef: 0.001": "kl_coef: 0x" + "f" * 6_000,  # hexadecimal: 6,000 digits
    "temperature: 1.0": "temperature: " + "9" * 5_000,  # decimal: past Python's 4300-digit printing limit
}


def test_integers_of_thousands_of_digits_are_a_finding_and_the_other_files_are_checked(repo):
    base = (RULES / "REW-10" / "bad.yaml").read_text()
    for i, (old, new) in enumerate(HUGE.items()):
        assert old in base
        (repo / f"huge{i}.yaml").write_text(base.replace(old, new))
    (repo / "plain.yaml").write_text(base)
    alone = check(repo / "plain.yaml", cwd=repo)
    for fmt in ("json", "sarif", "text"):
        with bounded(120, f"the {fmt} report"):
            r = run_cli("check", "--format", fmt, ".", cwd=repo)
        assert "Traceback" not in r.err and r.code == 1, (fmt, r.err)
        if fmt == "sarif":
            import json

            assert not [x for x in json.loads(r.out)["runs"][0]["results"] if x["ruleId"].startswith("TOOL")]
        else:
            assert "TOOL-1" not in r.out, r.out
    r = check(repo, cwd=repo)
    line_of = {text.strip(): n for n, text in enumerate(base.splitlines(), 1)}
    got = {(f["location"]["path"], f["location"]["line"]) for f in r.of("YML-5")}
    assert got == {(f"huge{i}.yaml", line_of[old]) for i, old in enumerate(HUGE)}, r.out
    assert all("past trimtab's limit (10^30)" in f["message"] for f in r.of("YML-5"))
    assert not r.of("VOC-2"), r.out  # reported once, as the limit
    # the plain file gets exactly the findings it gets when checked alone
    assert [f for f in r.findings if f["location"]["path"] == "plain.yaml"] == alone.findings


@pytest.mark.parametrize("text, value", [
    ("1" * 30, int("1" * 30)),  # just below 10^30: still a number
    ("0x" + "f" * 24, 16 ** 24 - 1),
    ("1:30:00", 5400),  # YAML 1.1 base 60
    ("0" * 500 + "7", 7),  # leading zeros do not count (YAML 1.1 octal, YAML 1.2 decimal)
])
def test_integers_below_the_limit_keep_their_value(text, value):
    from trimtab.common import scalars

    assert scalars.type11(text) == value and not scalars.oversized(text)


@pytest.mark.parametrize("text", ["1" + "0" * 30, "0x" + "f" * 26, "-" + "9" * 40, "1" + ":00" * 5000])
def test_integers_past_the_limit_stay_text_without_converting(text):
    from trimtab.common import scalars

    with bounded(10, "typing a long integer"):
        assert scalars.typed(text, True, None, "1.1") == text and scalars.oversized(text)


def test_integer_texts_of_every_reader_open_with_a_sign_or_a_digit():
    """The loader tells a long plain scalar that cannot be an integer by its first character
    (scalars.oversized): every text PyYAML's YAML 1.1 reader reads as an integer, and every integer
    form of the YAML 1.2 core schema (YAML 1.2.2, section 10.3.2), opens with a sign or a digit."""
    yaml = pytest.importorskip("yaml")
    from trimtab.common import scalars

    heads = ["", "+", "-", "0", "7", "0x", "0o", "0b", "_", ":", "a", "x", "o", ".", "~"]
    bodies = ["1", "10", "7_7", "ff", "1:30", "0", "12345678901234567890123456789", "e5", ".5"]
    for head in heads:
        for body in bodies:
            for text in (head + body, head + body * 3):
                read11 = yaml.safe_load(text)  # a plain scalar, as a one-line document
                if type(read11) is int or scalars.type12(text).__class__ is int:
                    assert text[0] in "+-0123456789", text
                if text and text[0] not in "+-0123456789":
                    assert not scalars.oversized(text + "9" * 30), text


# --- linear scanners ---------------------------------------------------------------------------------
@pytest.mark.parametrize("comment", [
    "# trimtab: accept KL-1 -- a" + " " * 40_000 + "x",  # a reason with a long blank run inside
    "# trimtab: accept KL-1" + " " * 40_000 + "x",  # ids, a long blank run, a word without "--": malformed
])
def test_a_long_acceptance_comment_is_parsed_in_linear_time(comment):
    from trimtab.gate import filtering

    with bounded(10, "parsing one acceptance comment"):  # 27 s before, on 40,000 characters
        [a] = filtering.acceptances("kl_coef: 0.0  " + comment + "\n")
    if "-- a" in comment:
        assert a.ids == ("KL-1",) and a.reason == "a" + " " * 40_000 + "x"
    else:
        assert a.ids == () and not a.reason  # reported as malformed (ACC-4), as before


def test_an_acceptance_comment_reads_as_before():
    from trimtab.gate import filtering

    [a, b, c, d] = filtering.acceptances(
        "a: 1  # trimtab: accept KL-1, clp-2 -- the recipe -- as published\n"
        "b: 2  # trimtab: accept KL-1\n"
        "c: 3  # trimtab: accept KL-1 because\n"
        "d: 4  # trimtab: accept KL-1--terse\n")
    assert (a.ids, a.reason) == (("KL-1", "CLP-2"), "the recipe -- as published")
    assert (b.ids, b.reason) == (("KL-1",), "")
    assert c.ids == ()  # malformed: words after the ids without "--"
    assert (d.ids, d.reason) == (("KL-1",), "terse")


def test_a_long_value_full_of_references_is_scanned_in_linear_time():
    # SEC-1's environment-reference test: "${" with no "}" after it, 200,000 times (the pattern
    # \$\{[^}]*\}, tried at every "${", took seconds on 40,000 characters)
    from trimtab.common import redact

    with bounded(10, "one environment-reference test"):
        assert redact.literal("${" * 100_000)  # no reference: a literal
        assert not redact.literal("${" * 100_000 + "}")  # a reference
        assert not redact.literal("token-${HUB_TOKEN}-suffix") and redact.literal("${HUB_TOKEN")


# --- bases that name the same base twice at every level ------------------------------------------------
def test_bases_named_twice_per_level_are_read_once_each(repo):
    (repo / "trimtab.toml").write_text('bases_key = "bases"\n')
    run = (RULES / "REW-10" / "good.yaml").read_text()
    (repo / "run.yaml").write_text(run + "bases: [b0.yaml, b0.yaml]\n")
    for i in range(30):  # 2**30 paths through the bases
        (repo / f"b{i}.yaml").write_text(f"bases: [b{i + 1}.yaml, b{i + 1}.yaml]\nx{i}: 1\n")
    (repo / "b30.yaml").write_text("seed: 7\n")
    r = check(repo / "run.yaml", cwd=repo, seconds=60)
    assert not r.of("OPT-5"), r.out  # the seed of the deepest base reached the run
    assert not [f for f in r.findings if f["rule"].startswith("CMP")], r.out


def test_a_base_named_again_later_applies_at_its_last_place(repo):
    # bases apply in order, later wins: [low, high, low] is high then low
    (repo / "trimtab.toml").write_text('bases_key = "bases"\n')
    (repo / "low.yaml").write_text("optim:\n  lr: 1.0e-6\n")
    (repo / "high.yaml").write_text("optim:\n  lr: 1.0e-5\n  warmup_steps: 10\n")
    (repo / "run.yaml").write_text((RULES / "REW-10" / "good.yaml").read_text()
                                   + "bases: [low.yaml, high.yaml, low.yaml]\n")
    from trimtab.engine.registry import Registry
    from trimtab.report.explain import models
    from trimtab.common.settings import load as load_settings

    settings = load_settings(start=repo)
    (m,), _ = models(str(repo / "run.yaml"), settings, Registry(), [])
    assert m.value("optim.lr") == 1.0e-6 and m.value("optim.warmup_steps") == 10


# --- hostile reward modules ---------------------------------------------------------------------------
@pytest.mark.parametrize("body", [
    "x = a" + ".b" * 200_000 + "\n",  # 200,000 chained attributes
    "x = " + "+".join(["1"] * 300_000) + "\n",  # a sum of 300,000 terms
])
def test_a_hostile_reward_module_is_a_finding_and_the_check_goes_on(repo, body):
    (repo / "rewards.py").write_text(body + "\n\ndef reward(completion, answer):\n    return 1.0\n")
    text = (RULES / "REW-10" / "good.yaml").read_text()
    assert "ref: tidepool_exact_match" in text
    (repo / "run.yaml").write_text(text.replace("ref: tidepool_exact_match", "ref: rewards:reward"))
    (repo / "other.yaml").write_text((RULES / "REW-10" / "bad.yaml").read_text())
    r = check(repo, cwd=repo, seconds=120)
    [f] = [f for f in r.of("REW-1") if f["location"]["path"] == "run.yaml"]
    assert "nests too deeply for Python's parser" in f["message"], f
    assert r.of("REW-10") and r.of("REW-10")[0]["location"]["path"] == "other.yaml", r.out


def test_a_long_attribute_chain_that_parses_is_scanned(repo):
    # deep enough to pass Python's recursion limit in a recursive walk, shallow enough to parse
    (repo / "rewards.py").write_text("import os\n\ndef reward(completion, answer):\n    x = os" + ".path" * 2500
                                     + "(completion)\n    os.system(completion)\n    return 1.0\n")
    text = (RULES / "REW-10" / "good.yaml").read_text()
    (repo / "run.yaml").write_text(text.replace("ref: tidepool_exact_match", "ref: rewards:reward"))
    r = check(repo / "run.yaml", cwd=repo, seconds=60)
    assert not r.of("REW-1"), r.out
    [f] = r.of("EXE-1")  # the scan went through: the call after the chain is seen
    assert "calls os.system at rewards.py:5" in f["message"], f


# --- the deepest nesting the settings accept ------------------------------------------------------------
def test_max_depth_at_the_schemas_maximum_works_in_every_command(repo):
    import json

    from support import REPO

    schema = json.loads((REPO / "linter" / "common" / "settings.schema.json").read_text())
    deepest = schema["properties"]["limits"]["properties"]["max_depth"]["maximum"]
    (repo / "trimtab.toml").write_text(f'bases_key = "bases"\n[limits]\nmax_depth = {deepest}\n')
    (repo / "base.yaml").write_text("seed: 7\n")
    nested = "".join("  " * i + f"k{i}:\n" for i in range(deepest - 1)) + "  " * (deepest - 1) + "leaf: ${run.estimator}\n"
    (repo / "run.yaml").write_text((RULES / "REW-10" / "good.yaml").read_text() + "bases: [base.yaml]\n" + nested)
    r = check(repo / "run.yaml", cwd=repo, seconds=120)
    assert not r.of("YML-5"), r.out  # exactly at the limit: read, composed and checked
    for args in (("explain", "run.yaml"), ("audit", "--html", str(repo / "audit.html"), "run.yaml")):
        with bounded(120, args[0]):
            out = run_cli(*args, cwd=repo)
        assert "Traceback" not in out.err and "RecursionError" not in out.out + out.err, (args, out.err[-2000:])


# --- OPT-4 over many runs that share one folder -----------------------------------------------------------
def test_opt_4_is_linear_when_many_runs_share_one_folder():
    """20,000 runs, each writing the same checkpoint folder at a line of its own: one finding per
    run, each listing ten others and the count of the rest (quadratic before: each finding
    built the list of all the others)."""
    from trimtab.gate.runner import SetEntry
    from trimtab.common.findings import Location
    from trimtab.resolve.model import Value
    from trimtab_rules import opt

    n = 20_000
    runs = [SetEntry(f"runs/r{i}.yaml", 0, {"checkpoint.dir": Value(
        "checkpoint.dir", "/ckpt/shared", Location(f"runs/r{i}.yaml", 19, 8))}) for i in range(n)]

    class Ctx:
        def finding(self, message, location, related=(), subject=None, **_kw):
            return message, location, list(related)

    ctx = Ctx()
    ctx.runs = runs
    with bounded(60, "OPT-4 over 20,000 runs"):
        found = list(opt.shared_dir.check(ctx))
    assert len(found) == n
    message, location, related = found[0]
    assert location.path == "runs/r0.yaml" and len(related) == 10
    assert message.endswith(f"and {n - 1 - 10} more; the runs overwrite each other's checkpoints and outputs"), message


# --- heavy files inside the old default limits -------------------------------------------------------------
@pytest.mark.parametrize("shape", ["flow list", "million keys"])
def test_heavy_files_past_the_default_size_are_refused_at_once(repo, shape):
    # 9 MB of one-digit flow items (44 s and 1.9 GB before), a million short keys (53 s and 1.2 GB)
    if shape == "flow list":
        text = "data: [" + ", ".join(["1"] * 3_000_000) + "]\n"
    else:
        text = "".join(f"k{i:x}: 1\n" for i in range(1_000_000))
    assert 4 * 2**20 < len(text) < 10 * 2**20  # inside the old default limit, past the new one
    (repo / "run.yaml").write_text(text)
    r = check(repo / "run.yaml", cwd=repo, seconds=30)
    [f] = r.of("YML-5")
    assert "larger than the size limit of 4194304 bytes" in f["message"], f


def test_the_template_samples_memo_keeps_neither_long_texts_nor_more_than_its_count():
    """The sample answers of a template are kept across runs (rules/reward.py, _samples), within
    bounds: a template longer than the memo's text limit is worked out each time and not kept, and
    the memo never holds more than 256 templates, whatever the repository holds."""
    from types import SimpleNamespace

    from trimtab_rules import reward

    def ctx(text):
        value = SimpleNamespace(value=text)
        return SimpleNamespace(model=SimpleNamespace(get=lambda c: value if c == "template.text" else None))

    reward._SAMPLES.clear()
    long = "<answer>" + "x" * (reward._SAMPLES_TEXT + 1) + "</answer>"
    assert reward._samples(ctx(long)) == tuple(reward.sample_answers(long))
    assert long not in reward._SAMPLES
    for i in range(600):
        text = f"<think>{i}</think><answer>{i}</answer>"
        assert reward._samples(ctx(text)) == tuple(reward.sample_answers(text))
        assert len(reward._SAMPLES) <= 256
