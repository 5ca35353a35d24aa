"""EXE: code execution. A reward that runs model-written code (declared `kind: code`, or found so by
static analysis of its module) must run in a sandbox with limits. trimtab never runs that code."""
from __future__ import annotations

from trimtab import rule

from ._safety import CAUTIONS, code_rewards, label

SOURCES = ("reward.sources",)
_NONE = ("none", "off", "disabled", "false", "no", "host", "unsandboxed", "")
_ON = ("on", "true", "yes", "enabled", "host", "bridge", "full", "internet", "allow", "allowed")
_WRITABLE = ("writable", "rw", "read-write", "readwrite", "host", "write")
_NO_LIMIT = ("unlimited", "none", "no", "off", "inf", "infinite", "max", "-1")


def _text(v):
    if v is None:
        return None
    if isinstance(v.value, bool):
        return "true" if v.value else "false"
    return None if v.value is None else str(v.value).strip().lower()


class Box:
    """The sandbox that a group of code rewards runs in: the run's own, or one written inside a
    component (which then applies to that component only)."""

    def __init__(self, ctx, rewards, comp=None):
        self.ctx, self.rewards, self.comp = ctx, rewards, comp
        self.kind = self.get("sandbox.kind")
        text = _text(self.kind)
        self.active = self.kind is not None and text is not None and text not in _NONE

    def get(self, concept):
        if self.comp is not None:
            return self.comp.fields.get(concept)
        return self.ctx.model.get(concept)


def boxes(ctx) -> list[Box]:
    rewards = code_rewards(ctx)
    own = [cr for cr in rewards if any(k.startswith("sandbox.") for k in cr.comp.fields)]
    out = [Box(ctx, [cr], cr.comp) for cr in own]
    shared = [cr for cr in rewards if cr not in own]
    if shared:
        out.append(Box(ctx, shared))
    return out


def _sandbox(ctx):
    """(code rewards, sandbox kind Value or None, active, getter) for each sandbox in use.

    perf: worked out once per run (the eight EXE rules ask) when no concept of the run is known only
    at launch or unusable (see _common.kl_mechanisms); kept without a getter, which would refer back
    to the run: a whole check of 200 files 13 million instructions fewer (0.4 %)."""
    model = ctx.model
    if model.unknown or model.unusable:
        return [(b.rewards, b.kind, b.active, b.get) for b in boxes(ctx)]
    memo = model.__dict__.get("_sandboxes")
    if memo is None:
        memo = model.__dict__["_sandboxes"] = [(b.rewards, b.kind, b.active, b.comp) for b in boxes(ctx)]
    if not memo:
        return memo
    get = model.get
    return [(rewards, kind, active, get if comp is None else comp.fields.get) for rewards, kind, active, comp in memo]


def _related(rewards, message="the code-executing reward"):
    out = []
    for cr in rewards[:3]:
        out.append(cr.config.with_message(f"{message}: {label(cr.comp)}"))
        out.extend(cr.related(2))
    return out


def _limit_missing(v) -> bool:
    if v is None or v.value is None:
        return True
    if isinstance(v.value, bool):
        return not v.value
    if isinstance(v.value, (int, float)):
        return v.value <= 0
    return str(v.value).strip().lower() in _NO_LIMIT


@rule(id="EXE-1", name="code-reward-unsandboxed", level="error",
      summary="A reward executes generated code with no sandbox (or sandbox kind none).",
      rationale="A code-execution reward runs programs the policy wrote. Without isolation they run with the "
      "training job's user, files, credentials and network: a completion can delete checkpoints, read "
      "tokens or reach internal services. CWE-653 (Improper Isolation or Compartmentalization: "
      "functionality of different privilege runs in one compartment) is the weakness: the code is "
      "untrusted by design, so the failure is the missing boundary, not the building of code from "
      "unneutralised input that CWE-94 describes (catalogue text from memory). trimtab finds such "
      "rewards when they are declared `kind: code` and by static analysis of the referenced module and the local modules it "
      "imports (exec, eval, compile, subprocess, os.system/popen/exec*/spawn*/posix_spawn*, pty.spawn, "
      "runpy, ctypes loading, multiprocessing with a code-running target); it never imports or runs them.",
      needs=SOURCES, cwe=653, help=CAUTIONS)
def unsandboxed(ctx):
    for rewards, kind, active, _get in _sandbox(ctx):
        if not active:
            yield from _unsandboxed(ctx, rewards, kind)


def _unsandboxed(ctx, rewards, kind):
    if kind is None:
        state = "no sandbox is configured (sandbox.kind is not stated)"
    else:
        state = f"sandbox.kind is {_text(kind) or 'empty'}"
    for cr in rewards:
        related = cr.related()
        if kind is not None:
            related.append(kind.location.with_message("the sandbox setting"))
        yield ctx.finding(f"{label(cr.comp)} executes generated code ({cr.why()}) and {state}: it runs "
                          "unisolated on the training host", cr.config, related=related,
                          subject=str(cr.comp.get("ref") or cr.comp.get("name") or cr.comp.index),
                          suggestion="run it in a container or VM sandbox with limits: sandbox: {kind: container, "
                                     "network: false, timeout_s: 10, memory_mb: 1024, processes: 16, "
                                     "filesystem: read-only}")


@rule(id="EXE-2", name="sandbox-network", level="warning", summary="The code sandbox has network access.",
      rationale="Generated code with a network can exfiltrate data, download payloads, or reach internal services "
      "and the metadata endpoints of the cluster (common practice: no network in code sandboxes).",
      needs=SOURCES, help=CAUTIONS)
def network(ctx):
    for rewards, _kind, active, get in _sandbox(ctx):
        v = get("sandbox.network")
        if active and v is not None and _text(v) in _ON:
            yield ctx.finding(f"sandbox.network is {_text(v)}: generated code can reach the network",
                              v.location, related=_related(rewards), subject=_text(v), suggestion="network: false")


@rule(id="EXE-3", name="sandbox-no-timeout", level="error", summary="The code sandbox has no wall-clock timeout.",
      rationale="A generated program that loops forever holds its rollout worker, and with it the whole step "
      "(CWE-770, Allocation of Resources Without Limits or Throttling: the worker's time is allocated "
      "to the program with no limit; the catalogue discourages the general CWE-400 for mapping and "
      "points to such specific entries, from memory). Every execution needs a wall-clock limit.",
      needs=SOURCES, cwe=770, help=CAUTIONS)
def no_timeout(ctx):
    for rewards, kind, active, get in _sandbox(ctx):
        v = get("sandbox.timeout_s")
        if active and _limit_missing(v):
            where = v.location if v is not None else kind.location
            shown = "is not stated" if v is None else f"is {_text(v)}"
            yield ctx.finding(f"sandbox.timeout_s {shown}: generated code can run without a time limit", where,
                              related=_related(rewards), subject=shown, suggestion="timeout_s: 10")


@rule(id="EXE-4", name="sandbox-long-timeout", level="warning",
      summary="The code sandbox's timeout is longer than the option allows.",
      rationale="Reward programs for reasoning and coding tasks normally finish in seconds; a long limit lets a "
      "stuck or hostile program hold a worker for that long on every sample: a limit far above any need "
      "throttles nothing (CWE-770, Allocation of Resources Without Limits or Throttling, rather than the "
      "general CWE-400, which the catalogue discourages for mapping; from memory). The option "
      "max_timeout_s (default 60 s, common practice) sets the threshold.",
      needs=SOURCES, cwe=770, options={"max_timeout_s": 60.0}, help=CAUTIONS)
def long_timeout(ctx):
    limit = ctx.options["max_timeout_s"]
    for rewards, _kind, active, get in _sandbox(ctx):
        v = get("sandbox.timeout_s")
        if active and v is not None and v.number is not None and v.number > limit:
            yield ctx.finding(f"sandbox.timeout_s = {v.number:g} s is over the {limit:g} s limit (option "
                              "max_timeout_s)", v.location, related=_related(rewards), subject=v.number)


@rule(id="EXE-5", name="sandbox-no-limits", level="warning",
      summary="The code sandbox has no memory limit or no process limit.",
      rationale="Without a memory limit one program can exhaust the host's memory; without a process limit a fork "
      "bomb takes the machine down (CWE-770, Allocation of Resources Without Limits or Throttling).",
      needs=SOURCES, cwe=770, help=CAUTIONS)
def no_limits(ctx):
    for rewards, kind, active, get in _sandbox(ctx):
        if active:
            yield from _no_limits(ctx, rewards, kind, get)


def _no_limits(ctx, rewards, kind, get):
    for concept, what, fix in (("sandbox.memory_mb", "memory", "memory_mb: 1024"),
                               ("sandbox.processes", "process", "processes: 16")):
        v = get(concept)
        if _limit_missing(v):
            shown = "is not stated" if v is None else f"is {_text(v)}"
            yield ctx.finding(f"{concept} {shown}: no {what} limit for generated code",
                              v.location if v is not None else kind.location, related=_related(rewards),
                              subject=concept, suggestion=fix)


@rule(id="EXE-6", name="sandbox-writable-fs", level="warning",
      summary="The code sandbox can write to the host file system.",
      rationale="Generated code that can write host files can overwrite checkpoints, data and the reward code "
      "itself (common practice: a read-only or no host mount, with a scratch tmpfs).",
      needs=SOURCES, help=CAUTIONS)
def writable(ctx):
    for rewards, _kind, active, get in _sandbox(ctx):
        v = get("sandbox.filesystem")
        if active and v is not None and _text(v) in _WRITABLE:
            yield ctx.finding(f"sandbox.filesystem is {_text(v)}: generated code can write host files",
                              v.location, related=_related(rewards), subject=_text(v),
                              suggestion="filesystem: read-only")


@rule(id="EXE-7", name="sandbox-privileged", level="error",
      summary="Generated code runs as root or in a privileged sandbox.",
      rationale="Root inside a privileged or weakly isolated sandbox is close to root on the host; generated code "
      "needs no privileges (CWE-250, execution with unnecessary privileges).",
      needs=SOURCES, cwe=250, help=CAUTIONS)
def privileged(ctx):
    for rewards, _kind, active, get in _sandbox(ctx):
        if active:
            yield from _privileged(ctx, rewards, get)


def _privileged(ctx, rewards, get):
    user = get("sandbox.user")
    if user is not None and _text(user) in ("root", "0", "uid 0", "0:0"):
        yield ctx.finding(f"sandbox.user is {_text(user)}: generated code runs as root", user.location,
                          related=_related(rewards), subject="root", suggestion="run as an unprivileged user")
    priv = get("sandbox.privileged")
    if priv is not None and _text(priv) in ("true", "yes", "on"):
        yield ctx.finding("sandbox.privileged is true: generated code runs in a privileged sandbox",
                          priv.location, related=_related(rewards), subject="privileged",
                          suggestion="privileged: false")


@rule(id="EXE-8", name="sandbox-process-not-isolation", level="warning",
      summary="sandbox.kind process is a plain subprocess on the training host, not isolation.",
      rationale="A subprocess shares the host's user, file system, network and credentials; time and memory limits "
      "on it do not stop it reading tokens or writing files. Use a container or VM boundary for "
      "model-written code.",
      needs=SOURCES, help=CAUTIONS)
def process_kind(ctx):
    for rewards, kind, active, _get in _sandbox(ctx):
        if active and _text(kind) in ("process", "subprocess", "local"):
            yield ctx.finding(f"sandbox.kind is {_text(kind)}: generated code runs as a plain subprocess on the "
                              "training host, which isolates nothing", kind.location, related=_related(rewards),
                              subject=_text(kind), suggestion="kind: container (or vm)")

