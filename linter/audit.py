"""``trimtab audit CONFIG... --html FILE``: one self-contained page per invocation that shows each
config's source with its findings in place, the batch arithmetic and the token budget as pictures,
and the resolved concepts with their origins.

The page is built with the standard library only (``html.escape``; no template engine), loads
nothing (a Content-Security-Policy of ``default-src 'none'``; the one style block is allowed by its
SHA-256 hash; no scripts at all), and is byte-identical for the same input: no timestamps, every
list in a stable order. Every piece of text that came from a config goes through ``_e``.
"""
from __future__ import annotations

import base64
import hashlib
import html
import re
from dataclasses import dataclass, field

from . import __version__, arithmetic
from .findings import Finding, Level, Location
from .model import RunModel
from .redact import for_text, mask_source

LEVELS = (Level.ERROR, Level.WARNING, Level.NOTE)
# Told by text and by shape as well as by colour (the shapes also print in black and white).
SHAPE = {Level.ERROR: "\u25a0", Level.WARNING: "\u25b2", Level.NOTE: "\u25cf"}
# The fill of a broken step: a colour used nowhere else on the page (the browser test looks for it).
BROKEN_FILL = "#fbd5d5"
BROKEN_INK = "#a50f15"

# The line breaks the loaders count, so that page lines match finding lines: YAML 1.1 counts CR, LF,
# NEL, LS and PS (YAML 1.1, section 5.4), and both reference readers (PyYAML; ruamel.yaml, whose
# scanner keeps PyYAML's) count all five even in YAML 1.2 mode. YAML 1.2 itself counts only CR and
# LF (YAML 1.2.2, section 5.4): to a strict 1.2 reader NEL, LS and PS are content.
_LINE_BREAK = re.compile("\r\n|[\r\n\x85\u2028\u2029]")


def _e(value) -> str:
    """Escape any text for an HTML text node or a quoted attribute: masked (no credential is shown,
    ``trimtab.redact``), control and bidirectional-override characters shown, never obeyed (they
    could make the source read differently from what the loader reads), then HTML-escaped."""
    return html.escape(for_text(value), quote=True)


def _num(n) -> str:
    if isinstance(n, float) and n.is_integer():
        n = int(n)
    return f"{n:,}".replace(",", "\u2009") if isinstance(n, int) and abs(n) >= 10000 else str(n)


# --- what the page is made of ------------------------------------------------------------------
@dataclass
class Quantity:
    """One number of the picture: its value and where it came from."""

    concept: str
    value: int | None
    origin: str  # "path:line", "derived (64 x 8)", "command line" or "not found"
    loc: Location | None = None  # where it was written (for a link)
    shown: str = ""  # what is written beside what it means, when they differ ("24 prompts = 192 completions")


@dataclass
class Step:
    """One step of the batch arithmetic; broken when it does not divide (or disagrees)."""

    key: str  # prompts, groups, completions, mini, micro, updates
    title: str
    text: str  # the arithmetic in words
    quantities: list[Quantity] = field(default_factory=list)
    broken: str = ""  # why, with the numbers
    remainder: int | None = None
    known: bool = True  # False when an input is missing: shown as unknown, never as broken or fine


@dataclass
class Picture:
    steps: list[Step]
    P: int | None = None
    G: int | None = None
    R: int | None = None
    M: int | None = None
    u: int | None = None
    D: int | None = None
    A: int | None = None
    E: int | None = None


def _int(x):
    """A count the picture can label: an int, or an integral float as an int; else None."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    if isinstance(x, float):
        return int(x) if x.is_integer() else None
    return x


def _x(text: str) -> str:
    """The arithmetic's words with the multiplication sign of the page."""
    return text.replace(" x ", " \u00d7 ")


def quantity(a: arithmetic.Arithmetic, concept: str) -> Quantity:
    """One number of the picture, read from the run's arithmetic: what it means (in the concept's
    unit) and, when it was converted, what is written in the file beside it."""
    t, d = a.term(concept), a.derived(concept)
    if t is not None and t.source is not None:
        v = t.source
        n = _int(t.value)
        loc = v.location
        if n is None:
            why = f"not converted ({t.missing} unknown)" if t.missing else f"not a whole number ({t.value!r})"
            return Quantity(concept, None, why, loc)
        if loc.path is None:
            return Quantity(concept, n, "command line", shown=t.shown() if t.converted else "")
        return Quantity(concept, n, f"{loc.path}:{loc.line}", loc, shown=t.shown() if t.converted else "")
    if d is not None:
        return Quantity(concept, _int(d.value), f"derived ({d.formula})" if d.formula else "derived")
    if concept == "train.data_parallel" and arithmetic.world_conflict(a):
        return Quantity(concept, None, arithmetic.world_conflict(a))  # stated, but in conflict: not "not found"
    return Quantity(concept, None, "not found")


def batch_steps(model: RunModel) -> Picture:
    """The batch arithmetic of one run, step by step, as ``trimtab.arithmetic`` computed it (the
    same steps the BAT rules and ``explain`` read). A step whose inputs are missing is shown as
    unknown, never as broken."""
    a = arithmetic.of(model)
    q = {c: quantity(a, c) for c in ("batch.prompts", "rollout.group_size", "batch.rollouts", "batch.mini",
                                     "batch.micro_per_gpu", "batch.grad_accum", "train.data_parallel",
                                     "optim.epochs", "optim.updates_per_step", "cluster.world_size")}
    P, G = q["batch.prompts"].value, q["rollout.group_size"].value
    R, M = q["batch.rollouts"].value, q["batch.mini"].value
    u, A, D = q["batch.micro_per_gpu"].value, q["batch.grad_accum"].value, q["train.data_parallel"].value
    E = q["optim.epochs"].value
    stated_R = model.values.get("batch.rollouts") is not None
    steps = [
        Step("prompts", "Prompts per step", f"{_v(P)} unique prompts per training step", [q["batch.prompts"]],
             known=P is not None),
        Step("groups", "Groups of G completions",
             f"each prompt is sampled {_v(G)} times: {_v(P)} groups of {_v(G)}", [q["rollout.group_size"]],
             known=G is not None),
    ]
    comp = Step("completions", "Completions per step", "", [q["batch.rollouts"]])
    s = a.step("completions")
    if s is not None and s.agrees is False:
        comp.broken = f"{R} completions are stated, but {P} prompts \u00d7 {G} = {s.value}"
        comp.remainder = abs(R - s.value)
        comp.text = f"stated {R}; {P} \u00d7 {G} = {s.value}"
    else:
        comp.text = f"{_v(P)} \u00d7 {_v(G)} = {_v(R)} completions" if not stated_R else f"{_v(R)} completions"
        comp.known = R is not None
    steps.append(comp)
    mini = Step("mini", "Mini-batches", "", [q["batch.mini"]])
    s = a.step("mini")
    if s is not None and s.divides is False:
        k = R // M
        mini.broken = f"{R} completions do not split into mini-batches of {M}: {_x(s.formula)}"
        mini.remainder = s.remainder
        mini.text = f"{_x(s.formula)}: {k} whole mini-batches, remainder {s.remainder}"
    elif s is not None:
        mini.text = f"{_x(s.formula)} = {s.value} mini-batch{'es' if s.value != 1 else ''} of {M}"
    elif M is not None and M <= 0:
        mini.broken, mini.text = f"a mini-batch of {M} completions", f"mini-batch {M}"
    else:
        mini.text = f"mini-batch of {_v(M)} completions; completions per step {_v(R)}"
        mini.known = False
    steps.append(mini)
    micro = Step("micro", "Per-rank micro-batches \u00d7 accumulation", "",
                 [q["train.data_parallel"], q["batch.micro_per_gpu"], q["batch.grad_accum"]])
    per_rank, acc, ranks = a.step("per_rank"), a.step("accum"), a.step("ranks")
    only = a.step("accum_only")  # no micro-batch stated: the accumulation alone splits the share of a rank
    if only is not None and only.divides is False:
        micro.broken = (f"a mini-batch of {M} over {D} ranks is {per_rank.value} per rank, which does not split "
                        f"into {A} accumulation steps: {_x(only.formula)}")
        micro.remainder = only.remainder
        micro.text = _x(only.formula)
    elif per_rank is not None and acc is not None or per_rank is not None and per_rank.divides is False:
        bad = per_rank if per_rank.divides is False else acc
        if bad.divides is False:
            micro.broken = (f"a mini-batch of {M} does not split into micro-batches of {_v(u)} on {D} ranks: "
                            f"{_x(bad.formula)}")
            micro.remainder = bad.remainder
            micro.text = _x(bad.formula)
        else:
            micro.text = f"{_x(acc.formula)} = {acc.value} accumulation steps"
            if acc.agrees is False:
                micro.broken = f"accumulation {A} is stated, but {_x(acc.formula)} = {acc.value}"
                micro.remainder = abs(A - acc.value)
                micro.text += f"; stated {A}"
            A = acc.value if acc.agrees is not False else A
    else:
        micro.text = (f"{_v(D)} data-parallel ranks \u00d7 {_v(u)} per micro-batch \u00d7 {_v(A)} accumulation "
                      f"steps")
        micro.known = False
        if ranks is not None and ranks.divides is False:
            # the ranks themselves cannot be counted: the world does not split into model-parallel groups
            world, X = ranks.terms[0].whole, a.step("replica").value
            group = " \u00d7 ".join(str(t.whole) for t in ranks.terms[1:]) if len(ranks.terms) > 2 else str(X)
            k, r = divmod(world, X)
            micro.broken = (f"{world} GPUs do not split into model-parallel groups of {group}: "
                            f"{world} = {k} \u00d7 {X} + {r}")
            micro.remainder = r
            micro.text = f"data-parallel ranks: {world} GPUs = {k} \u00d7 {X} + {r}"
            micro.known = True
    steps.append(micro)
    upd = Step("updates", "Optimiser updates per step", "", [q["optim.epochs"]])
    s = a.step("updates")
    if s is not None and s.divides is not False and not isinstance(s.value, float):
        k, e = R // M, E or 1
        upd.text = (f"{k} mini-batch{'es' if k != 1 else ''} \u00d7 {e} epoch{'s' if e != 1 else ''} = "
                    f"{s.value} update{'s' if s.value != 1 else ''}")
        if s.agrees is False:
            upd.broken = f"{s.stated.whole} updates per step are stated, but {_x(s.formula)} = {s.value}"
    elif s is not None:
        k = R // M
        upd.text = (f"{_x(s.formula)} = {arithmetic.fmt(s.value)} updates per step: not a whole number; "
                    f"{k} whole mini-batch{'es' if k != 1 else ''}, the {R % M} completions left over make no "
                    "whole mini-batch")
    else:
        upd.text = f"{_v(E)} epoch(s) over each step's completions"
        upd.known = False
    steps.append(upd)
    return Picture(steps, P, G, R, M, u, D, A, E)


def _v(n) -> str:
    return "?" if n is None else str(n)


@dataclass
class Budget:
    prompt: Quantity
    response: Quantity
    engine: Quantity
    model: Quantity
    broken: list[tuple[str, str, int]] = field(default_factory=list)  # (key, why, excess)


def budget_words(b: Budget) -> str:
    """What a budget with nothing broken says: what was compared with what, or what is missing."""
    lengths = [x.concept for x in (b.prompt, b.response) if x.value is None]
    windows = [x for x in (b.engine, b.model) if x.value is not None]
    if lengths:
        return f"not found: {', '.join(lengths)}; nothing to compare"
    if not windows:
        return (f"no context window found ({b.engine.concept}, {b.model.concept}): prompt + response "
                "is compared with nothing")
    return "prompt + response fit " + " and ".join(f"{x.concept} {_num(x.value)}" for x in windows)


def token_budget(model: RunModel) -> Budget:
    """The token budget against each context window, as ``trimtab.arithmetic`` computed it (the
    steps LEN-2 and LEN-3 read)."""
    a = arithmetic.of(model)
    b = Budget(quantity(a, "length.prompt_max"), quantity(a, "length.response_max"),
               quantity(a, "rollout.context_max"), quantity(a, "model.context_max"))
    for key, name in (("fit_engine", "engine"), ("fit_model", "model")):
        s = a.step(key)
        if s is None or not s.broken:
            continue
        limit = s.terms[-1].whole
        if len(s.terms) == 3 and s.terms[0].whole >= limit:
            why = f"the prompt budget of {s.terms[0].whole} tokens fills the {name} context of {limit}: no room for " \
                  "any response"
        elif len(s.terms) == 3:
            why = f"prompt {s.terms[0].whole} + response {s.terms[1].whole} = {s.value} tokens exceed the {name} " \
                  f"context of {limit} by {s.excess}"
        else:
            why = f"the response budget of {s.value} tokens fills the {name} context of {limit}: no room for the prompt"
        b.broken.append((f"sequence-{name}", why, s.excess))
        break
    s = a.step("engine_model")
    if s is not None and s.broken:
        b.broken.append(("engine-model", f"the engine context {s.value} exceeds the model context "
                                         f"{s.terms[1].whole} by {s.excess}", s.excess))
    return b


# --- the page ------------------------------------------------------------------------------------
@dataclass
class Config:
    path: str  # as shown
    text: str
    models: list[RunModel]
    problems: list  # the loader's Problems (document.Problem)
    findings: list[Finding]
    base_of: list[str] = field(default_factory=list)  # for a base file: the configs composed from it


class Page:
    def __init__(self, configs: list[Config], other: list[Finding], gate: Level, counts: dict,
                 incomplete: bool):
        self.configs = configs
        self.other = other
        self.gate = gate
        self.counts = counts
        self.incomplete = incomplete
        self.file_ids = {c.path: f"f{i + 1}" for i, c in enumerate(configs)}
        self.line_counts = {c.path: len(_LINE_BREAK.split(c.text)) if c.text else 0 for c in configs}
        self.finding_ids: dict[int, str] = {}
        n = 0
        for c in configs:
            for f in c.findings:
                n += 1
                self.finding_ids[id(f)] = f"finding-{n}"
        for f in other:
            n += 1
            self.finding_ids[id(f)] = f"finding-{n}"

    # anchors -------------------------------------------------------------------------------------
    def anchor(self, loc: Location | None) -> str | None:
        """#id of a location's source line when that file is on the page, else None."""
        if loc is None or loc.path is None or loc.path not in self.file_ids:
            return None
        if not loc.line or loc.line > self.line_counts[loc.path]:
            return f"{self.file_ids[loc.path]}-src"
        return f"{self.file_ids[loc.path]}-L{loc.line}"

    def link(self, loc: Location, text: str | None = None) -> str:
        label = _e(text if text is not None else loc.label())
        a = self.anchor(loc)
        return f'<a href="#{a}">{label}</a>' if a else label

    # the whole page ------------------------------------------------------------------------------
    def render(self) -> str:
        failing = sum(n for lvl, n in self.counts.items() if Level.parse(lvl) >= self.gate)
        verdict = "incomplete" if self.incomplete else ("fails" if failing else "passes")
        title = f"trimtab audit: {sum(1 for c in self.configs if not c.base_of)} config(s), gate {verdict}"
        out = [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            f'<meta http-equiv="Content-Security-Policy" content="{html.escape(csp(), quote=True)}">',
            '<meta name="referrer" content="no-referrer">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>{_e(title)}</title>",
            f"<style>{CSS}</style>",
            "</head>",
            "<body>",
            '<header id="top">',
            "<h1>trimtab audit</h1>",
        ]
        out.append(self._summary(verdict, failing))
        out.append("</header>")
        out.append("<main>")
        for i, c in enumerate(self.configs):
            out.append(self._config(i, c))
        if self.other:
            out.append('<section class="other" id="other-findings"><h2>Findings without a line on this page</h2>')
            out.append('<ul class="findings-plain">')
            for f in self.other:
                out.append(f'<li>{self._finding(f)}</li>')
            out.append("</ul></section>")
        out.append("</main>")
        out.append(f'<footer><p>Written by trimtab {_e(__version__)} (<code>trimtab audit</code>). '
                   "This page loads nothing and runs no scripts; its text is the configs' own, escaped."
                   "</p></footer>")
        out.append("</body>")
        out.append("</html>")
        return "\n".join(out) + "\n"

    def _summary(self, verdict: str, failing: int) -> str:
        gate = str(self.gate)
        shape = {"passes": "\u2714", "fails": "\u2716", "incomplete": "\u26a0"}[verdict]
        why = {"passes": f"no finding at or above {gate}",
               "fails": f"{failing} finding(s) at or above {gate}",
               "incomplete": "the check could not finish (a rule crashed or a plugin failed to load)"}[verdict]
        runs = sum(1 for c in self.configs for m in c.models if m.is_rl)
        rows = [f'<p class="verdict verdict-{verdict}" data-verdict="{verdict}"><span class="shape" '
                f'aria-hidden="true">{shape}</span> Gate <strong>{_e(gate)}</strong>: '
                f"<strong>{verdict.upper()}</strong> \u2014 {_e(why)}</p>",
                '<table class="summary"><thead><tr><th scope="col">files</th><th scope="col">RL runs</th>']
        for lvl in LEVELS:
            rows.append(f'<th scope="col" class="lvl-{lvl}">{SHAPE[lvl]} {lvl}s</th>')
        rows.append("</tr></thead><tbody><tr>")
        rows.append(f"<td>{sum(1 for c in self.configs if not c.base_of)}</td><td>{runs}</td>")
        for lvl in LEVELS:
            rows.append(f'<td class="count" data-level="{lvl}">{self.counts.get(str(lvl), 0)}</td>')
        rows.append("</tr></tbody></table>")
        rows.append('<nav aria-label="configs"><ol class="toc">')
        for i, c in enumerate(self.configs):
            per = _per_level(c.findings)
            tally = ", ".join(f"{SHAPE[l]} {per[l]} {l}" for l in LEVELS if per[l]) or "no findings"
            broken = sum(1 for m in c.models if m.is_rl for s in batch_steps(m).steps if s.broken)
            extra = f"; {broken} broken step(s) in the batch arithmetic" if broken else ""
            base = "base file " if c.base_of else ""
            rows.append(f'<li>{base}<a href="#cfg-{i + 1}">{_e(c.path)}</a> \u2014 {tally}{extra}</li>')
        rows.append("</ol></nav>")
        return "\n".join(rows)

    def _index(self, path: str) -> int:
        return next(i for i, c in enumerate(self.configs) if c.path == path) + 1

    # one config ------------------------------------------------------------------------------------
    def _config(self, i: int, c: Config) -> str:
        fid = self.file_ids[c.path]
        per = _per_level(c.findings)
        kind = ' data-base="1"' if c.base_of else ""
        out = [f'<section class="config" id="cfg-{i + 1}" data-path="{_e(c.path)}"{kind}>',
               f"<h2>{'Base file ' if c.base_of else ''}{_e(c.path)}</h2>"]
        if c.base_of:
            out.append('<p class="muted">Composed into ' + ", ".join(
                f'<a href="#cfg-{self._index(b)}">{_e(b)}</a>' for b in c.base_of) + "</p>")
        out.append('<p class="tally">' + ", ".join(f'<span class="lvl-{l}">{SHAPE[l]} {per[l]} {l}(s)</span>'
                                                 for l in LEVELS) + "</p>")
        reported = {f.location.line for f in c.findings}
        for p in c.problems:  # read problems that no finding reports (e.g. its rule was skipped)
            if p.line not in reported:
                where = f"line {p.line}: " if p.line else ""
                out.append(f'<p class="problem">{SHAPE[Level.ERROR]} cannot read all of it: {where}{_e(p.message)}</p>')
        if c.findings:
            out.append('<h3>Findings</h3><ol class="finding-index">')
            for f in c.findings:
                where = f"line {f.location.line}" if f.location.line else "whole file"
                out.append(f'<li class="lvl-{f.level}"><a href="#{self.finding_ids[id(f)]}">'
                           f"{SHAPE[f.level]} {f.level} {_e(f.rule_id)}</a> {where}: {_e(f.message)}</li>")
            out.append("</ol>")
        rl = [m for m in c.models if m.is_rl]
        if not c.models and not c.problems and not c.base_of:
            out.append('<p class="muted">No YAML document in this file.</p>')
        for m in c.models:
            if not m.is_rl:
                out.append(f'<p class="muted">Document {m.index + 1} is not an RL run config (too few RL '
                           "concepts found); the rules for runs skip it.</p>")
        for m in rl:
            out.append(self._run(i, m, len(rl) > 1))
        out.append(f'<h3 id="{fid}-src">Source</h3>')
        out.append(self._source(c))
        for m in rl:
            out.append(self._concepts(m, len(rl) > 1))
        out.append('<p class="back"><a href="#top">back to the summary</a></p>')
        out.append("</section>")
        return "\n".join(out)

    def _run(self, i: int, m: RunModel, several: bool) -> str:
        rid = f"cfg-{i + 1}-run-{m.index + 1}"
        pic = batch_steps(m)
        budget = token_budget(m)
        head = f"Document {m.index + 1}: " if several else ""
        out = [f'<section class="run" id="{rid}" data-run="{m.index + 1}">',
               f"<h3>{head}Batch arithmetic</h3>",
               batch_svg(self, rid, pic),
               '<ol class="steps">']
        for s in pic.steps:
            if s.broken:
                mark = f'<strong class="broken-text">\u2716 BROKEN: {_e(s.broken)}</strong>'
            elif s.known:
                mark = '<span class="ok-text">\u2714 divides</span>' if s.key in ("mini", "micro") else ""
            else:
                mark = '<span class="muted">? not known (an input was not found)</span>'

            flag = ' data-broken="1"' if s.broken else ""
            out.append(f'<li data-step="{s.key}"{flag}>'
                       f"<strong>{_e(s.title)}</strong>: {_e(s.text)} {mark}</li>")
        out.append("</ol>")
        readings = arithmetic.reading_lines(m)
        if readings:  # counts whose unit the file does not state: every reading and what supports one
            out.append(f"<h3>{head}Units by evidence</h3>")
            out.append('<pre class="readings">' + _e("\n".join(line.strip() for line in readings[2:])) + "</pre>")
        out.append(f"<h3>{head}Token budget</h3>")
        out.append(budget_svg(self, rid, budget))
        out.append('<ul class="steps">')
        for key, why, _x in budget.broken:
            out.append(f'<li data-step="{key}" data-broken="1"><strong class="broken-text">\u2716 BROKEN: '
                       f"{_e(why)}</strong></li>")
        if not budget.broken:
            out.append(f"<li>{_e(budget_words(budget))}</li>")
        out.append("</ul></section>")
        return "\n".join(out)

    def _finding(self, f: Finding) -> str:
        parts = [f'<div class="finding lvl-{f.level}" id="{self.finding_ids[id(f)]}" data-rule="{_e(f.rule_id)}" '
                 f'data-level="{f.level}" data-line="{f.location.line}" role="note">',
                 f'<p class="finding-head"><span class="shape" aria-hidden="true">{SHAPE[f.level]}</span> '
                 f'<span class="level">{str(f.level).upper()}</span> <span class="rule">{_e(f.rule_id)}</span> '
                 f'<span class="where">{self.link(f.location)}</span></p>',
                 f'<p class="message">{_e(f.message)}</p>']
        if f.related:
            parts.append('<ul class="related">')
            for r in f.related:
                msg = f": {_e(r.message)}" if r.message else ""
                parts.append(f"<li>related: {self.link(r)}{msg}</li>")
            parts.append("</ul>")
        if f.suggestion:
            parts.append(f'<p class="suggestion"><strong>Suggestion:</strong> {_e(f.suggestion)}</p>')
        if f.help:
            parts.append(f'<p class="help"><strong>Help:</strong> {_e(f.help)}</p>')
        if f.cwe:
            parts.append(f'<p class="help">CWE-{int(f.cwe)}</p>')
        parts.append("</div>")
        return "".join(parts)

    def _source(self, c: Config) -> str:
        fid = self.file_ids[c.path]
        if not c.text:
            return '<p class="muted">(no text to show)</p>' + "".join(self._finding(f) for f in c.findings)
        lines = _LINE_BREAK.split(c.text)
        if lines and lines[-1] == "" and len(lines) > 1:
            lines.pop()
        at: dict[int, list[Finding]] = {}
        for f in c.findings:
            line = f.location.line if 0 < f.location.line <= len(lines) else 0
            at.setdefault(line, []).append(f)
        related: dict[int, list[tuple[Finding, Location]]] = {}
        for cfg in self.configs:
            for f in cfg.findings:
                for r in f.related:
                    if r.path == c.path and 0 < r.line <= len(lines):
                        related.setdefault(r.line, []).append((f, r))
        for f in self.other:
            for r in f.related:
                if r.path == c.path and 0 < r.line <= len(lines):
                    related.setdefault(r.line, []).append((f, r))
        out = ['<table class="src"><tbody>']
        if at.get(0):
            out.append('<tr class="marks" data-for-line="0"><td class="ln"></td><td>'
                       + "".join(self._finding(f) for f in at[0]) + "</td></tr>")
        for n, text in enumerate(lines, 1):
            found = at.get(n, [])
            cls = ["line"]
            if found:
                cls.append(f"has-{max(f.level for f in found)}")
            if n in related:
                cls.append("has-related")
            rel = ""
            if n in related:
                rel = "".join(f'<span class="rel-mark">\u25c7 related to <a href="#{self.finding_ids[id(f)]}">'
                              f"{_e(f.rule_id)}</a>{': ' + _e(r.message) if r.message else ''}</span>"
                              for f, r in related[n])
            out.append(f'<tr id="{fid}-L{n}" class="{" ".join(cls)}"><td class="ln"><a href="#{fid}-L{n}">{n}</a>'
                       f'</td><td class="code"><code>{_e(text.expandtabs(8)) or " "}</code>{rel}</td></tr>')
            if found:
                out.append(f'<tr class="marks" data-for-line="{n}"><td class="ln"></td><td>'
                           + "".join(self._finding(f) for f in found) + "</td></tr>")
        out.append("</tbody></table>")
        return "\n".join(out)

    def _concepts(self, m: RunModel, several: bool) -> str:
        from .vocabulary import CONCEPTS

        head = f"Document {m.index + 1}: " if several else ""
        if m.doc.fmt == "shell":
            cmd = m.doc.runs[m.index]
            head = f"Training command {m.index + 1} ({_e(cmd.what)}, line {cmd.program.location().line}): "
        out = [f"<h3>{head}Concepts found</h3>",
               '<div class="scroll"><table class="concepts"><thead><tr><th scope="col">concept</th><th scope="col">value</th>'
               '<th scope="col">written at</th><th scope="col">key</th><th scope="col">read by</th></tr></thead><tbody>']
        for name in sorted(m.values):
            v = m.values[name]
            note = f" ({_e(v.note)})" if v.note else ""
            layer = m.roles.get(v.key)
            if layer:
                note += f"; layer: {_e(layer)}"
            chain = "".join(f"<br>\u2190 {self.link(h)} {_e(h.message)}" for h in v.chain)
            out.append(f'<tr data-concept="{_e(name)}"><td><code>{_e(name)}</code></td><td><code>'
                       f"{_e(_show(v.value))}</code></td><td>{self.link(v.location)}{chain}</td>"
                       f"<td><code>{_e(v.key)}</code></td><td>{_e(v.via)}{note}</td></tr>")
        out.append("</tbody></table></div>")
        if m.unknown:
            out.append("<h4>Known only at launch (left out of the checks)</h4><ul>")
            for name, v in sorted(m.unknown.items()):
                out.append(f"<li><code>{_e(name)}</code> {self.link(v.location)} <code>{_e(v.key)}</code>: "
                           f"{_e(v.note)}</li>")
            out.append("</ul>")
        for c in m.components:
            fields = ", ".join(f"{_e(k)}={_e(_show(v.value))}" for k, v in sorted(c.fields.items()))
            out.append(f"<p>reward component {c.index + 1}: <code>{fields}</code> at {self.link(c.location)}</p>")
        if m.derived:
            out.append(f"<h3>{head}Derived</h3>")
            out.append('<div class="scroll"><table class="concepts"><thead><tr><th scope="col">concept</th><th scope="col">value</th>'
                       '<th scope="col">arithmetic</th><th scope="col">from</th></tr></thead><tbody>')
            for name in sorted(m.derived):
                v = m.derived[name]
                stated = m.values.get(name)
                extra = f" (stated: {_e(_show(stated.value))})" if stated is not None else ""
                out.append(f'<tr data-derived="{_e(name)}"><td><code>{_e(name)}</code></td><td><code>'
                           f"{_e(_show(v.value))}</code>{extra}</td><td>{_e(v.note)}</td>"
                           f"<td>{_e(', '.join(v.inputs))}</td></tr>")
            out.append("</tbody></table></div>")
        if m.ambiguous:
            out.append(f"<h3>{head}Ambiguous</h3><ul>")
            for name, locs in sorted(m.ambiguous.items()):
                out.append(f"<li><code>{_e(name)}</code>: " + "; ".join(
                    f"{_e(l.key_path)} at {self.link(l)}" for l in locs) + "</li>")
            out.append("</ul>")
        missing = [c for c in CONCEPTS if m.get(c) is None and c not in m.ambiguous and c not in m.dead]
        out.append(f'<details><summary>{head}Not found ({len(missing)} concepts)</summary><p class="muted">'
                   + _e(", ".join(missing)) + "</p></details>")
        return "\n".join(out)


def _show(value) -> str:
    from .document import Node

    if isinstance(value, Node):
        return f"<{value.kind}>"
    if isinstance(value, float):
        return repr(value)
    return str(value)


def _per_level(findings) -> dict:
    per = {l: 0 for l in LEVELS}
    for f in findings:
        per[f.level] += 1
    return per


# --- pictures ---------------------------------------------------------------------------------------
W, LEFT, BAR_X, BAR_W = 980, 300, 316, 640


def _svg_text(x, y, text, cls="", anchor="start", extra="") -> str:
    c = f' class="{cls}"' if cls else ""
    a = f' text-anchor="{anchor}"' if anchor != "start" else ""
    return f'<text x="{x:.1f}" y="{y:.1f}"{c}{a}{extra}>{_e(text)}</text>'


def _origin(page: Page, qn: Quantity, x, y) -> str:
    if qn.value is None and qn.origin == "not found":
        return ""
    t = _svg_text(x, y, qn.origin, "origin", extra=f' data-origin-of="{_e(qn.concept)}"')
    a = page.anchor(qn.loc)
    return f'<a href="#{a}">{t}</a>' if a else t


def _label(page: Page, x, y, title: str, items: list[tuple[str, Quantity]]) -> list[str]:
    """A step's label: its title, then per quantity 'name = number' and where it came from."""
    out = [_svg_text(x, y, title, "step-title")]
    for k, (name, qn) in enumerate(items):
        yy = y + 17 + k * 30
        shown = ("not found" if qn.origin == "not found" else "?") if qn.value is None else (qn.shown or _num(qn.value))
        out.append(f'<text x="{x:.1f}" y="{yy:.1f}" class="qty"><tspan>{_e(name)} = </tspan>'
                   f'<tspan class="num" data-concept="{_e(qn.concept)}">{_e(shown)}</tspan></text>')
        out.append(_origin(page, qn, x + 10, yy + 13))
    return out


def _segments(x, y, w, h, count: int, cls: str, unit_label: str = "", limit: int = 128,
              many: str = "") -> list[str]:
    """A bar split into ``count`` equal boxes (one box with the count written in it when too many)."""
    out: list = []
    if count <= 0:
        return out
    many = many or f"{count} \u00d7 {unit_label}"
    if count > limit:
        out.append(f'<rect x="{x:.1f}" y="{y:.1f}" width="{w:.1f}" height="{h:.1f}" class="{cls} dense"/>')
        out.append(_svg_text(x + w / 2, y + h / 2 + 4, many, "in-bar", "middle"))
        return out
    sw = w / count
    for k in range(count):
        alt = " alt" if k % 2 else ""
        out.append(f'<rect x="{x + k * sw:.1f}" y="{y:.1f}" width="{sw:.1f}" height="{h:.1f}" class="{cls}{alt}"/>')
    if unit_label and sw >= 7 * len(unit_label) + 6:
        for k in range(count):
            out.append(_svg_text(x + k * sw + sw / 2, y + h / 2 + 4, unit_label, "in-bar", "middle"))
    elif unit_label:
        out.append(_svg_text(x + w / 2, y - 4, many, "in-bar above", "middle"))
    return out


def _broken_box(rid: str, x, y, w, h, label: str, key: str, why: str) -> list[str]:
    """A step drawn as broken: hatched box with a torn (zigzag) edge, a cross and the remainder."""
    w = max(w, 18.0)
    teeth = max(2, int(h // 8))
    zig = " ".join(f"L{x + w - (6 if t % 2 else 0):.1f},{y + t * h / teeth:.1f}" for t in range(teeth + 1))
    path = f"M{x:.1f},{y:.1f} {zig} L{x:.1f},{y + h:.1f} Z"
    return [f'<g class="broken" data-broken="{_e(key)}">',
            f"<title>{_e(why)}</title>",
            f'<path d="{path}" class="broken-fill"/>',
            f'<path d="{path}" fill="url(#{rid}-hatch)" class="broken-edge"/>',
            _broken_label(x, y + h + 14, w, f"\u2716 {label}"),
            "</g>"]


def _broken_label(x, y, w, text: str) -> str:
    # Kept inside the picture: right-aligned to the box when it would run off the right edge.
    if x + 3 + 7 * len(text) > W - 6:
        return _svg_text(min(x + w, W - 6), y, text, "broken-label", "end")
    return _svg_text(x + 3, y, text, "broken-label")


def _zoom(x1a, x1b, y1, x2a, x2b, y2) -> str:
    return (f'<path d="M{x1a:.1f},{y1:.1f} L{x2a:.1f},{y2:.1f} M{x1b:.1f},{y1:.1f} L{x2b:.1f},{y2:.1f}" '
            'class="zoom"/>')


def _pos(n):
    """A count the picture can draw (a box needs a positive size); None otherwise."""
    return n if isinstance(n, int) and n > 0 else None


def batch_svg(page: Page, rid: str, pic: Picture) -> str:
    P, G, R, M, u, D, A = (_pos(n) for n in (pic.P, pic.G, pic.R, pic.M, pic.u, pic.D, pic.A))
    steps = {s.key: s for s in pic.steps}
    row_h, bar_h = 74, 26
    body: list[str] = []
    total = max([n for n in (R, P * G if P and G else None) if n] or [0])
    scale = BAR_W / total if total else 0
    y = 24
    # 1 prompts -------------------------------------------------------------------------------------
    s = steps["prompts"]
    body += _label(page, 12, y, "1  " + s.title, [("prompts", s.quantities[0])])
    if P and G and scale:
        body += _segments(BAR_X, y, P * G * scale, bar_h, P, "bar-prompt", "1", many=f"{_num(P)} prompts")
    else:
        body.append(_unknown(y, bar_h, "prompts per step or group size not found"))
    y += row_h
    # 2 groups --------------------------------------------------------------------------------------
    s = steps["groups"]
    body += _label(page, 12, y, "2  " + s.title, [("group size G", s.quantities[0])])
    if P and G and scale:
        body += _segments(BAR_X, y, P * G * scale, bar_h, P, "bar-group", f"{G}",
                          many=f"{_num(P)} groups of {G} completions")
        body.append(_svg_text(BAR_X, y + bar_h + 16, f"{P} groups \u00d7 {G} completions each", "note"))
    else:
        body.append(_unknown(y, bar_h, "group size not found" if not G else "prompts per step not found"))
    y += row_h
    # 3 completions ---------------------------------------------------------------------------------
    s = steps["completions"]
    body += _label(page, 12, y, "3  " + s.title, [("completions R", s.quantities[0])])
    if R and scale:
        body.append(f'<rect x="{BAR_X}" y="{y}" width="{R * scale:.1f}" height="{bar_h}" class="bar-compl"/>')
        body.append(_svg_text(BAR_X + R * scale / 2, y + bar_h / 2 + 4, f"{_num(R)} completions", "in-bar", "middle"))
        if s.broken and P and G:
            lo, hi = sorted((R, P * G))
            body += _broken_box(rid, BAR_X + lo * scale, y, (hi - lo) * scale, bar_h,
                                f"{R} stated \u2260 {P} \u00d7 {G} = {P * G}", "completions", s.broken)
    else:
        body.append(_unknown(y, bar_h, "completions per step not known"))
    y += row_h
    # 4 mini-batches ------------------------------------------------------------------------------
    s = steps["mini"]
    body += _label(page, 12, y, "4  " + s.title, [("mini-batch M", s.quantities[0])])
    mini_right = None
    if R and M and M > 0 and scale:
        k, r = divmod(R, M)
        body += _segments(BAR_X, y, k * M * scale, bar_h, k, "bar-mini", f"{M}",
                          many=f"{_num(k)} mini-batches of {M}")
        if k:
            mini_right = BAR_X + M * scale
        if r:
            body += _broken_box(rid, BAR_X + k * M * scale, y, r * scale, bar_h,
                                f"remainder {r}: {R} = {k} \u00d7 {M} + {r}", "mini", s.broken)
        else:
            body.append(_svg_text(BAR_X, y + bar_h + 16, f"{k} mini-batch{'es' if k != 1 else ''} of {M}", "note"))
    else:
        body.append(_unknown(y, bar_h, "mini-batch or completions per step not found"))
    y += row_h
    # 5 one mini-batch: ranks x micro-batches x accumulation ----------------------------------------------
    s = steps["micro"]
    labels = _label(page, 12, y, "5  One mini-batch across ranks",
                    [("data-parallel ranks D", s.quantities[0]), ("micro-batch per GPU", s.quantities[1]),
                     ("accumulation A", s.quantities[2])])
    body += labels
    top = y + 8
    lanes_h = 0
    if M and u and D and M > 0:
        k, r = divmod(M, u * D)
        cols = k + (1 if r else 0)
        cw = BAR_W / cols if cols else BAR_W
        shown = D if D <= 8 else 7
        lane_h = 14
        if mini_right is not None:
            body.append(_zoom(BAR_X, mini_right, y - row_h + bar_h, BAR_X, BAR_X + (k * cw if k else cw), top))
        dense = k > 48
        for lane in range(shown):
            ly = top + lane * (lane_h + 3)
            if dense:
                body.append(f'<rect x="{BAR_X}" y="{ly}" width="{k * cw:.1f}" height="{lane_h}" class="bar-micro dense"/>')
            else:
                for col in range(k):
                    alt = " alt" if col % 2 else ""
                    body.append(f'<rect x="{BAR_X + col * cw:.1f}" y="{ly}" width="{cw:.1f}" height="{lane_h}" '
                                f'class="bar-micro{alt}"/>')
                    if cw >= 24:
                        body.append(_svg_text(BAR_X + col * cw + cw / 2, ly + lane_h - 3, f"{u}", "lane",
                                              "middle"))
            body.append(_svg_text(BAR_X - 4, ly + lane_h - 3, f"rank {lane}", "lane", "end"))
        lanes_h = shown * (lane_h + 3)
        if D > shown:
            body.append(_svg_text(BAR_X + 4, top + lanes_h + 10, f"\u22ee {D - shown} more ranks, the same", "note"))
            lanes_h += 14
        if k:
            body.append(_svg_text(BAR_X, top + lanes_h + 14,
                                  f"each box: {u} completions on one rank; {k} accumulation step(s) per update", "note"))
        if r:
            body += _broken_box(rid, BAR_X + k * cw, top, cw, lanes_h - 3,
                                f"remainder {r}: {M} = {k} \u00d7 ({u} \u00d7 {D}) + {r}", "micro", s.broken)
        elif s.broken:
            body += _broken_box(rid, BAR_X + k * cw - 18, top, 18, lanes_h - 3,
                                f"stated accumulation {A} \u2260 {k}", "micro", s.broken)
        lanes_h += 22
    elif s.broken:  # the data-parallel ranks do not divide out of the world size
        body += _broken_box(rid, BAR_X, top, BAR_W, bar_h, f"remainder {s.remainder}: {s.text.split(': ', 1)[-1]}",
                            "micro", s.broken)
        lanes_h = bar_h + 16
    else:
        body.append(_unknown(y, bar_h, "mini-batch, micro-batch or data-parallel ranks not found"))
        lanes_h = bar_h
    y += max(lanes_h + 24, 112)
    s = steps["updates"]
    body += _label(page, 12, y, "6  " + s.title, [("epochs E", s.quantities[0])])
    parts = s.text.split("; ")
    for n, part in enumerate(parts):
        body.append(_svg_text(BAR_X, y + 17 + n * 15, part, "note strong" if n == 0 else "note"))
    height = y + max(17 + 15 * len(parts), 40) + 8
    broken = [x.broken for x in pic.steps if x.broken]
    desc = "; ".join(f"{x.title}: {x.text}" for x in pic.steps)
    return "\n".join([
        f'<svg class="batch" role="img" aria-labelledby="{rid}-bt {rid}-bd" viewBox="0 0 {W} {height}" '
        f'width="{W}" height="{height}" xmlns="http://www.w3.org/2000/svg" data-broken-steps="{len(broken)}">',
        f'<title id="{rid}-bt">Batch arithmetic{": " + _e(str(len(broken))) + " broken step(s)" if broken else ""}</title>',
        f'<desc id="{rid}-bd">{_e(desc)}</desc>',
        _defs(rid),
        *body,
        "</svg>"])


def _unknown(y, h, text) -> str:
    return (f'<g class="unknown"><rect x="{BAR_X}" y="{y}" width="{BAR_W}" height="{h}" class="unknown-box"/>'
            f'{_svg_text(BAR_X + 8, y + h / 2 + 4, "? " + text, "in-bar")}</g>')


def _defs(rid: str) -> str:
    return (f'<defs><pattern id="{rid}-hatch" width="8" height="8" patternUnits="userSpaceOnUse" '
            f'patternTransform="rotate(45)"><rect width="3" height="8" class="hatch-line"/></pattern></defs>')


def budget_svg(page: Page, rid: str, b: Budget) -> str:
    rid = rid + "-tok"
    vals = [x.value for x in (b.engine, b.model) if _pos(x.value)]
    p, r = _pos(b.prompt.value), _pos(b.response.value)
    seq = (p or 0) + (r or 0)
    top = max(vals + [seq, 1])
    scale = BAR_W / top
    bar_h, row_h = 22, 56
    body = []
    y = 22
    body += _label(page, 12, y, "Prompt + response", [("prompt", b.prompt), ("response", b.response)])
    if p is not None and r is not None:
        body.append(_svg_text(BAR_X, y + bar_h + 14, f"{_num(p)} + {_num(r)} = {_num(seq)} tokens per sequence",
                              "note"))
    if p is not None:
        body.append(f'<rect x="{BAR_X}" y="{y}" width="{p * scale:.1f}" height="{bar_h}" class="bar-prompt"/>')
        if p * scale > 60:
            body.append(_svg_text(BAR_X + p * scale / 2, y + 15, f"prompt {_num(p)}", "in-bar", "middle"))
    if r is not None:
        x0 = BAR_X + (p or 0) * scale
        body.append(f'<rect x="{x0:.1f}" y="{y}" width="{r * scale:.1f}" height="{bar_h}" class="bar-response"/>')
        if r * scale > 70:
            body.append(_svg_text(x0 + r * scale / 2, y + 15, f"response {_num(r)}", "in-bar", "middle"))
    if p is None and r is None:
        body.append(_unknown(y, bar_h, "prompt and response lengths not found"))
    y += 30
    limits = [("engine", "Engine context", b.engine), ("model", "Model context", b.model)]
    rows_y = {}
    for key, title, qn in limits:
        y += row_h
        rows_y[key] = y
        body += _label(page, 12, y, title, [("tokens", qn)])
        if _pos(qn.value):
            body.append(f'<rect x="{BAR_X}" y="{y}" width="{qn.value * scale:.1f}" height="{bar_h}" class="bar-ctx"/>')
            body.append(_svg_text(BAR_X + 6, y + 15, f"{_num(qn.value)} tokens", "in-bar"))
            body.append(f'<path d="M{BAR_X + qn.value * scale:.1f},14 V{y + bar_h + 4}" class="limit"/>')
        else:
            body.append(_unknown(y, bar_h, f"{title.lower()} not found"))
    for key, why, excess in b.broken:
        if key.startswith("sequence"):
            limit = b.engine.value if key.endswith("engine") else b.model.value
            body += _broken_box(rid, BAR_X + limit * scale, 22, excess * scale, bar_h,
                                f"over by {_num(excess)} tokens", key, why)
        else:
            body += _broken_box(rid, BAR_X + b.model.value * scale, rows_y["engine"], excess * scale, bar_h,
                                f"over the model context by {_num(excess)}", key, why)
    height = y + 48
    desc = "; ".join(w for _k, w, _x in b.broken) or budget_words(b)
    return "\n".join([
        f'<svg class="budget" role="img" aria-labelledby="{rid}-t {rid}-d" viewBox="0 0 {W} {height}" width="{W}" '
        f'height="{height}" xmlns="http://www.w3.org/2000/svg" data-broken-steps="{len(b.broken)}">',
        f'<title id="{rid}-t">Token budget</title><desc id="{rid}-d">{_e(desc)}</desc>',
        _defs(rid), *body, "</svg>"])


# --- style and policy -----------------------------------------------------------------------------
CSS = """
:root{--err:#b3261e;--warn:#8a5300;--note:#1d5b94;--ink:#1b1b1b;--muted:#5b5b5b;--rule:#d5d5d5}
*{box-sizing:border-box}
body{font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Liberation Sans",Arial,sans-serif;color:var(--ink);
background:#fff;margin:0 auto;max-width:1040px;padding:16px 24px 48px}
h1{font-size:26px;margin:4px 0 8px}h2{font-size:21px;margin:28px 0 6px;border-top:3px solid var(--ink);
padding-top:12px;overflow-wrap:anywhere}h3{font-size:17px;margin:18px 0 6px}
code{font:13px/1.4 ui-monospace,"DejaVu Sans Mono","Liberation Mono",Menlo,Consolas,monospace}
a{color:#0b4f8a}.muted{color:var(--muted)}
.verdict{font-size:17px;padding:8px 12px;border:3px solid var(--ink);display:inline-block;margin:4px 0 10px}
.verdict-fails{border-color:var(--err);border-style:double;border-width:5px}
.verdict-passes{border-style:solid}.verdict-incomplete{border-style:dashed}
table{border-collapse:collapse}
.summary th,.summary td{border:1px solid var(--rule);padding:4px 12px;text-align:center}
.toc{margin:8px 0;padding-left:22px}
.lvl-error{color:var(--err)}.lvl-warning{color:var(--warn)}.lvl-note{color:var(--note)}
.finding-index{padding-left:22px}.finding-index li{margin:2px 0}
.finding{color:var(--ink);border-left:6px solid;padding:6px 10px;margin:4px 0 8px;background:#fafafa;
font-size:14px;white-space:normal}
.finding p{margin:2px 0}.finding .related{margin:2px 0;padding-left:18px}
.finding.lvl-error{border-color:var(--err);border-left-style:solid;background:#fdeeed}
.finding.lvl-warning{border-color:var(--warn);border-left-style:dashed;background:#fff6e5}
.finding.lvl-note{border-color:var(--note);border-left-style:dotted;background:#eef4fb}
.finding .level{font-weight:700;letter-spacing:.04em}.finding .rule{font-weight:700}
.finding.lvl-error .shape,.finding.lvl-error .level{color:var(--err)}
.finding.lvl-warning .shape,.finding.lvl-warning .level{color:var(--warn)}
.finding.lvl-note .shape,.finding.lvl-note .level{color:var(--note)}
.src{width:100%;border:1px solid var(--rule);margin:6px 0 12px}
.src td{vertical-align:top;padding:0 8px}
.src .ln{text-align:right;color:var(--muted);user-select:none;width:3.5em;border-right:1px solid var(--rule)}
.src .ln a{color:var(--muted);text-decoration:none}
.src .code code{white-space:pre-wrap;word-break:break-all}
.src tr.has-error .ln{border-right:5px solid var(--err)}
.src tr.has-warning .ln{border-right:5px dashed var(--warn)}
.src tr.has-note .ln{border-right:5px dotted var(--note)}
.src tr.has-related .code{background:#f1f1f9}
.src tr:target{outline:2px solid #0b4f8a;background:#fffbd6}
.rel-mark{display:inline-block;margin-left:16px;font-size:12px;color:var(--muted)}
.steps{padding-left:22px}.steps li{margin:2px 0}
.broken-text{color:#a50f15}.ok-text{color:#2e6b2e}
.concepts{width:100%;font-size:13px;margin:4px 0 10px}
.concepts th,.concepts td{border-bottom:1px solid var(--rule);padding:3px 6px;text-align:left;vertical-align:top;
overflow-wrap:break-word}
.scroll{overflow-x:auto}
svg{max-width:100%;height:auto;display:block;margin:6px 0 4px;border:1px solid var(--rule);background:#fff}
svg text{font:12px system-ui,"Liberation Sans",Arial,sans-serif;fill:#1b1b1b}
svg .step-title{font-weight:700;font-size:13px}
svg .qty{font-size:13px}svg .num{font-weight:700}
svg .origin{fill:#0b4f8a;font-size:11px;text-decoration:underline}
svg .in-bar{font-size:11px}svg .above{fill:#444}
svg .note{fill:#444;font-size:11px}svg .strong{font-weight:700;fill:#1b1b1b;font-size:12px}
svg .lane{font-size:10px;fill:#555}
svg rect{stroke:#fff;stroke-width:1}
.bar-prompt{fill:#9cc3e4}.bar-prompt.alt{fill:#7fb0da}
.bar-group{fill:#b7dcb0}.bar-group.alt{fill:#93c98a}
.bar-compl{fill:#c9c2e6}
.bar-mini{fill:#f2d39b}.bar-mini.alt{fill:#e8bc6a}
.bar-micro{fill:#a7d5d1}.bar-micro.alt{fill:#7fc2bc}
.bar-response{fill:#d9b8e0}.bar-ctx{fill:#e4e4e4}
svg rect.dense{stroke:none}
.unknown-box{fill:#fff;stroke:#888 !important;stroke-dasharray:5 4}
.zoom{stroke:#999;stroke-dasharray:3 3;fill:none}
.limit{stroke:#333;stroke-width:1.5;stroke-dasharray:6 3;fill:none}
.broken-fill{fill:""" + BROKEN_FILL + """;stroke:none}
.broken-edge{stroke:""" + BROKEN_INK + """;stroke-width:2}
.hatch-line{fill:""" + BROKEN_INK + """;stroke:none}
svg .broken-label{fill:""" + BROKEN_INK + """;font-weight:700;font-size:12px}
footer{margin-top:32px;color:var(--muted);font-size:13px;border-top:1px solid var(--rule)}
.back{font-size:13px}
@media print{
body{max-width:none;padding:0;font-size:11pt}
a{color:inherit;text-decoration:none}
h2{break-before:page}section.config:first-of-type h2{break-before:auto}
.finding,.src tr,svg{break-inside:avoid}
.finding{background:none !important}
.src tr:target{outline:none;background:none}
nav,.back{display:none}
.scroll{overflow:visible}
svg{border:none}
}
"""


def csp() -> str:
    digest = base64.b64encode(hashlib.sha256(CSS.encode("utf-8")).digest()).decode("ascii")
    return (f"default-src 'none'; style-src 'sha256-{digest}'; img-src 'none'; script-src 'none'; "
            "base-uri 'none'; form-action 'none'")


# --- the command -----------------------------------------------------------------------------------
def audit(outcome) -> str:
    """The page of a checked run (a pipeline Outcome with its models kept): each checked file,
    then the base files its runs were composed from, with the findings in place."""
    findings = list(outcome.findings)
    by_path: dict = {}
    for f in findings:
        by_path.setdefault(f.location.path, []).append(f)
    configs = []
    shown_paths = set()
    for _path, shown in outcome.files:
        doc = outcome.doc(shown)
        configs.append(Config(shown, mask_source(doc.text, doc) if doc else "", outcome.models(shown),
                              list(doc.problems) if doc else [], by_path.get(shown, [])))
        shown_paths.add(shown)
    # the configs that fail the gate first (stable otherwise): a clean one never pushes them below the fold
    configs.sort(key=lambda c: not any(f.level >= outcome.gate for f in c.findings))
    # base files the runs were composed from (RunModel.files): shown too, so that findings and
    # related locations in them have a line to point at
    bases: dict[str, list[str]] = {}
    for c in configs:
        for m in c.models:
            for name in m.files:
                if name and name not in shown_paths and c.path not in bases.get(name, []):
                    bases.setdefault(name, []).append(c.path)
    for name in sorted(bases):
        doc = outcome.doc(name)
        configs.append(Config(name, mask_source(doc.text, doc) if doc else "", [], list(doc.problems) if doc else [],
                              by_path.get(name, []), base_of=bases[name]))
        shown_paths.add(name)
    other = [f for f in findings if f.location.path not in shown_paths]
    return Page(configs, other, outcome.gate, outcome.counts(), outcome.incomplete).render()


def write(page: str, target: str) -> None:
    data = page.encode("utf-8", errors="replace")
    if target == "-":
        import sys

        if hasattr(sys.stdout, "buffer"):
            sys.stdout.buffer.write(data)
        else:  # a text stream (tests capture standard output this way)
            sys.stdout.write(data.decode("utf-8"))
        sys.stdout.flush()
        return
    from .paths import write_atomic

    write_atomic(target, data)
