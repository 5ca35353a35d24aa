"""``trimtab audit CONFIG... --html FILE``: one self-contained page per invocation that shows each
config's source with its findings in place, the batch arithmetic and the token budget as pictures,
and the resolved concepts with their origins.

The page is built with the standard library only (``html.escape``; no template engine), loads
nothing (a Content-Security-Policy of ``default-src 'none'``; the one style block is allowed by its
SHA-256 hash; no scripts at all), and is byte-identical for the same input: no timestamps, every
list in a stable order. Every piece of text that came from a config goes through ``_e``.
"""
from __future__ import annotations

import html
import re
from dataclasses import dataclass, field

from .. import __version__
from ..resolve import arithmetic
from ..common.findings import Finding, Level, Location
from ..resolve.model import RunModel
from ..common.redact import mask_source
from .audit_pictures import batch_steps, budget_words, token_budget
from .audit_style import CSS, csp
from .audit_svg import batch_svg, budget_svg, esc as _e

LEVELS = (Level.ERROR, Level.WARNING, Level.NOTE)
# Told by text and by shape as well as by colour (the shapes also print in black and white).
SHAPE = {Level.ERROR: "\u25a0", Level.WARNING: "\u25b2", Level.NOTE: "\u25cf"}

# The line breaks the loaders count, so that page lines match finding lines: YAML 1.1 counts CR, LF,
# NEL, LS and PS (YAML 1.1, section 5.4), and both reference readers (PyYAML; ruamel.yaml, whose
# scanner keeps PyYAML's) count all five even in YAML 1.2 mode. YAML 1.2 itself counts only CR and
# LF (YAML 1.2.2, section 5.4): to a strict 1.2 reader NEL, LS and PS are content.
_LINE_BREAK = re.compile("\r\n|[\r\n\x85\u2028\u2029]")


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
               batch_svg(self.anchor, rid, pic),
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
        out.append(budget_svg(self.anchor, rid, budget))
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
        from ..common.vocabulary import CONCEPTS

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
    from ..load.document import Node

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
    from ..common.paths import write_atomic

    write_atomic(target, data)
