"""What composition produces, below both its readers (compose: config files; shell: launch
scripts): the node kinds a composed tree adds (a value given on the command line, a reference that
could not be resolved, a value known only at launch), the composed root, and the composition
problems. Imported by the composer, the launch-script reader and the resolver; imports only the
located tree."""
from __future__ import annotations


from ..load.document import Mapping, Node, Problem, Scalar
from ..common.findings import Location
from ..common.record import Record

REMOVE_TAG = "!trimtab/remove"


class CompositionProblem(Problem):
    """A problem of composition, located in the file that holds the offending line."""

    path: str | None
    end_line: int
    end_col: int
    key_path: str
    subject: str

    def __init__(
            self, kind: str, message: str, line: int = 0, col: int = 0, related: list[Location] | None = None,
            path: str | None = None, end_line: int = 0, end_col: int = 0, key_path: str = "", subject: str = ""
    ) -> None:
        self.kind = kind
        self.message = message
        self.line = line
        self.col = col
        self.related = [] if related is None else related
        self.path = path
        self.end_line = end_line
        self.end_col = end_col
        self.key_path = key_path
        self.subject = subject

    _fields = (  # type: ignore[assignment]  # Problem's fields and its own
        "kind", "message", "line", "col", "related", "path", "end_line", "end_col", "key_path", "subject",
    )

    def location(self) -> Location:
        return Location(self.path, self.line, self.col, self.end_line, self.end_col, "", self.key_path)


class Composed(Record):
    root: Node
    problems: list[CompositionProblem]
    files: list[str]  # every file the run was composed from

    def __init__(
            self, root: Node, problems: list[CompositionProblem] | None = None, files: list[str] | None = None
    ) -> None:
        self.root = root
        self.problems = [] if problems is None else problems
        self.files = [] if files is None else files

    _fields = ("root", "problems", "files")  # repr, equality (common/record.py)


class ComposedMapping(Mapping):
    """The root of a composed run: a mapping that also carries the origin chains."""

    __slots__ = ("chains", "roles", "notes")

    def __init__(self):
        super().__init__()
        self.chains: dict[str, list[Location]] = {}
        self.roles: dict[str, str] = {}  # dotted key path -> the layer its value came from
        self.notes: list = []  # values known only at launch (CompositionProblems of this run)


class Unresolved(Scalar):
    """A reference that could not be resolved (a cycle, an unknown target): it stays in the run as
    written, with no value, so no rule reasons about the text of the reference itself."""

    __slots__ = ()

    @property
    def value11(self):
        return None

    @property
    def value12(self):
        return None

    def value(self, version: str = "1.2"):
        # Scalar.value reads the two YAML versions' caches itself (perf), not through these properties
        return None if version == "1.1" or version == "1.2" else Scalar.value(self, version)


class Unknown(Unresolved):
    """A value known only at launch (a launch script's command substitution, a resolver): no value,
    and the reason (``why``). The resolver leaves its concept out of the run, so no rule reasons
    about it; the run's notes say what trimtab would need."""

    __slots__ = ("why",)
    why: str  # what trimtab would need to know the value


class GivenScalar(Scalar):
    """A value given on the command line: typed as YAML 1.2 types it, whatever the file version."""

    __slots__ = ()

    @property
    def value11(self):
        return self.value12

    def value(self, version: str = "1.2"):
        return self.value12
