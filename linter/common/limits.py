"""The bounds every input is read under (the settings' ``[limits]`` table; docs/hostile-input.md)."""
from __future__ import annotations


from .record import FrozenRecord


class Limits(FrozenRecord):
    max_bytes: int  # 4 MiB: a file costs time per value it holds (docs/hostile-input.md)
    max_depth: int
    max_aliases: int

    def __init__(self, max_bytes: int = 4 * 1024 * 1024, max_depth: int = 200, max_aliases: int = 1000) -> None:
        object.__setattr__(self, "max_bytes", max_bytes)
        object.__setattr__(self, "max_depth", max_depth)
        object.__setattr__(self, "max_aliases", max_aliases)

    _fields = ("max_bytes", "max_depth", "max_aliases")  # repr, equality and hash (common/record.py)
