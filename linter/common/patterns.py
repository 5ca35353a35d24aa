"""Regular expressions compiled on their first use, not at import: a module-level pattern that a
plain check of one file never uses costs nothing then (start-up, docs/perf.md). The standard
library's ``re`` does the work; the object stands in for the compiled pattern."""
from __future__ import annotations

import re
from typing import Any, AnyStr, cast

_METHODS = ("match", "fullmatch", "search", "sub", "subn", "split", "findall", "finditer")


class _OnFirstUse:
    def __init__(self, pattern, flags: int):
        self._args = (pattern, flags)

    def __getattr__(self, name: str) -> Any:
        compiled = re.compile(*self._args)
        for method in _METHODS:  # later calls find them here, without this lookup
            setattr(self, method, getattr(compiled, method))
        return getattr(compiled, name)

    def __repr__(self) -> str:
        return f"re.compile({self._args[0]!r}, {self._args[1]!r}) on first use"


def later(pattern: AnyStr, flags: int = 0) -> re.Pattern[AnyStr]:
    """``re.compile(pattern, flags)``, compiled when first used."""
    return cast("re.Pattern[AnyStr]", _OnFirstUse(pattern, flags))
