"""Which reader a file named for checking takes: a launch script (linter/compose/shell.py) or a
YAML or JSON config (linter/load/loader.py). Apart from the shell reader so that a check of configs
alone never imports it (start-up, docs/perf.md)."""
from __future__ import annotations

import re

from ..load import loader
from ..load.discover import matches
from ..load.document import Document

# Generic default (settings: [tool.trimtab.launch] scripts): which files are launch scripts.
SCRIPTS = ["**/*.sh", "**/*.bash"]
SHELLS = re.compile(r"^#!\s*\S*/(?:env\s+)?(?:ba|da|k|z)?sh\b")


def is_script(shown: str, settings, data: bytes | None = None) -> bool:
    launch = getattr(settings, "launch", None) or {}
    if matches(shown, launch.get("scripts", SCRIPTS)):
        return True
    if data is not None:
        first = data[:200].split(b"\n", 1)[0].decode("utf-8", "replace")
        return bool(SHELLS.match(first))
    return False


def load(path: str, shown: str, settings) -> Document:
    """Any file trimtab checks: a launch script (by the settings' globs, or a shell's ``#!`` line
    when the name is not a config's), else a YAML or JSON config."""
    if is_script(shown, settings):
        return _read(path, shown, settings)
    if not shown.lower().endswith((".yaml", ".yml", ".json")):
        data, why = loader.read(path, settings.limits)
        if not why and data is not None:
            if is_script(shown, settings, data):
                return _read(path, shown, settings, data)
            return loader.load(path, shown, settings.limits, data=data)
    return loader.load(path, shown, settings.limits)


def runs_of(doc: Document) -> list:
    """The roots a run is composed from: a script's training commands, a config's documents."""
    return doc.runs if doc.fmt == "shell" else doc.roots


def is_config(path: str, shown: str, settings) -> bool:
    """Is a file named on the command line one trimtab checks: YAML, JSON (by name, or by the
    settings' include globs) or a launch script (by the settings' globs or a shell's ``#!`` line)?"""
    if shown.lower().endswith((".yaml", ".yml", ".json")) or matches(shown, settings.include):
        return True
    if is_script(shown, settings):
        return True
    try:
        with open(path, "rb") as fh:
            head = fh.read(200)
    except OSError:
        return True  # unreadable: reported as such by the check, not as "not a config"
    return is_script(shown, settings, head)


def _read(path: str, shown: str, settings, data: bytes | None = None) -> Document:
    from .shell import read

    return read(path, shown, settings, data)
