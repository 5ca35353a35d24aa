"""A list that keeps at most a bufferful of its items in memory and the rest on disk.

A check of thousands of files must not grow with them (perf): the findings and the values the
set rules need are appended to a Spill as each file is done. While they fit in ``buffer`` items
they stay in memory and nothing touches the disk (a pre-commit run of a few files); beyond that,
each bufferful is written, sorted if the Spill has a key, as one run of pickled items to an
anonymous temporary file (removed by the system when it is closed, even after a crash).

Iterating reads the items back one at a time: in arrival order without a key; with a key, as
one stably sorted stream (``heapq.merge`` of the runs; ties keep their arrival order, because
each run is sorted stably and the merge prefers the earlier run). A Spill can be iterated any
number of times, but not appended to while it is being iterated.
"""
from __future__ import annotations

import itertools
import os
from collections.abc import Callable, Iterable, Iterator
from typing import Any

BUFFER = 1024  # items kept in memory by a Spill made without its own buffer size


class Spill:
    def __init__(self, key: Callable[[Any], Any] | None = None, buffer: int | None = None):
        self.key = key
        self.buffer = buffer if buffer is not None else BUFFER
        if self.buffer < 1:
            raise ValueError("a Spill needs a buffer of at least one item")
        self._items: list = []
        self._runs: list[tuple[int, int]] = []  # (offset, count) of each run written, in arrival order
        self._file: Any = None
        self._count = 0

    def append(self, item) -> None:
        self._items.append(item)
        self._count += 1
        if len(self._items) >= self.buffer:
            self._write_run()

    def extend(self, items: Iterable) -> None:
        for item in items:
            self.append(item)

    def __len__(self) -> int:
        return self._count

    @property
    def on_disk(self) -> int:
        """How many items have been written to the temporary file."""
        return sum(n for _o, n in self._runs)

    def _write_run(self) -> None:
        import pickle  # here, not at the top: a check that never spills never imports it (start-up)

        if self._file is None:
            import tempfile

            try:
                self._file = tempfile.TemporaryFile(prefix="trimtab-")
            except OSError as exc:  # the command reports it (exit 2) with this name and hint
                raise OSError(exc.errno, f"{exc.strerror or exc}; set TMPDIR to a writable folder",
                              "the temporary folder") from None
        f = self._file
        offset = f.seek(0, os.SEEK_END)
        items = sorted(self._items, key=self.key) if self.key is not None else self._items
        for item in items:
            pickle.dump(item, f, pickle.HIGHEST_PROTOCOL)
        self._runs.append((offset, len(items)))
        self._items = []

    def _read(self, offset: int, count: int) -> Iterator:
        import pickle

        f = self._file
        pos = offset
        for _ in range(count):
            f.seek(pos)  # runs are read side by side: each keeps its own place in the file
            item = pickle.load(f)
            pos = f.tell()
            yield item

    def __iter__(self) -> Iterator:
        streams: list[Iterator] = [self._read(o, n) for o, n in self._runs]
        if self.key is None:
            return itertools.chain(*streams, list(self._items))
        streams.append(iter(sorted(self._items, key=self.key)))
        if len(streams) == 1:
            return streams[0]
        import heapq

        return heapq.merge(*streams, key=self.key)

    def __enter__(self) -> "Spill":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        if self._file is not None:
            self._file.close()
            self._file = None
        self._items, self._runs, self._count = [], [], 0


class Stream:
    """A re-iterable sequence made by a function: each pass calls it again (so a report can count
    the findings in one pass and write them in the next, without holding them)."""

    def __init__(self, make: Callable[[], Iterable]):
        self._make = make

    def __iter__(self) -> Iterator:
        return iter(self._make())
