"""REW rules: reward sources. Each rule fires on its bad fixture at the named line and column and is
silent on its good fixture."""
from __future__ import annotations

import os
import re
import shutil

import pytest

from support import FIXTURES, check_json

R = FIXTURES / "rules"


def at(result, rule_id):
    return sorted((f["location"]["line"], f["location"]["col"]) for f in result.of(rule_id))


# --- REW-1: the three layouts and a key map ---------------------------------------------------------
@pytest.mark.parametrize("name, expected", [
    ("list.yaml", [(13, 15), (16, 15)]),  # list of mappings: missing function, missing module
    ("mapping.yaml", [(13, 9)]),  # mapping of name -> component, file reference
    ("strings.yaml", [(11, 7)]),  # list of import-path strings
])
def test_rew1_layouts_bad(name, expected):
    res = check_json(R / "REW-1" / "bad" / name, cwd=R / "REW-1" / "bad")
    assert at(res, "REW-1") == expected
    assert all(f["level"] == "error" for f in res.of("REW-1"))


@pytest.mark.parametrize("name", ["list.yaml", "mapping.yaml", "strings.yaml"])
def test_rew1_layouts_good(name):
    res = check_json(R / "REW-1" / "good" / name, args=("--only", "REW"), cwd=R / "REW-1" / "good")
    assert res.of("REW-1") == []
    assert res.code == 0, res.findings


def test_rew1_messages_name_module_and_search_roots():
    res = check_json(R / "REW-1" / "bad" / "list.yaml", cwd=R / "REW-1" / "bad")
    missing_fn, missing_mod = sorted(res.of("REW-1"), key=lambda f: f["location"]["line"])
    assert "rewards/tidepool.py defines no function 'answer_in_box'" in missing_fn["message"]
    assert missing_fn["related"][0]["path"] == "rewards/tidepool.py"
    assert "'rewards.shoreline' is not found in the search roots (.)" in missing_mod["message"]
    assert "rewards/shoreline.py, rewards/shoreline/__init__.py" in missing_mod["message"]


def test_rew1_key_map_fields():
    # settings keys."reward.sources" = {key = "scoring.parts", fields = {ref = "callable_path", ...}}
    res = check_json(R / "REW-1" / "keymap" / "run.yaml", cwd=R / "REW-1" / "keymap")
    assert at(res, "REW-1") == [(14, 22)]
    assert "answer_in_box" in res.of("REW-1")[0]["message"]


def test_rew1_search_roots_setting(tmp_path):
    (tmp_path / "src" / "rewards").mkdir(parents=True)
    (tmp_path / "src" / "rewards" / "tidepool.py").write_text("def score(c, t):\n    return 1.0\n")
    (tmp_path / "run.yaml").write_text((R / "REW-1" / "good" / "strings.yaml").read_text()
                                       .replace("exact_match", "score").replace("format_ok", "score_missing"))
    res = check_json(tmp_path / "run.yaml", cwd=tmp_path)
    assert len(res.of("REW-1")) == 2  # nothing found at the repository root
    (tmp_path / "trimtab.toml").write_text('search_roots = ["src"]\n')
    res = check_json(tmp_path / "run.yaml", cwd=tmp_path)
    assert at(res, "REW-1") == [(11, 7)]
    assert "defines no function 'score_missing'" in res.of("REW-1")[0]["message"]


def test_rew1_syntax_error_in_module_is_a_finding(tmp_path):
    (tmp_path / "rewards").mkdir()
    (tmp_path / "rewards" / "tidepool.py").write_text("def exact_match(:\n")
    (tmp_path / "trimtab.toml").write_text("")
    (tmp_path / "run.yaml").write_text((R / "REW-1" / "good" / "strings.yaml").read_text())
    res = check_json(tmp_path / "run.yaml", cwd=tmp_path)
    assert res.code == 1 and "Traceback" not in res.err
    msgs = [f["message"] for f in res.of("REW-1")]
    assert msgs and all("does not parse as Python" in m for m in msgs)
    assert res.of("REW-1")[0]["related"][0]["line"] == 1


# --- REW-2 -------------------------------------------------------------------------------------------
def test_rew2_bad():
    res = check_json(R / "REW-2" / "bad.yaml")
    found = {(f["location"]["line"], f["location"]["col"]): f["level"] for f in res.of("REW-2")}
    assert found == {(16, 15): "warning",  # revision: main (a branch name)
                     (20, 10): "warning",  # hub id without revision
                     (24, 10): "error"}  # local path that does not exist


def test_rew2_good():
    assert check_json(R / "REW-2" / "good.yaml").of("REW-2") == []


# --- REW-3, REW-4, REW-5 ------------------------------------------------------------------------------
@pytest.mark.parametrize("rule_id, level", [("REW-3", "warning"), ("REW-4", "warning"), ("REW-5", "note")])
def test_remote_rules(rule_id, level):
    bad = check_json(R / rule_id / "bad.yaml")
    assert at(bad, rule_id) == [(15, 15)]
    assert bad.of(rule_id)[0]["level"] == level
    # issue 19 item 8: the safety cautions (sandboxes, running code) are not this finding's advice
    assert "untrusted" not in bad.of(rule_id)[0]["help"]
    assert check_json(R / rule_id / "good.yaml").of(rule_id) == []


def test_rew3_loopback_http_is_accepted():
    res = check_json(R / "REW-3" / "good.yaml")
    assert res.of("REW-3") == []
    assert len(res.of("REW-5")) == 2  # both remote graders are still not reproducible offline


def test_rew3_cwe_ids():
    res = check_json(R / "REW-3" / "bad.yaml")
    assert res.of("REW-3")[0]["cwe"] == 319
    assert res.of("REW-4")[0]["cwe"] == 1088


# --- REW-6 .. REW-8 -------------------------------------------------------------------------------------
def test_rew6():
    assert at(check_json(R / "REW-6" / "bad.yaml"), "REW-6") == [(9, 5)]
    assert check_json(R / "REW-6" / "good.yaml").of("REW-6") == []


def test_rew7_bad():
    res = check_json(R / "REW-7" / "bad.yaml")
    found = {(f["location"]["line"], f["location"]["col"]): f["level"] for f in res.of("REW-7")}
    assert found == {(12, 13): "error", (16, 13): "warning", (20, 13): "warning"}
    assert "weight 'high' is not a number" in res.of("REW-7")[0]["message"]


def test_rew7_all_zero():
    res = check_json(R / "REW-7" / "bad_all_zero.yaml")
    assert at(res, "REW-7") == [(12, 13)]
    assert res.of("REW-7")[0]["level"] == "error"
    assert res.of("REW-7")[0]["related"][0]["line"] == 16


def test_rew7_good():
    assert check_json(R / "REW-7" / "good.yaml").of("REW-7") == []


def test_rew7_yaml11_float_reads_as_text(tmp_path):
    # YAML 1.1 floats need a point and a signed exponent (YAML 1.1 type repository, float): 1e-1 is text
    text = (R / "REW-7" / "good.yaml").read_text().replace("weight: 0.2", "weight: 1e-1")
    (tmp_path / "run.yaml").write_text(text)
    res = check_json(tmp_path / "run.yaml")
    assert at(res, "REW-7") == [(16, 13)]
    assert "YAML 1.1 reads 1e-1 as text" in res.of("REW-7")[0]["message"]


def test_rew8():
    res = check_json(R / "REW-8" / "bad.yaml")
    assert at(res, "REW-8") == [(15, 10)]
    assert res.of("REW-8")[0]["related"][0]["line"] == 11
    assert check_json(R / "REW-8" / "good.yaml").of("REW-8") == []


def test_rew8_module_and_file_forms_are_the_same_reference():
    from trimtab_rules.reward import _norm_ref

    assert _norm_ref("rewards.tidepool:exact_match") == _norm_ref("./rewards/tidepool.py:exact_match")
    assert _norm_ref("rewards.tidepool:exact_match") != _norm_ref("rewards.tidepool:format_ok")


# --- REW-9, REW-10 ----------------------------------------------------------------------------------------
def test_rew9():
    res = check_json(R / "REW-9" / "bad.yaml")
    assert at(res, "REW-9") == [(17, 17)]
    # the message is Python re's own reason (compare: re.compile raises re.error "missing ), ...")
    with pytest.raises(re.error) as exc:
        re.compile(r"^<think>.*?</think>\s*<answer>(.*?</answer>$")
    assert exc.value.msg in res.of("REW-9")[0]["message"]
    assert check_json(R / "REW-9" / "good.yaml").of("REW-9") == []


def test_rew10():
    res = check_json(R / "REW-10" / "bad.yaml")
    assert at(res, "REW-10") == [(17, 17)]
    msg = res.of("REW-10")[0]["message"]
    assert "<think>" in msg and "<answer>" in msg  # shows the sample it built
    assert res.of("REW-10")[0]["related"][0]["line"] == 13
    assert check_json(R / "REW-10" / "good.yaml").of("REW-10") == []


def test_rew10_samples_use_the_template_tags_in_order():
    from trimtab_rules.reward import sample_answers

    samples = sample_answers("Think in <think></think>, then answer in <answer></answer>.")
    assert samples and all(s.index("<think>") < s.index("</think>") < s.index("<answer>") for s in samples)
    assert sample_answers("no tags here, only {problem}") == []


# --- robustness: any shape of reward.sources gives findings, never a crash ------------------------------
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

_SCALARS = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(-2, 2, allow_nan=False),
                     st.sampled_from(["rule", "code", "model", "judge", "remote", "main", "rewards.x:f",
                                      "a/b.py:f", "../up.py:f", "/abs.py:f", "lowfield/wren-rm",
                                      "http://10.0.0.1/s", "https://h/s", "./models/none", "", "a.b.c"]))
_FIELDS = st.sampled_from(["kind", "ref", "fn", "model", "weight", "revision", "endpoint", "timeout_s", "name"])
_COMPONENT = st.one_of(_SCALARS, st.dictionaries(_FIELDS, st.one_of(_SCALARS, st.lists(_SCALARS, max_size=2)),
                                                 max_size=6))
_SOURCES = st.one_of(st.lists(_COMPONENT, max_size=4),
                     st.dictionaries(st.sampled_from(["a", "b", "c"]), _COMPONENT, max_size=3))


@hsettings(max_examples=40, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sources=_SOURCES)
def test_any_reward_sources_shape_never_crashes(tmp_path, sources):
    import yaml

    doc = {"run": {"estimator": "grpo"}, "rollout": {"group_size": 8}, "kl_coef": 0.001, "rewards": sources,
           "sandbox": {"kind": "process"}}
    (tmp_path / "run.yaml").write_text(yaml.safe_dump(doc))
    (tmp_path / "trimtab.toml").write_text("")
    res = check_json(tmp_path / "run.yaml", cwd=tmp_path)
    assert res.code in (0, 1), res.err
    assert "TOOL-1" not in res.ids(), [f["message"] for f in res.of("TOOL-1")]


def test_module_cache_follows_file_changes(tmp_path):
    repo = tmp_path / "repo"
    shutil.copytree(R / "REW-1" / "good", repo)
    assert check_json(repo / "strings.yaml", cwd=repo).of("REW-1") == []
    mod = repo / "rewards" / "tidepool.py"
    mod.write_text(mod.read_text().replace("def format_ok", "def format_okay"))
    os.utime(mod, ns=(1, 1))  # a different modification time even on a coarse clock
    assert at(check_json(repo / "strings.yaml", cwd=repo), "REW-1") == [(11, 7)]


def test_parallel_jobs_give_the_same_findings():
    base = R / "REW-1" / "bad"
    one = check_json(base, cwd=base)
    two = check_json(base, args=("--jobs", "2"), cwd=base)
    assert one.findings == two.findings and one.of("REW-1")


# Loopback: "localhost" names (RFC 6761, section 6.3: localhost and names under .localhost resolve to the
# loopback address; localhost.localdomain is common practice), 127.0.0.0/8 and ::1 (RFC 1122 section
# 3.2.1.3; RFC 4291 section 2.5.3; section numbers from memory), as Python's ipaddress module reads them
# (a general-purpose reference library). Everything else is a network host.
@pytest.mark.parametrize("host, loopback", [
    ("localhost", True), ("LOCALHOST", True), ("localhost.localdomain", True), ("grader.localhost", True),
    ("127.0.0.1", True), ("127.1.2.3", True), ("127.255.255.254", True), ("[::1]", True),
    ("[0:0:0:0:0:0:0:1]", True),
    ("128.0.0.1", False), ("10.0.0.1", False), ("[::2]", False), ("localhost.evil.example", False),
    ("notlocalhost", False), ("grader.lowfield.internal", False), ("126.255.255.255", False),
])
def test_rew3_loopback_host_forms(tmp_path, host, loopback):
    text = (R / "REW-3" / "good.yaml").read_text()
    assert "http://127.0.0.1:8080/score" in text
    (tmp_path / "run.yaml").write_text(text.replace("http://127.0.0.1:8080/score", f"http://{host}:8080/score"))
    found = check_json(tmp_path / "run.yaml").of("REW-3")
    assert (found == []) is loopback, found


def test_rew7_all_zero_needs_every_weight_numeric(tmp_path):
    # "all weights are 0" only when every component has a numeric weight: a component without a weight, or
    # with a text weight, may still pay out, so the zero weights are warnings, not the all-zero error.
    base = (R / "REW-7" / "good.yaml").read_text()
    assert "weight: 1.0" in base and "weight: 0.2" in base
    cases = {
        "no weight on the first": base.replace("    weight: 1.0\n", "").replace("weight: 0.2", "weight: 0"),
        "text weight on the first": base.replace("weight: 1.0", "weight: high").replace("weight: 0.2", "weight: 0"),
    }
    for what, text in cases.items():
        (tmp_path / "run.yaml").write_text(text)
        res = check_json(tmp_path / "run.yaml").of("REW-7")
        assert "all-zero" not in str(res) and not any("always 0" in f["message"] for f in res), what
        assert any(f["level"] == "warning" and "weight 0 switches" in f["message"] for f in res), what
    (tmp_path / "run.yaml").write_text(base.replace("weight: 1.0", "weight: 0").replace("weight: 0.2", "weight: 0.0"))
    res = check_json(tmp_path / "run.yaml").of("REW-7")
    assert [(f["level"], "always 0" in f["message"]) for f in res] == [("error", True)]


# --- reward components by name (issue 16, class 6) ----------------------------------------------------
# A bare identifier in a reward list is a reward function by name (trainers with a registry of reward
# functions take them so, common practice); a path- or repository-like reference is a model.
def test_names_are_functions_verified_through_the_search_roots():
    good = R / "REW-1" / "good-names"
    res = check_json(good / "run.yaml", cwd=good)
    assert res.of("REW-1") == [] and res.of("REW-2") == [] and res.of("REW-6") == []
    bad = R / "REW-1" / "bad-names"
    res = check_json(bad / "run.yaml", cwd=bad)
    notes = res.of("REW-1")
    assert [f["level"] for f in notes] == ["note", "note"]
    assert "'accuracy' is named without its module" in notes[0]["message"]
    assert "cannot verify" in notes[0]["message"]
    assert res.of("REW-2") == [] and res.of("REW-6") == []


def test_a_name_found_by_name_has_its_code_scanned(tmp_path):
    # the module that defines the named function is scanned like a module:function reference
    (tmp_path / "scoring").mkdir()
    (tmp_path / "scoring" / "checks.py").write_text("import subprocess\n\n\ndef run_tests(c, t):\n"
                                                     "    return subprocess.run(['python', '-c', c]).returncode\n")
    (tmp_path / "trimtab.toml").write_text("")
    (tmp_path / "run.yaml").write_text("run: {estimator: grpo}\nrollout: {group_size: 8}\nkl_coef: 0.001\n"
                                       "rewards: [run_tests]\n")
    res = check_json(tmp_path / "run.yaml", cwd=tmp_path)
    assert res.of("REW-1") == []
    assert res.of("EXE-1"), res.findings  # runs generated code with no sandbox stated


def test_name_index_is_bounded(tmp_path, monkeypatch):
    from trimtab.engine import codescan

    for i in range(5):
        (tmp_path / f"m{i}.py").write_text(f"def f{i}():\n    pass\n")
    monkeypatch.setattr(codescan, "INDEX_FILES", 3)
    sc = codescan.Scanner(tmp_path)
    assert sc.find_name("f1").status == "ok" and sc.find_name("f1").path == "m1.py"
    miss = sc.find_name("f4")
    assert miss.status == "no-function" and "stopped after 3 Python files" in miss.reason


def test_name_index_never_follows_links_or_hidden_folders(tmp_path):
    from trimtab.engine import codescan

    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "far.py").write_text("def far():\n    pass\n")
    repo = tmp_path / "repo"
    (repo / ".hidden").mkdir(parents=True)
    (repo / ".hidden" / "h.py").write_text("def hidden():\n    pass\n")
    (repo / "linked").symlink_to(outside)
    (repo / "one.py").symlink_to(outside / "far.py")
    sc = codescan.Scanner(repo)
    assert sc.find_name("far").status == "no-function"
    assert sc.find_name("hidden").status == "no-function"


@pytest.mark.parametrize("sources, kinds", [
    ("[accuracy, format_ok]", ["rule", "rule"]),
    ("[team/judge-7b, ./weights/rm]", ["model", "model"]),
    ("{accuracy: 1.0, team/judge-7b: 0.5}", ["rule", "model"]),
    ("[{name: accuracy, weight: 1.0}, {name: j, kind: judge, path: team/judge-7b}]", ["rule", "judge"]),
    ("[{accuracy: 1.0}, {j: team/judge-7b}]", ["rule", "model"]),
    ("[{accuracy: {weight: 1.0}}, {j: {kind: judge, model: team/judge-7b}}]", ["rule", "judge"]),
    ("[{sandbox: container}]", [""]),  # a field of a component, not a name
])
def test_reward_forms_give_the_same_kinds(tmp_path, sources, kinds):
    from trimtab_rules._safety import kind_of
    from trimtab.load.loader import load
    from trimtab.resolve.concepts import ResolveOptions, resolve

    (tmp_path / "run.yaml").write_text(f"rewards: {sources}\n")
    doc = load(str(tmp_path / "run.yaml"))
    m = resolve(doc, doc.roots[0], ResolveOptions(force_rl=True))
    assert [kind_of(c) for c in m.components] == kinds
    weights = {c.get("ref"): c.get("weight") for c in m.components}
    if "1.0" in sources:
        assert weights["accuracy"] == 1.0


def test_name_index_walk_is_bounded_by_entries(tmp_path, monkeypatch):
    # a repository of many folders and no Python files (or a checker rooted at /) is not walked to the end
    from trimtab.engine import codescan

    for i in range(30):
        (tmp_path / f"d{i:02d}").mkdir()
    (tmp_path / "d29" / "late.py").write_text("def late():\n    pass\n")
    monkeypatch.setattr(codescan, "INDEX_ENTRIES", 10)
    miss = codescan.Scanner(tmp_path).find_name("late")
    assert miss.status == "no-function" and "stopped after" in miss.reason
    monkeypatch.setattr(codescan, "INDEX_ENTRIES", 1000)
    assert codescan.Scanner(tmp_path).find_name("late").status == "ok"
