"""Loader dialects (issue #16, class 2): each reader a file may meet, checked against a library that
implements it, and YML-3 reporting only what the reader the settings name will misread.

References, named beside each check:
- YAML 1.1: PyYAML's safe_load (tests/test_scalars.py);
- YAML 1.2: ruamel.yaml's safe loader, the core schema (tests/test_scalars.py);
- YAML 1.1 with the float fix: omegaconf (a config library of the test extra) through its public
  OmegaConf.create, whose loader adds that float pattern and drops timestamps;
- JSON: the standard library's json module (RFC 8259, section 6: the number grammar).
"""
from __future__ import annotations

import json
import math

import pytest

from support import FIXTURES, check_json, run_cli
from test_scalars import SCALARS
from trimtab.common.scalars import misreaders, same_value, type11, type11f, type12, typejson

omegaconf = pytest.importorskip("omegaconf")  # the test extra

# floats such readers take that plain YAML 1.1 does not, and texts around them
FLOAT_FIX = ["1e-6", "1E-6", "1e6", "-2e-3", "+5E+2", "1.0e5", "3.5E3", "1_000e2", ".5e-3", ".5e3", "2024-01-05",
             "2024-01-05 10:00:00", "1e", "e-6", "1e-6x"]


def _omegaconf(text):
    """The value omegaconf's loader gives a plain scalar (public API: OmegaConf.create, to_container)."""
    cfg = omegaconf.OmegaConf.create(f"v: {text}\n")
    return omegaconf.OmegaConf.to_container(cfg)["v"]


# omegaconf refuses keys/values of types it cannot hold; none of these scalars is one of them
@pytest.mark.parametrize("text", SCALARS + FLOAT_FIX)
def test_float_fix_reading_matches_omegaconf(text):
    # Reference: omegaconf's loader (YAML 1.1 with the float fix), through its public API
    ref = _omegaconf(text)
    mine = type11f(text)
    if isinstance(ref, float) and math.isnan(ref):
        assert isinstance(mine, float) and math.isnan(mine)
    else:
        assert same_value(mine, ref), (text, mine, ref)


JSON_TEXTS = ["0", "-0", "10", "-3", "1e-06", "1E-6", "1e6", "1E+5", "0.5", "-1.5e+3", "6.02e23", "1E400",
              "123456789012345678901234567", "true", "false", "null",
              # not JSON numbers: a reader never sees them as numbers (the file does not parse as JSON)
              "01", ".5", "1.", "+1", "0x10", "1e", "Infinity", "NaN", "True"]


@pytest.mark.parametrize("text", JSON_TEXTS)
def test_json_reading_matches_the_standard_library(text):
    # Reference: Python's json module (RFC 8259, section 6 for numbers; section 3 for the literals)
    try:
        ref = json.loads(text, parse_constant=lambda c: (_ for _ in ()).throw(ValueError(c)))
    except ValueError:
        ref = text  # not a JSON value: trimtab keeps the text
    mine = typejson(text)
    if isinstance(ref, int) and not isinstance(ref, bool) and abs(ref) >= 10 ** 30:
        assert mine == text  # past trimtab's integer limit: text (YML-5 reports it in YAML)
    else:
        assert same_value(mine, ref), (text, mine, ref)


def _kinds(text, fits):
    readers = {"1.1": type11, "1.2": type12, "1.1+floats": type11f}
    return misreaders(lambda r: readers[r](text), None, fits)


def _number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _switch(x) -> bool:
    return isinstance(x, bool)


def test_which_reader_misreads_what():
    number, switch = _number, _switch
    # 3e-6: YAML 1.1 text (PyYAML: yaml.safe_load("v: 3e-6") == {"v": "3e-6"}); the others a float
    assert _kinds("3e-6", number) == ["1.1"]
    # 010: octal 8 under both 1.1 readers, decimal 10 under the 1.2 core schema
    assert _kinds("010", number) == ["1.1", "1.1+floats"]
    # off: false under 1.1, text under 1.2: a switch misread by the 1.2 reader only
    assert _kinds("off", switch) == ["1.2"]
    # 3.0e-6: one reading everywhere
    assert _kinds("3.0e-6", number) == []


# --- the rule -------------------------------------------------------------------------------------
RUN = """\
run: {estimator: grpo, seed: 1, ref_model: ./weights/base}
optim: {max_grad_norm: 1.0, clip_ratio: 0.2, lr: 1e-6}
rollout:
  group_size: 8
  temperature: 0.9
batch:
  prompts: 64
kl:
  coef: 0.04
"""


def _repo(tmp_path, settings=""):
    (tmp_path / ".git").mkdir()
    if settings:
        (tmp_path / "trimtab.toml").write_text(settings, encoding="utf-8")
    return tmp_path


def _lr(repo, name):
    out = run_cli("explain", name, cwd=repo).out
    return next(x for x in out.splitlines() if x.strip().startswith("optim.lr")).split()[1]


def test_json_written_by_a_serialiser_is_read_under_json_grammar(tmp_path):
    import yaml

    repo = _repo(tmp_path)
    data = yaml.safe_load(RUN.replace("1e-6", "1.0e-6"))
    (repo / "run.json").write_text(json.dumps(data, indent=2), encoding="utf-8")
    assert '"lr": 1e-06' in (repo / "run.json").read_text()  # what the standard library writes
    r = check_json("run.json", cwd=repo)
    assert r.of("YML-3") == [] and r.of("VOC-2") == [], r.findings
    assert _lr(repo, "run.json") == "1e-06"  # a float, as json.loads reads it


def test_a_wrong_type_in_json_names_json(tmp_path):
    repo = _repo(tmp_path)
    (repo / "run.json").write_text(json.dumps({"run": {"estimator": "grpo"}, "kl": {"coef": 0.04},
                                               "rollout": {"group_size": True, "temperature": 0.9}}), encoding="utf-8")
    [f] = check_json("run.json", cwd=repo).of("VOC-2")
    assert "rollout.group_size = true: expected an integer (read under JSON)" in f["message"]


@pytest.mark.parametrize("settings,reported", [
    ("", True),  # no reader named: any reader that misreads it is reported (YAML 1.1 reads text)
    ('yaml_version = "1.1"\n', True),  # PyYAML: yaml.safe_load("v: 1e-6") == {"v": "1e-6"}
    ('yaml_version = "1.2"\n', False),
    ('yaml_version = "1.1+floats"\n', False),  # omegaconf reads 1e-6 as a float
    ('[readers]\n"conf/**" = "1.1+floats"\n', False),
    ('yaml_version = "1.1+floats"\n[readers]\n"conf/**" = "1.1"\n', True),  # the first glob that matches wins
])
def test_yml3_reports_only_what_the_named_reader_misreads(tmp_path, settings, reported):
    repo = _repo(tmp_path, settings)
    (repo / "conf").mkdir()
    (repo / "conf" / "run.yaml").write_text(RUN, encoding="utf-8")
    r = check_json("conf/run.yaml", cwd=repo)
    assert bool(r.of("YML-3")) == reported, r.findings
    if not reported:
        assert _lr(repo, "conf/run.yaml") == "1e-06"  # the value the rules read is the reader's float


def test_a_named_reader_says_so(tmp_path):
    repo = _repo(tmp_path, 'yaml_version = "1.2"\n')
    (repo / "run.yaml").write_text(RUN + "sandbox: {kind: container, network: off}\n", encoding="utf-8")
    [f] = check_json("run.yaml", cwd=repo).of("YML-3")
    assert f["message"] == ("sandbox.network = off: YAML 1.2 reads the string 'off', YAML 1.1 reads the boolean "
                            "false; YAML 1.2 is the reader the settings name for this file")


def test_a_reader_per_file_in_one_composed_run(tmp_path):
    # the base is read by the float-fix reader, the experiment by plain YAML 1.1: each value is read
    # as its own file's reader reads it
    repo = _repo(tmp_path, 'bases_key = "bases"\n[readers]\n"shared/**" = "1.1+floats"\n')
    (repo / "shared").mkdir()
    (repo / "shared" / "base.yaml").write_text(RUN, encoding="utf-8")
    (repo / "exp.yaml").write_text("bases: [shared/base.yaml]\nkl:\n  coef: 4e-2\n", encoding="utf-8")
    found = [(f["location"]["path"], f["message"].split(":")[0]) for f in check_json("exp.yaml", cwd=repo).of("YML-3")]
    assert found == [("exp.yaml", "kl.coef = 4e-2")]


def test_unknown_reader_is_a_settings_error(tmp_path):
    repo = _repo(tmp_path, '[readers]\n"conf/**" = "1.3"\n')
    (repo / "run.yaml").write_text(RUN, encoding="utf-8")
    r = run_cli("check", "run.yaml", cwd=repo)
    assert r.code == 2 and "setting readers.conf/**: expected one of" in r.err, r.err


def test_fixtures_of_the_dialects_exist():
    folder = FIXTURES / "rules" / "YML-3"
    assert {p.name for p in folder.iterdir()} >= {"good.json", "good-floats", "bad-12", "bad-readers"}
