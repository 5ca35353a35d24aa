"""Launch scripts as run sources, defaults lists, and the references people write.

Each invented launch script in fixtures/launch/ sits beside the same run written as one YAML file;
the composed runs must have the same concepts, the same arithmetic and the same findings, apart
from locations. Shell semantics (words, quotes, expansions, arithmetic) are checked against a
POSIX shell itself (``sh``, the reference implementation of the language, run on the test's own
literal text, never on a checked file).
"""
from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest

from support import FIXTURES, check_json, run_cli

LAUNCH = FIXTURES / "launch"
# cross-file rules compare runs with each other (the twin and its script share an output folder)
SET_RULES = {"OPT-4"}


def _models(path: Path):
    from trimtab.common import settings as settings_mod
    from trimtab.cli import _registry
    from trimtab.report.explain import models

    s = settings_mod.load(start=path.parent)
    runs, _problems = models(str(path), s, _registry())
    return runs


def _concepts(m) -> dict:
    return {c: v.value for c, v in m.values.items()}


def _derived(m) -> dict:
    return {c: v.value for c, v in m.derived.items()}


def _findings(path: Path, skip=("CMP-9",)) -> list[tuple]:
    """(rule, level, message) of every finding of one file checked alone, without locations."""
    res = check_json(path, cwd=path.parent)
    return sorted((f["rule"], f["level"], f["message"]) for f in res.findings
                  if f["rule"] not in SET_RULES and f["rule"] not in skip)


def _same_run(script: Path, twin: Path, index: int = 0):
    (run,) = [m for m in _models(script) if m.index == index]
    (one,) = _models(twin)
    assert run.is_rl and one.is_rl
    assert _concepts(run) == _concepts(one)
    assert _derived(run) == _derived(one)
    return run, one


# --- 1. sixty overrides on a base YAML ------------------------------------------------------------
def test_sixty_overrides_compose_to_the_same_run_as_one_yaml():
    folder = LAUNCH / "overrides"
    text = (folder / "launch.sh").read_text()
    assert text.count("=") - text.count("==") == 60  # sixty key=value overrides, one per line
    run, one = _same_run(folder / "launch.sh", folder / "run.yaml")
    assert run.values["rollout.group_size"].value == 8 and run.values["batch.mini"].value == 96
    assert _findings(folder / "launch.sh") == _findings(folder / "run.yaml")


def test_a_finding_points_at_the_override_with_the_base_line_related():
    folder = LAUNCH / "overrides"
    res = check_json(folder / "launch.sh", cwd=folder)
    (bat2,) = res.of("BAT-2")
    loc = bat2["location"]
    assert loc["path"].endswith("launch.sh") and loc["line"] == 22  # "    batch.mini=96 \" is line 22
    lines = (folder / "launch.sh").read_text().splitlines()
    assert lines[21][loc["col"] - 1:].startswith("96")
    related = {(Path(r["path"]).name, r["line"]) for r in bat2["related"]}
    assert ("base.yaml", 21) in related  # the base's "  mini: 64", replaced by the override


# --- 2. --flag value, with a launcher giving processes and nodes ---------------------------------------
def test_flag_arguments_and_launcher_topology():
    folder = LAUNCH / "flags"
    run, _one = _same_run(folder / "launch.sh", folder / "run.yaml")
    assert run.values["cluster.nodes"].value == 2 and run.values["cluster.gpus_per_node"].value == 4
    assert run.derived["cluster.world_size"].value == 8  # 2 nodes x 4 processes each
    # the launcher's --nproc_per_node wins over the visible-device list (8 devices)
    assert run.roles["cluster.gpus_per_node"] == "launcher argument"
    assert run.roles["learning_rate"] == "script argument"
    assert run.values["optim.lr"].value == 2e-6
    assert _findings(folder / "launch.sh") == _findings(folder / "run.yaml")


def test_visible_devices_count_as_processes_per_node(tmp_path):
    (tmp_path / "go.sh").write_text("ACCEL_VISIBLE_DEVICES=0,1,2 python train.py algorithm=grpo "
                                    "rollout.group_size=8 batch.prompts=8 seed=1\n")
    (run,) = _models(tmp_path / "go.sh")
    assert run.values["cluster.gpus_per_node"].value == 3


# --- 3. variables with defaults, arithmetic, a sourced script -------------------------------------------
def test_variables_defaults_arithmetic_and_a_sourced_script():
    folder = LAUNCH / "variables"
    run, _one = _same_run(folder / "launch.sh", folder / "run.yaml")
    mini = run.values["batch.mini"]
    assert mini.value == 128  # $(( PROMPTS * GROUP / 4 )) with PROMPTS=64 (a default), GROUP=8
    hops = [h.message for h in mini.chain]
    assert any(h.startswith("PROMPTS") and "default" in h for h in hops)
    assert any(h.path.endswith("scripts/common.sh") for h in mini.chain)
    assert run.values["cluster.nodes"].value == 2  # readonly NODES=2 in the sourced script
    assert _findings(folder / "launch.sh") == _findings(folder / "run.yaml")


@pytest.mark.skipif(shutil.which("sh") is None, reason="no POSIX shell to compare with")
@pytest.mark.parametrize("script", [
    'N=8\nG=${G:-4}\necho "$((N * G))" $((N / 3)) $((-7 / 2)) $((-7 % 2)) $(( (N + 1) * -2 ))',
    "A='x y'\nB=\"$A z\"\necho $B \"$B\" '$B' \\$B ${C:-dflt} ${A:+set}",
    'X=1\nX=${X}2\nexport Y=$X$X\necho a.b=$Y "c.d=${Y}" e.f="$((Y + 1))" # a comment\n',
    'P=4\necho --n="$P" -x $P \\\n  k=v"$P"w   # continued line',
])
def test_words_read_as_a_posix_shell_reads_them(tmp_path, script):
    """The words the last command receives, as trimtab reads them and as sh prints them."""
    from trimtab.compose import shell
    from trimtab.common.settings import Settings

    ref = subprocess.run(["sh", "-c", script.replace("echo", "printf '%s\\n'", 1)], capture_output=True,
                         text=True, timeout=10, env={"PATH": "/usr/bin:/bin"})
    expected = ref.stdout.splitlines()
    reader = shell.Reader(Settings(root=tmp_path), tmp_path, Settings(root=tmp_path).limits)
    seen = []
    reader._launch = lambda words, env, t: seen.append([w.text for w in words])
    reader.read(tmp_path / "s.sh", "s.sh", script)
    assert seen[-1][1:] == expected


# --- 4. a command substitution --------------------------------------------------------------------
def test_command_substitution_is_unknown_with_a_note_and_no_false_finding():
    folder = LAUNCH / "substitution"
    run, _one = _same_run(folder / "launch.sh", folder / "run.yaml")
    assert "batch.mini" in run.unknown and "batch.mini" not in run.values
    # the base's mini-batch (96) does not divide 512 completions: without the override that would be
    # BAT-2; the script replaces it by a value known only at launch, so nothing is said about it
    assert not check_json(folder / "launch.sh", cwd=folder).of("BAT-2")
    assert check_json(folder / "configs" / "base.yaml", cwd=folder).of("BAT-2")
    notes = check_json(folder / "launch.sh", cwd=folder).of("CMP-9")
    assert {(n["location"]["line"], n["location"]["col"]) for n in notes} == {(4, 62), (4, 77)}
    assert all(n["level"] == "note" and "command substitution" in n["message"] for n in notes)
    assert _findings(folder / "launch.sh") == _findings(folder / "run.yaml")


def test_unknown_values_from_the_environment_and_loops(tmp_path):
    (tmp_path / "go.sh").write_text(
        "for g in 4 8; do\n"
        "  python train.py algorithm=grpo rollout.group_size=$g batch.prompts=$PROMPTS batch.mini=32 seed=1\n"
        "done\n")
    (run,) = _models(tmp_path / "go.sh")
    assert {"rollout.group_size", "batch.prompts"} <= set(run.unknown)
    why = {c: v.note for c, v in run.unknown.items()}
    assert "loop" in why["rollout.group_size"] and "environment" in why["batch.prompts"]
    res = check_json(tmp_path / "go.sh", cwd=tmp_path)
    assert {n["location"]["line"] for n in res.of("CMP-9")} == {2}
    assert not res.of("BAT-1") and not res.of("BAT-2")


# --- 5. two training commands ----------------------------------------------------------------------
def test_two_training_commands_are_two_runs():
    folder = LAUNCH / "two"
    runs = _models(folder / "launch.sh")
    assert [m.index for m in runs] == [0, 1]
    _same_run(folder / "launch.sh", folder / "run-4.yaml", 0)
    _same_run(folder / "launch.sh", folder / "run-16.yaml", 1)
    res = check_json(folder / "launch.sh", cwd=folder)
    (bat2,) = res.of("BAT-2")  # only the second command (512 / 96)
    assert bat2["location"]["line"] == 6
    assert _findings(folder / "launch.sh") == sorted(_findings(folder / "run-4.yaml") + _findings(folder / "run-16.yaml"))


def test_a_script_without_a_training_command_is_skipped_silently(tmp_path):
    (tmp_path / "tidy.sh").write_text("#!/bin/sh\nrm -rf out/tmp\necho done\n")
    res = check_json(tmp_path / "tidy.sh", cwd=tmp_path)
    assert res.code == 0 and res.findings == []


# --- defaults lists ----------------------------------------------------------------------------------
def test_defaults_list_self_last_and_first():
    folder = LAUNCH / "defaults"
    _same_run(folder / "configs" / "self_last.yaml", folder / "self_last_run.yaml")
    _same_run(folder / "configs" / "self_first.yaml", folder / "self_first_run.yaml")


def test_defaults_missing_optional_entry_is_a_note_not_cmp3():
    folder = LAUNCH / "defaults"
    res = check_json(folder / "configs" / "self_last.yaml", cwd=folder)
    (note,) = res.of("CMP-10")
    assert note["level"] == "note" and note["location"]["line"] == 6
    assert not res.of("CMP-3")


def test_script_composes_through_the_defaults_list_with_group_choices():
    folder = LAUNCH / "defaults"
    run, _one = _same_run(folder / "launch.sh", folder / "launch_run.yaml")
    assert run.values["optim.lr"].location.path.endswith("configs/optim/sgd.yaml")
    assert run.values["rollout.group_size"].location.path.endswith("configs/sampler/narrow.yaml")
    assert run.roles["optim.lr"] == "defaults entry" and run.roles["batch.mini"] == "script override"


def test_defaults_entry_that_is_not_optional_is_cmp3(tmp_path):
    (tmp_path / "trimtab.toml").write_text('defaults_key = "defaults"\n')
    (tmp_path / "exp.yaml").write_text("defaults:\n  - optim: missing\nalgorithm: grpo\n")
    (f,) = check_json(tmp_path / "exp.yaml", cwd=tmp_path).of("CMP-3")
    assert f["location"]["line"] == 2


# --- references ----------------------------------------------------------------------------------------
def test_relative_and_resolver_references(tmp_path):
    (tmp_path / "r.yaml").write_text(
        "algorithm: grpo\nseed: 1\nrollout:\n  group_size: ${oc.env:GROUP,8}\n  temperature: 1.0\n"
        "batch:\n  prompts: ${.mini}\n  mini: ${..rollout.group_size}\n  stamp: ${now:%Y}\n"
        "kl:\n  coef: ${oc.env:KL_COEF}\n")
    (run,) = _models(tmp_path / "r.yaml")
    assert run.values["rollout.group_size"].value == 8  # the default of the environment lookup
    assert run.values["batch.mini"].value == 8 and run.values["batch.prompts"].value == 8
    assert "kl.coef" in run.unknown
    res = check_json(tmp_path / "r.yaml", cwd=tmp_path)
    lines = {n["location"]["line"] for n in res.of("CMP-9")}
    assert lines == {4, 9, 11}
    # never a finding on an unknown value: no type complaint, no "KL never stated"
    assert not res.of("VOC-2") and not res.of("KL-1") and not res.of("CMP-2")


# --- files that are not configs, and the hook ----------------------------------------------------------
def test_a_path_that_is_no_config_is_one_plain_message_exit_2(tmp_path):
    (tmp_path / "notes.txt").write_text("not a config\n")
    res = run_cli("check", str(tmp_path / "notes.txt"), cwd=tmp_path)
    assert res.code == 2
    assert res.err.count("notes.txt") == 1 and "neither" in res.err and res.out == ""


def test_a_shebang_script_without_suffix_is_read_as_a_launch_script(tmp_path):
    (tmp_path / "go").write_text("#!/usr/bin/env bash\npython train.py algorithm=grpo rollout.group_size=1 "
                                 "batch.prompts=8 seed=1\n")
    res = check_json(tmp_path / "go", cwd=tmp_path)
    assert res.code in (0, 1) and "SMP-1" in res.ids()


def test_hook_manifest_covers_launch_scripts():
    import yaml

    from support import REPO

    (hook,) = yaml.safe_load((REPO / ".pre-commit-hooks.yaml").read_text())
    assert "shell" in hook["types_or"]


# --- secrets ----------------------------------------------------------------------------------------------
SECRETS = ("Qm7xT2vLp9KdR4sWz8NcY3bHf6JgA1eU", "Vb3Nq8Lr5Tx1Zc7Mk2Pw9Hd4Gs6Fy0Ja", "Rk4Wm9Xp2Lq7Tz5Nc8Vb3Hs6Jd1Gf0Ya")


def test_credentials_in_a_script_are_sec1_and_masked_everywhere(tmp_path):
    folder = LAUNCH / "secret"
    res = check_json(folder / "launch.sh", cwd=folder)
    lines = sorted(f["location"]["line"] for f in res.of("SEC-1"))
    assert lines == [3, 4, 6]  # exported variable, inline environment, argument
    outputs = [res.out, res.err]
    for fmt in ("text", "sarif"):
        r = run_cli("check", "--format", fmt, str(folder / "launch.sh"), cwd=folder)
        outputs += [r.out, r.err]
    r = run_cli("explain", str(folder / "launch.sh"), cwd=folder)
    outputs += [r.out, r.err]
    for text in outputs:
        for secret in SECRETS:
            assert secret not in text
            assert secret[:12] not in text
    json.loads(res.out)


def test_credentials_in_a_script_are_masked_on_the_audit_page(tmp_path):
    """The audit page shows each file's source: the one masking function hides what SEC-1 finds."""
    folder = LAUNCH / "secret"
    page = tmp_path / "audit.html"
    r = run_cli("audit", "--html", str(page), str(folder / "launch.sh"), cwd=folder)
    for text in (r.out, r.err, page.read_text()):
        for secret in SECRETS:
            assert secret not in text


def test_readme_launch_example_is_real():
    """The launch-script output the README shows is what the check prints, line for line."""
    import re

    from support import REPO

    readme = (REPO / "README.md").read_text()
    section = readme[readme.index("\n## Launch scripts"):]
    block = re.search(r"```console\n\$ trimtab check launch.sh --only BAT-2\n(.*?)```", section, re.S).group(1)
    out = run_cli("check", "launch.sh", "--only", "BAT-2", cwd=LAUNCH / "overrides").out
    assert block.splitlines() == out.splitlines()


def test_a_changed_base_rechecks_the_scripts_that_launch_it(tmp_path):
    """pre-commit passes the changed files: a staged base brings the launch scripts that name it,
    and a defaults list brings the configs whose list names a changed entry."""
    repo = tmp_path / "repo"
    shutil.copytree(LAUNCH / "overrides", repo)
    (repo / ".git").mkdir()
    res = check_json("configs/base.yaml", cwd=repo)
    assert res.json["summary"]["files"] == 2  # the base and launch.sh
    assert [f["location"]["line"] for f in res.of("BAT-2") if f["location"]["path"] == "launch.sh"] == [22]
    repo = tmp_path / "defaults"
    shutil.copytree(LAUNCH / "defaults", repo)
    (repo / ".git").mkdir()
    res = check_json("configs/optim/sgd.yaml", cwd=repo)
    assert res.json["summary"]["files"] == 2  # the entry and launch.sh, which chooses it
    res = check_json("configs/sampler/wide.yaml", cwd=repo)
    # the entry, the two configs whose lists name it, and launch.sh built on one of them (its own group
    # choice replaces the entry, but the dependants are found without composing: one check too many)
    assert res.json["summary"]["files"] == 4


@pytest.mark.parametrize("text", [
    "cat <<A\n" * 20000,  # here-documents that never end
    "echo " + "$(" * 20000,  # command substitutions that never close
    "X=a\n" + "X=$X$X\n" * 40 + "python t.py a.b=$X\n",  # a value that doubles forty times
    "python t.py a=$((" + "(" * 900 + "1" + ")" * 900 + "))\n",  # arithmetic nested past the parser
    "python t.py a=$((" + "1+" * 3000 + "1))\n",
    "python t.py a=" + "${X:-" * 2000 + "1" + "}" * 2000 + "\n",  # defaults nested 2000 deep
    "python t.py " + "a=1 " * 60000 + "\n",  # more words than trimtab reads
    "x" * ((1 << 19) + 1),  # larger than a launch script may be
])
def test_hostile_scripts_are_read_in_bounded_time(tmp_path, text):
    """Hostile scripts end with a value left unknown or a located problem, never a hang or a crash
    (time is bounded by the word and size limits; measured, not asserted: tests/perf/bench.py)."""
    from support import bounded

    (tmp_path / "h.sh").write_text(text)
    with bounded(60, "a hostile launch script"):
        res = check_json(tmp_path / "h.sh", cwd=tmp_path)
    assert res.code in (0, 1, 2) and "TOOL-1" not in res.ids()


def test_references_read_as_a_general_purpose_config_library_reads_them(tmp_path, monkeypatch):
    """Relative references, references inside text and an environment lookup with a default, as
    trimtab reads them and as OmegaConf (a general-purpose config library that implements this
    reference dialect; test extra) resolves them. OmegaConf returns environment values as text, so
    the environment default is compared as text; everything else by value."""
    omegaconf = pytest.importorskip("omegaconf")
    import yaml

    monkeypatch.delenv("TT_GROUP", raising=False)
    text = ("algorithm: grpo\nseed: 1\nrollout:\n  group_size: ${oc.env:TT_GROUP,8}\n  temperature: 1.0\n"
            "  top_p: ${.temperature}\nbatch:\n  prompts: 64\n  mini: ${..batch.prompts}\n"
            "  micro_batch_size: ${.prompts}\nrun_name: g${rollout.group_size}-p${batch.prompts}\n")
    (tmp_path / "r.yaml").write_text(text)
    (run,) = _models(tmp_path / "r.yaml")
    ref = omegaconf.OmegaConf.to_container(omegaconf.OmegaConf.create(yaml.safe_load(text)), resolve=True)
    assert str(run.values["rollout.group_size"].value) == ref["rollout"]["group_size"] == "8"
    assert run.values["rollout.top_p"].value == ref["rollout"]["top_p"] == 1.0
    assert run.values["batch.mini"].value == ref["batch"]["mini"] == 64
    assert run.values["batch.micro_per_gpu"].value == ref["batch"]["micro_batch_size"] == 64
    assert run.values["run.name"].value == ref["run_name"] == "g8-p64"
