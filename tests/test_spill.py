"""The Spill that keeps a check's memory flat: what it returns equals what the standard library
returns for the same items held in memory, and a check that spills reports the same bytes as
one that does not.

References: ``sorted`` (the standard library's sort is stable, Python docs "Sorting HOW TO"),
``pickle`` round trips, ``json.dumps(indent=2)`` of the whole SARIF log.
"""
from __future__ import annotations

import io
import json
import pickle
import random
from operator import itemgetter
from pathlib import Path

import pytest

from support import FIXTURES, run_cli
from trimtab.common import spill
from trimtab.common.findings import Finding, Level, Location


def _items(n: int, seed: int = 3) -> list[tuple[int, int]]:
    rng = random.Random(seed)
    return [(rng.randrange(7), i) for i in range(n)]  # few keys, many ties: stability shows


@pytest.mark.parametrize("buffer", [1, 2, 5, 64, 10_000])
def test_sorted_spill_equals_the_stable_sort_of_the_same_items(buffer):
    items = _items(300)
    s = spill.Spill(key=itemgetter(0), buffer=buffer)
    s.extend(items)
    want = sorted(items, key=itemgetter(0))  # reference: stable sort in memory
    assert list(s) == want
    assert list(s) == want  # read again: the same
    assert len(s) == 300
    assert s.on_disk == (0 if buffer > 300 else 300 - 300 % buffer)


@pytest.mark.parametrize("buffer", [1, 7, 10_000])
def test_unkeyed_spill_keeps_arrival_order(buffer):
    items = [{"n": i, "text": "x" * (i % 5)} for i in range(100)]
    s = spill.Spill(buffer=buffer)
    s.extend(items)
    assert list(s) == items


def test_spill_within_its_buffer_never_opens_a_file():
    with spill.Spill(key=itemgetter(0), buffer=10) as s:
        s.extend(_items(9))
        assert s._file is None and s.on_disk == 0
        s.append((0, 99))
        assert s._file is not None and s.on_disk == 10
    assert s._file is None and list(s) == []  # closed: the file is gone


def test_spill_refuses_an_empty_buffer():
    with pytest.raises(ValueError):
        spill.Spill(buffer=0)


def test_spilled_finding_keeps_its_fingerprint_and_reads_its_subject_as_text():
    """A subject is only used for the fingerprint: a pickled finding carries it as the fingerprint
    reads it, so an object that cannot be pickled does not break a spill or a worker."""
    unpicklable = [lambda: None, 2.0]
    f = Finding("KL-1", Level.ERROR, "m", Location("a.yaml", 3, 1), subject=unpicklable).finish()
    back = pickle.loads(pickle.dumps(f))
    assert back.fingerprint == f.fingerprint
    assert back.subject == f"[{unpicklable[0]},2]"  # as the fingerprint reads it (2.0 as 2)
    assert (back.rule_id, back.level, back.location) == (f.rule_id, f.level, f.location)


def test_stream_is_made_again_on_each_pass():
    calls = []

    def make():
        calls.append(1)
        return iter([1, 2, 3])

    s = spill.Stream(make)
    assert list(s) == [1, 2, 3] and list(s) == [1, 2, 3] and len(calls) == 2


# --- the whole check, spilling after every item vs. never -------------------------------------
def _report(monkeypatch, buffer: int, fmt: str, cwd: Path) -> tuple[int, str]:
    monkeypatch.setattr(spill, "BUFFER", buffer)
    r = run_cli("check", "--format", fmt, "--jobs", "1", cwd=cwd)
    return r.code, r.out


@pytest.mark.parametrize("fmt", ["json", "sarif", "text"])
@pytest.mark.parametrize("where", ["rules", "demo", "rules/OPT-4/composed"])
def test_a_check_that_spills_reports_the_same_bytes(monkeypatch, fmt, where):
    """Every fixture (set-rule clashes, runs composed from shared bases, acceptances in bases,
    duplicates merged) with a buffer of one item, of three, and of the default."""
    cwd = FIXTURES / where
    want = _report(monkeypatch, 10**9, fmt, cwd)
    assert want[1].strip() and want[0] == 1  # the fixtures have findings: the comparison means something
    for buffer in (1, 3):
        assert _report(monkeypatch, buffer, fmt, cwd) == want, buffer


def test_no_writable_temporary_folder_is_a_plain_error(monkeypatch):
    import errno
    import tempfile

    def refuse(*_a, **_k):
        raise FileNotFoundError(errno.ENOENT, "No usable temporary directory found")

    monkeypatch.setattr(tempfile, "TemporaryFile", refuse)
    monkeypatch.setattr(spill, "BUFFER", 1)
    r = run_cli("check", cwd=FIXTURES / "demo")
    assert r.code == 2 and "Traceback" not in r.err
    assert r.err.strip().splitlines()[-1] == ("trimtab: error: the temporary folder: cannot be written or "
                                               "read: No usable temporary directory found; set TMPDIR to a "
                                               "writable folder")


def test_opt4_groups_a_spilled_set(monkeypatch):
    """The set rule's own grouping spills too: the clash is still found, with the same text."""
    cwd = FIXTURES / "rules" / "OPT-4"
    monkeypatch.setattr(spill, "BUFFER", 10**9)
    want = [f for f in json.loads(run_cli("check", "--format", "json", cwd=cwd).out)["findings"]
            if f["rule"] == "OPT-4"]
    monkeypatch.setattr(spill, "BUFFER", 1)
    got = [f for f in json.loads(run_cli("check", "--format", "json", cwd=cwd).out)["findings"]
           if f["rule"] == "OPT-4"]
    assert got == want and len(want) >= 2


def test_streamed_sarif_is_byte_identical_to_json_dump_of_the_log():
    """Reference: the standard library's json.dumps of the whole log (indent 2)."""
    from trimtab.report import sarif
    from trimtab.engine.registry import Registry

    findings = [Finding("KL-1", Level.ERROR, "naïve \"quote\"\nline", Location("a.yaml", 3, 1),
                        related=[Location("b.yaml", 1, 2, message="there")], key_path="kl.coef",
                        suggestion="s", cwe=94).finish(),
                Finding("YML-1", Level.NOTE, "m", Location("a.yaml")).finish()]
    rules = list(Registry().ordered())
    for items in ([], findings[:1], findings):
        out = io.StringIO()
        sarif.write(items, rules, Path("/tmp"), out)
        assert out.getvalue() == json.dumps(sarif.build(items, rules, Path("/tmp")), indent=2,
                                            ensure_ascii=False) + "\n"
