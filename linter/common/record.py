"""What the value classes share: refusing assignment to an immutable instance.

The value classes (``Location``, ``Finding``, ``Rule``, ``Settings``, ...) are plain classes whose
``__init__``, ``__repr__``, ``__eq__`` and ``__hash__`` are written out in their modules. A dataclass
generates those methods when its module is imported, by compiling source text for each one: about
1.5 ms a class, some 60 ms of a one-file check's start-up over the classes on the check path, and
the dataclasses module imports ``inspect`` (see docs/perf.md). Written out, they are loaded from
the byte-code cache like any other function. The written-out methods behave as the generated ones
did: equality compares the fields in order between instances of the same class, a mutable class
is unhashable, an immutable one hashes its fields and refuses assignment and deletion.
"""


class FrozenInstanceError(AttributeError):
    """An attempt to assign to, or delete, a field of an immutable value."""


def frozen_setattr(self, name: str, value) -> None:
    raise FrozenInstanceError(f"cannot assign to field {name!r}")


def frozen_delattr(self, name: str) -> None:
    raise FrozenInstanceError(f"cannot delete field {name!r}")
