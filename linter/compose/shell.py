"""Load: a shell launch script -> the runs it starts, read statically (the script is never run).

The script is split into words by the standard library's ``shlex`` (POSIX rules: quotes removed,
escapes applied, ``;``/``&&``/``|``/newline end a command). Before that, one pass over the text
joins line continuations, drops comments and here-document bodies, and replaces each expansion
(``$X``, ``${X:-8}``, ``$((N * 8))``, ``$(...)``, backquotes) outside single quotes by a
placeholder of the same length, so every word keeps its offsets in the file and every expansion
is evaluated here, without a shell:

- variables assigned in the script (``X=8``, ``export X=8``, ``readonly X=8``, ``${X:=8}``) and
  parameter defaults (``${X:-8}``) are substituted; integer arithmetic on known values is computed
  (64-bit, as the shell does; anything larger is unknown);
- a command substitution, a variable the script never sets (the caller's environment), the
  script's own arguments, a variable assigned inside a loop or a branch: unknown. A value that uses
  one is unknown, with the reason and the place, never a guess.

A command is a *training command* when its program matches the settings' ``launch.programs`` globs
(default ``*.py``), or it runs a module (``-m``) matching ``launch.modules``. Words before the
program are the launcher (``env``, ``nohup``, a multi-process launcher): its inline assignments
are environment, its process/node arguments are topology. After the program:

- ``key.path=value`` (``+key=``, ``++key=``, ``~key``) is an override of the base config;
- ``--flag value`` / ``--flag=value`` is a key of its own (matched like any key);
- the base config is named by ``--config FILE``, by a config folder and name, or by a positional
  YAML or JSON file.

``read`` returns a Document (``fmt="shell"``) whose ``runs`` are one ``LaunchRoot`` per training
command, and whose ``roots`` hold one mapping of every value the script writes (variables, inline
environment, arguments) for the file rules (literal credentials).
"""
from __future__ import annotations

import ast
import re
import shlex
from dataclasses import dataclass, field
from pathlib import Path
from typing import TypeVar

from ..load.document import Document, Mapping, Node, Scalar, Sequence
from ..common.findings import Location

# Generic defaults (settings: [tool.trimtab.launch]). Topology words are the trade's own words for
# machines and processes; the settings can add more.
PROGRAMS = ["*.py"]
MODULES = ["*"]
CONFIG_FLAGS = ["--config", "--config-file", "--config_file"]
CONFIG_DIR_FLAGS = ["--config-path", "--config_path", "--config-dir", "--config_dir"]
CONFIG_NAME_FLAGS = ["--config-name", "--config_name"]
TOPOLOGY = {
    "cluster.nodes": ["nnodes", "nodes", "num_nodes", "n_nodes", "num_machines"],
    "cluster.gpus_per_node": ["nproc_per_node", "nprocs_per_node", "gpus_per_node", "num_gpus_per_node",
                              "processes_per_node", "devices_per_node"],
    "cluster.world_size": ["num_processes", "nprocs", "np", "world_size"],
}
SOURCE_DEPTH = 4
MAX_WORDS = 50_000  # words in one script, sourced scripts included (a long launch script has ~2000)
MAX_VALUE = 1 << 16  # characters of one variable's value
MAX_SCRIPT = 1 << 19  # bytes of one launch script (a long one has a few kilobytes; shell words are costly)
MAX_INT = (1 << 63) - 1  # shell arithmetic is 64-bit

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_ASSIGN = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)(\+?)=")
_INTERP = re.compile(r"python[0-9.]*")
_OVERRIDE = re.compile(r"(\+{0,2}|~)([A-Za-z_][\w\-]*(?:[./@][\w\-]+)*)(?:=(.*))?", re.S)
_PARAM = re.compile(r"(#?)([A-Za-z_][A-Za-z0-9_]*|[0-9@*#?$!-])(?:(:?[-=+?])(.*))?", re.S)
_PUNCT = ";&|<>()\n"
_HEREDOC = re.compile(r"<<(-?)[ \t]*(['\"]?)([A-Za-z_0-9]+)\2")
_PAD = "\U000F0000"  # placeholder filler (a private-use character)
_BASE = 0xF0001  # placeholder k is chr(_BASE + k)
_MAX_EXP = 0xFFFD - 1
_KEYWORDS = {"then", "do", "else", "elif", "if", "while", "until", "!", "{", "}", "time"}
_INTERP_OPTS_WITH_VALUE = {"-W", "-X", "-Q"}

# problem kinds (CMP rules report them)
UNKNOWN_VALUE = "compose-value-unknown"


# --- the words of a script ---------------------------------------------------------------------
@dataclass
class Exp:
    """One expansion: its raw text, where it is, and whether it stands inside double quotes."""

    raw: str
    start: int
    kind: str  # var, param, arith, cmd, special
    inner: str
    quoted: bool


@dataclass
class Word:
    text: str | None  # the value the program receives; None when it cannot be known statically
    start: int
    end: int
    file: str
    why: str = ""  # why the value is unknown
    why_at: int = -1  # offset of the expansion that makes it unknown
    hops: list = field(default_factory=list)  # (message, file, offset): where substituted values came from
    raw: str = ""
    t: "Text | None" = None  # the Text it was read from

    def location(self, message: str = "") -> Location:
        if self.t is None:
            return Location(self.file, 0, 0, message=message)
        return self.t.loc(self.start, self.end, message)


class Text:
    """A script's text with line and column lookup."""

    def __init__(self, shown: str, text: str):
        self.shown = shown
        self.text = text
        self.starts = [0] + [i + 1 for i, c in enumerate(text) if c == "\n"]

    def pos(self, offset: int) -> tuple[int, int]:
        import bisect

        i = bisect.bisect_right(self.starts, offset) - 1
        return i + 1, offset - self.starts[i] + 1

    def loc(self, start: int, end: int | None = None, message: str = "", key: str = "") -> Location:
        line, col = self.pos(start)
        eline, ecol = self.pos(end if end is not None else start)
        return Location(self.shown, line, col, eline, ecol, message, key)


def _close(text: str, i: int, open_: str, close: str) -> int:
    """Offset just after the ``close`` matching the ``open_`` before ``i`` (quotes respected)."""
    depth, n = 1, len(text)
    while i < n:
        c = text[i]
        if c == "\\":
            i += 2
            continue
        if c == "'" and open_ != "{":
            j = text.find("'", i + 1)
            i = n if j < 0 else j + 1
            continue
        if c == '"':
            j = i + 1
            while j < n and text[j] != '"':
                j += 2 if text[j] == "\\" else 1
            i = j + 1
            continue
        if c == open_:
            depth += 1
        elif c == close:
            depth -= 1
            if depth == 0:
                return i + 1
        i += 1
    return n


def _expansion(text: str, i: int, quoted: bool) -> Exp | None:
    """The expansion that starts with the ``$`` or backquote at ``i``, or None (a literal ``$``)."""
    n = len(text)
    if text[i] == "`":
        j = i + 1
        while j < n and text[j] != "`":
            j += 2 if text[j] == "\\" else 1
        end = min(j + 1, n)
        return Exp(text[i:end], i, "cmd", text[i + 1:end - 1], quoted)
    nxt = text[i + 1] if i + 1 < n else ""
    if text.startswith("$((", i):
        end = _close(text, i + 3, "(", ")")
        end2 = end + 1 if end < n and text[end] == ")" else end
        return Exp(text[i:end2], i, "arith", text[i + 3:end - 1], quoted)
    if nxt == "(":
        end = _close(text, i + 2, "(", ")")
        return Exp(text[i:end], i, "cmd", text[i + 2:end - 1], quoted)
    if nxt == "{":
        end = _close(text, i + 2, "{", "}")
        return Exp(text[i:end], i, "param", text[i + 2:end - 1], quoted)
    m = _NAME.match(text, i + 1)
    if m:
        return Exp(text[i:m.end()], i, "var", m[0], quoted)
    if nxt and nxt in "0123456789@*#?$!-":
        return Exp(text[i:i + 2], i, "special", nxt, quoted)
    return None


def _mask(text: str) -> tuple[str, list[Exp]]:
    """The text shlex reads: continuations and comments blanked, here-document bodies blanked,
    each expansion replaced by a placeholder of its own length. Offsets are unchanged."""
    out = list(text)
    exps: list[Exp] = []
    n, i, state = len(text), 0, ""
    heredocs: list[tuple[str, bool]] = []
    for k, c in enumerate(text):  # private-use characters of the file itself cannot pose as placeholders
        if c == _PAD or ord(c) >= _BASE:
            out[k] = "\ufffd"

    def blank(a: int, b: int) -> None:
        for k in range(a, b):
            if out[k] != "\n":
                out[k] = " "

    while i < n:
        c = text[i]
        if state == "'":
            if c == "'":
                state = ""
            i += 1
            continue
        if c == "\\":
            if i + 1 < n and text[i + 1] == "\n":
                out[i] = out[i + 1] = " "
            i += 2
            continue
        if state == '"' and c == '"':
            state = ""
            i += 1
            continue
        if c in "$`":
            e = _expansion(text, i, state == '"')
            if e is not None and len(exps) < _MAX_EXP:
                out[i] = chr(_BASE + len(exps))
                for k in range(i + 1, i + len(e.raw)):
                    out[k] = _PAD
                exps.append(e)
                i += len(e.raw)
                continue
            i += 1
            continue
        if state == '"':
            i += 1
            continue
        if c in "'\"":
            state = c
        elif c == "#" and (i == 0 or text[i - 1] in " \t\r\n;&|()<>"):
            j = text.find("\n", i)
            j = n if j < 0 else j
            blank(i, j)
            i = j
            continue
        elif c == "<" and text.startswith("<<", i) and not text.startswith("<<<", i):
            m = _HEREDOC.match(text, i)
            if m:
                heredocs.append((m[3], bool(m[1])))
                i += m.end()
                continue
        elif c == "\n" and heredocs:
            j = i + 1
            for word, strip in heredocs:
                while j < n:
                    stop = text.find("\n", j)
                    stop = n if stop < 0 else stop
                    line = text[j:stop]
                    blank(j, stop)
                    j = stop + 1
                    if (line.lstrip("\t") if strip else line) == word:
                        break
            heredocs = []
            i = j
            continue
        i += 1
    return "".join(out), exps


def _spans(masked: str) -> list[tuple[int, int, bool]]:
    """(start, end, is operator) of each token, in the order shlex yields them."""
    out, i, n = [], 0, len(masked)
    while i < n:
        c = masked[i]
        if c in " \t\r":
            i += 1
            continue
        if c in _PUNCT:
            j = i
            while j < n and masked[j] in _PUNCT:
                j += 1
            out.append((i, j, True))
            i = j
            continue
        j = i
        while j < n and masked[j] not in " \t\r" and masked[j] not in _PUNCT:
            ch = masked[j]
            if ch == "\\":
                j += 2
                continue
            if ch == "'":
                k = masked.find("'", j + 1)
                j = n if k < 0 else k + 1
                continue
            if ch == '"':
                k = j + 1
                while k < n and masked[k] != '"':
                    k += 2 if masked[k] == "\\" else 1
                j = k + 1
                continue
            j += 1
        out.append((i, min(j, n), False))
        i = j
    return out


def tokens(text: str) -> tuple[list[tuple[str, int, int, bool]], list[Exp]]:
    """(token as shlex reads it, start, end, is operator) and the expansions its placeholders stand for.
    Raises ValueError (shlex's message) for an unclosed quote."""
    masked, exps = _mask(text)
    lex = shlex.shlex(masked, posix=True, punctuation_chars=_PUNCT)
    lex.whitespace = " \t\r"
    lex.whitespace_split = True
    lex.commenters = ""
    toks = list(lex)
    spans = _spans(masked)
    if len(toks) != len(spans):  # cannot happen for text shlex accepts; never pair words wrongly
        raise ValueError("the words of the script could not be located")
    return [(t, s, e, op) for t, (s, e, op) in zip(toks, spans)], exps


# --- values ------------------------------------------------------------------------------------
@dataclass
class Var:
    text: str | None
    why: str = ""
    at: tuple = ()  # (file, offset) of the assignment
    exported: bool = False
    hops: list = field(default_factory=list)  # where the values it was built from came from


class _Unknown(Exception):
    def __init__(self, why: str):
        super().__init__(why)
        self.why = why


class State:
    """Variables while the script is read, in order."""

    def __init__(self):
        self.vars: dict[str, Var] = {}
        self.nested = 0  # inside a loop or a branch: assignments there are unknown afterwards
        self.loop_vars: set[str] = set()

    def get(self, name: str) -> Var | None:
        return self.vars.get(name)


def _arith(expr: str, lookup) -> int:
    """Integer arithmetic as the shell does it (64-bit, truncating division); names are variables."""
    expr = expr.strip()
    if len(expr) > 1000:
        raise _Unknown("the arithmetic is too long to evaluate")
    try:
        tree = ast.parse(expr.replace("&&", " and ").replace("||", " or "), mode="eval")
    except SyntaxError:
        raise _Unknown(f"$(({expr})) is arithmetic trimtab does not evaluate") from None

    def ev(node) -> int:
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, int) and not isinstance(node.value, bool):
            return node.value
        if isinstance(node, ast.Name):
            return lookup(node.id)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else v
        if isinstance(node, ast.BinOp):
            a, b = ev(node.left), ev(node.right)
            op = node.op
            if isinstance(op, ast.Add):
                r = a + b
            elif isinstance(op, ast.Sub):
                r = a - b
            elif isinstance(op, ast.Mult):
                r = a * b
            elif isinstance(op, (ast.Div, ast.FloorDiv, ast.Mod)):
                if b == 0:
                    raise _Unknown(f"$(({expr})) divides by zero")
                q = abs(a) // abs(b) * (1 if (a >= 0) == (b >= 0) else -1)  # truncates, as C does
                r = q if not isinstance(op, ast.Mod) else a - q * b
            elif isinstance(op, ast.Pow):
                if b < 0 or b > 63:
                    raise _Unknown(f"$(({expr})) has an exponent trimtab does not compute")
                r = a ** b
            else:
                raise _Unknown(f"$(({expr})) uses an operator trimtab does not evaluate")
            if abs(r) > MAX_INT:
                raise _Unknown(f"$(({expr})) is beyond the shell's 64-bit integers")
            return r
        raise _Unknown(f"$(({expr})) is arithmetic trimtab does not evaluate")

    return ev(tree)


class Reader:
    """Reads one script (and the scripts it sources) into commands and runs."""

    def __init__(self, settings, root: Path, limits):
        self.settings = settings
        self.root = root
        self.limits = limits
        launch = getattr(settings, "launch", None) or {}
        self.programs = launch.get("programs", PROGRAMS)
        self.modules = launch.get("modules", MODULES)
        self.config_flags = set(launch.get("config_flags", CONFIG_FLAGS))
        self.dir_flags = set(launch.get("config_dir_flags", CONFIG_DIR_FLAGS))
        self.name_flags = set(launch.get("config_name_flags", CONFIG_NAME_FLAGS))
        self.source_depth = launch.get("source_depth", SOURCE_DEPTH)
        self.topology: dict[str, str] = {}
        extra = launch.get("topology", {})
        for concept in TOPOLOGY:
            for w in TOPOLOGY[concept] + list(extra.get(concept, [])):
                self.topology[w.lstrip("-").lower().replace("-", "_")] = concept
        self.state = State()
        self.runs: list[LaunchRoot] = []
        self.values = Mapping()  # every value the script writes, for the file rules
        self.problems: list = []
        self.texts: dict[str, Text] = {}
        self.words = 0
        self.sourced: list[str] = []

    # --- expansions ------------------------------------------------------------------------------
    def _var(self, name: str, t: Text, at: int, hops: list) -> str:
        v = self.state.get(name)
        if v is None:
            if name in self.state.loop_vars:
                raise _Unknown(f"${name} is set by a loop")
            raise _Unknown(f"${name} is not set in the script; its value comes from the caller's environment")
        if v.text is None:
            raise _Unknown(v.why)
        hops.extend(h for h in v.hops if h not in hops)
        if v.at:
            hops.append((f"{name}={_short(v.text)} here", v.at[0], v.at[1]))
        return v.text

    def _param(self, e: Exp, t: Text, hops: list) -> str:
        m = _PARAM.fullmatch(e.inner)
        if m is None:
            raise _Unknown(f"{e.raw} is a parameter form trimtab does not evaluate")
        length, name, op, arg = m[1], m[2], m[3], m[4]
        if not _NAME.fullmatch(name):
            raise _Unknown(f"{e.raw} uses the script's own arguments, known only when it is run")
        if length:
            if op:
                raise _Unknown(f"{e.raw} is a parameter form trimtab does not evaluate")
            return str(len(self._var(name, t, e.start, hops)))
        if not op:
            return self._var(name, t, e.start, hops)
        v = self.state.get(name)
        colon = op.startswith(":")
        is_set = v is not None and v.text is not None and (v.text != "" or not colon)
        if v is not None and v.text is None:
            raise _Unknown(v.why)
        kind = op[-1]
        if kind in "-=":
            if v is not None and is_set:
                return self._var(name, t, e.start, hops)
            if v is None and name in self.state.loop_vars:
                raise _Unknown(f"${name} is set by a loop")
            value = self._text(arg, t, e.start, hops)
            if v is None:
                hops.append((f"{name} is not set in the script: read as its default {_short(value)} "
                             f"(the caller's environment can set it)", t.shown, e.start))
            if kind == "=" and self.state.nested == 0:
                self.state.vars[name] = Var(value, at=(t.shown, e.start))
            return value
        if kind == "+":
            if v is None:
                raise _Unknown(f"{e.raw} depends on whether {name} is set in the caller's environment")
            return self._text(arg, t, e.start, hops) if is_set else ""
        if v is None or not is_set:
            raise _Unknown(f"{e.raw}: {name} is not set in the script")
        return self._var(name, t, e.start, hops)

    def _text(self, raw: str, t: Text, at: int, hops: list, depth: int = 0) -> str:
        """A word written inside an expansion (a default, an arithmetic operand): expanded, quotes removed."""
        if depth > 8:
            raise _Unknown("expansions nest too deeply to evaluate")
        out, i, n = [], 0, len(raw)
        quote = ""
        while i < n:
            c = raw[i]
            if quote == "'":
                if c == "'":
                    quote = ""
                else:
                    out.append(c)
                i += 1
                continue
            if c in "'\"":
                if quote == c:
                    quote = ""
                elif not quote:
                    quote = c
                else:
                    out.append(c)
                i += 1
                continue
            if c == "\\" and i + 1 < n:
                out.append(raw[i + 1])
                i += 2
                continue
            if c in "$`":
                e = _expansion(raw, i, bool(quote))
                if e is not None:
                    e.start = at
                    out.append(self._expand(e, t, hops, depth + 1))
                    i += len(e.raw)
                    continue
            out.append(c)
            i += 1
        return "".join(out)

    def _expand(self, e: Exp, t: Text, hops: list, depth: int = 0) -> str:
        if e.kind == "var":
            return self._var(e.inner, t, e.start, hops)
        if e.kind == "param":
            return self._param(e, t, hops)
        if e.kind == "special":
            raise _Unknown(f"{e.raw} is the script's own arguments, known only when it is run")
        if e.kind == "cmd":
            raw = e.raw if len(e.raw) <= 40 else e.raw[:37] + "..."
            raise _Unknown(f"{raw} is a command substitution: its output is known only when the script runs")
        expr = self._text(e.inner, t, e.start, hops, depth + 1)

        def lookup(name: str) -> int:
            text = self._var(name, t, e.start, hops)
            try:
                return int(text.strip() or "0", 0)
            except ValueError:
                return _arith(text, lookup) if depth < 8 else 0

        return str(_arith(expr, lookup))

    def _words(self, tok: str, start: int, end: int, t: Text, exps: list[Exp]) -> list[Word]:
        """The words the program receives for one token: its expansions substituted, and the result of
        an unquoted expansion split at white space (as the shell splits fields)."""
        hops: list = []
        fields: list[list[str]] = [[]]
        why, why_at, split = "", -1, False
        for c in tok:
            if c == _PAD:
                continue
            k = ord(c) - _BASE
            if not 0 <= k < len(exps):
                fields[-1].append(c)
                continue
            try:
                value = self._expand(exps[k], t, hops)
            except _Unknown as exc:
                if not why:
                    why, why_at = exc.why, exps[k].start
                continue
            except (RecursionError, MemoryError, ValueError, OverflowError):
                if not why:
                    why, why_at = f"{exps[k].raw[:40]} is too deep or too large to evaluate", exps[k].start
                continue
            if len(value) > MAX_VALUE:
                why, why_at = "the value is longer than trimtab reads", exps[k].start
                continue
            if exps[k].quoted:
                fields[-1].append(value)
                continue
            split = True  # an unquoted expansion: its value is split into fields at white space
            pieces = re.split(r"[ \t\n]+", value)
            fields[-1].append(pieces[0])
            fields.extend([p] for p in pieces[1:])
        raw = t.text[start:end]
        if why:
            return [Word(None, start, end, t.shown, why, why_at, hops, raw, t)]
        texts = ["".join(f) for f in fields]
        if split:
            texts = [x for x in texts if x]
        return [Word(x, start, end, t.shown, "", -1, list(hops), raw, t) for x in texts]

    # --- reading ------------------------------------------------------------------------------------
    def read(self, path: Path, shown: str, text: str, depth: int = 0) -> None:
        t = Text(shown, text)
        self.texts[shown] = t
        try:
            toks, exps = tokens(text)
        except ValueError as exc:
            self.problems.append((shown, "parse", f"is not a shell script trimtab can read: {exc}", 0))
            return
        self.words += len(toks)
        if self.words > MAX_WORDS:
            self.problems.append((shown, "size", f"has more than {MAX_WORDS} shell words (sourced scripts "
                                                 "included); not read further", 0))
            return
        cmd: list[tuple[str, int, int]] = []
        skip_next = False
        for tok, s, e, op in toks:
            if op:
                if "<" in tok or ">" in tok:
                    if cmd and cmd[-1][2] == s and cmd[-1][0].isdigit():
                        cmd.pop()  # the file descriptor of 2>&1
                    skip_next = True  # the redirection's target is not an argument
                    continue
                self._command(cmd, t, exps, path, depth)
                cmd = []
                continue
            if skip_next:
                skip_next = False
                continue
            cmd.append((tok, s, e))
        self._command(cmd, t, exps, path, depth)

    def _command(self, cmd: list, t: Text, exps: list[Exp], path: Path, depth: int) -> None:
        st = self.state
        while cmd and cmd[0][0] in _KEYWORDS:
            kw = cmd.pop(0)[0]
            if kw in ("then", "do"):
                st.nested += 1
        if not cmd:
            return
        head = cmd[0][0]
        if head in ("fi", "done", "esac"):
            st.nested = max(0, st.nested - 1)
            return
        if head == "case":
            st.nested += 1
            return
        if head == "for":
            if len(cmd) > 1 and _NAME.fullmatch(cmd[1][0]):
                st.loop_vars.add(cmd[1][0])
                st.vars.pop(cmd[1][0], None)
            return
        words, toks = [], []
        for tok, s, e in cmd:
            for w in self._words(tok, s, e, t, exps):
                words.append(w)
                toks.append((tok, s, e))
        cmd = toks
        # leading assignments: the environment of this command, or the script's variables
        assigns = []
        i = 0
        while i < len(words) and _ASSIGN.match(cmd[i][0]) and _ASSIGN.match(words[i].raw):
            assigns.append((cmd[i][0], words[i]))
            i += 1
        rest = words[i:]
        if not rest:
            for tok, w in assigns:
                self._assign(tok, w, t, exported=False)
            return
        name = rest[0].text
        if name in ("export", "readonly", "declare", "typeset", "local"):
            for w, (tok, _s, _e) in zip(rest[1:], cmd[i + 1:]):
                if tok.startswith("-"):
                    continue
                if _ASSIGN.match(tok):
                    self._assign(tok, w, t, exported=name == "export" or name == "declare" and "-x" in tok)
                elif _NAME.fullmatch(tok) and name == "export" and tok in st.vars:
                    st.vars[tok].exported = True
            return
        if name == "unset":
            for w in rest[1:]:
                if w.text and _NAME.fullmatch(w.text):
                    st.vars[w.text] = Var("", at=(t.shown, w.start))
            return
        if name in ("source", ".") and len(rest) > 1:
            self._source(rest[1], t, path, depth)
            return
        env = {}
        for tok, w in assigns:
            m = _ASSIGN.match(tok)
            env[m[1]] = _tail(w, m[0])
            self._record(m[1], env[m[1]], t)
        self._launch(rest, env, t)

    def _assign(self, tok: str, w: Word, t: Text, exported: bool) -> None:
        m = _ASSIGN.match(tok)
        name, append = m[1], m[2]
        w = _tail(w, m[0])
        value = w.text
        st = self.state
        old = st.vars.get(name)
        why = w.why
        if append and value is not None:
            if old is None or old.text is None:
                value, why = None, (old.why if old else f"{name}+= appends to the caller's {name}")
            else:
                value = old.text + value
        if st.nested and value is not None:
            value, why = None, f"{name} is assigned inside a loop or a branch (line {t.pos(w.start)[0]}), so its " \
                               "value depends on how the script runs"
        st.vars[name] = Var(value, why, (t.shown, w.start), exported or bool(old and old.exported), list(w.hops))
        self._record(name, w, t)

    def _record(self, name: str, w: Word, t: Text) -> None:
        """Every value the script writes (``w`` is the value's word), for the file rules (literal
        credentials)."""
        if w.text is None:
            return
        self.values.pairs.append((self._scalar(name, w.file, w.start, w.start, t),
                                  self._scalar(w.text, w.file, w.start, w.end, t)))

    def _scalar(self, text: str, file: str, start: int, end: int, t: Text, cls=None) -> Scalar:
        from .nodes import GivenScalar

        node = (cls or GivenScalar)(text, None, None)
        _locate(node, self.texts.get(file, t), start, end, ())
        return node

    def _source(self, w: Word, t: Text, path: Path, depth: int) -> None:
        from ..load.discover import inside

        if w.text is None:
            self._note(w, t, f"a sourced script is not read: {w.why}")
            return
        if depth >= self.source_depth:
            self._note(w, t, f"{w.text} is not read: scripts source each other deeper than "
                             f"{self.source_depth} levels (setting launch.source_depth)")
            return
        target = Path(w.text)
        candidates = [target] if target.is_absolute() else [path.parent / target, self.root / target]
        found = next((c for c in candidates if c.is_file()), None)
        if found is None:
            self._note(w, t, f"the sourced script {w.text} does not exist in the repository; its variables "
                             "are unknown")
            return
        if not inside(found, self.root):
            loc = t.loc(w.start, w.end)
            self.problems.append((loc, "compose-base-outside",
                                  f"sourced script {w.text!r} is outside the repository; trimtab reads no file "
                                  "outside the repository root", w.text))
            return
        from ..load import loader

        real = found.resolve()
        shown = real.relative_to(self.root).as_posix()
        if shown in self.sourced[-self.source_depth:] and shown == t.shown:
            return
        data, why = loader.read(str(real), self.limits)
        if why or data is None or len(data) > min(self.limits.max_bytes, MAX_SCRIPT):
            self._note(w, t, f"the sourced script {w.text} {why or 'is too large'}; its variables are unknown")
            return
        self.sourced.append(shown)
        self.read(real, shown, data.decode("utf-8", "replace"), depth + 1)

    def _note(self, w: Word, t: Text, message: str, key: str = "", run=None) -> None:
        """A value known only at launch: a note of the run it belongs to (of the script without one)."""
        from .nodes import CompositionProblem

        at = w.why_at if w.why_at >= 0 else w.start
        loc = (w.t or t).loc(at, w.end if w.why_at < 0 else at, key=key)
        if run is None:
            self.problems.append((loc, UNKNOWN_VALUE, message, message))
            return
        run.notes.append(CompositionProblem(UNKNOWN_VALUE, message, loc.line, loc.col, [], loc.path, loc.end_line,
                                            loc.end_col, key, message))

    # --- training commands ---------------------------------------------------------------------
    def _program(self, words: list[Word]) -> tuple[int, str] | None:
        """(index of the program word, how it was recognised) or None."""
        from fnmatch import fnmatchcase

        for i, w in enumerate(words):
            text = w.text or ""
            base = text.rsplit("/", 1)[-1]
            if _INTERP.fullmatch(base):
                j = i + 1
                while j < len(words) and (words[j].text or "").startswith("-"):
                    opt = words[j].text
                    if opt == "-m" and j + 1 < len(words):
                        mod = words[j + 1].text or ""
                        if any(fnmatchcase(mod, p) for p in self.modules):
                            return j + 1, f"python -m {mod}"
                        return None
                    if opt == "-c":
                        return None
                    j += 2 if opt in _INTERP_OPTS_WITH_VALUE else 1
                if j < len(words) and any(fnmatchcase((words[j].text or "").rsplit("/", 1)[-1], p)
                                          or fnmatchcase(words[j].text or "", p) for p in self.programs):
                    return j, words[j].text
                return None
            if text and any(fnmatchcase(base, p) or fnmatchcase(text, p) for p in self.programs):
                return i, text
        for i, w in enumerate(words[:-1]):
            if w.text in ("-m", "--module") and words[i + 1].text and any(
                    fnmatchcase(words[i + 1].text, p) for p in self.modules) and i > 0:
                return i + 1, f"-m {words[i + 1].text}"
        return None

    def _launch(self, words: list[Word], env: dict, t: Text) -> None:
        found = self._program(words)
        if found is None:
            return
        at, what = found
        run = LaunchRoot(t.shown, words[at], what)
        _locate(run, t, words[at].start, words[-1].end, ())
        run.flags = _locate(Mapping(), t, words[at].start, words[at].end, ())
        run.topology = _locate(Mapping(), t, words[0].start, words[0].end, ())
        launcher = words[:at]
        # the launcher: inline environment (``env X=1``) and topology arguments
        for w in launcher:
            m = _ASSIGN.match(w.raw)
            if m:
                env[m[1]] = _tail(w, m[0])
                self._record(m[1], env[m[1]], t)
        visible = None
        for name, v in list(self.state.vars.items()):
            if v.exported and name.endswith("VISIBLE_DEVICES"):
                vt = self.texts.get(v.at[0], t) if v.at else t
                visible = (name, Word(v.text, *(_offset(v, t)), why=v.why, raw=v.text or "", t=vt))
        for name, w in env.items():
            if name.endswith("VISIBLE_DEVICES"):
                visible = (name, w)
        topo: dict[str, tuple[Word, str]] = {}
        for flag, value, _fw in _flags(launcher):
            concept = self.topology.get(flag.lstrip("-").lower().replace("-", "_"))
            if concept is not None and value is not None:
                topo[concept] = (value, flag)
        if visible is not None and "cluster.gpus_per_node" not in topo:
            name, w = visible
            if w.text is None:
                topo["cluster.gpus_per_node"] = (w, name)
            elif w.text.strip():
                count = len([d for d in w.text.split(",") if d.strip()])
                topo["cluster.gpus_per_node"] = (Word(str(count), w.start, w.end, w.file, hops=w.hops,
                                                      raw=w.raw, t=w.t), name)
        for concept, (w, flag) in topo.items():
            leaf = concept.split(".")[1]
            key = f"cluster.{leaf}"
            value = w.text
            if value is not None and not re.fullmatch(r"\s*\d+\s*", value):
                w = Word(None, w.start, w.end, w.file, f"{flag} {value!r} is not one whole number (a range "
                                                       "is settled when the job starts)", w.start, w.hops, w.raw, w.t)
            self._put(run, run.topology, ("cluster", leaf), w, t, key)
        # the program's own arguments
        args = words[at + 1:]
        cfg_dir = cfg_name = None
        i = 0
        while i < len(args):
            w = args[i]
            text = w.text
            if text is None:
                raw = w.raw
                m = _OVERRIDE.fullmatch(raw.strip("'\"")) if not raw.startswith("-") else None
                if m and m[3] is not None and "$" not in m[2]:
                    self._override(run, m[1], m[2], w, t)
                elif raw.startswith("-"):
                    name = raw.split("=", 1)[0]
                    if "=" in raw and not name.startswith("$"):
                        self._flag(run, name, w, t)
                    elif i + 1 < len(args) and not (args[i + 1].raw or "").startswith("-"):
                        i += 1
                else:
                    self._note(w, t, f"an argument of the training command is not known statically ({w.why}); "
                                     "it may change any value of the run", run=run)
                i += 1
                continue
            if text == "--":
                i += 1
                continue
            if text.startswith("-") and not re.fullmatch(r"-\d.*", text):
                name, eq, val = text.partition("=")
                if eq:
                    vw = _tail(w, name + "=")
                elif i + 1 < len(args) and not _flagish(args[i + 1]):
                    vw = args[i + 1]
                    i += 1
                else:
                    vw = None
                if name in self.config_flags or name in self.dir_flags or name in self.name_flags:
                    if vw is None:
                        i += 1
                        continue
                    if name in self.config_flags:
                        run.bases.append(vw)
                    elif name in self.dir_flags:
                        cfg_dir = vw
                    else:
                        cfg_name = vw
                elif vw is None:
                    self._flag_value(run, name, Word("true", w.start, w.end, w.file, raw=w.raw, t=w.t), w, t)
                else:
                    self._flag_value(run, name, vw, w, t)
                i += 1
                continue
            m = _OVERRIDE.fullmatch(text)
            if m and (m[3] is not None or m[1] == "~"):
                self._override(run, m[1], m[2], w, t)
            elif re.search(r"\.(ya?ml|json)$", text, re.I):
                run.bases.append(w)
            i += 1
        if cfg_name is not None:
            run.config_dir = cfg_dir
            run.config_name = cfg_name
        for w in run.bases + [x for x in (cfg_dir, cfg_name) if x is not None]:
            if w.text is None:
                self._note(w, t, f"the config the command names is not known statically ({w.why}); the run is "
                                 "read from the script's own arguments only", run=run)
        self.runs.append(run)

    def _flag(self, run, name: str, w: Word, t: Text) -> None:
        self._flag_value(run, name, _tail(w, name + "="), w, t)

    def _flag_value(self, run: LaunchRoot, name: str, value: Word, flag: Word, t: Text) -> None:
        key = name.lstrip("-")
        if not key or not re.fullmatch(r"[A-Za-z_][\w\-]*(?:\.[\w\-]+)*", key):
            return
        self._record(key, value, t)
        self._put(run, run.flags, tuple(key.split(".")), value, t, key, flag)

    def _override(self, run: LaunchRoot, prefix: str, key: str, w: Word, t: Text) -> None:
        has_value = "=" in (w.text if w.text is not None else w.raw)
        value = _tail(w, (w.text or "").split("=", 1)[0] + "=") if has_value else None
        if "@" in key or "/" in key:
            group, _, pkg = key.partition("@")
            run.choices.append((prefix, group, pkg, value, w))
            return
        parts = tuple(key.split("."))
        if prefix == "~":
            from .nodes import REMOVE_TAG

            node = self._scalar("", w.file, w.start, w.end, t)
            node.tag = REMOVE_TAG
            _insert(run, parts, node, t, w)
            return
        if value is None:
            return
        if len(parts) == 1:
            run.choices.append((prefix, key, "", value, w))  # a config group's option, when one has that name
        self._record(key, value, t)
        self._put(run, run, parts, value, t, key, w)

    def _put(self, run: LaunchRoot, top: Mapping, parts: tuple, value: Word, t: Text, key: str,
             whole: Word | None = None) -> None:
        if value.text is None:
            from .nodes import Unknown

            unknown = self._scalar("", value.file, value.start, value.end, self.texts.get(value.file, t), Unknown)
            assert isinstance(unknown, Unknown)
            unknown.why = value.why
            node: Node = unknown
            self._note(value, self.texts.get(value.file, t), f"{key}: {value.why}; trimtab reads the script without "
                                                             "running it", key, run)
        else:
            node = _value_tree(value, self.texts.get(value.file, t), parts)
        hops = [self.texts.get(f, t).loc(o, message=m) if f in self.texts else Location(f, 0, 0, message=m)
                for m, f, o in value.hops]
        if hops:
            run.hops[parts] = run.hops.get(parts, []) + hops
        _insert(top, parts, node, self.texts.get(value.file, t), whole or value)


# --- helpers -----------------------------------------------------------------------------------------
def _short(text: str) -> str:
    return text if len(text) <= 30 else text[:27] + "..."


def _offset(v: Var, t: Text) -> tuple[int, int, str]:
    return (v.at[1], v.at[1], v.at[0]) if v.at else (0, 0, t.shown)


def _flagish(w: Word) -> bool:
    text = w.text if w.text is not None else w.raw
    return text.startswith("-") and not re.fullmatch(r"-\d.*", text)


def _flags(words: list[Word]):
    """(flag, value word or None, flag word) for the launcher's ``--name value`` / ``--name=value``."""
    i = 0
    while i < len(words):
        w = words[i]
        text = w.text or w.raw
        if text.startswith("-"):
            name, eq, _v = text.partition("=")
            if eq:
                yield name, _tail(w, name + "="), w
            elif i + 1 < len(words) and not _flagish(words[i + 1]):
                yield name, words[i + 1], w
                i += 1
            else:
                yield name, None, w
        i += 1


def _tail(w: Word, prefix: str) -> Word:
    """The part of a word after ``prefix`` (``--lr=`` or ``key=``), located where it is written."""
    text = w.text[len(prefix):] if w.text is not None and w.text.startswith(prefix) else w.text
    eq = w.raw.find("=")
    start = w.start + eq + 1 if eq >= 0 else w.start
    return Word(text, start, w.end, w.file, w.why, w.why_at, w.hops, w.raw[eq + 1:] if eq >= 0 else w.raw, w.t)


N = TypeVar("N", bound=Node)


def _locate(node: N, t: Text, start: int, end: int, path: tuple) -> N:
    node.line, node.col = t.pos(start)
    node.end_line, node.end_col = t.pos(end)
    node.start, node.end = start, end
    node.anchor, node.file, node.path = None, t.shown, path
    return node


def _value_tree(w: Word, t: Text, path: tuple) -> Node:
    """The value the program reads from the text of an argument: YAML 1.2, as for --set."""
    from .nodes import GivenScalar

    text = w.text or ""
    if text.lstrip()[:1] in ("[", "{"):  # a flow list or mapping
        from ..load import loader

        doc = Document(path=t.shown)
        loader.parse_bytes(doc, text.encode("utf-8"), loader.Limits(max_bytes=1 << 16, max_depth=20))
        if doc.roots and doc.readable and len(doc.roots) == 1 and not isinstance(doc.roots[0], Scalar):
            return _relocate(doc.roots[0], w, t, path)
    return _locate(GivenScalar(text, None, None), t, w.start, w.end, path)


def _relocate(node: Node, w: Word, t: Text, path: tuple) -> Node:
    from .nodes import GivenScalar

    if isinstance(node, Scalar):
        return _locate(GivenScalar(node.text, node.style, node.tag), t, w.start, w.end, path)
    if isinstance(node, Sequence):
        seq = _locate(Sequence(), t, w.start, w.end, path)
        seq.items = [_relocate(it, w, t, path + (str(i),)) for i, it in enumerate(node.items)]
        return seq
    assert isinstance(node, Mapping)
    out = _locate(Mapping(), t, w.start, w.end, path)
    for name, _k, v, _via in node.entries():
        out.pairs.append((_locate(GivenScalar(name, None, None), t, w.start, w.end, path),
                          _relocate(v, w, t, path + (name,))))
    return out


def _insert(top: Mapping, parts: tuple, node: Node, t: Text, w: Word) -> None:
    """Put ``node`` at the dotted path under ``top`` (later arguments win)."""
    from .nodes import GivenScalar

    cur = top
    for i, part in enumerate(parts[:-1]):
        nxt = cur.get(part)
        if not isinstance(nxt, Mapping):
            nxt = _locate(Mapping(), t, w.start, w.end, parts[:i + 1])
            _set(cur, _locate(GivenScalar(part, None, None), t, w.start, w.end, parts[:i + 1]), nxt, part)
        cur = nxt
    _set(cur, _locate(GivenScalar(parts[-1], None, None), t, w.start, w.end, parts), node, parts[-1])


def _set(m: Mapping, key: Scalar, value: Node, name: str) -> None:
    m.pairs = [(k, v) for k, v in m.pairs if not (isinstance(k, Scalar) and k.text == name)]
    m.pairs.append((key, value))
    m._index = None


class LaunchRoot(Mapping):
    """One training command of a launch script: its overrides (this mapping), its flags and the
    launcher's topology (layers of their own), the base config it names and its group choices."""

    __slots__ = ("script", "program", "what", "bases", "config_dir", "config_name", "flags", "topology",
                 "choices", "hops", "notes")

    def __init__(self, script: str, program: Word, what: str):
        super().__init__()
        self.script = script
        self.program = program
        self.what = what
        self.bases: list[Word] = []
        self.config_dir: Word | None = None
        self.config_name: Word | None = None
        self.flags = Mapping()
        self.topology = Mapping()
        self.choices: list = []  # (prefix, group, package, value word, whole word)
        self.hops: dict[tuple, list[Location]] = {}
        self.notes: list = []  # CompositionProblems of values known only at launch


def read(path: str, shown: str, settings, data: bytes | None = None) -> Document:
    """A launch script as a Document: ``runs`` (one LaunchRoot per training command) and ``roots``
    (one mapping of every value the script writes). Never raises for what the script contains."""
    from ..load import loader
    from .nodes import CompositionProblem

    limits = settings.limits
    doc = Document(path=shown, fmt="shell")
    doc.runs = []
    if data is None:
        data, why = loader.read(path, limits)
        if why:
            return loader._fail(doc, "io", why)
    if len(data) > min(limits.max_bytes, MAX_SCRIPT):
        return loader._fail(doc, "size", f"is larger than the size limit of {min(limits.max_bytes, MAX_SCRIPT)} "
                                         "bytes for a launch script (setting limits.max_bytes, at most "
                                         f"{MAX_SCRIPT} for scripts)")
    # a script is read leniently: a stray byte in a comment does not make its commands unreadable
    text = data.decode("utf-8", "replace")
    if text.startswith("\ufeff"):
        text = text[1:]
    doc.text = text
    root = Path(settings.root).resolve()
    reader = Reader(settings, root, limits)
    reader.read(Path(path).resolve(), shown, text)
    doc.runs = reader.runs
    doc.roots = [reader.values] if reader.values.pairs else []
    for p in reader.problems:
        where, kind, message, subject = p
        if isinstance(where, str):
            doc.problems.append(CompositionProblem(kind, message, 0, 0, [], where, subject=message))
            continue
        doc.problems.append(CompositionProblem(kind, message, where.line, where.col, [], where.path, where.end_line,
                                               where.end_col, where.key_path, subject))
    from ..common.redact import learn  # every output masks the credentials of every file read (trimtab.common.redact)

    learn(doc)
    return doc
