"""EXE rules: code-executing rewards and their sandbox, and the static scan that finds them."""
from __future__ import annotations

import os
import shutil

import pytest

from support import FIXTURES, check_json

R = FIXTURES / "rules"
CAUTION_WORDS = ("isolated", "credentials", "network", "wall-clock time, memory", "processes",
                 "security policy and local rules")


def at(result, rule_id):
    return sorted((f["location"]["line"], f["location"]["col"]) for f in result.of(rule_id))


def test_exe1_bad_points_at_config_and_at_the_calls():
    res = check_json(R / "EXE-1" / "bad" / "run.yaml", cwd=R / "EXE-1" / "bad")
    assert at(res, "EXE-1") == [(15, 10)]  # the ref of the unit-test reward; the answer check is clean
    f = res.of("EXE-1")[0]
    assert f["level"] == "error" and f["cwe"] == 653  # CWE-653: see the rationale
    related = {(r["path"], r["line"], r["col"]) for r in f["related"]}
    # exec(...) in the referenced module, subprocess.run(...) in the local module it imports
    assert ("rewards/tidepool_exec.py", 11, 5) in related
    assert ("rewards/_runner.py", 7, 12) in related
    for word in CAUTION_WORDS:
        assert word in f["help"]


def test_exe1_good_is_silent_for_every_exe_rule():
    res = check_json(R / "EXE-1" / "good" / "run.yaml", args=("--only", "EXE"), cwd=R / "EXE-1" / "good")
    assert [f for f in res.findings if f["rule"].startswith("EXE")] == []
    assert res.code == 0, res.findings


def test_exe1_declared_code_reward_without_sandbox(tmp_path):
    text = (R / "EXE-2" / "good.yaml").read_text().split("sandbox:")[0]
    (tmp_path / "run.yaml").write_text(text + "sandbox:\n  kind: none\n")
    res = check_json(tmp_path / "run.yaml")
    assert at(res, "EXE-1") == [(11, 10)]
    assert "sandbox.kind is none" in res.of("EXE-1")[0]["message"]
    assert {r["line"] for r in res.of("EXE-1")[0]["related"]} == {10, 14}  # kind: code, kind: none


def test_import_depth_setting_limits_the_scan(tmp_path):
    repo = tmp_path / "repo"
    shutil.copytree(R / "EXE-1" / "bad", repo)
    (repo / "trimtab.toml").write_text('search_roots = ["."]\nimport_depth = 0\n')
    res = check_json(repo / "run.yaml", cwd=repo)
    paths = {r["path"] for r in res.of("EXE-1")[0]["related"]}
    assert paths == {"rewards/tidepool_exec.py"}  # the imported _runner.py is not read at depth 0


@pytest.mark.parametrize("rule_id, expected, level, cwe", [
    ("EXE-2", [(15, 12)], "warning", None),
    ("EXE-3", [(14, 9)], "error", 770),  # no timeout: reported at sandbox.kind
    ("EXE-4", [(16, 14)], "warning", 770),
    ("EXE-5", [(14, 9), (17, 14)], "warning", 770),  # memory not stated (at kind), processes: 0
    ("EXE-6", [(19, 15)], "warning", None),
    ("EXE-7", [(20, 9), (21, 15)], "error", 250),  # user: root, privileged: true
    ("EXE-8", [(14, 9)], "warning", None),
])
def test_sandbox_rules(rule_id, expected, level, cwe):
    bad = check_json(R / rule_id / "bad.yaml")
    assert at(bad, rule_id) == expected
    for f in bad.of(rule_id):
        assert f["level"] == level and f["cwe"] == cwe
        assert f["related"][0]["line"] == 11  # the code-executing reward
        for word in CAUTION_WORDS:
            assert word in f["help"]
    good = check_json(R / rule_id / "good.yaml")
    assert good.of(rule_id) == []


def test_exe4_threshold_is_an_option(tmp_path):
    shutil.copy(R / "EXE-4" / "bad.yaml", tmp_path / "run.yaml")
    (tmp_path / "trimtab.toml").write_text('[rules."EXE-4"]\nmax_timeout_s = 900.0\n')
    assert check_json(tmp_path / "run.yaml", cwd=tmp_path).of("EXE-4") == []


# --- the scanner ------------------------------------------------------------------------------------------
def _scan_source(tmp_path, source):
    from trimtab.engine.codescan import Reference, Scanner

    (tmp_path / "mod.py").write_text(source)
    sc = Scanner(tmp_path)
    loc = sc.locate(Reference("mod:f", module="mod", function="f"))
    assert loc.status == "ok", loc
    return sc.scan(loc).hits


def test_os_family_coverage_against_the_standard_library(tmp_path):
    """Every os function of this Python whose name starts with exec, spawn or posix_spawn is in the
    detector list, and the scanner reports a call to it (the standard library itself is the reference)."""
    from trimtab.engine.codescan import OS_RUNNERS

    family = sorted(n for n in dir(os) if n.startswith(("exec", "spawn", "posix_spawn")) and callable(getattr(os, n)))
    assert family, "this Python's os module has no exec/spawn functions?"
    assert "execv" in family  # POSIX and Windows both have it
    missing = [n for n in family if n not in OS_RUNNERS]
    assert missing == []
    source = "import os\n\ndef f(a):\n" + "".join(f"    os.{n}(a)\n" for n in family)
    hits = _scan_source(tmp_path, source)
    assert sorted(h.what for h in hits) == sorted(f"os.{n}" for n in family)
    assert [h.line for h in hits] == list(range(4, 4 + len(family)))


@pytest.mark.parametrize("source, what", [
    ("def f(c):\n    exec(c)\n", "exec"),
    ("def f(c):\n    return eval(c)\n", "eval"),
    ("def f(c):\n    code = compile(c, 'x', 'exec')\n", "compile"),
    ("import subprocess as sp\ndef f(c):\n    sp.check_output(c)\n", "subprocess.check_output"),
    ("from subprocess import Popen\ndef f(c):\n    Popen(c)\n", "subprocess.Popen"),
    ("from os import system\ndef f(c):\n    system(c)\n", "os.system"),
    ("import os\ndef f(c):\n    os.popen(c)\n", "os.popen"),
    ("import pty\ndef f(c):\n    pty.spawn(c)\n", "pty.spawn"),
    ("import ctypes\ndef f(c):\n    ctypes.CDLL(c)\n", "ctypes.CDLL"),
    ("import ctypes\ndef f(c):\n    ctypes.cdll.LoadLibrary(c)\n", "ctypes.cdll.LoadLibrary"),
    ("import multiprocessing\ndef f(c):\n    multiprocessing.Process(target=exec, args=(c,)).start()\n",
     "multiprocessing.Process"),
    ("import multiprocessing\ndef f(cs):\n    with multiprocessing.Pool(4) as p:\n        p.map(eval, cs)\n", "eval"),
    ("import threading\ndef f(c):\n    threading.Thread(target=exec, args=(c,)).start()\n", "exec"),
])
def test_detectors(tmp_path, source, what):
    hits = _scan_source(tmp_path, source)
    assert what in [h.what for h in hits if h.category == "exec"]


@pytest.mark.parametrize("source", [
    "import re\ndef f(c):\n    return re.compile(c)\n",  # a regular expression, not code
    "def f(c):\n    return c.count('x')\n",
    "import multiprocessing\ndef work(x):\n    return x * 2\ndef f(c):\n    multiprocessing.Process(target=work).start()\n",
    "def exec(c):\n    return c\ndef f(c):\n    return exec(c)\n",  # a local function named exec
])
def test_no_false_detection(tmp_path, source):
    assert [h for h in _scan_source(tmp_path, source) if h.category == "exec"] == []


def test_columns_are_characters_not_bytes(tmp_path):
    # ast gives col_offset in UTF-8 bytes (Python docs, ast module); findings count characters
    hits = _scan_source(tmp_path, "def f(c):\n    é = 1; exec(c)\n")
    assert [(h.line, h.col) for h in hits] == [(2, 12)]


def test_sandbox_written_inside_a_mapping_layout_component(tmp_path):
    (tmp_path / "run.yaml").write_text("""run:
  estimator: grpo
rollout:
  group_size: 8
kl_coef: 0.01
rewards:
  tests:
    kind: code
    ref: tidepool_tests
    revision: abc
    sandbox:
      kind: container
      network: true
      timeout_s: 10
      memory_mb: 512
      processes: 8
""")
    res = check_json(tmp_path / "run.yaml")
    assert res.of("EXE-1") == []
    assert at(res, "EXE-2") == [(13, 16)]
    # the component's own revision is a field of the component, not the policy's model.revision
    from trimtab.report.explain import models
    from trimtab.engine.registry import Registry
    from trimtab.common.settings import Settings

    (m,), _ = models(str(tmp_path / "run.yaml"), Settings(root=tmp_path), Registry())
    assert "model.revision" not in m.values and m.components[0].get("revision") == "abc"


def test_sandbox_per_component_in_a_list_layout(tmp_path):
    (tmp_path / "run.yaml").write_text("""run:
  estimator: grpo
rollout:
  group_size: 8
kl_coef: 0.01
rewards:
  - name: guarded_tests
    kind: code
    ref: tidepool_tests
    sandbox:
      kind: vm
      network: false
      timeout_s: 10
      memory_mb: 512
      processes: 8
  - name: bare_tests
    kind: code
    ref: tidepool_more_tests
""")
    res = check_json(tmp_path / "run.yaml")
    assert at(res, "EXE-1") == [(18, 10)]  # only the component without its own sandbox
    assert "bare_tests" in res.of("EXE-1")[0]["message"]
    assert [f for f in res.findings if f["rule"].startswith("EXE") and f["rule"] != "EXE-1"] == []


@pytest.mark.parametrize("n", [2, 3, 4])
def test_sandbox_findings_name_up_to_three_code_rewards(tmp_path, n):
    # Each sandbox finding points back at the code-executing rewards it concerns: all of them up to three,
    # then the first three (the list stays short however many rewards share the sandbox).
    rewards = "".join(f"  - name: tests_{i}\n    kind: code\n    ref: tidepool_unit_tests_{i}\n    weight: 1.0\n"
                      for i in range(n))
    (tmp_path / "run.yaml").write_text(
        "run:\n  estimator: grpo\n  seed: 17\nrollout:\n  group_size: 8\n  temperature: 1.0\nkl_coef: 0.001\n"
        f"rewards:\n{rewards}sandbox:\n  kind: container\n  network: false\n  memory_mb: 1024\n  processes: 16\n"
        "  filesystem: read-only\n  user: sandbox\n  privileged: false\n")
    (f,) = check_json(tmp_path / "run.yaml").of("EXE-3")
    named = [r["message"] for r in f["related"] if r["message"].startswith("the code-executing reward")]
    assert named == [f"the code-executing reward: reward 'tests_{i}'" for i in range(min(n, 3))]


def test_missing_reward_modules_are_looked_for_once_per_process(tmp_path, monkeypatch):
    """Issue 20: a run whose reward module is missing costs no more than one where it exists: the
    scanner keeps a miss as it keeps a hit, and looks again once a folder it searched changes."""
    from trimtab.engine.codescan import Reference, Scanner

    (tmp_path / "rewards").mkdir()
    sc = Scanner(tmp_path)
    looked = []
    real_locate = sc._locate
    monkeypatch.setattr(sc, "_locate", lambda ref: looked.append(ref) or real_locate(ref))
    ref = Reference("rewards.tide:score", module="rewards.tide", function="score")
    dotted = Reference("rewards.tide.score", module="rewards.tide", function="score", dotted=True)
    for _ in range(3):
        assert sc.locate(ref).status == "no-module"
        assert sc.locate(dotted).status == "no-module"
    assert looked == [ref, dotted]  # one search each, then the cached miss
    # the module appears (its folder changes): found, in both spellings
    (tmp_path / "rewards" / "tide.py").write_text("def score(completion, answer):\n    return 1.0\n")
    os.utime(tmp_path / "rewards", ns=(0, 10**18))  # a coarse clock could keep the folder's time
    assert sc.locate(ref).status == "ok"
    assert sc.locate(dotted).status == "ok"
    # a package folder made where the dotted reading looks (rewards/tide/score.py) is noticed too
    (tmp_path / "rewards" / "tide.py").unlink()
    os.utime(tmp_path / "rewards", ns=(0, 2 * 10**18))
    assert sc.locate(dotted).status == "no-module"
    (tmp_path / "rewards" / "tide").mkdir()
    (tmp_path / "rewards" / "tide" / "score.py").write_text("x = 1\n")
    assert sc.locate(dotted).status == "ok"


def test_the_scanner_asks_about_a_file_once_per_run_it_holds(tmp_path, monkeypatch):
    """Issue 20: while a run is held (Scanner.hold), each file's signature is taken once; a module
    changed after that is read again once another run is held, and without a hold every call
    looks again."""
    from trimtab.engine import codescan

    (tmp_path / "mod.py").write_text("def f():\n    pass\n")
    sc = codescan.Scanner(tmp_path)
    ref = codescan.Reference("mod:f", module="mod", function="f")
    asked = []
    real = codescan._signature
    monkeypatch.setattr(codescan, "_signature", lambda p: asked.append(p) or real(p))

    class Run:
        pass

    one, two = Run(), Run()
    sc.hold(one)
    for _ in range(3):
        assert sc.scan(sc.locate(ref)).modules == ["mod.py"]
    assert len(asked) == 1
    (tmp_path / "mod.py").write_text("def g():\n    pass\n")
    os.utime(tmp_path / "mod.py", ns=(1, 1))  # a different modification time even on a coarse clock
    assert sc.locate(ref).status == "ok"  # the held run's reading
    sc.hold(two)
    assert sc.locate(ref).status == "no-function"
    sc.hold(None)
    asked.clear()
    sc.locate(ref)
    sc.locate(ref)
    assert len(asked) == 2
