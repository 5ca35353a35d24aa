"""Shared by the REW, EXE and SEC rules: reward component kinds, the code-executing rewards of a
run, the cautions every safety finding carries, and masking of values that must not be shown."""
from __future__ import annotations

import re
from typing import Any

from trimtab import Component, Location
from trimtab.common.record import Record

CAUTIONS = (
    "Usual cautions: treat model-written code and remote code as untrusted; run it isolated from the "
    "training host (a container or VM with its own kernel boundary, not a plain subprocess); keep "
    "credentials, tokens and the network out of the sandbox; set limits on wall-clock time, memory and "
    "the number of processes; mount the host file system read-only or not at all; never run it as root "
    "or privileged. These are general cautions, not a security review: your own organisation's security "
    "policy and local rules take precedence over them."
)

_KIND_WORDS = {
    "rule": ("rule", "rules", "rule_based", "rule-based", "function", "fn", "regex", "verifier", "match",
             "exact_match", "programmatic", "python"),
    "code": ("code", "code_execution", "code-execution", "execution", "exec", "sandbox", "unit_test",
             "unit_tests", "tests", "test", "program"),
    "model": ("model", "reward_model", "rm", "learned", "classifier", "orm", "prm"),
    "judge": ("judge", "llm_judge", "llm-judge", "llm", "grader"),
    "remote": ("remote", "http", "https", "api", "service", "endpoint", "server"),
}
_KIND = {w: k for k, words in _KIND_WORDS.items() for w in words}

# trimtab.engine.codescan, imported when first needed (it imports the ast module: a check of runs
# without reward code never loads it). perf: kept here once imported; an import statement inside a
# function runs the import machinery on every call (~2.4 us), ~8 times a file on the benchmark corpus.
_codescan: Any = None


def _scan_module():
    global _codescan
    if _codescan is None:
        from trimtab.engine import codescan

        _codescan = codescan
    return _codescan


def kind_of(comp) -> str:
    """rule, code, model, judge, remote, or '' when it cannot be told. A reference written as a
    bare identifier (``accuracy``) is a reward function by name; a path- or repository-like one
    (``team/model``, ``./weights``) is a model."""
    function_name = _scan_module().function_name
    k = comp.get("kind")
    if isinstance(k, str) and k.strip().lower() in _KIND:
        return _KIND[k.strip().lower()]
    if isinstance(k, str) and k.strip():
        return k.strip().lower()
    if isinstance(comp.get("endpoint"), str):
        return "remote"
    ref = comp.get("ref")
    if _reference(ref) is not None or function_name(ref):  # codescan.looks_like_code, parsed once per text
        return "rule"
    if isinstance(ref, str) and ref.strip():
        return "model"
    return ""


def kinds(ctx) -> list[str]:
    """``kind_of`` of each reward component of the run, in order. Once per run: perf, the REW, EXE
    and SEC rules all ask (43,000 calls of kind_of on the 2,000-file benchmark corpus, 5,400 now)."""
    model = ctx.model
    memo = vars(model).get("_kinds")
    if memo is None or len(memo) != len(model.components):
        memo = vars(model)["_kinds"] = [kind_of(c) for c in model.components]
    return memo


def locate(ctx, comp):
    """Where a code reward's reference leads (a codescan ``Located``), or None when its reference
    is not code: ``module:function`` and file references through the search roots, a bare
    function name through every module of the search roots. Once per component of a run (the
    REW, EXE and SEC rules all ask)."""
    memo = vars(ctx.model).get("_located") if ctx.model is not None else {}
    if memo is None:
        memo = vars(ctx.model)["_located"] = {}
    key = id(comp)
    if key in memo:
        return memo[key][1]
    ref = _reference(comp.get("ref"))
    if ref is not None:
        found = scanner(ctx).locate(ref)
    else:
        name = _scan_module().function_name(comp.get("ref"))
        found = scanner(ctx).find_name(name) if name else None
    memo[key] = (comp, found)  # the component is kept with its answer: its id stays its own
    return found


def scan(ctx, located):
    """The codescan Scan of a located reward module. Once per run and module: perf, the REW, EXE and
    SEC rules all ask, and each scan checks every file it read for changes (a file system call each)."""
    memo = vars(ctx.model).setdefault("_scans", {}) if ctx.model is not None else {}
    hit = memo.get(id(located))
    if hit is not None:
        return hit[1]
    found = scanner(ctx).scan(located)
    memo[id(located)] = (located, found)  # the located module is kept with its answer: its id stays its own
    return found


# perf: the references of reward components, parsed (codescan.parse_reference, a pure function of the
# text giving an immutable Reference): runs repeat them from file to file. Bounded: emptied when full.
_REFERENCES: dict[str, Any] = {}


def _reference(text):
    parse_reference = _scan_module().parse_reference
    if not isinstance(text, str):
        return parse_reference(text)
    found = _REFERENCES.get(text, _REFERENCES)
    if found is _REFERENCES:
        found = parse_reference(text)
        if len(_REFERENCES) >= 4096:
            _REFERENCES.clear()
        _REFERENCES[text] = found
    return found


def declared_kind(comp) -> bool:
    return comp.fields.get("kind") is not None


def label(comp) -> str:
    name = comp.get("name")
    ref = comp.get("ref")
    if isinstance(name, str) and name:
        return f"reward {name!r}"
    if isinstance(ref, str) and ref:
        return f"reward {ref!r}"
    return f"reward component {comp.index + 1}"


def scanner(ctx):
    """The codescan scanner for the run's settings (perf: looked up once per run), holding the
    signatures of the files it reads for the check of the run (Scanner.hold)."""
    model = ctx.model
    settings = ctx.settings if ctx.settings is not None else model.settings
    memo = vars(model).get("_scanner") if model is not None else None
    if memo is not None and memo[0] is settings:
        memo[1].hold(model)
        return memo[1]
    found = _scan_module().scanner(settings)
    found.hold(model)
    if model is not None:
        vars(model)["_scanner"] = (settings, found)
    return found


class CodeReward(Record):
    comp: Component  # the reward component
    declared: bool  # kind: code
    calls: list  # codescan Hits of category exec (may be empty when declared)

    def __init__(self, comp: Component, declared: bool, calls: list) -> None:
        self.comp = comp
        self.declared = declared
        self.calls = calls

    _fields = ("comp", "declared", "calls")  # repr, equality (common/record.py)

    @property
    def config(self) -> Location:
        return self.comp.loc("ref") if self.comp.fields.get("ref") is not None else self.comp.location

    def related(self, limit: int = 5) -> list[Location]:
        out = []
        for h in self.calls[:limit]:
            via = f" (imported from {' -> '.join(h.via)})" if h.via else ""
            out.append(Location(h.path, h.line, h.col, message=f"{h.what}(...) {h.why}{via}"))
        if not self.calls and self.declared:
            k = self.comp.fields.get("kind")
            if k is not None:
                out.append(k.location.with_message("declared as a code-executing reward"))
        return out

    def why(self) -> str:
        if self.calls:
            h = self.calls[0]
            more = f" and {len(self.calls) - 1} more call(s)" if len(self.calls) > 1 else ""
            return f"its code calls {h.what} at {h.path}:{h.line}{more}"
        return "it is declared kind: code"


def code_rewards(ctx) -> list[CodeReward]:
    """Components that execute generated code: declared so, or found so by static analysis.
    Computed once per run (every EXE rule asks)."""
    memo = vars(ctx.model).get("_code_rewards")
    if memo is not None:
        return memo
    out = []
    for comp, kind in zip(ctx.model.components, kinds(ctx)):
        calls = []
        located = locate(ctx, comp) if kind in ("rule", "code") else None
        if located is not None:
            calls = [h for h in scan(ctx, located).hits if h.category == "exec"]
        if kind == "code" or calls:
            out.append(CodeReward(comp, kind == "code", calls))
    vars(ctx.model)["_code_rewards"] = out
    return out


# --- values that must never be shown --------------------------------------------------------------
def mask(value: str) -> str:
    """A masked form that reveals no character of the value, only its length."""
    return f"{'*' * 8} ({len(value)} characters)"


def digest(value: str) -> str:
    """A stable subject for a fingerprint that does not contain the value."""
    from trimtab.common.paths import sha256_hex

    return "sha256:" + sha256_hex(value.encode("utf-8", "surrogatepass"))[:24]


def safe_url(url: str) -> str:
    """The URL without user information, query or fragment (they can carry credentials)."""
    from urllib.parse import urlsplit

    try:
        parts = urlsplit(url.strip())
    except ValueError:
        return "<an endpoint that is not a valid URL>"
    host = parts.hostname or ""
    if ":" in host:
        host = f"[{host}]"
    try:
        port = f":{parts.port}" if parts.port else ""
    except ValueError:
        port = ""
    userinfo = "****@" if "@" in parts.netloc else ""
    query = "?****" if parts.query else ""
    if not parts.scheme:
        return re.sub(r"[^/]*@", "****@", url.split("?")[0])[:200]
    return f"{parts.scheme}://{userinfo}{host}{port}{parts.path}{query}"[:200]
