"""Report: findings -> human text or JSON (the JSON schema ships as report.schema.json)."""
from __future__ import annotations

import json
from typing import Iterable, TextIO

from . import __version__
from .findings import Finding, Level, Location

JSON_FORMAT_VERSION = 1

_COLOURS = {Level.ERROR: "\033[31m", Level.WARNING: "\033[33m", Level.NOTE: "\033[36m"}
_RESET, _DIM, _BOLD = "\033[0m", "\033[2m", "\033[1m"


def _where(loc: Location) -> str:
    return loc.label()


def text(findings: Iterable[Finding], out: TextIO, colour: bool = False) -> None:
    for f in findings:
        level = str(f.level)
        if colour:
            level = f"{_COLOURS[f.level]}{level}{_RESET}"
            head = f"{_BOLD}{_where(f.location)}{_RESET}: {level} {_BOLD}{f.rule_id}{_RESET} {f.message}"
        else:
            head = f"{_where(f.location)}: {level} {f.rule_id} {f.message}"
        out.write(head + "\n")
        for r in f.related:
            line = f"    {_where(r)}: {r.message}" if r.message else f"    {_where(r)}"
            out.write((f"{_DIM}{line}{_RESET}" if colour else line) + "\n")
        if f.suggestion:
            out.write(f"    suggestion: {f.suggestion}\n")
        if f.help:
            out.write(f"    help: {f.help}\n")


def _loc(loc: Location) -> dict:
    d = {"path": loc.path, "line": loc.line, "col": loc.col, "end_line": loc.end_line, "end_col": loc.end_col}
    if loc.message:
        d["message"] = loc.message
    if loc.key_path:
        d["key_path"] = loc.key_path
    return d


def finding_dict(f: Finding) -> dict:
    return {
        "rule": f.rule_id,
        "level": str(f.level),
        "message": f.message,
        "location": _loc(f.location),
        "related": [_loc(r) for r in f.related],
        "key_path": f.key_path,
        "suggestion": f.suggestion,
        "help": f.help,
        "fingerprint": f.fingerprint,
        "cwe": f.cwe,
        "fixable": f.fix is not None,
    }


def as_dict(findings: list[Finding], summary: dict, exit_code: int) -> dict:
    return {
        "tool": "trimtab",
        "version": __version__,
        "format": JSON_FORMAT_VERSION,
        "findings": [finding_dict(f) for f in findings],
        "summary": summary,
        "exit": exit_code,
    }


_SLOT = "\x00findings\x00"


def json_report(findings: list[Finding], summary: dict, exit_code: int, out: TextIO) -> None:
    """The same bytes as ``json.dump(as_dict(...), indent=2)``, written one finding at a time
    (perf: an audit of thousands of files never holds every finding twice, once as a dict)."""
    head, _, tail = json.dumps({**as_dict([], summary, exit_code), "findings": _SLOT}, indent=2,
                               ensure_ascii=False).partition(json.dumps(_SLOT))
    out.write(head)
    if not findings:
        out.write("[]")
    else:
        out.write("[")
        sep = "\n    "
        for i, f in enumerate(findings):
            item = json.dumps(finding_dict(f), indent=2, ensure_ascii=False).replace("\n", sep)
            out.write(("," if i else "") + sep + item)
        out.write("\n  ]")
    out.write(tail)
    out.write("\n")
