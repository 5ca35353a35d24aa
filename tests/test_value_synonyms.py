"""Key maps' value synonyms (issue #16, class 7a): ``"kl.estimator" = { key = "...", values = {
low_var_kl = "k3" } }`` makes a trainer's own word for an enumerated value read as the value it
stands for; the origin still shows what is written. The estimators k1/k2/k3: Schulman 2020,
"Approximating KL Divergence" (from memory): k3 = (r - 1) - log r, unbiased and low-variance."""
from __future__ import annotations

import pytest

from support import RULE_FIXTURES, RUN_CONFIG, check_json, run_cli

RUN = RUN_CONFIG + "  estimator: low_var_kl\n"  # support.RUN_CONFIG ends in its kl section


def _repo(tmp_path, settings: str, text: str = RUN):
    (tmp_path / ".git").mkdir()
    (tmp_path / "run.yaml").write_text(text, encoding="utf-8")
    (tmp_path / "trimtab.toml").write_text(settings, encoding="utf-8")
    return tmp_path


def test_a_value_synonym_reads_as_the_value_it_stands_for(tmp_path):
    repo = _repo(tmp_path, '[keys."kl.estimator"]\nkey = "kl.estimator"\nvalues = { low_var_kl = "k3" }\n')
    r = check_json("run.yaml", cwd=repo)
    assert r.of("KL-4") == [] and r.of("VOC-3") == []
    out = run_cli("explain", "run.yaml", cwd=repo).out
    line = next(x for x in out.splitlines() if x.strip().startswith("kl.estimator"))
    # the value the rules read is k3; the origin shows the line and what is written there
    assert line.split()[1] == "k3" and "run.yaml:10:14" in line and "low_var_kl means k3" in line


def test_synonyms_apply_where_the_concept_is_found_by_its_alias(tmp_path):
    # the mapped key is not in this file (another layout): the trade word finds the concept, and the
    # team's value synonyms still say what its value means
    repo = _repo(tmp_path, '[keys."kl.estimator"]\nkey = "objective.kl_form"\nvalues = { LOW_VAR_KL = "k3" }\n')
    assert check_json("run.yaml", cwd=repo).of("KL-4") == []


def test_without_the_map_a_described_estimator_is_a_note_naming_the_line(tmp_path):
    repo = _repo(tmp_path, "")
    [f] = check_json("run.yaml", cwd=repo).of("KL-4")
    assert f["level"] == "note" and (f["location"]["line"], f["location"]["col"]) == (10, 14)
    assert "describes k3 or k2 in words" in f["message"]
    assert f["suggestion"] == ('[tool.trimtab.keys] "kl.estimator" = { key = "kl.estimator", '
                               'values = { low_var_kl = "k3" } }')


def test_the_suggested_line_is_valid_settings_and_silences_the_note(tmp_path):
    repo = _repo(tmp_path, "")
    [f] = check_json("run.yaml", cwd=repo).of("KL-4")
    line = f["suggestion"].removeprefix("[tool.trimtab.keys] ")
    (repo / "trimtab.toml").write_text("[keys]\n" + line + "\n", encoding="utf-8")
    r = check_json("run.yaml", cwd=repo)
    assert r.code in (0, 1), r.err
    assert r.of("KL-4") == []


def test_an_unknown_name_is_still_an_error(tmp_path):
    repo = _repo(tmp_path, "", RUN.replace("low_var_kl", "wobble"))
    [f] = check_json("run.yaml", cwd=repo).of("KL-4")
    assert f["level"] == "error"


@pytest.mark.parametrize("word,means", [("low_var_kl", "k3 or k2"), ("unbiased_low_var", "k3"),
                                        ("mse_kl", "k2"), ("naive_kl", "k1")])
def test_estimators_described_in_words(tmp_path, word, means):
    # Schulman 2020 (from memory): k1 the naive log ratio; k2 half its square (low variance, biased);
    # k3 unbiased and low variance
    repo = _repo(tmp_path, "", RUN.replace("low_var_kl", word))
    [f] = check_json("run.yaml", cwd=repo).of("KL-4")
    assert f["level"] == "note" and f"describes {means} in words" in f["message"]


def test_synonyms_of_another_enumeration(tmp_path):
    text = RUN + "sandbox:\n  kind: jail_cell\n"
    repo = _repo(tmp_path, "", text)
    assert [f["location"]["line"] for f in check_json("run.yaml", cwd=repo).of("VOC-3")] == [12]
    (repo / "trimtab.toml").write_text('[keys."sandbox.kind"]\nkey = "sandbox.kind"\n'
                                       'values = { jail_cell = "container" }\n', encoding="utf-8")
    assert check_json("run.yaml", cwd=repo).of("VOC-3") == []


@pytest.mark.parametrize("entry,words", [
    ('[keys."kl.estimator"]\nkey = "kl.kind"\nvalues = { low_var_kl = "k7" }\n',
     "setting keys.kl.estimator.values.low_var_kl: expected one of k1, k2, k3, found 'k7'"),
    ('[keys."optim.lr"]\nkey = "lr"\nvalues = { tiny = "k3" }\n',
     "setting keys.optim.lr.values: expected value synonyms only for an enumerated concept"),
    ('[keys."kl.estimator"]\nkey = "kl.kind"\nvalues = { low_var_kl = 3 }\n',
     'setting keys.kl.estimator: expected a key path string, or a table with key (and per, scope, fields, values), '
     'found {"key": "kl.kind", "values": {"low_var_kl": 3}}'),
])
def test_wrong_value_synonyms_are_settings_errors(tmp_path, entry, words):
    repo = _repo(tmp_path, entry)
    r = run_cli("check", "run.yaml", cwd=repo)
    assert r.code == 2 and words in r.err, r.err


def test_fixtures_of_the_synonym_exist():
    # the harness (tests/test_fixtures.py) checks them; this names them for the reader
    assert (RULE_FIXTURES / "KL-4" / "good-synonym" / "trimtab.toml").is_file()
    assert (RULE_FIXTURES / "KL-4" / "bad-words" / "run.yaml").is_file()


def test_an_unknown_value_names_the_synonym_line(tmp_path):
    repo = _repo(tmp_path, "", RUN + "sandbox:\n  kind: jail cell\n")
    [f] = check_json("run.yaml", cwd=repo).of("VOC-3")
    assert f["suggestion"] == ("if it is your trainer's word for one of them: [tool.trimtab.keys] "
                               '"sandbox.kind" = { key = "sandbox.kind", values = { "jail cell" = '
                               '"<one of none, process, container, vm, remote>" } }')
    # the line, with the value it means chosen, is valid settings and settles it
    line = f["suggestion"].split("[tool.trimtab.keys] ", 1)[1].replace("<one of none, process, container, vm, remote>",
                                                                        "container")
    (repo / "trimtab.toml").write_text("[keys]\n" + line + "\n", encoding="utf-8")
    r = check_json("run.yaml", cwd=repo)
    assert r.code in (0, 1), r.err
    assert r.of("VOC-3") == []
