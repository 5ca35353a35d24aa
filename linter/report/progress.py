"""A progress line on a terminal's standard error: files done, findings so far, elapsed time."""
from __future__ import annotations

import time
from typing import TextIO


class Progress:
    def __init__(self, total: int, out: TextIO, width: int = 28):
        self.total, self.out, self.width = total, out, width
        self.done = self.findings = 0
        self.start = self.last = time.monotonic()

    def __call__(self, result) -> None:
        self.done += 1
        self.findings += len(result.findings)
        now = time.monotonic()
        if now - self.last < 0.1 and self.done < self.total:
            return
        self.last = now
        filled = self.width * self.done // max(self.total, 1)
        bar = "#" * filled + "-" * (self.width - filled)
        self.out.write(f"\r[{bar}] {self.done}/{self.total} files, {self.findings} findings, "
                       f"{now - self.start:.1f}s")
        self.out.flush()

    def close(self) -> None:
        self.out.write("\r\033[K")
        self.out.flush()
