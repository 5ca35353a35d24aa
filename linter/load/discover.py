"""Discover: command-line paths and settings globs -> the files to check."""
from __future__ import annotations

import os
import re
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from functools import lru_cache
from pathlib import Path
from typing import Any

from ..common.paths import confined, lexically_inside

SKIP_DIRS = frozenset({".git", ".hg", ".svn", "__pycache__", "node_modules", ".venv", "venv", ".tox",
                       ".mypy_cache", ".pytest_cache", ".hypothesis", "build", "dist", ".eggs"})


@lru_cache(maxsize=256)
def _glob_re(pattern: str) -> re.Pattern:
    """A glob over '/'-separated relative paths: ``**`` spans folders, ``*`` and ``?`` do not."""
    out, i = [], 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
            continue
        if pattern.startswith("**", i):
            out.append(".*")
            i += 2
            continue
        if c == "*":
            out.append("[^/]*")
        elif c == "?":
            out.append("[^/]")
        elif c == "[":
            j = pattern.find("]", i + 1)
            if j == -1:
                out.append(re.escape(c))
            else:
                body = pattern[i + 1:j].replace("\\", "\\\\")
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append(f"[{body}]")
                i = j
        else:
            out.append(re.escape(c))
        i += 1
    # DOTALL: a newline in a file name is a character like any other (it must not hide the file)
    return re.compile("".join(out) + r"\Z", re.DOTALL)


@lru_cache(maxsize=256)
def _matcher(p: str) -> Callable[[str], Any]:
    """The test of one glob on a relative path: its pattern's ``match``; for a glob ``**/*SUFFIX``
    whose suffix is plain text (the usual include globs), ``str.endswith``, which answers the same:
    ``**/`` takes any folders and ``*`` any characters but '/', which the suffix holds none of.
    perf: a pattern match costs 1-2 us, 5 include globs a file."""
    p = p.lstrip("./") if p.startswith("./") else p
    suffix = p[4:]
    if p.startswith("**/*") and suffix and not any(c in suffix for c in "/*?[\\"):
        return lambda rel: rel.endswith(suffix)
    return _glob_re(p).match


def matches(rel: str, patterns) -> bool:
    return any(_matcher(p)(rel) for p in patterns)


def relpath(path: Path, root: Path) -> str:
    """The path as the user wrote or sees it: relative to the root, links not followed (a link
    is shown by its own name), else resolved, else as given."""
    try:
        return Path(os.path.abspath(path)).relative_to(root).as_posix()
    except ValueError:
        pass
    try:
        return path.resolve().relative_to(root).as_posix()
    except (ValueError, OSError, RuntimeError):
        return path.as_posix()


class Refused(str):
    """A path given or found that is not checked, with the reason (reported as a finding)."""

    reason: str = "cannot be read: no such file or folder"

    def __new__(cls, path: str, reason: str):
        obj = super().__new__(cls, path)
        obj.reason = reason
        return obj


def inside(path: Path, root: Path) -> bool:
    """Does ``path``, with every symbolic link followed, lie inside ``root``? (``paths.confined``)"""
    return confined(path, root) is not None


def _refused(path: Path, root: Path, confine: bool) -> bool:
    """Is a path given on the command line refused? With ``confine``, when it leaves the
    repository; without, when it is written as a place in the repository but a symbolic link on
    the way (the file itself or a folder above it) leads out."""
    if inside(path, root):
        return False
    return confine or path.is_symlink() or lexically_inside(path, root)


def _outside(path: Path, root: Path, shown: str | None = None) -> Refused:
    try:
        target = path.resolve()
    except (OSError, RuntimeError):
        target = path
    how = (f" (a link to {target.as_posix()})" if path.is_symlink() else
           f" (through a symbolic link, to {target.as_posix()})" if lexically_inside(path, root) else "")
    return Refused(shown or path.as_posix(), f"is outside the repository {root.as_posix()}{how}; not read")


class Found(Sequence):
    """Found files as (path on disk, path shown) pairs, held lean (perf: the lists of a check are
    kept for the whole run, and a repository's files are listed twice when some of its files are
    checked): the shown paths only, and a path on disk only where it is not ``prefix`` followed by
    the shown path; the pairs are made as they are read. ``share``: shown paths already held
    elsewhere (another list of the same check), kept once."""

    __slots__ = ("_prefix", "_shown", "_disk")

    def __init__(self, pairs: Iterable[tuple[str, str]] = (), prefix: str = "",
                 share: Mapping[str, str] | None = None):
        self._prefix = prefix
        self._shown: list[str] = []
        self._disk: dict[int, str] = {}  # index -> path on disk, where it is not prefix + shown
        for disk, shown in pairs:
            if share is not None:
                shown = share.get(shown, shown)
            if disk != prefix + shown:
                self._disk[len(self._shown)] = disk
            self._shown.append(shown)

    def __len__(self) -> int:
        return len(self._shown)

    def __getitem__(self, i):  # type: ignore[override]
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        if i < 0:
            i += len(self._shown)
        shown = self._shown[i]
        disk = self._disk.get(i)
        return (self._prefix + shown if disk is None else disk, shown)

    def __iter__(self) -> Iterator[tuple[str, str]]:
        prefix, disks = self._prefix, self._disk
        for i, shown in enumerate(self._shown):
            disk = disks.get(i) if disks else None
            yield (prefix + shown if disk is None else disk, shown)

    def shown(self) -> list[str]:
        """The shown paths, in order (the list itself: not to be changed)."""
        return self._shown

    def __eq__(self, other) -> bool:
        if isinstance(other, (Found, list, tuple)):
            return list(self) == list(other)
        return NotImplemented

    __hash__ = None  # type: ignore[assignment]  # compared by value, like the list it stands for

    def __add__(self, other) -> list:
        return list(self) + list(other)

    def __radd__(self, other) -> list:
        return list(other) + list(self)

    def __repr__(self) -> str:
        return f"Found({list(self)!r})"


def discover(paths: list[str], root: Path, include: list[str], exclude: list[str],
             used: set | None = None, confine: bool = False) -> tuple[list[tuple[str, str]], list[str]]:
    """((path on disk, path shown), missing) for the paths given, or for the include globs
    under ``root`` when none are given. A file named explicitly is checked whatever its name.

    ``missing`` lists paths that are not checked: absent ones, and (as ``Refused`` with a reason)
    symbolic links whose target is outside the repository root (a link committed to lead a gate
    to a file elsewhere); their target is never read. With ``confine`` (the check gate), any path
    given that lies outside the root is refused the same way; without it (a one-off audit of a
    config kept elsewhere) a path named explicitly is read. ``used`` collects the include globs
    that matched a file."""
    root = root.resolve()
    found: dict[str, str] = {}
    missing: list[str] = []
    if not paths:
        _walk(root, root, include, exclude, found, missing, used)
        return sorted(found.items(), key=lambda kv: kv[1]), missing
    for p in paths:
        path = Path(p)
        if path.is_dir():
            if _refused(path, root, confine):
                missing.append(_outside(path, root))
                continue
            _walk(path, root, include, exclude, found, missing, used)
        elif path.exists() or path.is_symlink():
            if path.exists() and _refused(path, root, confine):
                missing.append(_outside(path, root))
                continue
            shown = relpath(path, root) if path.exists() else path.as_posix()
            if not matches(shown, exclude):
                found.setdefault(str(path), shown)
        else:
            missing.append(p)
    return sorted(found.items(), key=lambda kv: kv[1]), missing


def _walk(top: Path, root: Path, include, exclude, found: dict, missing: list | None = None,
          used: set | None = None) -> None:
    top_res = top.resolve()  # perf: once per walk, not twice per file (a system call per path part)
    # perf: the shown path of a file is its folder's plus its name wherever the folder, as written,
    # lies under the root (relpath's first reading); the folder's is computed once per folder
    root_abs = Path(os.path.abspath(root))
    inc = [(p, _matcher(p)) for p in include]
    exc = [_matcher(p) for p in exclude]
    for dirpath, dirnames, filenames in os.walk(top):
        dirnames[:] = sorted(d for d in dirnames if d not in SKIP_DIRS and not d.endswith(".egg-info"))
        if not filenames:
            continue
        here = Path(dirpath)
        lexical = Path(os.path.abspath(here)).is_relative_to(root_abs)
        dir_shown = _prefix(relpath(here, root)) if lexical else None
        dir_top = _prefix(relpath(here, top_res)) if lexical and top_res != root else None
        dir_logical = _prefix(Path(os.path.relpath(here, top)).as_posix())
        for name in sorted(filenames):
            disk = os.path.join(dirpath, name)
            shown = dir_shown + name if dir_shown is not None else relpath(Path(disk), root)
            rel_top = shown if top_res == root else (
                dir_top + name if dir_top is not None else relpath(Path(disk), top_res))
            logical = dir_logical + name
            spellings = {shown, rel_top, logical}
            hit = [p for p, test in inc if any(test(s) for s in spellings)]
            if not hit or any(test(shown) for test in exc):
                continue
            if used is not None:
                used.update(hit)
            # os.walk does not follow links into folders, so only a file that is itself a link
            # can lead out of the repository (and only it costs a resolve)
            if os.path.islink(disk) and os.path.exists(disk) and not inside(Path(disk), root):
                if missing is not None:
                    missing.append(_outside(Path(disk), root, shown))
                continue
            found.setdefault(disk, disk if disk == shown else shown)  # perf: one string when equal


def _prefix(rel: str) -> str:
    """A folder's relative path as the prefix of its files' ("" for the folder itself)."""
    return "" if rel == "." else rel + "/"


def changed_since(ref: str, root: Path) -> list[str]:
    """Files changed between ``ref`` and the working tree (plus untracked ones), relative to root.
    Raises ValueError with git's own message when the ref cannot be used. Names are read
    NUL-separated (any byte of a file name survives: no quoting), and the ref can never reach
    git as an option."""
    import subprocess  # here, not at the top: a check without --since never runs git for it (start-up)

    def git(*args):
        return subprocess.run(["git", *args], cwd=root, capture_output=True)

    def text(data: bytes) -> str:
        return data.decode("utf-8", "replace").strip()

    if not ref or ref.startswith("-"):
        raise ValueError(f"--since {ref!r}: expected a git revision (a commit, branch or tag), "
                         "found something that would read as an option")
    top = git("rev-parse", "--show-toplevel")
    if top.returncode:
        raise ValueError(f"--since needs a git repository: {text(top.stderr)}")
    diff = git("diff", "--name-only", "--diff-filter=ACMR", "--relative", "-z", ref, "--")
    if diff.returncode:
        raise ValueError(f"--since {ref}: {text(diff.stderr) or 'git diff failed'}")
    untracked = git("ls-files", "--others", "--exclude-standard", "-z", "--")
    # deleted files and the old names of renamed ones: the configs that named them are checked again
    gone = git("diff", "--name-only", "--diff-filter=D", "--no-renames", "--relative", "-z", ref, "--")
    names = (diff.stdout + b"\0" + untracked.stdout + b"\0" + gone.stdout).decode("utf-8", "surrogateescape").split("\0")
    return sorted(set(n for n in names if n))
