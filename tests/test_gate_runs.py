"""Gate integrity over a subset of files (issue 19 items 1, 2, 4): the pre-commit framework's
parallel batches, --staged and --since give the verdict a full check gives."""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from support import FIXTURES, check_json, run_cli

RUN = """\
run: {{estimator: grpo, seed: 1, ref_model: ./weights/base}}
optim: {{max_grad_norm: 1.0, clip_ratio: 0.2}}
rollout:
  group_size: 8
  temperature: 0.9
batch:
  prompts: 64
kl:
  coef: 0.04
checkpoint:
  dir: {ckpt}
"""
SETTINGS = '[tool.trimtab]\ninclude = ["configs/**/*.yaml"]\n'


def _git_env(tmp_path: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("GIT_", "PRE_COMMIT"))}
    env.update(GIT_AUTHOR_NAME="Test", GIT_AUTHOR_EMAIL="test@example.invalid",
               GIT_COMMITTER_NAME="Test", GIT_COMMITTER_EMAIL="test@example.invalid",
               HOME=str(tmp_path / "home"), XDG_CACHE_HOME=str(tmp_path / "home" / ".cache"))
    (tmp_path / "home").mkdir(exist_ok=True)
    return env


@pytest.fixture
def repo(tmp_path, monkeypatch):
    """A git repository of ten run configs; sweep-a and sweep-c share a checkpoint directory."""
    if shutil.which("git") is None:
        pytest.skip("git not installed")
    env = _git_env(tmp_path)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    work = tmp_path / "team"
    (work / "configs").mkdir(parents=True)
    (work / "pyproject.toml").write_text(SETTINGS, encoding="utf-8")
    for name in "abcdefghij":
        ckpt = "/ckpt/tidepool-shared" if name in "ac" else f"/ckpt/tidepool-{name}"
        (work / "configs" / f"sweep-{name}.yaml").write_text(RUN.format(ckpt=ckpt), encoding="utf-8")
    git(work, "init", "-q")
    git(work, "add", "-A")
    git(work, "commit", "-q", "-m", "sweeps")
    return work


def git(work: Path, *args: str) -> str:
    r = subprocess.run(["git", *args], cwd=work, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, (args, r.stderr)
    return r.stdout


def opt4(res) -> list[str]:
    return sorted(f["location"]["path"] for f in res.of("OPT-4"))


def test_full_check_reports_both_runs_of_the_clash(repo):
    full = check_json(cwd=repo)
    assert full.code == 1 and opt4(full) == ["configs/sweep-a.yaml", "configs/sweep-c.yaml"]


def test_one_file_given_is_judged_against_every_run_of_the_repository(repo):
    res = check_json("configs/sweep-c.yaml", cwd=repo)
    # only the finding about the file given; its related location names the other run
    assert res.code == 1 and opt4(res) == ["configs/sweep-c.yaml"]
    (f,) = res.of("OPT-4")
    assert "configs/sweep-a.yaml" in f["message"]
    assert opt4(check_json("configs/sweep-b.yaml", cwd=repo)) == []
    # the cache is in git's own directory, never in the working tree
    cached = list((repo / ".git" / "trimtab").glob("runs-*.json"))
    assert len(cached) == 1
    assert git(repo, "status", "--porcelain", "--untracked-files=all") == ""
    # warm, and with a cache that cannot be read: the same verdict
    assert opt4(check_json("configs/sweep-c.yaml", cwd=repo)) == ["configs/sweep-c.yaml"]
    cached[0].write_text("{not json", encoding="utf-8")
    assert opt4(check_json("configs/sweep-c.yaml", cwd=repo)) == ["configs/sweep-c.yaml"]
    cached[0].write_text(json.dumps({"version": 1, "stamp": "x", "files": []}), encoding="utf-8")
    assert opt4(check_json("configs/sweep-c.yaml", cwd=repo)) == ["configs/sweep-c.yaml"]


def test_cache_follows_a_changed_file(repo):
    assert opt4(check_json("configs/sweep-d.yaml", cwd=repo)) == []
    # sweep-f now writes where sweep-d writes: a cached sweep-f must not hide it
    (repo / "configs" / "sweep-f.yaml").write_text(RUN.format(ckpt="/ckpt/tidepool-d"), encoding="utf-8")
    assert opt4(check_json("configs/sweep-d.yaml", cwd=repo)) == ["configs/sweep-d.yaml"]


def test_since_and_staged_give_the_full_verdict(repo):
    path = repo / "configs" / "sweep-c.yaml"
    path.write_text("# retuned\n" + path.read_text(encoding="utf-8"), encoding="utf-8")
    since = check_json(args=["--since", "HEAD"], cwd=repo)
    assert since.code == 1 and opt4(since) == ["configs/sweep-c.yaml"]
    git(repo, "add", "configs/sweep-c.yaml")
    staged = check_json(args=["--staged"], cwd=repo)
    assert staged.code == 1 and opt4(staged) == ["configs/sweep-c.yaml"]


def test_pre_commit_parallel_batches_give_the_full_verdict(repo, tmp_path):
    """A real `pre-commit run --all-files` with a local hook that runs this checkout's trimtab,
    without network; the framework splits the ten files across parallel processes (on two CPUs:
    sweep-a in one batch of five, sweep-c in the other, as its fixed shuffle falls)."""
    trimtab = Path(sys.executable).parent / "trimtab"
    if not trimtab.exists():
        pytest.skip(f"{trimtab} not installed")
    pytest.importorskip("pre_commit")
    (repo / ".pre-commit-config.yaml").write_text(f"""\
repos:
  - repo: local
    hooks:
      - id: trimtab
        name: trimtab
        entry: {trimtab} check
        language: system
        types_or: [yaml, json]
        exclude: ^\\.pre-commit-config\\.yaml$
        require_serial: false
""", encoding="utf-8")
    git(repo, "add", ".pre-commit-config.yaml")
    env = dict(os.environ, PRE_COMMIT_HOME=str(tmp_path / "pre-commit-home"))
    res = subprocess.run([sys.executable, "-m", "pre_commit", "run", "--all-files", "--verbose"], cwd=repo,
                         env=env, capture_output=True, text=True, timeout=600)
    out = res.stdout + res.stderr
    assert res.returncode == 1, out
    assert "configs/sweep-a.yaml" in out and "configs/sweep-c.yaml" in out and "OPT-4" in out, out
    # the framework did split the files: more than one trimtab summary line
    assert out.count("file(s) checked") >= 2, out


# --- item 2: a deleted or renamed base ----------------------------------------------------------
BASE_SETTINGS = '[tool.trimtab]\ninclude = ["configs/**/*.yaml"]\nbases_key = "inherit"\n'
BASE = RUN.format(ckpt="/ckpt/heron-base")
EXPERIMENT = "inherit: bases/grpo.yaml\nrollout:\n  group_size: 16\n"


@pytest.fixture
def layered(tmp_path, monkeypatch):
    if shutil.which("git") is None:
        pytest.skip("git not installed")
    for k, v in _git_env(tmp_path).items():
        monkeypatch.setenv(k, v)
    work = tmp_path / "layered"
    (work / "configs" / "bases").mkdir(parents=True)
    (work / "pyproject.toml").write_text(BASE_SETTINGS, encoding="utf-8")
    (work / "configs" / "bases" / "grpo.yaml").write_text(BASE, encoding="utf-8")
    (work / "configs" / "heron-wide.yaml").write_text(EXPERIMENT, encoding="utf-8")
    git(work, "init", "-q")
    git(work, "add", "-A")
    git(work, "commit", "-q", "-m", "layered")
    assert not check_json(cwd=work).of("CMP-3")
    return work


@pytest.mark.parametrize("how", ["rm", "mv"])
def test_deleted_or_renamed_base_fails_staged_and_since(layered, how):
    if how == "rm":
        git(layered, "rm", "-q", "configs/bases/grpo.yaml")
    else:
        git(layered, "mv", "configs/bases/grpo.yaml", "configs/bases/grpo-v2.yaml")
    full = check_json(cwd=layered)
    assert full.code == 1 and [f["location"]["path"] for f in full.of("CMP-3")] == ["configs/heron-wide.yaml"]
    staged = check_json(args=["--staged"], cwd=layered)
    assert staged.code == 1, staged.err
    assert [f["location"]["path"] for f in staged.of("CMP-3")] == ["configs/heron-wide.yaml"]
    since = check_json(args=["--since", "HEAD"], cwd=layered)
    assert since.code == 1 and [f["location"]["path"] for f in since.of("CMP-3")] == ["configs/heron-wide.yaml"]


def test_pre_commit_delete_only_commit_checks_the_configs_built_on_the_base(layered, tmp_path):
    """A real `pre-commit run` of a commit that only deletes a base: the framework passes no file
    (it lists added, copied, modified and renamed files only), so the hook runs because the
    manifest says always_run, and its entry checks the configs built on the deleted file. The hook
    is this checkout's manifest entry, run as a local hook with this environment's trimtab."""
    import yaml

    trimtab = Path(sys.executable).parent / "trimtab"
    if not trimtab.exists():
        pytest.skip(f"{trimtab} not installed")
    pytest.importorskip("pre_commit")
    (hook,) = yaml.safe_load((Path(__file__).resolve().parents[1] / ".pre-commit-hooks.yaml").read_text())
    assert hook["always_run"] is True and hook["entry"].startswith("trimtab check")
    entry = str(trimtab) + hook["entry"][len("trimtab"):]
    (layered / ".pre-commit-config.yaml").write_text(yaml.safe_dump({"repos": [{"repo": "local", "hooks": [{
        "id": "trimtab", "name": "trimtab", "entry": entry, "language": "system", "types_or": hook["types_or"],
        "always_run": hook["always_run"], "require_serial": hook["require_serial"]}]}]}), encoding="utf-8")
    git(layered, "add", ".pre-commit-config.yaml")
    git(layered, "commit", "-q", "-m", "hook")
    env = dict(os.environ, PRE_COMMIT_HOME=str(tmp_path / "pre-commit-home"))

    def pre_commit():
        res = subprocess.run([sys.executable, "-m", "pre_commit", "run", "--verbose"], cwd=layered, env=env,
                             capture_output=True, text=True, timeout=600)
        return res.returncode, res.stdout + res.stderr

    code, out = pre_commit()  # nothing staged: nothing to check, and the hook says so
    assert code == 0 and "0 file(s) checked" in out, out
    git(layered, "rm", "-q", "configs/bases/grpo.yaml")
    code, out = pre_commit()
    assert code == 1 and "configs/heron-wide.yaml" in out and "CMP-3" in out, out
    # a commit that deletes the base and changes an unrelated file: the same
    (layered / "configs" / "other.yaml").write_text(BASE, encoding="utf-8")
    git(layered, "add", "configs/other.yaml")
    code, out = pre_commit()
    assert code == 1 and "configs/heron-wide.yaml" in out and "CMP-3" in out, out


# --- item 4: a config trimtab cannot read as a run ----------------------------------------------
VOC4 = FIXTURES / "rules" / "VOC-4"


def test_voc4_a_run_trimtab_cannot_place_is_a_warning_through_the_cli():
    r = run_cli("check", "bad.yaml", cwd=VOC4)
    assert r.code == 1
    assert "bad.yaml:6:14: warning VOC-4 not checked as a run: found run.estimator (recipe.algorithm)" in r.out
    assert "describe the layout with `trimtab map`" in r.out
    assert run_cli("check", "good.yaml", cwd=VOC4).code == 0


def test_voc4_silent_on_a_base_other_files_name(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "trimtab.toml").write_text('bases_key = "inherit"\n', encoding="utf-8")
    (tmp_path / "bases").mkdir()
    (tmp_path / "bases" / "algo.yaml").write_text("algorithm: grpo\n", encoding="utf-8")
    (tmp_path / "exp.yaml").write_text("inherit: bases/algo.yaml\n" + RUN.format(ckpt="/ckpt/x").replace(
        "run: {estimator: grpo, seed: 1, ref_model: ./weights/base}\n", "run: {seed: 1, ref_model: ./weights/base}\n"),
        encoding="utf-8")
    r = check_json(cwd=tmp_path)
    assert not r.of("VOC-4"), r.findings
    # the same file, named by nobody: reported
    (tmp_path / "exp.yaml").unlink()
    r = check_json(cwd=tmp_path)
    assert [f["location"]["path"] for f in r.of("VOC-4")] == ["bases/algo.yaml"]


def test_a_linked_cache_folder_is_never_written_through(repo, tmp_path):
    # threat model: a checked folder may ship its own `.git` contents (an archive rather than a
    # clone); a link at the cache folder must not carry the cache file outside the repository
    outside = tmp_path / "outside"
    outside.mkdir()
    shutil.rmtree(repo / ".git" / "trimtab", ignore_errors=True)
    (repo / ".git" / "trimtab").symlink_to(outside, target_is_directory=True)
    res = check_json("configs/sweep-c.yaml", cwd=repo)
    assert opt4(res) == ["configs/sweep-c.yaml"]  # the verdict holds without a cache
    assert list(outside.iterdir()) == []


# --- item 1's speed: what is cached, and that a cache never hides a change ----------------------
def test_a_file_rewritten_with_its_old_size_and_time_is_read_again(repo):
    """The other runs' content hashes are taken from the cache while a file's status (device, inode,
    size, modification and change times) is unchanged, as git's index does; a rewrite that keeps
    the size and sets the modification time back still changes the change time."""
    import time

    time.sleep(3.2)  # older than the cache's racy window: the statuses of this check are kept
    assert opt4(check_json("configs/sweep-d.yaml", cwd=repo)) == []
    (cached,) = (repo / ".git" / "trimtab").glob("runs-*.json")
    rows = json.loads(cached.read_text(encoding="utf-8"))["files"]
    assert all(len(r["stat"]) == 5 for name, r in rows.items() if name != "configs/sweep-d.yaml")
    f = repo / "configs" / "sweep-f.yaml"
    before = f.stat()
    new = RUN.format(ckpt="/ckpt/tidepool-d")  # now writes where sweep-d writes, in as many bytes
    assert len(new) == before.st_size
    f.write_text(new, encoding="utf-8")
    os.utime(f, ns=(before.st_atime_ns, before.st_mtime_ns))
    assert opt4(check_json("configs/sweep-d.yaml", cwd=repo)) == ["configs/sweep-d.yaml"]


def test_the_bases_each_file_names_are_cached_by_content(layered):
    """The dependant search keeps what each file names in git's own folder, keyed by the file's
    content: a second process, a damaged cache and a changed file give the full check's verdict."""
    def cmp3(res) -> list[str]:
        return [f["location"]["path"] for f in res.of("CMP-3")]

    (layered / "configs" / "bases" / "grpo.yaml").unlink()
    assert cmp3(check_json(args=["--since", "HEAD"], cwd=layered)) == ["configs/heron-wide.yaml"]
    (cached,) = (layered / ".git" / "trimtab").glob("bases-*.json")
    named = json.loads(cached.read_text(encoding="utf-8"))["files"]
    assert [["here", "bases/grpo.yaml"]] in named.values()
    assert cmp3(check_json(args=["--since", "HEAD"], cwd=layered)) == ["configs/heron-wide.yaml"]
    cached.write_text("{damaged", encoding="utf-8")
    assert cmp3(check_json(args=["--since", "HEAD"], cwd=layered)) == ["configs/heron-wide.yaml"]
    # the experiment now builds on another base: the deleted one breaks nothing
    (layered / "configs" / "bases" / "ppo.yaml").write_text(BASE, encoding="utf-8")
    (layered / "configs" / "heron-wide.yaml").write_text(EXPERIMENT.replace("grpo", "ppo"), encoding="utf-8")
    assert cmp3(check_json(args=["--since", "HEAD"], cwd=layered)) == []
    assert git(layered, "status", "--porcelain", "--untracked-files=all", "--", ".git") == ""
