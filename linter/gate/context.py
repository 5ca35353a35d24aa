"""The other runs of the repository, for the rules over several runs.

A check of some files only (paths given, ``--since``, ``--staged``, the pre-commit framework's
parallel batches) judges those files against every run config of the repository: the rules over
several runs (``scope="set"``) see one entry per run of the whole repository, found through the
same discovery, settings and limits, read-only; only their findings about a checked file are
reported.

What those rules need of each other run (a few resolved values) is kept in a cache keyed by the
content of each file and of every file its runs were composed from. The cache lives in git's own
directory (``git rev-parse --git-common-dir``, folder ``trimtab``) or, outside a git repository,
in the user's cache folder; never in the working tree. It holds JSON only, is read with a size
bound, and a cache that cannot be read (missing, damaged, written by another version or for
other settings) is treated as absent.
"""
from __future__ import annotations

import os
import time
from pathlib import Path

from ..common import paths
from ..common.findings import Location
from ..resolve.model import Value

CACHE_VERSION = 1
RACY_NS = 3_000_000_000  # a status newer than this before the read is not trusted (coarse file system clocks)


def cache_file(start: Path, key: str) -> Path | None:
    """Where the cache of other runs ``key`` is kept (``paths.cache_file``)."""
    return paths.cache_file(start, f"runs-{key}.json")


def digest(path: Path, limit: int) -> str | None:
    """The content hash of a file (its first ``limit`` + 1 bytes and their count), or None when it
    cannot be read (a named pipe or a device is never opened: ``loader.read``)."""
    from ..load.loader import Limits, read

    data, why = read(str(path), Limits(max_bytes=limit))
    return None if why or data is None else paths.content_hash(data)


# --- values <-> JSON ------------------------------------------------------------------------
def _loc(loc: Location) -> list:
    return [loc.path, loc.line, loc.col, loc.end_line, loc.end_col, loc.message, loc.key_path]


def _unloc(row) -> Location:
    path, line, col, end_line, end_col, message, key_path = row
    return Location(path if path is None else str(path), int(line), int(col), int(end_line), int(end_col),
                    str(message), str(key_path))


def _value(v: Value) -> dict:
    return {"concept": v.concept, "value": v.value, "at": _loc(v.location), "via": v.via, "key": v.key,
            "chain": [_loc(c) for c in v.chain], "inputs": list(v.inputs), "note": v.note}


def _unvalue(d: dict) -> Value:
    value = d["value"]
    if not isinstance(value, (str, int, float, bool, type(None))):
        raise ValueError("not a scalar")
    return Value(str(d["concept"]), value, _unloc(d["at"]), None, str(d["via"]), str(d["key"]),
                 [_unloc(c) for c in d["chain"]], tuple(str(i) for i in d["inputs"]), str(d["note"]))


class RunCache:
    """Per file (shown path): its content hash, the hashes of the files its runs were composed
    from, and the values the rules over several runs need of each of its runs."""

    def __init__(self, path: Path | None, stamp: str):
        self.path, self.stamp = path, stamp
        self.rows: dict[str, dict] = paths.read_cache(path, CACHE_VERSION, stamp)
        self.dirty = False
        self.status: dict[str, list] = {}  # shown path -> its status when it was read and hashed here

    def content(self, shown: str, disk, limit: int) -> str | None:
        """The content hash of a file: the one its row holds while the file's status (device, inode,
        size, modification and change times) is the one recorded when it was hashed, as git's index
        does; else the file is read and hashed now. A status is recorded only when the file's last
        change is older than RACY_NS before it was read (a change within the file system's time
        resolution of the read could otherwise keep the same status)."""
        try:
            st = os.stat(disk)
        except OSError:
            return None
        status = [st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns]
        row = self.rows.get(shown)
        if isinstance(row, dict) and row.get("stat") == status and isinstance(row.get("hash"), str):
            return row["hash"]
        now = time.time_ns()
        own = digest(Path(disk), limit)
        if own is not None and max(st.st_mtime_ns, st.st_ctime_ns) + RACY_NS < now:
            self.status[shown] = status
            if isinstance(row, dict) and row.get("hash") == own:
                row["stat"] = status  # the same content: known by its status from now on
                self.dirty = True
        return own

    def get(self, shown: str, own: str, hashes) -> dict | None:
        """The row of a file whose content (``own``) and composed-from files (``hashes(shown)``
        gives each one's hash now) are unchanged, else None."""
        row = self.rows.get(shown)
        if not isinstance(row, dict) or row.get("hash") != own:
            return None
        deps = row.get("deps")
        if not isinstance(deps, dict) or any(hashes(d) != h for d, h in deps.items()):
            return None
        return row

    def put(self, shown: str, row: dict) -> None:
        if shown in self.status:
            row["stat"] = self.status[shown]
        self.rows[shown] = row
        self.dirty = True

    def save(self) -> None:
        """Write the cache (atomically); a cache that cannot be written is simply not kept."""
        if self.dirty:
            paths.write_cache(self.path, CACHE_VERSION, self.stamp, self.rows)


def entries_row(own: str, deps: dict, runs: list[tuple[int, dict[str, Value]]]) -> dict:
    return {"hash": own, "deps": deps,
            "runs": [{"index": i, "values": {c: _value(v) for c, v in values.items()}} for i, values in runs]}


def row_entries(row: dict) -> list[tuple[int, dict[str, Value]]]:
    """The runs of a cached row; raises ValueError (or KeyError, TypeError) when it is damaged."""
    return [(int(r["index"]), {str(c): _unvalue(v) for c, v in r["values"].items()}) for r in row["runs"]]


def _stamp(checker) -> str:
    """What the cached values depend on besides the files: trimtab's code, the settings that
    shape a run, the --set values and the concepts the rules over several runs need."""
    import json

    from .. import __version__

    s = checker.settings
    here = Path(__file__).parents[1]
    code = []
    for name in ("gate/runner.py", "compose/layers.py", "resolve/concepts.py", "common/vocabulary.py",
                 "load/loader.py", "common/scalars.py", "gate/context.py", "compose/shell.py"):
        try:
            st = (here / name).stat()
            code.append([name, st.st_mtime_ns, st.st_size])
        except OSError:
            code.append([name])
    parts = [CACHE_VERSION, __version__, code, sorted({c for r, _o, _l in checker.rules("set") for c in r.needs}),
             [list(o) for o in checker.options.overrides], repr(checker.resolve_opts), list(s.run_configs),
             s.layers, s.bases_key, s.defaults_key, s.launch, s.overrides, repr(s.limits), list(s.include),
             list(s.exclude)]
    return paths.sha256_hex(json.dumps(parts, default=repr, sort_keys=True).encode("utf-8", "surrogateescape"))


def other_entries(checker, checked, start: Path, files=None):
    """The SetEntries of every run config of the repository that was not checked itself, found
    through the same discovery and limits (``files``: that discovery's result, when it was made
    already), from the cache where each file (and every file its runs were composed from) is
    unchanged. A generator; the cache is written when it ends."""

    from .runner import SetEntry

    settings = checker.settings
    root = Path(settings.root).resolve()
    if files is None:
        from ..load.discover import discover

        files, _missing = discover([], root, settings.include, settings.exclude)
    limit = settings.limits.max_bytes
    others = [(disk, shown) for disk, shown in files if shown not in checked]
    if not others:
        return  # every run of the repository was checked itself: no cache to read (perf: start-up)
    stamp = _stamp(checker)
    # one cache per settings folder (the stamp inside it says what it was built for: a mismatch rebuilds it)
    where = cache_file(start, paths.sha256_hex(str(start).encode("utf-8", "surrogateescape"))[:24])
    cache = RunCache(where, stamp)
    hashes: dict[str, str | None] = {}

    def hash_of(shown: str) -> str | None:
        if shown not in hashes:
            hashes[shown] = cache.content(shown, root / shown, limit)
        return hashes[shown]

    for disk, shown in others:
        own = hashes[shown] = cache.content(shown, disk, limit)
        runs = None
        row = cache.get(shown, own, hash_of) if own else None
        if row is not None:
            try:
                runs = row_entries(row)
            except (KeyError, TypeError, ValueError, AttributeError):
                runs = None
        if runs is None:
            runs, deps, unsure = checker.other_runs(disk, shown)
            if own and not unsure:
                cache.put(shown, entries_row(own, {d: hash_of(d) for d in deps}, runs))
        for index, values in runs:
            yield SetEntry(shown, index, values)
    cache.save()
