"""The check pipeline: files -> load -> compose -> resolve -> rules -> filter -> findings.

Each stage is a function of the stage before it. Workers (``--jobs``) return findings and the
few values the cross-file rules need, never documents.
"""
from __future__ import annotations

import gc
from bisect import bisect_left
from collections.abc import Iterable, Iterator, Sequence
from collections.abc import Set as AbcSet
from itertools import groupby, islice
from typing import Any

from . import filtering
from ..common import spill
from ..compose.layers import Composer
from ..compose.sources import load, runs_of
from ..engine.registry import Context, Registry, Rule, run_rule, run_rules
from ..common.findings import Finding, Level, Location
from ..resolve import arithmetic
from ..resolve.model import Value
from ..resolve.concepts import ResolveOptions, resolve
from ..common.settings import Settings, SettingsError
from ..common.record import Record
from ..load.discover import matches


class SetEntry(Record):
    """What one run contributes to the cross-file rules: the values they need, without nodes."""

    path: str
    index: int
    values: dict[str, Value]

    def __init__(self, path: str, index: int, values: dict[str, Value]) -> None:
        self.path = path
        self.index = index
        self.values = values

    _fields = ("path", "index", "values")  # repr, equality (common/record.py)


class Kept(Record):
    """A checked file's Document and every run model of it (RL or not), kept on request."""

    doc: Any
    models: list

    def __init__(self, doc: Any, models: list | None = None) -> None:
        self.doc = doc
        self.models = [] if models is None else models

    _fields = ("doc", "models")  # repr, equality (common/record.py)


class FileResult(Record):
    path: str
    findings: list[Finding]
    runs: int  # RL run configs found in the file
    skipped: bool  # read, but not an RL run config
    entries: list[SetEntry]
    crashed: bool
    set_accepts: str | None  # the file's text, when it has acceptance comments naming a set-scope rule
    accepted_at: set  # (path, line) of findings accepted in a base's text
    accepted: int  # findings dropped by acceptance comments
    kept: Kept | None  # on request: the Document and its run models

    def __init__(
            self, path: str, findings: list[Finding] | None = None, runs: int = 0, skipped: bool = False,
            entries: list[SetEntry] | None = None, crashed: bool = False, set_accepts: str | None = None,
            accepted_at: set | None = None, accepted: int = 0, kept: Kept | None = None
    ) -> None:
        self.path = path
        self.findings = [] if findings is None else findings
        self.runs = runs
        self.skipped = skipped
        self.entries = [] if entries is None else entries
        self.crashed = crashed
        self.set_accepts = set_accepts
        self.accepted_at = set() if accepted_at is None else accepted_at
        self.accepted = accepted
        self.kept = kept

    # repr, equality (common/record.py)
    _fields = (
        "path", "findings", "runs", "skipped", "entries", "crashed", "set_accepts", "accepted_at",
        "accepted", "kept",
    )


class CheckOptions(Record):
    only: set[str]
    skip: set[str]
    overrides: list[tuple]  # (key path, text, added) from --set / --add

    def __init__(
            self, only: set[str] | None = None, skip: set[str] | None = None, overrides: list[tuple] | None = None
    ) -> None:
        self.only = set() if only is None else only
        self.skip = set() if skip is None else skip
        self.overrides = [] if overrides is None else overrides

    _fields = ("only", "skip", "overrides")  # repr, equality (common/record.py)


class Checker:
    def __init__(self, settings: Settings, registry: Registry, options: CheckOptions | None = None):
        self.settings = settings
        self.registry = registry
        self.options = options or CheckOptions()
        self.active: list[tuple[Rule, dict, Level]] = []
        _known_ids(registry, self.options)
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
            from ..common.settings import check_published, parse_keys

            check_published(settings.keymap, published)
            keys = {**parse_keys(published), **keys}
        self.resolve_opts = ResolveOptions(keys=keys, version=settings.yaml_version,
                                           readers=tuple(settings.readers.items()), stated=settings.yaml_version_set)
        self.composer = Composer(settings, self.options.overrides)

    def _wanted(self, rule_id: str) -> bool:
        area = rule_id.split("-")[0]
        only, skip = self.options.only, self.options.skip
        if only and rule_id not in only and area not in only:
            return False
        return rule_id not in skip and area not in skip

    def rules(self, scope: str):
        # perf: computed once per scope, not once per file (the rule list is fixed after __init__;
        # a changed self.active is noticed by its length)
        cache = self.__dict__.setdefault("_by_scope", {})
        hit = cache.get(scope)
        if hit is None or hit[0] != len(self.active):
            hit = cache[scope] = (len(self.active), [(r, o, l) for r, o, l in self.active if r.scope == scope])
        return hit[1]

    def _plan(self, scope: str, rl_stage: bool | None = None, sources: bool = False) -> list:
        """The rules of a scope as ``_run`` takes them: (rule, options, level, needs as a set); for a run
        that is not an RL stage (``rl_stage`` False), without the RL-only ones; ``sources``: only those
        that also run on the other files a run is composed from. Computed once per check, as ``rules``."""
        cache = self.__dict__.setdefault("_plans", {})
        key = (scope, rl_stage, sources)
        hit = cache.get(key)
        if hit is None or hit[0] != len(self.active):
            hit = cache[key] = (len(self.active), [
                (r, o, l, frozenset(r.needs)) for r, o, l in self.rules(scope)
                if not (rl_stage is False and r.rl_only) and (r.sources or not sources)])
        return hit[1]

    def check_file(self, path: str, shown: str, keep: bool = False) -> FileResult:
        """Load, compose, resolve and run the rules on one file. ``keep``: keep its Document and
        run models in the result (for the views that show them).

        perf: the cyclic collector is paused for the whole file. A file's check makes thousands of
        objects that live as long as the check (its tree, its run models): each collection while it
        runs would scan them all again for nothing. What a check leaves for the collector (no cycle of
        its own: see arithmetic.release) is collected by the first collection after it."""
        paused = gc.isenabled()
        gc.disable()
        try:
            return self._check_file(path, shown, keep)
        finally:
            if paused:
                gc.enable()

    def _check_file(self, path: str, shown: str, keep: bool) -> FileResult:
        res = FileResult(shown)
        doc = load(path, shown, self.settings)
        if keep:
            res.kept = Kept(doc)
        # A file other files build on (a base declared in the settings' layers, the overrides file) is
        # checked as a file here and as part of every run built on it, not as a run of its own.
        as_run = doc.readable and shown not in self.composer.base_files
        # Compose first: composition problems are recorded on the document for the file rules.
        composed = [self.composer.compose(doc, root, path) for root in runs_of(doc)] if as_run else []
        self._run(self._plan("file"), None, doc, shown, res)
        # File rules that cover every file a run is composed from (SEC-1): its bases, the overrides
        # file and the settings' layers, each once, reporting in that file (a finding there that the
        # file's own check also gives is merged with it, see _merge_duplicates).
        for src in list(doc.sources.values()) if as_run else ():
            if src.path == shown:
                continue
            self._run(self._plan("file", sources=True), None, src, src.path, res)
        if as_run:
            set_rules = self.rules("set")
            models = []
            for index, comp in enumerate(composed):
                model = self._resolve(doc, comp, shown, index)
                models.append(model)
                if keep:
                    res.kept.models.append(model)
                if not model.is_rl:
                    # a document not read as a run: the rules about such documents (VOC-4), unless
                    # other files name it as a base (it is checked as part of the runs built on it)
                    start = len(res.findings)
                    self._run(self._plan("not-run"), model, doc, shown, res)
                    if len(res.findings) > start and self.composer.named_as_base(shown):
                        del res.findings[start:]  # a base: checked as part of the runs built on it
                    continue
                res.runs += 1
                start = len(res.findings)
                rl_stage = model.stage == "rl"
                self._run(self._plan("run", rl_stage), model, doc, shown, res, rl_stage)
                if len(comp.files) > 1:
                    _name_run(res.findings[start:], shown)
                if set_rules:
                    res.entries.append(SetEntry(shown, index, self.set_values(model)))
            if not keep:
                for model in models:
                    arithmetic.release(model)  # perf: no cycle left for the collector to find
        if doc.readable:
            res.skipped = res.runs == 0
        # Acceptances of set-scope rules are applied once the whole set has been checked (accept_set).
        set_ids = {r.id for r, _o, _l in self.rules("set")}
        before = res.findings
        res.findings = filtering.apply_acceptances(before, doc.text, shown, self.active_ids - set_ids)
        res.accepted += _dropped(before, res.findings)
        if set_ids and any(set_ids & set(a.ids) for a in filtering.acceptances(doc.text)):
            res.set_accepts = doc.text
        for extra_path, extra_text in self.composer.texts(doc):
            before = res.findings
            res.findings = filtering.apply_acceptances(before, extra_text, extra_path, self.active_ids,
                                                       report_unused=False)
            kept = {id(f) for f in res.findings}
            res.accepted_at |= {(f.location.path, f.location.line) for f in before if id(f) not in kept}
            res.accepted += _dropped(before, res.findings)
        return res

    def _resolve(self, doc, comp, shown: str, index: int):
        """The RunModel of one composed document (a file named in the settings' run_configs is a run)."""
        opts_r = self.resolve_opts
        if self.settings.run_configs and matches(shown, self.settings.run_configs):
            opts_r = ResolveOptions(opts_r.keys, opts_r.version, True, opts_r.readers, opts_r.stated)
        model = resolve(doc, comp.root, opts_r, index)
        model.settings = self.settings
        model.files = comp.files
        return model

    def set_values(self, model) -> dict[str, Value]:
        """What the rules over several runs need of one run: their concepts' values, without nodes."""
        wanted = {c for r, _o, _l in self.rules("set") for c in r.needs}
        return {c: _light(model.get(c)) for c in wanted if model.get(c) is not None}

    def other_runs(self, path: str, shown: str) -> tuple[list[tuple[int, dict[str, Value]]], list[str], bool]:
        """What the rules over several runs need of a file that is not checked itself (another run
        of the repository, linter/gate/context.py): (index, values) of each of its runs, the other files
        they were composed from, and whether that is uncertain (the file could not be read, or a
        base is missing: not to be kept in a cache)."""
        doc = load(path, shown, self.settings)
        if not doc.readable or shown in self.composer.base_files:
            # a file that cannot be parsed stays so while its content is the same; one that could
            # not be read (or changed while it was read) is not known yet
            return [], [], any(p.kind == "io" for p in doc.problems)
        runs, files = [], set()
        for index, root in enumerate(runs_of(doc)):
            comp = self.composer.compose(doc, root, path)
            files.update(comp.files)
            model = self._resolve(doc, comp, shown, index)
            if model.is_rl:
                runs.append((index, self.set_values(model)))
        unsure = any(str(getattr(p, "kind", "")).startswith("compose-") for p in doc.problems)
        return runs, sorted(files - {shown}), unsure

    def _run(self, rules: list, model, doc, path: str, res: FileResult, rl_stage: bool | None = None) -> None:
        """Run ``rules`` (``_plan``'s) on one document, or on one run of it (``model``), adding their
        findings to ``res``. ``rl_stage`` (the rules of a run: is it an RL stage?): a rule is then run
        only when the run has every concept it needs.

        perf: one call for the rules of a scope, not one a rule (~142,000 rule runs on the 2,000-file
        benchmark corpus), with one Context for them all (engine.run_rules)."""
        if not rules:
            return
        r, opts, level, _needs = rules[0]
        ctx = Context(r, model, doc, opts, level, None, self.settings)
        if run_rules(rules, ctx, path, res.findings, model.live() if rl_stage is not None else None):
            res.crashed = True

    def accept_set(self, found: list[Finding], checked, set_accepts: dict[str, str], files: Sequence[tuple[str, str]]):
        """Apply the files' acceptance comments to the set-scope findings. ``checked``: the paths
        checked; ``set_accepts``: the text of those holding acceptances of set rules, by path."""
        from ..compose.layers import load_source

        real = {shown: path for path, shown in files}
        set_ids = {r.id for r, _o, _l in self.rules("set")}
        by_path: dict[str, list[Finding]] = {}
        for f in found:
            by_path.setdefault(f.location.path, []).append(f)
        # files with acceptances of set rules, and files that were not checked themselves (the bases a
        # composed run inherits its values from)
        commented = list(set_accepts) + sorted(p for p in by_path if p and p not in checked)
        out = [f for p, fs in by_path.items() if p not in commented for f in fs]
        for path in commented:
            # the text kept by the check of the file; a base's from the composer's cache
            text = set_accepts.get(path)
            if text is None:
                from pathlib import Path

                text = load_source(Path(real.get(path, str(self.settings.root / path))), path,
                                   self.settings.limits).text
            # Unused ones are not reported: whether a set rule fires depends on which files were
            # checked together (a pre-commit run sees only the changed ones).
            out.extend(filtering.apply_acceptances(by_path.get(path, []), text, path, set_ids,
                                                   report_unused=False))
        return out

    def check_set(self, entries: Iterable[SetEntry]) -> tuple[list[Finding], bool]:
        out, crashed = [], False
        for r, opts, level in self.rules("set"):
            ctx = Context(r, None, None, opts, level, runs=entries, settings=self.settings)
            found, c = run_rule(r, ctx, None)
            out.extend(found)
            crashed = crashed or c
        return out, crashed


def _known_ids(registry: Registry, options: CheckOptions) -> None:
    """--only and --skip name rule ids or areas that exist: a typo would check nothing (or skip
    nothing) and pass the gate, so it stops the check with the nearest known ids."""
    from ..engine.registry import TOOL_RULES

    ids = set(registry.rules) | set(TOOL_RULES)
    known = ids | {i.split("-")[0] for i in ids}
    for option, given in (("--only", options.only), ("--skip", options.skip)):
        for name in sorted(set(given) - known):
            import difflib  # only for a name that is not known (start-up)

            near = difflib.get_close_matches(name, sorted(known), n=3, cutoff=0.5)
            hint = f" (did you mean {', '.join(near)}?)" if near else ""
            raise SettingsError(f"{option} {name}: expected a rule id or area, found unknown {name!r}{hint}; "
                                "`trimtab rules` lists them")


def _dropped(before: list[Finding], after: list[Finding]) -> int:
    """How many findings of ``before`` an acceptance removed (``after`` may add ACC findings)."""
    kept = {id(f) for f in after}
    return sum(1 for f in before if id(f) not in kept)


def _name_run(findings: list[Finding], shown: str) -> None:
    """A finding of a composed run located in another file (a base) names the run it was found in."""
    for f in findings:
        if f.location.path != shown and not any(r.path == shown and not r.line for r in f.related):
            f.related.append(Location(shown, 0, 0, message=f"in the run composed from {shown}"))


def _merge_duplicates(findings: Iterable[Finding]) -> list[Finding]:
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


_CHUNK_MAX = 16  # files handed to a worker at once, at most


def _work(items: list[tuple[str, str]]) -> tuple[list[FileResult], list[str]]:
    """A worker's part: check a chunk of files (the Checker is the parent's, inherited by fork).
    With the results go the credentials the worker read, so that the parent masks them too in what
    it writes itself (the findings of the rules over several runs)."""
    from ..common import redact

    redact.learned()  # from now on, in this worker
    check = _WORKER.check_file
    done = [check(path, shown) for path, shown in items]
    return done, redact.learned()


def _chunks(files: Sequence[tuple[str, str]], start: int, jobs: int) -> Iterator[list[tuple[str, str]]]:
    """The files from ``start`` on, in order, in chunks that shrink as the end nears: each a
    quarter of a worker's share of what is left, at most _CHUNK_MAX files (perf: a worker asks
    for the next chunk when it is done, so no worker waits long for another at the end, and few
    chunks travel while many files are left)."""
    i, n = start, len(files)
    while i < n:
        size = max(1, min(_CHUNK_MAX, (n - i) // (jobs * 4)))
        yield list(files[i:i + size])
        i += size


def _run_parallel(checker: Checker, files: Sequence[tuple[str, str]], jobs: int, results: "_Totals") -> None:
    """Check the files in ``jobs`` forked worker processes; the results arrive in the files' order.

    perf: the parent checks the first file itself before forking: the modules a check imports on
    first use and the per-process caches it fills are then inherited by every worker, not made
    again in each. While the workers run, the parent only hands out chunks and files the results
    (a few in flight per worker, so the parent holds a bounded number)."""
    global _WORKER
    import multiprocessing
    from collections import deque
    from concurrent.futures import ProcessPoolExecutor

    from ..common import redact

    gc.freeze()
    try:
        results.append(checker.check_file(*files[0]))
    finally:
        gc.unfreeze()
    if len(files) == 1:
        return
    _WORKER = checker
    # perf: what the workers inherit is never collected there: without this, every worker's
    # collector rescans (and copy-on-write duplicates) the parent's objects
    gc.freeze()
    try:
        with ProcessPoolExecutor(max_workers=jobs, mp_context=multiprocessing.get_context("fork")) as pool:
            chunks = _chunks(files, 1, jobs)
            pending = deque(pool.submit(_work, c) for c in islice(chunks, jobs * 3))
            while pending:
                done, credentials = pending.popleft().result()
                redact.remember(credentials)
                following = next(chunks, None)
                if following is not None:
                    pending.append(pool.submit(_work, following))
                for res in done:
                    results.append(res)
    finally:
        gc.unfreeze()
        _WORKER = None


class RunResult(Record):
    findings: Iterable[Finding]  # re-iterable, in report order (read back from a Spill on each pass)
    files: int
    runs: int
    skipped: int
    crashed: bool
    checked: set[str]
    kept: dict  # shown path -> Kept (on request)
    accepted: int  # findings accepted by comments in the files

    def __init__(
            self, findings: Iterable[Finding], files: int, runs: int, skipped: int, crashed: bool,
            checked: set[str], kept: dict | None = None, accepted: int = 0
    ) -> None:
        self.findings = findings
        self.files = files
        self.runs = runs
        self.skipped = skipped
        self.crashed = crashed
        self.checked = checked
        self.kept = {} if kept is None else kept
        self.accepted = accepted

    # repr, equality (common/record.py)
    _fields = (
        "findings", "files", "runs", "skipped", "crashed", "checked", "kept", "accepted",
    )


class _Checked(AbcSet):
    """The shown paths of the checked files (perf: a set of thousands of paths costs several times
    their list). The files arrive in the order they were found, sorted: while they do, a path is
    looked up by bisection in the list itself; a set is built only when they do not, when first
    asked."""

    def __init__(self) -> None:
        self.paths: list[str] = []
        self._sorted = True  # no path added before a greater or equal one
        self._set: set[str] | None = None

    def add(self, path: str) -> None:
        paths = self.paths
        if paths and self._sorted and not paths[-1] < path:
            self._sorted = False
        paths.append(path)
        self._set = None

    def _as_set(self) -> set[str]:
        if self._set is None:
            self._set = set(self.paths)
        return self._set

    def __contains__(self, path) -> bool:
        if self._sorted:
            if not isinstance(path, str):
                return False
            i = bisect_left(self.paths, path)
            return i < len(self.paths) and self.paths[i] == path
        return path in self._as_set()

    def __iter__(self):
        return iter(self.paths) if self._sorted else iter(self._as_set())

    def __len__(self) -> int:
        return len(self.paths) if self._sorted else len(self._as_set())

    @classmethod
    def _from_iterable(cls, it):  # the result of |, &, -: a plain set
        return set(it)


class _Totals:
    """What run() keeps of each file's result (perf: the FileResults are dropped as they arrive,
    and their findings and set-rule values go to Spills, so memory does not grow with the number
    of files or findings)."""

    def __init__(self, progress=None):
        self.findings = spill.Spill(key=Finding.sort_key)  # Finding, in report order
        self.entries = spill.Spill()  # SetEntry, in arrival order
        self.files = self.runs = self.skipped = 0
        self.crashed = False
        self.checked = _Checked()
        self.accepted_at: set = set()
        self.set_accepts: dict[str, str] = {}  # text of the files with acceptance comments of set rules
        self.kept: dict[str, Kept] = {}
        self.accepted = 0
        self.progress = progress

    def append(self, res: FileResult) -> None:
        self.findings.extend(res.findings)
        self.entries.extend(res.entries)
        self.files += 1
        self.runs += res.runs
        self.skipped += res.skipped
        self.crashed = self.crashed or res.crashed
        self.checked.add(res.path)
        self.accepted_at |= res.accepted_at
        self.accepted += res.accepted
        if res.set_accepts is not None:
            self.set_accepts[res.path] = res.set_accepts
        if res.kept is not None:
            self.kept[res.path] = res.kept
        if self.progress:
            self.progress(res)


def run(checker: Checker, files: Sequence[tuple[str, str]], jobs: int = 1, progress=None,
        keep: bool = False, others=None) -> RunResult:
    """Check the files. The result's findings are in report order, read again from a Spill on
    each pass over them. ``keep``: keep each file's Document and run models (one process).
    ``others(checked)``: the SetEntries of the repository's other runs, for a check of some files
    only; the rules over several runs then judge the files against them, and only their findings
    about a checked file are reported."""
    results = _Totals(progress)
    if jobs > 1 and len(files) > 1 and not keep:
        _run_parallel(checker, files, jobs, results)
    else:
        # perf: what exists before the first file (modules, rules, settings) lives as long as the
        # process: the collector need not scan it again at every full collection
        gc.freeze()
        try:
            for path, shown in files:
                results.append(checker.check_file(path, shown, keep))
        finally:
            gc.unfreeze()
    if others is not None and checker.rules("set"):
        results.entries.extend(others(results.checked))
    set_findings, set_crashed = checker.check_set(results.entries)
    results.entries.close()
    if others is not None:
        set_findings = [f for f in set_findings if _involves(f, results.checked)]
    # set findings arrive after every file's, as before: ties in the sorted stream keep that order
    set_kept = checker.accept_set(set_findings, results.checked, results.set_accepts, files)
    results.findings.extend(set_kept)
    stream = spill.Stream(lambda: _reported(results.findings, results.accepted_at))
    return RunResult(stream, results.files, results.runs, results.skipped, results.crashed or set_crashed,
                     results.checked, results.kept, results.accepted + _dropped(set_findings, set_kept))


def _involves(f: Finding, checked) -> bool:
    """Is a finding of a rule over several runs about a checked file (written there, or about a
    run composed from it)? A crashed rule always is."""
    if f.rule_id.startswith("TOOL-") or f.location.path in checked:
        return True
    return any(not r.line and r.path in checked for r in f.related)


def _reported(findings: spill.Spill, accepted_at: set) -> Iterator[Finding]:
    """The spilled findings in report order: sorted (stably), an unused-acceptance finding dropped
    where a run built on that base used the acceptance, and duplicates merged. Duplicates share a
    sort key, so merging within each run of equal keys is merging over the whole stream."""
    for _key, found in groupby(findings, key=Finding.sort_key):
        group: Iterable[Finding] = found
        if accepted_at:
            group = [f for f in group if not (f.rule_id == filtering.ACC_UNUSED and (
                {(f.location.path, f.location.line), (f.location.path, f.location.line + 1)} & accepted_at))]
        yield from _merge_duplicates(group)


def summary_counts(findings: Iterable[Finding]) -> dict[str, int]:
    counts = {str(l): 0 for l in (Level.ERROR, Level.WARNING, Level.NOTE)}
    for f in findings:
        counts[str(f.level)] += 1
    return counts
