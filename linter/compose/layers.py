"""Compose: one document's tree -> the run as it will launch (bases, interpolation, overrides).

Layers, in the order they apply (later wins):

1. the **bases** of the file: those the settings' ``layers`` give for a glob the file matches (paths
   relative to the repository root), then those the file names itself under the settings'
   ``bases_key`` (a path or a list of paths, relative to the naming file). A base may name bases of
   its own under ``bases_key``; they apply before it.
2. the file itself (the "experiment");
3. the settings' ``overrides`` file;
4. ``--set key.path=value`` on the command line, typed as YAML 1.2 types the value.

Mappings merge key by key; sequences and scalars are replaced whole. A value tagged
``!trimtab/remove`` removes the key from the layers below. Then ``${dotted.path}`` references are
resolved against the composed run (``$${`` writes a literal ``${``).

The composed root is a tree whose leaves are the ORIGINAL nodes of the file where each value was
written (``Node.file`` names it), so every finding points at the right file and line. The root
carries ``chains``: for each dotted key path, the other places the value passed through (the
layers it replaced, the references that brought it, with messages); the resolver copies them into
``Value.chain``. Problems (cycles, unknown targets, missing bases ...) are recorded on the checked
Document as ``CompositionProblem``s; the CMP rules report them. The composer knows no rule.
"""
from __future__ import annotations

from reprlib import recursive_repr
import os
import re
import sys
from pathlib import Path
from typing import Any, TypeVar, cast

from ..load import loader
from .nodes import (REMOVE_TAG, Composed, ComposedMapping, CompositionProblem, GivenScalar,
                       Unknown, Unresolved)
from ..load.document import Document, Mapping, Node, Scalar, Sequence
from ..common.findings import Location
from ..common.paths import confined, sha256_hex
from ..load.discover import matches
from ..common.patterns import later
from ..common.record import Record


# problem kinds (the CMP rules read them)
CYCLE = "compose-cycle"
UNKNOWN = "compose-unknown"
BASE_MISSING = "compose-base-missing"
BASE_CYCLE = "compose-base-cycle"
BASE_OUTSIDE = "compose-base-outside"
OVERRIDE = "compose-override"
MALFORMED = "compose-malformed"
OVERRIDE_NEW = "compose-override-new"
EXPANSION = "compose-expansion"
OPTIONAL_MISSING = "compose-optional-missing"
VALUE_UNKNOWN = "compose-value-unknown"  # a value known only at launch (a script, a resolver)


_REF = later(r"\$\$\{|\$\{([^{}$]*)\}")
_WHOLE = later(r"\$\{([^{}$]*)\}")
_PATH = later(r"[A-Za-z0-9_\-]+(?:\.[A-Za-z0-9_\-]+)*")
_RESOLVER = later(r"([A-Za-z_][\w.\-]*)\s*:(.*)", re.S)  # ${name:args}
_ENV = later(r"[A-Z_][A-Z0-9_]*")  # ${HOME}: an environment variable, not a key of the run
_MAX_DEPTH = 64
# Bounds on what references may build in one run (a file of a few lines can otherwise ask for an
# exponential amount: ``a: ${b}${b}``, ``b: ${c}${c}`` ... doubles the text at each level, and
# sections that refer to sections double the tree). Past a bound the reference stays unresolved
# and CMP-9 reports it.
MAX_EXPANDED_TEXT = 1_000_000  # characters of text written by references, in all
MAX_COPIED_VALUES = 10_000  # keys and items copied from sections reached through references


# --- base files: loaded once per process -------------------------------------------------------
_DOCS: dict[str, tuple] = {}
LOADS = {"count": 0}  # how many base files were read from disk (tests watch the cache with it)


def load_source(real: Path, shown: str, limits=loader.Limits()) -> Document:
    """A base or overrides file, from the per-process cache while it is unchanged on disk."""
    try:
        st = real.stat()
        stamp = (st.st_mtime_ns, st.st_size)
    except OSError:
        stamp = None
    key = str(real)
    hit = _DOCS.get(key)
    if hit is not None and hit[0] == stamp and hit[1].path == shown and stamp is not None:
        doc = hit[1]
    else:
        LOADS["count"] += 1
        doc = loader.load(key, shown, limits)
        _DOCS[key] = (stamp, doc)
    return doc


_N = TypeVar("_N", bound=Node)


def _launch_root(node: Node) -> bool:
    """Is this run a launch script's training command (shell.LaunchRoot)? Such a node exists only
    once the shell reader is imported: a check of configs alone never imports it (start-up)."""
    shell = sys.modules.get(__package__ + ".shell")
    return shell is not None and isinstance(node, shell.LaunchRoot)


def _place(dst: _N, src: Node | None, path: tuple) -> _N:
    if src is None:
        dst.line = dst.col = dst.end_line = dst.end_col = dst.start = dst.end = 0
        dst.anchor, dst.file = None, None
    else:
        dst.line, dst.col, dst.end_line, dst.end_col = src.line, src.col, src.end_line, src.end_col
        dst.start, dst.end, dst.anchor, dst.file = src.start, src.end, src.anchor, src.file
    dst.path = path
    return dst


def _show(node: Node) -> str:
    if isinstance(node, Scalar):
        text = node.text if node.plain else repr(node.text)
        return text if len(text) <= 40 else text[:37] + "..."
    return "a list" if isinstance(node, Sequence) else "a section"


def _without(root: Mapping, names: set) -> Mapping:
    """The mapping without the entries named (the original nodes kept)."""
    out = _place(Mapping(), root, tuple(root.path or ()))
    out.pairs = [(k, v) for k, v in root.pairs if not (isinstance(k, Scalar) and k.text in names)]
    out.merged = list(root.merged)
    return out


def _under(root: Mapping, package: tuple) -> Mapping:
    """The mapping placed under the dotted package of a defaults entry."""
    for part in reversed(package):
        outer = _place(Mapping(), root, ())
        outer.pairs = [(_place(GivenScalar(part, None, None), root, ()), root)]
        root = outer
    return root


_PACKAGE = later(r"#\s*@package\s+([\w.]+)")


def _package_header(text: str) -> str:
    """The package a config file declares for itself in a leading ``# @package NAME`` comment."""
    for line in text.splitlines()[:10]:
        if not line.strip():
            continue
        if not line.lstrip().startswith("#"):
            return ""
        m = _PACKAGE.match(line.strip())
        if m:
            return m[1]
    return ""


def _entry(item: Node):
    """One entry of a defaults list: "_self_", or a dict (group, option, pkg, optional, override,
    node), or None when it is not one."""
    if isinstance(item, Scalar):
        text = item.text.strip()
        if text == "_self_":
            return "_self_"
        if not text:
            return None
        return {"group": None, "option": text, "pkg": "", "optional": False, "override": False, "node": item}
    if isinstance(item, Mapping) and len(item.pairs) == 1:
        key, value = item.pairs[0]
        if not isinstance(key, Scalar) or not isinstance(value, Scalar):
            return None
        words = key.text.split()
        optional, override = "optional" in words[:-1], "override" in words[:-1]
        if not words or set(words[:-1]) - {"optional", "override"}:
            return None
        group, _, pkg = words[-1].partition("@")
        option = None if value.value12 is None else value.text.strip()
        return {"group": group.strip("/"), "option": option, "pkg": pkg, "optional": optional,
                "override": override, "node": value}
    return None


def _absolute(parts: tuple, target: str) -> str:
    """``${.key}`` / ``${..key}``: relative to the mapping that holds the referring key (one dot) or
    the one above it (each further dot); other targets as written."""
    if not target.startswith("."):
        return target
    rest = target.lstrip(".")
    up = len(target) - len(rest)
    base = parts[:-1]
    if up - 1 > len(base):
        return target  # above the top: not a key path (reported as unknown by the caller's check)
    base = base[:len(base) - (up - 1)]
    return ".".join(base + ((rest,) if rest else ()))


def _removes(node: Node) -> bool:
    return isinstance(node, Scalar) and node.tag == REMOVE_TAG


def _holds_ref(node: Node) -> bool:
    if isinstance(node, Scalar):
        return "${" in node.text
    if isinstance(node, (Mapping, Sequence)):
        from ..load.document import walk

        return any(isinstance(n, Scalar) and "${" in n.text for n in walk(node))
    return False


def _child(node: Node, name: str):
    if isinstance(node, Mapping):
        return node.get(name)
    if isinstance(node, Sequence) and name.isdigit() and int(name) < len(node.items):
        return node.items[int(name)]
    return None


class _M:
    """A mapping being composed: the latest container node written, and its entries."""

    __slots__ = ("node", "items")

    def __init__(self, node):
        self.node = node
        self.items: dict[str, tuple] = {}  # name -> (key node, child: _M | _S | Node)


def _paths_of(top: "_M", limit: int = 5000) -> list[str]:
    """The key paths some layer of the run has (not those a --set has just opened or added)."""
    out: list[str] = []
    stack: list[tuple[tuple, Any]] = [((), top)]
    while stack and len(out) < limit:
        p, m = stack.pop()
        if isinstance(m, _M):
            for name, (k, c) in m.items.items():
                if isinstance(k, GivenScalar):
                    continue
                out.append(".".join(p + (name,)))
                stack.append((p + (name,), c))
    return out


class _S:
    """A sequence opened by a --set that reaches inside it."""

    __slots__ = ("node", "items")

    def __init__(self, node: Sequence):
        self.node = node
        self.items = list(node.items)


class _Given(Record):
    key: str
    parts: tuple
    node: Node
    text: str
    added: bool  # given with --add: a key no layer has, on purpose

    def __init__(self, key: str, parts: tuple, node: Node, text: str, added: bool = False) -> None:
        self.key = key
        self.parts = parts
        self.node = node
        self.text = text
        self.added = added

    _fields = ("key", "parts", "node", "text", "added")  # repr, equality (common/record.py)


class Composer:
    def __init__(self, settings, overrides=()):
        self.settings = settings
        self.root = Path(settings.root).resolve()
        self.bases_key = getattr(settings, "bases_key", "") or ""
        self.defaults_key = getattr(settings, "defaults_key", "") or ""
        self.layers = list(getattr(settings, "layers", []) or [])
        self.overrides = list(overrides)
        self.given = [self._parse_given(*o) for o in self.overrides]
        self.overrides_doc = self._load_overrides_file()
        # Files declared as bases in the settings' layers (and the overrides file): partial configs,
        # checked as files and through the runs built on them, not as runs of their own.
        self.base_files: set[str] = set()
        for entry in self.layers:
            for b in entry.get("bases", []):
                self.base_files.add(self._shown(self.root / b))
        if self.overrides_doc is not None:
            self.base_files.add(self.overrides_doc.path)
        self._places: dict[str, tuple] = {}
        # which files build on which (named_as_base): shared with the pipeline's search, when it gives one
        self.graph: BaseGraph | None = None
        self._source_shown = self._shown(Path(settings.source)) if getattr(settings, "source", None) else "settings"
        self._doc: Document | None = None  # the file being composed (compose)
        self._blocks: dict[Path, list] = {}  # base -> the layers it gave, for one run (see _add_base)

    # --- settings-level inputs: parsed once ----------------------------------------------------
    def _parse_given(self, key: str, text: str, added: bool = False) -> _Given:
        from ..common.settings import SettingsError

        parts = tuple(key.split("."))
        if not all(parts):
            raise SettingsError(f"--set {key}={text}: expected a dotted key path like optim.lr, found {key!r}")
        doc = Document(path="<command line>")
        loader.parse_bytes(doc, text.encode("utf-8"), loader.Limits(max_bytes=1 << 20, max_depth=50))
        if not doc.readable or len(doc.roots) > 1:
            why = doc.problems[0].message if doc.problems else "holds more than one YAML document"
            raise SettingsError(f"--set {key}={text}: the value {why}")
        raw = doc.roots[0] if doc.roots else Scalar("", None, None)
        return _Given(key, parts, self._given_tree(raw, parts), text, added)

    def _given_tree(self, node: Node, path: tuple) -> Node:
        if isinstance(node, Scalar):
            return _place(GivenScalar(node.text, node.style, node.tag), None, path)
        if isinstance(node, Sequence):
            seq = _place(Sequence(), None, path)
            seq.items = [self._given_tree(it, path + (str(i),)) for i, it in enumerate(node.items)]
            return seq
        out = _place(Mapping(), None, path)
        for name, _k, v, _via in cast(Mapping, node).entries():
            out.pairs.append((_place(GivenScalar(name, None, None), None, path),
                              self._given_tree(v, path + (name,))))
        return out

    def _load_overrides_file(self):
        from ..common.settings import SettingsError

        name = getattr(self.settings, "overrides", "") or ""
        if not name:
            return None
        where = f"{self.settings.source}: setting {self.settings.name('overrides')}"
        path = self.settings.path("overrides", self.root)  # refused when it leaves the repository
        if not path.is_file():
            raise SettingsError(f"{where}: expected an overrides file, found no file {name!r}")
        doc = load_source(path, self._shown(path), self.settings.limits)
        if not doc.readable:
            p = next(p for p in doc.problems if p.kind in ("parse", "encoding", "size", "depth", "aliases",
                                                           "io", "json", "binary"))
            raise SettingsError(f"{where}: {doc.path}:{p.line}:{p.col}: {p.message}")
        if not doc.roots or not isinstance(doc.roots[0], Mapping):
            raise SettingsError(f"{where}: expected {doc.path} to hold a mapping of keys to values")
        return doc

    def named_as_base(self, shown: str) -> bool:
        """Does some file of the repository build on this one (a base in the settings' layers, the
        overrides file, or a file another names as a base: under the bases key, in a defaults list,
        in a launch script)? The search that finds a changed base's dependants (with_dependants)."""
        if shown in self.base_files:
            return True
        # Only where the settings say how a file names its bases (else no file can name one), once per
        # file: the search walks the repository as a changed base's check does.
        if not (self.bases_key or self.layers or getattr(self.settings, "defaults_key", "")):
            return False
        memo = self.__dict__.setdefault("_named_as_base", {})
        if shown not in memo:
            if self.graph is None:
                self.graph = BaseGraph(self.settings)
            memo[shown] = any(s != shown for _p, s in self.graph.dependants([], {shown}))
        return memo[shown]

    def _shown(self, path: Path) -> str:
        try:
            return path.resolve().relative_to(self.root).as_posix()
        except ValueError:
            return path.as_posix()

    # --- the public entry points -----------------------------------------------------------------
    def compose(self, doc: Document, root: Node, path: str) -> Composed:
        self._doc = doc
        try:
            return self._compose(doc, root, path)
        finally:
            # perf: the composer keeps nothing of the file once its run is composed; its tree is let go
            # with the check's own objects, while they are still in the processor's cache, not when the
            # next file is composed (200 files of the benchmark corpus in a CPU simulator: 3% fewer
            # first-level data-cache misses; the time it saves is within this machine's noise)
            self._doc = None
            self._blocks = {}

    def _compose(self, doc: Document, root: Node, path: str) -> Composed:
        self._problems: list[CompositionProblem] = []
        layers = self._layers(doc, root, path)
        files = []
        for _role, d, _r in layers:
            if d.path not in files:
                files.append(d.path)
        for _role, d, _r in layers:
            if d is not doc:  # the document carries the files its runs were built from
                doc.sources[d.path] = d
        interpolate = any("${" in d.text for _role, d, _r in layers) or any(
            "${" in g.text for g in self.given)
        plain = len(layers) == 1 and not self.given and not interpolate and not (
            self.bases_key and isinstance(root, Mapping) and root.get(self.bases_key) is not None) and not (
            self.defaults_key and isinstance(root, Mapping) and root.get(self.defaults_key) is not None)
        if (plain and not _launch_root(root)) or not isinstance(root, Mapping):
            return Composed(root, self._flush(), files)
        self.hist: dict[tuple, list[tuple[Node, str, str]]] = {}
        self.refs: set[tuple] = set()  # every path on the way to a value that holds a ${...}
        top = _M(root)
        for role, _d, r in layers:
            self._merge(top, r, role, (), True)
        for g in self.given:
            self._apply_given(top, g)
        built = self._build(top, ())
        out = ComposedMapping()
        _place(out, root, ())
        chains: dict[str, list[Location]] = {}
        for p in self.hist:  # values that no reference touches: the layers they replaced
            chain = self.superseded(p)
            if chain:
                chains[".".join(p)] = chain
        if interpolate and self.refs:
            interp = _Interp(self, cast(Mapping, built))
            new = interp.rebuild((), 0)
            out.pairs = [(k, v) for _n, k, v, _via in new.entries()] if isinstance(new, Mapping) else []
            chains.update(interp.chains)
        else:
            out.pairs = list(cast(Mapping, built).pairs)
        for p, hops in (getattr(root, "hops", None) or {}).items():  # a launch script's variables
            key = ".".join(p)
            chains[key] = chains.get(key, []) + [h for h in hops if h not in chains.get(key, [])]
        out.chains = chains
        if len(layers) > 1:
            out.roles = {".".join(p): h[-1][1] for p, h in self.hist.items() if h}
        out.notes = list(getattr(root, "notes", None) or []) + [p for p in self._problems if p.kind == VALUE_UNKNOWN]
        self._problems = [p for p in self._problems if p.kind != VALUE_UNKNOWN]
        return Composed(out, self._flush(), files)

    def texts(self, doc: Document):
        """(shown path, text) of the other files a run of ``doc`` was composed from."""
        return tuple((shown, source.text) for shown, source in doc.sources.items())

    # --- problems -----------------------------------------------------------------------------
    def _problem(self, kind: str, message: str, where: Location, related=(), subject: str = "") -> None:
        p = CompositionProblem(kind, message, where.line, where.col, list(related), where.path, where.end_line,
                               where.end_col, where.key_path, subject or message)
        if p not in self._problems:
            self._problems.append(p)

    def _flush(self) -> list[CompositionProblem]:
        out, self._problems = self._problems, []
        for p in out:
            if p not in self._doc.problems:
                self._doc.problems.append(p)
        return out

    # --- bases -----------------------------------------------------------------------------------
    def _layers(self, doc: Document, root: Node, path: str) -> list[tuple[str, Document, Mapping]]:
        out: list[tuple[str, Document, Mapping]] = []
        self._blocks = {}  # base -> the layers it gave, for this run (see _add_base)
        if _launch_root(root):
            return self._script_layers(doc, root, path)
        if not isinstance(root, Mapping) or not (self.layers or self.overrides_doc is not None or (
                self.bases_key and root.get(self.bases_key) is not None) or (
                self.defaults_key and root.get(self.defaults_key) is not None)):
            return [("experiment", doc, cast(Mapping, root))]
        top = self._where(Path(path))[0]
        stack = [(top, doc.path)]
        from ..load.discover import matches

        source = self._source_shown
        for i, entry in enumerate(self.layers):
            if not matches(doc.path, [entry.get("files", "")]):
                continue
            for b in entry.get("bases", []):
                real = (self.root / b)
                if self._where(real)[0] == top:
                    continue  # a glob that also matches the base itself
                naming = Location(doc.path, 0, 0, message="", key_path="")
                related = [Location(source, 0, 0, message=f"layers entry {i + 1} names base {b!r} for files "
                                                         f"matching {entry.get('files')!r}")]
                self._add_base(real, b, naming, related, stack, out)
        for name, node in self._named_bases(doc, root):
            self._add_base(Path(path).parent / name, name, node.location(), [], stack, out)
        self._with_defaults(doc, root, Path(path), "experiment", stack, out)
        if self.overrides_doc is not None:
            out.append(("overrides file", self.overrides_doc, self.overrides_doc.roots[0]))
        return out

    def _named_bases(self, doc: Document, root: Mapping):
        if not self.bases_key:
            return []
        v = root.get(self.bases_key)
        if v is None:
            return []
        items = v.items if isinstance(v, Sequence) else [v]
        out = []
        for it in items:
            if isinstance(it, Scalar) and isinstance(it.value12, str) and it.text.strip():
                out.append((it.text.strip(), it))
            else:
                self._problem(MALFORMED, f"{self.bases_key} names bases by path: expected a path or a list of "
                                         f"paths, found {_show(it)}", it.location(), subject=self.bases_key)
        return out

    def _where(self, real: Path) -> tuple:
        """(resolved path, shown path or None when outside the repository, is a file): once per path
        for the life of this composer (one check)."""
        key = str(real)
        hit = self._places.get(key)
        if hit is None:
            resolved = confined(real, self.root)
            shown = resolved.relative_to(self.root).as_posix() if resolved is not None else None
            resolved = resolved if resolved is not None else Path(os.path.realpath(real))
            hit = self._places[key] = (resolved, shown, shown is not None and resolved.is_file())
        return hit

    def _add_base(self, real: Path, name: str, naming: Location, related: list, stack: list, out: list,
                  choices=None) -> None:
        # A base named again (not through a cycle) is not expanded again: the layers it gave the first
        # time move to the end, as applying it again would leave them (a later application overwrites
        # everything an earlier one set). Bases that each name the same base twice then cost one
        # visit per base, not two to the power of the depth.
        key = self._where(real)[0]
        block = self._blocks.get(key) if choices is None else None
        if block is not None and all(r != key for r, _s in stack):
            moved = {id(layer) for layer in block}
            out[:] = [layer for layer in out if id(layer) not in moved]
            out.extend(block)
            return
        start = len(out)
        opened = self._open(real, name, naming, related, stack)
        if opened is None:
            return
        bdoc, broot, shown_real, shown = opened
        stack.append((shown_real, shown))
        for sub, node in self._named_bases(bdoc, broot):
            self._add_base(real.parent / sub, sub, node.location(), [], stack, out)
        self._with_defaults(bdoc, broot, shown_real, "base", stack, out, choices)
        stack.pop()
        if choices is None:
            self._blocks[key] = out[start:]

    def _open(self, real: Path, name: str, naming: Location, related: list, stack: list, optional: bool = False):
        """(document, root mapping, resolved path, shown path) of a file a run is composed from, or None
        with the problem recorded."""
        shown_real, shown, is_file = self._where(real)
        chain = [s for _r, s in stack]
        if shown is None:
            self._problem(BASE_OUTSIDE, f"base {name!r} is outside the repository; trimtab reads no file "
                                        "outside the repository root", naming, related, subject=name)
            return
        for i, (r, _s) in enumerate(stack):
            if r == shown_real:
                cycle = " -> ".join(chain[i:] + [shown])
                self._problem(BASE_CYCLE, f"bases form a cycle: {cycle}", naming, related, subject=cycle)
                return
        if len(stack) > _MAX_DEPTH:
            self._problem(BASE_CYCLE, f"bases nest deeper than {_MAX_DEPTH} files", naming, related, subject=name)
            return
        if not is_file:
            looked = f" (looked for {shown})" if shown != name else ""
            if optional:
                self._problem(OPTIONAL_MISSING, f"optional defaults entry {name!r} does not exist{looked}; the "
                                                "run is composed without it", naming, related, subject=name)
                return
            self._problem(BASE_MISSING, f"base {name!r} does not exist{looked}", naming, related, subject=name)
            return
        bdoc = load_source(shown_real, shown, self.settings.limits)
        if not bdoc.readable:
            p = bdoc.problems[0]
            where = f"{shown}:{p.line}:{p.col}" if p.line else shown
            self._problem(BASE_MISSING, f"base {name!r} cannot be read: {where}: {p.message}", naming,
                          related + [Location(shown, p.line, p.col, message=p.message)], subject=name)
            return
        broot = bdoc.roots[0] if bdoc.roots else _place(Mapping(), None, ())  # an empty file: no keys
        if not isinstance(broot, Mapping):
            self._problem(MALFORMED, f"base {name!r} does not hold a mapping of keys to values", naming, related,
                          subject=name)
            return
        return bdoc, broot, shown_real, shown

    # --- launch scripts and defaults lists -----------------------------------------------------
    def _script_layers(self, doc: Document, root, path: str) -> list[tuple[str, Document, Mapping]]:
        """A training command of a launch script: the base config it names (with its defaults list,
        where the command's group choices apply), then its overrides, its own arguments and the
        launcher's topology, then the settings' overrides file."""
        out: list[tuple[str, Document, Mapping]] = []
        script = self._where(Path(path))[0]
        stack = [(script, doc.path)]
        named = [w for w in root.bases if w.text is not None]
        if root.config_name is not None and root.config_name.text is not None and (
                root.config_dir is None or root.config_dir.text is not None):
            folder = root.config_dir.text if root.config_dir is not None else ""
            name = root.config_name.text
            if not Path(name).suffix:
                name += ".yaml"
            from .shell import Word

            w = root.config_name
            named.append(Word(str(Path(folder) / name) if folder else name, w.start, w.end, w.file, raw=w.raw,
                              t=w.t))
        choices = [list(c) + [False] for c in root.choices]
        for w in named:
            text = w.text.strip()
            first = Path(text) if Path(text).is_absolute() else self.root / text
            candidates = [first, Path(path).parent / text]
            real = next((c for c in candidates if self._where(c)[2]), first)
            self._add_base(real, text, w.location(), [], stack, out, choices)
        used = {c[1] for c in choices if c[-1]}
        mine = _without(root, used) if used else root
        out.append(("script override", doc, mine))
        if root.flags.pairs:
            out.append(("script argument", doc, root.flags))
        if root.topology.pairs:
            out.append(("launcher argument", doc, root.topology))
        if self.overrides_doc is not None:
            out.append(("overrides file", self.overrides_doc, self.overrides_doc.roots[0]))
        return out

    def _with_defaults(self, doc: Document, root: Mapping, real: Path, role: str, stack: list, out: list,
                       choices=None, package: tuple = ()) -> None:
        """The file's own layer, composed with the files its defaults list names, in the list's order
        (``_self_`` marks where the file's own keys go; without it they come last)."""
        dl = root.get(self.defaults_key) if self.defaults_key else None
        if dl is None:
            out.append((role, doc, _under(root, package)))
            return
        own = _without(root, {self.defaults_key})
        if not isinstance(dl, Sequence):
            self._problem(MALFORMED, f"{self.defaults_key} lists the files a config is composed from: expected a "
                                     f"list, found {_show(dl)}", dl.location(), subject=self.defaults_key)
            out.append((role, doc, _under(own, package)))
            return
        entries: list = []
        self_at = None
        for item in dl.items:
            entry = _entry(item)
            if entry is None:
                self._problem(MALFORMED, f"{self.defaults_key}: expected a name, a `group: option` entry or _self_, "
                                         f"found {_show(item)}", item.location(), subject=self.defaults_key)
                continue
            if entry == "_self_":
                self_at = len(entries)
                continue
            if entry["override"]:
                for e in entries:
                    if e["group"] == entry["group"]:
                        e["option"], e["node"] = entry["option"], entry["node"]
                continue
            entries.append(entry)
        for c in choices or ():  # a launch script's group=option / +group=option
            prefix, group, pkg, value, whole, _used = c
            hit = [e for e in entries if e["group"] == group and (not pkg or e["pkg"] == pkg)]
            if not hit and not (prefix.startswith("+") and self._where(real.parent / group)[0].is_dir()):
                continue
            if value is None or value.text is None:
                continue
            loc = value.location()
            node = _place(Scalar(value.text, None, None), None, ())
            node.file, node.line, node.col, node.end_line, node.end_col = (loc.path, loc.line, loc.col, loc.end_line,
                                                                           loc.end_col)
            if hit:
                hit[0]["option"], hit[0]["node"] = value.text, node
            else:
                entries.append({"group": group, "option": value.text, "pkg": pkg, "optional": False,
                                "override": False, "node": node})
            c[-1] = True
        if self_at is None:
            self_at = len(entries)
        folder = real.parent
        for i, e in enumerate(entries + [None]):
            if i == self_at:
                out.append((role, doc, _under(own, package)))
            if e is None or e["option"] is None:
                continue
            if e["group"] is None:
                rel, pkg = e["option"], package
            else:
                rel = f"{e['group']}/{e['option']}"
                pkg = None
            name = rel if Path(rel).suffix in (".yaml", ".yml", ".json") else rel + ".yaml"
            opened = self._open(folder / name, name, e["node"].location(), [], stack, e["optional"])
            if opened is None:
                continue
            edoc, eroot, eshown_real, eshown = opened
            if pkg is None:
                header = _package_header(edoc.text)
                where = e["pkg"] or header or e["group"].replace("/", ".")
                where = {"_global_": "", "_group_": e["group"].replace("/", ".")}.get(where, where)
                pkg = tuple(p for p in where.split(".") if p)
            stack.append((eshown_real, eshown))
            self._with_defaults(edoc, eroot, eshown_real, "defaults entry", stack, out, None, pkg)
            stack.pop()

    # --- merging ---------------------------------------------------------------------------------
    def _merge(self, dst: _M, src: Mapping, role: str, path: tuple, top: bool) -> None:
        dst.node = src
        for name, k, v, _via in src.entries():
            if top and self.bases_key and name == self.bases_key:
                continue
            self._write(dst, name, k, v, role, path + (name,))

    def _write(self, dst: _M, name: str, k: Node, v: Node, role: str, p: tuple) -> None:
        cur = dst.items.get(name)
        if _removes(v):
            if cur is not None:
                del dst.items[name]
                self._forget_below(p)
                self.hist.setdefault(p, []).append((v, role, "removed"))
            return
        if isinstance(v, Mapping):
            if cur is not None and isinstance(cur[1], _M):
                self._merge(cur[1], v, role, p, False)
                return
            if cur is not None:
                self._forget_below(p)
            m = _M(v)
            self.hist.setdefault(p, []).append((v, role, "set"))
            self._merge(m, v, role, p, False)
            dst.items[name] = (k, m)
            return
        if cur is not None:
            self._forget_below(p)
        self.hist.setdefault(p, []).append((v, role, "set"))
        dst.items[name] = (k, v)
        if _holds_ref(v):
            self._mark_ref(p)

    def _mark_ref(self, p: tuple) -> None:
        for i in range(len(p) + 1):
            self.refs.add(p[:i])

    def _forget_below(self, p: tuple) -> None:
        n = len(p)
        for q in [q for q in self.hist if len(q) > n and q[:n] == p]:
            del self.hist[q]

    def superseded(self, p: tuple) -> list[Location]:
        """The places that wrote the value at ``p`` before the one that won, with messages."""
        out = []
        for node, role, what in self.hist.get(p, [])[:-1]:
            if what == "removed":
                out.append(node.location(f"removed here ({role})"))
            else:
                out.append(node.location(f"{_show(node)} here ({role}), replaced by a later layer"))
        return out

    def _apply_given(self, top: _M, g: _Given) -> None:
        cmd = Location(None, 0, 0, key_path=g.key, message=f"--set {g.key}={g.text}")
        cur: _M | _S = top
        path: tuple = ()
        for part in g.parts[:-1]:
            path += (part,)
            child = self._get(cur, part)
            if child is None:
                if isinstance(cur, _S):
                    self._problem(OVERRIDE, f"--set {g.key}: {'.'.join(path[:-1])} is a list of "
                                            f"{len(cur.items)} item(s); there is no item {part}", cmd)
                    return
                m = _M(_place(Mapping(), None, path))
                cur.items[part] = (_place(GivenScalar(part, None, None), None, path), m)
                child = m
            elif isinstance(child, Mapping):
                m = _M(child)
                self._merge(m, child, self._role_of(path), path, False)
                self._set(cur, part, m)
                child = m
            elif isinstance(child, Sequence):
                s = _S(child)
                self._set(cur, part, s)
                child = s
            elif not isinstance(child, (_M, _S)):
                self._problem(OVERRIDE, f"--set {g.key}: {'.'.join(path)} is a single value ({_show(child)}), "
                                        "not a section, so it has no key "
                                        f"{g.parts[len(path)]}", cmd,
                              [child.location(f"{'.'.join(path)} is written here")], subject=g.key)
                return
            cur = child
        last = g.parts[-1]
        p = g.parts
        if isinstance(cur, _S):
            if not last.isdigit() or int(last) >= len(cur.items):
                self._problem(OVERRIDE, f"--set {g.key}: {'.'.join(p[:-1])} is a list of {len(cur.items)} "
                                        f"item(s); there is no item {last}", cmd, subject=g.key)
                return
            old: Any = cur.items[int(last)]
            role = self._role_of(p[:-1])
            self.hist.setdefault(p, [(old, role, "set")])
            if _removes(g.node):
                self._problem(OVERRIDE, f"--set {g.key}: an item of a list cannot be removed", cmd, subject=g.key)
                return
            self.hist[p].append((g.node, "--set", "set"))
            cur.items[int(last)] = g.node
            if _holds_ref(g.node):
                self._mark_ref(p)
            return
        key = _place(GivenScalar(last, None, None), None, p)
        old = cur.items.get(last)
        if old is None and not _removes(g.node) and not g.added:
            import difflib

            near = difflib.get_close_matches(g.key, _paths_of(top), n=1)
            hint = f"; did you mean {near[0]}?" if near else ""
            self._problem(OVERRIDE_NEW, f"--set {g.key} adds a key that no layer of the run has; a trainer that "
                                        f"does not read it ignores the override{hint} (to add it on purpose: "
                                        f"--add {g.key}=...)", cmd, subject=g.key)
        self._write(cur, last, old[0] if old else key, g.node, "--set", p)

    def _role_of(self, p: tuple) -> str:
        h = self.hist.get(p)
        return h[-1][1] if h else "experiment"

    @staticmethod
    def _get(cur, part: str):
        if isinstance(cur, _M):
            e = cur.items.get(part)
            return None if e is None else e[1]
        if part.isdigit() and int(part) < len(cur.items):
            return cur.items[int(part)]
        return None

    def _set(self, cur, part: str, value) -> None:
        if isinstance(cur, _M):
            cur.items[part] = (cur.items[part][0], value)
        else:
            cur.items[int(part)] = value
        if isinstance(value, _S):
            role = self._role_of(self._path_of(value))
            for i, it in enumerate(value.items):
                self.hist.setdefault(self._path_of(value) + (str(i),), [(it, role, "set")])

    @staticmethod
    def _path_of(s) -> tuple:
        return tuple(s.node.path) if s.node is not None else ()

    def _build(self, m, path: tuple) -> Node:
        if isinstance(m, _M):
            out = _place(Mapping(), m.node, path)
            for name, (k, c) in m.items.items():
                out.pairs.append((k, self._build(c, path + (name,))))
            return out
        if isinstance(m, _S):
            seq = _place(Sequence(), m.node, path)
            seq.items = [self._build(c, path + (str(i),)) for i, c in enumerate(m.items)]
            return seq
        return m


_CYCLIC = object()


class _Interp:
    """Resolve ``${dotted.path}`` references on the merged tree, keeping origins."""

    def __init__(self, composer: Composer, root: Mapping):
        self.c = composer
        self.root = root
        self.memo: dict[tuple, tuple] = {}
        self.active: list[tuple[tuple, Node]] = []
        self.cyclic: set[tuple] = set()
        self.chains: dict[str, list[Location]] = {}
        self._paths: list[str] | None = None
        self.text_left = MAX_EXPANDED_TEXT
        self.copies_left = MAX_COPIED_VALUES
        self.expanding: dict[tuple, tuple] = {}  # source path of each section being copied -> its path
        self.over: set[str] = set()  # the limits already reported

    def at(self, parts: tuple):
        """(resolved node, path where its history lives, extra chain hops), or None."""
        hit = self.memo.get(parts)
        if hit is not None:
            return hit
        if not parts:
            r: Any = (self.root, (), [])
            self.memo[parts] = r
            return r
        parent = self.at(parts[:-1])
        if parent is None:
            return None
        raw = _child(parent[0], parts[-1])
        if raw is None:
            return None
        r = self.resolve(parts, parent[1] + (parts[-1],), raw, parent[2])
        if r is _CYCLIC:
            return None
        self.memo[parts] = r
        return r

    def find(self, target: str):
        names = target.split(".")
        parts: tuple = ()
        cur = self.at(())
        i = 0
        while i < len(names):
            node = cur[0]
            step = None
            if isinstance(node, Mapping):
                for j in range(len(names), i, -1):
                    key = ".".join(names[i:j])
                    if node.get(key) is not None:
                        step = (key, j)
                        break
            elif isinstance(node, Sequence) and names[i].isdigit() and int(names[i]) < len(node.items):
                step = (names[i], i + 1)
            if step is None:
                return None
            parts += (step[0],)
            i = step[1]
            cur = self.at(parts)
            if cur is None:
                return None
        return cur, parts

    def resolve(self, parts: tuple, src: tuple, raw: Node, inherited: list):
        if not isinstance(raw, Scalar) or "${" not in raw.text or raw.tag == REMOVE_TAG:
            return (raw, src, inherited)
        plain = (_place(Unresolved(raw.text, raw.style, None), raw, raw.path), src, inherited)
        for i, (p, _n) in enumerate(self.active):
            if p == parts:
                self._cycle(i, parts, raw)
                return _CYCLIC
        if len(self.active) >= _MAX_DEPTH:
            self._over(raw, parts, f"references lead through more than {_MAX_DEPTH} other references")
            return plain
        text = raw.text
        dotted = ".".join(parts)
        whole = _WHOLE.fullmatch(text.strip())
        if whole and _RESOLVER.fullmatch(whole[1].strip()):
            return self._resolver(parts, src, raw, whole[1].strip(), inherited, True)
        if whole and _PATH.fullmatch(_absolute(parts, whole[1].strip())):
            target = _absolute(parts, whole[1].strip())
            found = self._lookup(parts, raw, target)
            if parts in self.cyclic or found is None:
                return plain
            (tn, tsrc, thops), tparts = found
            if tparts == parts[:len(tparts)] or tsrc == src[:len(tsrc)]:
                self.cyclic.add(parts)
                self.c._problem(CYCLE, f"interpolation cycle: {dotted} -> {'.'.join(tparts)}, which contains "
                                       f"{dotted} itself", raw.location(), subject=dotted)
                return plain
            hop = raw.location(f"{dotted} = {text.strip()} here takes the value of {'.'.join(tparts)}")
            return (tn, tsrc, inherited + thops + self.c.superseded(src) + [hop])
        pieces, hops, pos, changed = [], [], 0, False
        for m in _REF.finditer(text):
            pieces.append(text[pos:m.start()])
            pos = m.end()
            if m[0] == "$${":
                pieces.append("${")
                changed = True
                continue
            target = (m[1] or "").strip()
            if _RESOLVER.fullmatch(target):
                r = self._resolver(parts, src, raw, target, inherited, False)
                if not isinstance(r[0], Scalar) or isinstance(r[0], Unresolved):
                    return r
                pieces.append(r[0].text)
                changed = True
                hops.extend(r[2][len(inherited):])
                continue
            target = _absolute(parts, target)
            if not _PATH.fullmatch(target):
                pieces.append(m[0])
                continue
            found = self._lookup(parts, raw, target)
            if parts in self.cyclic:
                return plain
            if found is None:
                if not _ENV.fullmatch(target):
                    return plain
                pieces.append(m[0])
                continue
            (tn, _tsrc, _thops), tparts = found
            if isinstance(tn, Unresolved):
                return plain  # the target has no value (a cycle, a limit): neither has this text
            if not isinstance(tn, Scalar):
                self.c._problem(MALFORMED, f"{dotted}: ${{{target}}} inside text refers to {_show(tn)}, which "
                                           "cannot be written into text", raw.location(), subject=target)
                return plain
            pieces.append(tn.text)
            changed = True
            hops.append(tn.location(f"supplies {tn.text} to {dotted} through ${{{target}}}"))
        if not changed:
            return (raw, src, inherited)  # nothing of ours in it (${HOME}, ${{ ci.syntax }}): as written
        pieces.append(text[pos:])
        size = sum(map(len, pieces))
        if size > self.text_left:
            self._over(raw, parts, f"references expand to more than {MAX_EXPANDED_TEXT} characters of text")
            return plain
        self.text_left -= size
        new = _place(Scalar("".join(pieces), '"', None), raw, raw.path)
        return (new, src, inherited + hops)

    def _resolver(self, parts: tuple, src: tuple, raw: Node, target: str, inherited: list, whole: bool):
        """``${name:args}``: an environment lookup with a default reads as its default (the environment
        can change it at launch); any other resolver's value is known only at launch."""
        m = _RESOLVER.fullmatch(target)
        name, args = m[1], m[2]
        dotted = ".".join(parts)
        if name == "env" or name.endswith(".env"):
            var, comma, default = args.partition(",")
            var, default = var.strip(), default.strip()
            if comma and "${" not in default:
                if len(default) >= 2 and default[0] == default[-1] and default[0] in "'\"":
                    default = default[1:-1]
                self.c._problem(VALUE_UNKNOWN, f"{dotted}: ${{{target}}} reads the environment variable {var}: "
                                               f"checked with its default {default!r}, which the environment can "
                                               "change at launch", raw.location(), subject=f"{dotted}|{target}")
                node: Any = _place(GivenScalar(default, None, None), raw, raw.path)
                hop = raw.location(f"{dotted} = ${{{target}}}: the default of environment variable {var}")
                return (node, src, inherited + [hop])
            why = f"${{{target}}} reads the environment variable {var}, known only at launch"
        else:
            why = f"${{{target}}} is computed by the resolver {name!r} of the launcher's config library at launch"
        self.c._problem(VALUE_UNKNOWN, f"{dotted}: {why}", raw.location(), subject=f"{dotted}|{target}")
        node = _place(Unknown(cast(Scalar, raw).text, cast(Scalar, raw).style, None), raw, raw.path)
        node.why = why
        return (node, src, inherited)

    def _lookup(self, parts: tuple, raw: Node, target: str):
        self.active.append((parts, raw))
        try:
            found = self.find(target)
        finally:
            self.active.pop()
        if found is None and parts not in self.cyclic and not _ENV.fullmatch(target):
            import difflib

            near = difflib.get_close_matches(target, self.paths(), n=1)
            hint = f" (did you mean {near[0]}?)" if near else ""
            self.c._problem(UNKNOWN, f"{'.'.join(parts)}: ${{{target}}} refers to {target}, which the composed "
                                     f"run does not have{hint}", raw.location(), subject=target)
        return found

    def _cycle(self, i: int, parts: tuple, raw: Node) -> None:
        members = self.active[i:]
        for p, _n in members:
            self.cyclic.add(p)
        shown = " -> ".join([".".join(p) for p, _n in members] + [".".join(parts)])
        related = [n.location(f"{'.'.join(p)} refers onward here") for p, n in members[1:]]
        self.c._problem(CYCLE, f"interpolation cycle: {shown}", members[0][1].location(), related,
                        subject=shown)

    def _over(self, raw: Node, parts: tuple, what: str) -> None:
        if what in self.over:
            return  # each limit is reported once per run, where it was first passed
        self.over.add(what)
        key = ".".join(raw.path or parts)  # the key that holds the reference, as written
        self.c._problem(EXPANSION, f"{key}: {what} (trimtab's limit); the value is left unresolved",
                        raw.location(), subject=key)

    def paths(self) -> list[str]:
        if self._paths is None:
            out: list[str] = []
            stack: list[tuple[tuple, Node]] = [((), self.root)]
            while stack and len(out) < 5000:
                p, node = stack.pop()
                if isinstance(node, Mapping):
                    for name, _k, v, _via in node.entries():
                        out.append(".".join(p + (name,)))
                        stack.append((p + (name,), v))
            self._paths = out
        return self._paths

    def rebuild(self, parts: tuple, depth: int, copying: bool = False) -> Node:
        r = self.at(parts)
        if r is None:  # cannot happen for a path taken from the tree; keep the raw node
            return _child(self.at(parts[:-1])[0], parts[-1])
        node, src, hops = r
        if src == parts and not hops and parts not in self.c.refs:
            return node  # no reference in or above it: as merged (its chain is the layers it replaced)
        chain = self.c.superseded(src) + hops
        if chain and parts:
            self.chains[".".join(parts)] = chain
        if depth > _MAX_DEPTH:
            return node
        copying = copying or src != parts
        if copying:
            self.copies_left -= 1
            if self.copies_left < 0:
                if self.copies_left == -1:
                    self._over(self._referring(parts, node), parts,
                               f"references copy more than {MAX_COPIED_VALUES} keys and items from sections")
                return _place(Unresolved(_show(node), None, None), node, parts)
        if not isinstance(node, (Mapping, Sequence)):
            return node
        if src in self.expanding:
            # the section at src is being copied already, further up this path: a cycle through sections
            self._section_cycle(parts, src, node)
            return _place(Unresolved(_show(node), None, None), node, parts)
        self.expanding[src] = parts
        try:
            if isinstance(node, Mapping):
                pairs, changed = [], bool(node.merged)
                for name, k, v, _via in node.entries():
                    c = self.rebuild(parts + (name,), depth + 1, copying)
                    pairs.append((k, c))
                    changed = changed or c is not v
                if not changed:
                    return node
                out = _place(Mapping(), node, parts)
                out.pairs = pairs
                return out
            items = [self.rebuild(parts + (str(i),), depth + 1, copying) for i in range(len(node.items))]
            if all(a is b for a, b in zip(items, node.items)):
                return node
            seq = _place(Sequence(), node, parts)
            seq.items = items
            return seq
        finally:
            del self.expanding[src]

    def _referring(self, parts: tuple, node: Node) -> Node:
        """The written ``${...}`` nearest above the value at ``parts`` (the one that brought it), else
        the value."""
        for k in range(len(parts), 0, -1):
            parent = self.at(parts[:k - 1])
            raw = _child(parent[0], parts[k - 1]) if parent is not None else None
            if isinstance(raw, Scalar) and "${" in raw.text:
                return raw
        return node

    def _section_cycle(self, parts: tuple, src: tuple, node: Node) -> None:
        order = list(self.expanding)
        members = [".".join(p) or "the top level" for p in order[order.index(src):]] + [".".join(src)]
        shown = " -> ".join(members)
        self.c._problem(CYCLE, f"interpolation cycle through sections: {shown} (a section reached through "
                               f"references refers back to itself, so it never ends)",
                        self._referring(parts, node).location(), subject=shown)


# --- which files build on which: for pre-commit and CI ------------------------------------------
NAMES_VERSION = 1


class BaseGraph:
    """Which files of the repository build on which: the bases each file names (under the bases
    key, in a defaults list, in a launch script's training commands, read, never run) and the
    settings' layers. What a file names depends on its content only, so it is kept in a cache
    keyed by the file's content hash, in git's own folder or the user's cache folder (never in
    the working tree; ``paths.cache_file``); a file is parsed for it once per content, and each
    file once per process. ``candidates``: the repository's files as discovery finds them (found
    here when not given)."""

    def __init__(self, settings, candidates: list[tuple[str, str]] | None = None):
        from .sources import SCRIPTS

        self.settings = settings
        self.root = Path(settings.root).resolve()
        self.layers = list(getattr(settings, "layers", []) or [])
        self.key = getattr(settings, "bases_key", "") or ""
        self.dkey = getattr(settings, "defaults_key", "") or ""
        self.scripts = (getattr(settings, "launch", None) or {}).get("scripts", SCRIPTS)
        self._candidates = candidates
        self._named: dict[str, list[tuple[Path, str | None, bool]]] = {}  # real path -> its bases
        self._places: dict[str, tuple[Path, str | None, bool]] = {}
        self._cache: dict | None = None
        self._cache_path: Path | None = None
        self._dirty = False

    @property
    def candidates(self) -> list[tuple[str, str]]:
        if self._candidates is None:
            from ..load.discover import discover

            self._candidates, _missing = discover([], self.root, self.settings.include, self.settings.exclude)
        return self._candidates

    # --- the cache of what each content names ------------------------------------------------
    def _stamp(self) -> str:
        import json

        from .. import __version__

        here = Path(__file__).parents[1]
        code = []
        for name in ("compose/layers.py", "compose/shell.py", "load/loader.py", "load/document.py"):
            try:
                st = (here / name).stat()
                code.append([name, st.st_mtime_ns, st.st_size])
            except OSError:
                code.append([name])
        s = self.settings
        parts = [NAMES_VERSION, __version__, code, self.key, self.dkey, self.scripts,
                 getattr(s, "launch", None) or {}, repr(getattr(s, "limits", None))]
        return sha256_hex(json.dumps(parts, default=repr, sort_keys=True).encode("utf-8", "surrogateescape"))

    def _known(self) -> dict:
        if self._cache is None:
            from ..common.paths import cache_file, read_cache

            source = getattr(self.settings, "source", None)
            start = Path(source).resolve().parent if source else self.root

            where = sha256_hex(str(start).encode("utf-8", "surrogateescape"))[:24]
            self._cache_path = cache_file(start, f"bases-{where}.json")
            self._cache = read_cache(self._cache_path, NAMES_VERSION, self._stamp())
        return self._cache

    def save(self) -> None:
        """Keep what was learnt for the next process (a cache that cannot be written is not kept)."""
        if self._dirty and self._cache is not None:
            from ..common.paths import write_cache

            write_cache(self._cache_path, NAMES_VERSION, self._stamp(), self._cache)
            self._dirty = False

    # --- what one file names -------------------------------------------------------------------
    def _shown_of(self, p: Path) -> str | None:
        real = confined(p, self.root)
        return real.relative_to(self.root).as_posix() if real is not None else None

    def _written(self, disk: str, script: bool) -> list | None:
        """What a file names as written, from the cache for its content: [["here", text]] (a path
        relative to the file's folder) and [["script", text, [[group, option], ...]]] (a launch
        script's base: the repository's file of that name, else the script folder's; a group's
        option is a file beside it); None when the file cannot be read."""
        settings = self.settings
        data, _why = loader.read(disk, settings.limits)
        if not data or len(data) > settings.limits.max_bytes:
            return None
        if not script and not any(k and k.encode("utf-8") in data for k in (self.key, self.dkey)):
            return []
        from ..common.paths import content_hash

        known = self._known()
        h = content_hash(data)
        hit = known.get(h)
        if isinstance(hit, list) and all(isinstance(e, list) and e and e[0] in ("here", "script") for e in hit):
            return hit
        real = Path(disk).resolve()
        shown = self._shown_of(real) or real.as_posix()
        written = self._script_names(disk, shown, data) if script else self._doc_names(real, shown)
        known[h] = written
        self._dirty = True
        return written

    def _doc_names(self, real: Path, shown: str) -> list:
        key, dkey = self.key, self.dkey
        doc = load_source(real, shown, self.settings.limits)
        out: list = []
        for r in doc.roots:
            v = r.get(key) if key and isinstance(r, Mapping) else None
            items = v.items if isinstance(v, Sequence) else [v] if v is not None else []
            out += [["here", it.text.strip()] for it in items if isinstance(it, Scalar)]
            d = r.get(dkey) if dkey and isinstance(r, Mapping) else None
            for it in (d.items if isinstance(d, Sequence) else []):
                e = _entry(it)
                if isinstance(e, dict) and e["option"] is not None:
                    rel = e["option"] if e["group"] is None else f"{e['group']}/{e['option']}"
                    out.append(["here", rel if Path(rel).suffix else rel + ".yaml"])
        return out

    def _script_names(self, disk: str, shown: str, data: bytes) -> list:
        """The base configs a launch script's training commands name (read, never run)."""
        from .shell import read

        out: list = []
        for r in read(disk, shown, self.settings, data=data).runs:
            names = [w.text for w in r.bases if w.text is not None]
            if r.config_name is not None and r.config_name.text is not None:
                folder = r.config_dir.text if r.config_dir is not None and r.config_dir.text else ""
                name = r.config_name.text if Path(r.config_name.text).suffix else r.config_name.text + ".yaml"
                names.append(str(Path(folder) / name))
            choices = [[group, value.text] for _prefix, group, _pkg, value, _whole in r.choices
                       if value is not None and value.text]
            out += [["script", text, choices] for text in names]
        return out

    def named(self, disk: str, shown: str | None = None) -> list[tuple[Path, str | None, bool]]:
        """The bases a file names (and, for a file checked itself, the settings' layers give it):
        (path, shown path or None when it leaves the repository, is it a file) each. ``shown``:
        the file's path as discovery shows it (a file given by discovery), else None."""
        memo_key = disk if shown is None else f"{disk}\0{shown}"
        hit = self._named.get(memo_key)
        if hit is not None:
            return hit
        root = self.root
        if shown is not None and not os.path.islink(disk):
            real_shown: str | None = shown  # discovery walks real folders: only the file may be a link
        else:
            real_shown = self._shown_of(Path(disk))
        script = real_shown is not None and matches(real_shown, self.scripts)
        paths: list[Path] = []
        if script or self.key or self.dkey:
            written = self._written(disk, script) or []
            if written:
                # a file discovery found (not a link) lies in a real folder; else its link is followed
                folder = Path(disk).parent if real_shown is shown else Path(disk).resolve().parent
                for entry in written:
                    if entry[0] == "here":
                        paths.append(folder / entry[1])
                        continue
                    first = root / entry[1]
                    base = first if first.is_file() else folder / entry[1]
                    paths.append(base)
                    paths += [base.parent / group / (option + ".yaml") for group, option in entry[2]]
        if shown is not None:
            paths += [root / b for e in self.layers if matches(shown, [e.get("files", "")]) for b in e.get("bases", [])]
        out = [self._place(b) for b in paths]
        self._named[memo_key] = out
        return out

    def _place(self, b: Path) -> tuple[Path, str | None, bool]:
        """A named base: (its path with every link followed, its shown path or None when it leaves the
        repository, is it a file); once per path written (many files name the same base)."""
        key = str(b)
        hit = self._places.get(key)
        if hit is None:
            real = confined(b, self.root)
            shown = real.relative_to(self.root).as_posix() if real is not None else None
            hit = self._places[key] = (real if real is not None else b, shown, real is not None and real.is_file())
        return hit

    def closure(self, disk: str, shown: str) -> set[str]:
        """Every file the file at ``disk`` builds on, directly or through other bases."""
        memo: dict[str, set[str]] = {}

        def walk(disk: str, shown: str, top: str | None, depth: int) -> set[str]:
            if shown in memo:
                return memo[shown]
            memo[shown] = set()  # cycle guard
            acc: set[str] = set()
            for real, s, is_file in self.named(disk, top):
                if s is None or s == shown:
                    continue
                acc.add(s)
                if depth < _MAX_DEPTH and is_file:
                    acc |= walk(str(real), s, None, depth + 1)
            memo[shown] = acc
            return acc

        return walk(disk, shown, shown, 0)

    def dependants(self, files: list[tuple[str, str]], seeds: set[str]) -> list[tuple[str, str]]:
        """``files`` plus every file of the repository whose bases (direct or through other bases)
        include one of ``seeds`` (shown paths, e.g. the files changed in a commit)."""
        settings = self.settings
        if not seeds or (not self.layers and not self.key and not self.dkey and not getattr(settings, "overrides", "")
                         and not any(s.lower().endswith((".yaml", ".yml", ".json")) for s in seeds)):
            return files
        root = self.root
        candidates = self.candidates
        have = {shown for _p, shown in files}
        out = list(files)
        overrides = getattr(settings, "overrides", "") or ""
        if overrides and settings.path("overrides", root).relative_to(root).as_posix() in seeds:
            # the overrides file applies to every run: all of them are checked again
            by_shown = {shown: disk for disk, shown in candidates}
            by_shown.update({shown: disk for disk, shown in files})
            return sorted(((disk, shown) for shown, disk in by_shown.items()), key=lambda kv: kv[1])
        for disk, shown in candidates:
            if shown in have:
                continue
            if self.closure(disk, shown) & seeds:
                out.append((disk, shown))
                have.add(shown)
        return sorted(out, key=lambda kv: kv[1])


def with_dependants(files: list[tuple[str, str]], seeds: set[str], settings,
                    graph: BaseGraph | None = None) -> list[tuple[str, str]]:
    """``files`` plus every file of the repository whose bases (direct or through other bases)
    include one of ``seeds`` (shown paths, e.g. the files changed in a commit); ``BaseGraph``."""
    own = graph is None
    graph = graph or BaseGraph(settings)
    try:
        return graph.dependants(files, seeds)
    finally:
        if own:
            graph.save()
