"""Values that must never be shown, and characters that must never reach a terminal.

One detector of credentials (the one SEC-1 reports with) and one masking function, ``mask``,
that every output applies to every piece of text it writes: the text, JSON and SARIF reports,
the audit page, explain, map, the ``--fix --diff`` output, the accepted-findings file and error
messages. ``mask`` replaces, wherever they occur in the text:

- every literal credential of any file this process has read (SEC-1's detector, run over each
  document as it is loaded: ``learn``), and each line of a multi-line one;
- anything of a well-known credential shape (a private key block, a signed web token, ...);
- a URL's user information, query and fragment;
- the value beside a key named like a credential (``api_key: ...``, ``password=...``);
- a random-looking word (the high-entropy test of SEC-1, with its default thresholds).

Text meant for a terminal also goes through ``visible`` (``for_text`` does both): control
characters (which could retitle or clear the terminal), line breaks inside one field (which could
forge a report line) and bidirectional overrides are shown as ⟨U+XXXX⟩, never obeyed.
"""
from __future__ import annotations

import functools
import math
import re
from collections import Counter
from typing import Any

from .patterns import later

MASK = "*" * 8
MIN_LENGTH = 24  # SEC-1's default min_length
MIN_BITS = 4.0  # SEC-1's default min_entropy_bits
# A credential is masked wherever it occurs when it is at least this long and not a plain word (a
# password "training" would otherwise hide that word in every message); any credential is masked
# beside its key and at its place in a file's text.
_MIN_KNOWN = 8
_PLAIN_WORD = re.compile(r"[a-z]+|[A-Z][a-z]+|[A-Z]+")

# --- the detector (SEC-1) ------------------------------------------------------------------------
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

_ENV_REF_TEXT = (r"^\$[A-Za-z_]\w*$|^%\(?[A-Za-z_]\w*\)?s?%?$|^env:|^\{\{.*\}\}$|"
                 r"os\.environ|^oc\.env|^secret:|^vault:|^file:|^@", re.I)
_PLACEHOLDER_TEXT = (r"^(x+|\*+|\.+|-+|_+|#+|<[^>]*>|\[[^\]]*\]|changeme|change[_-]?me|replace[_-]?me|"
                     r"todo|tbd|fixme|none|null|nil|redacted|placeholder|dummy|example\w*|your[_-].*|"
                     r"insert[_-].*|set[_-]?me|fill[_-]?me|secret|password|token|test|fake\w*|"
                     r"not[_-]?set|unset|empty)$", re.I)

# Well-known credential shapes, by form only.
SHAPES = (
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
    """The pattern tables, each compiled on its own first use (start-up stays fast, and a check that
    meets no credential-like key never compiles the others)."""
    words = "|".join(sorted(map(re.escape, _CRED_WORDS), key=len, reverse=True))
    return (later(*_NOT_CRED_TEXT), later(*_ENV_REF_TEXT), later(*_PLACEHOLDER_TEXT),
            tuple((name, later(text)) for name, text in SHAPES),
            later(rf"(?:^|_)(?:{words})(?:_|$)"))


@functools.lru_cache(maxsize=1)
def _any_shape():
    """perf: all credential shapes in one pattern; it matches exactly where one of them does."""
    return re.compile("|".join(f"(?:{text})" for _name, text in SHAPES))


# Text that every credential shape (SHAPES) contains: a shape can match only where this matches
# (tests/test_masking.py checks it against strings each shape matches).
SHAPE_HINT = r"-----BEGIN|eyJ|[sr]k[-_]|gh[pousr]_|hf_|AKIA|ASIA|xox|Bearer|://"


@functools.lru_cache(maxsize=1)
def _shape_hint():
    return re.compile(SHAPE_HINT)


def shape_of(text: str) -> str:
    """The name of the well-known credential shape found in ``text``, or ""."""
    # perf: the hint's plain alternatives are searched first, 2.3 us a value against 7.8 us for the
    # shapes' own search (which begins most alternatives with a word boundary); the walk asks this of
    # ~6,800 values on the 2,000-file benchmark corpus, of which none has a credential's shape
    if not _shape_hint().search(text) or not _any_shape().search(text):
        return ""
    return next((name for name, pat in _patterns()[3] if pat.search(text)), "")


# Keys whose words mean a name, a label or a text for people (run and experiment names, projects,
# groups, tags, descriptions): their values are chosen to tell runs apart, so a random-looking one is
# no sign of a credential. A well-known credential shape under such a key still is one.
_LABEL_WORDS = {"name", "names", "title", "tag", "tags", "label", "labels", "description", "desc", "notes",
                "note", "comment", "comments", "project", "experiment", "group", "run", "job", "alias"}
_LABEL_IDS = {"run_id", "experiment_id", "exp_id", "job_id", "group_id", "project_id", "trial_id", "sweep_id"}


@functools.lru_cache(maxsize=4096)
def is_label_key(key: str) -> bool:
    """Does a key mean a name, label or description (``run_name``, ``experiment``, ``tags``)?"""
    k = key.strip().lower().replace("-", "_").replace(" ", "_").replace(".", "_")
    if not k or is_credential_key(key):
        return False
    return k in _LABEL_IDS or k.split("_")[-1] in _LABEL_WORDS


@functools.lru_cache(maxsize=4096)
def is_credential_key(key: str) -> bool:
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


def high_entropy(text: str, min_length: int = MIN_LENGTH, min_bits: float = MIN_BITS) -> bool:
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


def literal(text: str) -> bool:
    """A value written out, not an environment reference, a placeholder or a path."""
    t = text.strip()
    _n, env, placeholder, _s, _w = _patterns()
    return bool(t) and not _refers(t, env) and not placeholder.match(t) and not t.startswith(("/", "./", "~"))


def _refers(text: str, env) -> bool:
    """A reference to the environment or a secret store (``${NAME}``, ``$NAME``, ``env:``...). A
    ``${`` with a ``}`` somewhere after it is found with two string searches: the pattern
    ``\\$\\{[^}]*\\}``, tried at every ``${`` of a long line, was quadratic."""
    start = text.find("${")
    return start >= 0 and text.find("}", start + 2) >= 0 or bool(env.search(text))


def reason(key: str, node, min_length: int = MIN_LENGTH, min_bits: float = MIN_BITS) -> str:
    """Why the scalar ``node`` under ``key`` is a literal credential, or "" when it is not one. Reads
    the node's text, tag and style only (``credentials`` keeps its answers by them)."""
    text = node.text
    if not isinstance(text, str) or not text.strip() or node.tag not in (None, "!", "tag:yaml.org,2002:str"):
        return ""
    if is_credential_key(key) and literal(text) and not isinstance(node.value12, (bool, int, float)) \
            and node.value12 is not None:
        return f"key {key!r} holds a literal value"
    shape = shape_of(text)
    if shape:
        return f"the value of {key!r} has the shape of {shape}" if key else f"a value has the shape of {shape}"
    if high_entropy(text.strip(), min_length, min_bits) and not is_label_key(key):
        # weighed with the key's meaning: a random-looking name or tag is a name (see is_label_key)
        return f"the value of {key!r} looks like a credential (high entropy)"
    return ""


# perf: ``reason`` reads a scalar's key, text, tag and style only (its YAML 1.2 value follows from
# them), and runs repeat the same entries from file to file: its answers are kept, for short texts, in
# two generations of at most _MEMO_SIZE entries each. When the current one is full it becomes the
# previous one (the one before is dropped); an answer found in the previous one is carried over. So the
# entries that repeat stay, the ones seen once (seeds, revisions, names) leave, and the memo is full
# after a few hundred files: its memory does not grow with the number of files. An entry is keyed by
# (key, text, tag, style), and by the thresholds too when they are not the defaults.
_REASONS: dict[tuple, str] = {}
_EARLIER: dict[tuple, str] = {}
_SHORTEST_SHAPE = 15
_MEMO_TEXT = 200
_MEMO_SIZE = 2048
# perf: is_credential_key's answer per key text, read with one dict lookup (the walk asks it of ~350,000
# short values on the 2,000-file benchmark corpus); bounded as is_credential_key's own cache
_CREDENTIAL_KEYS: dict[str, bool] = {}


def _remember(memo_key: tuple, key: str, node, min_length: int, min_bits: float) -> str:
    """``reason``'s answer for a scalar not in the current generation of the memo (see above)."""
    why = _EARLIER.get(memo_key)
    if why is None:
        why = reason(key, node, min_length, min_bits)
    if len(_REASONS) >= _MEMO_SIZE:
        _EARLIER.clear()
        _EARLIER.update(_REASONS)
        _REASONS.clear()
    _REASONS[memo_key] = why
    return why


def _credential_key(key: str) -> bool:
    """is_credential_key(key), kept in _CREDENTIAL_KEYS."""
    found = is_credential_key(key)
    if len(_CREDENTIAL_KEYS) >= 4096:
        _CREDENTIAL_KEYS.clear()
    _CREDENTIAL_KEYS[key] = found
    return found


def credentials(doc, min_length: int = MIN_LENGTH, min_bits: float = MIN_BITS) -> list[tuple[str, Any, str]]:
    """(key, scalar node, why) of every literal credential of a document, each node once. Kept on
    the document for the default thresholds (the loader's ``learn`` and SEC-1 share one walk)."""
    default = min_length == MIN_LENGTH and min_bits == MIN_BITS
    if default:
        memo = vars(doc).get("_credentials")
        if memo is not None:
            return memo
    out: list[tuple[str, Any, str]] = []
    seen: set[int] = set()
    # below this length (and without "://") a value can be a credential only by its key: the shortest
    # credential shape (SHAPES, apart from a URL's password) is 15 characters long
    short = min(_SHORTEST_SHAPE, min_length)
    reasons, credential_keys = _REASONS, _CREDENTIAL_KEYS
    thresholds = () if default else (min_length, min_bits)
    keyed = getattr(doc, "keyed", None)
    # perf: 442,000 values on the 2,000-file benchmark corpus; a value's key is looked up only for a
    # short value, the memo's key is a tuple of four, and whether a node was reported already is asked
    # only of a credential (21% fewer instructions a pass once the memo holds the repeated values)
    for key, node in keyed if keyed is not None else tree_values(doc):
        text = node.text
        if type(text) is str:
            # a short value under a plain key (most values) is no credential: below _SHORTEST_SHAPE
            # characters and without "://" no shape or entropy test can match
            if len(text) < short and "://" not in text:
                credential = credential_keys.get(key)
                if credential is None:
                    credential = _credential_key(key)
                if not credential:
                    continue
            if len(text) <= _MEMO_TEXT and type(node).__name__ == "Scalar":
                memo_key = (key, text, node.tag, node.style, *thresholds) if thresholds \
                    else (key, text, node.tag, node.style)
                why = reasons.get(memo_key)
                if why is None:
                    why = _remember(memo_key, key, node, min_length, min_bits)
            else:
                why = reason(key, node, min_length, min_bits)
        else:
            why = reason(key, node, min_length, min_bits)
        if why and id(node) not in seen:
            seen.add(id(node))
            out.append((key, node, why))
    if default:
        vars(doc)["_credentials"] = out
    return out


def tree_values(doc) -> list[tuple[str, Any]]:
    """(key text, scalar) of every value of a document's tree, for a document whose builder made no
    ``keyed`` list (Document.keyed): each mapping's pairs as written (a value a later key overrides is
    still committed text; a merged value is reached where it was written, under the same key), a
    list's items under the list's key, each collection once. Nodes are told by their kind (redact
    sits below the located tree)."""
    out: list[tuple[str, Any]] = []
    for root in doc.roots:
        walked: set[int] = set()
        stack = [("", root)]
        while stack:
            parent_key, parent = stack.pop()
            if id(parent) in walked:
                continue
            walked.add(id(parent))
            kind = getattr(parent, "kind", "")
            if kind == "mapping":
                found = [(k.text if getattr(k, "kind", "") == "scalar" else "?", node) for k, node in parent.pairs]
            elif kind == "sequence":
                found = [(parent_key, node) for node in parent.items]
            else:
                continue
            for key, node in found:
                if getattr(node, "kind", "") == "scalar":
                    out.append((key, node))
                else:
                    stack.append((key, node))
    return out


# --- what this process has seen ---------------------------------------------------------------------
_KNOWN: set[str] = set()
# The known credentials by their first _MIN_KNOWN characters, longest first: ``mask`` finds them in
# one pass over a text, with no pattern to compile (a compiled alternation cost time in the total
# length of every credential seen, again each time a file added one).
_BY_HEAD: dict[str, list[str]] = {}


def learn(doc) -> None:
    """Remember the literal credentials of a document just loaded: ``mask`` hides them wherever
    they occur, whatever rule or output echoes them."""
    found: list[str] = []
    for _key, node, _why in credentials(doc):
        text = node.text.strip()
        raw = doc.text[node.start:node.end] if getattr(node, "end", 0) else ""  # as written (quoted, folded)
        wholes = (text, raw.strip())
        if "://" in text:  # a URL: its password and query values, not its host and path
            wholes = tuple(_url_secrets(text))
        for whole in wholes:
            found.extend({whole, *(line.strip() for line in whole.splitlines())})
    remember(found)


# The pieces remembered since the last ``learned()``, kept only where ``learned`` is asked (a --jobs
# worker hands them to the parent with its results: the parent then masks what a worker read).
_LEARNED: list[str] | None = None


def remember(found) -> None:
    """Add credentials (pieces of text) to those ``mask`` hides."""
    added = False
    for piece in found:
        if len(piece) >= _MIN_KNOWN and not _PLAIN_WORD.fullmatch(piece) and piece not in _KNOWN:
            _KNOWN.add(piece)
            pieces = _BY_HEAD.setdefault(piece[:_MIN_KNOWN], [])
            pieces.append(piece)
            pieces.sort(key=len, reverse=True)
            added = True
            if _LEARNED is not None:
                _LEARNED.append(piece)
    if added:
        _mask.cache_clear()


def learned() -> list[str]:
    """The pieces remembered since the last call (from the first call on; kept in memory only)."""
    global _LEARNED
    out, _LEARNED = _LEARNED or [], []
    return out


def _url_secrets(url: str):
    from urllib.parse import parse_qsl, urlsplit

    try:
        parts = urlsplit(url.strip())
        yield from (parts.password or "", parts.username or "" if parts.password else "")
    except ValueError:
        return
    for _k, v in parse_qsl(parts.query):
        yield v


def _replace_known(s: str) -> str:
    """``s`` with every known credential replaced by ``MASK``: at each place, the longest one that
    starts there (as a pattern of the alternatives, longest first, would), in time linear in ``s``."""
    heads, size = _BY_HEAD, _MIN_KNOWN
    out: list[str] = []
    last, i, end = 0, 0, len(s) - size
    while i <= end:
        pieces = heads.get(s[i:i + size])
        if pieces:
            for piece in pieces:
                if s.startswith(piece, i):
                    out += (s[last:i], MASK)
                    i = last = i + len(piece)
                    break
            else:
                i += 1
        else:
            i += 1
    return "".join(out) + s[last:] if out else s


# --- masking -----------------------------------------------------------------------------------------
_URL = later(r"\b[A-Za-z][A-Za-z0-9+.-]*://[^\s'\"<>`]+")
_USERINFO = later(r"(?<=://)[^/?#@\s]*@")
_KEYED = later(r"(?P<key>[A-Za-z_][\w.-]*)(?P<sep>['\"]?\s*[:=]\s*)"
                    r"(?P<val>\"[^\"\n]*\"|'[^'\n]*'|\$\{[^}\n]*\}|[^\s,;}\]'\"]+)")
_WORD = later(r"[A-Za-z0-9_+=-]{%d,}" % MIN_LENGTH)


def _url(m: re.Match) -> str:
    url = _USERINFO.sub("****@", m.group())
    for sep in "?#":
        head, found, _rest = url.partition(sep)
        if found:
            url = head + sep + "****"
    return url


def _keyed(m: re.Match) -> str:
    key = m["key"].rsplit(".", 1)[-1]
    val = m["val"]
    bare = val[1:-1] if val[:1] in "'\"" else val
    if not is_credential_key(key) or not literal(bare) or bare.startswith("*"):
        return m.group()
    if re.fullmatch(r"[-+]?[0-9.]+|true|false|yes|no|on|off|null|~", bare, re.I):
        return m.group()
    return m["key"] + m["sep"] + (val[0] + MASK + val[0] if val[:1] in "'\"" else MASK)


def _word(m: re.Match) -> str:
    return MASK if high_entropy(m.group()) else m.group()


def mask(text) -> str:
    """``text`` with every credential it holds replaced by ``MASK`` (see the module's docstring)."""
    s = text if isinstance(text, str) else str(text)
    return _mask(s) if s else s


@functools.lru_cache(maxsize=4096)  # perf: help texts and messages repeat across findings
def _mask(s: str) -> str:
    if "://" in s:  # first: the host and path stay readable
        s = _URL.sub(_url, s)
    if _BY_HEAD:
        s = _replace_known(s)
    s = _any_shape().sub(MASK, s)
    if ":" in s or "=" in s:
        s = _KEYED.sub(_keyed, s)
    return _WORD.sub(_word, s)


def mask_source(text: str, doc=None) -> str:
    """A file's text for showing whole (the audit page, a diff's context): every literal credential
    of ``doc`` replaced by asterisks (line breaks kept, so lines keep their numbers), then every
    line masked."""
    if doc is not None and doc.text == text:
        spans = sorted((node.start, node.end) for _k, node, _w in credentials(doc) if getattr(node, "end", 0))
        if spans:
            out, at = [], 0
            for start, end in spans:
                if start < at:
                    continue
                out.append(text[at:start])
                out.append(re.sub(r"[^\r\n]", "*", text[start:end]))
                at = end
            out.append(text[at:])
            text = "".join(out)
    return "".join(mask(line) for line in text.splitlines(keepends=True))


# --- terminals -----------------------------------------------------------------------------------
# C0 controls but tab, DEL, C1 controls (CSI is one), the line breaks YAML and str.splitlines count,
# and the bidirectional and invisible formatting characters.
CONTROL = later("[\x00-\x08\x0a-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069\u200e\u200f\ufeff]")


def _visible(ch: re.Match) -> str:
    return f"\u27e8U+{ord(ch.group()):04X}\u27e9"


def visible(text) -> str:
    """Control characters and line breaks shown as ⟨U+XXXX⟩, never obeyed."""
    s = text if isinstance(text, str) else str(text)
    if s.isprintable():
        # every character CONTROL matches is Unicode 'Other' or 'Separator', which str.isprintable
        # refuses (tests/test_masking.py checks every code point). perf: most text has none, and a
        # one-file check then never compiles CONTROL (about 1 ms of start-up)
        return s
    return CONTROL.sub(_visible, s)


def for_text(text) -> str:
    """One field of text output (a path, a message, a value): masked, then made visible."""
    return visible(mask(text))
