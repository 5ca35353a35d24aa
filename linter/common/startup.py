"""The cyclic garbage collector paused while the ``trimtab`` command starts.

Start-up (imports, the settings, the rules) allocates some hundred thousand objects that live as
long as the process and leaves almost no cyclic garbage, yet the collector's allocation counter
ran 30-40 collections over it: 30-45 ms of a one-file check (docs/perf.md). The command pauses
the collector before it imports anything (``__main__``) and resumes it when the files are about to
be read (``Pipeline.run``), having frozen what start-up made (the collector never scans it); a
library caller's collector is never touched.
"""
from __future__ import annotations

import gc

_paused = False


def pause() -> None:
    """Pause the collector for start-up (if it runs)."""
    global _paused
    if gc.isenabled():
        gc.disable()
        _paused = True


def resume() -> None:
    """Resume the collector if start-up paused it (once; later calls do nothing)."""
    global _paused
    if _paused:
        _paused = False
        # what start-up made lives as long as the process: frozen first, the collector's first
        # collection does not scan it (perf: it scanned all of it, 13 ms as traced; a one-file
        # check's median CPU 181 -> 170 ms, regular install)
        gc.freeze()
        gc.enable()
