"""The bounds every input is read under (the settings' ``[limits]`` table; docs/hostile-input.md)."""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Limits:
    max_bytes: int = 4 * 1024 * 1024  # 4 MiB: a file costs time per value it holds (docs/hostile-input.md)
    max_depth: int = 200
    max_aliases: int = 1000
