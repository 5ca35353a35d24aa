"""File hygiene (YML) and vocabulary (VOC) rules: each fires on its bad fixture at the named line
and column and is silent on its good fixture."""
import pytest

from support import FIXTURES, check_json

RULES = FIXTURES / "rules"

# (rule, fixture, line, col, words the message must hold)
CASES = [
    ("YML-1", "bad.yaml", 8, 1, "did not find expected ','"),
    ("YML-1", "bad.json", 3, 26, "not valid JSON"),
    ("YML-2", "bad.yaml", 6, 3, "'group_size' is written twice"),
    ("YML-3", "bad.yaml", 7, 7, "optim.lr = 3e-6: YAML 1.1 reads the string '3e-6', YAML 1.2 reads the float"),
    ("YML-3", "bad.yaml", 8, 17, "YAML 1.1 reads the integer 8, YAML 1.2 reads the integer 10"),
    ("YML-3", "bad.yaml", 11, 12, "YAML 1.1 reads the boolean false, YAML 1.2 reads the string 'off'"),
    ("YML-4", "bad.yaml", 2, 16, "not valid UTF-8: byte 0xff"),
    ("YML-5", "bad.yaml", 203, 401, "deeper than 200 levels"),
    ("YML-6", "bad.yaml", 0, 0, "broken symbolic link"),
    ("YML-7", "bad.yaml", 7, 3, "merge key '<<' must refer to a mapping"),
    ("VOC-1", "bad.yaml", 8, 16, "rollout.temperature is ambiguous"),
    ("VOC-2", "bad.yaml", 4, 15, "rollout.group_size = eight: expected an integer"),
    ("VOC-3", "bad.yaml", 3, 10, "run.stage = 'pretrain' is not one of rl, sft, distill"),
    ("VOC-4", "bad.yaml", 6, 14, "not checked as a run: found run.estimator (recipe.algorithm), missing 1 more of"),
]


@pytest.mark.parametrize("rule,name,line,col,words", CASES)
def test_bad_fixture(rule, name, line, col, words):
    folder = RULES / rule
    r = check_json(folder / name, cwd=folder)
    hits = [f for f in r.of(rule) if (f["location"]["line"], f["location"]["col"]) == (line, col)]
    assert hits, r.findings
    assert words in hits[0]["message"]
    # the gate: exit 1 exactly when some finding is at warning level or above (a note alone passes)
    assert r.code == (1 if any(f["level"] != "note" for f in r.findings) else 0)
    assert hits[0]["level"] != "note" or r.code == 0 or any(f["rule"] != rule for f in r.findings
                                                             if f["level"] != "note")


@pytest.mark.parametrize("rule", sorted({c[0] for c in CASES}))
def test_good_fixture_is_silent(rule):
    folder = RULES / rule
    for good in sorted(folder.glob("good.*")):
        r = check_json(good, args=("--only", "YML,VOC"), cwd=folder)
        assert r.findings == [], (good, r.findings)
        assert r.code == 0


def test_duplicate_key_shows_both_lines():
    folder = RULES / "YML-2"
    f = check_json(folder / "bad.yaml", cwd=folder).of("YML-2")[0]
    assert [(x["line"], x["col"]) for x in f["related"]] == [(4, 3)]


def test_version_disagreement_fix_is_offered_for_numbers_only_when_exact():
    folder = RULES / "YML-3"
    r = check_json(folder / "bad.yaml", cwd=folder)
    fixable = {f["location"]["line"]: f["fixable"] for f in r.of("YML-3")}
    assert fixable == {7: True, 8: False, 11: False}


def test_sft_stage_skips_rl_only_rules(tmp_path):
    (tmp_path / ".git").mkdir()
    text = (RULES / "VOC-3" / "bad.yaml").read_text().replace("pretrain", "sft")
    (tmp_path / "sft.yaml").write_text(text + "optim:\n  lr: 3e-6\n")
    r = check_json(tmp_path / "sft.yaml", cwd=tmp_path)
    # YML-3 is not RL-only: a wrongly typed number hurts any stage
    assert r.ids() == ["YML-3"]


def test_plugin_key_map_by_name(tmp_path):
    from trimtab import cli, hookimpl
    from trimtab.engine.registry import Registry

    class Maps:
        @hookimpl
        def trimtab_key_maps(self):
            return {"burrow-trainer": {"rollout.group_size": "gen.per_prompt",
                                       "run.estimator": "algo.kind", "batch.prompts": "data.take"}}

    (tmp_path / ".git").mkdir()
    (tmp_path / "trimtab.toml").write_text('keymap = "burrow-trainer"\n')
    (tmp_path / "r.yaml").write_text("algo:\n  kind: grpo\ngen:\n  per_prompt: eight\ndata:\n  take: 64\n")
    old = cli._registry
    cli._registry = lambda: Registry(plugins=[Maps()])
    try:
        r = check_json(tmp_path / "r.yaml", cwd=tmp_path)
        assert [(f["rule"], f["location"]["line"]) for f in r.findings if f["rule"][:3] in ("YML", "VOC")] == [
            ("VOC-2", 4)]
        (tmp_path / "trimtab.toml").write_text('keymap = "no-such-map"\n')
        r = check_json(tmp_path / "r.yaml", cwd=tmp_path)
        assert r.code == 2 and "keymap" in r.err
    finally:
        cli._registry = old


def test_rules_catalogue_and_one_rule(run):
    r = run("rules")
    assert r.code == 0 and "YML-3" in r.out and "ACC-1" in r.out
    one = run("rules", "yml-3")
    assert one.code == 0 and "YAML 1.2.2 section 10.3.2" in one.out
    assert run("rules", "NOPE-9").code == 2


def test_explain_lists_found_derived_and_missing(run):
    demo = FIXTURES / "demo"
    r = run("explain", "configs/legacy/heron-1b-2025.yaml", cwd=demo)
    assert r.code == 0
    assert "batch.mini" in r.out and "24 as written (per prompt, global) x group size 8" in r.out
    assert "batch.rollouts" in r.out and "64 x 8" in r.out
    assert "Not found:" in r.out and "sandbox.kind" in r.out
