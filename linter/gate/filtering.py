"""Filter: acceptance comments in the file, the accepted-findings file, --only / --skip.

An acceptance is a comment on the finding's line or on the line above it::

    kl_coef: 0.0  # trimtab: accept KL-1 -- the recipe trains without KL on purpose

A reason after ``--`` is required. An acceptance without a reason does not suppress anything
and is reported; one that suppresses nothing is reported too.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator
from collections.abc import Set as AbcSet
from pathlib import Path

from ..common.findings import Finding, Level, Location
from ..common.redact import mask
from ..common.patterns import later
from ..common.record import Record

_ACCEPT = later(r"(?:^|\s)#\s*trimtab:\s*accept\b(?P<body>.*)$")
_IDS = later(r"[A-Za-z]+-\d+(?:\s*,\s*[A-Za-z]+-\d+)*")  # matched whole, on the text before "--"

ACC_NO_REASON = "ACC-1"
ACC_UNUSED = "ACC-2"
ACC_STALE = "ACC-3"
ACC_MALFORMED = "ACC-4"


class Acceptance(Record):
    line: int
    col: int
    ids: tuple[str, ...]
    reason: str
    used: bool

    def __init__(self, line: int, col: int, ids: tuple[str, ...], reason: str, used: bool = False) -> None:
        self.line = line
        self.col = col
        self.ids = ids
        self.reason = reason
        self.used = used

    _fields = ("line", "col", "ids", "reason", "used")  # repr, equality (common/record.py)


def acceptances(text: str) -> list[Acceptance]:
    out: list[Acceptance] = []
    if "trimtab:" not in text:
        return out
    for n, line in enumerate(text.splitlines(), 1):
        if "trimtab:" not in line:
            continue
        m = _ACCEPT.search(line)
        if not m:
            continue
        col = line.index("#", m.start()) + 1
        # linear in the length of the line: the ids, then an optional "-- reason" (one regular
        # expression with a lazy reason and trailing blanks was quadratic on a long blank run)
        head, _dash, reason = m["body"].partition("--")
        head = head.strip()
        if not _IDS.fullmatch(head):
            out.append(Acceptance(n, col, (), ""))
            continue
        ids = tuple(i.strip().upper() for i in head.split(","))
        out.append(Acceptance(n, col, ids, reason.strip()))
    return out


def apply_acceptances(findings: list[Finding], text: str, path: str, active: set[str] | None = None,
                      report_unused: bool = True) -> list[Finding]:
    """Drop findings accepted in place; add findings about bad or unused acceptances.

    ``active``: the rules that ran; an acceptance of a rule that did not run (``--only``,
    ``--skip``, switched off) is not reported as unused."""
    accs = acceptances(text)
    if not accs:
        return findings
    by_line: dict[int, list[Acceptance]] = {}
    for a in accs:
        by_line.setdefault(a.line, []).append(a)
    lines = text.splitlines()
    kept = []
    for f in findings:
        if f.location.path != path:
            kept.append(f)
            continue
        line = f.location.line
        candidates = list(by_line.get(line, ()))
        above = by_line.get(line - 1, ())
        if above and line - 2 < len(lines) and lines[line - 2].lstrip().startswith("#"):
            candidates += above
        accepted = False
        for a in candidates:
            if f.rule_id in a.ids and a.reason:
                a.used = accepted = True
        if not accepted:
            kept.append(f)
    if not report_unused:
        return kept
    for a in accs:
        loc = Location(path, a.line, a.col)
        if not a.ids:
            kept.append(Finding(ACC_MALFORMED, Level.WARNING,
                                "acceptance comment names no rule id: write `# trimtab: accept ID -- reason`",
                                loc, subject=a.line).finish())
        elif not a.reason:
            kept.append(Finding(ACC_NO_REASON, Level.WARNING,
                                f"acceptance of {', '.join(a.ids)} gives no reason; it accepts nothing until "
                                "a reason follows ' -- '", loc, subject=",".join(a.ids)).finish())
        elif not a.used and (active is None or any(i in active for i in a.ids)):
            kept.append(Finding(ACC_UNUSED, Level.WARNING,
                                f"acceptance of {', '.join(a.ids)} matches no finding on this line or the next; "
                                "remove it", loc, subject=",".join(a.ids)).finish())
    return kept


def select(findings: list[Finding], only: set[str], skip: set[str]) -> list[Finding]:
    def hit(rule_id: str, wanted: set[str]) -> bool:
        return rule_id in wanted or rule_id.split("-")[0] in wanted

    return [f for f in findings
            if (not only or hit(f.rule_id, only)) and not hit(f.rule_id, skip)]


# --- accepted-findings file -------------------------------------------------------------
ACCEPTED_VERSION = 1


def write_accepted(path: Path, findings: list[Finding], keep: Iterable[dict] = ()) -> int:
    """Write the accepted-findings file: one entry per fingerprint (with a count when one
    fingerprint stands for several findings), sorted by file, rule and fingerprint so that the
    file is stable and diffs well. ``keep``: entries of files this run did not check."""
    entries: dict[str, dict] = {}
    for f in findings:
        row = entries.get(f.fingerprint)
        if row is not None:
            row["count"] = row.get("count", 1) + 1
            continue
        entries[f.fingerprint] = {
            "fingerprint": f.fingerprint,
            "rule": f.rule_id,
            "file": f.location.path or "<command line>",
            "what": _short(mask(f.message)),  # masked whole, then shortened: no part of a credential stays
        }
    for row in keep:
        entries.setdefault(row["fingerprint"], {k: (mask(v) if k == "what" and isinstance(v, str) else v)
                                                for k, v in row.items() if not k.startswith("_")})
    rows = sorted(entries.values(), key=lambda e: (str(e.get("file")), str(e.get("rule")), e["fingerprint"]))
    doc = {"trimtab_accepted": ACCEPTED_VERSION, "findings": rows}
    import json  # here, not at the top: start-up (perf)

    from ..common.paths import write_atomic

    write_atomic(path, json.dumps(doc, indent=2, ensure_ascii=False) + "\n")
    return len(rows)


def _short(message: str, limit: int = 100) -> str:
    return message if len(message) <= limit else message[: limit - 1] + "…"


class AcceptedFileError(Exception):
    pass


ACCEPTED_MAX_BYTES = 64 * 1024 * 1024


def read_accepted(path: Path) -> list[dict]:
    import json

    from ..common.limits import Limits
    from ..load.loader import read

    # a regular file only, of bounded size: a device or named pipe named here never hangs the check
    raw, why = read(str(path), Limits(max_bytes=ACCEPTED_MAX_BYTES))
    if raw is None:
        raise AcceptedFileError(f"{path}: {why}")
    if len(raw) > ACCEPTED_MAX_BYTES:
        raise AcceptedFileError(f"{path}: is larger than {ACCEPTED_MAX_BYTES} bytes; not read")
    try:
        text = raw.decode("utf-8")
        data = json.loads(text)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise AcceptedFileError(f"{path}: is not an accepted-findings file (invalid JSON: {exc})") from None
    if not isinstance(data, dict) or not isinstance(data.get("findings"), list):
        raise AcceptedFileError(f"{path}: is not an accepted-findings file (expected a 'findings' list)")
    rows = [r for r in data["findings"] if isinstance(r, dict) and isinstance(r.get("fingerprint"), str)]
    # where each entry is written, so that a stale one can be pointed at (never written back)
    where: dict[str, tuple[int, int]] = {}
    for n, line in enumerate(text.splitlines(), 1):
        for m in _FINGERPRINT.finditer(line):
            where.setdefault(m.group(1), (n, m.start() + 1))
    for r in rows:
        r["_line"], r["_col"] = where.get(r["fingerprint"], (0, 0))
    return rows


_FINGERPRINT = later(r'"fingerprint"\s*:\s*"([^"]*)"')


def apply_accepted(findings: Iterable[Finding], rows: list[dict], accepted_path: str,
                   checked_files: AbcSet[str] | None = None, tally: dict | None = None) -> Iterator[Finding]:
    """Drop findings recorded in the accepted-findings file; after them, report entries that
    match nothing (only for files that were checked in this run, so a partial run reports no
    false stale). A generator: findings pass through one at a time.

    An entry accepts as many findings with its fingerprint as its ``count`` (default 1), so a
    second finding that happens to share a fingerprint with an accepted one (the same duplicate
    key in another place of the file) still counts as new."""
    budget = {r["fingerprint"]: _count(r) for r in rows}
    wanted = {r["fingerprint"]: r for r in rows}
    used: dict[str, int] = {}
    for f in findings:
        if budget.get(f.fingerprint, 0) > 0:
            budget[f.fingerprint] -= 1
            used[f.fingerprint] = used.get(f.fingerprint, 0) + 1
        else:
            yield f
    if tally is not None:  # how many this pass accepted (the summary line says so)
        tally["accepted"] = sum(used.values())
    for fp, row in sorted(wanted.items(), key=lambda kv: (str(kv[1].get("file")), kv[0])):
        if used.get(fp, 0) >= _count(row):
            continue
        if checked_files is not None and row.get("file") not in checked_files:
            continue
        n = used.get(fp, 0)
        how = "no longer occurs" if not n else f"occurs {n} time(s), not {_count(row)}"
        yield Finding(ACC_STALE, Level.NOTE,
                      f"accepted finding {row.get('rule', '?')} in {row.get('file', '?')} {how} "
                      f"({row.get('what', '')}); remove its entry",
                      Location(accepted_path, row.get("_line", 0), row.get("_col", 0)), subject=fp).finish()


def _count(row: dict) -> int:
    n = row.get("count", 1)
    return n if isinstance(n, int) and not isinstance(n, bool) and n > 0 else 1
