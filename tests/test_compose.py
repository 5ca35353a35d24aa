"""Composition: bases, the deletion marker, ``${...}`` references, overrides, origin chains,
the CMP rules, and re-checking the runs built on a changed base."""
from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest
from hypothesis import given, settings as hsettings, strategies as st

from support import FIXTURES, check_json, run_cli, shared_path
from trimtab import hookimpl, rule
from trimtab.gate.runner import CheckOptions, Checker, run
from trimtab.load.discover import discover
from trimtab.engine.registry import Registry
from trimtab.common.settings import load as load_settings

COMPOSE = FIXTURES / "compose"
RULES = FIXTURES / "rules"


# --- a test-only rule: the rollouts of a step split into whole mini-batches ------------------------
@rule(id="TST-1", name="rollouts-split-into-mini-batches", level="error", summary="test only",
      rationale="test only: rollouts = prompts x group size must divide into mini-batches", needs=("batch.rollouts", "batch.mini"))
def _split(ctx):
    m = ctx.model
    rollouts, mini = m.int("batch.rollouts"), m.int("batch.mini")
    if rollouts % mini:
        yield ctx.finding(f"{rollouts} completions per step do not split into mini-batches of {mini}: "
                          f"{rollouts} = {rollouts // mini}x{mini} + {rollouts % mini}", m.loc("batch.mini"),
                          related=[m.loc("batch.prompts", "prompts per step"),
                                   m.loc("rollout.group_size", "completions per prompt")], subject=rollouts)


class _TestPlugin:
    @hookimpl
    def trimtab_rules(self):
        return [_split]


def check_dir(folder: Path, paths=(), overrides=()):
    """Check files of a fixture repository in process, with the test-only rule registered."""
    settings = load_settings(start=folder)
    checker = Checker(settings, Registry(plugins=[_TestPlugin()]), CheckOptions(overrides=list(overrides)))
    files, missing = discover([str(folder / p) for p in paths], settings.root, settings.include,
                              settings.exclude)
    assert not missing
    return run(checker, files).findings


def where(loc) -> tuple:
    return (loc.path, loc.line, loc.col)


def of(findings, rule_id):
    return [f for f in findings if f.rule_id == rule_id]


# --- three layers: a defect only composition reveals ----------------------------------------------
def test_defect_appears_only_after_composition():
    after = COMPOSE / "after"
    (f,) = of(check_dir(after, ["experiments/tidepool.yaml"]), "TST-1")
    # 64 prompts (base) x 10 completions (launch overrides) = 640 = 6x96 + 64
    assert f.message == "640 completions per step do not split into mini-batches of 96: 640 = 6x96 + 64"
    assert where(f.location) == ("experiments/tidepool.yaml", 5, 9)  # batch.mini, in the experiment
    related = [where(r) for r in f.related]
    assert related[:2] == [("bases/grpo.yaml", 6, 12), ("launch/overrides.yaml", 3, 15)]
    # the chain: the base's group size 8 that the overrides file replaced
    hop = next(r for r in f.related if where(r) == ("bases/grpo.yaml", 8, 15))
    assert "replaced" in hop.message
    # no single file has both inputs: checked alone, nothing is found
    for name in ("bases/grpo.yaml", "launch/overrides.yaml", "bases/cluster.yaml"):
        assert not of(check_dir(after, [name]), "TST-1")


def test_override_on_the_command_line_masks_the_defect():
    # 64 x 12 = 768 = 8 x 96
    assert not of(check_dir(COMPOSE / "after", ["experiments/tidepool.yaml"],
                            [("rollout.group_size", "12")]), "TST-1")


def test_derived_arithmetic_in_the_run_model():
    from trimtab.report.explain import models

    folder = COMPOSE / "after"
    settings = load_settings(start=folder)
    (m,), problems = models(str(folder / "experiments/tidepool.yaml"), settings, Registry())
    assert not problems
    rollouts = m.derived["batch.rollouts"]
    assert rollouts.value == 640 and rollouts.inputs == ("batch.prompts", "rollout.group_size")
    assert m.derived["cluster.world_size"].value == 16  # 2 nodes x 8 GPUs, from the layers base
    assert m.files == ["bases/cluster.yaml", "bases/grpo.yaml", "experiments/tidepool.yaml",
                       "launch/overrides.yaml"]
    (m2,), _ = models(str(folder / "experiments/tidepool.yaml"), settings, Registry(),
                      [("batch.prompts", "48"), ("rollout.group_size", "16")])
    assert m2.derived["batch.rollouts"].value == 768
    assert m2.values["batch.prompts"].location.path is None  # given on the command line


# --- a defect in one file is masked by the next ---------------------------------------------------
def test_defect_masked_by_the_next_layer(tmp_path):
    masked = COMPOSE / "masked"
    findings = check_dir(masked)
    # base: temperature "warm" (masked by the experiment's 0.9); experiment: kl coef "high" (masked by
    # the overrides file's 0.0). The composed run has no wrong type.
    assert not of(findings, "VOC-2")
    # without the masking layer, the defect is found at the line where it was written
    repo = tmp_path / "masked"
    shutil.copytree(masked, repo)
    exp = repo / "experiments/sweep.yaml"
    exp.write_text(exp.read_text().replace("rollout:\n  temperature: 0.9\n", ""))
    (f,) = of(check_dir(repo), "VOC-2")
    assert f.message.startswith("rollout.temperature = warm: expected a number")
    assert where(f.location) == ("bases/recipe.yaml", 7, 16)
    assert ("experiments/sweep.yaml", 0, 0) in [where(r) for r in f.related]  # the run it was found in
    (repo / "launch/overrides.yaml").write_text("rollout:\n  top_p: 1.0\n")
    kl = [f for f in of(check_dir(repo), "VOC-2") if f.message.startswith("kl.coef")]
    assert [where(f.location) for f in kl] == [("experiments/sweep.yaml", 3, 9)]  # two lines were cut


def test_deletion_marker_removes_a_key_of_the_base():
    from trimtab.report.explain import models

    folder = COMPOSE / "masked"
    (m,), _ = models(str(folder / "experiments/sweep.yaml"), load_settings(start=folder), Registry())
    assert "reference.source" not in m.values  # `reference: !trimtab/remove` in the experiment
    assert m.values["kl.coef"].value == 0.0
    chain = m.values["kl.coef"].chain
    assert [where(h) for h in chain] == [("experiments/sweep.yaml", 5, 9)]


# --- an interpolation carries a wrong value across files -------------------------------------------
def test_interpolation_carries_a_wrong_value_across_files():
    res = check_json("experiments/rate.yaml", cwd=COMPOSE / "carried")
    (f,) = res.of("YML-3")
    # 3e-6 is a string under YAML 1.1 (1.1 floats need a point and a signed exponent) and a float under
    # YAML 1.2 (YAML 1.2.2, section 10.3.2); PyYAML, a YAML 1.1 loader, reads it as a string:
    import yaml

    assert yaml.safe_load("lr: 3e-6")["lr"] == "3e-6"
    assert f["message"].startswith("optim.lr = 3e-6")
    loc = f["location"]
    assert (loc["path"], loc["line"], loc["col"]) == ("launch/overrides.yaml", 3, 14)
    related = [(r["path"], r["line"], r["col"]) for r in f["related"]]
    assert related == [("bases/defaults.yaml", 4, 14),  # 1.0e-6 in the base, replaced
                       ("experiments/rate.yaml", 5, 7),  # lr: ${shared.base_rate}
                       ("experiments/rate.yaml", 0, 0)]  # the run it was found in
    assert "takes the value of shared.base_rate" in f["related"][1]["message"]


def test_interpolation_types():
    from trimtab.report.explain import models

    folder = COMPOSE / "carried"
    settings = load_settings(start=folder)
    (m,), _ = models(str(folder / "experiments/rate.yaml"), settings, Registry(),
                     [("rollout.temperature", "${kl.coef}")])
    # a whole-value reference keeps the target's type; one inside text makes text
    assert m.values["rollout.temperature"].value == 0.001
    assert m.values["run.name"].value == "tidepool-g8"
    assert m.values["run.name"].chain[0].message.startswith("supplies 8 to run_name")


# --- the same run written out flat gives the same findings -----------------------------------------
def _flat(node, indent: int = 0) -> list[str]:
    from trimtab.load.document import Mapping, Scalar, Sequence

    pad = " " * indent
    out = []
    if isinstance(node, Mapping):
        for name, _k, v, _via in node.entries():
            if isinstance(v, Scalar):
                out.append(f"{pad}{name}: {_scalar(v)}")
            else:
                out.append(f"{pad}{name}:")
                out += _flat(v, indent + 2)
    elif isinstance(node, Sequence):
        for it in node.items:
            out.append(f"{pad}- {_scalar(it)}" if isinstance(it, Scalar) else f"{pad}-")
            if not isinstance(it, Scalar):
                out += _flat(it, indent + 2)
    return out


def _scalar(node) -> str:
    return node.text if node.plain else json.dumps(node.text)


@pytest.mark.parametrize("scenario,exp", [("after", "experiments/tidepool.yaml"),
                                          ("carried", "experiments/rate.yaml"),
                                          ("masked", "experiments/sweep.yaml")])
def test_flat_equivalence(tmp_path, scenario, exp):
    from trimtab.load import loader
    from trimtab.compose.layers import Composer

    folder = COMPOSE / scenario
    settings = load_settings(start=folder)
    doc = loader.load(str(folder / exp), exp)
    composed = Composer(settings).compose(doc, doc.roots[0], str(folder / exp))
    flat = tmp_path / "flat.yaml"
    flat.write_text("\n".join(_flat(composed.root)) + "\n")
    (tmp_path / "trimtab.toml").write_text("# no layers\n")

    def seen(findings):
        return sorted((f.rule_id, f.message, str(f.subject)) for f in findings if not f.rule_id.startswith("ACC"))

    layered = seen(check_dir(folder, [exp]))
    assert layered == seen(check_dir(tmp_path, ["flat.yaml"]))
    assert layered or scenario == "masked"  # the scenarios with a defect found it both ways


# --- overrides: typed as YAML 1.2, located on the command line -------------------------------------
def test_set_is_typed_as_yaml_12_and_shown_as_command_line():
    folder = COMPOSE / "after"
    res = check_json("experiments/tidepool.yaml", args=["--set", "rollout.temperature=warm", "--set",
                                                        "optim.lr=3e-6"], cwd=folder)
    assert not res.of("YML-3")  # 3e-6 given on the command line is the YAML 1.2 float
    (f,) = res.of("VOC-2")
    assert f["location"]["path"] is None and f["location"]["key_path"] == "rollout.temperature"
    assert [(r["path"], r["line"]) for r in f["related"]][0] == ("bases/grpo.yaml", 9)
    text = run_cli("check", "experiments/tidepool.yaml", "--set", "rollout.temperature=warm", cwd=folder)
    assert text.out.startswith("<command line>: error VOC-2 rollout.temperature = warm")


def test_command_line_location_validates_as_sarif():
    import jsonschema

    schema = json.loads(shared_path("reference", "sarif", "sarif-schema-2.1.0.json").read_text())
    res = run_cli("check", "--format", "sarif", "experiments/tidepool.yaml", "--set", "rollout.temperature=warm",
                  "--set", "run_name.x=1", cwd=COMPOSE / "after")
    doc = json.loads(res.out)
    jsonschema.Draft4Validator(schema).validate(doc)  # SARIF 2.1.0, OASIS standard
    results = {r["ruleId"]: r for r in doc["runs"][0]["results"]}
    loc = results["VOC-2"]["locations"][0]
    assert "physicalLocation" not in loc  # SARIF 2.1.0 section 3.28: a location may be logical only
    assert loc["logicalLocations"][0]["fullyQualifiedName"] == "rollout.temperature"
    assert "CMP-6" in results


def test_sarif_location_of_a_command_line_value_and_of_a_region():
    # SARIF 2.1.0, section 3.28 (a location with only logical locations and a message) and 3.30 (a region's
    # endLine is not before its startLine; section numbers from memory).
    from trimtab.common.findings import Location
    from trimtab.report.sarif import _location

    loc = _location(Location(None, message="prompts per step", key_path="batch.prompts"))
    assert loc == {"logicalLocations": [{"fullyQualifiedName": "batch.prompts", "kind": "property"}],
                   "message": {"text": "prompts per step (set on the command line)"}}
    assert _location(Location(None))["message"] == {"text": "(set on the command line)"}
    region = _location(Location("a.yaml", 5, 3, 4, 2))["physicalLocation"]["region"]
    assert region == {"startLine": 5, "startColumn": 3}  # an end before the start is left out
    region = _location(Location("a.yaml", 5, 3, 6, 1))["physicalLocation"]["region"]
    assert region == {"startLine": 5, "startColumn": 3, "endLine": 6, "endColumn": 1}


def test_bad_override_value_is_a_clear_error():
    res = run_cli("check", "experiments/tidepool.yaml", "--set", "rollout.temperature=[1,", cwd=COMPOSE / "after")
    assert res.code == 2 and "--set rollout.temperature=[1," in res.err and "Traceback" not in res.err
    res = run_cli("check", "experiments/tidepool.yaml", "--set", "a..b=1", cwd=COMPOSE / "after")
    assert res.code == 2 and "dotted key path" in res.err


def test_set_reaches_into_a_list_and_removes_keys(tmp_path):
    from trimtab.report.explain import models

    (tmp_path / "trimtab.toml").write_text("")
    run_file = tmp_path / "run.yaml"
    run_file.write_text("algorithm: grpo\nrollout:\n  group_size: 8\nkl:\n  coef: 0.01\n"
                        "rewards:\n  - kind: rule\n    weight: 1.0\n")
    settings = load_settings(start=tmp_path)
    (m,), _ = models(str(run_file), settings, Registry(),
                     [("rewards.0.weight", "0.5"), ("kl.coef", "!trimtab/remove")])
    assert m.components[0].get("weight") == 0.5
    assert [where(h) for h in m.components[0].fields["weight"].chain] == [("run.yaml", 8, 13)]
    assert "kl.coef" not in m.values


# --- CMP rules: good and bad fixtures, with lines and columns --------------------------------------
CMP_CASES = {
    "CMP-1": ("bad.yaml", 4, 15, "interpolation cycle: rollout.group_size -> batch.group -> rollout.group_size"),
    "CMP-2": ("bad.yaml", 6, 7, "optim.lr: ${shared.base_lr} refers to shared.base_lr"),
    "CMP-3": ("bad.yaml", 2, 10, "base 'recipes/tidepool-grpo.yaml' does not exist"),
    "CMP-4": ("ring-b.yaml", 2, 10, "bases form a cycle: ring-a.yaml -> ring-b.yaml -> ring-a.yaml"),
    "CMP-5": ("bad.yaml", 2, 10, "base '../../compose/after/bases/grpo.yaml' is outside the repository"),
    "CMP-7": ("bad.yaml", 3, 3, "inherit names bases by path"),
}


@pytest.mark.parametrize("rule_id", sorted(CMP_CASES))
def test_cmp_rule_bad_and_good(rule_id):
    path, line, col, text = CMP_CASES[rule_id]
    folder = RULES / rule_id
    bad = check_json("bad.yaml", cwd=folder)
    hits = bad.of(rule_id)
    assert hits, bad.out
    loc = hits[0]["location"]
    assert (loc["path"], loc["line"], loc["col"]) == (path, line, col)
    assert hits[0]["message"].startswith(text)
    good = check_json("good.yaml", cwd=folder)
    assert not good.of(rule_id)
    assert not [f for f in good.findings if f["rule"].startswith("CMP")]


def test_cmp_1_does_not_double_report_the_unresolved_value():
    # (the optimisation areas report what the minimal fixture leaves unstated; not about this value)
    bad = check_json("bad.yaml", args=["--skip", "KL,CLP,ALG,OPT"], cwd=RULES / "CMP-1")
    assert bad.ids() == ["CMP-1"]
    assert bad.of("CMP-1")[0]["related"][0]["line"] == 6  # batch.group refers onward


def test_cmp_2_leaves_environment_variables_alone():
    assert not check_json("good.yaml", cwd=RULES / "CMP-2").of("CMP-2")  # ${HOME} in good.yaml


def test_cmp_6_bad_and_good():
    folder = RULES / "CMP-6"
    bad = check_json("bad.yaml", args=["--set", "rollout.group_size.max=16"], cwd=folder)
    (f,) = bad.of("CMP-6")
    assert f["location"]["path"] is None
    assert (f["related"][0]["path"], f["related"][0]["line"], f["related"][0]["col"]) == ("bad.yaml", 4, 15)
    assert not check_json("good.yaml", args=["--set", "rollout.group_size=16"], cwd=folder).of("CMP-6")


def test_cmp_7_reference_to_a_section_inside_text():
    bad = check_json("bad.yaml", cwd=RULES / "CMP-7")
    assert [(f["location"]["line"], f["location"]["col"]) for f in bad.of("CMP-7")] == [(3, 3), (6, 11)]


def test_layers_base_missing_is_located_at_the_experiment(tmp_path):
    (tmp_path / "trimtab.toml").write_text('layers = [{ files = "*.yaml", bases = ["shared/none.yaml"] }]\n')
    (tmp_path / "exp.yaml").write_text("algorithm: grpo\n")
    (f,) = check_json("exp.yaml", cwd=tmp_path).of("CMP-3")
    assert (f["location"]["path"], f["location"]["line"]) == ("exp.yaml", 0)
    assert f["related"][0]["path"] == "trimtab.toml" and "layers entry 1" in f["related"][0]["message"]


def test_unreadable_base_is_a_finding_not_a_traceback(tmp_path):
    (tmp_path / "trimtab.toml").write_text('bases_key = "inherit"\n')
    (tmp_path / "base.yaml").write_text("rollout: [1, 2\n")
    (tmp_path / "exp.yaml").write_text("inherit: base.yaml\nalgorithm: grpo\n")
    res = check_json("exp.yaml", cwd=tmp_path)
    (f,) = res.of("CMP-3")
    assert "cannot be read" in f["message"] and (f["location"]["line"], f["location"]["col"]) == (1, 10)


# --- files, acceptances, the cache ---------------------------------------------------------------
def test_acceptance_in_a_base_file(tmp_path):
    repo = tmp_path / "masked"
    shutil.copytree(COMPOSE / "masked", repo)
    exp = repo / "experiments/sweep.yaml"
    exp.write_text(exp.read_text().replace("rollout:\n  temperature: 0.9\n", ""))
    base = repo / "bases/recipe.yaml"
    base.write_text(base.read_text().replace("temperature: warm",
                                             "temperature: warm  # trimtab: accept VOC-2 -- read by the launcher"))
    findings = check_dir(repo)
    assert not of(findings, "VOC-2")
    # the base checked as a file of its own does not call the acceptance unused: the run uses it
    assert not of(findings, "ACC-2")
    base.write_text(base.read_text().replace("accept VOC-2", "accept VOC-3"))
    (unused,) = of(check_dir(repo), "ACC-2")
    assert where(unused.location) == ("bases/recipe.yaml", 7, 22)
    assert where(of(check_dir(repo), "VOC-2")[0].location) == ("bases/recipe.yaml", 7, 16)


def test_a_base_is_loaded_once_per_process(tmp_path):
    from trimtab.compose import layers as compose

    (tmp_path / "trimtab.toml").write_text('bases_key = "inherit"\n')
    (tmp_path / "base.yaml").write_text("algorithm: grpo\nrollout:\n  group_size: 8\n")
    for i in range(3):
        (tmp_path / f"exp{i}.yaml").write_text(f"inherit: base.yaml\nbatch:\n  prompts: {16 * (i + 1)}\n")
    before = compose.LOADS["count"]
    check_dir(tmp_path, ["exp0.yaml", "exp1.yaml", "exp2.yaml"])
    assert compose.LOADS["count"] - before == 1


@given(st.lists(st.dictionaries(st.sampled_from("abc"), st.recursive(
    st.integers(0, 9), lambda kids: st.dictionaries(st.sampled_from("xyz"), kids, max_size=3), max_leaves=6),
    max_size=3), min_size=1, max_size=3))
@hsettings(max_examples=40)
def test_merge_is_key_by_key_later_wins(layers):
    """Mappings merge key by key, later layers win, scalars replace whole (against a plain
    reference implementation of that merge)."""
    from trimtab.load import loader
    from trimtab.compose.layers import Composer
    from trimtab.load.document import Document, Mapping
    from trimtab.common.settings import Settings

    def merge(a, b):
        out = dict(a)
        for k, v in b.items():
            out[k] = merge(out[k], v) if isinstance(v, dict) and isinstance(out.get(k), dict) else v
        return out

    def plain(node):
        if isinstance(node, Mapping):
            return {n: plain(v) for n, _k, v, _via in node.entries()}
        return node.value12

    expected = {}
    for layer in layers:
        expected = merge(expected, layer)
    composer = Composer(Settings(root=Path("/nonexistent-root")))
    docs = []
    for i, layer in enumerate(layers):
        d = Document(path=f"layer{i}.json", fmt="json")
        loader.parse_bytes(d, json.dumps(layer).encode(), loader.Limits())
        docs.append(d)
    composer.hist = {}
    from trimtab.compose.layers import _M

    top = _M(docs[-1].roots[0])
    for i, d in enumerate(docs):
        composer._merge(top, d.roots[0], "base" if i < len(docs) - 1 else "experiment", (), True)
    assert plain(composer._build(top, ())) == expected


# --- pre-commit and CI: a changed base re-checks the runs built on it -----------------------------
def _git(repo: Path, *args):
    subprocess.run(["git", *args], cwd=repo, check=True, capture_output=True,
                   env={"GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid", "GIT_COMMITTER_NAME": "t",
                        "GIT_COMMITTER_EMAIL": "t@example.invalid", "HOME": str(repo), "PATH": "/usr/bin:/bin"})


def test_changed_base_rechecks_its_dependants(tmp_path):
    repo = tmp_path / "after"
    shutil.copytree(COMPOSE / "after", repo)
    _git(repo, "init", "-q")
    _git(repo, "add", ".")
    _git(repo, "commit", "-qm", "start")
    base = repo / "bases/grpo.yaml"
    base.write_text(base.read_text().replace("temperature: 1.0", "temperature: warm"))
    res = check_json(args=["--since", "HEAD"], cwd=repo)
    assert res.json["summary"]["files"] == 2  # the changed base and the experiment built on it
    (f,) = res.of("VOC-2")
    assert (f["location"]["path"], f["location"]["line"], f["location"]["col"]) == ("bases/grpo.yaml", 9, 16)
    assert ("experiments/tidepool.yaml", 0) in [(r["path"], r["line"]) for r in f["related"]]
    # pre-commit passes the changed files as paths: a base declared in the layers brings its experiments
    res = check_json("bases/cluster.yaml", cwd=repo)
    assert res.json["summary"]["files"] == 2 and res.json["summary"]["runs"] == 1


def test_changed_overrides_file_rechecks_every_run():
    res = check_json("launch/overrides.yaml", cwd=COMPOSE / "after")
    # every file: the overrides file and bases/cluster.yaml (declared bases: files, not runs), the
    # experiment, and bases/grpo.yaml (named by `inherit` only, so also a run of its own)
    assert res.json["summary"]["files"] == 4 and res.json["summary"]["runs"] == 2


def test_two_keys_reaching_one_line_keep_their_own_chains(tmp_path):
    # JSON is YAML 1.2 (YAML 1.2 of 2009, section 1.3 "Relation to JSON", from memory): the same
    # composition applies to .json runs
    (tmp_path / "trimtab.toml").write_text('bases_key = "inherit"\n')
    (tmp_path / "base.json").write_text('{"algorithm": "grpo", "rollout": {"group_size": 8, "temperature": "warm"}}\n')
    (tmp_path / "exp.json").write_text('{"inherit": "base.json", "batch": {"prompts": 16},\n'
                                       ' "kl": {"coef": "${rollout.temperature}"}}\n')
    res = check_json("exp.json", cwd=tmp_path)
    by_key = {f["key_path"]: f for f in res.of("VOC-2")}
    assert sorted(by_key) == ["kl.coef", "rollout.temperature"]
    for f in by_key.values():
        assert (f["location"]["path"], f["location"]["line"], f["location"]["col"]) == ("base.json", 1, 67)
    assert [(r["path"], r["line"]) for r in by_key["kl.coef"]["related"]] == [("exp.json", 2), ("exp.json", 0)]
    assert [(r["path"], r["line"]) for r in by_key["rollout.temperature"]["related"]] == [("exp.json", 0)]


def test_set_past_the_end_of_a_list_and_a_base_that_is_not_a_mapping(tmp_path):
    (tmp_path / "trimtab.toml").write_text('bases_key = "inherit"\n')
    (tmp_path / "list.yaml").write_text("- just\n- a list\n")
    (tmp_path / "run.yaml").write_text("inherit: list.yaml\nalgorithm: grpo\nrollout:\n  group_size: 8\n"
                                       "kl:\n  coef: 0.01\nrewards:\n  - kind: rule\n")
    res = check_json("run.yaml", args=["--set", "rewards.3.weight=1"], cwd=tmp_path)
    (cmp6,) = res.of("CMP-6")
    assert "rewards is a list of 1 item(s); there is no item 3" in cmp6["message"]
    (cmp7,) = res.of("CMP-7")
    assert (cmp7["location"]["path"], cmp7["location"]["line"], cmp7["location"]["col"]) == ("run.yaml", 1, 10)
    assert "does not hold a mapping" in cmp7["message"]


def test_built_in_arithmetic_rule_sees_the_composed_run():
    # BAT-2 (built in): 64 prompts x 10 completions = 640 completions do not split into mini-batches of 96
    res = check_json("experiments/tidepool.yaml", cwd=COMPOSE / "after")
    (f,) = res.of("BAT-2")
    assert f["message"].startswith("640 completions per step do not split into mini-batches of 96")
    assert (f["location"]["path"], f["location"]["line"], f["location"]["col"]) == ("experiments/tidepool.yaml", 5, 9)
    assert [(r["path"], r["line"], r["col"]) for r in f["related"]] == [
        ("bases/grpo.yaml", 6, 12), ("launch/overrides.yaml", 3, 15), ("bases/grpo.yaml", 8, 15)]
    # each file alone: no BAT-2 (no single file holds prompts, group size and mini-batch)
    for name in ("bases/grpo.yaml", "experiments/tidepool.yaml"):
        plain = check_json(str(COMPOSE / "after" / name), cwd=FIXTURES)  # no layered settings here
        assert not plain.of("BAT-2")


def test_reference_and_target_both_matching_a_concept_word(tmp_path):
    from trimtab.report.explain import models

    (tmp_path / "trimtab.toml").write_text("")
    run_file = tmp_path / "run.yaml"
    run_file.write_text("algorithm: grpo\nrollout:\n  group_size: 8\nsweep:\n  lr: 2.0e-6\noptim:\n  lr: ${sweep.lr}\n")
    (m,), _ = models(str(run_file), load_settings(start=tmp_path), Registry())
    v = m.values["optim.lr"]
    assert "optim.lr" not in m.ambiguous and v.key == "optim.lr" and v.value == 2e-6
    assert (v.location.line, v.location.key_path) == (5, "optim.lr")  # written at sweep.lr, line 5
    assert [(h.line, h.col) for h in v.chain] == [(7, 7)]  # the reference


def test_text_that_only_looks_like_a_reference_stays_as_written(tmp_path):
    from trimtab.report.explain import models

    (tmp_path / "trimtab.toml").write_text("")
    run_file = tmp_path / "run.yaml"
    run_file.write_text("algorithm: grpo\nrollout:\n  group_size: 8\ncheckpoint_dir: ${HOME}/wren\n"
                        "run_name: ${{ matrix.name }}\nmodel_path: $${literal}\n")
    (m,), problems = models(str(run_file), load_settings(start=tmp_path), Registry())
    assert not problems
    assert m.values["checkpoint.dir"].value == "${HOME}/wren"
    assert m.values["run.name"].value == "${{ matrix.name }}"
    assert m.values["model.source"].value == "${literal}"  # $${ is the escape for a literal ${


def test_json_report_with_command_line_and_base_locations_validates():
    import jsonschema

    schema = json.loads((Path(__file__).resolve().parents[1] / "linter" / "report" / "report.schema.json").read_text())
    res = check_json("experiments/tidepool.yaml", args=["--set", "rollout.temperature=warm", "--set", "run_name.x=1"],
                     cwd=COMPOSE / "after")
    jsonschema.Draft7Validator(schema).validate(res.json)
    assert {f["rule"] for f in res.findings} >= {"VOC-2", "CMP-6", "BAT-2"}


def test_cmp_8_bad_and_good():
    folder = RULES / "CMP-8"
    bad = check_json("bad.yaml", args=["--set", "rollout.group_sise=16"], cwd=folder)
    (f,) = bad.of("CMP-8")
    assert f["level"] == "error" and f["location"]["path"] is None  # an error since issue 19 (item 5)
    assert f["location"]["key_path"] == "rollout.group_sise" and "did you mean rollout.group_size?" in f["message"]
    assert not check_json("good.yaml", args=["--set", "rollout.group_size=16"], cwd=folder).of("CMP-8")


_TOKENS = ["1", "0.5", "warm", "${a}", "${b.x}", "${a.y.z}", "'t${c}'", "${rollout}", "!trimtab/remove", "[1, 2]",
           "${b.x.0}", "${HOME}", "$${a}", "${nope.nothing}", "${a.y}"]
_tree = st.recursive(st.sampled_from(_TOKENS),
                     lambda kids: st.dictionaries(st.sampled_from(["a", "b", "c", "x", "y", "z", "rollout"]), kids,
                                                  min_size=1, max_size=3), max_leaves=8)


def _yaml(node, indent=0) -> str:
    pad = " " * indent
    if not isinstance(node, dict):
        return node
    return "\n" + "\n".join(f"{pad}{k}: {_yaml(v, indent + 2)}" for k, v in node.items())


@given(st.lists(st.dictionaries(st.sampled_from(["a", "b", "c", "rollout"]), _tree, min_size=1, max_size=4),
                min_size=1, max_size=3),
       st.lists(st.tuples(st.sampled_from(["a", "b.x", "a.y.z", "rollout.n", "c.0"]), st.sampled_from(_TOKENS)),
                max_size=2))
@hsettings(max_examples=40)
def test_any_layering_composes_without_a_traceback(layers, sets):
    """Random layers with references (cycles, unknown targets, text), removal markers and --set values:
    composition and every rule finish; nothing crashes (a crash would be a TOOL-1 finding)."""
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        (root / "trimtab.toml").write_text('bases_key = "inherit"\nrun_configs = ["*.yaml"]\n')
        names = []
        for i, layer in enumerate(layers):
            head = f"inherit: {names[-1]}\n" if names else ""
            (root / f"l{i}.yaml").write_text(head + _yaml(layer).lstrip("\n") + "\n")
            names.append(f"l{i}.yaml")
        settings = load_settings(start=root)
        checker = Checker(settings, Registry(), CheckOptions(overrides=[(k, v) for k, v in sets]))
        result = run(checker, [(str(root / n), n) for n in names])
        assert not result.crashed, [f.message for f in result.findings if f.rule_id == "TOOL-1"]
