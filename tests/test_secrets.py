"""SEC rules: literal credentials, remote code shipped with weights, unsafe deserialisation."""
from __future__ import annotations

import pytest

from support import FIXTURES, check_json

R = FIXTURES / "rules"


def at(result, rule_id):
    return sorted((f["location"]["line"], f["location"]["col"]) for f in result.of(rule_id))


def test_sec1_bad():
    res = check_json(R / "SEC-1" / "bad.yaml")
    # api_key literal, password inside a URL, upload_token literal, a high-entropy value
    assert at(res, "SEC-1") == [(14, 12), (15, 13), (17, 17), (19, 9)]
    for f in res.of("SEC-1"):
        assert f["level"] == "error" and f["cwe"] == 798
        assert "masked" in f["message"]
        assert "security policy and local rules" in f["help"] and "rotate" in f["help"]
    # the key is named in the clear (the message's own words are never read as a key and its secret)
    keyed = [f["message"] for f in res.of("SEC-1") if "holds a literal value" in f["message"]]
    assert keyed and all("key '" in m and "*" not in m.split("holds")[0] for m in keyed), keyed


def test_sec1_good():
    # environment references, placeholders, token *counts* and vocabulary tokens, commit hashes
    assert check_json(R / "SEC-1" / "good.yaml").of("SEC-1") == []


@pytest.mark.parametrize("key, expected", [
    ("api_key", True), ("grader_api_key", True), ("password", True), ("db_password", True),
    ("client_secret", True), ("auth_token", True), ("upload_token", True), ("credentials", True),
    ("max_new_tokens", False), ("pad_token", False), ("eos_token", False), ("token_limit", False),
    ("api_key_env", False), ("password_file", False), ("tokenizer", False), ("max_tokens", False),
])
def test_sec1_key_words(key, expected):
    from trimtab.common.redact import is_credential_key

    assert is_credential_key(key) is expected


def test_sec1_entropy_option(tmp_path):
    text = (R / "SEC-1" / "good.yaml").read_text() + "sink: Q7vR2xK9mT4pW8nL3bZ6cY1sHd\n"
    (tmp_path / "run.yaml").write_text(text)
    assert len(check_json(tmp_path / "run.yaml", cwd=tmp_path).of("SEC-1")) == 1
    (tmp_path / "trimtab.toml").write_text('[rules."SEC-1"]\nmin_length = 40\n')
    assert check_json(tmp_path / "run.yaml", cwd=tmp_path).of("SEC-1") == []


def test_sec2():
    bad = check_json(R / "SEC-2" / "bad.yaml")
    assert at(bad, "SEC-2") == [(15, 22)]
    assert bad.of("SEC-2")[0]["level"] == "error" and bad.of("SEC-2")[0]["cwe"] == 829
    pinned = check_json(R / "SEC-2" / "bad_pinned.yaml")
    assert at(pinned, "SEC-2") == [(16, 22)]
    assert pinned.of("SEC-2")[0]["level"] == "warning"
    assert check_json(R / "SEC-2" / "good.yaml").of("SEC-2") == []


def test_sec3_bad_points_at_config_and_module():
    res = check_json(R / "SEC-3" / "bad" / "run.yaml", cwd=R / "SEC-3" / "bad")
    assert at(res, "SEC-3") == [(11, 10)] * 3
    related = sorted((f["related"][0]["path"], f["related"][0]["line"], f["related"][0]["col"])
                     for f in res.of("SEC-3"))
    assert related == [("rewards/_ckpt.py", 5, 12),  # load(..., map_location=...) without weights_only
                       ("rewards/judge_cache.py", 11, 17),  # pickle.load
                       ("rewards/judge_cache.py", 17, 16)]  # yaml.load(..., Loader=yaml.Loader)
    assert all(f["cwe"] == 502 for f in res.of("SEC-3"))


def test_sec3_good():
    res = check_json(R / "SEC-3" / "good" / "run.yaml", args=("--only", "SEC"), cwd=R / "SEC-3" / "good")
    assert res.of("SEC-3") == []
    assert res.code == 0, res.findings


def test_sec1_random_tokens_are_found_and_run_names_are_not():
    import random
    import string

    from trimtab.common.redact import high_entropy as _high_entropy

    rng = random.Random(20261201)  # invented tokens, seeded
    alphabet = string.ascii_letters + string.digits
    tokens = ["".join(rng.choice(alphabet) for _ in range(32)) for _ in range(500)]
    found = sum(_high_entropy(t, 24, 4.0) for t in tokens)
    assert found >= 450, found  # measured here: about 97 in 100 of random 32-character tokens
    names = ["wren7B-GRPO-tidepool-2026", "WrenGrpoTidepoolRun2026v3", "lowfieldLabsWren7bTidepoolRL",
             "TidepoolArithmeticV2Split", "3f9c2a7e1b8d4c6f0a5e9d2b7c1f4a8e6d3b0c9f", "ckpt-step-000120-Final"]
    assert [n for n in names if _high_entropy(n, 24, 4.0)] == []


def test_sec2_reward_model_component(tmp_path):
    (tmp_path / "run.yaml").write_text("""run:
  estimator: grpo
rollout:
  group_size: 8
kl_coef: 0.001
rewards:
  - name: answer_check
    kind: rule
    ref: tidepool_exact_match
  - name: helpfulness
    kind: model
    ref: lowfield/wren-rm-7b
    revision: main
    trust_remote_code: true
""")
    res = check_json(tmp_path / "run.yaml")
    assert at(res, "SEC-2") == [(14, 24)]
    f = res.of("SEC-2")[0]
    assert f["level"] == "error" and "revision 'main' is not a full commit hash" in f["message"]
    assert {r["line"] for r in f["related"]} == {12, 13}
