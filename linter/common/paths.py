"""Where trimtab may read and write.

Anything in the checked repository may be hostile, its settings included. Every path that comes
from the repository (a base, a reward reference's search root, the overrides file, the
accepted-findings file, a staged file, a link met while walking) goes through ONE rule,
``confined``: the path with every symbolic link followed must lie inside the repository root,
and that is decided before the path is opened. Files the user keeps (reports, the
accepted-findings file, fixed configs, the git hook) are written with ``write_atomic``: a
temporary file in the same folder, then a rename, so that an interrupted run never leaves half a
file.
"""
from __future__ import annotations

import errno
import functools
import importlib
import os
from contextlib import contextmanager
from pathlib import Path


def confined(path, root) -> Path | None:
    """``path`` (absolute, or relative to the working directory) with every symbolic link
    followed, when that lies inside ``root`` (itself resolved); else None. Nothing is opened."""
    try:
        real = Path(os.path.realpath(path))
        top = Path(os.path.realpath(root))
    except (OSError, ValueError):
        return None
    return real if real == top or real.is_relative_to(top) else None


def lexically_inside(path, root) -> bool:
    """Does ``path``, as written (links not followed), name a place under ``root``?"""
    try:
        return Path(os.path.abspath(path)).is_relative_to(os.path.abspath(root))
    except ValueError:
        return False


@contextmanager
def atomic_open(path, binary: bool = False):
    """A file opened for writing that appears at ``path`` only when the ``with`` block ends without
    an error: written to a temporary file in the same folder, then renamed over ``path``. An error
    leaves the old file as it was. An existing file keeps its permission bits; a new one gets the
    usual ones (0666 less the umask)."""
    path = Path(path)
    if os.path.isdir(path):
        raise IsADirectoryError(errno.EISDIR, os.strerror(errno.EISDIR), str(path))
    try:
        mode = os.stat(path).st_mode & 0o7777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    import tempfile  # here, not at the top: a check that writes no file never imports it (start-up)

    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".trimtab-tmp", dir=path.parent)
    try:
        with (os.fdopen(fd, "wb") if binary else os.fdopen(fd, "w", encoding="utf-8")) as fh:
            yield fh
        os.chmod(tmp, mode)
        try:
            os.replace(tmp, path)
        except OSError as exc:  # name the file the user asked for, not the temporary one
            raise type(exc)(exc.errno, exc.strerror, str(path)) from None
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_atomic(path, data: bytes | str) -> None:
    """Write ``data`` to ``path`` at once (see ``atomic_open``)."""
    with atomic_open(path, binary=True) as fh:
        fh.write(data.encode("utf-8") if isinstance(data, str) else data)


# --- caches: in git's own folder or the user's cache folder, never in the working tree ----------
MAX_CACHE_BYTES = 256 * 1024 * 1024


def cache_file(start: Path, name: str) -> Path | None:
    """Where the cache file ``name`` is kept: git's own directory (found from ``start``, the working
    tree), folder ``trimtab``, else the user's cache folder; None when neither can be used."""
    import subprocess

    try:
        res = subprocess.run(["git", "rev-parse", "--git-common-dir"], cwd=start, capture_output=True,
                             text=True, timeout=10)
        if res.returncode == 0 and res.stdout.strip():
            git_dir = Path(res.stdout.strip())
            if not git_dir.is_absolute():
                git_dir = start / git_dir
            # a checked folder may ship its own `.git` (an archive, not a clone): a link there, or at
            # the cache folder, would lead the write elsewhere, so no cache is kept at all
            if (start / ".git").is_symlink() or (git_dir / "trimtab").is_symlink():
                return None
            return git_dir / "trimtab" / name
    except (OSError, subprocess.SubprocessError):
        pass
    base = os.environ.get("XDG_CACHE_HOME") or (str(Path.home() / ".cache") if Path.home() != Path("/") else "")
    return Path(base) / "trimtab" / name if base else None


def read_cache(path: Path | None, version: int, stamp: str) -> dict:
    """The ``files`` table of a JSON cache written by ``write_cache`` for this version and stamp;
    {} when it is missing, too large, damaged or written for something else."""
    import json

    if path is None:
        return {}
    try:
        if path.stat().st_size > MAX_CACHE_BYTES:
            return {}
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return {}
    if not isinstance(data, dict) or data.get("version") != version or data.get("stamp") != stamp:
        return {}
    rows = data.get("files")
    return rows if isinstance(rows, dict) else {}


def write_cache(path: Path | None, version: int, stamp: str, rows: dict) -> None:
    """Write a JSON cache at once; a cache that cannot be written is simply not kept."""
    import json

    if path is None:
        return
    try:
        if path.parent.is_symlink():  # made a link since it was chosen: never written through
            return
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_open(path) as fh:
            json.dump({"version": version, "stamp": stamp, "files": rows}, fh)
    except OSError:
        pass


def content_hash(data: bytes) -> str:
    """The key a cache keeps a file's derived values under: the hash of its bytes and their count."""
    return sha256_hex(data) + f":{len(data)}"


def sha256_hex(data: bytes) -> str:
    """SHA-256 (FIPS 180-4) of ``data`` in hexadecimal: every digest trimtab makes (cache keys,
    finding fingerprints)."""
    return _sha256()(data).hexdigest()


@functools.cache
def _sha256():
    """The interpreter's built-in SHA-256 where it has one (the same digest; hashlib's first import
    loads a whole crypto library, which costs more than a one-file check's own work), else hashlib's."""
    for name in ("_sha2", "_sha256"):  # the built-in module's name from 3.12, before 3.12
        try:
            return importlib.import_module(name).sha256
        except ImportError:
            pass
    import hashlib

    return hashlib.sha256
