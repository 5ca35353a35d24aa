"""SEC: secrets and remote code. Literal credentials in configs (never echoed), code shipped with
downloaded weights, and unsafe deserialisation in referenced reward code."""
from __future__ import annotations

import re

from trimtab import rule
from trimtab.common.redact import credentials
from trimtab.common.findings import Location  # perf: not through the package's lazy names, once per run

from ._safety import CAUTIONS, digest, kinds, label, locate, mask, safe_url, scan

# --- SEC-1 -----------------------------------------------------------------------------------------
# The detector lives in trimtab.common.redact: every output masks what SEC-1 reports, with the same test.
@rule(id="SEC-1", name="literal-credential", level="error", summary="A config holds a literal credential.",
      rationale="A token, password or API key written into a config is in version control, in every copy of the "
      "repository and in every log that prints the config (CWE-798, hard-coded credentials). trimtab "
      "looks at keys named like token, secret, password, api key or credentials whose value is a literal "
      "(not an environment reference such as ${VAR} or a placeholder), at values of well-known "
      "credential shapes under any key, and at random-looking values: at least min_length characters "
      "(default 24), at least min_entropy_bits of Shannon entropy per character (default 4.0; common "
      "practice), upper case, lower case and digits mixed, and a character class that changes at 45 in "
      "100 characters or more (words and numbers in run names change it far less often). The key's meaning "
      "is weighed with the value's shape: under a key that names a run, experiment, project, group, tag or "
      "description a random-looking value is a name, not a credential (a well-known credential shape there "
      "still is one); under a key that means a secret any literal value is one. "
      "Every file a run is composed from is looked at: its bases, the overrides file and the settings' "
      "layers, each reported at the line in that file. "
      "The value is never shown: findings give the key and a masked form, and every output of trimtab "
      "masks the same values wherever they would appear.",
      options={"min_length": 24, "min_entropy_bits": 4.0}, cwe=798, rl_only=False, scope="file", sources=True,
      help="A credential that was committed should be treated as exposed: revoke and rotate it, and read it "
           "at run time from the environment or a secret store. Your organisation's security policy and local "
           "rules take precedence over this advice.")
def literal_credential(ctx):
    for _key, node, why in credentials(ctx.doc, ctx.options["min_length"], ctx.options["min_entropy_bits"]):
        text = node.text
        shown = mask(text)
        if "://" in text and "@" in text:
            shown = safe_url(text) + ", user information masked"
        yield ctx.finding(f"literal credential, {why} (masked: {shown})", ctx.doc.loc(node), subject=digest(text),
                          suggestion="read it at run time from an environment variable or a secret store, "
                                     "and rotate it")


# --- SEC-2 -----------------------------------------------------------------------------------------
_COMMIT = re.compile(r"^[0-9a-f]{40}$|^[0-9a-f]{64}$")


def _on(value) -> bool:
    return value is True or (isinstance(value, str) and value.strip().lower() in ("true", "yes", "on", "1"))


def _pinned(value) -> bool:
    return isinstance(value, str) and bool(_COMMIT.match(value.strip().lower()))


@rule(id="SEC-2", name="trust-remote-code", level="warning",
      summary="Weights are loaded with trust_remote_code on (an error when their revision is not pinned).",
      rationale="trust_remote_code runs Python files shipped with the downloaded weights, on every process that "
      "loads them, with the job's permissions (CWE-829, inclusion of functionality from an untrusted "
      "control sphere). With a pinned full commit hash the code is at least the code that was reviewed; "
      "without one, whoever can push to the weights' repository can run code in the run. Checked for the "
      "policy weights and for each reward model or judge that sets it.",
      cwe=829, rl_only=False, help=CAUTIONS)
def trust_remote(ctx):
    v = ctx.model.get("model.trust_remote_code")
    if v is not None and _on(v.value):
        src = ctx.model.get("model.source")
        yield from _remote_code(ctx, v, ctx.model.get("model.revision"),
                                src.value if src is not None and isinstance(src.value, str) else None,
                                src.location if src is not None else None, "model.revision")
    for comp in ctx.model.components:
        t = comp.fields.get("trust_remote_code")
        if t is not None and _on(t.value):
            ref = comp.get("ref")
            yield from _remote_code(ctx, t, comp.fields.get("revision"), ref if isinstance(ref, str) else None,
                                    comp.loc("ref") if comp.fields.get("ref") is not None else None,
                                    "the component's revision", label(comp) + ": ")


def _remote_code(ctx, v, rev, what, where, rev_name, prefix=""):
    shown = f" for {what!r}" if what else ""
    related = [where.with_message("the weights")] if where is not None else []
    if rev is not None and _pinned(rev.value):
        yield ctx.finding(f"{prefix}trust_remote_code is on{shown}: code shipped with the weights runs in the job "
                          "(revision pinned)", v.location, related=related + [rev.location.with_message("pinned here")],
                          subject=f"pinned|{what}")
        return
    why = "no revision is stated" if rev is None else f"revision {str(rev.value)!r} is not a full commit hash"
    if rev is not None:
        related.append(rev.location.with_message("a floating revision"))
    yield ctx.finding(f"{prefix}trust_remote_code is on{shown} and {why}: whatever code the weights' repository "
                      "holds at launch runs in the job", v.location, related=related, level="error",
                      subject=f"unpinned|{what}",
                      suggestion=f"pin {rev_name} to a full commit hash, or turn trust_remote_code off")


# --- SEC-3 -----------------------------------------------------------------------------------------
@rule(id="SEC-3", name="unsafe-deserialisation", level="warning",
      summary="Referenced reward code deserialises data unsafely.",
      rationale="Unpickling (pickle.load/loads, Unpickler, shelve, marshal), loading a checkpoint without "
      "weights_only=True, reading arrays with allow_pickle=True, and yaml.load without a safe loader can "
      "all run code named by the data (CWE-502). Found by static analysis of the referenced module and "
      "the local modules it imports; nothing is imported or run.",
      needs=("reward.sources",), cwe=502, help=CAUTIONS)
def unsafe_deserialisation(ctx):
    for comp, kind in zip(ctx.model.components, kinds(ctx)):
        if kind not in ("rule", "code"):
            continue
        located = locate(ctx, comp)
        if located is None:
            continue
        ref = located.ref
        hits = [h for h in scan(ctx, located).hits if h.category == "deser"]
        for h in hits:
            via = f" (imported from {' -> '.join(h.via)})" if h.via else ""
            yield ctx.finding(f"{label(comp)}: {h.what}(...) at {h.path}:{h.line} {h.why}", comp.loc("ref"),
                              related=[Location(h.path, h.line, h.col, message=f"{h.what}(...){via}")],
                              subject=f"{ref.text}|{h.path}|{h.what}",
                              suggestion="use a safe format (JSON, a tensors-only format, yaml.safe_load) "
                                         "or weights_only=True")

