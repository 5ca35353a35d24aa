"""Static analysis of referenced reward code (an engine service the rules call).

A reward reference (``package.module:function`` or ``path/to/file.py:function``) is resolved
inside the repository's search roots, and the module is read as an abstract syntax tree only:
it is never imported and never run. Local imports are followed to ``import_depth``. The scan
reports calls that run code or processes and calls that deserialise untrusted data, each at its
file (relative to the repository root), line and column.

A reference or an import that would leave the repository (``..``, an absolute path, a symbolic
link pointing out) is refused and reported; its target is never opened.
"""
from __future__ import annotations

import ast
import os
import re
import weakref
from pathlib import Path
from typing import Any

from ..common.record import FrozenRecord, Record
from ..common.paths import confined
from ..common.patterns import later

MAX_BYTES = 2_000_000  # a reward module larger than this is not read
# A reward function named without its module is looked for in every Python file of the search roots,
# within these bounds (files and bytes read); the index is built once per scanner, misses included.
INDEX_FILES = 5_000
INDEX_BYTES = 64_000_000
INDEX_ENTRIES = 100_000  # folders and files looked at (a tree of empty folders is bounded too)
INDEX_SECONDS = 2.0  # wall-clock time for the whole walk
_INDEX_SKIP = frozenset({"__pycache__", "node_modules", "site-packages", "dist-packages"})
# top-level definitions and assignments, found in the bytes before the syntax tree confirms them
_TOP_DEF = later(rb"^(?:async[ \t]+)?def[ \t]+([A-Za-z_]\w*)|^class[ \t]+([A-Za-z_]\w*)|^([A-Za-z_]\w*)[ \t]*[:=]",
                      re.MULTILINE)

# --- detectors -------------------------------------------------------------------------------
# Functions of the os module that replace or start a process (checked against dir(os) in the tests).
OS_RUNNERS = (
    "system", "popen", "startfile",
    "execl", "execle", "execlp", "execlpe", "execv", "execve", "execvp", "execvpe",
    "spawnl", "spawnle", "spawnlp", "spawnlpe", "spawnv", "spawnve", "spawnvp", "spawnvpe",
    "posix_spawn", "posix_spawnp",
)
SUBPROCESS_RUNNERS = ("Popen", "run", "call", "check_call", "check_output", "getoutput", "getstatusoutput")
CTYPES_LOADERS = ("CDLL", "PyDLL", "WinDLL", "OleDLL", "LibraryLoader", "cdll.LoadLibrary",
                  "pydll.LoadLibrary", "windll.LoadLibrary", "oledll.LoadLibrary")

CODE_RUNNERS: dict[str, str] = {
    "exec": "runs a string as Python code",
    "eval": "evaluates a string as Python code",
    "compile": "compiles a string into a code object (to be run by exec/eval)",
    "pty.spawn": "starts a program on a pseudo-terminal",
    "runpy.run_path": "runs a Python file",
    "runpy.run_module": "runs a Python module",
    "asyncio.create_subprocess_exec": "starts a process",
    "asyncio.create_subprocess_shell": "starts a shell command",
    "_ctypes.dlopen": "loads native code",
}
for _n in ("exec", "eval", "compile"):
    CODE_RUNNERS["builtins." + _n] = CODE_RUNNERS[_n]
for _mod in ("os", "posix", "nt"):
    for _n in OS_RUNNERS:
        CODE_RUNNERS[f"{_mod}.{_n}"] = "starts a shell command" if _n in ("system", "popen") else "starts a program"
for _n in SUBPROCESS_RUNNERS:
    CODE_RUNNERS["subprocess." + _n] = "starts a process"
for _n in CTYPES_LOADERS:
    CODE_RUNNERS["ctypes." + _n] = "loads native code"

# Process pools and processes: code-running only when their target runs code.
PROCESS_STARTERS = ("multiprocessing.Process", "multiprocessing.Pool", "multiprocessing.pool.Pool")

DESERIALISERS: dict[str, str] = {
    "pickle.load": "unpickles a file (runs any callable the data names)",
    "pickle.loads": "unpickles bytes (runs any callable the data names)",
    "pickle.Unpickler": "unpickles a stream (runs any callable the data names)",
    "_pickle.load": "unpickles a file", "_pickle.loads": "unpickles bytes",
    "_pickle.Unpickler": "unpickles a stream",
    "marshal.load": "reads marshalled code objects", "marshal.loads": "reads marshalled code objects",
    "shelve.open": "opens a pickle-backed shelf",
    "yaml.unsafe_load": "reads YAML with arbitrary Python object construction",
    "yaml.unsafe_load_all": "reads YAML with arbitrary Python object construction",
    "yaml.full_load": "reads YAML with the full (not the safe) loader",
    "yaml.full_load_all": "reads YAML with the full (not the safe) loader",
}
YAML_LOADS = ("yaml.load", "yaml.load_all")
SAFE_YAML_LOADERS = ("SafeLoader", "CSafeLoader", "BaseLoader", "CBaseLoader")
# A checkpoint loader is recognised by its own keywords, not by its library: a call named ``load``
# that takes ``map_location`` or ``weights_only``.
CHECKPOINT_HINTS = ("map_location", "weights_only")


# --- references ------------------------------------------------------------------------------
_IDENT = r"[A-Za-z_][A-Za-z0-9_]*"
_MODULE_REF = re.compile(rf"^(?P<mod>{_IDENT}(?:\.{_IDENT})*):(?P<fn>{_IDENT}(?:\.{_IDENT})*)$")
_DOTTED = later(rf"^{_IDENT}(?:\.{_IDENT})+$")
_FILE_REF = later(r"^(?P<file>.+?\.py)(?:::?(?P<fn>" + _IDENT + r"(?:\." + _IDENT + r")*))?$")


class Reference(FrozenRecord):
    text: str
    module: str  # dotted module name (a module reference)
    file: str  # file path as written (a file reference)
    function: str  # the name inside the module ("" when not given)
    dotted: bool  # written a.b.c without a colon: the last part may be the function

    def __init__(self, text: str, module: str = "", file: str = "", function: str = "", dotted: bool = False) -> None:
        object.__setattr__(self, "text", text)
        object.__setattr__(self, "module", module)
        object.__setattr__(self, "file", file)
        object.__setattr__(self, "function", function)
        object.__setattr__(self, "dotted", dotted)

    _fields = ("text", "module", "file", "function", "dotted")  # repr, equality and hash (common/record.py)


def parse_reference(text) -> Reference | None:
    """A Python code reference, or None when the text does not look like one."""
    if not isinstance(text, str):
        return None
    t = text.strip()
    m = _MODULE_REF.match(t)
    if m:
        return Reference(t, module=m["mod"], function=m["fn"])
    m = _FILE_REF.match(t)
    if m and "\n" not in t:
        return Reference(t, file=m["file"], function=m["fn"] or "")
    if _DOTTED.match(t):
        mod, _, fn = t.rpartition(".")
        return Reference(t, module=mod, function=fn, dotted=True)
    return None


def looks_like_code(text) -> bool:
    return parse_reference(text) is not None


_NAME = later(rf"^{_IDENT}$")


def function_name(text) -> str:
    """A bare identifier (``accuracy``, ``format_ok``): a reward function named without its module,
    as trainers with a registry of reward functions take them. '' when ``text`` is not one."""
    if not isinstance(text, str):
        return ""
    t = text.strip()
    return t if _NAME.match(t) else ""


# --- results ---------------------------------------------------------------------------------
class Hit(FrozenRecord):
    category: str  # "exec" or "deser"
    what: str  # qualified name of the call
    why: str
    path: str  # module file, relative to the repository root
    line: int
    col: int
    via: tuple[str, ...]  # import chain from the referenced module

    def __init__(
            self, category: str, what: str, why: str, path: str, line: int, col: int, via: tuple[str, ...] = ()
    ) -> None:
        object.__setattr__(self, "category", category)
        object.__setattr__(self, "what", what)
        object.__setattr__(self, "why", why)
        object.__setattr__(self, "path", path)
        object.__setattr__(self, "line", line)
        object.__setattr__(self, "col", col)
        object.__setattr__(self, "via", via)

    # repr, equality and hash (common/record.py)
    _fields = (
        "category", "what", "why", "path", "line", "col", "via",
    )


class Refusal(FrozenRecord):
    """A reference or import that leaves the repository; its target was not read."""

    text: str
    reason: str
    path: str  # the module that imports it ("" for the reference itself)
    line: int
    col: int

    def __init__(self, text: str, reason: str, path: str = "", line: int = 0, col: int = 0) -> None:
        object.__setattr__(self, "text", text)
        object.__setattr__(self, "reason", reason)
        object.__setattr__(self, "path", path)
        object.__setattr__(self, "line", line)
        object.__setattr__(self, "col", col)

    _fields = ("text", "reason", "path", "line", "col")  # repr, equality and hash (common/record.py)


class Located(Record):
    status: str  # ok, no-module, no-function, escapes, unreadable, syntax, bad-root
    ref: Reference
    path: str  # module file relative to the repository root
    real: Path | None
    tried: list[str]
    reason: str
    line: int  # of the function's definition (ok) or of a syntax error
    col: int

    def __init__(
            self, status: str, ref: Reference, path: str = "", real: Path | None = None,
            tried: list[str] | None = None, reason: str = "", line: int = 0, col: int = 0
    ) -> None:
        self.status = status
        self.ref = ref
        self.path = path
        self.real = real
        self.tried = [] if tried is None else tried
        self.reason = reason
        self.line = line
        self.col = col

    # repr, equality (common/record.py)
    _fields = (
        "status", "ref", "path", "real", "tried", "reason", "line", "col",
    )


class Scan(Record):
    hits: list[Hit]
    refusals: list[Refusal]
    unreadable: list[tuple[str, str]]  # (path, reason)
    modules: list[str]

    def __init__(
            self, hits: list[Hit] | None = None, refusals: list[Refusal] | None = None,
            unreadable: list[tuple[str, str]] | None = None, modules: list[str] | None = None
    ) -> None:
        self.hits = [] if hits is None else hits
        self.refusals = [] if refusals is None else refusals
        self.unreadable = [] if unreadable is None else unreadable
        self.modules = [] if modules is None else modules

    _fields = ("hits", "refusals", "unreadable", "modules")  # repr, equality (common/record.py)


class ModuleInfo(Record):
    path: str
    error: str
    error_line: int
    error_col: int
    names: dict[str, tuple[int, int]]  # top-level names -> (line, col)
    hits: list[Hit]
    imports: list[tuple[int, str, tuple[str, ...], int, int]]

    def __init__(
            self, path: str, error: str = "", error_line: int = 0, error_col: int = 0,
            names: dict[str, tuple[int, int]] | None = None, hits: list[Hit] | None = None,
            imports: list[tuple[int, str, tuple[str, ...], int, int]] | None = None
    ) -> None:
        self.path = path
        self.error = error
        self.error_line = error_line
        self.error_col = error_col
        self.names = {} if names is None else names
        self.hits = [] if hits is None else hits
        self.imports = [] if imports is None else imports

    # repr, equality (common/record.py)
    _fields = (
        "path", "error", "error_line", "error_col", "names", "hits", "imports",
    )
    # (level, module, imported names, line, col)


class Scanner:
    """Resolves references and scans modules; one per (root, search roots, depth), cached."""

    def __init__(self, root, search_roots=(".",), import_depth: int = 2):
        self.root = Path(os.path.realpath(root))
        self.import_depth = max(0, int(import_depth))
        self.roots: list[Path] = []
        self.root_names: list[str] = []
        self.bad_roots: list[tuple[str, str]] = []
        for text in search_roots or (".",):
            reason = _escape_reason(text)
            if reason:
                self.bad_roots.append((text, reason))
                continue
            real = confined(self.root / text, self.root)
            if real is None:
                self.bad_roots.append((text, "resolves outside the repository (through a symbolic link)"))
                continue
            self.roots.append(real)
            self.root_names.append(self._rel(real) or ".")
        # caches, per module path, checked against the file's size and modification time
        self._modules: dict[Path, tuple[tuple, ModuleInfo]] = {}
        self._scans: dict[Path, tuple[list, Scan]] = {}
        self._located: dict[Reference, tuple[tuple, Located]] = {}
        self._index: dict[str, list[Path]] | None = None
        self.index_cut = ""  # why the name index stopped early ("" when it read every file)
        # perf: the folders a missing reference was looked for in (they depend on the roots only)
        self._miss_folders: dict[Reference, list[Path]] = {}
        # the signatures taken during the check of one run (see ``hold``), files and folders apart
        self._held: Any = None
        self._files: dict[Path, tuple] | None = None
        self._folders: dict[Path, tuple] = {}

    def hold(self, run) -> None:
        """Take each file's and folder's signature at most once while the run checked is ``run``
        (a run model; until another one is held, or it is no longer in use): a reward module
        changed between the checks of two runs is read again, one changed during the check of a
        run is not. None: every call looks again (the default).

        perf: the REW, EXE and SEC rules ask about a run's reward modules again and again, each
        asking the file system for a signature (~9,000 stats on the 2,000-file benchmark corpus,
        ~3,900 once per run)."""
        if run is None:
            self._held, self._files = None, None
        elif self._held is None or self._held() is not run:
            self._held, self._files, self._folders = weakref.ref(run), {}, {}

    def _signature(self, real: Path) -> tuple:
        files = self._files
        if files is None or self._held() is None:  # nothing held, or its check is over
            return _signature(real)
        sig = files.get(real)
        if sig is None:
            sig = files[real] = _signature(real)
        return sig

    def _folder_signature(self, folder: Path) -> tuple:
        if self._files is None or self._held() is None:
            return _folder_signature(folder)
        sig = self._folders.get(folder)
        if sig is None:
            sig = self._folders[folder] = _folder_signature(folder)
        return sig

    # -- locating ---------------------------------------------------------------------------
    def _rel(self, real: Path) -> str:
        try:
            rel = real.relative_to(self.root).as_posix()
        except ValueError:  # pragma: no cover - callers check first
            return ""
        return "" if rel == "." else rel

    def _candidates(self, ref: Reference, module: str | None = None) -> list[tuple[Path, str]]:
        """(lexical candidate path, shown path) in search-root order."""
        out = []
        for base in self.roots:
            if module is not None or ref.module:
                parts = (module if module is not None else ref.module).split(".")
                for p in (base.joinpath(*parts[:-1], parts[-1] + ".py"), base.joinpath(*parts, "__init__.py")):
                    out.append(p)
            else:
                out.append(base / ref.file)
        return [(p, self._shown(p)) for p in out]

    def _shown(self, lexical: Path) -> str:
        try:
            return lexical.relative_to(self.root).as_posix()
        except ValueError:
            return lexical.as_posix()

    def _find(self, candidates) -> tuple[str, Path | None, str, list[str]]:
        """(status, real path, shown path, tried) for the first candidate that exists."""
        tried = []
        for lexical, shown in candidates:
            tried.append(shown)
            real = confined(lexical, self.root)
            if real is None:
                if os.path.lexists(lexical) or _has_link(lexical, self.root):
                    return "escapes", None, shown, tried
                continue
            if real.is_file():
                return "ok", real, self._rel(real), tried
        return "missing", None, "", tried

    def locate(self, ref: Reference) -> Located:
        """Where a reference leads, cached for the process: a found module while its file is
        unchanged, a missing one (misses cost as much to look for as hits) while every folder it
        was looked for in is unchanged (a file added there changes the folder)."""
        hit = self._located.get(ref)
        if hit is not None and hit[0] == self._sign(hit[1], ref):  # its file, or the folders of a miss
            return hit[1]
        found = self._locate(ref)
        if found.real is not None or found.status in ("no-module", "bad-root"):
            self._located[ref] = (self._sign(found, ref), found)
        return found

    def _sign(self, found: Located, ref: Reference) -> tuple:
        if found.real is not None:
            return self._signature(found.real)
        # a miss: the folders of every candidate looked at (both readings of a dotted name)
        folders = self._miss_folders.get(ref)
        if folders is None:
            refs = [ref, Reference(ref.text, module=ref.text, dotted=True)] if ref.dotted else [ref]
            folders = self._miss_folders[ref] = sorted({p.parent for r in refs for p, _shown in self._candidates(r)})
        return ("missing",) + tuple(self._folder_signature(f) for f in folders)

    def _locate(self, ref: Reference) -> Located:
        if not self.roots:
            return Located("bad-root", ref, reason="no usable search root inside the repository")
        if ref.file:
            reason = _escape_reason(ref.file)
            if reason:
                return Located("escapes", ref, reason=reason)
        status, real, shown, tried = self._find(self._candidates(ref))
        ref_used = ref
        if status == "missing" and ref.dotted:
            # a.b.c written without a colon may name a module rather than a function
            alt = Reference(ref.text, module=ref.text, dotted=True)
            status2, real2, shown2, tried2 = self._find(self._candidates(alt))
            tried += [t for t in tried2 if t not in tried]
            if status2 != "missing":
                status, real, shown, ref_used = status2, real2, shown2, alt
        if status == "escapes":
            return Located("escapes", ref, path=shown, tried=tried,
                           reason=f"{shown} resolves outside the repository (through a symbolic link)")
        if status == "missing":
            return Located("no-module", ref, tried=tried)
        info = self.module(real)
        if info.error:
            return Located("syntax" if info.error_line else "unreadable", ref_used, shown, real, tried, info.error,
                           info.error_line, info.error_col)
        if ref_used.function:
            top = ref_used.function.split(".")[0]
            pos = info.names.get(top)
            if pos is None:
                return Located("no-function", ref_used, shown, real, tried)
            return Located("ok", ref_used, shown, real, tried, line=pos[0], col=pos[1])
        return Located("ok", ref_used, shown, real, tried)

    def find_name(self, name: str) -> Located:
        """A reward function named without its module: the first module of the search roots (in
        root order, then path order) that defines ``name`` at its top level. ``no-function`` when
        none does (``reason`` says when the search was cut short by its bounds)."""
        ref = Reference(name, function=name)
        if not self.roots:
            return Located("bad-root", ref, reason="no usable search root inside the repository")
        for real in self._name_index().get(name, ()):
            if self._signature(real) == ():
                continue
            info = self.module(real)
            pos = info.names.get(name)
            if not info.error and pos is not None:
                module = info.path.removesuffix(".py").removesuffix("/__init__").replace("/", ".")
                return Located("ok", Reference(name, module=module, function=name), info.path, real,
                               line=pos[0], col=pos[1])
        return Located("no-function", ref, reason=self.index_cut)

    def _name_index(self) -> dict[str, list[Path]]:
        """Top-level name -> module files defining it, over the search roots (built once; bounded by
        INDEX_FILES and INDEX_BYTES; links and hidden folders are not followed)."""
        if self._index is not None:
            return self._index
        import time

        index: dict[str, list[Path]] = {}
        files = size = entries = 0
        until = time.monotonic() + INDEX_SECONDS
        for base in self.roots:
            for top, dirs, names in os.walk(base, followlinks=False):
                # hidden folders, caches and installed packages are not reward code; another file
                # system mounted below the repository (/proc under a root of /) is not walked
                dirs[:] = sorted(d for d in dirs if not d.startswith(".") and d not in _INDEX_SKIP
                                 and not os.path.ismount(os.path.join(top, d)))
                entries += len(dirs) + len(names)
                if entries > INDEX_ENTRIES or time.monotonic() > until:
                    self.index_cut = (f"the search stopped after {entries} entries and {files} Python files, "
                                      "trimtab's bound")
                    self._index = index
                    return index
                for fname in sorted(names):
                    if not fname.endswith(".py"):
                        continue
                    if files >= INDEX_FILES or size >= INDEX_BYTES:
                        self.index_cut = (f"the search stopped after {files} Python files ({size} bytes), "
                                          "trimtab's bound")
                        self._index = index
                        return index
                    path = Path(top) / fname
                    real = confined(path, self.root)
                    if real is None or path.is_symlink() or not real.is_file():
                        continue
                    try:
                        fd = os.open(real, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0))
                        with os.fdopen(fd, "rb") as fh:
                            data = fh.read(MAX_BYTES + 1)
                    except OSError:
                        continue
                    files += 1
                    size += len(data)
                    if len(data) > MAX_BYTES:
                        continue
                    for m in _TOP_DEF.finditer(data):
                        found = (m.group(1) or m.group(2) or m.group(3)).decode("ascii")
                        at = index.setdefault(found, [])
                        if not at or at[-1] != real:
                            at.append(real)
        self._index = index
        return index

    # -- reading ----------------------------------------------------------------------------
    def module(self, real: Path) -> ModuleInfo:
        """The summary of one module file (cached per path). ``real`` is inside the repository."""
        sig = self._signature(real)
        cached = self._modules.get(real)
        if cached is not None and cached[0] == sig:
            return cached[1]
        info = _summarise(real, self._rel(real))
        self._modules[real] = (sig, info)
        return info

    def scan(self, located: Located) -> Scan:
        """Hits in the located module and in the local modules it imports, to import_depth."""
        if located.status != "ok" or located.real is None:
            return Scan()
        cached = self._scans.get(located.real)
        if cached is not None and all(self._signature(p) == sig for p, sig in cached[0]):
            return cached[1]
        out = Scan()
        seen = {located.real}
        queue: list[tuple[Path, int, tuple]] = [(located.real, 0, ())]
        while queue:
            real, depth, chain = queue.pop(0)
            info = self.module(real)
            out.modules.append(info.path)
            if info.error:
                out.unreadable.append((info.path, info.error))
                continue
            out.hits.extend(Hit(h.category, h.what, h.why, h.path, h.line, h.col, chain) for h in info.hits)
            if depth >= self.import_depth:
                continue
            for level, mod, names, line, col in info.imports:
                for target, text in self._import_targets(real, level, mod, names):
                    status, found, shown, _tried = target
                    if status == "escapes":
                        out.refusals.append(Refusal(text, f"{shown} resolves outside the repository "
                                                          "(through a symbolic link)", info.path, line, col))
                    elif status == "refused":
                        out.refusals.append(Refusal(text, shown, info.path, line, col))
                    elif status == "ok" and found not in seen:
                        seen.add(found)
                        queue.append((found, depth + 1, chain + (info.path,)))
        self._scans[located.real] = ([(p, self._modules[p][0]) for p in seen if p in self._modules], out)
        return out

    def _import_targets(self, real: Path, level: int, mod: str, names: tuple[str, ...]):
        text = "." * level + mod
        if level:
            base = real.parent
            for _ in range(level - 1):
                base = base.parent
            if confined(base, self.root) is None:
                yield ("refused", None, "a relative import above the repository root", []), text
                return
            bases = [base]
            modules = [mod] if mod else []
        else:
            bases = None
            modules = [mod]
        wanted = [m for m in modules if m]
        wanted += [f"{mod}.{n}" if mod else n for n in names if n != "*"]
        for m in wanted:
            parts = m.split(".")
            if bases is None:
                cands = self._candidates(Reference(m, module=m), m)
            else:
                cands = []
                for b in bases:
                    for p in (b.joinpath(*parts[:-1], parts[-1] + ".py"), b.joinpath(*parts, "__init__.py")):
                        cands.append((p, self._shown(p)))
            found = self._find(cands)
            if found[0] in ("ok", "escapes"):
                yield found, text if m == mod else f"{text} ({m.rsplit('.', 1)[-1]})"


# --- helpers ---------------------------------------------------------------------------------
def _escape_reason(text: str) -> str:
    """Why a path as written leaves the repository, or ''. Decided on the text alone."""
    t = text.replace("\\", "/")
    if t.startswith(("/", "~")) or re.match(r"^[A-Za-z]:/", t) or os.path.isabs(text):
        return "is an absolute path (outside the repository's search roots)"
    if ".." in t.split("/"):
        return "contains '..' (leaves the search root)"
    return ""


def _signature(real: Path) -> tuple:
    try:
        st = os.stat(real)
    except OSError:
        return ()
    return (st.st_size, st.st_mtime_ns, st.st_ino)


def _folder_signature(folder: Path) -> tuple:
    """A folder's identity and modification time (a name added or removed in it changes it)."""
    try:
        st = os.stat(folder)
    except OSError:
        return ()
    return (st.st_ino, st.st_mtime_ns, st.st_mode)


def _has_link(lexical: Path, root: Path) -> bool:
    """A symbolic link on the way from the root to ``lexical`` (checked with lstat only)."""
    p = lexical
    while p != root and root in p.parents:
        if p.is_symlink():
            return True
        p = p.parent
    return False


def _summarise(real: Path, rel: str) -> ModuleInfo:
    info = ModuleInfo(rel)
    try:
        # the path was checked to lie inside the repository; O_NOFOLLOW refuses a link swapped in since
        fd = os.open(real, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            data = fh.read(MAX_BYTES + 1)
    except OSError as exc:
        info.error = f"cannot be read ({exc.strerror or type(exc).__name__})"
        return info
    if len(data) > MAX_BYTES:
        info.error = f"is larger than {MAX_BYTES} bytes; not read"
        return info
    try:
        tree = ast.parse(data, filename=rel)
    except SyntaxError as exc:
        info.error = f"does not parse as Python ({exc.msg})"
        info.error_line, info.error_col = exc.lineno or 0, exc.offset or 0
        return info
    except (ValueError, UnicodeDecodeError) as exc:
        info.error = f"is not Python source ({type(exc).__name__})"
        return info
    except (RecursionError, MemoryError) as exc:
        # 200,000 chained attributes, a sum of 300,000 terms: Python's parser gives up
        info.error = f"nests too deeply for Python's parser to read ({type(exc).__name__}); not scanned"
        return info
    lines = data.decode("utf-8", "replace").splitlines()
    try:
        _Visitor(info, lines).run(tree)
    except RecursionError:
        info.error = "nests too deeply to scan (RecursionError); not scanned"
        info.hits.clear()
    return info


class _Visitor:
    def __init__(self, info: ModuleInfo, lines: list[str]):
        self.info = info
        self.lines = lines
        self.aliases: dict[str, str] = {}
        self.stars: list[str] = []
        self.local_runs: dict[str, bool] = {}  # top-level function -> it calls a code runner

    def col(self, node) -> int:
        """1-based character column (ast gives a 0-based UTF-8 byte offset)."""
        line = self.lines[node.lineno - 1] if 0 < node.lineno <= len(self.lines) else ""
        return len(line.encode("utf-8")[:node.col_offset].decode("utf-8", "ignore")) + 1

    def run(self, tree: ast.Module) -> None:
        for stmt in tree.body:
            self._top_level(stmt)
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                for a in node.names:
                    if a.asname:
                        self.aliases[a.asname] = a.name
                    else:
                        self.aliases.setdefault(a.name.split(".")[0], a.name.split(".")[0])
                    self.info.imports.append((0, a.name, (), node.lineno, self.col(node)))
            elif isinstance(node, ast.ImportFrom):
                mod = node.module or ""
                for a in node.names:
                    if a.name == "*":
                        if not node.level:
                            self.stars.append(mod)
                        continue
                    if not node.level:
                        self.aliases[a.asname or a.name] = f"{mod}.{a.name}"
                self.info.imports.append((node.level, mod, tuple(a.name for a in node.names), node.lineno,
                                          self.col(node)))
        for fn in [n for n in tree.body if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]:
            self.local_runs[fn.name] = any(isinstance(c, ast.Call) and self._runner(c) for c in ast.walk(fn))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call):
                self._call(node)

    def _top_level(self, node) -> None:
        names = self.info.names
        pos = (node.lineno, self.col(node))
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.setdefault(node.name, pos)
        elif isinstance(node, (ast.Assign, ast.AnnAssign, ast.AugAssign)):
            targets = node.targets if isinstance(node, ast.Assign) else [node.target]
            for t in targets:
                for n in ast.walk(t):
                    if isinstance(n, ast.Name):
                        names.setdefault(n.id, pos)
        elif isinstance(node, (ast.Import, ast.ImportFrom)):
            for a in node.names:
                if a.name != "*":
                    names.setdefault(a.asname or a.name.split(".")[0], pos)
        elif isinstance(node, (ast.If, ast.Try)) or type(node).__name__ == "TryStar":
            for child in ast.iter_child_nodes(node):
                if isinstance(child, ast.stmt):
                    self._top_level(child)
                elif isinstance(child, ast.ExceptHandler):
                    for s in child.body:
                        self._top_level(s)

    def qualname(self, expr) -> str:
        attrs = []  # a chain of attributes is walked, not recursed into (it can be very long)
        while isinstance(expr, ast.Attribute):
            attrs.append(expr.attr)
            expr = expr.value
        if not isinstance(expr, ast.Name):
            return ""
        base = self._name(expr.id)
        return ".".join([base, *reversed(attrs)]) if base else ""

    def _name(self, name: str) -> str:
        if name in self.aliases:
            return self.aliases[name]
        if name in self.info.names:
            return "<local>." + name
        for star in self.stars:
            q = f"{star}.{name}"
            if q in CODE_RUNNERS or q in DESERIALISERS:
                return q
        return name

    def _runner(self, call: ast.Call) -> str:
        q = self.qualname(call.func)
        return q if q in CODE_RUNNERS else ""

    def _hit(self, category, what, why, node) -> None:
        self.info.hits.append(Hit(category, what, why, self.info.path, node.lineno, self.col(node)))

    def _call(self, call: ast.Call) -> None:
        q = self.qualname(call.func)
        if q in CODE_RUNNERS:
            self._hit("exec", q, CODE_RUNNERS[q], call)
            return
        if q in PROCESS_STARTERS or q.endswith((".Process", ".Pool")) and q.startswith("multiprocessing."):
            target = _kw(call, "target")
            if target is None and call.args and q.endswith("Process"):
                target = call.args[1] if len(call.args) > 1 else None
            tq = self.qualname(target) if target is not None else ""
            if tq in CODE_RUNNERS or tq.startswith("<local>.") and self.local_runs.get(tq[8:]):
                self._hit("exec", q, f"starts a process whose target runs code ({tq.replace('<local>.', '')})",
                          call)
            return
        if q in DESERIALISERS:
            self._hit("deser", q, DESERIALISERS[q], call)
            return
        if q in YAML_LOADS:
            loader = _kw(call, "Loader")
            if loader is None and len(call.args) > 1:
                loader = call.args[1]
            lq = self.qualname(loader) if loader is not None else ""
            if not lq or lq.rsplit(".", 1)[-1] not in SAFE_YAML_LOADERS:
                self._hit("deser", q, "reads YAML without a safe loader" if not lq else
                          f"reads YAML with {lq.rsplit('.', 1)[-1]}, not a safe loader", call)
            return
        last = q.rsplit(".", 1)[-1] if q else (call.func.attr if isinstance(call.func, ast.Attribute) else "")
        if last == "load" and any(k.arg in CHECKPOINT_HINTS for k in call.keywords):
            wo = _kw(call, "weights_only")
            if not (isinstance(wo, ast.Constant) and wo.value is True):
                self._hit("deser", q or "load", "loads a checkpoint without weights_only=True "
                                                "(a pickle inside may run code)", call)
            return
        for arg in list(call.args) + [k.value for k in call.keywords]:
            if isinstance(arg, (ast.Name, ast.Attribute)):
                aq = self.qualname(arg)
                if aq in CODE_RUNNERS:
                    self._hit("exec", aq, f"is passed to {q or 'a call'} ({CODE_RUNNERS[aq]})", call)
                    return
        ap = _kw(call, "allow_pickle")
        if isinstance(ap, ast.Constant) and ap.value is True:
            self._hit("deser", q or "call", "reads data with allow_pickle=True", call)


def _kw(call: ast.Call, name: str):
    for k in call.keywords:
        if k.arg == name:
            return k.value
    return None


# --- one scanner per settings ------------------------------------------------------------------
_SCANNERS: dict[tuple, Scanner] = {}


def scanner(settings) -> Scanner:
    """The scanner for these settings (root, search_roots, import_depth), cached for the process."""
    root = getattr(settings, "root", None) or Path.cwd()
    roots = tuple(getattr(settings, "search_roots", None) or (".",))
    depth = getattr(settings, "import_depth", 2)
    key = (str(root), roots, depth)
    s = _SCANNERS.get(key)
    if s is None:
        s = _SCANNERS[key] = Scanner(root, roots, depth)
    return s


def clear_cache() -> None:
    _SCANNERS.clear()
