"""The plain git hook: ``trimtab install-hook`` and ``trimtab check --staged``.

``check --staged`` checks what is about to be committed, not what is in the working tree: the
staged config files (``git diff --cached --name-only --diff-filter=ACMR``) are exported from the
index with ``git checkout-index --prefix`` into a temporary folder that mirrors the repository,
together with every indexed YAML, JSON, Python and TOML file under the settings folder (the bases a
config builds on, the reward code the rules look into), and checked there under their own names,
with the mirror as the repository root. The settings are read from the working tree; so is the
accepted-findings file when it is not in the index.
"""
from __future__ import annotations

import os
import shlex
import shutil
import stat
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import TextIO

from ..gate.filtering import ACCEPTED_MAX_BYTES
from ..common.limits import Limits
from ..load.loader import read
from ..common.paths import confined, write_atomic
from ..common.settings import SettingsError

MARK = "written by `trimtab install-hook`"
EXPORTED = (".yaml", ".yml", ".json", ".py", ".toml")  # read from the index in --staged mode


class GitError(Exception):
    pass


def _git(args: list[str], cwd: Path, data: bytes | None = None) -> bytes:
    try:
        res = subprocess.run(["git", *args], cwd=cwd, input=data, capture_output=True)
    except OSError as exc:
        raise GitError(f"cannot run git: {exc.strerror}") from None
    if res.returncode:
        raise GitError(res.stderr.decode("utf-8", "replace").strip() or f"git {args[0]} failed")
    return res.stdout


def staged_paths(root: Path) -> tuple[Path, list[str]]:
    """(top of the working tree, staged paths relative to it: added, copied, modified, renamed)."""
    top = Path(_git(["rev-parse", "--show-toplevel"], root).decode().strip())
    names = _git(["diff", "--cached", "--name-only", "--diff-filter=ACMR", "-z"], top)
    return top, [n for n in names.decode("utf-8", "surrogateescape").split("\0") if n]


def staged_gone(top: Path) -> list[str]:
    """Paths the commit deletes, and the old names of the files it renames (relative to the top)."""
    names = _git(["diff", "--cached", "--name-only", "--diff-filter=D", "--no-renames", "-z"], top)
    return [n for n in names.decode("utf-8", "surrogateescape").split("\0") if n]


def with_staged(args, check) -> int:
    """Run ``check(args)`` over the staged versions of the staged config files."""
    from ..load.discover import Refused, matches
    from ..common.settings import load

    if args.paths or args.since or args.fix:
        raise SettingsError("--staged checks the staged config files: give no paths, --since or --fix")
    settings = load(Path(args.settings) if args.settings else None)
    root = settings.root.resolve()
    try:
        top, staged = staged_paths(root)
        gone = staged_gone(top)
        indexed = _git(["ls-files", "-z"], top).decode("utf-8", "surrogateescape").split("\0")
    except GitError as exc:
        raise SettingsError(f"--staged needs a git repository: {exc}") from None

    def shown(rel: str) -> str | None:
        """The path relative to the settings root, or None when outside it."""
        try:
            return Path(os.path.normpath(top / rel)).relative_to(root).as_posix()
        except ValueError:
            return None

    def wanted(rel: str) -> bool:
        s = shown(rel)
        return s is not None and matches(s, settings.include) and not matches(s, settings.exclude)

    try:
        rel_root = root.relative_to(top)
    except ValueError:
        raise SettingsError(f"--staged: the settings folder {root} is outside the git working tree {top}") from None
    check_these = [rel for rel in staged if wanted(rel)]
    # Everything the check may read, as staged: the configs, the bases they build on, the reward
    # code the rules look into, the settings' own files (all under the settings folder).
    export = sorted(set(check_these) | {rel for rel in indexed if rel and rel.lower().endswith(EXPORTED)
                                        and shown(rel) is not None})
    tmp = Path(tempfile.mkdtemp(prefix="trimtab-staged-"))
    try:
        if export:
            _git(["checkout-index", "--prefix", f"{tmp}{os.sep}", "-z", "--stdin"], top,
                 "\0".join(export).encode("utf-8", "surrogateescape") + b"\0")
        mirror = tmp / rel_root
        mirror.mkdir(parents=True, exist_ok=True)
        if settings.accepted:  # an accepted-findings file that is not in the index: the working tree's
            _copy_accepted(settings, root, mirror)
        # a staged symbolic link is checked out as a link: one that leads out of the mirror is
        # refused, exactly as a plain check refuses a link out of the working tree
        files, refused = [], []
        for rel in check_these:
            disk, name = tmp / rel, shown(rel)
            if confined(disk, mirror) is None:
                refused.append(Refused(name, "is a symbolic link that leads outside the repository; not read"))
            else:
                files.append((str(disk), name))
        args.staged_root = mirror
        args.staged_files = files
        args.staged_missing = refused
        # a deleted or renamed base: the configs that named it are checked again (and report it)
        args.staged_changed = [s for s in (shown(rel) for rel in [*staged, *gone]) if s is not None]
        args.no_progress = True
        return check(args)
    except GitError as exc:
        raise SettingsError(f"--staged: cannot read the index: {exc}") from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def with_staged_deletions(args, check) -> int:
    """Run ``check(args)`` over the paths given (as a hook framework gives the staged files it
    kept) and every config that builds on a file the staged changes delete or rename: the framework
    passes no deleted file, so a commit that only deletes a base would otherwise check nothing.
    Given no paths, only those configs are checked (not the whole repository)."""
    from ..common.settings import load

    if args.staged or args.since or args.fix:
        raise SettingsError("--with-staged-deletions checks the paths given and the configs built on the files "
                            "the staged changes delete: give no --staged, --since or --fix")
    settings = load(Path(args.settings) if args.settings else None)
    root = settings.root.resolve()
    try:
        top = Path(_git(["rev-parse", "--show-toplevel"], root).decode().strip())
        gone = staged_gone(top)
    except GitError as exc:
        raise SettingsError(f"--with-staged-deletions needs a git repository: {exc}") from None
    shown = []
    for rel in gone:
        try:
            shown.append(Path(os.path.normpath(top / rel)).relative_to(root).as_posix())
        except ValueError:
            continue  # outside the settings folder: no config of it can name the file
    args.staged_changed = shown
    if not args.paths:
        args.staged_files = []  # nothing given: the configs built on the deleted files only
    return check(args)


def _copy_accepted(settings, root: Path, mirror: Path) -> None:
    """Copy the working tree's accepted-findings file into the mirror when the index has none.
    Both ends are confined (the setting is written by the repository): a path that leaves the
    working tree is refused, and nothing is written that would land outside the mirror."""
    src = settings.path("accepted")  # SettingsError when it leaves the working tree
    dst = mirror / src.relative_to(root)
    if os.path.lexists(dst) or not src.is_file():
        return
    if confined(dst.parent, mirror) is None:  # a staged folder link on the way out of the mirror
        raise SettingsError(f"{settings.source}: setting {settings.name('accepted')}: {settings.accepted!r} "
                            "leads outside the repository through a staged symbolic link; not copied")
    dst.parent.mkdir(parents=True, exist_ok=True)
    if confined(dst.parent, mirror) is None:
        return
    data, _why = read(str(src), Limits(max_bytes=ACCEPTED_MAX_BYTES))
    if data is not None and len(data) <= ACCEPTED_MAX_BYTES:
        write_atomic(dst, data)


def hook_script(python: str, folder: str = "", safe: str = "") -> str:
    """The hook. ``folder``: where the settings live, relative to the top of the working tree
    (git runs hooks from the top; a settings file in a sub-folder is found from there).

    The hook runs in the checked repository, whose files may be hostile: Python is started so
    that the working directory is never on the import path (``-P``; ``-I`` before Python 3.11),
    or a committed ``yaml.py`` or ``trimtab/`` would be imported instead of the real one."""
    safe = safe or ("-P" if sys.version_info >= (3, 11) else "-I")
    python = shlex.quote(python)
    cd = f'cd "$(git rev-parse --show-toplevel)"/{shlex.quote(folder)} || exit 1\n' if folder else ""
    return f"""#!/bin/sh
# trimtab pre-commit hook ({MARK}).
# Checks the staged version of the staged run configs; a finding at or above the gate level
# stops the commit. `git commit --no-verify` skips it once; delete this file to remove it.
{cd}if [ -x {python} ]; then
  exec {python} {safe} -m trimtab check --staged
fi
if command -v trimtab >/dev/null 2>&1; then
  exec trimtab check --staged
fi
echo "trimtab pre-commit hook: trimtab is not installed; install it from a checkout of its repository as its README says (pip install -e . there), or delete .git/hooks/pre-commit" >&2
exit 1
"""


def install(cwd: Path, force: bool, err: TextIO) -> int:
    try:
        top = Path(_git(["rev-parse", "--show-toplevel"], cwd).decode().strip())
        hooks = Path(_git(["rev-parse", "--git-path", "hooks"], top).decode().strip())
    except GitError as exc:
        print(f"trimtab: error: install-hook needs a git repository: {exc}", file=err)
        return 2
    if not hooks.is_absolute():
        hooks = top / hooks
    target = hooks / "pre-commit"
    if (target.exists() or target.is_symlink()) and not force:
        print(f"trimtab: error: {target} already exists; not replaced (use --force to replace it, or call "
              "`trimtab check --staged` from your own hook)", file=err)
        return 2
    hooks.mkdir(parents=True, exist_ok=True)
    if target.is_symlink():
        target.unlink()
    from ..common.settings import find

    source, root = find(cwd)
    folder = ""
    if source is not None:
        try:
            folder = root.resolve().relative_to(top.resolve()).as_posix()
        except ValueError:
            folder = ""
    write_atomic(target, hook_script(sys.executable, "" if folder == "." else folder))
    mode = target.stat().st_mode
    target.chmod(mode | stat.S_IXUSR | stat.S_IXGRP | stat.S_IXOTH)
    print(f"trimtab: wrote {target}: commits now check the staged version of staged run configs", file=err)
    return 0
