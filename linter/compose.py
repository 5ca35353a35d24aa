"""Compose: one document's tree -> the run as it will launch (bases, interpolation, overrides).

Every composed node keeps the file and line where it was written, so findings point there.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from .document import Document, Node
from .findings import Finding


@dataclass
class Composed:
    root: Node
    findings: list[Finding] = field(default_factory=list)
    files: list[str] = field(default_factory=list)  # every file the run was composed from


class Composer:
    def __init__(self, settings, overrides=()):
        self.settings = settings
        self.overrides = list(overrides)

    def compose(self, doc: Document, root: Node, path: str) -> Composed:
        return Composed(root, [], [doc.path])

    def texts(self, doc: Document):
        """(shown path, text) of the other files a run of ``doc`` was composed from."""
        return ()
