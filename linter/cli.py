"""Command line: ``trimtab check | explain | rules``.

Exit status: 0 nothing at or above the gate level; 1 findings at or above it; 2 the check could
not run as asked (bad arguments or settings, a rule crashed, a plugin failed to load).
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from .common.redact import for_text  # every message that shows a file's text: masked, controls made visible

EXIT_OK, EXIT_FINDINGS, EXIT_INCOMPLETE = 0, 1, 2


class _Declaring(argparse.HelpFormatter):
    """argparse's formatter while options are declared, where argparse only checks each option's
    metavar with it: a fixed width, so that the terminal is not measured (that imports shutil:
    start-up). Usage and help are laid out by argparse's own formatter (``_Parser._laid_out``)."""

    def __init__(self, prog, indent_increment=2, max_help_position=24, width=None):
        super().__init__(prog, indent_increment, max_help_position, 78 if width is None else width)


class _Parser(argparse.ArgumentParser):
    def __init__(self, *args, **kwargs):
        kwargs.setdefault("formatter_class", _Declaring)
        super().__init__(*args, **kwargs)

    def format_usage(self):
        return self._laid_out(super().format_usage)

    def format_help(self):
        return self._laid_out(super().format_help)

    def _laid_out(self, layout):
        """Usage or help laid out by argparse's formatter at the terminal's width."""
        declaring = self.formatter_class
        if declaring is _Declaring:
            self.formatter_class = argparse.HelpFormatter
        try:
            return layout()
        finally:
            self.formatter_class = declaring

    def error(self, message):  # argparse exits 2 on bad arguments: keep that, say it plainly
        self.print_usage(sys.stderr)
        self.exit(EXIT_INCOMPLETE, f"trimtab: error: {message}\n")


def _ids(text: str) -> set[str]:
    return {t.strip().upper() for t in text.split(",") if t.strip()}


class _Added(str):
    """A --add KEY=VALUE: an override that adds a key no layer has, on purpose."""


_SET_HELP = ("override a value of the run; VALUE is read as YAML 1.2 reads it, whatever the files' "
             "yaml_version (repeatable); a key that no layer has is an error (CMP-8)")
_ADD_HELP = "add a key that no layer of the run has, read like --set (repeatable)"


def _set_options(parser) -> None:
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", dest="overrides",
                        help=_SET_HELP)
    parser.add_argument("--add", action="append", metavar="KEY=VALUE", dest="overrides", type=_Added,
                        help=_ADD_HELP)


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The command line. Given ``command``, only that command's options are declared (start-up:
    declaring every command's options costs more than a one-file check's own work); every command
    is still named, with its help line, so usage and ``--help`` read the same."""
    p = _Parser(prog="trimtab", description="Static checker for RL fine-tuning run configurations.")
    from . import __version__

    p.add_argument("--version", action="version", version=f"trimtab {__version__}")
    p.add_argument("--settings", metavar="FILE", help="settings file (default: trimtab.toml or pyproject.toml "
                                                      "found by walking up from the working directory)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser,
                           prog=p.prog)  # the usage argparse would build (no positional before it)
    for name, (help_, options) in _COMMANDS.items():
        parser = sub.add_parser(name, help=help_)
        if command is None or command == name:
            options(parser)
    return p


def _check_options(c) -> None:
    c.add_argument("paths", nargs="*", metavar="PATH", help="files or folders (default: the include globs)")
    c.add_argument("--format", choices=("text", "json", "sarif"), default="text",
                   help="report format: text for people, JSON (linter/report/report.schema.json) or SARIF 2.1.0 "
                        "(default: text)")
    c.add_argument("--output", metavar="FILE", help="write the report here instead of standard output")
    c.add_argument("--gate", choices=("error", "warning", "note"),
                   help="lowest level that makes the exit status 1 (default: settings, else warning)")
    c.add_argument("--show", choices=("error", "warning", "note"),
                   help="report only findings at or above this level; the summary counts the others as not "
                        "shown (default: note, every finding)")
    c.add_argument("--only", type=_ids, default=set(), metavar="IDS", help="only these rule ids or areas")
    c.add_argument("--skip", type=_ids, default=set(), metavar="IDS", help="not these rule ids or areas")
    c.add_argument("--since", metavar="GIT_REF", help="only files changed since this git ref")
    c.add_argument("--jobs", type=int, metavar="N", help="worker processes (default: settings, else 1)")
    _set_options(c)
    c.add_argument("--accepted", metavar="FILE", help="accepted-findings file: its findings do not count")
    c.add_argument("--write-accepted", metavar="FILE", help="record today's findings as accepted, then exit 0")
    c.add_argument("--no-progress", action="store_true", help="no progress bar on a terminal")
    _adoption_options(c)


def _explain_options(e) -> None:
    e.add_argument("config", metavar="CONFIG", help="the run config file to explain")
    _set_options(e)


def _rules_options(r) -> None:
    r.add_argument("rule_id", nargs="?", metavar="ID", help="a rule id, e.g. BAT-1 (default: list every rule)")


def _adoption_options(c) -> None:
    """check --fix / --diff / --staged (adoption in an existing repository)."""
    c.add_argument("--fix", action="store_true",
                   help="apply the safe fixes rules declare (each proved by re-reading the file), then check again")
    c.add_argument("--diff", action="store_true", help="with --fix: print the fixes as a unified diff, write nothing")
    c.add_argument("--staged", action="store_true",
                   help="check the staged (index) version of the staged config files, as a git hook does")
    c.add_argument("--with-staged-deletions", action="store_true",
                   help="also check again every config that builds on a file the staged changes delete or rename "
                        "(a hook framework passes no deleted file); given no paths, only those configs are checked")


def _map_options(m) -> None:
    m.add_argument("config", metavar="CONFIG", nargs="+",
                   help="run configs of one layout (or a folder of them) whose keys to place; one key map is drafted")
    m.add_argument("--output", metavar="FILE", help="write the draft block here (default: after the report)")


def _install_hook_options(h) -> None:
    h.add_argument("--force", action="store_true", help="replace an existing pre-commit hook")


def _audit_options(a) -> None:
    a.add_argument("configs", nargs="+", metavar="CONFIG", help="run config files or folders")
    a.add_argument("--html", required=True, metavar="FILE", help="write the page here ('-': standard output)")
    a.add_argument("--gate", choices=("error", "warning", "note"),
                   help="lowest level the page's verdict and the exit status count (default: settings)")
    a.add_argument("--only", type=_ids, default=set(), metavar="IDS", help="only these rule ids or areas")
    a.add_argument("--skip", type=_ids, default=set(), metavar="IDS", help="not these rule ids or areas")
    _set_options(a)


# every command in the order --help lists them: (help line, its options)
_COMMANDS = {
    "check": ("check run configs and report findings", _check_options),
    "explain": ("show what trimtab read from a run config", _explain_options),
    "rules": ("list the rules, or show one rule's rationale", _rules_options),
    "map": ("draft a [tool.trimtab.keys] block for the keys trimtab could not place", _map_options),
    "install-hook": ("write a plain .git/hooks/pre-commit that checks staged configs", _install_hook_options),
    "audit": ("write a self-contained HTML page: sources with findings in place, "
              "batch arithmetic and token budget drawn, resolved concepts", _audit_options),
}


def _invoked(argv: list[str]) -> str | None:
    """The command a command line names, read before parsing (None when unsure: then every
    command's options are declared). main parses again with them all if argparse reads otherwise."""
    args = iter(argv)
    for a in args:
        if a == "--settings":
            next(args, None)
        elif a == "--":
            return None
        elif not a.startswith("-"):
            return a if a in _COMMANDS else None
    return None


def _parse(argv: list[str] | None):
    """(parser, args, extra) for a command line; only the invoked command's options declared."""
    words = sys.argv[1:] if argv is None else list(argv)
    command = _invoked(words)
    parser = build_parser(command)
    args, extra = parser.parse_known_args(words)
    if command is not None and args.command != command:  # read otherwise than guessed: declare everything
        parser = build_parser()
        args, extra = parser.parse_known_args(words)
    return parser, args, extra


def main(argv: list[str] | None = None) -> int:
    parser, args, extra = _parse(argv)
    if not args.command:
        parser.print_help()
        return EXIT_INCOMPLETE
    if extra:  # the command's own usage, not the top-level one
        _commands(parser)[args.command].error(f"unrecognized arguments: {' '.join(extra)}")
    from .common.settings import SettingsError

    try:
        _given_paths_exist(args)
        if args.command == "check":
            if args.staged:
                from .adopt.hook import with_staged

                return with_staged(args, cmd_check)
            if args.with_staged_deletions:
                from .adopt.hook import with_staged_deletions

                return with_staged_deletions(args, cmd_check)
            return cmd_check(args)
        if args.command == "map":
            return cmd_map(args)
        if args.command == "install-hook":
            return cmd_install_hook(args)
        if args.command == "explain":
            return cmd_explain(args)
        if args.command == "rules":
            return cmd_rules(args)
        if args.command == "audit":
            return cmd_audit(args)
    except SettingsError as exc:
        print(f"trimtab: error: {for_text(exc)}", file=sys.stderr)
        return EXIT_INCOMPLETE
    except BrokenPipeError:
        return EXIT_OK
    except KeyboardInterrupt:
        print("trimtab: interrupted", file=sys.stderr)
        return EXIT_INCOMPLETE
    except OSError as exc:  # a report or accepted-findings file that cannot be written: say so plainly
        where = exc.filename if exc.filename is not None else "a file"
        print(f"trimtab: error: {for_text(where)}: cannot be written or read: {for_text(exc.strerror or exc)}",
              file=sys.stderr)
        return EXIT_INCOMPLETE
    parser.error(f"unknown command {args.command}")
    return EXIT_INCOMPLETE


def _commands(parser) -> dict:
    """The sub-command parsers by name."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return action.choices
    return {}


def _given_paths_exist(args) -> None:
    """A path given on the command line that does not exist stops every command the same way
    (exit 2): there is nothing to check, and a gate must not pass it."""
    from .common.settings import SettingsError

    given = {"check": "paths", "explain": "config", "map": "config", "audit": "configs"}.get(args.command)
    paths = getattr(args, given, None) if given else None
    for p in [paths] if isinstance(paths, str) else paths or []:
        if not os.path.lexists(p):
            raise SettingsError(f"{p}: no such file or folder")
        if args.command == "explain" and os.path.isdir(p):
            raise SettingsError(f"{p}: is a folder; {args.command} takes one run config file")


def _settings(args):
    from .common import settings

    return settings.load(Path(args.settings) if args.settings else None)


def _registry():
    from .engine.registry import Registry

    reg = Registry()
    for err in reg.errors:
        print(f"trimtab: error: {for_text(err)}", file=sys.stderr)
    return reg


def _overrides(items: list[str]) -> list[tuple[str, str, bool]]:
    from .common.settings import SettingsError

    out = []
    for item in items:
        option = "--add" if isinstance(item, _Added) else "--set"
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise SettingsError(f"{option} {item!r}: expected KEY=VALUE, e.g. {option} rollout.group_size=8")
        out.append((key.strip(), value, isinstance(item, _Added)))
    return out


def _refuse_overwrite(files, target, option: str) -> None:
    """trimtab never writes to a file it checks: an output path that is one of them is refused,
    unless the file is trimtab's own earlier output (a report or an accepted-findings file that
    an include glob happens to match)."""
    from .common.settings import SettingsError

    if not target or not os.path.exists(target):
        return
    for path, shown in files:
        try:
            same = os.path.samefile(path, target)
        except OSError:
            continue
        if same and not _own_output(target):
            raise SettingsError(f"{option} {target}: expected a report file, found {shown}, one of the "
                                "files being checked; it is not overwritten")


def _own_output(path) -> bool:
    """Is this file a report or accepted-findings file that trimtab wrote?"""
    import json

    try:
        with open(path, "rb") as fh:
            data = json.loads(fh.read(64 * 1024 * 1024).decode("utf-8"))
    except (OSError, ValueError, RecursionError):
        return False
    if not isinstance(data, dict):
        return False
    if data.get("tool") == "trimtab" or "trimtab_accepted" in data:
        return True
    runs = data.get("runs")
    driver = runs[0].get("tool", {}).get("driver", {}) if isinstance(runs, list) and runs and isinstance(
        runs[0], dict) else {}
    return isinstance(driver, dict) and driver.get("name") == "trimtab"


def _refuse_non_configs(paths, settings) -> None:
    """A file named on the command line that is neither a YAML or JSON config nor a launch script:
    one plain message (exit 2), not a parse finding."""
    from .load.discover import relpath
    from .common.settings import SettingsError
    from .compose.sources import is_config

    for p in paths:
        path = Path(p)
        if path.is_file() and not is_config(str(path), relpath(path, settings.root.resolve()), settings):
            raise SettingsError(f"{p} is neither a YAML or JSON config nor a launch script (settings include and "
                                "launch.scripts say which files are)")


def _request(args, **extra):
    """The pipeline request of a command's arguments."""
    from .pipeline import Request

    return Request(only=getattr(args, "only", set()), skip=getattr(args, "skip", set()),
                   overrides=_overrides(getattr(args, "overrides", [])), gate=getattr(args, "gate", None),
                   notes=lambda text: print(f"trimtab: note: {for_text(text)}", file=sys.stderr), **extra)


def _progress(args):
    def start(total: int):
        if args.no_progress or not sys.stderr.isatty() or total <= 20 or os.environ.get("PRE_COMMIT"):
            return None
        from .report.progress import Progress

        return Progress(total, sys.stderr)

    return start


def cmd_check(args) -> int:
    from .gate import filtering
    from .pipeline import Pipeline
    from .common.settings import SettingsError

    registry = _registry()  # first: a plugin may declare concepts the settings' key map names
    settings = _settings(args)
    _refuse_non_configs(args.paths, settings)
    if getattr(args, "staged_root", None) is not None:
        settings.root = args.staged_root  # check --staged: the index, mirrored (linter/adopt/hook.py)
    if args.diff and not args.fix:
        raise SettingsError("--diff shows what --fix would change: use --fix --diff")
    if args.fix and args.write_accepted:
        raise SettingsError("--fix and --write-accepted: run --fix first, then record what is left")

    def guard(files):
        _refuse_overwrite(files, args.output, "--output")
        _refuse_overwrite(files, args.write_accepted, "--write-accepted")

    req = _request(args, paths=args.paths, accepted=args.accepted, since=args.since, jobs=args.jobs,
                   own_outputs=tuple(p for p in (args.write_accepted,) if p),
                   staged_files=getattr(args, "staged_files", None),
                   staged_missing=list(getattr(args, "staged_missing", [])), guard=guard, progress=_progress(args),
                   changed=getattr(args, "staged_changed", None), cross_run=True)
    req.apply_accepted = not args.write_accepted  # record what is found, not what an older file accepts
    outcome = Pipeline(settings, registry).run(req)
    if args.write_accepted:
        keep = _accepted_elsewhere(Path(args.write_accepted), outcome.checked, settings.root)
        # a crashed rule is never accepted: it would hide whatever the rule misses
        record = [f for f in outcome.recorded if not f.rule_id.startswith("TOOL-")]
        count = filtering.write_accepted(Path(args.write_accepted), record, keep)
        print(f"trimtab: recorded {count} accepted finding(s) in {args.write_accepted}", file=sys.stderr)
        if outcome.incomplete:
            print("trimtab: the check was incomplete (a rule crashed or a plugin failed to load); "
                  "its findings are not recorded", file=sys.stderr)
            return EXIT_INCOMPLETE
        return EXIT_OK
    if args.fix:
        code = _fix(args, settings, outcome.findings, outcome.files)
        if code is not None:
            return code
        args.fix = False
        return cmd_check(args)  # report what is left after the fixes
    # --show LEVEL: the report lists what is at or above it; the gate and the counts still see all
    findings, code, counts = outcome.at_least(args.show), outcome.status, outcome.counts()
    summary = {**outcome.summary(), "hidden": outcome.below(args.show), "accepted": outcome.accepted}
    from contextlib import nullcontext

    from .common.paths import atomic_open

    # a report file appears whole or not at all (written beside it, then renamed)
    with atomic_open(args.output) if args.output else nullcontext(sys.stdout) as out:
        if args.format == "json":
            from .report.text import json_report

            json_report(findings, summary, code, out)
        elif args.format == "sarif":
            from .report import sarif

            sarif.write(findings, _catalogue(registry), settings.root, out, not outcome.incomplete)
        else:
            from .report.text import text

            text(findings, out, colour=out.isatty() and not os.environ.get("NO_COLOR"))
    total = len(outcome.files)
    # the parts add up to the whole: "7 checked, 1 skipped as not run configs, of 8 file(s)"
    files = (f"{total - outcome.skipped} checked, {outcome.skipped} skipped as not run configs, of {total} file(s)"
             if outcome.skipped else f"{total} file(s) checked")
    extra = f"; {summary['hidden']} below {args.show} not shown" if args.show else ""
    extra += f"; {summary['accepted']} accepted" if summary["accepted"] else ""
    print(f"trimtab: {files}; {counts['error']} error(s), "
          f"{counts['warning']} warning(s), {counts['note']} note(s){extra}", file=sys.stderr)
    return code


def _catalogue(registry):
    from .engine.registry import TOOL_RULES

    return registry.ordered() + list(TOOL_RULES.values())


def cmd_rules(args) -> int:
    from .engine.registry import TOOL_RULES
    from .common.redact import visible as _v

    registry = _registry()
    rules = {**{r.id: r for r in registry.ordered()}, **TOOL_RULES}
    if args.rule_id:
        rid = args.rule_id.upper()
        r = rules.get(rid)
        if r is None:
            print(f"trimtab: error: no rule {_v(rid)}; `trimtab rules` lists them", file=sys.stderr)
            return EXIT_INCOMPLETE
        # a plugin's texts are shown, never obeyed: control characters made visible (trimtab.common.redact)
        print(f"{_v(r.id)}  {_v(r.name)}  (default level: {r.level}{', CWE-%d' % r.cwe if r.cwe else ''})")
        print(f"\n{_v(r.summary)}\n\n{_v(r.rationale)}")
        if r.needs:
            print(f"\nNeeds: {_v(', '.join(r.needs))}")
        if r.options:
            print("\nOptions (set under [tool.trimtab.rules.\"%s\"]):" % _v(r.id))
            for k, v in r.options.items():
                print(f"  {_v(k)} = {_v(_toml(v))}")
        if r.help:
            print(f"\nHelp: {_v(r.help)}")
        return EXIT_OK
    for r in rules.values():
        print(f"{_v(r.id):<8} {str(r.level):<8} {_v(r.name):<34} {_v(r.summary)}")
    return EXIT_INCOMPLETE if registry.errors else EXIT_OK


def _toml(value) -> str:
    """A rule option's default as it is written in a TOML settings file."""
    import json

    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, str):
        return json.dumps(value)  # a TOML basic string: the same escapes
    return repr(value)


def cmd_audit(args) -> int:
    from .report.audit import audit, write
    from .pipeline import Pipeline

    # a one-off audit may look at a config kept outside the repository (not confined)
    registry = _registry()  # first: a plugin may declare concepts the settings' key map names
    settings = _settings(args)
    _refuse_non_configs(args.configs, settings)
    outcome = Pipeline(settings, registry).run(
        _request(args, paths=args.configs, confine=False, keep_models=True))
    page, code = audit(outcome), outcome.status
    try:
        write(page, args.html)
    except OSError as exc:
        print(f"trimtab: error: cannot write {args.html}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_INCOMPLETE
    if args.html != "-":
        print(f"trimtab: audit page written to {args.html}", file=sys.stderr)
    return code


def cmd_explain(args) -> int:
    from .report.explain import explain

    return explain(_one_file(args), sys.stdout)


def _one_file(args):
    """The Outcome of a check of one named file, with its models: what explain and map show."""
    from .pipeline import Pipeline

    registry = _registry()  # first: a plugin may declare concepts the settings' key map names
    settings = _settings(args)
    _refuse_non_configs([args.config], settings)
    return Pipeline(settings, registry).run(
        _request(args, paths=[args.config], confine=False, dependants=False, keep_models=True))


# --- adoption: fixes, key-map drafts, the plain git hook ------------------------------------------
def _accepted_elsewhere(path: Path, checked: set[str], root: Path) -> list[dict]:
    """Entries of an existing accepted-findings file for files this run did not check and that
    still exist: a partial run (named paths, --since) keeps them rather than dropping them."""
    from .gate import filtering

    if not path.is_file():
        return []
    try:
        rows = filtering.read_accepted(path)
    except filtering.AcceptedFileError:
        return []
    from .common.paths import confined

    return [r for r in rows if r.get("file") not in checked
            and (real := confined(root / str(r.get("file")), root)) is not None and real.is_file()]


def _fix(args, settings, findings, files) -> int | None:
    """Apply (or, with --diff, show) the safe fixes. Returns the exit status when done, or None
    to check again and report what is left."""
    from .adopt import fix

    on_disk = {shown: Path(p) for p, shown in files}

    def locate(shown: str):
        if shown in on_disk:
            return on_disk[shown]
        from .common.paths import confined

        candidate = confined(settings.root / shown, settings.root)  # never a file outside
        return candidate if candidate is not None and candidate.is_file() else None

    plans = fix.plan(findings, locate)
    told = set()
    for ff in plans:
        for f, why in ff.refused:
            line = f"trimtab: not fixed: {for_text(f.location.label())} {f.rule_id}: {for_text(why)}"
            if line not in told:
                told.add(line)
                print(line, file=sys.stderr)
    changed = [ff for ff in plans if ff.changed]
    count = sum(len(ff.applied) for ff in changed)
    if args.diff:
        for ff in changed:
            sys.stdout.write(ff.diff())
        print(f"trimtab: {count} safe fix(es) in {len(changed)} file(s) would be applied; nothing written",
              file=sys.stderr)
        return EXIT_FINDINGS if changed else EXIT_OK
    for ff in changed:
        ff.write()
    print(f"trimtab: applied {count} safe fix(es) in {len(changed)} file(s)", file=sys.stderr)
    return None


def cmd_map(args) -> int:
    from .adopt.keymap_draft import draft_command
    from .pipeline import Pipeline

    registry = _registry()  # first: a plugin may declare concepts the settings' key map names
    settings = _settings(args)
    _refuse_non_configs(args.config, settings)
    outcome = Pipeline(settings, registry).run(
        _request(args, paths=list(args.config), confine=False, dependants=False, keep_models=True))
    folders = tuple(p for p in args.config if os.path.isdir(p))
    return draft_command(outcome, args.output, sys.stdout, sys.stderr, folders)


def cmd_install_hook(args) -> int:
    from .adopt.hook import install

    return install(Path.cwd(), args.force, sys.stderr)
