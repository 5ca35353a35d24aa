"""A hostile repository gets nothing (issue 14, part A: code execution and the file system).

Each test is one attack, built in a temporary git repository by a team that means harm (all
names invented), and asserts the safe outcome: no marker file written by planted code, no file
created or read outside the repository, no hang, no traceback, and the real verdict. Each of
them failed against the code before the fix (commit bb84774), except where a test says it
guards something that already held.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from support import bounded, run_cli

pytestmark = pytest.mark.skipif(shutil.which("git") is None, reason="git is not installed")

# A run config with one warning (YML-2: a key written twice): a gate at "warning" refuses it.
BAD = ("run: {estimator: grpo, seed: 1}\noptim: {kl_coef: 0.04, clip_ratio: 0.2, max_grad_norm: 1.0}\n"
       "rollout:\n  group_size: 8\n  temperature: 0.9\n  temperature: 1.0\n")
GOOD = BAD.replace("  temperature: 1.0\n", "")
OUTSIDE_TOKEN = "OUTSIDE-ONLY-7c41e2"  # bytes of a file outside the repository: never in any output


def _env(tmp: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("GIT_", "PRE_COMMIT", "PYTHON"))}
    env.update({
        "GIT_AUTHOR_NAME": "Bramble Tester", "GIT_AUTHOR_EMAIL": "tester@bramble.invalid",
        "GIT_COMMITTER_NAME": "Bramble Tester", "GIT_COMMITTER_EMAIL": "tester@bramble.invalid",
        "GIT_CONFIG_GLOBAL": str(tmp / "no-global-gitconfig"), "GIT_CONFIG_NOSYSTEM": "1",
        "HOME": str(tmp),
    })
    return env


class Repo:
    def __init__(self, root: Path, env: dict):
        self.root, self.env = root, env

    def git(self, *args: str, check: bool = True) -> subprocess.CompletedProcess:
        return subprocess.run(["git", *args], cwd=self.root, env=self.env, capture_output=True, text=True,
                              check=check, timeout=300)

    def write(self, rel: str, text: str) -> Path:
        p = self.root / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text, encoding="utf-8")
        return p

    def trimtab(self, *args: str):
        """trimtab in this process (fast); the git it calls sees the test's git environment."""
        r = run_cli(*args, cwd=self.root)
        assert "Traceback" not in r.err, r.err
        return r


@pytest.fixture
def repo(tmp_path, monkeypatch):
    root = tmp_path / "bramble-configs"
    root.mkdir()
    env = _env(tmp_path)
    for k in [k for k in os.environ if k.startswith("GIT_")]:
        monkeypatch.delenv(k)
    for k, v in env.items():
        if k.startswith("GIT_"):
            monkeypatch.setenv(k, v)
    r = Repo(root, env)
    r.git("init", "-q")
    r.write("configs/wren.yaml", GOOD)
    r.git("add", ".")
    r.git("commit", "-q", "-m", "start")
    return r


@pytest.fixture
def outside(tmp_path):
    """A folder beside the repository, standing for anywhere else on the disk."""
    out = tmp_path / "elsewhere"
    out.mkdir()
    return out


def _symlink(link: Path, target: Path) -> None:
    try:
        link.symlink_to(target, target_is_directory=target.is_dir())
    except (OSError, NotImplementedError):
        pytest.skip("symbolic links are not available here")


# --- 1. no entry point imports the repository's own files -------------------------------------------
# Each planted module writes a marker and then ends the process with status 0: imported, it would
# both run the repository's code and let a bad commit through.
PLANTED = ["yaml.py", "jsonschema/__init__.py", "pluggy.py", "ruamel/__init__.py", "ruamel/yaml/__init__.py",
           "tomllib.py", "tomli.py", "sitecustomize.py", "usercustomize.py", "importlib_metadata.py",
           "trimtab_rules/__init__.py", "difflib.py", "tempfile.py", "argparse.py"]


def _plant(repo: Repo, markers: Path, names=PLANTED) -> None:
    markers.mkdir(exist_ok=True)
    for rel in names:
        repo.write(rel, f"open({str(markers / rel.replace('/', '_'))!r}, 'w').write('imported')\n"
                        "raise SystemExit(0)\n")
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\n')  # settings: jsonschema and TOML are read


def test_the_installed_git_hook_never_imports_the_repository(repo, tmp_path):
    assert repo.trimtab("install-hook").code == 0
    markers = tmp_path / "markers"
    _plant(repo, markers, PLANTED + ["trimtab/__init__.py", "trimtab/__main__.py"])
    repo.write("configs/wren.yaml", BAD)
    repo.git("add", ".")
    r = repo.git("commit", "-m", "planted modules and a bad config", check=False)
    assert sorted(p.name for p in markers.iterdir()) == [], "the hook imported the repository's own code"
    assert r.returncode != 0, "the bad config was committed"
    assert "configs/wren.yaml:6:3: warning YML-2" in r.stdout + r.stderr


def _console_script() -> str:
    near = Path(sys.executable).with_name("trimtab")
    found = str(near) if near.exists() else shutil.which("trimtab")
    if not found:
        pytest.skip("the trimtab command is not installed next to this Python")
    return found


# python -m trimtab failed before the fix (a committed yaml.py or jsonschema/ ran); the console
# script already started safely (its own folder, not the working one, heads the import path):
# it is kept here so that it stays so.
@pytest.mark.parametrize("entry", ["python -m trimtab", "console script"])
def test_no_entry_point_imports_the_repository(repo, tmp_path, entry):
    markers = tmp_path / "markers"
    _plant(repo, markers)
    repo.write("configs/wren.yaml", BAD)
    cmd = [sys.executable, "-m", "trimtab"] if entry == "python -m trimtab" else [_console_script()]
    r = subprocess.run([*cmd, "check", "--format", "json"], cwd=repo.root, env=repo.env, capture_output=True,
                       text=True, timeout=300)
    assert sorted(p.name for p in markers.iterdir()) == [], r.stderr
    assert r.returncode == 1, r.stderr
    assert [f["rule"] for f in json.loads(r.stdout)["findings"]] == ["YML-2"]


# --- 2. every path from the settings is confined to the repository -----------------------------------
def test_staged_accepted_setting_never_writes_outside(repo, outside):
    """The attack that dropped a sitecustomize.py into site-packages: the index holds a link
    ``drop.yaml`` to the target folder (exported into the staged mirror as a link, for its name),
    the working tree a real folder of that name holding the file, and the accepted setting names
    it. Copying it into the staged mirror wrote through the link."""
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\naccepted = "drop.yaml/sitecustomize.py"\n')
    _symlink(repo.root / "drop.yaml", outside)
    repo.git("add", ".")
    repo.git("commit", "-q", "-m", "a link")
    (repo.root / "drop.yaml").unlink()
    repo.write("drop.yaml/sitecustomize.py", "print('planted')\n")  # the working tree: a real folder
    repo.write("configs/wren.yaml", BAD)
    repo.git("add", "configs/wren.yaml")
    r = repo.trimtab("check", "--staged")
    assert list(outside.iterdir()) == [], "check --staged created a file outside the repository"
    assert r.code == 2 and "accepted" in r.err and "outside the repository" in r.err, r.err


@pytest.mark.parametrize("how", ["dot-dot", "absolute", "link"])
def test_staged_accepted_setting_that_leaves_the_repository_is_refused(repo, outside, how):
    target = outside / "accepted.json"
    target.write_text(json.dumps({"trimtab_accepted": 1, "findings": [], "note": OUTSIDE_TOKEN}))
    if how == "link":
        _symlink(repo.root / "acc.json", target)
        name = "acc.json"
    else:
        name = target.as_posix() if how == "absolute" else os.path.relpath(target, repo.root)
    repo.write("trimtab.toml", f'include = ["configs/*.yaml"]\naccepted = {json.dumps(name)}\n')
    repo.write("configs/wren.yaml", BAD)
    repo.git("add", "trimtab.toml", "configs/wren.yaml")
    for args in (("check", "--staged"), ("check",)):
        r = repo.trimtab(*args)
        assert r.code == 2 and "accepted" in r.err and "outside" in r.err, (args, r.err)
        assert OUTSIDE_TOKEN not in r.out + r.err


def test_staged_link_out_of_the_repository_is_refused(repo, outside):
    secret = outside / "elsewhere.yaml"
    secret.write_text(BAD.replace("grpo", OUTSIDE_TOKEN))
    _symlink(repo.root / "configs" / "leak.yaml", secret)
    repo.git("add", "configs/leak.yaml")
    r = repo.trimtab("check", "--staged", "--format", "json")
    assert OUTSIDE_TOKEN not in r.out + r.err
    found = json.loads(r.out)["findings"]
    assert [(f["rule"], f["location"]["path"]) for f in found] == [("YML-6", "configs/leak.yaml")]
    assert "outside the repository" in found[0]["message"]
    assert r.code == 1
    # a plain check refuses the same link the same way
    plain = json.loads(repo.trimtab("check", "--format", "json").out)["findings"]
    assert [(f["rule"], f["location"]["path"]) for f in plain] == [("YML-6", "configs/leak.yaml")]


OVERRIDES = "rollout:\n  temperature: 0.7\nnote: " + OUTSIDE_TOKEN + "\n"


@pytest.mark.parametrize("how", ["dot-dot", "absolute", "link"])
@pytest.mark.parametrize("command", ["check", "explain", "audit", "check --fix"])
def test_overrides_outside_the_repository_are_refused_by_every_command(repo, outside, how, command):
    target = outside / "overrides.yaml"
    target.write_text(OVERRIDES)
    before = target.read_bytes()
    if how == "link":
        _symlink(repo.root / "over.yaml", target)
        name = "over.yaml"
    else:
        name = target.as_posix() if how == "absolute" else os.path.relpath(target, repo.root)
    repo.write("trimtab.toml", f'include = ["configs/*.yaml"]\noverrides = {json.dumps(name)}\n')
    args = {"check": ["check"], "explain": ["explain", "configs/wren.yaml"],
            "audit": ["audit", "configs", "--html", "page.html"], "check --fix": ["check", "--fix"]}[command]
    r = repo.trimtab(*args)
    assert r.code == 2, (r.code, r.err)
    assert "overrides" in r.err and "outside" in r.err, r.err
    assert OUTSIDE_TOKEN not in r.out + r.err
    assert target.read_bytes() == before
    assert not (repo.root / "page.html").exists()


@pytest.mark.parametrize("what", ["/dev/zero", "/dev/stdin", "named pipe"])
def test_accepted_setting_naming_a_device_or_pipe_never_hangs(repo, what):
    name = what
    if what == "named pipe":
        if not hasattr(os, "mkfifo"):
            pytest.skip("no named pipes here")
        os.mkfifo(repo.root / "accepted.fifo")
        name = "accepted.fifo"
    repo.write("trimtab.toml", f'include = ["configs/*.yaml"]\naccepted = {json.dumps(name)}\n')
    with bounded(20, "a check with an accepted-findings file that is not a regular file"):
        r = repo.trimtab("check")
    assert r.code == 2 and "accepted" in r.err, r.err
    assert "outside the repository" in r.err or "not a regular file" in r.err, r.err


def test_dependant_search_never_blocks_on_a_named_pipe(repo):
    if not hasattr(os, "mkfifo"):
        pytest.skip("no named pipes here")
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\nbases_key = "inherit"\n')
    repo.write("configs/base.yaml", "rollout:\n  group_size: 8\n")
    repo.write("configs/wren.yaml", "inherit: base.yaml\n" + GOOD.replace("  group_size: 8\n", ""))
    os.mkfifo(repo.root / "configs" / "zz-pipe.yaml")
    with bounded(20, "the search for configs built on a base"):
        r = repo.trimtab("check", "--format", "json", "configs/base.yaml")
    assert r.code == 0, r.err
    assert json.loads(r.out)["summary"]["files"] == 2  # the base and the run built on it


# --- 3. git, discovery and written files ----------------------------------------------------------------
ODD_NAMES = ["tab\there.yaml", 'quote"d.yaml', "ünïcode-wren.yaml", "back\\slash.yaml"]


def test_since_checks_files_with_any_character_in_their_name(repo):
    for name in ODD_NAMES:
        repo.write(f"configs/{name}", GOOD)
    repo.git("add", ".")
    repo.git("commit", "-q", "-m", "odd names")
    for name in ODD_NAMES:
        repo.write(f"configs/{name}", BAD)
    r = repo.trimtab("check", "--format", "json", "--since", "HEAD")
    assert sorted({f["location"]["path"] for f in json.loads(r.out)["findings"]}) == sorted(
        f"configs/{n}" for n in ODD_NAMES)
    assert r.code == 1


def test_a_newline_in_a_folder_name_does_not_hide_a_config(repo):
    try:
        repo.write("configs/line\nbreak/wren.yaml", BAD)
    except OSError:
        pytest.skip("this file system refuses a newline in a name")
    r = repo.trimtab("check", "--format", "json")
    assert [f["location"]["path"] for f in json.loads(r.out)["findings"]] == ["configs/line\nbreak/wren.yaml"]
    assert r.code == 1


@pytest.mark.parametrize("ref", ["--output=planted.txt", "-p"])
def test_since_never_reaches_git_as_an_option(repo, ref):
    r = repo.trimtab("check", f"--since={ref}")
    assert r.code == 2 and "--since" in r.err, r.err
    assert not (repo.root / "planted.txt").exists()


def test_a_report_never_overwrites_a_config_built_on_a_checked_base(repo):
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\nbases_key = "inherit"\n')
    repo.write("configs/base.yaml", "rollout:\n  group_size: 8\n")
    run = repo.write("configs/wren.yaml", "inherit: base.yaml\n" + GOOD.replace("  group_size: 8\n", ""))
    before = run.read_bytes()
    for option in ("--output", "--write-accepted"):
        r = repo.trimtab("check", "configs/base.yaml", option, "configs/wren.yaml")
        assert r.code == 2 and "not overwritten" in r.err, r.err
        assert run.read_bytes() == before


def test_jobs_from_the_settings_are_capped_at_the_machine(repo, monkeypatch):
    import concurrent.futures

    asked = []

    class Recording(concurrent.futures.ThreadPoolExecutor):  # no processes: just what was asked for
        def __init__(self, max_workers=None, mp_context=None):
            asked.append(max_workers)
            super().__init__(max_workers=1)

    monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", Recording)
    for i in range(4):
        repo.write(f"configs/run{i}.yaml", GOOD)
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\njobs = 300\n')
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    assert repo.trimtab("check").code == 0
    assert asked == [] or asked[-1] <= cores, asked
    # given on the command line, the number is the user's own
    asked.clear()
    assert repo.trimtab("check", "--jobs", "7").code == 0
    assert asked == [7]


@pytest.mark.parametrize("command", ["explain", "map"])
@pytest.mark.parametrize("how", ["file link", "folder link"])
def test_explain_and_map_refuse_a_link_out_of_the_repository(repo, outside, command, how):
    (outside / "run.yaml").write_text(GOOD.replace("grpo", OUTSIDE_TOKEN))
    if how == "file link":
        _symlink(repo.root / "configs" / "linked.yaml", outside / "run.yaml")
        given = "configs/linked.yaml"
    else:
        _symlink(repo.root / "configs" / "shelf", outside)
        given = "configs/shelf/run.yaml"
    r = repo.trimtab(command, given)
    assert r.code == 2, (r.code, r.out, r.err)
    assert "outside the repository" in r.err
    assert OUTSIDE_TOKEN not in r.out + r.err


def test_an_interrupted_report_leaves_the_earlier_one_whole(repo, monkeypatch):
    repo.write("configs/wren.yaml", BAD)
    report = repo.root / "report.json"
    assert repo.trimtab("check", "--format", "json", "--output", "report.json").code == 1
    earlier = report.read_bytes()
    from trimtab.report import text as reports

    def broken(findings, summary, code, out):
        out.write('{"tool": "trimtab", "half')
        raise RuntimeError("the disk filled up half-way")

    monkeypatch.setattr(reports, "json_report", broken)
    with pytest.raises(RuntimeError):
        run_cli("check", "--format", "json", "--output", "report.json", cwd=repo.root)
    assert report.read_bytes() == earlier
    assert [p.name for p in repo.root.iterdir() if p.name.startswith(".report")] == []  # no temporary left


def test_a_fix_through_a_link_in_the_repository_keeps_the_link(repo):
    """Written atomically (a temporary file renamed over the file), a fix still lands in the file a
    link in the repository points to, and the link stays a link (this held before; kept so)."""
    real = repo.write("configs/real.yaml", GOOD.replace("0.9", "9e-1"))
    os.chmod(real, 0o640)
    _symlink(repo.root / "configs" / "alias.yaml", Path("real.yaml"))
    r = repo.trimtab("check", "--fix", "configs/alias.yaml")
    assert (repo.root / "configs" / "alias.yaml").is_symlink()
    assert real.stat().st_mode & 0o777 == 0o640
    assert "Traceback" not in r.err


@pytest.mark.parametrize("how", ["dot-dot", "absolute", "link"])
def test_a_layers_base_outside_the_repository_is_refused_unread(repo, outside, how):
    """Bases named in the settings' layers go through the same rule (this held before; kept so)."""
    target = outside / "base.yaml"
    target.write_text("optim:\n  lr: 1.0e-6\nnote: " + OUTSIDE_TOKEN + "\n")
    if how == "link":
        _symlink(repo.root / "shared-base.yaml", target)
        name = "shared-base.yaml"
    else:
        name = target.as_posix() if how == "absolute" else os.path.relpath(target, repo.root)
    repo.write("trimtab.toml", 'include = ["configs/*.yaml"]\n[[layers]]\nfiles = "configs/*.yaml"\n'
                               f"bases = [{json.dumps(name)}]\n")
    r = repo.trimtab("check", "--format", "json")
    assert OUTSIDE_TOKEN not in r.out + r.err
    msgs = [f["message"] for f in json.loads(r.out)["findings"]]
    assert any("outside the repository" in m for m in msgs), msgs
