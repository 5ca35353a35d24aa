"""SEC: secrets and remote code. Literal credentials in configs (never echoed), code shipped with
downloaded weights, and unsafe deserialisation in referenced reward code."""
from __future__ import annotations

import functools
import math
import re
from collections import Counter

from trimtab import Mapping, Scalar, Sequence, rule

from ._safety import CAUTIONS, digest, kind_of, label, mask, safe_url, scanner

# --- SEC-1 -----------------------------------------------------------------------------------------
_CRED_WORDS = {"secret", "secrets", "password", "passwd", "passphrase", "pwd", "credential", "credentials",
               "apikey", "api_key", "private_key", "access_key", "secret_key", "client_secret",
               "auth_token", "access_token", "refresh_token", "bearer", "bearer_token", "api_token",
               "session_token", "service_token", "hub_token", "personal_token", "webhook_secret"}
_TOKEN_QUALIFIERS = {"api", "auth", "access", "bearer", "hub", "user", "personal", "service", "refresh",
                     "session", "secret", "write", "read", "upload", "login"}
# Keys that name a token of the vocabulary or a count of tokens, not a credential.
_NOT_CRED_TEXT = (r"(^|_)(max|min|num|n|pad|eos|bos|unk|sep|cls|mask|start|end|stop|special|think|answer|"
                  r"image|vision|audio|chat|tokens?_id|id)_token(s)?$|_tokens?_(id|ids|count|limit)$|"
                  r"^tokens?$|tokenizer|_length$|_len$|_file$|_path$|_env$|_var$|_name$", 0)

_ENV_REF_TEXT = (r"\$\{[^}]*\}|^\$[A-Za-z_]\w*$|^%\(?[A-Za-z_]\w*\)?s?%?$|^env:|^\{\{.*\}\}$|"
                 r"os\.environ|^oc\.env|^secret:|^vault:|^file:|^@", re.I)
_PLACEHOLDER_TEXT = (r"^(x+|\*+|\.+|-+|_+|#+|<[^>]*>|\[[^\]]*\]|changeme|change[_-]?me|replace[_-]?me|"
                     r"todo|tbd|fixme|none|null|nil|redacted|placeholder|dummy|example\w*|your[_-].*|"
                     r"insert[_-].*|set[_-]?me|fill[_-]?me|secret|password|token|test|fake\w*|"
                     r"not[_-]?set|unset|empty)$", re.I)

# Well-known credential shapes, by form only.
_SHAPES_TEXT = (
    ("a private key block", r"-----BEGIN [A-Z ]*PRIVATE KEY-----"),
    ("a signed web token", r"\beyJ[A-Za-z0-9_-]{8,}\.eyJ[A-Za-z0-9_-]{8,}\.[A-Za-z0-9_-]{8,}"),
    ("a secret-key token", r"\b(?:sk|rk)[-_](?:[A-Za-z0-9]+[-_])?[A-Za-z0-9]{20,}"),
    ("a code-hosting access token", r"\bgh[pousr]_[A-Za-z0-9]{30,}"),
    ("a model-hub access token", r"\bhf_[A-Za-z0-9]{30,}"),
    ("a cloud access key id", r"\b(?:AKIA|ASIA)[0-9A-Z]{16}\b"),
    ("a chat-service token", r"\bxox[abprs]-[A-Za-z0-9-]{10,}"),
    ("a bearer token", r"\bBearer\s+[A-Za-z0-9._~+/-]{20,}=*"),
    ("a password inside a URL", r"^[A-Za-z][A-Za-z0-9+.-]*://[^/\s:@]+:[^/\s@]+@"),
)


@functools.lru_cache(maxsize=1)
def _patterns():
    """The pattern tables, compiled on first use (start-up stays fast)."""
    words = "|".join(sorted(map(re.escape, _CRED_WORDS), key=len, reverse=True))
    return (re.compile(*_NOT_CRED_TEXT), re.compile(*_ENV_REF_TEXT), re.compile(*_PLACEHOLDER_TEXT),
            tuple((name, re.compile(text)) for name, text in _SHAPES_TEXT),
            re.compile(rf"(?:^|_)(?:{words})(?:_|$)"))


@functools.lru_cache(maxsize=1)
def _any_shape():
    """perf: all credential shapes in one pattern; it matches exactly where one of them does."""
    return re.compile("|".join(f"(?:{text})" for _name, text in _SHAPES_TEXT))


@functools.lru_cache(maxsize=4096)
def _is_cred_key(key: str) -> bool:
    k = key.strip().lower().replace("-", "_").replace(" ", "_")
    if _patterns()[0].search(k):
        return False
    if _patterns()[4].search(k):
        return True
    words = k.split("_")
    if "password" in words or "secret" in words or "passwd" in words or "credentials" in words:
        return True
    if words[-1] in ("token", "key") and len(words) >= 2 and words[-2] in _TOKEN_QUALIFIERS | {"api", "private", "access", "secret"}:
        return True
    return False


def _entropy(text: str) -> float:
    counts = Counter(text)
    n = len(text)
    return -sum(c / n * math.log2(c / n) for c in counts.values())


def _high_entropy(text: str, min_length: int, min_bits: float) -> bool:
    # perf: str.split() finds whitespace (the same str.isspace test) in C, not per character in Python
    if len(text) < min_length or "/" in text or "." in text or len("".join(text.split())) != len(text):
        return False
    if re.fullmatch(r"[0-9a-fA-F-]+", text):  # commit hashes, UUIDs
        return False
    classes = sum(bool(re.search(p, text)) for p in (r"[a-z]", r"[A-Z]", r"[0-9]"))
    if classes < 3 or _entropy(text) < min_bits:
        return False
    # Words and numbers (run names, dataset ids) change character class rarely; random tokens change
    # it at about 6 of 10 characters (for letters and digits drawn evenly). Require 45 in 100.
    kinds = [("l" if c.islower() else "u" if c.isupper() else "d" if c.isdigit() else "o") for c in text]
    switches = sum(1 for a, b in zip(kinds, kinds[1:]) if a != b)
    return switches / (len(text) - 1) >= 0.45


def _literal(text: str) -> bool:
    t = text.strip()
    _n, env, placeholder, _s, _w = _patterns()
    return bool(t) and not env.search(t) and not placeholder.match(t) and not t.startswith(("/", "./", "~"))


def _entries(root):
    """(key text, value node) for every mapping entry (and sequence item under a key), each once."""
    seen = set()
    stack = [("", root)]
    while stack:
        key, node = stack.pop()
        if id(node) in seen:
            continue
        seen.add(id(node))
        if isinstance(node, Mapping):
            for k, _kn, v, _via in node.entries():
                yield k, v
                stack.append((k, v))
        elif isinstance(node, Sequence):
            for item in node.items:
                if isinstance(item, Scalar):
                    yield key, item
                else:
                    stack.append((key, item))


@rule(id="SEC-1", name="literal-credential", level="error", summary="A config holds a literal credential.",
      rationale="A token, password or API key written into a config is in version control, in every copy of the "
      "repository and in every log that prints the config (CWE-798, hard-coded credentials). trimtab "
      "looks at keys named like token, secret, password, api key or credentials whose value is a literal "
      "(not an environment reference such as ${VAR} or a placeholder), at values of well-known "
      "credential shapes under any key, and at random-looking values: at least min_length characters "
      "(default 24), at least min_entropy_bits of Shannon entropy per character (default 4.0; common "
      "practice), upper case, lower case and digits mixed, and a character class that changes at 45 in "
      "100 characters or more (words and numbers in run names change it far less often). "
      "The value is never shown: findings give the key and a masked form.",
      options={"min_length": 24, "min_entropy_bits": 4.0}, cwe=798, rl_only=False, scope="file",
      help=CAUTIONS + " A credential that was committed should be treated as exposed: revoke and rotate "
                      "it, and read it at run time from the environment or a secret store.")
def literal_credential(ctx):
    seen = set()
    for root in ctx.doc.roots:
        for key, node in _entries(root):
            if not isinstance(node, Scalar) or id(node) in seen:
                continue
            text = node.text
            if not isinstance(text, str) or not text.strip() or node.tag not in (None, "!", "tag:yaml.org,2002:str"):
                continue
            why = ""
            if _is_cred_key(key) and _literal(text) and not isinstance(node.value12, (bool, int, float)) \
                    and node.value12 is not None:
                why = f"key {key!r} holds a literal value"
            else:
                shape = ""
                if _any_shape().search(text):  # perf: one search for every value, then which shape
                    shape = next((name for name, pat in _patterns()[3] if pat.search(text)), "")
                if shape:
                    why = f"the value of {key!r} has the shape of {shape}" if key else f"a value has the shape of {shape}"
                elif _high_entropy(text.strip(), ctx.options["min_length"], ctx.options["min_entropy_bits"]):
                    why = f"the value of {key!r} looks like a credential (high entropy)"
            if not why:
                continue
            seen.add(id(node))
            loc = ctx.doc.loc(node)
            shown = mask(text)
            if "://" in text and "@" in text:
                shown = safe_url(text) + ", user information masked"
            yield ctx.finding(f"literal credential: {why} (masked: {shown})", loc, subject=digest(text),
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
    from trimtab import Location
    from trimtab.codescan import parse_reference

    sc = scanner(ctx)
    for comp in ctx.model.components:
        if kind_of(comp) not in ("rule", "code"):
            continue
        ref = parse_reference(comp.get("ref"))
        if ref is None:
            continue
        hits = [h for h in sc.scan(sc.locate(ref)).hits if h.category == "deser"]
        for h in hits:
            via = f" (imported from {' -> '.join(h.via)})" if h.via else ""
            yield ctx.finding(f"{label(comp)}: {h.what}(...) at {h.path}:{h.line} {h.why}", comp.loc("ref"),
                              related=[Location(h.path, h.line, h.col, message=f"{h.what}(...){via}")],
                              subject=f"{ref.text}|{h.path}|{h.what}",
                              suggestion="use a safe format (JSON, a tensors-only format, yaml.safe_load) "
                                         "or weights_only=True")

