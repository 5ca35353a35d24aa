"""Discover: command-line paths and settings globs -> the files to check."""
from __future__ import annotations

import os
import re
from functools import lru_cache
from pathlib import Path

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
    return re.compile("".join(out) + r"\Z")


def matches(rel: str, patterns) -> bool:
    return any(_glob_re(p.lstrip("./") if p.startswith("./") else p).match(rel) for p in patterns)


def relpath(path: Path, root: Path) -> str:
    try:
        return path.resolve().relative_to(root).as_posix()
    except ValueError:
        return path.as_posix()


def discover(paths: list[str], root: Path, include: list[str], exclude: list[str]) -> tuple[list[tuple[str, str]], list[str]]:
    """((path on disk, path shown), missing) for the paths given, or for the include globs
    under ``root`` when none are given. A file named explicitly is checked whatever its name."""
    root = root.resolve()
    found: dict[str, str] = {}
    missing: list[str] = []
    if not paths:
        _walk(root, root, include, exclude, found)
        return sorted(found.items(), key=lambda kv: kv[1]), missing
    for p in paths:
        path = Path(p)
        if path.is_dir():
            _walk(path, root, include, exclude, found)
        elif path.exists() or path.is_symlink():
            shown = relpath(path, root) if path.exists() else path.as_posix()
            if not matches(shown, exclude):
                found.setdefault(str(path), shown)
        else:
            missing.append(p)
    return sorted(found.items(), key=lambda kv: kv[1]), missing


def _walk(top: Path, root: Path, include, exclude, found: dict) -> None:
    # perf: resolving every file's path (a system call per path component, twice per file) cost
    # more than checking it. The folders os.walk enters are real folders (it does not follow
    # links), so a file's resolved path is its folder's, resolved once, plus its name; only a
    # file that is itself a symbolic link is resolved as before.
    top_res = top.resolve()
    top_is_root = top_res == root
    prefix = root.as_posix().rstrip("/") + "/"
    for dirpath, dirnames, filenames in os.walk(top):
        dirnames[:] = sorted(d for d in dirnames if d not in SKIP_DIRS and not d.endswith(".egg-info"))
        rel_dir = os.path.relpath(dirpath, top)
        rel_dir = "" if rel_dir == "." else Path(rel_dir).as_posix() + "/"
        dir_res = (top_res / rel_dir).as_posix().rstrip("/") + "/"
        for name in sorted(filenames):
            full = Path(dirpath) / name
            if os.path.islink(full):
                shown = relpath(full, root)
                rel_top = relpath(full, top_res) if not top_is_root else shown
            else:
                resolved = dir_res + name
                shown = resolved[len(prefix):] if resolved.startswith(prefix) else full.as_posix()
                rel_top = rel_dir + name if not top_is_root else shown
            if (matches(shown, include) or matches(rel_top, include)) and not matches(shown, exclude):
                disk = str(full)
                found.setdefault(disk, disk if disk == shown else shown)  # perf: one string when equal


def changed_since(ref: str, root: Path) -> list[str]:
    """Files changed between ``ref`` and the working tree (plus untracked ones), relative to root.
    Raises ValueError with git's own message when the ref cannot be used."""
    import subprocess  # only --since needs it (start-up)

    def git(*args):
        return subprocess.run(["git", *args], cwd=root, capture_output=True, text=True)

    top = git("rev-parse", "--show-toplevel")
    if top.returncode:
        raise ValueError(f"--since needs a git repository: {top.stderr.strip()}")
    diff = git("diff", "--name-only", "--diff-filter=ACMR", "--relative", ref)
    if diff.returncode:
        raise ValueError(f"--since {ref}: {diff.stderr.strip() or 'git diff failed'}")
    untracked = git("ls-files", "--others", "--exclude-standard")
    names = diff.stdout.splitlines() + untracked.stdout.splitlines()
    return sorted(set(n for n in names if n))
