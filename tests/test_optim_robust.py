"""The KL, CLP, ALG and OPT rules never crash, whatever the values (bad input gives findings,
never a traceback)."""
from __future__ import annotations

from hypothesis import given, settings, strategies as st

from support import check_json

CONCEPTS = ["run.estimator", "kl.coef", "kl.enabled", "kl.estimator", "kl.placement", "kl.target", "kl.horizon",
            "reference.source", "clip.low", "clip.high", "clip.dual", "optim.lr", "optim.grad_clip",
            "optim.warmup_steps", "schedule.total_steps", "critic.source", "critic.lr", "gae.gamma", "gae.lambda",
            "checkpoint.every", "checkpoint.dir", "output.dir", "batch.rollouts", "batch.mini", "optim.epochs",
            "run.seed"]
VALUES = ["0", "-1", "1", "0.5", "1.0e-6", "3e-6", "true", "false", "null", "none", "''", "'x'", "[1, 2]",
          "{a: 1}", "k3", "both", "grpo", "ppo", "rloo", "1:30", ".inf", "-.inf", ".nan", "010", "1e400",
          "out/a", "./out/a/"]


@settings(max_examples=25)
@given(st.dictionaries(st.sampled_from(CONCEPTS), st.sampled_from(VALUES), min_size=3, max_size=14))
def test_no_rule_crashes(tmp_path_factory, chosen):
    body = "rollout:\n  group_size: 4\n  temperature: 1.0\n"
    sections: dict[str, list[str]] = {}
    for concept, value in chosen.items():
        section, key = concept.split(".")
        sections.setdefault(section, []).append(f"  {key}: {value}")
    body += "".join(f"{s}:\n" + "\n".join(lines) + "\n" for s, lines in sections.items() if s != "rollout")
    d = tmp_path_factory.mktemp("r")
    (d / "a.yaml").write_text("run:\n  estimator: grpo\n" + body if "run" not in sections else body)
    (d / "b.yaml").write_text(body)
    r = check_json(d / "a.yaml", d / "b.yaml")
    assert r.code in (0, 1), r.err
    assert r.of("TOOL-1") == []
