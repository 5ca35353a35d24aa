"""The plain git hook: ``trimtab install-hook`` writes .git/hooks/pre-commit, which checks the
staged (index) version of the staged run configs, not the working tree."""
from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest

from support import run_cli

pytestmark = pytest.mark.skipif(shutil.which("git") is None, reason="git is not installed")

# (seed, KL, clip range and gradient clip stated on the first two lines, so the later lines keep their numbers)
GOOD = "run: {estimator: grpo, seed: 1}\noptim: {kl_coef: 0.04, clip_ratio: 0.2, max_grad_norm: 1.0}\nrollout:\n  group_size: 8\n  temperature: 0.9\n"
BAD = GOOD + "  temperature: 1.0\n"  # YML-2: a key written twice (warning: the default gate fails it)


def git_env(tmp_path: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update({
        "GIT_AUTHOR_NAME": "Lowfield Tester", "GIT_AUTHOR_EMAIL": "tester@lowfield.invalid",
        "GIT_COMMITTER_NAME": "Lowfield Tester", "GIT_COMMITTER_EMAIL": "tester@lowfield.invalid",
        "GIT_CONFIG_GLOBAL": str(tmp_path / "no-global-gitconfig"), "GIT_CONFIG_NOSYSTEM": "1",
        "HOME": str(tmp_path), "PRE_COMMIT": "",
    })
    env.pop("PRE_COMMIT")
    return env


def git(repo: Path, env: dict, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    return subprocess.run(["git", *args], cwd=repo, env=env, capture_output=True, text=True, check=check)


class _Done:
    def __init__(self, r):
        self.returncode, self.stdout, self.stderr = r.code, r.out, r.err


def trimtab(repo: Path, env: dict, *args: str) -> _Done:
    """trimtab in this process (fast); git, which it calls, sees the test's git environment."""
    return _Done(run_cli(*args, cwd=repo))


@pytest.fixture
def repo(tmp_path, monkeypatch):
    repo = tmp_path / "lowfield-configs"
    repo.mkdir()
    env = git_env(tmp_path)
    for k in [k for k in os.environ if k.startswith("GIT_")]:
        monkeypatch.delenv(k)
    for k, v in env.items():
        if k.startswith("GIT_"):
            monkeypatch.setenv(k, v)
    git(repo, env, "init", "-q")
    (repo / "configs").mkdir()
    (repo / "configs" / "wren-7b.yaml").write_text(GOOD, encoding="utf-8")
    (repo / "README.md").write_text("Lowfield Labs run configs\n", encoding="utf-8")
    git(repo, env, "add", ".")
    git(repo, env, "commit", "-q", "-m", "start")
    r = trimtab(repo, env, "install-hook")
    assert r.returncode == 0, r.stderr
    return repo, env


def test_hook_is_installed_executable_and_not_overwritten(repo):
    repo, env = repo
    hook = repo / ".git" / "hooks" / "pre-commit"
    assert hook.is_file() and os.access(hook, os.X_OK)
    assert "check --staged" in hook.read_text()
    hook.write_text("#!/bin/sh\necho the team's own hook\n")
    r = trimtab(repo, env, "install-hook")
    assert r.returncode == 2 and "already exists" in r.stderr
    assert "the team's own hook" in hook.read_text()
    r = trimtab(repo, env, "install-hook", "--force")
    assert r.returncode == 0 and "check --staged" in hook.read_text()


def test_hook_checks_the_index_not_the_working_tree(repo):
    repo, env = repo
    # staged version bad, working tree clean: the commit is refused
    cfg = repo / "configs" / "wren-7b.yaml"
    cfg.write_text(BAD, encoding="utf-8")
    git(repo, env, "add", "configs/wren-7b.yaml")
    cfg.write_text(GOOD, encoding="utf-8")  # the working tree is clean again, the index is not
    assert trimtab(repo, env, "check", "configs/wren-7b.yaml").returncode == 0
    r = git(repo, env, "commit", "-m", "bad staged", check=False)
    assert r.returncode != 0
    assert "configs/wren-7b.yaml:6:3: warning YML-2" in r.stdout + r.stderr
    assert git(repo, env, "rev-list", "--count", "HEAD").stdout.strip() == "1"

    # the reverse: staged version clean, working tree bad: the commit passes
    cfg.write_text(GOOD.replace("0.9", "0.8"), encoding="utf-8")
    git(repo, env, "add", "configs/wren-7b.yaml")
    cfg.write_text(BAD, encoding="utf-8")  # not staged: not part of this commit
    assert trimtab(repo, env, "check", "configs/wren-7b.yaml").returncode == 1
    r = git(repo, env, "commit", "-q", "-m", "good staged", check=False)
    assert r.returncode == 0, r.stdout + r.stderr
    assert git(repo, env, "show", "HEAD:configs/wren-7b.yaml").stdout == GOOD.replace("0.9", "0.8")
    assert git(repo, env, "rev-list", "--count", "HEAD").stdout.strip() == "2"


def test_only_staged_configs_are_checked(repo):
    repo, env = repo
    (repo / "configs" / "old.yaml").write_text(BAD, encoding="utf-8")  # bad, but not staged
    (repo / "notes.txt").write_text("not a config\n", encoding="utf-8")
    git(repo, env, "add", "notes.txt")
    r = trimtab(repo, env, "check", "--staged")
    assert r.returncode == 0 and "0 file(s) checked" in r.stderr
    git(repo, env, "rm", "-q", "configs/wren-7b.yaml")  # a deletion is nothing to check
    r = trimtab(repo, env, "check", "--staged")
    assert r.returncode == 0


def test_staged_outside_git_is_a_clear_error(tmp_path):
    (tmp_path / "trimtab.toml").write_text("", encoding="utf-8")
    r = run_cli("check", "--staged", cwd=tmp_path)
    assert r.code == 2 and "--staged needs a git repository" in r.err
    r = run_cli("install-hook", cwd=tmp_path)
    assert r.code == 2 and "install-hook needs a git repository" in r.err


def test_settings_in_a_sub_folder_are_found_by_the_hook(tmp_path, monkeypatch):
    repo = tmp_path / "mono"
    sub = repo / "post-training"
    (sub / "configs").mkdir(parents=True)
    env = git_env(tmp_path)
    for k in [k for k in os.environ if k.startswith("GIT_")]:
        monkeypatch.delenv(k)
    for k, v in env.items():
        if k.startswith("GIT_"):
            monkeypatch.setenv(k, v)
    git(repo, env, "init", "-q")
    (sub / "trimtab.toml").write_text('include = ["configs/*.yaml"]\n', encoding="utf-8")
    (repo / "elsewhere.yaml").write_text(BAD, encoding="utf-8")  # outside the settings' folder
    assert run_cli("install-hook", cwd=sub).code == 0
    hook = (repo / ".git" / "hooks" / "pre-commit").read_text()
    assert "cd \"$(git rev-parse --show-toplevel)\"/post-training" in hook
    (sub / "configs" / "run.yaml").write_text(BAD, encoding="utf-8")
    git(repo, env, "add", ".")
    r = git(repo, env, "commit", "-m", "bad", check=False)
    assert r.returncode != 0 and "configs/run.yaml:6:3: warning YML-2" in r.stdout + r.stderr
    assert "elsewhere.yaml" not in r.stdout + r.stderr


def test_staged_bases_are_read_from_the_index_and_shown_by_their_own_names(repo):
    repo, env = repo
    (repo / "pyproject.toml").write_text('[tool.trimtab]\nbases_key = "inherit"\ninclude = ["configs/*.yaml"]\n'
                                         'yaml_version = "1.1"\n',
                                         encoding="utf-8")
    (repo / "bases").mkdir()
    base = repo / "bases" / "optim.yaml"
    base.write_text("optim:\n  lr: 3e-6\n", encoding="utf-8")  # staged: read as a string by YAML 1.1
    cfg = repo / "configs" / "wren-7b.yaml"
    cfg.write_text("inherit: ../bases/optim.yaml\n" + GOOD, encoding="utf-8")
    git(repo, env, "add", ".")
    base.write_text("optim:\n  lr: 3.0e-6\n", encoding="utf-8")  # the working tree is clean
    assert trimtab(repo, env, "check").returncode == 0
    r = trimtab(repo, env, "check", "--staged")
    assert r.returncode == 1
    assert "bases/optim.yaml:2:7: warning YML-3 optim.lr = 3e-6" in r.stdout
    assert "trimtab-staged" not in r.stdout + r.stderr
