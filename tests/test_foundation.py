"""End-to-end behaviour of the foundation: exit status, report formats, settings errors,
acceptance comments, selection, crash handling, and locations checked against PyYAML."""
from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from support import FIXTURES, REPO, RUN_CONFIG, check_json, run_cli, shared_path
from trimtab import hookimpl, rule

DEMO = FIXTURES / "demo"
CLEAN = DEMO / "configs" / "heron-3b-ledger-grpo.yaml"


def write(tmp: Path, name: str, text: str) -> Path:
    p = tmp / name
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(text, encoding="utf-8")
    return p


@pytest.fixture
def repo(tmp_path):
    """An empty repository root (a .git folder stops the settings search here)."""
    (tmp_path / ".git").mkdir()
    return tmp_path


# --- exit status --------------------------------------------------------------------------
def test_demo_has_located_findings_and_exits_1():
    r = run_cli("check", cwd=DEMO)
    assert r.code == 1, r.err
    assert re.search(r"^configs/[\w./-]+\.yaml:\d+:\d+: (error|warning|note) [A-Z]+-\d+ ", r.out, re.M), r.out


def test_clean_config_exits_0():
    r = run_cli("check", "configs/heron-3b-ledger-grpo.yaml", cwd=DEMO)
    assert r.code == 0, r.out + r.err
    assert r.out == ""


def test_non_run_config_yaml_is_skipped_silently():
    r = check_json(DEMO / "ci" / "workflow.yaml", cwd=DEMO)
    assert r.code == 0 and r.findings == []
    assert r.json["summary"]["skipped"] == 1


def test_python_dash_m_works():
    out = subprocess.run([sys.executable, "-m", "trimtab", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and out.stdout.startswith("trimtab ")


# --- settings -------------------------------------------------------------------------------
@pytest.mark.parametrize("body,named", [
    ('[tool.trimtab]\nbogus = 1\n', "tool.trimtab.bogus"),
    ('[tool.trimtab]\ngate = 5\n', "tool.trimtab.gate"),
    ('[tool.trimtab]\ninclude = "configs/*.yaml"\n', "tool.trimtab.include"),
    ('[tool.trimtab.keys]\n"batch.minibatch" = "x.y"\n', "tool.trimtab.keys.batch.minibatch"),
    ('[tool.trimtab.limits]\nmax_depth = "deep"\n', "tool.trimtab.limits.max_depth"),
    ('[tool.trimtab.rules."NOPE-1"]\nlevel = "note"\n', "tool.trimtab.rules.NOPE-1"),
    ('[tool.trimtab.rules."YML-2"]\nlevel = "loud"\n', "tool.trimtab.rules.YML-2.level"),
    ('[tool.trimtab.rules."YML-2"]\nthreshold = 3\n', "tool.trimtab.rules.YML-2.threshold"),
])
def test_bad_setting_exits_2_naming_the_key(repo, body, named):
    write(repo, "pyproject.toml", body)
    write(repo, "run.yaml", RUN_CONFIG)
    r = run_cli("check", cwd=repo)
    assert r.code == 2, r.out + r.err
    assert named in r.err, r.err
    assert "Traceback" not in r.err


def test_settings_file_that_is_not_toml_exits_2(repo):
    write(repo, "trimtab.toml", "gate = [\n")
    r = run_cli("check", cwd=repo)
    assert r.code == 2 and "not valid TOML" in r.err


def test_rule_level_and_off_from_settings(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05\n")  # duplicate key -> YML-2 (warning)
    write(repo, "trimtab.toml", '[rules."YML-2"]\nlevel = "note"\n')
    r = check_json("run.yaml", cwd=repo)
    assert [f["level"] for f in r.of("YML-2")] == ["note"] and r.code == 0
    write(repo, "trimtab.toml", '[rules."YML-2"]\noff = true\n')
    assert check_json("run.yaml", cwd=repo).of("YML-2") == []


# --- report formats ---------------------------------------------------------------------------
def test_json_report_validates_against_the_shipped_schema():
    import jsonschema

    schema = json.loads((REPO / "linter" / "report" / "report.schema.json").read_text())
    r = check_json(cwd=DEMO)
    jsonschema.Draft7Validator.check_schema(schema)
    jsonschema.validate(r.json, schema, cls=jsonschema.Draft7Validator)
    assert r.json["exit"] == r.code == 1


def test_sarif_validates_against_the_official_schema():
    # OASIS SARIF 2.1.0 (errata 01) JSON schema, a draft-04 schema.
    import jsonschema

    schema = json.loads(shared_path("reference", "sarif", "sarif-schema-2.1.0.json").read_text())
    r = run_cli("check", "--format", "sarif", cwd=DEMO)
    log = json.loads(r.out)
    jsonschema.Draft4Validator(schema).validate(log)
    run = log["runs"][0]
    assert run["results"], "the demo has findings"
    ids = {d["id"] for d in run["tool"]["driver"]["rules"]}
    assert all(res["ruleId"] in ids for res in run["results"])
    assert all(res["partialFingerprints"] for res in run["results"])


def test_text_format_lines(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05\n")
    r = run_cli("check", "run.yaml", cwd=repo)
    assert r.out.splitlines()[0] == ("run.yaml:10:3: warning YML-2 key 'coef' is written twice in one "
                                     "mapping; which value wins depends on the loader")
    assert r.out.splitlines()[1] == "    run.yaml:9:3: first 'coef' here"
    assert "\033[" not in r.out  # no colour when not on a terminal


def test_output_file(repo):
    write(repo, "run.yaml", RUN_CONFIG)
    r = run_cli("check", "--format", "json", "--output", "report.json", cwd=repo)
    assert r.code == 0 and r.out == ""
    assert json.loads((repo / "report.json").read_text())["findings"] == []


# --- acceptance comments, selection, gate ---------------------------------------------------
def test_acceptance_with_reason_suppresses(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05  # trimtab: accept YML-2 -- testing the duplicate\n")
    r = check_json("run.yaml", cwd=repo)
    assert r.findings == [] and r.code == 0


def test_acceptance_on_line_above(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  # trimtab: accept YML-2 -- the second value is the one meant\n"
                                          "  coef: 0.05\n")
    assert check_json("run.yaml", cwd=repo).findings == []


def test_acceptance_on_a_code_line_above_does_not_reach_the_next_line(repo):
    # The line above counts only when it is a comment line; a trailing comment on a line of code belongs
    # to that line (here it accepts nothing there, so it is reported unused and the finding stays).
    write(repo, "run.yaml", RUN_CONFIG.replace("  coef: 0.04", "  coef: 0.04  # trimtab: accept YML-2 -- meant")
          + "  coef: 0.05\n")
    r = check_json("run.yaml", cwd=repo)
    assert sorted(r.ids()) == ["ACC-2", "YML-2"]
    assert r.of("YML-2")[0]["location"]["line"] == 10 and r.of("ACC-2")[0]["location"]["line"] == 9


def test_acceptance_without_reason_is_a_finding_and_accepts_nothing(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05  # trimtab: accept YML-2\n")
    r = check_json("run.yaml", cwd=repo)
    assert sorted(r.ids()) == ["ACC-1", "YML-2"]
    assert r.of("ACC-1")[0]["location"]["line"] == 10


def test_unused_acceptance_is_reported(repo):
    write(repo, "run.yaml", RUN_CONFIG.replace("  coef: 0.04", "  coef: 0.04  # trimtab: accept YML-2 -- old"))
    r = check_json("run.yaml", cwd=repo)
    assert r.ids() == ["ACC-2"] and r.of("ACC-2")[0]["location"]["line"] == 9


def test_only_skip_and_gate(repo):
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05\n")
    assert check_json("run.yaml", args=("--skip", "YML"), cwd=repo).findings == []
    assert check_json("run.yaml", args=("--only", "VOC"), cwd=repo).findings == []
    assert check_json("run.yaml", args=("--only", "YML-2"), cwd=repo).ids() == ["YML-2"]
    assert check_json("run.yaml", args=("--gate", "error"), cwd=repo).code == 0
    assert check_json("run.yaml", args=("--gate", "warning"), cwd=repo).code == 1


def test_bad_arguments_exit_2(repo):
    assert run_cli("check", "--gate", "loud", cwd=repo).code == 2
    assert run_cli("check", "--jobs", "0", cwd=repo).code == 2
    assert run_cli("nonsense", cwd=repo).code == 2


def test_missing_path_stops_the_check_with_exit_2(repo):
    # issue 19 item 6: a path given that does not exist is exit 2 for every command (tests/test_gate.py)
    write(repo, "run.yaml", RUN_CONFIG + "  coef: 0.05\n")
    r = check_json("run.yaml", "gone.yaml", cwd=repo)
    assert r.code == 2 and "gone.yaml: no such file or folder" in r.err
    assert sorted(check_json("run.yaml", cwd=repo).ids()) == ["YML-2"]


# --- a rule that crashes --------------------------------------------------------------------
class _CrashPlugin:
    @hookimpl
    def trimtab_rules(self):
        @rule(id="ZZT-1", name="always-crashes", level="error", summary="test rule", rationale="test rule")
        def crash(ctx):
            raise RuntimeError("boom")

        return [crash]


def test_crashing_rule_is_a_tool_finding_and_exit_2(repo, monkeypatch):
    from trimtab import cli
    from trimtab.engine.registry import Registry

    monkeypatch.setattr(cli, "_registry", lambda: Registry(plugins=[_CrashPlugin()]))
    write(repo, "a.yaml", RUN_CONFIG)
    write(repo, "b.yaml", RUN_CONFIG + "  coef: 0.05\n")
    r = check_json("a.yaml", "b.yaml", cwd=repo)
    assert r.code == 2
    tool = r.of("TOOL-1")
    assert {f["location"]["path"] for f in tool} == {"a.yaml", "b.yaml"}
    assert "ZZT-1" in tool[0]["message"] and "boom" in tool[0]["message"]
    assert r.of("YML-2"), "the other rules still ran"


# --- changed files only -------------------------------------------------------------------
def _git(cwd, *args):
    env = {**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid",
           "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.invalid"}
    subprocess.run(["git", *args], cwd=cwd, check=True, capture_output=True, env=env)


def test_since_checks_only_changed_files(tmp_path):
    _git(tmp_path, "init", "-q")
    write(tmp_path, "old.yaml", RUN_CONFIG + "  coef: 0.05\n")
    write(tmp_path, "new.yaml", RUN_CONFIG)
    _git(tmp_path, "add", ".")
    _git(tmp_path, "commit", "-qm", "base")
    write(tmp_path, "new.yaml", RUN_CONFIG + "  coef: 0.06\n")
    r = check_json(args=("--since", "HEAD"), cwd=tmp_path)
    assert [f["location"]["path"] for f in r.findings] == ["new.yaml"]
    assert run_cli("check", "--since", "no-such-ref", cwd=tmp_path).code == 2


# --- jobs -----------------------------------------------------------------------------------
def test_jobs_give_identical_findings():
    one = check_json(cwd=DEMO).json
    two = check_json(args=("--jobs", "2"), cwd=DEMO).json
    assert one == two


# --- locations against PyYAML ---------------------------------------------------------------
def _marks(path: Path) -> set[tuple[int, int]]:
    """(line, col) 1-based of every node's start in PyYAML's own composed graph (pure-Python
    SafeLoader: the reference)."""
    text = path.read_text(encoding="utf-8-sig")
    out = set()
    for root in yaml.compose_all(text, Loader=yaml.SafeLoader):
        stack, seen = [root], set()
        while stack:
            n = stack.pop()
            if n is None or id(n) in seen:
                continue
            seen.add(id(n))
            out.add((n.start_mark.line + 1, n.start_mark.column + 1))
            if isinstance(n, yaml.MappingNode):
                for k, v in n.value:
                    stack += [k, v]
            elif isinstance(n, yaml.SequenceNode):
                stack += n.value
    return out


def _fixture_roots():
    roots = {DEMO}
    for p in FIXTURES.rglob("*"):
        if p.is_dir() and p.parent.name == "rules" or (p.is_dir() and p.parent == FIXTURES and p.name != "rules"):
            roots.add(p)
    return sorted(roots)


def test_every_finding_location_is_a_pyyaml_node_mark():
    """Reference: PyYAML's composed node marks (start_mark.line + 1, start_mark.column + 1)."""
    checked = 0
    for root in _fixture_roots():
        r = run_cli("check", "--format", "json", str(root), cwd=root)
        if not r.out.strip():
            continue
        for f in r.json["findings"]:
            for loc in [f["location"], *f["related"]]:
                path = loc["path"]
                if not path or not loc["line"] or not path.endswith((".yaml", ".yml")):
                    continue
                if f["rule"] in ("YML-1", "YML-4", "YML-5", "YML-6") or f["rule"].startswith("ACC"):
                    continue  # not about a node (parse errors, encodings, limits, comments)
                file = (root / path) if (root / path).exists() else (REPO / path)
                try:
                    marks = _marks(file)
                except (yaml.YAMLError, UnicodeDecodeError):
                    continue
                assert (loc["line"], loc["col"]) in marks, (f["rule"], path, loc)
                checked += 1
    assert checked > 0


def test_install_adds_no_generic_top_level_modules(tmp_path):
    # design 7: the source folders linter/ and rules/ install as trimtab / trimtab_rules only
    code = ("import importlib.util as u, sys; "
            "print(u.find_spec('linter') is None, u.find_spec('rules') is None, "
            "u.find_spec('trimtab') is not None, u.find_spec('trimtab_rules') is not None)")
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True)
    assert out.stdout.split() == ["True", "True", "True", "True"], out.stdout + out.stderr


def test_builtin_rules_register_through_the_entry_point_group():
    from importlib.metadata import entry_points

    eps = {ep.name: ep.value for ep in entry_points(group="trimtab")}
    assert eps.get("builtin") == "trimtab_rules"


def test_readme_plugin_example_works(tmp_path, monkeypatch):
    """The plugin example in the README, run as written."""
    import types

    from trimtab import cli
    from trimtab.engine.registry import Registry

    readme = (REPO / "README.md").read_text()
    code = re.search(r"```python\n# burrow_rules/__init__.py\n(.*?)```", readme, re.S).group(1)
    module = types.ModuleType("burrow_rules")
    monkeypatch.setitem(sys.modules, "burrow_rules", module)  # as an installed plugin is
    exec(compile(code, "README.md", "exec"), module.__dict__)
    monkeypatch.setattr(cli, "_registry", lambda: Registry(plugins=[module]))
    (tmp_path / ".git").mkdir()
    write(tmp_path, "run.yaml", RUN_CONFIG.replace("prompts: 64", "prompts: 60"))
    r = check_json("run.yaml", cwd=tmp_path)
    assert [(f["rule"], f["location"]["line"], f["message"]) for f in r.findings] == [
        ("BRW-1", 7, "60 prompts per step is not a multiple of 8")]


def test_readme_lists_every_rule_with_its_level():
    """The README's rule tables are the catalogue: every registered rule, with its default level."""
    from trimtab.engine.registry import TOOL_RULES, Registry

    readme = (REPO / "README.md").read_text()
    rows = dict(re.findall(r"^\| ([A-Z]+-\d+) \| (error|warning|note) \|", readme, re.M))
    rules = Registry().ordered() + list(TOOL_RULES.values())
    assert {r.id: str(r.level) for r in rules} == rows


def test_readme_demo_output_is_real():
    """Finding lines the README shows for the demo appear, as printed, in the demo's output."""
    readme = (REPO / "README.md").read_text()
    adoption = readme.index("\n## Adopting trimtab")
    shown = readme[:adoption] + readme[readme.find("\n## ", adoption + 1):]
    lines, fence = [], None
    for l in shown.splitlines():
        if l.startswith("```"):
            fence = None if fence is not None else l[3:].strip()
        elif fence == "" and (re.match(r"\s*configs/\S+:\d+:\d+: ", l) or l.startswith("    suggestion: ")):
            lines.append(l)
    assert len(lines) >= 5
    out = run_cli("check", cwd=DEMO).out.splitlines()
    missing = [l for l in lines if l not in out]
    assert not missing, missing


def test_readme_settings_example_is_valid(tmp_path):
    """The settings block the README shows is accepted by the shipped schema, as written."""
    readme = (REPO / "README.md").read_text()
    section = readme[readme.index("\n## Settings and key maps"):]
    block = re.search(r"```toml\n(.*?)```", section, re.S).group(1)
    (tmp_path / ".git").mkdir()
    write(tmp_path, "pyproject.toml", block)
    write(tmp_path, "run.yaml", RUN_CONFIG)
    from trimtab.common import settings

    s = settings.load(start=tmp_path)
    assert s.gate == "warning" and s.bases_key == "inherit" and s.limits.max_depth == 200


def test_pattern_compiled_on_first_use_reads_as_re_does():
    """common.patterns.later: nothing compiled at import; once used, the standard library's ``re``
    answers (the reference: re.compile of the same pattern and flags)."""
    import re

    from trimtab.common.patterns import later

    text = "Batch_Size: 8\nlr: 3e-4\n"
    for pattern, flags in ((r"^([a-z_]+):", re.I | re.M), (rb"\d+", 0)):
        lazy, ref = later(pattern, flags), re.compile(pattern, flags)
        assert "match" not in vars(lazy)  # not compiled yet
        subject = text if isinstance(pattern, str) else text.encode()
        assert lazy.findall(subject) == ref.findall(subject)
        assert [m.span() for m in lazy.finditer(subject)] == [m.span() for m in ref.finditer(subject)]
        assert lazy.pattern == ref.pattern and lazy.flags == ref.flags and lazy.groups == ref.groups
