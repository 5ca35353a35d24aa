"""The pipeline: one owner of every stage, from the paths asked for to the exit status.

    discover -> load -> compose -> resolve -> rules -> filter -> gate -> Outcome

``Pipeline(settings, registry).run(Request(...))`` returns an :class:`Outcome`: the findings
stream (every filter applied: acceptance comments, the accepted-findings file, ``--only`` /
``--skip``), the counts per level, the exit status, and, when the request asks for them, each
checked file's Document and run models. ``check``, ``audit``, ``explain`` and ``map`` are views of
one Outcome, so they agree by construction on which files were checked, what was accepted and
what the exit status is; no view loads a file again.
"""
from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Sequence
from itertools import chain
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .gate import filtering
from .gate.runner import CheckOptions, Checker, Kept, run, summary_counts
from .engine.registry import Registry
from .common.findings import Finding, Level, Location
from .common.settings import Settings, SettingsError
from .common.spill import Stream
from .common.record import Record

if TYPE_CHECKING:
    from .load.discover import Found

EXIT_OK, EXIT_FINDINGS, EXIT_INCOMPLETE = 0, 1, 2


class Request(Record):
    """What a command asks the pipeline for."""

    paths: list[str]  # none: the settings' include globs
    only: set[str]
    skip: set[str]
    overrides: list[tuple]  # (key path, text, added) from --set / --add
    gate: str | None  # default: the settings' gate
    accepted: str | None  # --accepted FILE (else the settings' accepted file)
    apply_accepted: bool  # False: the accepted-findings file is not read (--write-accepted)
    own_outputs: tuple[str, ...]  # files trimtab writes in this run: never checked as configs
    since: str | None  # a git ref: only files changed since it (and the runs built on them)
    jobs: int | None  # default: the settings' jobs (1 when the models are kept)
    confine: bool  # paths given must lie inside the repository (a one-off audit may look outside)
    dependants: bool  # a base among the files brings the runs built on it
    staged_files: list[tuple[str, str]] | None  # check --staged: the files, exported from the index
    staged_missing: list[str]  # check --staged: staged files refused (discover.Refused)
    keep_models: bool  # keep each file's Document and run models (audit, explain, map)
    guard: Callable[[list[tuple[str, str]]], None] | None  # sees the files found, may refuse the run
    progress: Callable[[int], Any] | None  # progress(number of files) -> a progress callback or None
    notes: Callable[[str], None] | None  # where notes about the settings go (stderr)
    cross_run: bool  # a check of some files judges them against every run of the repository
    changed: list[str] | None  # check --staged: the staged files, deleted and renamed-away ones too

    def __init__(
            self, paths: list[str] | None = None, only: set[str] | None = None, skip: set[str] | None = None,
            overrides: list[tuple] | None = None, gate: str | None = None, accepted: str | None = None,
            apply_accepted: bool = True, own_outputs: tuple[str, ...] = (), since: str | None = None,
            jobs: int | None = None, confine: bool = True, dependants: bool = True,
            staged_files: list[tuple[str, str]] | None = None, staged_missing: list[str] | None = None,
            keep_models: bool = False, guard: Callable[[list[tuple[str, str]]], None] | None = None,
            progress: Callable[[int], Any] | None = None, notes: Callable[[str], None] | None = None,
            cross_run: bool = False, changed: list[str] | None = None
    ) -> None:
        self.paths = [] if paths is None else paths
        self.only = set() if only is None else only
        self.skip = set() if skip is None else skip
        self.overrides = [] if overrides is None else overrides
        self.gate = gate
        self.accepted = accepted
        self.apply_accepted = apply_accepted
        self.own_outputs = own_outputs
        self.since = since
        self.jobs = jobs
        self.confine = confine
        self.dependants = dependants
        self.staged_files = staged_files
        self.staged_missing = [] if staged_missing is None else staged_missing
        self.keep_models = keep_models
        self.guard = guard
        self.progress = progress
        self.notes = notes
        self.cross_run = cross_run
        self.changed = changed

    # repr, equality (common/record.py)
    _fields = (
        "paths", "only", "skip", "overrides", "gate", "accepted", "apply_accepted", "own_outputs", "since",
        "jobs", "confine", "dependants", "staged_files", "staged_missing", "keep_models", "guard",
        "progress", "notes", "cross_run", "changed",
    )


class Outcome(Record):
    """The checked run, for every view."""

    settings: Settings
    registry: Registry
    files: Sequence[tuple[str, str]]  # (path on disk, path shown), in report order (discover.Found)
    missing: list[str]  # paths asked for that were not read (as discover.Refused, with the reason)
    checked: Any  # the shown paths checked (a set)
    recorded: Iterable[Finding]  # every finding before the accepted-findings file (what --write-accepted records)
    findings: Iterable[Finding]  # every filter applied: what is reported and counted
    gate: Level
    crashed: bool  # a rule crashed
    runs: int
    skipped: int
    kept: dict[str, Kept]  # shown path -> Document and run models (on request)
    accepted_in_place: int  # findings accepted by acceptance comments
    tally: dict  # what the accepted-findings file accepted (set on each pass)

    def __init__(
            self, settings: Settings, registry: Registry, files: Sequence[tuple[str, str]], missing: list[str],
            checked: Any, recorded: Iterable[Finding], findings: Iterable[Finding], gate: Level, crashed: bool,
            runs: int, skipped: int, kept: dict[str, Kept] | None = None, accepted_in_place: int = 0,
            tally: dict | None = None
    ) -> None:
        self.settings = settings
        self.registry = registry
        self.files = files
        self.missing = missing
        self.checked = checked
        self.recorded = recorded
        self.findings = findings
        self.gate = gate
        self.crashed = crashed
        self.runs = runs
        self.skipped = skipped
        self.kept = {} if kept is None else kept
        self.accepted_in_place = accepted_in_place
        self.tally = {} if tally is None else tally

    # repr, equality (common/record.py)
    _fields = (
        "settings", "registry", "files", "missing", "checked", "recorded", "findings", "gate", "crashed",
        "runs", "skipped", "kept", "accepted_in_place", "tally",
    )

    @property
    def accepted(self) -> int:
        """Findings accepted, by comments or by the accepted-findings file (after a pass over findings)."""
        return self.accepted_in_place + self.tally.get("accepted", 0)

    def at_least(self, level: str | None) -> Iterable[Finding]:
        """The findings at or above ``level`` (every finding when None): what a report shows."""
        if level is None:
            return self.findings
        least = Level.parse(level)
        return Stream(lambda: (f for f in self.findings if f.level >= least))

    def below(self, level: str | None) -> int:
        """How many findings are below ``level``: counted, not shown."""
        if level is None:
            return 0
        least = Level.parse(level)
        return sum(n for name, n in self.counts().items() if Level.parse(name) < least)

    @property
    def incomplete(self) -> bool:
        """The check could not run as asked: a rule crashed or a plugin failed to load."""
        return self.crashed or bool(self.registry.errors)

    def counts(self) -> dict[str, int]:
        c = self.__dict__.get("_counts")
        if c is None:
            c = self.__dict__["_counts"] = summary_counts(self.findings)
        return c

    @property
    def status(self) -> int:
        """0: nothing at or above the gate; 1: findings at or above it; 2: the check was incomplete."""
        if self.incomplete:
            return EXIT_INCOMPLETE
        failing = any(n and Level.parse(level) >= self.gate for level, n in self.counts().items())
        return EXIT_FINDINGS if failing else EXIT_OK

    def summary(self) -> dict:
        return {"files": len(self.files), "runs": self.runs, "skipped": self.skipped, "by_level": self.counts()}

    def models(self, shown: str) -> list:
        """The run models of one checked file (kept on request), one per YAML document."""
        kept = self.kept.get(shown)
        return kept.models if kept is not None else []

    def doc(self, shown: str):
        """The Document of a checked file, or of a file a run was composed from (kept on request)."""
        kept = self.kept.get(shown)
        if kept is not None:
            return kept.doc
        for k in self.kept.values():
            if shown in k.doc.sources:
                return k.doc.sources[shown]
        # a file a run names that the composer did not read: through the composer's cache of bases
        from .compose.layers import load_source

        disk = Path(shown) if Path(shown).is_absolute() else self.settings.root / shown
        return load_source(disk, shown, self.settings.limits)


class Pipeline:
    def __init__(self, settings: Settings, registry: Registry):
        self.settings = settings
        self.registry = registry
        self._repository_files: Found | None = None
        self._graph = None

    # --- discover --------------------------------------------------------------------------------
    def discover(self, req: Request) -> tuple[Found, list[str]]:
        from .load.discover import changed_since, discover

        settings = self.settings
        if req.staged_files is not None:
            files, missing = list(req.staged_files), list(req.staged_missing)
        else:
            used: set[str] = set()
            files, missing = discover(req.paths, settings.root, settings.include, settings.exclude, used,
                                      confine=req.confine)
            for idle in settings.check_include(used, bool(req.paths)):
                if req.notes:
                    req.notes(f"setting {idle} matches no file")
        found = list(files)  # every file found, before --since narrows them: none is ever written to
        files = self._not_own_outputs(files, req)
        changed = set(req.changed) if req.changed is not None else None
        if req.since:
            try:
                changed = set(changed_since(req.since, settings.root))
            except ValueError as exc:
                raise SettingsError(str(exc)) from None
            files = [(p, s) for p, s in files if s in changed]
        if req.dependants:
            files = self._with_dependants(req, files, changed)
        if req.guard is not None:
            # after every file to check is known (the runs built on a base among them): a report
            # or accepted-findings file never overwrites a checked config
            req.guard(found + list(files))
        del found
        # perf: the list is kept for the whole run: held lean (the repository's list shares its paths)
        from .load.discover import Found

        return Found(files, share=self._shared()), missing

    def _shared(self) -> dict[str, str] | None:
        """The repository's shown paths, by themselves: another list of this check keeps them once."""
        if self._repository_files is None:
            return None
        return {s: s for s in self._repository_files.shown()}

    def _not_own_outputs(self, files, req: Request):
        """The accepted-findings file and the reports are trimtab's own output, not configs."""
        own = [p for p in (req.accepted, *req.own_outputs) if p]
        if self.settings.accepted:
            own.append(str(self.settings.path("accepted")))
        if not own:
            return files
        skip = {Path(p).resolve() for p in own}
        return [(p, s) for p, s in files if Path(p).resolve() not in skip]

    def repository_files(self) -> Found:
        """Every file of the repository discovery finds under the settings (once per pipeline): the
        search for a changed base's dependants and the other runs of a check of some files read it.
        perf: kept for the whole run, so held lean (discover.Found: the shown paths, and the paths on
        disk made from the root's when they are read)."""
        if self._repository_files is None:
            import os

            from .load.discover import Found, discover

            root = self.settings.root.resolve()
            files, _missing = discover([], root, self.settings.include, self.settings.exclude)
            self._repository_files = Found(files, prefix=os.path.join(str(root), ""))
        return self._repository_files

    def base_graph(self):
        """Which files of the repository build on which (compose.BaseGraph), once per pipeline."""
        if self._graph is None:
            from .compose.layers import BaseGraph

            self._graph = BaseGraph(self.settings, self.repository_files())
        return self._graph

    def _with_dependants(self, req: Request, files, changed):
        """A base among the files to check (given, or changed since a ref) brings the files built on it."""
        if not (req.paths or changed is not None):
            return files  # the whole repository is checked anyway
        from .load.discover import relpath

        seeds = set(changed or ()) | {s for _p, s in files}
        seeds |= {relpath(Path(p), self.settings.root.resolve()) for p in req.paths if Path(p).is_file()}
        graph = self.base_graph()
        try:
            return graph.dependants(files, seeds)
        finally:
            graph.save()

    # --- load, compose, resolve, rules, filter, gate ----------------------------------------------
    def run(self, req: Request, files: tuple[Sequence[tuple[str, str]], list[str]] | None = None) -> Outcome:
        """The Outcome of the request; ``files``: (files, missing) already discovered."""
        from .common import startup

        startup.resume()  # the command paused the collector for its start-up (common/startup.py)
        settings = self.settings
        files_, missing = files if files is not None else self.discover(req)
        checker = Checker(settings, self.registry, CheckOptions(req.only, req.skip, list(req.overrides)))
        if self._graph is not None:  # the dependant search's, shared (compose.layers.Composer.named_as_base)
            checker.composer.graph = self._graph
        # a number of workers from the settings (which the repository writes) is capped at the
        # machine's processors; one given on the command line is the user's own choice
        jobs = req.jobs if req.jobs is not None else min(settings.jobs, _cores())
        if jobs < 1:
            raise SettingsError(f"--jobs {jobs}: expected a number of at least 1")
        if req.keep_models:
            jobs = 1  # Documents and models stay in this process
        progress = req.progress(len(files_)) if req.progress else None
        try:
            result = run(checker, files_, jobs, progress, keep=req.keep_models, others=self._others(req, checker))
        finally:
            if progress is not None:
                progress.close()
            if checker.composer.graph is not None:
                checker.composer.graph.save()
        # Findings are a Stream: each pass reads them again from the run's spill (perf: a check of
        # thousands of files never holds them all), so each step below wraps the one before.
        unreadable = [Finding("YML-6", Level.ERROR, getattr(m, "reason", "cannot be read: no such file or folder"),
                              Location(m), subject=m).finish() for m in reversed(missing)]
        checked_findings = result.findings
        recorded: Iterable[Finding] = Stream(lambda: chain(unreadable, checked_findings))
        tally: dict = {}
        findings = self._accepted_filter(req, recorded, result.checked, tally)
        return Outcome(settings, self.registry, files_, missing, result.checked, recorded, findings,
                       Level.parse(req.gate or settings.gate), result.crashed, result.runs, result.skipped,
                       result.kept, result.accepted, tally)

    def _others(self, req: Request, checker):
        """For a check of some files only (paths given, --since, --staged): the other runs of the
        repository, for the rules over several runs (linter/gate/context.py)."""
        partial = bool(req.paths) or req.since is not None or req.staged_files is not None
        if not (req.cross_run and partial and checker.rules("set")):
            return None
        from .gate.context import other_entries

        source = self.settings.source
        start = Path(source).resolve().parent if source else Path.cwd()
        return lambda checked: other_entries(checker, checked, start, self.repository_files())

    def _accepted_filter(self, req: Request, findings: Iterable[Finding], checked, tally: dict) -> Iterable[Finding]:
        settings = self.settings
        accepted_path = req.accepted or settings.accepted
        if not accepted_path or not req.apply_accepted:
            return findings
        # from the command line: the user's own file; from the settings: confined to the repository
        path = Path(req.accepted) if req.accepted else settings.path("accepted")
        try:
            rows = filtering.read_accepted(path)
        except filtering.AcceptedFileError as exc:
            raise SettingsError(str(exc)) from None
        from .common.paths import confined

        # an entry naming a file outside the repository is gone: nothing outside is even looked at
        gone = {str(r.get("file")) for r in rows
                if (real := confined(settings.root / str(r.get("file")), settings.root)) is None or not real.exists()}
        known = checked | gone

        def accepted() -> Iterator[Finding]:
            return filtering.apply_accepted(findings, rows, str(accepted_path), known, tally)

        return Stream(accepted)


def _cores() -> int:
    """The processors this process may run on."""
    import os

    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)
