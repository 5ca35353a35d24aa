"""The bounds every input is read under (the settings' ``[limits]`` table; docs/hostile-input.md)."""
from __future__ import annotations

from reprlib import recursive_repr

from .record import frozen_delattr, frozen_setattr


class Limits:
    max_bytes: int  # 4 MiB: a file costs time per value it holds (docs/hostile-input.md)
    max_depth: int
    max_aliases: int

    def __init__(self, max_bytes: int = 4 * 1024 * 1024, max_depth: int = 200, max_aliases: int = 1000) -> None:
        object.__setattr__(self, "max_bytes", max_bytes)
        object.__setattr__(self, "max_depth", max_depth)
        object.__setattr__(self, "max_aliases", max_aliases)

    @recursive_repr()
    def __repr__(self) -> str:
        return (f"{self.__class__.__qualname__}("
            f"max_bytes={self.max_bytes!r}, max_depth={self.max_depth!r}, max_aliases={self.max_aliases!r})")

    def __eq__(self, other) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return ((self.max_bytes, self.max_depth, self.max_aliases) ==
            (other.max_bytes, other.max_depth, other.max_aliases))

    def __hash__(self) -> int:
        return hash((self.max_bytes, self.max_depth, self.max_aliases))

    __setattr__ = frozen_setattr
    __delattr__ = frozen_delattr
