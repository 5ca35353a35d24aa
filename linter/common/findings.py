"""Findings: what a rule reports, where, and how to tell it apart from the next one."""
from __future__ import annotations

import enum
from typing import Any

from .paths import sha256_hex
from .record import FrozenRecord, Record
from .redact import mask


class Level(enum.IntEnum):
    """SARIF result levels, ordered so that a gate can compare them."""

    NOTE = 1
    WARNING = 2
    ERROR = 3

    @classmethod
    def parse(cls, text: "str | Level") -> "Level":
        if isinstance(text, Level):
            return text
        try:
            return cls[str(text).upper()]
        except KeyError:
            raise ValueError(f"unknown level {text!r} (expected error, warning or note)") from None

    def __str__(self) -> str:
        return self.name.lower()


class Location(FrozenRecord):
    """A place in a file (1-based line and column, as a person counts them).

    ``path`` is None for a value that came from the command line; ``line`` is 0 when a
    location names a whole file rather than a place in it.
    """

    path: str | None
    line: int
    col: int
    end_line: int
    end_col: int
    message: str
    key_path: str

    def __init__(
            self, path: str | None, line: int = 0, col: int = 0, end_line: int = 0, end_col: int = 0,
            message: str = "", key_path: str = ""
    ) -> None:
        # perf: written straight into the instance dict (assignment is refused): 0.5 us a Location
        # against 1.3 us through object.__setattr__, and a check makes some 150,000 of them
        d = self.__dict__
        d["path"] = path
        d["line"] = line
        d["col"] = col
        d["end_line"] = end_line
        d["end_col"] = end_col
        d["message"] = message
        d["key_path"] = key_path

    # repr, equality and hash (common/record.py)
    _fields = (
        "path", "line", "col", "end_line", "end_col", "message", "key_path",
    )

    def with_message(self, message: str) -> "Location":
        return Location(self.path, self.line, self.col, self.end_line, self.end_col, message, self.key_path)

    def label(self) -> str:
        if self.path is None:
            return "<command line>"
        if not self.line:
            return self.path
        return f"{self.path}:{self.line}:{self.col}"


class _Keep:
    """``Edit.value`` default: the fix keeps the value (see ``Edit``)."""

    __slots__ = ()

    def __repr__(self) -> str:
        return "KEEP"

    def __reduce__(self):  # one object across worker processes
        return "KEEP"


KEEP = _Keep()


class Edit(FrozenRecord):
    """A safe fix: replace the text of one scalar (by its character span) with new text.

    ``value`` is what the new text must read as, under YAML 1.1 and YAML 1.2 alike. The default
    KEEP means the fix keeps the meaning: the new text reads as the old text reads under YAML 1.2
    (a respelling, or quoting). A rule that corrects a value it can prove (a stated product that
    disagrees with its factors) sets ``value`` to the corrected value. ``trimtab.adopt.fix`` refuses an
    edit whose result does not read so, or that changes anything else in the file."""

    path: str
    start: int  # character offset of the scalar's first character in the decoded text
    end: int
    old: str
    new: str
    value: Any

    def __init__(self, path: str, start: int, end: int, old: str, new: str, value: Any = KEEP) -> None:
        object.__setattr__(self, "path", path)
        object.__setattr__(self, "start", start)
        object.__setattr__(self, "end", end)
        object.__setattr__(self, "old", old)
        object.__setattr__(self, "new", new)
        object.__setattr__(self, "value", value)

    _fields = ("path", "start", "end", "old", "new", "value")  # repr, equality and hash (common/record.py)


class Finding(Record):
    rule_id: str
    level: Level
    message: str
    location: Location
    related: list[Location]
    key_path: str
    suggestion: str
    help: str
    fix: Edit | None
    # The normalised value that the finding is about; part of the fingerprint, never shown.
    subject: Any
    fingerprint: str
    cwe: int | None

    def __init__(
            self, rule_id: str, level: Level, message: str, location: Location,
            related: list[Location] | None = None, key_path: str = "", suggestion: str = "", help: str = "",
            fix: Edit | None = None, subject: Any = None, fingerprint: str = "", cwe: int | None = None
    ) -> None:
        self.rule_id = rule_id
        self.level = level
        self.message = message
        self.location = location
        self.related = [] if related is None else related
        self.key_path = key_path
        self.suggestion = suggestion
        self.help = help
        self.fix = fix
        self.subject = subject
        self.fingerprint = fingerprint
        self.cwe = cwe

    # repr, equality (common/record.py)
    _fields = (
        "rule_id", "level", "message", "location", "related", "key_path", "suggestion", "help", "fix",
        "subject", "fingerprint", "cwe",
    )

    def finish(self) -> "Finding":
        if not self.fingerprint:
            self.fingerprint = fingerprint(self.rule_id, self.location.path, self.key_path, self.subject)
        return self.masked()

    def masked(self) -> "Finding":
        """The finding with every shown text masked (``trimtab.common.redact.mask``): done where a finding is
        finished, in the process that read the files, so no credential travels further. The
        fingerprint is computed from the subject, never from the shown text, and does not change."""
        self.message = mask(self.message)
        self.suggestion = mask(self.suggestion)
        self.help = mask(self.help)
        self.related = [r.with_message(mask(r.message)) if r.message else r for r in self.related]
        if self.location.message:
            self.location = self.location.with_message(mask(self.location.message))
        return self

    def __getstate__(self) -> dict:
        # Pickled (a worker's results, findings spilled to disk): the subject as the fingerprint
        # reads it, which is all that is used of it and always picklable.
        state = dict(self.__dict__)
        if state["subject"] is not None:
            state["subject"] = _normalise(state["subject"])
        return state

    def sort_key(self) -> tuple:
        loc = self.location
        return (loc.path or "", loc.line, loc.col, self.rule_id, self.message)


def fingerprint(rule_id: str, path: str | None, key_path: str, subject: Any) -> str:
    """Rule + file + key path + normalised value: survives moved lines and reformatting,
    changes when the offending value changes."""
    text = "\x1f".join([rule_id, path or "", key_path, _normalise(subject)])
    return sha256_hex(text.encode("utf-8"))[:32]



def _normalise(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    if isinstance(value, (list, tuple)):
        return "[" + ",".join(_normalise(v) for v in value) + "]"
    return str(value)
