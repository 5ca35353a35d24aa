"""Gate integrity and output through the command line (issue 19): a typo, a missing path, a
subset of files or a deleted base never turns the gate off, and the output is read in one glance."""
from __future__ import annotations

import argparse
import subprocess
import tomllib

import pytest

from support import FIXTURES, REPO, RUN_CONFIG, check_json, run_cli, run_repo

DEMO = FIXTURES / "demo"
RUN = RUN_CONFIG


@pytest.fixture
def repo(tmp_path):
    return run_repo(tmp_path)


# --- 3. unknown rule ids in --only / --skip ----------------------------------------------------
@pytest.mark.parametrize("option", ["--only", "--skip"])
def test_unknown_rule_id_in_only_or_skip_exits_2_with_the_nearest_ids(repo, option):
    r = run_cli("check", option, "BAT-99", "run.yaml", cwd=repo)
    assert r.code == 2 and r.out == ""
    assert f"{option} BAT-99" in r.err and "did you mean BAT-" in r.err
    r = run_cli("check", option, "SMPL", "run.yaml", cwd=repo)  # an area misspelt
    assert r.code == 2 and "did you mean SMP" in r.err
    r = run_cli("audit", "run.yaml", "--html", str(repo / "p.html"), option, "KL-99", cwd=repo)
    assert r.code == 2 and f"{option} KL-99" in r.err
    # known ids and areas still work (lower case too)
    assert run_cli("check", option, "bat-1,SMP", "run.yaml", cwd=repo).code in (0, 1)


# --- 5. a --set of a key no layer has ------------------------------------------------------------
def test_set_of_a_key_no_layer_has_fails_the_gate_unless_added(repo):
    r = check_json("run.yaml", args=["--set", "rollout.group_sise=16"], cwd=repo)
    (f,) = r.of("CMP-8")
    assert f["level"] == "error" and r.code == 1
    assert "did you mean rollout.group_size?" in f["message"] and "--add rollout.group_sise=" in f["message"]
    # the same key added on purpose: no finding, and the value is in the run
    r = check_json("run.yaml", args=["--add", "rollout.group_sise=16"], cwd=repo)
    assert not r.of("CMP-8")
    r = run_cli("explain", "run.yaml", "--add", "rollout.top_p=0.9", cwd=repo)
    assert r.code == 0 and "rollout.top_p" in r.out.split("Not found:")[0] and "<command line>" in r.out
    # a --set of a key that exists is not a finding
    assert not check_json("run.yaml", args=["--set", "rollout.group_size=16"], cwd=repo).of("CMP-8")
    assert run_cli("check", "--add", "novalue", "run.yaml", cwd=repo).code == 2


# --- 6. a path that does not exist ------------------------------------------------------------
@pytest.mark.parametrize("argv", [
    ["check", "gone.yaml"], ["check", "run.yaml", "gone.yaml"], ["explain", "gone.yaml"], ["map", "gone.yaml"],
    ["audit", "gone.yaml", "--html", "page.html"]])
def test_a_path_that_does_not_exist_exits_2_with_one_message(repo, argv):
    r = run_cli(*argv, cwd=repo)
    assert r.code == 2
    assert r.err.strip().splitlines()[-1] == "trimtab: error: gone.yaml: no such file or folder"
    assert not (repo / "page.html").exists()


# --- 7. the plain hook's fallback message -------------------------------------------------------
def test_plain_hook_without_trimtab_says_what_the_readme_says(tmp_path):
    from trimtab.adopt.hook import hook_script

    script = tmp_path / "pre-commit"
    script.write_text(hook_script(str(tmp_path / "no-such-python")), encoding="utf-8")
    res = subprocess.run(["/bin/sh", str(script)], capture_output=True, text=True,
                         env={"PATH": str(tmp_path)}, cwd=tmp_path)
    assert res.returncode == 1
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    assert "pip install -q -e ." in readme and "pip install trimtab" not in readme
    assert "pip install -e ." in res.stderr and "README" in res.stderr
    assert "pip install trimtab" not in res.stderr


# --- 10. rule options printed as TOML -------------------------------------------------------------
def test_rules_id_prints_options_as_valid_toml():
    from trimtab.engine.registry import Registry

    with_options = [r for r in Registry().ordered() if r.options]
    assert any(isinstance(v, bool) for r in with_options for v in r.options.values())
    for r in with_options:
        res = run_cli("rules", r.id)
        assert res.code == 0
        block = res.out.split("Options (set under ", 1)[1].split("\n\n")[0]
        header, *lines = block.splitlines()
        text = f"[tool.trimtab.rules.\"{r.id}\"]\n" + "\n".join(line.strip() for line in lines) + "\n"
        # TOML 1.0 as the standard library reads it (tomllib, Python 3.11)
        assert tomllib.loads(text)["tool"]["trimtab"]["rules"][r.id] == r.options, text


# --- 12. --set suggestions and the reading of a --set value -----------------------------------
def test_set_suggestion_names_only_keys_that_exist(repo):
    r = check_json("run.yaml", args=["--set", "kl.window.size=3"], cwd=repo)
    (f,) = r.of("CMP-8")
    # before: "did you mean kl.window?", a section the override itself had just opened
    assert "did you mean" not in f["message"], f["message"]
    r = check_json("run.yaml", args=["--set", "kl.coeff=0.1", "--set", "kl.coeffs=0.2"], cwd=repo)
    messages = [f["message"] for f in r.of("CMP-8")]
    assert len(messages) == 2 and all("did you mean kl.coef?" in m for m in messages), messages


def test_set_value_is_read_as_yaml_1_2_and_says_so(repo):
    (repo / "pyproject.toml").write_text('[tool.trimtab]\nyaml_version = "1.1"\n', encoding="utf-8")
    r = run_cli("explain", "run.yaml", "--set", "kl.coef=3e-6", cwd=repo)
    # YAML 1.2 core schema (yaml.org/spec/1.2.2, 10.3.2): 3e-6 is a float; under 1.1 it is a string
    header = r.out.splitlines()[0]
    assert "YAML 1.1" in header and "--set values as YAML 1.2" in header
    (line,) = [ln for ln in r.out.splitlines() if ln.strip().startswith("kl.coef ")]
    assert line.split()[1] == "3e-06" and "<command line>" in line
    for command in ("check", "explain", "audit"):
        helptext = run_cli(command, "--help").out
        assert "YAML 1.2" in helptext.split("--set KEY=VALUE", 2)[-1], command


# --- 14. help texts ----------------------------------------------------------------------------
def test_every_option_and_argument_of_every_command_has_help():
    from trimtab.cli import build_parser

    parser = build_parser()
    missing = []

    def walk(p, name):
        for action in p._actions:
            if isinstance(action, argparse._SubParsersAction):
                for sub_name, sub in action.choices.items():
                    walk(sub, f"{name} {sub_name}")
            elif not action.help or action.help == argparse.SUPPRESS:
                missing.append(f"{name}: {action.option_strings or action.dest}")

    walk(parser, "trimtab")
    assert not missing, missing


def test_extra_argument_shows_the_commands_own_usage(repo):
    r = run_cli("explain", "run.yaml", "other.yaml", cwd=repo)
    assert r.code == 2
    assert r.err.startswith("usage: trimtab explain ") and "unrecognized arguments: other.yaml" in r.err
    r = run_cli("rules", "BAT-1", "--bogus", cwd=repo)
    assert r.code == 2 and r.err.startswith("usage: trimtab rules ")


# --- 8. a rule's help once per report; the safety cautions only where they apply -------------------
def test_text_report_prints_each_help_paragraph_once():
    from trimtab.engine.registry import Registry
    from trimtab_rules._safety import CAUTIONS

    r = run_cli("check", cwd=DEMO)
    helps = [line for line in r.out.splitlines() if line.startswith("    help: ")]
    assert helps and len(helps) == len(set(helps)), helps
    assert r.out.count(CAUTIONS) == 1
    # every finding still carries its help in the JSON report
    j = check_json(cwd=DEMO)
    with_help = [f for f in j.findings if f["help"]]
    assert len(with_help) > len(helps)
    rules = Registry().rules
    for rid in ("REW-3", "REW-4", "REW-5", "SEC-1"):  # plain http, timeout, offline, a literal token
        assert CAUTIONS not in rules[rid].help, rid


# --- 9. show only findings at or above a level --------------------------------------------------
def test_show_level_hides_lower_findings_and_the_summary_counts_them(repo):
    (repo / "run.yaml").write_text(RUN.replace("  temperature: 0.9\n", "  temperature: 0.9\n  temperature: 1.0\n")
                                   .replace("group_size: 8", "group_size: 1"), encoding="utf-8")
    full = check_json("run.yaml", cwd=repo)
    levels = {f["level"] for f in full.findings}
    assert "error" in levels and levels - {"error"}, full.findings
    below = sum(1 for f in full.findings if f["level"] != "error")
    r = run_cli("check", "--gate", "error", "--show", "error", "run.yaml", cwd=repo)
    lines = [ln for ln in r.out.splitlines() if not ln.startswith("    ")]
    assert lines and all(": error " in ln for ln in lines), lines
    assert r.code == full.code == 1
    assert f"{below} below error not shown" in r.err
    j = check_json("run.yaml", args=["--show", "error"], cwd=repo)
    assert {f["level"] for f in j.findings} == {"error"} and j.json["summary"]["hidden"] == below
    assert j.json["summary"]["by_level"] == full.json["summary"]["by_level"]


def test_summary_says_how_many_findings_were_accepted(repo):
    text = RUN.replace("  temperature: 0.9\n", "  temperature: 0.9\n  temperature: 1.0\n")
    (repo / "run.yaml").write_text(text, encoding="utf-8")
    assert check_json("run.yaml", cwd=repo).of("YML-2")
    assert run_cli("check", "--write-accepted", "acc.json", "run.yaml", cwd=repo).code == 0
    r = run_cli("check", "--accepted", "acc.json", "run.yaml", cwd=repo)
    n = len(check_json("run.yaml", cwd=repo).findings)
    assert r.code == 0 and f"; {n} accepted" in r.err, r.err
    # an acceptance comment counts too
    (repo / "run.yaml").write_text(text.replace("  temperature: 1.0\n",
                                                "  temperature: 1.0  # trimtab: accept YML-2 -- test\n"),
                                   encoding="utf-8")
    r = check_json("run.yaml", cwd=repo)
    assert not r.of("YML-2") and r.json["summary"]["accepted"] == 1
