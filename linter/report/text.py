"""Report: findings -> human text or JSON (the JSON schema ships as report.schema.json)."""
from __future__ import annotations

from typing import Iterable, TextIO

from .. import __version__
from ..common.findings import Finding, Level, Location
from ..common.redact import for_text, mask

JSON_FORMAT_VERSION = 1

_COLOURS = {Level.ERROR: "\033[31m", Level.WARNING: "\033[33m", Level.NOTE: "\033[36m"}
_RESET, _DIM, _BOLD = "\033[0m", "\033[2m", "\033[1m"


def _where(loc: Location) -> str:
    return for_text(loc.label())


def text(findings: Iterable[Finding], out: TextIO, colour: bool = False) -> None:
    """One line per finding, then its related places, suggestion and help. Every field is masked and
    its control characters and line breaks made visible (``trimtab.common.redact.for_text``): nothing in a
    file can forge a report line or send a terminal a command. A help paragraph is printed only at
    the first finding that has it (a report of twenty findings of one rule prints its help once)."""
    helped: set[str] = set()
    for f in findings:
        level = str(f.level)
        rule_id, message = for_text(f.rule_id), for_text(f.message)
        if colour:
            level = f"{_COLOURS[f.level]}{level}{_RESET}"
            head = f"{_BOLD}{_where(f.location)}{_RESET}: {level} {_BOLD}{rule_id}{_RESET} {message}"
        else:
            head = f"{_where(f.location)}: {level} {rule_id} {message}"
        out.write(head + "\n")
        for r in f.related:
            line = f"    {_where(r)}: {for_text(r.message)}" if r.message else f"    {_where(r)}"
            out.write((f"{_DIM}{line}{_RESET}" if colour else line) + "\n")
        if f.suggestion:
            out.write(f"    suggestion: {for_text(f.suggestion)}\n")
        if f.help and f.help not in helped:
            helped.add(f.help)
            out.write(f"    help: {for_text(f.help)}\n")


def _loc(loc: Location) -> dict:
    d = {"path": loc.path, "line": loc.line, "col": loc.col, "end_line": loc.end_line, "end_col": loc.end_col}
    if loc.message:
        d["message"] = mask(loc.message)
    if loc.key_path:
        d["key_path"] = mask(loc.key_path)
    return d


def finding_dict(f: Finding) -> dict:
    return {
        "rule": f.rule_id,
        "level": str(f.level),
        "message": mask(f.message),
        "location": _loc(f.location),
        "related": [_loc(r) for r in f.related],
        "key_path": mask(f.key_path),
        "suggestion": mask(f.suggestion),
        "help": mask(f.help),
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


_SLOT = "\x00items\x00"


def dump_streamed(doc: dict, slot: tuple, items: Iterable[dict], out: TextIO) -> None:
    """Write ``doc`` as ``json.dump(doc, out, indent=2, ensure_ascii=False)`` would, with the list
    at ``slot`` (keys and list indexes, e.g. ``("runs", 0, "results")``) taken from ``items`` one
    at a time (perf: thousands of findings are never held at once, as objects or as dicts)."""
    import json  # here, not at the top: a text report never imports it (start-up)

    holder = doc
    for key in slot[:-1]:
        holder = holder[key]
    holder[slot[-1]] = _SLOT
    head, _, tail = json.dumps(doc, indent=2, ensure_ascii=False).partition(json.dumps(_SLOT))
    out.write(head)
    line = head[head.rfind("\n") + 1:]  # the line that holds the list's key: its indent
    indent = line[:len(line) - len(line.lstrip(" "))]
    sep = "\n" + indent + "  "
    first = True
    for item in items:
        text = json.dumps(item, indent=2, ensure_ascii=False).replace("\n", sep)
        out.write(("[" if first else ",") + sep + text)
        first = False
    out.write("[]" if first else "\n" + indent + "]")
    out.write(tail)


def json_report(findings: Iterable[Finding], summary: dict, exit_code: int, out: TextIO) -> None:
    """The JSON report, written one finding at a time (see ``dump_streamed``)."""
    dump_streamed(as_dict([], summary, exit_code), ("findings",), map(finding_dict, findings), out)
    out.write("\n")
