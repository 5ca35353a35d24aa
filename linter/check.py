"""The check pipeline: files -> load -> compose -> resolve -> rules -> filter -> findings.

Each stage is a function of the stage before it. Workers (``--jobs``) return findings and the
few values the cross-file rules need, never documents.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from . import filtering, loader
from .compose import Composer
from .engine import Context, Registry, Rule, run_rule
from .findings import Finding, Level, Location
from .model import Value
from .resolve import ResolveOptions, resolve
from .settings import Settings, SettingsError


@dataclass
class SetEntry:
    """What one run contributes to the cross-file rules: the values they need, without nodes."""

    path: str
    index: int
    values: dict[str, Value]


@dataclass
class FileResult:
    path: str
    findings: list[Finding] = field(default_factory=list)
    runs: int = 0  # RL run configs found in the file
    skipped: bool = False  # read, but not an RL run config
    entries: list[SetEntry] = field(default_factory=list)
    crashed: bool = False
    set_accepts: bool = False  # the file has acceptance comments naming a set-scope rule
    accepted_at: set = field(default_factory=set)  # (path, line) of findings accepted in a base's text


@dataclass
class CheckOptions:
    only: set[str] = field(default_factory=set)
    skip: set[str] = field(default_factory=set)
    overrides: list[tuple[str, str]] = field(default_factory=list)  # (key path, text) from --set


class Checker:
    def __init__(self, settings: Settings, registry: Registry, options: CheckOptions | None = None):
        self.settings = settings
        self.registry = registry
        self.options = options or CheckOptions()
        self.active: list[tuple[Rule, dict, Level]] = []
        configured = settings.rules
        for rid in configured:
            if rid not in registry.rules:
                raise SettingsError(f"{settings.source}: setting {settings.name('rules.' + rid)}: expected a rule id, "
                                    f"found unknown rule {rid!r}; `trimtab rules` lists them")
        for r in registry.ordered():
            conf = dict(configured.get(r.id, {}))
            if conf.pop("off", False) or not self._wanted(r.id):
                continue
            level = Level.parse(conf.pop("level", r.level))
            unknown = sorted(set(conf) - set(r.options))
            if unknown:
                raise SettingsError(
                    f"{settings.source}: setting {settings.name('rules.' + r.id + '.' + unknown[0])}: "
                    f"expected an option of {r.id} ({', '.join(sorted(r.options)) or 'it has none'}), "
                    f"found {unknown[0]!r}")
            opts = {**r.options, **conf}
            for k, v in conf.items():
                default = r.options[k]
                if type(default) is not type(v) and not (isinstance(default, float) and isinstance(v, int)
                                                         and not isinstance(v, bool)):
                    raise SettingsError(
                        f"{settings.source}: setting {settings.name('rules.' + r.id + '.' + k)}: expected "
                        f"{type(default).__name__} like {default!r}, found {v!r}")
            self.active.append((r, opts, level))
        self.active_ids = {r.id for r, _o, _l in self.active}
        keys = dict(settings.keys)
        if settings.keymap:
            published = registry.key_maps.get(settings.keymap)
            if published is None:
                raise SettingsError(f"{settings.source}: setting {settings.name('keymap')}: expected the name of a "
                                    f"published key map ({', '.join(sorted(registry.key_maps)) or 'none installed'}), "
                                    f"found {settings.keymap!r}")
            from .settings import check_published, parse_keys

            check_published(settings.keymap, published)
            keys = {**parse_keys(published), **keys}
        self.resolve_opts = ResolveOptions(keys=keys, version=settings.yaml_version)
        self.composer = Composer(settings, self.options.overrides)

    def _wanted(self, rule_id: str) -> bool:
        area = rule_id.split("-")[0]
        only, skip = self.options.only, self.options.skip
        if only and rule_id not in only and area not in only:
            return False
        return rule_id not in skip and area not in skip

    def rules(self, scope: str):
        return [(r, o, l) for r, o, l in self.active if r.scope == scope]

    def check_file(self, path: str, shown: str) -> FileResult:
        from .discover import matches

        res = FileResult(shown)
        doc = loader.load(path, shown, self.settings.limits)
        # A file other files build on (a base declared in the settings' layers, the overrides file) is
        # checked as a file here and as part of every run built on it, not as a run of its own.
        as_run = doc.readable and shown not in self.composer.base_files
        # Compose first: composition problems are recorded on the document for the file rules.
        composed = [self.composer.compose(doc, root, path) for root in doc.roots] if as_run else []
        for r, opts, level in self.rules("file"):
            self._run(r, Context(r, None, doc, opts, level, settings=self.settings), shown, res)
        if as_run:
            force = matches(shown, self.settings.run_configs) if self.settings.run_configs else False
            opts_r = self.resolve_opts
            if force:
                opts_r = ResolveOptions(opts_r.keys, opts_r.version, True)
            set_rules = self.rules("set")
            for index, comp in enumerate(composed):
                model = resolve(doc, comp.root, opts_r, index)
                model.settings = self.settings
                model.files = comp.files
                if not model.is_rl:
                    continue
                res.runs += 1
                start = len(res.findings)
                for r, opts, level in self.rules("run"):
                    if r.rl_only and model.stage != "rl":
                        continue
                    if r.needs and not all(model.get(c) is not None for c in r.needs):
                        continue
                    self._run(r, Context(r, model, doc, opts, level, settings=self.settings), shown, res)
                if len(comp.files) > 1:
                    _name_run(res.findings[start:], shown)
                if set_rules:
                    wanted = {c for r, _o, _l in set_rules for c in r.needs}
                    values = {c: _light(model.get(c)) for c in wanted if model.get(c) is not None}
                    res.entries.append(SetEntry(shown, index, values))
        if doc.readable:
            res.skipped = res.runs == 0
        # Acceptances of set-scope rules are applied once the whole set has been checked (accept_set).
        set_ids = {r.id for r, _o, _l in self.rules("set")}
        res.findings = filtering.apply_acceptances(res.findings, doc.text, shown, self.active_ids - set_ids)
        res.set_accepts = bool(set_ids) and any(set_ids & set(a.ids) for a in filtering.acceptances(doc.text))
        for extra_path, extra_text in self.composer.texts(doc):
            before = res.findings
            res.findings = filtering.apply_acceptances(before, extra_text, extra_path, self.active_ids,
                                                       report_unused=False)
            kept = {id(f) for f in res.findings}
            res.accepted_at |= {(f.location.path, f.location.line) for f in before if id(f) not in kept}
        return res

    def _run(self, r: Rule, ctx: Context, path: str, res: FileResult) -> None:
        found, crashed = run_rule(r, ctx, path)
        res.findings.extend(found)
        res.crashed = res.crashed or crashed

    def accept_set(self, found: list[Finding], results: list[FileResult], files: list[tuple[str, str]]):
        """Apply the files' acceptance comments to the set-scope findings."""
        real = {shown: path for path, shown in files}
        set_ids = {r.id for r, _o, _l in self.rules("set")}
        by_path: dict[str, list[Finding]] = {}
        for f in found:
            by_path.setdefault(f.location.path, []).append(f)
        checked = {r.path for r in results}
        # files with acceptances of set rules, and files that were not checked themselves (the bases a
        # composed run inherits its values from)
        commented = [r.path for r in results if r.set_accepts] + sorted(p for p in by_path if p and p not in checked)
        out = [f for p, fs in by_path.items() if p not in commented for f in fs]
        for path in commented:
            doc = loader.load(real.get(path, str(self.settings.root / path)), path, self.settings.limits)
            # Unused ones are not reported: whether a set rule fires depends on which files were
            # checked together (a pre-commit run sees only the changed ones).
            out.extend(filtering.apply_acceptances(by_path.get(path, []), doc.text, path, set_ids,
                                                   report_unused=False))
        return out

    def check_set(self, entries: list[SetEntry]) -> tuple[list[Finding], bool]:
        out, crashed = [], False
        for r, opts, level in self.rules("set"):
            ctx = Context(r, None, None, opts, level, runs=entries, settings=self.settings)
            found, c = run_rule(r, ctx, None)
            out.extend(found)
            crashed = crashed or c
        return out, crashed


def _name_run(findings: list[Finding], shown: str) -> None:
    """A finding of a composed run located in another file (a base) names the run it was found in."""
    for f in findings:
        if f.location.path != shown and not any(r.path == shown and not r.line for r in f.related):
            f.related.append(Location(shown, 0, 0, message=f"in the run composed from {shown}"))


def _merge_duplicates(findings: list[Finding]) -> list[Finding]:
    """One finding per rule, place and message: a base line found through two runs is reported once,
    with the related locations of both."""
    seen: dict[tuple, Finding] = {}
    out = []
    for f in findings:
        loc = f.location
        key = (f.rule_id, loc.path, loc.line, loc.col, loc.key_path, f.message, f.fingerprint)
        first = seen.get(key)
        if first is None:
            seen[key] = f
            out.append(f)
            continue
        for r in f.related:
            if r not in first.related:
                first.related.append(r)
    return out


def _light(v: Value | None) -> Value | None:
    if v is None:
        return None
    value = v.value if isinstance(v.value, (str, int, float, bool, type(None))) else str(v.value)
    return Value(v.concept, value, v.location, None, v.via, v.key, list(v.chain), v.inputs, v.note)


# --- running over many files ------------------------------------------------------------------
_WORKER: Checker | None = None


def _work(item: tuple[str, str]) -> FileResult:
    return _WORKER.check_file(*item)


@dataclass
class RunResult:
    findings: list[Finding]
    files: int
    runs: int
    skipped: int
    crashed: bool
    checked: set[str]


def run(checker: Checker, files: list[tuple[str, str]], jobs: int = 1, progress=None) -> RunResult:
    global _WORKER
    results: list[FileResult] = []
    if jobs > 1 and len(files) > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        _WORKER = checker
        ctx = multiprocessing.get_context("fork")
        chunk = max(1, min(64, len(files) // (jobs * 8) or 1))
        with ProcessPoolExecutor(max_workers=jobs, mp_context=ctx) as pool:
            for res in pool.map(_work, files, chunksize=chunk):
                results.append(res)
                if progress:
                    progress(res)
        _WORKER = None
    else:
        for path, shown in files:
            res = checker.check_file(path, shown)
            results.append(res)
            if progress:
                progress(res)
    findings: list[Finding] = []
    entries: list[SetEntry] = []
    crashed = False
    accepted_at: set = set()
    for res in results:
        accepted_at |= res.accepted_at
    for res in results:
        if accepted_at:  # an acceptance in a base used by a run built on it is not unused
            res.findings = [f for f in res.findings if not (
                f.rule_id == filtering.ACC_UNUSED and ({(f.location.path, f.location.line),
                                                        (f.location.path, f.location.line + 1)} & accepted_at))]
        findings.extend(res.findings)
        entries.extend(res.entries)
        crashed = crashed or res.crashed
    set_findings, set_crashed = checker.check_set(entries)
    set_findings = checker.accept_set(set_findings, results, files)
    findings.extend(set_findings)
    findings = _merge_duplicates(findings)
    findings.sort(key=Finding.sort_key)
    return RunResult(findings, len(results), sum(r.runs for r in results),
                     sum(1 for r in results if r.skipped), crashed or set_crashed,
                     {r.path for r in results})


def summary_counts(findings: list[Finding]) -> dict[str, int]:
    counts = {str(l): 0 for l in (Level.ERROR, Level.WARNING, Level.NOTE)}
    for f in findings:
        counts[str(f.level)] += 1
    return counts
