"""REW: reward sources. What each reward component is, whether its code exists, where a learned
reward comes from, how a remote reward is reached, the weights, and the answer-format pattern."""
from __future__ import annotations

import functools
import os
import re
from pathlib import Path
from urllib.parse import urlsplit

from trimtab.common.record import FrozenRecord
from trimtab import Location, Scalar, rule
from trimtab.common import budget

from ._safety import kinds, label, locate, safe_url, scan, scanner
from trimtab.common.patterns import later

SOURCES = ("reward.sources",)


def _shown_list(items, limit=6) -> str:
    items = list(items)
    text = ", ".join(items[:limit])
    return text + (f", ... ({len(items) - limit} more)" if len(items) > limit else "")


# --- REW-1 -----------------------------------------------------------------------------------------
@rule(id="REW-1", name="reward-reference-unverifiable", level="error",
      summary="A reward's Python reference cannot be verified in the repository.",
      rationale="A reward written as `package.module:function` or `path/to/file.py:function` is resolved statically "
      "inside the search roots (setting search_roots, default the repository root): the module file must "
      "exist there and define the function. The module is read as a syntax tree only, never imported or "
      "run. A missing module or function fails the run at start-up at best, and at worst a different "
      "module of the same name on the training host is used (common practice: keep reward code in the "
      "repository the config lives in). A reference or import that leaves the repository ('..', an "
      "absolute path, a symbolic link pointing out) is refused and its target is not read. A reward "
      "written as a bare name (`accuracy`) is a reward function by name, as trainers with a registry of "
      "reward functions take it: it is verified when a module of the search roots defines that name at "
      "its top level, and otherwise reported as a note (the trainer may provide it; trimtab cannot see "
      "that).",
      needs=SOURCES)
def reference_unverifiable(ctx):
    sc = scanner(ctx)
    roots = [r or "." for r in sc.root_names]
    refused_roots = "".join(f"; search root {t!r} refused: it {why}" for t, why in sc.bad_roots)
    for comp, kind in zip(ctx.model.components, kinds(ctx)):
        if kind not in ("rule", "code"):
            continue
        loc = locate(ctx, comp)
        if loc is None:
            continue
        ref = loc.ref
        where = comp.loc("ref")
        if loc.status == "no-function" and not ref.module and not ref.file:
            # a function by name only: a trainer's own registry may define it, which trimtab cannot see
            cut = f"; {loc.reason}" if loc.reason else ""
            yield ctx.finding(
                f"{label(comp)}: reward function {ref.function!r} is named without its module and no module in the "
                f"search roots ({', '.join(roots)}) defines it{cut}{refused_roots}: trimtab cannot verify it (the "
                "trainer may provide it); to have it checked, write it as module:function", where, level="note",
                subject=ref.text, suggestion="write the reference as package.module:function, or set search_roots to "
                                             "the folder that defines it")
        elif loc.status == "no-module":
            target = ref.file or ref.module.replace(".", "/") + ".py"
            yield ctx.finding(
                f"{label(comp)}: module {ref.file or ref.module!r} is not found in the search roots "
                f"({', '.join(roots)}); tried {_shown_list(loc.tried)}{refused_roots}", where,
                subject=ref.text, suggestion=f"add {target} to the repository, or set search_roots in the settings")
        elif loc.status == "no-function":
            names = sorted(sc.module(loc.real).names)
            yield ctx.finding(
                f"{label(comp)}: {loc.path} defines no function {ref.function!r}", where,
                related=[Location(loc.path, 1, 1, message="module found here (read as a syntax tree, not imported)")],
                subject=ref.text, suggestion=("top-level names there: " + _shown_list(names, 10)) if names else "")
        elif loc.status == "escapes":
            yield ctx.finding(
                f"{label(comp)}: reference {ref.text!r} is refused ({loc.reason}); its target was not read, so "
                "the reward cannot be verified", where, subject=ref.text)
        elif loc.status in ("syntax", "unreadable"):
            related = [Location(loc.path, loc.line, loc.col, message="here")] if loc.line else []
            yield ctx.finding(f"{label(comp)}: {loc.path} {loc.reason}", where, related=related,
                              subject=ref.text)
        elif loc.status == "bad-root":
            yield ctx.finding(f"{label(comp)}: cannot be looked up: {loc.reason}{refused_roots}", where,
                              subject=ref.text)
        else:
            found = scan(ctx, loc)
            for r in found.refusals:
                yield ctx.finding(
                    f"{label(comp)}: {r.path} imports {r.text!r}, which is refused: {r.reason}; it was not "
                    "read, so the scan of this reward's code is incomplete", where, level="warning",
                    related=[Location(r.path, r.line, r.col, message=f"import of {r.text!r}")],
                    subject=f"{ref.text}|{r.text}")
            for path, why in found.unreadable:
                if path != loc.path:
                    yield ctx.finding(f"{label(comp)}: imported module {path} {why}; the scan of this "
                                      "reward's code is incomplete", where, level="warning",
                                      subject=f"{ref.text}|{path}")


# --- REW-2 -----------------------------------------------------------------------------------------
_COMMIT = later(r"^[0-9a-f]{40}$|^[0-9a-f]{64}$")
_HUB_ID = later(r"^[A-Za-z0-9][\w.-]*/[\w.-]+$|^[A-Za-z0-9][\w.-]*$")


def _is_local(ref: str) -> bool:
    r = ref.strip()
    if r.startswith(("/", "./", "../", "~", "file:")) or re.match(r"^[A-Za-z]:[\\/]", r):
        return True
    return r.count("/") >= 2 or r.endswith("/") or "\\" in r


@rule(id="REW-2", name="reward-model-unpinned", level="warning",
      summary="A learned reward model or judge is loaded from a floating revision, or from a missing local path.",
      rationale="A reward model or judge named by a hub-style id is fetched at launch; without a pinned immutable "
      "revision (a full commit hash) the weights behind a branch name such as `main` or a tag can change "
      "between runs, so two runs of the same config can optimise different rewards (common practice: pin "
      "every downloaded artefact). A local path that does not exist is an error: the run cannot start, "
      "or a fallback loads something else. Paths outside the repository are only checked when the option "
      "check_outside_paths is true (they often exist only on the training cluster).",
      needs=SOURCES, options={"check_outside_paths": False})
def model_unpinned(ctx):
    root = None
    for comp, kind in zip(ctx.model.components, kinds(ctx)):
        if kind not in ("model", "judge"):
            continue
        ref = comp.get("ref")
        if not isinstance(ref, str) or not ref.strip() or comp.get("endpoint"):
            continue
        ref = ref.strip()
        if root is None:  # perf: only for a run with a learned reward
            root = Path(getattr(ctx.settings, "root", None) or Path.cwd())
        if _is_local(ref) or (root / ref).exists():
            path = Path(os.path.expanduser(ref.removeprefix("file:")))
            outside = path.is_absolute() or ".." in Path(ref).parts or ref.startswith("~")
            if outside and not ctx.options["check_outside_paths"]:
                continue
            target = path if path.is_absolute() else root / path
            if not target.exists():
                yield ctx.finding(f"{label(comp)}: local path {ref!r} does not exist"
                                  + ("" if outside else " in the repository"), comp.loc("ref"), level="error",
                                  subject=ref)
            continue
        if not _HUB_ID.match(ref):
            continue
        rev = comp.get("revision")
        if rev is None:
            yield ctx.finding(f"{label(comp)}: {ref!r} is loaded with no pinned revision; whatever the default "
                              "branch holds at launch is used", comp.loc("ref"), subject=ref,
                              suggestion="add revision: <the full 40-character commit hash>")
        elif not (isinstance(rev, str) and _COMMIT.match(rev.strip().lower())):
            yield ctx.finding(f"{label(comp)}: revision {str(rev)!r} of {ref!r} is not a full commit hash: "
                              "a branch or tag name can move", comp.loc("revision"), subject=f"{ref}@{rev}",
                              related=[comp.loc("ref").with_message("the model it pins")],
                              suggestion="pin the full 40-character commit hash")


# --- REW-3, REW-4, REW-5 ---------------------------------------------------------------------------
def _remote(ctx):
    """(component, endpoint or None) of each remote reward component. Once per run (perf: REW-3, 4
    and 5 ask; it reads the components' fields only)."""
    model = ctx.model
    memo = model.__dict__.get("_remote")
    if memo is None:
        memo = model.__dict__["_remote"] = []
        for comp, kind in zip(model.components, kinds(ctx)):
            ep = comp.get("endpoint")
            if kind == "remote" or isinstance(ep, str):
                memo.append((comp, ep if isinstance(ep, str) else None))
    return memo


def _loopback(host: str) -> bool:
    import ipaddress

    if host in ("localhost", "localhost.localdomain") or host.endswith(".localhost"):
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


@rule(id="REW-3", name="remote-reward-plain-http", level="warning",
      summary="A remote reward is reached over plain http:// to a host other than loopback.",
      rationale="Prompts, completions and any authorisation header cross the network in clear text and can be read "
      "or altered on the way, so the reward itself can be forged (CWE-319). Use https://; plain http is "
      "accepted for loopback (localhost, 127.0.0.0/8, ::1).",
      needs=SOURCES, cwe=319)
def remote_plain_http(ctx):
    for comp, ep in _remote(ctx):
        if not ep:
            continue
        try:
            parts = urlsplit(ep.strip())
            host = (parts.hostname or "").lower()
        except ValueError:
            continue
        if parts.scheme.lower() == "http" and host and not _loopback(host):
            yield ctx.finding(f"{label(comp)}: endpoint {safe_url(ep)} uses plain http to {host}",
                              comp.loc("endpoint"), subject=safe_url(ep),
                              suggestion="use https:// (or a loopback address for a local service)")


@rule(id="REW-4", name="remote-reward-no-timeout", level="warning",
      summary="A remote reward has no request timeout.",
      rationale="A reward service that stops answering holds every rollout worker that waits on it: the run stalls "
      "with the GPUs allocated. CWE-1088 (Synchronous Access of Remote Resource without Timeout) is "
      "the specific entry; the general CWE-400 is discouraged for mapping by the catalogue (both from "
      "memory). State a timeout per request (and decide what reward a timed-out sample gets).",
      needs=SOURCES, cwe=1088)
def remote_no_timeout(ctx):
    for comp, ep in _remote(ctx):
        t = comp.fields.get("timeout_s")
        n = t.number if t is not None else None
        if t is None or t.value is None:
            yield ctx.finding(f"{label(comp)}: remote reward{' at ' + safe_url(ep) if ep else ''} has no "
                              "timeout", comp.loc("endpoint"), subject=comp.get("name") or safe_url(ep or ""),
                              suggestion="add timeout_s: 30 (or what the service needs)")
        elif n is None or n <= 0:
            yield ctx.finding(f"{label(comp)}: timeout {t.value!r} is not a positive number of seconds",
                              t.location, subject=str(t.value))


@rule(id="REW-5", name="remote-reward-offline", level="note",
      summary="A remote reward makes the run not reproducible offline.",
      rationale="The reward depends on a service outside the run: its model, code and availability can change, "
      "so the run cannot be repeated offline or audited later from the config alone (common practice: "
      "record the service's version with the run).",
      needs=SOURCES)
def remote_offline(ctx):
    for comp, ep in _remote(ctx):
        yield ctx.finding(f"{label(comp)} is computed by a remote service{' at ' + safe_url(ep) if ep else ''}: "
                          "the run is not reproducible offline", comp.loc("endpoint"),
                          subject=comp.get("name") or safe_url(ep or ""))


# --- REW-6 -----------------------------------------------------------------------------------------
@rule(id="REW-6", name="no-verifiable-reward", level="warning",
      summary="The only reward is a learned model or judge; there is no rule-based or test-based component.",
      rationale="A policy optimised against a learned reward alone learns to exploit that model's errors (reward "
      "hacking / over-optimisation: Gao, Schulman and Hilton 2022, arXiv:2210.10760). Rule-based or "
      "test-based rewards for reasoning tasks (answer checks, unit tests) are common practice and keep a "
      "verifiable signal in the mix.",
      needs=SOURCES)
def no_verifiable(ctx):
    comps = ctx.model.components
    found = kinds(ctx)
    if not comps or any(k in ("rule", "code") for k in found) or "" in found:
        return
    learned = [c for c, k in zip(comps, found) if k in ("model", "judge")]
    if not learned:
        return
    first = learned[0]
    yield ctx.finding(
        f"every reward component is learned or remote ({', '.join(label(c) for c in comps)}): no rule-based "
        "or test-based reward checks the answers", first.location,
        related=[c.location.with_message("also learned or remote") for c in comps if c is not first],
        subject=",".join(sorted(str(c.get("ref")) for c in comps)),
        suggestion="add a rule-based reward (answer check, format check, unit tests) beside it")


# --- REW-7 -----------------------------------------------------------------------------------------
@rule(id="REW-7", name="reward-weight", level="error",
      summary="A reward weight is not a number, all weights are zero, or a weight is zero or negative.",
      rationale="The total reward is the weighted sum of its components. A weight that is text is refused or "
      "silently read as something else; when every weight is zero the reward is constantly zero and the "
      "policy learns nothing (error). A zero weight switches a component off while it is still computed, "
      "and a negative weight turns a reward into a penalty: often a sign slip (warning).",
      needs=SOURCES)
def weights(ctx):
    stated = [(c, c.fields["weight"]) for c in ctx.model.components if c.fields.get("weight") is not None]
    numeric = []
    for comp, w in stated:
        val = w.value
        if isinstance(val, bool) or not isinstance(val, (int, float)):
            shown = w.node.text if isinstance(w.node, Scalar) else f"<{getattr(w.node, 'kind', type(val).__name__)}>"
            why = ""
            node = w.node
            if getattr(node, "plain", False) and isinstance(node.value12, (int, float)) and \
                    not isinstance(node.value12, bool):
                why = f" (YAML {ctx.model.version} reads {node.text} as text)"
            yield ctx.finding(f"{label(comp)}: weight {shown!r} is not a number{why}", w.location,
                              subject=str(shown))
        else:
            numeric.append((comp, w))
    if numeric and len(numeric) == len(ctx.model.components) and all(w.value == 0 for _c, w in numeric):
        first = numeric[0][1]
        yield ctx.finding(f"all {len(numeric)} reward weight(s) are 0: the total reward is always 0",
                          first.location, related=[w.location.with_message("also 0") for _c, w in numeric[1:]],
                          subject="all-zero")
        return
    for comp, w in numeric:
        if w.value == 0:
            yield ctx.finding(f"{label(comp)}: weight 0 switches this reward off", w.location, level="warning",
                              subject="0")
        elif w.value < 0:
            yield ctx.finding(f"{label(comp)}: weight {w.value} is negative: this reward is a penalty",
                              w.location, level="warning", subject=str(w.value))


# --- REW-8 -----------------------------------------------------------------------------------------
def _norm_ref(text: str) -> str:
    t = text.strip().replace("\\", "/").removeprefix("./")
    if ".py" in t:
        path, _, fn = t.partition(".py")
        t = path.replace("/", ".") + ":" + fn.lstrip(":")
    return t


@rule(id="REW-8", name="duplicate-reward-reference", level="warning",
      summary="The same reward reference is listed twice.",
      rationale="Listing one reward twice doubles its weight in a way the weights do not show, and usually means "
      "one entry was meant to be a different function (common practice).",
      needs=SOURCES)
def duplicate(ctx):
    seen = {}
    for comp in ctx.model.components:
        ref = comp.get("ref")
        if not isinstance(ref, str) or not ref.strip():
            continue
        key = _norm_ref(ref)
        if key in seen:
            first = seen[key]
            yield ctx.finding(f"{label(comp)} is listed twice (first as component {first.index + 1})",
                              comp.loc("ref"), related=[first.loc("ref").with_message("first listed here")],
                              subject=key)
        else:
            seen[key] = comp


# --- REW-9, REW-10, REW-11 -------------------------------------------------------------------------
# The pattern comes from the checked repository, so compiling it and matching it are bounded: at most
# this much CPU time for one pattern (compiled under three flag sets, tried on each sample answer).
PATTERN_BUDGET_S = 1.0
_FLAGS = (0, re.DOTALL, re.DOTALL | re.MULTILINE)


class Trial(FrozenRecord):
    """What testing one pattern against the sample answers found (one computation for REW-9/10/11)."""

    invalid: str  # why the pattern does not compile ("" when it does)
    matched: bool | None  # some sample matched (None: not tested)
    costly: int  # > 0: the budget ran out on a sample this many characters long (0: the compile)
    over: bool  # the budget ran out
    untested: str  # why it could not be tested in bounded time

    def __init__(
            self, invalid: str = "", matched: bool | None = None, costly: int = 0, over: bool = False,
            untested: str = ""
    ) -> None:
        object.__setattr__(self, "invalid", invalid)
        object.__setattr__(self, "matched", matched)
        object.__setattr__(self, "costly", costly)
        object.__setattr__(self, "over", over)
        object.__setattr__(self, "untested", untested)

    # repr, equality and hash (common/record.py)
    _fields = (
        "invalid", "matched", "costly", "over", "untested",
    )


@functools.lru_cache(maxsize=64)
def trial(pattern: str, samples: tuple[str, ...]) -> Trial:
    try:
        with budget.cpu_budget(PATTERN_BUDGET_S):
            try:
                pats = [re.compile(pattern, f) for f in _FLAGS]
            except re.error as exc:
                where = f" at position {exc.pos}" if exc.pos is not None else ""
                return Trial(invalid=f"{exc.msg}{where}")
            except RecursionError:
                return Trial(invalid="it nests too deeply for Python's compiler (RecursionError)")
            except (OverflowError, ValueError, MemoryError) as exc:
                return Trial(invalid=f"{exc} ({type(exc).__name__})")
            for s in samples:
                try:
                    if any(p.search(s) for p in pats):
                        return Trial(matched=True)
                except budget.OverBudget:
                    return Trial(costly=len(s), over=True)
            return Trial(matched=False if samples else None)
    except budget.OverBudget:
        return Trial(over=True)
    except budget.NoBudget as exc:
        return Trial(untested=str(exc))


# perf: the sample answers of a template (a pure function of its text): REW-9, 10 and 11 each ask,
# and runs repeat their templates. Bounded: at most 256 templates of at most 4,096 characters (a
# longer one is worked out each time), emptied when full. With the remote components once per run:
# a whole check of 200 files 20 million instructions fewer (0.6 %).
_SAMPLES: dict[str, tuple[str, ...]] = {}
_SAMPLES_TEXT = 4096


def _samples(ctx) -> tuple[str, ...]:
    t = ctx.model.get("template.text")
    if t is not None and isinstance(t.value, str):
        if len(t.value) > _SAMPLES_TEXT:
            return tuple(sample_answers(t.value))
        found = _SAMPLES.get(t.value)
        if found is None:
            found = tuple(sample_answers(t.value))
            if len(_SAMPLES) >= 256:
                _SAMPLES.clear()
            _SAMPLES[t.value] = found
        return found
    return ()


@rule(id="REW-9", name="format-pattern-invalid", level="error",
      summary="The answer-format regular expression does not compile.",
      rationale="A format reward whose pattern does not compile (Python `re`) fails at the first reward call or, "
      "where errors are caught, gives every sample the same score. A pattern that nests too deeply or "
      "repeats too many times for the compiler is reported here too.",
      needs=("reward.format_pattern",))
def pattern_invalid(ctx):
    v = ctx.model.get("reward.format_pattern")
    if not isinstance(v.value, str):
        return
    found = trial(v.value, _samples(ctx))
    if found.invalid:
        yield ctx.finding(f"reward.format_pattern does not compile: {found.invalid}", v.location, subject=v.value)


_TAG = re.compile(r"<([A-Za-z][\w-]*)>")
_CLOSING = re.compile(r"</([A-Za-z][\w-]*)>")
_MAX_TAGS = 16
_CONTENT = {"answer": "42", "final": "42", "result": "42", "solution": "42"}
_REASONING = "First 6 times 7 is 42, so the result is 42."


def sample_answers(template: str) -> list[str]:
    """Well-formed answers built from the template's own tag pairs, in the order they appear."""
    closed = set(_CLOSING.findall(template))
    tags: list[str] = []
    for m in _TAG.finditer(template):
        name = m.group(1)
        if name in closed and name not in tags:
            tags.append(name)
            if len(tags) > _MAX_TAGS:
                return []  # not a template of a few answer blocks: no sample trimtab could stand by
    if not tags:
        return []
    out = []
    for sep in ("\n", " ", ""):
        for inner in ("\n{}\n", "{}"):
            out.append(sep.join(f"<{t}>" + inner.format(_CONTENT.get(t.lower(), _REASONING)) + f"</{t}>"
                                for t in tags))
    return out


@rule(id="REW-10", name="format-pattern-rejects-template", level="error",
      summary="The answer-format pattern rejects a well-formed answer built from the prompt template's own tags.",
      rationale="When the template asks for, say, a think block then an answer block, a format reward whose pattern "
      "does not match such an answer scores every correct completion as malformed: the format reward "
      "then pushes the policy away from the format the prompt asks for. The check builds answers from "
      "the template's tag pairs (several spacings, each tried with and without re.DOTALL and "
      "re.MULTILINE, searched anywhere) and reports only when none of them matches.",
      needs=("reward.format_pattern", "template.text"))
def pattern_rejects(ctx):
    v = ctx.model.get("reward.format_pattern")
    t = ctx.model.get("template.text")
    if not isinstance(v.value, str) or not isinstance(t.value, str):
        return
    samples = _samples(ctx)
    if trial(v.value, samples).matched is not False:
        return  # it matches, it does not compile (REW-9), or testing it ran out of time (REW-11)
    yield ctx.finding(f"reward.format_pattern matches no well-formed answer built from the template's tags; "
                      f"for example it rejects {samples[0]!r}", v.location,
                      related=[t.location.with_message("the template whose tags the sample uses")],
                      subject=v.value)


@rule(id="REW-11", name="format-pattern-too-costly", level="error",
      summary="Testing the answer-format pattern runs out of trimtab's time budget.",
      rationale="A regular expression with nested or overlapping repeats, such as `(.+)+!` or `(a|a)*b`, can take "
      "time exponential in the length of the text it fails to match (catastrophic backtracking; the "
      "weakness catalogue's CWE-1333, from memory). A format reward with such a pattern can stall on one "
      "sampled completion and hold up the whole training step. trimtab compiles the pattern and tries it "
      "on the answers REW-10 builds from the template, with at most one second of CPU time in all; when "
      "that runs out it stops and reports the pattern. Compiling is bounded the same way (a pattern of "
      "a million characters). Review the pattern under your own security policy: prefer a pattern "
      "without a repeat inside a repeat, or bound the text the reward function matches.",
      needs=("reward.format_pattern",))
def pattern_too_costly(ctx):
    v = ctx.model.get("reward.format_pattern")
    if not isinstance(v.value, str):
        return
    found = trial(v.value, _samples(ctx))
    if found.over:
        if found.costly:
            what = (f"matching a {found.costly}-character answer built from the template takes more than "
                    f"{PATTERN_BUDGET_S:g} s of CPU time (trimtab's budget), so trimtab stopped; a reward function "
                    "using it can stall the same way on a sampled completion")
        else:
            what = (f"compiling it takes more than {PATTERN_BUDGET_S:g} s of CPU time (trimtab's budget), so "
                    "trimtab stopped and did not test it; the reward function pays that cost too")
        yield ctx.finding(f"reward.format_pattern: {what}", v.location, subject=v.value)
    elif found.untested:
        yield ctx.finding(f"reward.format_pattern was not tested: {found.untested}; trimtab tests a pattern "
                          "only with a CPU-time bound (run the check in the main thread of a POSIX system)",
                          v.location, subject=v.value, level="note")

