"""``python -m trimtab`` and the ``trimtab`` command.

trimtab runs inside the repository it checks, and anything there may be hostile: a committed
``yaml.py`` or ``jsonschema/`` must never be imported instead of the real library. ``python -m``
puts the working directory first on the import path, so before anything else is imported it is
taken off (with any other entry that names the working directory, such as an empty entry from
``PYTHONPATH``). A planted ``trimtab/`` package itself cannot be guarded against from inside:
start Python with ``-P`` (or ``-I``), or use the ``trimtab`` command, as the installed hooks do.
"""
import os
import sys


def _off_the_import_path() -> None:
    """Drop the working directory (and '' and '.') from ``sys.path``."""
    try:
        here = os.path.realpath(os.getcwd())
    except OSError:
        here = None
    keep = []
    for entry in sys.path:
        if not entry or entry == ".":
            continue
        try:
            if here is not None and os.path.realpath(entry) == here:
                continue
        except (OSError, ValueError):
            pass
        keep.append(entry)
    sys.path[:] = keep


def main() -> int:
    _off_the_import_path()
    from .common import startup

    startup.pause()  # until the files are read (start-up; common/startup.py)
    from .cli import main as cli_main

    return cli_main()


def command() -> int:
    """The installed ``trimtab`` command: ``main``, then the process ends without the interpreter's
    teardown. Freeing every object of the run one by one and the last collection cost 35-45 ms of a
    one-file check, more than the check itself (start-up, docs/perf.md); nothing of it is needed:
    every file trimtab writes is closed when written. The exit handlers still run and the standard
    streams are flushed first; when a stream cannot be flushed (a closed pipe), the process ends
    the usual way. ``python -m trimtab`` ends the usual way."""
    code = main()
    try:
        for stream in (sys.stdout, sys.stderr, sys.__stdout__, sys.__stderr__):
            if stream is not None:
                stream.flush()
    except (OSError, ValueError):
        return code
    import atexit

    atexit._run_exitfuncs()
    os._exit(code if isinstance(code, int) else 1)


if __name__ == "__main__":
    sys.exit(main())
