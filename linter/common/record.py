"""What the value classes share: their ``__repr__``, ``__eq__`` and (for immutable ones) ``__hash__``.

The value classes (``Location``, ``Finding``, ``Rule``, ``Settings``, ...) are plain classes with an
``__init__`` of their own and a ``_fields`` tuple naming their fields in order; ``Record`` gives
them the methods a dataclass would generate, read from ``_fields``. A dataclass generates those
methods when its module is imported, by compiling source text for each one: about 1.5 ms a class,
some 60 ms of a one-file check's start-up over the classes on the check path, and the dataclasses
module imports ``inspect`` (see docs/perf.md). These are ordinary functions, loaded from the
byte-code cache once. They behave as the generated ones did: equality compares the fields in order
between instances of the same class, a mutable class is unhashable, an immutable one
(``FrozenRecord``) hashes its fields and refuses assignment and deletion.
"""
from __future__ import annotations

from operator import attrgetter
from reprlib import recursive_repr
from typing import Callable, ClassVar


class FrozenInstanceError(AttributeError):
    """An attempt to assign to, or delete, a field of an immutable value."""


def frozen_setattr(self, name: str, value) -> None:
    raise FrozenInstanceError(f"cannot assign to field {name!r}")


def frozen_delattr(self, name: str) -> None:
    raise FrozenInstanceError(f"cannot delete field {name!r}")


def _no_fields(_obj) -> tuple:
    return ()


class Record:
    """``__repr__`` and ``__eq__`` from ``_fields``; unhashable (a mutable value)."""

    __slots__ = ()
    _fields: ClassVar[tuple[str, ...]] = ()
    _values = staticmethod(_no_fields)  # the fields' values, as one tuple (set per class below)

    def __init_subclass__(cls, **kwargs) -> None:
        super().__init_subclass__(**kwargs)
        names = cls._fields
        # perf: one attrgetter per class (a single field read as a 1-tuple, as a dataclass compares)
        values: Callable[[object], tuple] = _no_fields
        if len(names) > 1:
            values = attrgetter(*names)
        elif names:
            one = attrgetter(names[0])

            def values(obj) -> tuple:  # a 1-tuple, as a dataclass compares
                return (one(obj),)
        cls._values = staticmethod(values)  # type: ignore[arg-type]  # any one-argument callable

    @recursive_repr()
    def __repr__(self) -> str:
        return f"{self.__class__.__qualname__}(" + ", ".join(
            f"{name}={getattr(self, name)!r}" for name in self._fields) + ")"

    def __eq__(self, other) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return self._values(self) == other._values(other)

    __hash__ = None  # type: ignore[assignment]  # mutable and compared by value: unhashable


class FrozenRecord(Record):
    """A ``Record`` that hashes its fields and refuses assignment and deletion (an immutable value)."""

    __slots__ = ()

    def __hash__(self) -> int:  # type: ignore[override]  # the base's None: unhashable
        return hash(self._values(self))

    __setattr__ = frozen_setattr
    __delattr__ = frozen_delattr
