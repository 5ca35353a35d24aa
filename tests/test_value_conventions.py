"""Conventions of value (issue #16, class 7b and 7c): an interval below 1 is a share of the run's
total steps (a documented convention of the trade, common practice), not a type error; credential
detection (SEC-1) weighs the key's meaning with the value's shape: names, tags, descriptions and
projects are not credentials, a key that means a secret with a random-looking value still is one
(CWE-798), and a well-known credential shape is one under any key."""
from __future__ import annotations

import pytest

from support import RUN_CONFIG, check_json, run_cli, run_repo

RANDOM = "wren7b-Gq4Xr9Lk2Tz7Vm3Np8Bd"  # invented; random-looking enough for SEC-1's entropy test


# --- 7b: intervals below 1 ---------------------------------------------------------------------------
@pytest.mark.parametrize("every", ["0.25", "0.05"])
def test_an_interval_below_one_is_a_share_of_the_run(tmp_path, every):
    repo = run_repo(tmp_path)
    (repo / "run.yaml").write_text(RUN_CONFIG + f"schedule: {{total_steps: 400}}\ncheckpoint:\n  every: {every}\n")
    r = check_json("run.yaml", cwd=repo)
    assert r.of("VOC-2") == [] and r.of("OPT-3") == [], r.findings
    line = next(x for x in run_cli("explain", "run.yaml", cwd=repo).out.splitlines()
                if x.strip().startswith("checkpoint.every"))
    assert f"a share of the run: {float(every):g} of the total steps" in line


@pytest.mark.parametrize("every,rule", [("2.5", "VOC-2"), ("1000", "OPT-3")])
def test_other_intervals_are_still_judged(tmp_path, every, rule):
    # 2.5 steps is no whole number of steps and no share; 1000 steps is not shorter than a 400-step run
    repo = run_repo(tmp_path)
    (repo / "run.yaml").write_text(RUN_CONFIG + f"schedule: {{total_steps: 400}}\ncheckpoint:\n  every: {every}\n")
    assert [f["location"]["line"] for f in check_json("run.yaml", cwd=repo).of(rule)] == [12]


# --- 7c: the key's meaning with the value's shape ------------------------------------------------
@pytest.mark.parametrize("entry", [
    f"run_name: {RANDOM}", f"experiment: {RANDOM}", f"tags: [{RANDOM}, baseline]", f"description: {RANDOM}",
    f"logging: {{project: {RANDOM}}}", f"run_id: {RANDOM}", f"tracking:\n  group: {RANDOM}",
])
def test_names_tags_and_descriptions_are_not_credentials(tmp_path, entry):
    repo = run_repo(tmp_path)
    (repo / "run.yaml").write_text(RUN_CONFIG + entry + "\n")
    assert check_json("run.yaml", cwd=repo).of("SEC-1") == []


@pytest.mark.parametrize("entry", [
    f"api_token: {RANDOM}", f"grader:\n  password: {RANDOM}", f"secret: {RANDOM}", f"blob: {RANDOM}",
    # a well-known shape (a secret-key token) is a credential even under a name key
    "run_name: sk-" + "Qw3" * 9,
])
def test_secrets_are_still_found(tmp_path, entry):
    repo = run_repo(tmp_path)
    (repo / "run.yaml").write_text(RUN_CONFIG + entry + "\n")
    found = check_json("run.yaml", cwd=repo).of("SEC-1")
    assert [f["location"]["line"] for f in found] == [10] or [f["location"]["line"] for f in found] == [11]


def test_label_keys():
    from trimtab.common.redact import is_label_key

    assert all(map(is_label_key, ["run_name", "experiment", "tags", "tracker_project", "run-id", "description"]))
    # a key that means a secret is never a label, whatever else it says
    assert not any(map(is_label_key, ["secret_name_token", "api_key", "password", "learning_rate", "token"]))
