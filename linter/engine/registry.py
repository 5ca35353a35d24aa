"""Rules and plugins: the public API a rule is written against, and the loop that runs them.

Plugins are pluggy plugins in the ``trimtab`` namespace, found through the ``trimtab`` entry-point
group; the built-in rules register the same way.
"""
from __future__ import annotations

import re
from types import ModuleType
from typing import AbstractSet, Any, Callable, Iterable, Iterator, Sequence, Union

from ..common.record import FrozenRecord
from ..load.document import Document
from ..common.findings import Finding, Level, Location
from ..resolve.model import RunModel
from ..common.vocabulary import CONCEPTS, Concept, declare
from ..common.patterns import later


def hookimpl(function: Callable | None = None, *, tryfirst: bool = False, trylast: bool = False,
             optionalhook: bool = False, specname: str | None = None, wrapper: bool = False,
             hookwrapper: bool = False):
    """Mark a plugin's function as its implementation of a trimtab hook (``@hookimpl`` or
    ``@hookimpl(tryfirst=True)``; the options are pluggy's hook implementation options). The mark is
    trimtab's own, so that marking costs no import of pluggy; the plugin manager reads it (and
    pluggy's own mark, ``pluggy.HookimplMarker("trimtab")``, as well)."""
    opts = {"wrapper": wrapper, "hookwrapper": hookwrapper, "optionalhook": optionalhook,
            "tryfirst": tryfirst, "trylast": trylast, "specname": specname}

    def mark(fn):
        fn.trimtab_hookimpl = opts
        return fn

    return mark if function is None else mark(function)


def _marked(fn: Any) -> dict | None:
    opts = getattr(fn, "trimtab_hookimpl", None) if callable(fn) else None
    return dict(opts) if isinstance(opts, dict) else None


def _plugin_manager():
    """A pluggy plugin manager for the ``trimtab`` hooks that also reads ``hookimpl``'s mark (built
    only when a plugin other than the built-in rules is installed or given: start-up)."""
    import pluggy

    spec = pluggy.HookspecMarker("trimtab")
    for name in ("trimtab_rules", "trimtab_key_maps", "trimtab_concepts"):
        spec(getattr(Specs, name))

    class Manager(pluggy.PluginManager):
        def parse_hookimpl_opts(self, plugin, name):
            opts = super().parse_hookimpl_opts(plugin, name)
            if opts is None and name.startswith("trimtab_"):
                opts = _marked(getattr(plugin, name, None))
            return opts

    pm = Manager("trimtab")
    pm.add_hookspecs(Specs)
    return pm


# A key map as a plugin publishes it: concept -> key path, or a table with key, per, scope, fields.
KeyMap = dict[str, Union[str, dict[str, Any]]]


class Specs:
    """The hooks a plugin may implement (namespace ``trimtab``; marked as pluggy hook specifications
    when the plugin manager is built)."""

    def trimtab_rules(self) -> list[Rule]:
        """Return the Rule objects this plugin provides (``trimtab.collect(__name__)`` finds them)."""

    def trimtab_key_maps(self) -> dict[str, KeyMap]:
        """Return named key maps: {name: {concept: key path or table}}."""

    def trimtab_concepts(self) -> list[Concept]:
        """Return the additional concepts this plugin's rules speak of (name, type, unit, meaning)."""


class Rule(FrozenRecord):
    id: str  # area code + number, stable: "BAT-3"
    name: str  # readable, kebab-case
    level: Level
    summary: str
    rationale: str
    check: Callable[["Context"], Iterable[Finding] | None]
    needs: tuple[str, ...]  # concepts the rule cannot work without
    options: dict
    cwe: int | None
    help: str
    rl_only: bool  # skipped for supervised/distillation stages and non-RL files
    scope: str  # run (one RunModel), file (every Document, RL or not), set (all runs at once)
    # file rules only: also run on every other file a run is composed from (its bases, the overrides
    # file, the settings' layers), reporting in that file, whether or not that file is checked itself
    sources: bool

    def __init__(
            self, id: str, name: str, level: Level, summary: str, rationale: str,
            check: Callable[["Context"], Iterable[Finding] | None], needs: tuple[str, ...] = (),
            options: dict | None = None, cwe: int | None = None, help: str = "", rl_only: bool = True,
            scope: str = "run", sources: bool = False
    ) -> None:
        object.__setattr__(self, "id", id)
        object.__setattr__(self, "name", name)
        object.__setattr__(self, "level", level)
        object.__setattr__(self, "summary", summary)
        object.__setattr__(self, "rationale", rationale)
        object.__setattr__(self, "check", check)
        object.__setattr__(self, "needs", needs)
        object.__setattr__(self, "options", {} if options is None else options)
        object.__setattr__(self, "cwe", cwe)
        object.__setattr__(self, "help", help)
        object.__setattr__(self, "rl_only", rl_only)
        object.__setattr__(self, "scope", scope)
        object.__setattr__(self, "sources", sources)

    # repr, equality and hash (common/record.py)
    _fields = (
        "id", "name", "level", "summary", "rationale", "check", "needs", "options", "cwe", "help",
        "rl_only", "scope", "sources",
    )

    @property
    def area(self) -> str:
        return self.id.split("-", 1)[0]


def rule(*, id: str, name: str, level: str, summary: str, rationale: str, needs: tuple = (),
         options: dict | None = None, cwe: int | None = None, help: str = "", rl_only: bool = True,
         scope: str = "run", sources: bool = False):
    """Decorator: turn a check function into a Rule. Every field is checked when the plugin
    registers (``validate``), so a mistake names the plugin and the field."""

    def wrap(fn):
        return Rule(id, name, level, summary, rationale, fn, tuple(needs), dict(options or {}),  # type: ignore[arg-type]
                    cwe, help, rl_only, scope, sources)

    return wrap


def collect(where: str | ModuleType) -> list[Rule]:
    """Every Rule defined in a module, or in each module of a package (modules whose names start
    with ``_`` hold helpers), in the order they are written: no hand-kept list."""
    import importlib

    module = importlib.import_module(where) if isinstance(where, str) else where
    modules = [module]
    if hasattr(module, "__path__"):
        for name in sorted(_module_names(list(module.__path__))):
            if not name.startswith("_"):
                modules.append(importlib.import_module(f"{module.__name__}.{name}"))
    out: list[Rule] = []
    seen: set[int] = set()
    for m in modules:
        for value in vars(m).values():
            if isinstance(value, Rule) and id(value) not in seen:
                seen.add(id(value))
                out.append(value)
    return out


def _module_names(folders: list[str]) -> set[str]:
    """The names ``pkgutil.iter_modules(folders)`` gives, read from the folders directly when they
    are all plain folders (pkgutil imports ``inspect`` for that, 10 ms of start-up); anything else
    (a zip archive, a custom importer) is pkgutil's."""
    import os
    from importlib.machinery import all_suffixes

    if not all(isinstance(f, str) and os.path.isdir(f) for f in folders):
        import pkgutil

        return {info.name for info in pkgutil.iter_modules(folders)}
    suffixes = sorted(all_suffixes(), key=len, reverse=True)

    def module_name(file: str) -> str | None:  # as inspect.getmodulename reads a file name
        return next((file[:-len(s)] for s in suffixes if file.endswith(s)), None)

    names: set[str] = set()
    for folder in folders:
        try:
            files = os.listdir(folder)
        except OSError:
            continue
        for file in files:
            name = module_name(file)
            if name is None and "." not in file and os.path.isdir(os.path.join(folder, file)):
                try:
                    inside = os.listdir(os.path.join(folder, file))
                except OSError:
                    inside = []
                name = file if any(module_name(f) == "__init__" for f in inside) else None
            if name and name != "__init__" and "." not in name:
                names.add(name)
    return names


# --- what registration checks ----------------------------------------------------------------------
RULE_ID = re.compile(r"[A-Z]{2,6}-[1-9][0-9]{0,3}")
RULE_NAME = re.compile(r"[a-z0-9]+(?:-[a-z0-9]+)*")
SCOPES = ("run", "file", "set", "not-run")
CONCEPT_NAME = later(r"[a-z][a-z0-9_]*(?:\.[a-z][a-z0-9_]*)+")
CONCEPT_TYPES = ("int", "number", "bool", "str", "list", "any")
_OPTION_TYPES = (bool, int, float, str)  # what a TOML setting can hold (and lists of them)


class RuleError(ValueError):
    """A rule's metadata is wrong: names the field, what was expected and what was found."""

    def __init__(self, field: str, expected: str, found: Any):
        super().__init__(f"field {field}: expected {expected}, found {found!r}")
        self.field = field


def validate(r: Any) -> Rule:
    """Check every field of a rule; return it with its level parsed. Raises RuleError."""
    if not isinstance(r, Rule):
        raise RuleError("(rule)", "a Rule made with @trimtab.rule", r)
    if not isinstance(r.id, str) or not RULE_ID.fullmatch(r.id):
        raise RuleError("id", "an area code of 2-6 capitals, a hyphen and a number, like BAT-3", r.id)
    if not isinstance(r.name, str) or not RULE_NAME.fullmatch(r.name):
        raise RuleError("name", "a kebab-case name like partial-mini-batch", r.name)
    try:
        level = Level.parse(r.level)
    except (ValueError, TypeError, AttributeError):
        raise RuleError("level", "one of error, warning, note", r.level) from None
    for name in ("summary", "rationale"):
        if not isinstance(getattr(r, name), str) or not getattr(r, name).strip():
            raise RuleError(name, "a non-empty text", getattr(r, name))
    if not callable(r.check):
        raise RuleError("check", "a function of the rule's context", r.check)
    if r.scope not in SCOPES:
        raise RuleError("scope", "one of " + ", ".join(SCOPES), r.scope)
    for c in r.needs:
        if c not in CONCEPTS:
            near = [k for k in CONCEPTS if k.split(".")[-1] == str(c).split(".")[-1] or
                    k.split(".")[0] == str(c).split(".")[0] and _close(k, str(c))]
            hint = f" (did you mean {', '.join(near)}?)" if near else ""
            raise RuleError("needs", f"known concepts{hint}", c)
    if not isinstance(r.options, dict):
        raise RuleError("options", "a table of option names and default values", r.options)
    for key, value in r.options.items():
        items = value if isinstance(value, list) else [value]
        if not isinstance(key, str) or not key.isidentifier() or not all(isinstance(v, _OPTION_TYPES) for v in items):
            raise RuleError(f"options.{key}", "a name and a default value of type bool, int, float, str or a "
                                             "list of them", value)
    if r.cwe is not None and (isinstance(r.cwe, bool) or not isinstance(r.cwe, int) or r.cwe <= 0):
        raise RuleError("cwe", "a CWE number like 78", r.cwe)
    if not isinstance(r.help, str):
        raise RuleError("help", "a text", r.help)
    if not isinstance(r.rl_only, bool):
        raise RuleError("rl_only", "true or false", r.rl_only)
    if not isinstance(r.sources, bool) or (r.sources and r.scope != "file"):
        raise RuleError("sources", "true or false (true only for a rule of scope file)", r.sources)
    return r if r.level is level else Rule(r.id, r.name, level, r.summary, r.rationale, r.check, r.needs, r.options, r.cwe,
                                                 r.help, r.rl_only, r.scope, r.sources)


def _close(a: str, b: str) -> bool:
    import difflib

    return difflib.SequenceMatcher(None, a, b).ratio() >= 0.85


def validate_concept(c: Any) -> Concept:
    if not isinstance(c, Concept):
        raise RuleError("(concept)", "a trimtab.common.vocabulary.Concept", c)
    if not isinstance(c.name, str) or not CONCEPT_NAME.fullmatch(c.name):
        raise RuleError("name", "a dotted lower-case name like sandbox.retries", c.name)
    if c.type not in CONCEPT_TYPES:
        raise RuleError("type", "one of " + ", ".join(CONCEPT_TYPES), c.type)
    for name in ("unit", "meaning"):
        if not isinstance(getattr(c, name), str):
            raise RuleError(name, "a text", getattr(c, name))
    if not c.meaning.strip():
        raise RuleError("meaning", "a non-empty text", c.meaning)
    known = CONCEPTS.get(c.name)
    if known is not None and known != c:
        raise RuleError("name", "a concept name not already declared otherwise", c.name)
    return c


class Context:
    """What a rule sees: the run (or, for set rules, all runs), its document, its options. One
    Context serves the rules of a scope on one run in turn (``run_rules``)."""

    def __init__(self, rule: Rule, model: RunModel | None, doc: Document | None, options: dict,
                 level: Level, runs: Iterable | None = None, settings: Any = None):
        self.rule = rule
        self.model = model
        self.doc = doc
        self.options = options
        self.level = level
        # set rules: every run's SetEntry (path, index, the values of the rule's needs), read back
        # from disk on each pass over it; a set rule keeps only what it must (see trimtab.common.spill)
        self.runs = runs if runs is not None else []
        self.settings = settings

    def finding(self, message: str, location: Location, *, related: Iterable[Location] = (),
                level: str | Level | None = None, key_path: str = "", suggestion: str = "",
                subject: Any = None, fix=None, help: str = "") -> Finding:
        if self.level != self.rule.level:
            lvl = self.level  # the user set this rule's level in settings: it applies to all its findings
        else:
            lvl = Level.parse(level) if level is not None else self.level
        return Finding(self.rule.id, lvl, message, location, self._with_chain(location, related),
                       key_path or location.key_path, suggestion, help or self.rule.help, fix, subject,
                       cwe=self.rule.cwe)

    def _with_chain(self, location: Location, related: Iterable[Location]) -> list[Location]:
        """The rule's related locations, then the origin chain (layers replaced, references, overrides)
        of every value written at the finding's primary location or at one of the rule's related ones."""
        out = list(related)
        model = self.model
        if model is None:
            return out
        # perf: the index is the run's, built once per run model rather than once per rule that reports
        # on it (it holds the run's values only: no cycle back to the model), and of the values with a
        # chain only (90 of 2,642 values in the runs with a finding over 200 files of the benchmark
        # corpus): the others' places are made only when one may hide a chain (``_unchained_at``)
        index: dict[tuple, list] | None = model.__dict__.get("_by_place")
        if index is None:
            index = {}
            # no value of this run came through a layer, reference, merge or alias: an empty index
            if model.chains or any(v.chain for v in model.values.values()):
                for v in _values(model):
                    if v.chain:
                        index.setdefault(_place_key(v.location), []).append(v)
            model.__dict__["_by_place"] = index
        if not index:
            return out
        seen = {_place_key(location)} | {_place_key(r) for r in out}
        for loc in [location] + out:
            k = _place_key(loc)
            found = index.get(k)
            if not found:
                continue
            kp = loc.key_path
            if kp:
                # of the values at that place, those with the location's key path when there are some
                same = [v for v in found if v.location.key_path == kp]
                if same:
                    found = same
                elif _unchained_at(model, k, kp):
                    continue
            for v in found:
                for hop in v.chain:
                    h = _place_key(hop)
                    if h not in seen:
                        seen.add(h)
                        out.append(hop)
        return out


def _values(model: RunModel) -> list:
    """Every value of a run: its concepts', then its reward components' fields."""
    values = list(model.values.values())
    for comp in model.components:
        values.extend(comp.fields.values())
    return values


def _unchained_at(model: RunModel, place: tuple, key_path: str) -> bool:
    """Is a value with no chain written at ``place`` under ``key_path``?"""
    for v in _values(model):
        if not v.chain and v.location.key_path == key_path and _place_key(v.location) == place:
            return True
    return False


def _place_key(loc: Location) -> tuple:
    # values given on the command line share no line: their key path tells them apart
    return (loc.path, loc.line, loc.col, loc.key_path if loc.path is None else "")


class Registry:
    """The rules and key maps of every plugin, loaded once."""

    def __init__(self, plugins: Iterable[object] = (), entry_points: bool = True):
        self.errors: list[str] = []
        self._pm: Any = None
        # the plugins registered without pluggy: only the built-in rules are installed and none is
        # given, the common case, which then never imports pluggy (nor ``inspect``; start-up)
        self._direct: list[tuple[str, object]] = []
        found = _installed_plugins() if entry_points else []
        plugins = list(plugins)
        if plugins or any(value.partition(":")[0].strip() != BUILTIN for _name, value, _load in found):
            self._pm = _plugin_manager()
        self._load_entry_points(found)
        for p in plugins:
            self.pm.register(p)
        # concepts first: a plugin's rules may need the concepts it declares
        self.concepts: dict[str, Concept] = {}
        for plugin, found in self._each("trimtab_concepts"):
            for c in found or ():
                try:
                    self.concepts[c.name] = declare(validate_concept(c))
                except RuleError as exc:
                    self.errors.append(f"plugin {plugin!r}: concept {getattr(c, 'name', c)!r}: {exc}")
        self.rules: dict[str, Rule] = {}
        for plugin, batch in self._each("trimtab_rules"):
            for r in batch or ():
                try:
                    r = validate(r)
                except RuleError as exc:
                    self.errors.append(f"plugin {plugin!r}: rule {getattr(r, 'id', r)!r}: {exc}; the rule is not "
                                       "registered")
                    continue
                if r.id in self.rules:
                    self.errors.append(f"rule id {r.id} is provided twice")
                    continue
                self.rules[r.id] = r
        self.key_maps: dict[str, dict] = {}
        for _plugin, maps in self._each("trimtab_key_maps"):
            self.key_maps.update(maps or {})

    def _each(self, hook: str) -> Iterator[tuple[str, Any]]:
        """(plugin name, result) of each implementation of a hook; a hook that raises is an error
        naming the plugin."""
        if self._pm is None:
            impls = [(name, fn) for name, plugin in reversed(self._direct)
                     for fn in [getattr(plugin, hook, None)] if _marked(fn) is not None]
        else:
            impls = [(impl.plugin_name, impl.function) for impl in
                     reversed(getattr(self._pm.hook, hook).get_hookimpls())]
        for name, fn in impls:
            try:
                yield name, fn()
            except Exception as exc:  # a broken plugin must not stop the check
                self.errors.append(f"plugin {name!r}: {hook}() failed: {type(exc).__name__}: {exc}")

    @property
    def pm(self):
        """The pluggy plugin manager, with every plugin registered (built on first use when only the
        built-in rules were loaded)."""
        if self._pm is None:
            self._pm = _plugin_manager()
            for name, plugin in self._direct:
                self._pm.register(plugin, name=name)
            self._direct = []
        return self._pm

    def _load_entry_points(self, found: list) -> None:
        for name, value, load in found:
            if any(n == name for n, _p in self._direct) or (self._pm is not None and self._pm.get_plugin(name)):
                continue
            try:
                plugin = load()
                if self._pm is None:
                    self._direct.append((name, plugin))
                else:
                    self._pm.register(plugin, name=name)
            except Exception as exc:  # a broken plugin must not stop the check
                self.errors.append(f"plugin {name!r} ({value}) failed to load: {exc}")

    def ordered(self) -> list[Rule]:
        return [self.rules[k] for k in sorted(self.rules, key=_id_key)]


# --- entry points, read once per process without importing importlib.metadata ----------------
# importlib.metadata pulls in the email package and costs 30-60 ms of a start-up budget of ~100 ms
# (measured with ``python -X importtime``; see docs/perf.md). For the common case, distributions
# installed as folders on sys.path, the entry points are a small INI file in each ``*.dist-info`` /
# ``*.egg-info`` folder (Python packaging "Entry points specification"), read here directly.
# Anything else (a zip archive on sys.path, a custom finder that supplies distributions) falls back
# to importlib.metadata, so what is found is the same either way.
_ENTRY_POINTS: dict[str, list] = {}
BUILTIN = "trimtab_rules"  # the module of the built-in rules, as their entry point names it


def _installed_plugins() -> list:
    return entry_points("trimtab")


def entry_points(group: str) -> list[tuple[str, str, Callable[[], object]]]:
    """(name, value, load) of the installed entry points of ``group``; read once per process."""
    found = _ENTRY_POINTS.get(group)
    if found is None:
        found = _ENTRY_POINTS[group] = _scan_entry_points(group)
    return found


def _plain_path_finders_only() -> bool:
    import sys
    from importlib.machinery import PathFinder

    return all(f is PathFinder or not hasattr(f, "find_distributions") for f in sys.meta_path)


def _scan_entry_points(group: str) -> list:
    import os
    import re
    import sys

    folders = [p or "." for p in sys.path]
    if not _plain_path_finders_only() or any(os.path.isfile(p) for p in folders):
        return _metadata_entry_points(group)
    out, seen_dists, header = [], set(), f"[{group}]"
    for folder in folders:
        try:
            names = sorted(os.listdir(folder))
        except OSError:
            continue
        for meta in names:
            if not meta.endswith((".dist-info", ".egg-info")):
                continue
            dist = re.sub(r"[-_.]+", "-", meta.rsplit(".", 1)[0].split("-", 1)[0]).lower()
            if dist in seen_dists:  # the first distribution of a name on sys.path wins
                continue
            seen_dists.add(dist)
            try:
                with open(os.path.join(folder, meta, "entry_points.txt"), encoding="utf-8") as fh:
                    text = fh.read()
            except OSError:
                continue
            if header not in text:
                continue
            out.extend(_parse_group(text, group))
    return out


def _parse_group(text: str, group: str) -> list:
    out, inside, names = [], False, set()
    for raw in text.splitlines():
        line = raw.strip()
        if not line or line[0] in "#;":
            continue
        if line.startswith("[") and line.endswith("]"):
            inside = line[1:-1].strip() == group
            continue
        if inside and "=" in line:
            name, _, value = line.partition("=")
            name, value = name.strip(), value.strip()
            if name not in names:
                names.add(name)
                out.append((name, value, _loader(value)))
    return out


def _loader(value: str) -> Callable[[], object]:
    def load():
        import importlib

        module, _, attr = value.partition(":")
        obj = importlib.import_module(module.strip())
        for part in attr.split("[", 1)[0].strip().split(".") if attr.strip() else ():
            obj = getattr(obj, part)
        return obj

    return load


def _metadata_entry_points(group: str) -> list:
    from importlib.metadata import entry_points as metadata_entry_points

    return [(ep.name, ep.value, ep.load) for ep in metadata_entry_points(group=group)]


def _id_key(rule_id: str):
    area, _, num = rule_id.partition("-")
    return (area, int(num) if num.isdigit() else 0, num)


def crash_finding(rule: Rule, path: str | None, exc: BaseException) -> Finding:
    import traceback  # only when a rule crashed (start-up, see docs/perf.md)

    tb = traceback.extract_tb(exc.__traceback__)
    where = f" at {tb[-1].filename.rsplit('/', 1)[-1]}:{tb[-1].lineno}" if tb else ""
    return Finding("TOOL-1", Level.ERROR,
                   f"rule {rule.id} ({rule.name}) crashed on this file: {type(exc).__name__}: {exc}{where}; "
                   "the check is incomplete",
                   Location(path), subject=rule.id, help="Report this to the rule's authors.").finish()


def run_rule(rule: Rule, ctx: Context, path: str | None) -> tuple[list[Finding], bool]:
    """(findings, crashed) of one rule (``run_rules``)."""
    found: list[Finding] = []
    crashed = run_rules([(rule, ctx.options, ctx.level, frozenset())], ctx, path, found)
    return found, crashed


def run_rules(rules: Sequence[tuple[Rule, dict, Level, AbstractSet[str]]], ctx: Context, path: str | None,
              findings: list[Finding], live: AbstractSet[str] | None = None) -> bool:
    """Run each rule of ``rules`` ((rule, options, level, needs), in order) with ``ctx``, adding its
    findings to ``findings``; True when one crashed. ``ctx`` serves the rules in turn: each is given
    it with its own rule, options and level, and runs to its end before the next (a rule must not
    keep its context). ``live`` (a run's rules: ``RunModel.live``): a rule is skipped unless every
    concept it needs is there.

    A rule that asked for a concept whose value is known only at launch (``RunModel.unknown``), or
    is written with a shape trimtab cannot use (``RunModel.unusable``), reports nothing on that run:
    its answer would rest on a guess (the run's CMP-9 note says what is unknown, VOC-2 what cannot
    be used). A rule that raises reports only that it crashed (TOOL-1).

    perf: most rule runs find nothing (1,769 of 141,758 on the 2,000-file benchmark corpus): one
    loop for the rules of a scope, with no call or Context a rule, no comprehension to gather its
    findings, and its needs one set test: the rules stage 537 to 473 million instructions over 200
    files of that corpus."""
    model = ctx.model
    guarded = model is not None and bool(model.unknown or model.unusable)
    crashed = False
    for r, opts, level, needs in rules:
        if live is not None and not needs <= live:
            continue
        ctx.rule, ctx.options, ctx.level = r, opts, level
        start = len(findings)
        try:
            if guarded:
                model.touched = set()
            out = r.check(ctx)
            if out:
                for f in out:
                    findings.append(f.finish())
                if guarded and model.touched and r.id not in ("CMP-9", "VOC-2"):
                    del findings[start:]
        except Exception as exc:
            del findings[start:]
            findings.append(crash_finding(r, path, exc))
            crashed = True
    return crashed


def iter_rules(rules: Iterable[Rule], scope: str) -> Iterator[Rule]:
    return (r for r in rules if r.scope == scope)


def _engine_rule(id: str, name: str, level: str, summary: str, rationale: str) -> Rule:
    return Rule(id, name, Level.parse(level), summary, rationale, lambda ctx: (), rl_only=False, scope="engine")


# Findings the engine and the filter raise themselves (they are not plugin rules, but they are
# documented in the catalogue and in SARIF like any rule).
TOOL_RULES = {r.id: r for r in (
    _engine_rule("TOOL-1", "rule-crashed", "error", "A rule raised an exception on this file.",
                 "The check of this file is incomplete: one rule could not finish. The exit status is 2."),
    _engine_rule("ACC-1", "acceptance-without-reason", "warning", "An acceptance comment gives no reason.",
                 "Accepting a finding is a decision a reviewer should be able to read: write "
                 "`# trimtab: accept ID -- reason`. Without a reason the acceptance accepts nothing."),
    _engine_rule("ACC-2", "acceptance-unused", "warning", "An acceptance comment matches no finding.",
                 "The finding it accepted is gone (fixed, or moved away from this line); remove the "
                 "comment so that it does not hide a future finding."),
    _engine_rule("ACC-3", "accepted-entry-stale", "note", "An accepted-findings entry no longer occurs.",
                 "The accepted-findings file should shrink as configs are fixed: remove the entry, or "
                 "regenerate the file with --write-accepted."),
    _engine_rule("ACC-4", "acceptance-malformed", "warning", "An acceptance comment names no rule id.",
                 "Write `# trimtab: accept ID[,ID...] -- reason` on the finding's line or the line above."),
)}
