"""One arithmetic (issue 15, item 2): the BAT and LEN rules, the ``explain`` table and the audit
pictures read the same steps (``trimtab.resolve.arithmetic``), so they state the same numbers and agree on
what breaks. The three disagreements users saw before each have a test here; then a property test
(hypothesis) over generated runs compares the numbers of the three views.

The arithmetic itself is the trade's (completions = prompts x group size; updates = completions /
mini-batch x epochs; mini-batch = micro-batch x ranks x accumulation; a prompt and its response share
one context window): each expectation below is computed in the test from the values it wrote.
"""
from __future__ import annotations

import atexit
import re
import shutil
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from support import REPO, check_json, run_cli
from test_audit import inside, parse

from trimtab.resolve import arithmetic
from trimtab.report.audit_pictures import batch_steps, token_budget
from trimtab.gate.runner import Checker
from trimtab.engine.registry import Registry
from trimtab.report.explain import models
from trimtab.common.settings import Settings

RUN = """\
# Lowfield Labs: wren-7b on tidepool arithmetic (invented scenario).
run:
  estimator: grpo
cluster:
  nodes: 1
  gpus_per_node: 8
batch:
  prompts: 64
  mini: {mini}
  micro_per_gpu: 4
rollout:
  group_size: {group}
  temperature: 1.0
"""


def _audit(tmp_path, path, cwd):
    out = tmp_path / "page.html"
    res = run_cli("audit", str(path), "--html", str(out), cwd=cwd)
    return res, parse(out.read_text(encoding="utf-8"))


# --- the three disagreements of issue 15 ------------------------------------------------------------
def test_token_budget_against_each_context_agrees_between_len2_and_the_audit(tmp_path):
    # engine 32768, model 8192, prompt 1024, response 8000: the sequence fits the engine's window but
    # runs past the model's positions (1024 + 8000 = 9024 > 8192 by 832)
    path = tmp_path / "run.yaml"
    path.write_text(RUN.format(mini=256, group=16) + "  context_length: 32768\nmodel:\n  max_position_embeddings: 8192\n"
                    "length:\n  max_prompt_length: 1024\n  max_response_length: 8000\n")
    res = check_json(path, cwd=tmp_path)
    (len2,) = res.of("LEN-2")
    assert "1024 + response 8000 = 9024 tokens exceed the model's context of 8192 by 832" in len2["message"]
    assert res.of("LEN-3")  # and the engine's window is larger than the model's
    _res, tree = _audit(tmp_path, path, tmp_path)
    broken = [g["attrs"]["data-broken"] for g in tree.find("g", "broken") if inside(g, "svg", "budget")]
    assert broken == ["sequence-model", "engine-model"]
    (why,) = [li["text"] for li in tree.find("li", data_step="sequence-model")]
    assert "9024 tokens exceed the model context of 8192 by 832" in why


def test_updates_per_step_are_the_same_number_in_the_audit_and_the_cli(tmp_path):
    # 64 prompts x 16 = 1024 completions in mini-batches of 96: 1024 / 96 = 10.67 updates, not 10
    path = tmp_path / "run.yaml"
    path.write_text(RUN.format(mini=96, group=16))
    (bat2,) = check_json(path, cwd=tmp_path).of("BAT-2")
    assert f"= {1024 / 96:.2f}" in bat2["message"]
    _res, tree = _audit(tmp_path, path, tmp_path)
    (upd,) = tree.find("li", data_step="updates")
    assert f"1024 / 96 \u00d7 1 = {1024 / 96:.2f} updates per step: not a whole number" in upd["text"]
    assert "= 10 updates" not in upd["text"]


def test_a_value_converted_from_prompts_shows_what_is_written_beside_what_it_means(tmp_path):
    # a mini-batch counted in prompts (key map): 24 prompts x group size 8 = 192 completions
    (tmp_path / "trimtab.toml").write_text('[keys]\n"batch.mini" = { key = "batch.mini", per = "prompt" }\n')
    path = tmp_path / "run.yaml"
    path.write_text(RUN.format(mini=24, group=8))
    line = path.read_text().splitlines().index("  mini: 24") + 1
    _res, tree = _audit(tmp_path, path, tmp_path)
    (label,) = [el for el in tree.find("tspan", "num") if inside(el, "svg", "batch")
                and el["attrs"]["data-concept"] == "batch.mini"]
    assert label["text"] == "24 prompts = 192 completions"
    (origin,) = [el for el in tree.find("text", "origin") if el["attrs"].get("data-origin-of") == "batch.mini"]
    assert origin["text"].endswith(f"run.yaml:{line}")  # the line that reads 24
    assert inside(origin, "a")["href"].endswith(f"-L{line}")
    table = run_cli("explain", path, cwd=tmp_path).out
    assert re.search(r"mini-batch \(completions per update\)\s+24 prompts = 192 completions", table)


# --- the same numbers in every view, for generated runs -------------------------------------------
_TMP = Path(tempfile.mkdtemp(prefix="trimtab-arith-"))
atexit.register(shutil.rmtree, _TMP, True)
_SETTINGS = Settings(root=_TMP)
_REGISTRY = Registry()
_CHECKER = Checker(_SETTINGS, _REGISTRY)


@st.composite
def runs(draw):
    """A run with small counts (any of them may break a division) and optional token budgets."""
    rows = [("run", "estimator", "grpo"), ("cluster", "nodes", draw(st.integers(1, 3))),
            ("cluster", "gpus_per_node", draw(st.sampled_from([1, 2, 4, 8])))]
    if draw(st.booleans()):
        rows.append(("train", "tensor_parallel", draw(st.sampled_from([1, 2, 3, 4]))))
    rows.append(("batch", "prompts", draw(st.integers(1, 64))))
    if draw(st.booleans()):
        rows.append(("batch", "rollouts", draw(st.integers(1, 1024))))
    rows.append(("batch", "mini", draw(st.integers(1, 512))))
    if draw(st.booleans()):
        rows.append(("batch", "micro_per_gpu", draw(st.integers(1, 8))))
    if draw(st.booleans()):
        rows.append(("batch", "grad_accum", draw(st.integers(1, 8))))
    if draw(st.booleans()):
        rows.append(("optim", "epochs", draw(st.integers(1, 3))))
    rows += [("rollout", "group_size", draw(st.integers(1, 16))), ("rollout", "temperature", 1.0)]
    for section, key in (("length", "prompt_max"), ("length", "response_max"), ("rollout", "context_max"),
                         ("model", "context_max")):
        if draw(st.booleans()):
            rows.append((section, key, draw(st.sampled_from([512, 1024, 4096, 8000, 8192, 32768]))))
    return rows


def _write(rows) -> Path:
    sections: dict[str, list] = {}
    for section, key, value in rows:
        sections.setdefault(section, []).append((key, value))
    text = "# invented run for a property test\n" + "".join(
        f"{s}:\n" + "".join(f"  {k}: {v}\n" for k, v in entries) for s, entries in sections.items())
    path = _TMP / "run.yaml"
    path.write_text(text)
    return path


def _plain(text: str) -> str:
    return text.replace("\u00d7", "x")


@settings(max_examples=60, suppress_health_check=[HealthCheck.too_slow])
@given(runs())
def test_explain_audit_and_findings_state_the_same_numbers(rows):
    path = _write(rows)
    (m,), _problems = models(str(path), _SETTINGS, _REGISTRY)
    a = arithmetic.of(m)
    table = {q: (v, how) for q, v, how in arithmetic.rows(m)}
    pic = {s.key: s for s in batch_steps(m).steps}
    budget = token_budget(m)
    found = {}
    for f in _CHECKER.check_file(str(path), "run.yaml").findings:
        found.setdefault(f.rule_id, []).append(f.message)
    # completions per step: BAT-1 exactly when the picture shows the stated product as broken
    comp = a.step("completions")
    assert bool(found.get("BAT-1")) == bool(pic["completions"].broken)
    if comp is not None and comp.agrees is False:
        assert f"= {comp.value}" in found["BAT-1"][0] and f"= {comp.value}" in pic["completions"].broken
    # mini-batches and updates
    mini, upd = a.step("mini"), a.step("updates")
    if mini is not None and mini.divides is False:
        assert table["mini-batches per step"] == ("-", f"does not divide: {mini.formula}")
        assert mini.formula in _plain(pic["mini"].broken)
        if not mini.disputed:
            (msg,) = found["BAT-2"]
            R, M = mini.terms[0].value, mini.terms[1].value
            if M > R:
                assert f"a mini-batch of {M} completions is larger than the {R} completions per step" in msg
            else:
                assert mini.formula in msg
            if upd is not None and M < R:
                shown = arithmetic.fmt(upd.value)
                assert f"= {shown}" in msg and table["updates per step"][1].endswith(f"= {shown}")
                assert f"= {shown} updates" in pic["updates"].text
    else:
        assert not pic["mini"].broken or "BAT-8" in found  # a count that is not positive (BAT-8)
        assert "BAT-2" not in found or m.values.get("optim.updates_per_step")
        if mini is not None:
            assert table["mini-batches per step"] == (str(mini.value), f"= {mini.formula}")
            if upd is not None:
                assert table["updates per step"][0] == str(upd.value)
                assert pic["updates"].text.endswith(f"= {upd.value} update{'s' if upd.value != 1 else ''}")
    # a mini-batch over ranks, micro-batches and accumulation: BAT-3 exactly when the picture breaks there
    micro_broken = bool(pic["micro"].broken) and a.step("ranks") is not None and a.step("ranks").divides is not False
    assert micro_broken == bool(found.get("BAT-3")), (found, pic["micro"].broken)
    acc = a.step("accum")
    if acc is not None and acc.agrees is False:  # the table shows the stated number and what it should be
        assert table["accumulation steps"] == (str(acc.stated.value), table["accumulation steps"][1])
        assert f"but {acc.formula} = {acc.value}" in table["accumulation steps"][1]
        assert f"= {acc.value}" in pic["micro"].broken and f"x {acc.value} accumulation" in found["BAT-3"][0]
    elif acc is not None and acc.divides is not False:
        assert table["accumulation steps"][0] == str(acc.value)
    # token budget: LEN-2 and LEN-3 exactly when the picture breaks, with the same excess
    seq = [(k, why, x) for k, why, x in budget.broken if k.startswith("sequence")]
    assert bool(seq) == bool(found.get("LEN-2"))
    if seq:
        for shared in ("fills", f"by {seq[0][2]}"):
            assert (shared in seq[0][1]) == (shared in found["LEN-2"][0]), (seq, found["LEN-2"])
        key = "fit_engine" if seq[0][0].endswith("engine") else "fit_model"
        assert table[a.step(key).title][0] == str(a.step(key).value)
    eng = [x for k, _w, x in budget.broken if k == "engine-model"]
    assert bool(eng) == bool(found.get("LEN-3"))
    if eng:
        assert f"by {eng[0]}" in found["LEN-3"][0]


def test_the_views_import_no_arithmetic_of_their_own():
    # the rules, the explain table and the audit compute nothing themselves: no derive(), no settled()
    # of their own, no divisibility of batch quantities outside trimtab.resolve.arithmetic
    for rel in ("rules/bat.py", "rules/length.py", "linter/report/explain.py"):
        text = (REPO / rel).read_text(encoding="utf-8")
        assert "def derive" not in text and "def settled" not in text, rel
    assert "def derive" not in (REPO / "linter/resolve/concepts.py").read_text(encoding="utf-8")
    audit = "".join((REPO / "linter/report" / name).read_text(encoding="utf-8")
                    for name in ("audit.py", "audit_pictures.py", "audit_svg.py"))
    assert "model.int(" not in audit and "model.derived" not in audit.split("def batch_steps")[1].split("def _v")[0]
    # the pictures draw the arithmetic's whole parts and remainders; they divide nothing themselves
    assert "divmod(" not in audit and " % " not in audit.replace("k % 2", "").replace("col % 2", "").replace("t % 2", "")
