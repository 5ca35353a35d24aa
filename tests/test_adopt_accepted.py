"""The accepted-findings file: record today's findings, fail only on new ones, shrink as configs
are fixed. Uses the foundation's rules YML-2 (duplicate key), YML-3 (YAML 1.1/1.2 disagreement)
and VOC-2 (wrong type)."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from support import FIXTURES
from support import check_json as _check_json

# The optimisation areas (KL, CLP, ALG, OPT) report what these minimal configs leave unstated;
# these tests are about other rules, so they leave those areas out.
OPTIM = ("--skip", "KL,CLP,ALG,OPT")


def check_json(*paths, args=(), cwd=None):
    return _check_json(*paths, args=[*args, *OPTIM], cwd=cwd)

LEGACY = """\
# Lowfield Labs: wren-7b on tidepool arithmetic (an old config)
run:
  estimator: grpo
  seed: abc
rollout:
  group_size: 8
  temperature: 0.9
  temperature: 1.0
optim:
  lr: 3e-6
"""

# The same values, lines moved, sections reordered, indentation and styles changed, comments added.
MOVED = """\


optim:      {lr: 3e-6}     # the old learning rate

rollout:
    # sampling
    temperature: 0.9
    group_size: 8
    temperature: 1.0
run:
    seed:      abc
    estimator: grpo
"""


def repo(tmp_path: Path, text: str = LEGACY) -> Path:
    (tmp_path / ".git").mkdir(exist_ok=True)
    (tmp_path / "configs").mkdir(exist_ok=True)
    (tmp_path / "configs" / "wren-7b.yaml").write_text(text, encoding="utf-8")
    return tmp_path


def found(r) -> list[tuple[str, int, int]]:
    return sorted((f["rule"], f["location"]["line"], f["location"]["col"]) for f in r.findings)


def stale_fp(root: Path, rule_id: str) -> str:
    rows = json.loads((root / "accepted.json").read_text(encoding="utf-8"))["findings"]
    return next(r["fingerprint"] for r in rows if r["rule"] == rule_id)


def test_round_trip(tmp_path):
    root = repo(tmp_path)
    (root / "trimtab.toml").write_text('yaml_version = "1.1"\n', encoding="utf-8")  # YML-3 warns
    before = check_json(cwd=root)
    assert found(before) == [("VOC-2", 4, 9), ("YML-2", 8, 3), ("YML-3", 10, 7)]
    assert before.code == 1

    # write: one entry per finding, with rule, file and a short description
    w = check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    assert w.code == 0 and "recorded 3 accepted finding(s)" in w.err
    data = json.loads((root / "accepted.json").read_text(encoding="utf-8"))
    rows = data["findings"]
    assert [r["rule"] for r in rows] == ["VOC-2", "YML-2", "YML-3"]
    assert {r["file"] for r in rows} == {"configs/wren-7b.yaml"}
    assert rows[2]["what"].startswith("optim.lr = 3e-6: YAML 1.1 reads the string")
    assert {r["fingerprint"] for r in rows} == {f["fingerprint"] for f in before.findings}

    # sorted and stable: writing again gives the same bytes (diffs well in review)
    first = (root / "accepted.json").read_bytes()
    check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    assert (root / "accepted.json").read_bytes() == first

    # re-run clean; the accepted-findings file itself is not checked as a config
    clean = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert clean.findings == [] and clean.code == 0
    assert clean.json["summary"]["files"] == 1

    # move lines and reformat: still clean
    (root / "configs" / "wren-7b.yaml").write_text(MOVED, encoding="utf-8")
    moved = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert moved.findings == [] and moved.code == 0

    # change a value: exactly that finding returns; its old entry is now stale
    (root / "configs" / "wren-7b.yaml").write_text(MOVED.replace("lr: 3e-6", "lr: 5e-6"), encoding="utf-8")
    changed = check_json(args=["--accepted", "accepted.json"], cwd=root)
    live = [f for f in changed.findings if f["rule"] != "ACC-3"]
    assert [(f["rule"], f["location"]["line"], f["location"]["col"]) for f in live] == [("YML-3", 3, 18)]
    assert "optim.lr = 5e-6" in live[0]["message"]
    assert changed.code == 1
    stale = changed.of("ACC-3")
    assert len(stale) == 1 and "YML-3" in stale[0]["message"] and stale[0]["level"] == "note"

    # fix one (the duplicate key): its entry is reported stale, as a note that does not fail the gate
    (root / "configs" / "wren-7b.yaml").write_text(MOVED.replace("    temperature: 1.0\n", ""), encoding="utf-8")
    fixed = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert [f["rule"] for f in fixed.findings] == ["ACC-3"]
    assert "accepted finding YML-2 in configs/wren-7b.yaml no longer occurs" in fixed.findings[0]["message"]
    loc = fixed.findings[0]["location"]
    entry = (root / "accepted.json").read_text().splitlines()[loc["line"] - 1]
    assert (loc["path"], loc["line"], loc["col"]) == ("accepted.json", 11, 7)  # the stale entry's own line
    assert entry.strip().startswith('"fingerprint"') and stale_fp(root, "YML-2") in entry
    assert fixed.code == 0

    # regenerating the file drops the stale entry: the file shrinks
    check_json(args=["--accepted", "accepted.json", "--write-accepted", "accepted.json"], cwd=root)
    assert [r["rule"] for r in json.loads((root / "accepted.json").read_text())["findings"]] == ["VOC-2", "YML-3"]


def test_settings_entry_and_partial_runs(tmp_path):
    root = repo(tmp_path)
    (root / "configs" / "other.yaml").write_text(LEGACY.replace("seed: abc", "seed: 7"), encoding="utf-8")
    check_json(args=["--write-accepted", "known.json"], cwd=root)
    (root / "pyproject.toml").write_text('[tool.trimtab]\naccepted = "known.json"\n', encoding="utf-8")
    r = check_json(cwd=root)
    assert r.findings == [] and r.code == 0

    # a check of one file never calls the other file's entries stale
    (root / "configs" / "wren-7b.yaml").write_text(LEGACY.replace("seed: abc", "seed: 3"), encoding="utf-8")
    one = check_json(root / "configs" / "other.yaml", cwd=root)
    assert one.findings == []
    both = check_json(cwd=root)
    assert [f["rule"] for f in both.findings] == ["ACC-3"]
    assert "VOC-2 in configs/wren-7b.yaml" in both.findings[0]["message"]


def test_a_new_finding_in_an_accepted_file_still_fails(tmp_path):
    root = repo(tmp_path)
    (root / "trimtab.toml").write_text('yaml_version = "1.1"\n', encoding="utf-8")  # YML-3 warns
    check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    (root / "configs" / "wren-7b.yaml").write_text(LEGACY + "kl:\n  coef: 1e-3\n", encoding="utf-8")
    r = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert found(r) == [("YML-3", 12, 9)] and r.code == 1


def test_bad_accepted_file_is_a_clear_error(tmp_path):
    root = repo(tmp_path)
    (root / "accepted.json").write_text("{not json", encoding="utf-8")
    r = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert r.code == 2 and "is not an accepted-findings file" in r.err and "Traceback" not in r.err
    r = check_json(args=["--accepted", "missing.json"], cwd=root)
    assert r.code == 2 and "cannot be read" in r.err


def test_partial_write_keeps_other_files_entries_and_deleted_files_go_stale(tmp_path):
    root = repo(tmp_path)
    (root / "configs" / "other.yaml").write_text(LEGACY, encoding="utf-8")
    check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    rows = json.loads((root / "accepted.json").read_text())["findings"]
    assert len(rows) == 6
    # re-recording one file keeps the other file's entries
    check_json(root / "configs" / "other.yaml", args=["--write-accepted", "accepted.json"], cwd=root)
    assert json.loads((root / "accepted.json").read_text())["findings"] == rows
    # a deleted config's entries are stale, and a full re-recording drops them
    (root / "configs" / "other.yaml").unlink()
    r = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert [f["rule"] for f in r.findings] == ["ACC-3"] * 3
    assert all("configs/other.yaml" in f["message"] for f in r.findings)
    check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    assert {r["file"] for r in json.loads((root / "accepted.json").read_text())["findings"]} == {
        "configs/wren-7b.yaml"}


def test_findings_sharing_a_fingerprint_are_counted(tmp_path):
    # YML-2's fingerprint is the key's name: the same key written twice in two sections gives two
    # findings with one fingerprint. The entry accepts exactly as many as were recorded.
    twice = LEGACY + "eval:\n  temperature: 0.0\n  temperature: 0.1\n"
    root = repo(tmp_path, twice)
    check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    rows = json.loads((root / "accepted.json").read_text())["findings"]
    assert [r.get("count", 1) for r in rows if r["rule"] == "YML-2"] == [2]
    assert check_json(args=["--accepted", "accepted.json"], cwd=root).findings == []
    # a third one is new
    thrice = twice + "judge:\n  temperature: 0.0\n  temperature: 0.2\n"
    (root / "configs" / "wren-7b.yaml").write_text(thrice, encoding="utf-8")
    r = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert found(r) == [("YML-2", 16, 3)] and r.code == 1
    # one fewer: the entry is reported as partly stale
    (root / "configs" / "wren-7b.yaml").write_text(LEGACY, encoding="utf-8")
    r = check_json(args=["--accepted", "accepted.json"], cwd=root)
    assert [f["rule"] for f in r.findings] == ["ACC-3"]
    assert "occurs 1 time(s), not 2" in r.findings[0]["message"]


def test_a_crashed_rule_is_never_recorded(tmp_path, monkeypatch):
    from trimtab import cli, hookimpl, rule
    from trimtab.engine.registry import Registry

    class Crash:
        @hookimpl
        def trimtab_rules(self):
            @rule(id="ZZA-1", name="always-crashes", level="error", summary="test rule", rationale="test rule")
            def crash(ctx):
                raise RuntimeError("boom")

            return [crash]

    monkeypatch.setattr(cli, "_registry", lambda: Registry(plugins=[Crash()]))
    root = repo(tmp_path)
    r = check_json(args=["--write-accepted", "accepted.json"], cwd=root)
    assert r.code == 2 and "incomplete" in r.err
    rules = [row["rule"] for row in json.loads((root / "accepted.json").read_text())["findings"]]
    assert rules == ["VOC-2", "YML-2", "YML-3"]


@pytest.mark.parametrize("name", ["good", "bad"])
def test_stale_entry_fixtures(tmp_path, name):
    """fixtures/rules/ACC-3: the good config still has its accepted finding (nothing reported); in
    the bad one it was fixed, and the stale entry is reported at its line in the accepted file."""
    folder = FIXTURES / "rules" / "ACC-3"
    (tmp_path / ".git").mkdir()
    for suffix in (".yaml", ".accepted.json"):
        shutil.copy(folder / f"{name}{suffix}", tmp_path / f"{name}{suffix}")
    r = check_json(tmp_path / f"{name}.yaml", args=["--accepted", f"{name}.accepted.json"], cwd=tmp_path)
    if name == "good":
        assert r.findings == [] and r.code == 0
    else:
        assert found(r) == [("ACC-3", 5, 7)] and r.code == 0
        assert r.findings[0]["location"]["path"] == "bad.accepted.json"
        assert r.findings[0]["level"] == "note"
