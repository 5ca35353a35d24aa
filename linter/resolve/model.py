"""The RunModel: resolved concepts with their origins, and the arithmetic derived from them."""
from __future__ import annotations

from reprlib import recursive_repr
from typing import Any

from ..load.document import Document, Node, Scalar
from ..common.findings import Location
from ..common.record import Record


def whole(x):
    """``x`` as a positive whole number (an integral float as an int), else None: zero, negative,
    fractional, boolean and non-numeric values are reported by the rules, never computed with."""
    if isinstance(x, bool):
        return None
    if isinstance(x, float) and x.is_integer():
        x = int(x)
    return x if isinstance(x, int) and x > 0 else None


class Value(Record):
    """One resolved concept: its value, the node it was read from and how it got there."""

    concept: str
    value: Any
    node: Node | None
    via: str  # keymap, alias, native, derived, override
    key: str  # the key path in the user's file
    chain: list[Location]  # base -> experiment -> reference -> override
    inputs: tuple[str, ...]  # for derived values: the concepts it was computed from
    note: str  # how it was read or converted ("x group size 8")
    raw: Any  # the value as written, before unit conversion
    unit: Any  # for a batch count: the unit it is written in, when the key map states it (arithmetic.Unit)
    # a derived value without a location of its own: where it is placed, its first stated input's
    # Value (or the file's path), read when its location is first asked for (arithmetic.settle)
    at: Any = None

    def __init__(
            self, concept: str, value: Any, location: Location | None, node: Node | None = None, via: str = "",
            key: str = "", chain: list[Location] | None = None, inputs: tuple[str, ...] = (), note: str = "",
            raw: Any = None, unit: Any = None, keyed: bool = False
    ) -> None:
        """``location`` None: the node's own, made when first read; ``keyed``: that location is
        known by ``key`` (a value reached through a reference, at the key that refers to it)."""
        self.concept = concept
        self.value = value
        self._location = location
        self._keyed = keyed
        self.node = node
        self.via = via
        self.key = key
        self.chain = [] if chain is None else chain
        self.inputs = inputs
        self.note = note
        self.raw = raw
        self.unit = unit

    # repr, equality (common/record.py)
    _fields = (
        "concept", "value", "location", "node", "via", "key", "chain", "inputs", "note", "raw", "unit",
    )

    @property
    def location(self) -> Location:
        """Where the value was written (the command line: path None)."""
        loc = self._location
        if loc is None:
            if self.node is not None:
                # perf: made on first read: resolve stores some 64,000 values on the benchmark corpus
                # and the rules read the place of few of them (0.3 s of Location objects saved)
                loc = self.node.location()
                if self._keyed and loc.key_path != self.key:
                    loc = Location(loc.path, loc.line, loc.col, loc.end_line, loc.end_col, loc.message, self.key)
                self._location = loc
            elif self.at is not None:
                at = self.at
                loc = self._location = at.location if isinstance(at, Value) else Location(at)
        return loc  # type: ignore[return-value]  # None only when given None without a node

    @location.setter
    def location(self, loc: Location) -> None:
        self._location = loc

    @property
    def whole(self):
        return whole(self.value)

    @property
    def number(self):
        v = self.value
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            return None
        return v


class Unused(Record):
    """A key that looks like a concept but was not used for it, and why (explain lists them)."""

    concept: str
    key: str  # the key path in the user's file
    location: Location
    reason: str  # "in the evaluation section 'eval'", "a list where a whole number is expected", ...
    kind: str  # evaluation; shape (reported: VOC-2); lost (another key was read); ambiguous; keymap
    shown: str  # the value as written, in short (a list or mapping)
    node: Any  # the value's node

    def __init__(
            self, concept: str, key: str, location: Location, reason: str, kind: str = "", shown: str = "",
            node: Any = None
    ) -> None:
        self.concept = concept
        self.key = key
        self.location = location
        self.reason = reason
        self.kind = kind
        self.shown = shown
        self.node = node

    # repr, equality (common/record.py)
    _fields = (
        "concept", "key", "location", "reason", "kind", "shown", "node",
    )


class Component:
    """One reward component of reward.sources; each field a Value (or absent)."""

    index: int
    location: Location
    fields: dict[str, Value]

    def __init__(self, index: int, location: Location, fields: dict[str, Value] | None = None) -> None:
        self.index = index
        self.location = location
        self.fields = {} if fields is None else fields

    @recursive_repr()
    def __repr__(self) -> str:
        return (f"{self.__class__.__qualname__}("
            f"index={self.index!r}, location={self.location!r}, fields={self.fields!r})")

    def __eq__(self, other) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return (self.index, self.location, self.fields) == (other.index, other.location, other.fields)

    __hash__ = None  # type: ignore[assignment]  # mutable and compared by value: unhashable

    def get(self, name: str):
        v = self.fields.get(name)
        return v.value if v is not None else None

    def loc(self, name: str) -> Location:
        v = self.fields.get(name)
        return v.location if v is not None else self.location


class RunModel(Record):
    doc: Document
    index: int  # document index inside a multi-document file
    values: dict[str, Value]  # stated (read from files)
    derived: dict[str, Value]  # computed from other concepts
    components: list[Component]
    ambiguous: dict[str, list[Location]]
    mistyped: list[tuple[Value, str]]  # (value, expected type)
    unused: list[Unused]  # keys that look like a concept but were not used
    is_rl: bool
    version: str  # the YAML version the user's loader reads concept values under
    readers: tuple  # (glob, reader): the settings' readers table, the first match wins
    reader_named: bool  # the settings name the reader of files no glob matches
    settings: Any
    files: list[str]  # every file this run was composed from
    chains: dict[str, list[Location]]  # key path -> origin chain (compose)
    roles: dict[str, str]  # key path -> the layer its value came from (compose)
    notes: list  # values known only at launch (compose problems, note level)
    unknown: dict[str, Value]  # concepts whose value is known only at launch
    touched: set  # unknown or unusable concepts a rule asked for (engine.run_rule)
    unusable: set  # concepts written with a value of the wrong shape (VOC-2)
    # concepts written but not read, because a switch turns their mechanism off -> the switch's Value
    dead: dict[str, Value]

    def __init__(
            self, doc: Document, index: int = 0, values: dict[str, Value] | None = None,
            derived: dict[str, Value] | None = None, components: list[Component] | None = None,
            ambiguous: dict[str, list[Location]] | None = None, mistyped: list[tuple[Value, str]] | None = None,
            unused: list[Unused] | None = None, is_rl: bool = False, version: str = "1.1", readers: tuple = (),
            reader_named: bool = False, settings: Any = None, files: list[str] | None = None,
            chains: dict[str, list[Location]] | None = None, roles: dict[str, str] | None = None,
            notes: list | None = None, unknown: dict[str, Value] | None = None, touched: set | None = None,
            unusable: set | None = None, dead: dict[str, Value] | None = None
    ) -> None:
        self.doc = doc
        self.index = index
        self.values = {} if values is None else values
        self.derived = {} if derived is None else derived
        self.components = [] if components is None else components
        self.ambiguous = {} if ambiguous is None else ambiguous
        self.mistyped = [] if mistyped is None else mistyped
        self.unused = [] if unused is None else unused
        self.is_rl = is_rl
        self.version = version
        self.readers = readers
        self.reader_named = reader_named
        self.settings = settings
        self.files = [] if files is None else files
        self.chains = {} if chains is None else chains
        self.roles = {} if roles is None else roles
        self.notes = [] if notes is None else notes
        self.unknown = {} if unknown is None else unknown
        self.touched = set() if touched is None else touched
        self.unusable = set() if unusable is None else unusable
        self.dead = {} if dead is None else dead
        self._readers: dict[str, tuple[str, bool]] = {}  # shown path -> reader (see reader)
        self._versions: dict[str | None, str] = {}  # a node's file as written -> its reader's version (read)

    # repr, equality (common/record.py)
    _fields = (
        "doc", "index", "values", "derived", "components", "ambiguous", "mistyped", "unused", "is_rl",
        "version", "readers", "reader_named", "settings", "files", "chains", "roles", "notes", "unknown",
        "touched", "unusable", "dead",
    )

    @property
    def path(self) -> str:
        return self.doc.path

    def reader(self, node) -> tuple[str, bool]:
        """(the reader the file a node was written in meets, whether the settings name it): JSON
        for a .json file, else the first of the settings' readers whose glob matches the file, else
        yaml_version (named when written in the settings, else the default, assumed)."""
        shown = getattr(node, "file", None) or self.doc.path
        known = self._readers.get(shown)  # perf: once per file of the run
        if known is None:
            known = self._readers[shown] = self._reader_of(shown)
        return known

    def _reader_of(self, shown: str) -> tuple[str, bool]:
        if shown.lower().endswith(".json") or shown == self.doc.path and self.doc.fmt == "json":
            return "json", True
        if self.readers:
            from ..load.discover import matches

            for glob, reader in self.readers:
                if matches(shown, (glob,)):
                    return reader, True
        return self.version, self.reader_named

    def read(self, node):
        """A node's value as its file's reader reads it (a scalar; other nodes as they are)."""
        if isinstance(node, Scalar):
            # perf: the reader's version kept by the node's file as written (reader, inline); with the
            # scalar's own and the typing memo's shorter paths, 0.54% fewer instructions a check
            file = getattr(node, "file", None)
            version = self._versions.get(file)
            if version is None:
                version = self._versions[file] = self.reader(node)[0]
            return node.value(version)
        return node

    @property
    def stage(self) -> str:
        v = self.values.get("run.stage")
        return str(v.value).lower() if v is not None and v.value is not None else "rl"

    def get(self, concept: str) -> Value | None:
        """The live value of a concept (stated or derived); None when it is not found, known only at
        launch, or dead (its mechanism is switched off: see ``dead``)."""
        if self.dead and concept in self.dead:
            return None
        v = self.values.get(concept)
        if v is None and (self.unknown and concept in self.unknown or self.unusable and concept in self.unusable):
            self.touched.add(concept)
        return v if v is not None else self.derived.get(concept)

    def live(self) -> set[str]:
        """The concepts ``get`` finds (stated or derived, and not dead). perf: a rule's needs are
        tested against it in one set operation (engine.run_rules)."""
        live = self.values.keys() | self.derived.keys()
        if self.dead:
            live -= self.dead.keys()
        return live

    def stated(self, concept: str) -> Value | None:
        if self.unknown and concept in self.unknown or self.unusable and concept in self.unusable:
            self.touched.add(concept)
        return self.values.get(concept)

    def value(self, concept: str, default=None):
        v = self.get(concept)
        return default if v is None else v.value

    def num(self, concept: str):
        v = self.get(concept)
        return None if v is None else v.number

    def int(self, concept: str):
        n = self.num(concept)
        if n is None:
            return None
        if isinstance(n, float):
            return int(n) if n.is_integer() else None
        return n

    def text(self, concept: str) -> str | None:
        v = self.get(concept)
        if v is None or v.value is None or isinstance(v.value, (bool, list, dict)):
            return None
        return str(v.value).strip().lower()

    def loc(self, concept: str, message: str = "") -> Location:
        v = self.get(concept)
        if v is None:
            return Location(self.path, 0, 0, message=message)
        if v.via == "derived":
            # point at the first stated input
            for name in v.inputs:
                src = self.values.get(name)
                if src is not None:
                    return src.location.with_message(message)
        return v.location.with_message(message) if message else v.location

    def has(self, *concepts: str) -> bool:
        return all(self.get(c) is not None for c in concepts)

    def origin(self, concept: str) -> str:
        """A short human description of where a value came from."""
        v = self.get(concept)
        if v is None:
            return "not found"
        if v.via == "derived":
            return "derived from " + ", ".join(v.inputs)
        text = v.location.label()
        if v.note:
            text += f" ({v.note})"
        return text
