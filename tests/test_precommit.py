"""The hook through the pre-commit framework, end to end: this checkout is installed as a hook
repository (by its .pre-commit-hooks.yaml) in a throwaway git repository; a commit of a config
with a defect is refused with the located finding, a clean one passes, and a commit that only
deletes a base the other configs build on is refused."""
from __future__ import annotations

import os
import shutil
import subprocess
import sys

import pytest

from support import REPO, RUN_CONFIG

BAD = RUN_CONFIG + "  coef: 0.4\n"  # a duplicate key in the kl section RUN_CONFIG ends with
GOOD = BAD.replace("  coef: 0.4\n", "")


def _env(tmp_path):
    env = {k: v for k, v in os.environ.items() if not k.startswith(("GIT_", "PRE_COMMIT"))}
    env.update(GIT_AUTHOR_NAME="Test", GIT_AUTHOR_EMAIL="test@example.invalid",
               GIT_COMMITTER_NAME="Test", GIT_COMMITTER_EMAIL="test@example.invalid",
               PRE_COMMIT_HOME=str(tmp_path / "pre-commit-home"), HOME=str(tmp_path / "home"))
    (tmp_path / "home").mkdir()
    return env


def _head() -> str:
    out = subprocess.run(["git", "rev-parse", "HEAD"], cwd=REPO, capture_output=True, text=True)
    if out.returncode:
        pytest.skip("this checkout is not a git repository with a commit; pre-commit needs one")
    return out.stdout.strip()


def test_commit_refused_with_located_finding_then_clean_commit_passes(tmp_path):
    if shutil.which("git") is None:
        pytest.skip("git not installed")
    rev = _head()
    env = _env(tmp_path)
    work = tmp_path / "team-repo"
    work.mkdir()

    def sh(*args, check=True):
        r = subprocess.run(list(args), cwd=work, env=env, capture_output=True, text=True, timeout=900)
        if check and r.returncode:
            raise AssertionError(f"{args} failed: {r.stdout}\n{r.stderr}")
        return r

    sh("git", "init", "-q")
    (work / ".pre-commit-config.yaml").write_text(
        f"repos:\n  - repo: {REPO.as_posix()}\n    rev: {rev}\n    hooks:\n      - id: trimtab\n")
    sh("git", "add", ".pre-commit-config.yaml")
    sh(sys.executable, "-m", "pre_commit", "install")
    # modules the repository plants in the hope that the hook imports them instead of the real
    # ones (issue 14): each writes a marker and exits 0, which would also let the bad commit through.
    # (Only modules the framework's own launcher does not import itself: it starts from the
    # repository's top with the folder on its import path; that is the framework's matter.)
    markers = tmp_path / "markers"
    markers.mkdir()
    for rel in ("jsonschema/__init__.py", "pluggy.py", "ruamel/__init__.py", "trimtab/__init__.py",
                "trimtab/__main__.py", "trimtab_rules/__init__.py", "tomllib.py"):
        (work / rel).parent.mkdir(parents=True, exist_ok=True)
        (work / rel).write_text(f"open({str(markers / rel.replace('/', '_'))!r}, 'w').write('imported')\n"
                                "raise SystemExit(0)\n")
    (work / "run.yaml").write_text(BAD)
    sh("git", "add", "run.yaml")
    refused = sh("git", "commit", "-qm", "bad config", check=False)
    output = refused.stdout + refused.stderr
    assert refused.returncode != 0, output
    assert "run.yaml:10:3: warning YML-2 key 'coef' is written twice" in output, output
    assert sorted(p.name for p in markers.iterdir()) == [], "the hook imported the repository's own code"
    (work / "run.yaml").write_text(GOOD)
    sh("git", "add", "run.yaml")
    passed = sh("git", "commit", "-qm", "clean config", check=False)
    assert passed.returncode == 0, passed.stdout + passed.stderr
    # a commit that only deletes a base (issue 19): the framework passes the hook no file; the
    # manifest runs it anyway and its entry checks again the configs built on the deleted base
    (work / "trimtab.toml").write_text('bases_key = "inherit"\n')
    (work / "bases").mkdir()
    (work / "bases" / "grpo.yaml").write_text(GOOD)
    (work / "wide.yaml").write_text("inherit: bases/grpo.yaml\nrun:\n  seed: 2\n")
    sh("git", "add", "trimtab.toml", "bases/grpo.yaml", "wide.yaml")
    layered = sh("git", "commit", "-qm", "layered", check=False)
    assert layered.returncode == 0, layered.stdout + layered.stderr
    sh("git", "rm", "-q", "bases/grpo.yaml")
    refused = sh("git", "commit", "-qm", "drop the base", check=False)
    output = refused.stdout + refused.stderr
    assert refused.returncode != 0 and "wide.yaml" in output and "CMP-3" in output, output
