"""OPT rules: learning rate, schedule, durability (including the cross-file rule), seed."""
from __future__ import annotations

from pathlib import Path

import pytest

from support import check_json, run_cli
from support import check_fixtures as check, fx, noisy, places

BAD = [
    ("OPT-1", ["bad.yaml"], [("bad.yaml", 15, 7, "warning"), ("bad.yaml", 31, 7, "error"),
                             ("bad.yaml", 39, 7, "error"), ("bad.yaml", 49, 7, "warning")]),
    ("OPT-2", ["bad.yaml"], [("bad.yaml", 17, 17, "warning")]),
    ("OPT-3", ["bad.yaml"], [("bad.yaml", 19, 10, "warning"), ("bad.yaml", 38, 13, "warning")]),
    ("OPT-5", ["bad.yaml"], [("bad.yaml", 3, 14, "note")]),
]
GOOD = [("OPT-1", "good.yaml"), ("OPT-2", "good.yaml"), ("OPT-3", "good.yaml"), ("OPT-5", "good.yaml")]


@pytest.mark.parametrize("rule_id,names,expected", BAD, ids=[r for r, _n, _e in BAD])
def test_bad_fixture_fires_at_the_line(rule_id, names, expected):
    assert places(check(rule_id, *names), rule_id) == expected


@pytest.mark.parametrize("rule_id,name", GOOD, ids=[r for r, _n in GOOD])
def test_good_fixture_is_silent(rule_id, name):
    assert noisy(check(rule_id, name)) == []


def test_checkpoint_option_long_run_steps(tmp_path):
    (tmp_path / "trimtab.toml").write_text('[rules."OPT-3"]\nlong_run_steps = 5000\n')
    (tmp_path / "b.yaml").write_text(fx("OPT-3", "bad.yaml").read_text())
    r = check_json(tmp_path / "b.yaml", cwd=tmp_path)
    assert places(r, "OPT-3") == [("b.yaml", 19, 10, "warning")]  # 2000 steps is no longer "long"


# --- the cross-file rule ----------------------------------------------------------------------
def _shared(*names, jobs=None):
    """The named OPT-4 fixtures, alone in a repository of their own: a check of some files judges
    them against every run of the repository (issue 19), so the set of runs is the repository."""
    import shutil
    import tempfile

    repo = Path(tempfile.mkdtemp(prefix="trimtab-opt4-"))
    (repo / ".git").mkdir()
    for n in names:
        shutil.copyfile(fx("OPT-4", n), repo / n)
    args = ("--jobs", str(jobs)) if jobs else ()
    try:
        r = check_json(*[repo / n for n in names], args=args, cwd=repo)
        assert r.code in (0, 1), r.err
        return r
    finally:
        shutil.rmtree(repo, ignore_errors=True)


def _summary(result):
    return [(f["rule"], f["location"]["path"], f["location"]["line"], f["location"]["col"], f["message"],
             [(x["path"], x["line"], x["col"], x.get("message")) for x in f["related"]], f["fingerprint"])
            for f in result.findings]


def test_two_runs_sharing_a_checkpoint_dir_are_both_reported_each_pointing_at_the_other():
    r = _shared("bad-a.yaml", "bad-b.yaml")
    assert places(r, "OPT-4") == [("bad-a.yaml", 19, 8, "warning"), ("bad-b.yaml", 19, 8, "warning")]
    a, b = r.of("OPT-4")
    assert [(Path(x["path"]).name, x["line"], x["col"]) for x in a["related"]] == [("bad-b.yaml", 19, 8)]
    assert [(Path(x["path"]).name, x["line"], x["col"]) for x in b["related"]] == [("bad-a.yaml", 19, 8)]
    # ./checkpoints/wren-7b-tidepool/ and checkpoints/wren-7b-tidepool are the same directory
    assert "checkpoints/wren-7b-tidepool" in a["message"] and "bad-b.yaml" in a["message"]


def test_a_run_with_only_an_output_dir_takes_part():
    r = _shared("bad-a.yaml", "bad-b.yaml", "bad-c.yaml")
    assert places(r, "OPT-4") == [("bad-a.yaml", 19, 8, "warning"), ("bad-b.yaml", 19, 8, "warning"),
                                  ("bad-b.yaml", 20, 13, "warning"), ("bad-c.yaml", 18, 13, "warning")]


@pytest.mark.parametrize("jobs", [2, 3])
def test_the_result_does_not_depend_on_the_number_of_jobs(jobs):
    one = _shared("bad-a.yaml", "bad-b.yaml", "bad-c.yaml")
    many = _shared("bad-a.yaml", "bad-b.yaml", "bad-c.yaml", jobs=jobs)
    assert one.of("OPT-4") and _summary(many) == _summary(one)
    assert many.code == one.code == 1


def test_a_single_file_has_no_partner():
    assert _shared("bad-a.yaml").of("OPT-4") == []
    assert _shared("bad-a.yaml", jobs=2).of("OPT-4") == []


def test_own_dirs_and_templated_dirs_are_silent():
    r = _shared("good-a.yaml", "good-b.yaml", jobs=2)
    assert noisy(r) == []


def test_two_documents_of_one_file_are_two_runs(tmp_path):
    # the run of bad-a.yaml without the harness's lines after it (# with:, # expect:)
    a = "".join(ln for ln in fx("OPT-4", "bad-a.yaml").read_text().splitlines(True)
                if not ln.startswith(("# with:", "# expect:")))
    p = tmp_path / "two.yaml"
    p.write_text(a + "---\n" + a)
    r = check_json(p)
    assert a.count("\n") == 20  # so the second document's lines are 22..41 (line 21 is '---')
    assert places(r, "OPT-4") == [("two.yaml", 19, 8, "warning"), ("two.yaml", 20, 13, "warning"),
                                  ("two.yaml", 40, 8, "warning"), ("two.yaml", 41, 13, "warning")]
    assert "document 2" in r.of("OPT-4")[0]["related"][0]["message"]


@pytest.mark.parametrize("rule_id", [f"OPT-{n}" for n in range(1, 6)])
def test_rules_command_shows_the_rationale(rule_id):
    from trimtab.engine.registry import Registry

    rule = Registry().rules[rule_id]
    out = run_cli("rules", rule_id).out
    assert rule.rationale in out  # the sources' figures are compared in test_published_values.py


def test_rules_command_names_what_a_rule_needs():
    out = run_cli("rules", "OPT-4").out
    assert "Needs: checkpoint.dir, output.dir" in out


def _accepting_copy(tmp_path):
    for name in ("bad-a.yaml", "bad-b.yaml"):
        (tmp_path / name).write_text(fx("OPT-4", name).read_text())
    a = tmp_path / "bad-a.yaml"
    text = a.read_text()
    line = "  dir: checkpoints/wren-7b-tidepool\n"
    assert line in text
    a.write_text(text.replace(line, line[:-1] + "  # trimtab: accept OPT-4 -- run B resumes from run A's weights\n"))
    return tmp_path


@pytest.mark.parametrize("jobs", [1, 2])
def test_an_acceptance_comment_suppresses_the_cross_file_finding_in_its_own_file(tmp_path, jobs):
    d = _accepting_copy(tmp_path)
    r = check_json(d / "bad-a.yaml", d / "bad-b.yaml", args=("--jobs", str(jobs)), cwd=d)
    assert places(r, "OPT-4") == [("bad-b.yaml", 19, 8, "warning")]  # the other file did not accept it
    assert [f for f in r.findings if f["rule"].startswith("ACC-")] == []


def test_a_cross_file_acceptance_is_not_called_unused_when_its_partner_is_not_checked(tmp_path):
    # A pre-commit run sees only the changed file: the acceptance must not be reported for removal.
    d = _accepting_copy(tmp_path)
    r = check_json(d / "bad-a.yaml", cwd=d)
    assert r.findings == [] and r.code == 0


COMPOSED = fx("OPT-4", "composed")


@pytest.mark.parametrize("jobs", [1, 2])
def test_runs_inheriting_one_directory_from_a_base_get_one_finding_at_the_base_line(jobs):
    r = check_json(COMPOSED / "experiments", args=("--jobs", str(jobs)), cwd=COMPOSED)
    assert places(r, "OPT-4") == [("grpo.yaml", 18, 8, "warning")]
    f = r.of("OPT-4")[0]
    assert f["location"]["path"] == "bases/grpo.yaml"
    # the base is a run config of the repository too (as in a full check, which names the same three runs)
    assert "written to by 3 runs (experiments/one.yaml, experiments/two.yaml, bases/grpo.yaml)" in f["message"]
    assert [(x["path"], x["line"]) for x in f["related"]] == [("experiments/one.yaml", 0), ("experiments/two.yaml", 0)]


def test_an_acceptance_in_the_base_accepts_the_inherited_clash(tmp_path):
    import shutil

    d = tmp_path / "c"
    shutil.copytree(COMPOSED, d)
    (d / ".git").mkdir()
    base = d / "bases" / "grpo.yaml"
    base.write_text(base.read_text().replace(
        "  dir: checkpoints/wren-sweep\n",
        "  dir: checkpoints/wren-sweep  # trimtab: accept OPT-4 -- sweep points resume each other\n"))
    r = check_json(d / "experiments", cwd=d)
    assert r.of("OPT-4") == [] and r.findings == []


def test_shared_dir_of_many_runs_lists_a_bounded_number_of_them(tmp_path):
    """Fifteen runs writing one directory: fifteen findings, each naming ten others and a count of
    the rest, so the report grows linearly with the number of runs."""
    (tmp_path / ".git").mkdir()
    for i in range(15):
        (tmp_path / f"run{i:02d}.yaml").write_text(
            f"run: {{estimator: grpo, name: r{i}, seed: 1}}\nrollout: {{group_size: 8, temperature: 1.0}}\n"
            "batch: {prompts: 64}\ncheckpoint:\n  dir: /ckpt/shared\n")
    r = check_json(tmp_path, args=("--only", "OPT-4"), cwd=tmp_path)
    found = r.of("OPT-4")
    assert len(found) == 15
    assert all(len(f["related"]) == 10 for f in found)
    assert all(f["message"].endswith("and 4 more; the runs overwrite each other's checkpoints and outputs")
               for f in found)
    assert all(f["location"]["line"] == 5 for f in found)


@pytest.mark.parametrize("runs, tail", [(11, "run10.yaml; the runs"), (12, "and 1 more; the runs")])
def test_shared_dir_listing_at_its_bound(tmp_path, runs, tail):
    """At the bound (ten others to name) every partner is listed and no "and 0 more" follows; one
    past it, the count of the rest appears."""
    (tmp_path / ".git").mkdir()
    for i in range(runs):
        (tmp_path / f"run{i:02d}.yaml").write_text(
            f"run: {{estimator: grpo, name: r{i}, seed: 1}}\nrollout: {{group_size: 8, temperature: 1.0}}\n"
            "batch: {prompts: 64}\ncheckpoint:\n  dir: /ckpt/shared\n")
    found = check_json(tmp_path, args=("--only", "OPT-4"), cwd=tmp_path).of("OPT-4")
    assert len(found) == runs
    first = next(f for f in found if f["location"]["path"] == "run00.yaml")
    assert tail in first["message"] and "and 0 more" not in first["message"]
