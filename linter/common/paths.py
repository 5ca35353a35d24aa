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
import os
import tempfile
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
