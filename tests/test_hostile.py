"""Hostile and broken input: every file gets findings and an exit status, in bounded time and
memory, with line numbers a person can trust. Never a traceback, never a write."""
from __future__ import annotations

import codecs
import os
import time
import tracemalloc
from pathlib import Path

import pytest
import yaml

from support import FIXTURES, MEASURED, bounded, run_cli
from trimtab.load import loader
from trimtab.gate.runner import Checker
from trimtab.load.document import Scalar, Sequence, walk
from trimtab.engine.registry import Registry
from trimtab.common.settings import Settings, SettingsError

HOSTILE = FIXTURES / "hostile"


@pytest.fixture
def repo(tmp_path):
    (tmp_path / ".git").mkdir()  # stops the settings search: tmp_path is the repository root
    return tmp_path


@pytest.fixture(scope="module")
def checker_factory():
    registry = Registry()

    def make(root: Path, **settings) -> Checker:
        return Checker(Settings(root=root, **settings), registry)

    return make


def check(path: Path, *args, cwd: Path | None = None):
    r = run_cli("check", "--format", "json", *args, str(path), cwd=cwd or path.parent)
    assert "Traceback" not in r.err, r.err
    return r


def no_internal_errors(findings):
    bad = [f for f in findings if (f["rule"] if isinstance(f, dict) else f.rule_id).startswith("TOOL")]
    assert not bad, bad


# --- location oracle on the fixtures: PyYAML's pure-Python composer is the reference ----------------
def _reference(data: bytes):
    """(line, column) of every node, keys and values, as PyYAML's pure-Python composer
    (yaml.SafeLoader) marks them (mark.line + 1, mark.column + 1): the reference."""
    out, seen = [], set()
    roots = list(yaml.compose_all(data, Loader=yaml.SafeLoader))

    def visit(n):
        if id(n) in seen:
            return
        seen.add(id(n))
        out.append((n.start_mark.line + 1, n.start_mark.column + 1))
        if isinstance(n, yaml.MappingNode):
            for k, v in n.value:
                visit(k)
                visit(v)
        elif isinstance(n, yaml.SequenceNode):
            for v in n.value:
                visit(v)

    for r in roots:
        if r is not None:
            visit(r)
    return out


def _mine(doc):
    """trimtab's (line, col) of every node once, in document order (the engine's own walk)."""
    return [(n.line, n.col) for r in doc.roots for n in walk(r)]


def _variants(data: bytes):
    """The file as written, with CRLF and with CR line ends, with a UTF-8 byte-order mark, and as
    UTF-16 with a byte-order mark (for fixtures that are UTF-8 text)."""
    yield "as written", data
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return
    data = data.removeprefix(codecs.BOM_UTF8)
    crlf = data.replace(b"\r\n", b"\n").replace(b"\n", b"\r\n")
    yield "CRLF", crlf
    yield "CR", crlf.replace(b"\r\n", b"\r")
    yield "UTF-8 BOM", codecs.BOM_UTF8 + data
    yield "UTF-8 BOM + CRLF", codecs.BOM_UTF8 + crlf
    yield "UTF-16 BOM", data.decode("utf-8").encode("utf-16")  # Python writes the BOM


def test_fixture_locations_equal_pyyaml_marks():
    files = sorted(p for p in FIXTURES.glob("**/*.y*ml") if p.is_file())  # a broken link is a fixture too
    assert len(files) >= 8 and any(p.parent == HOSTILE for p in files)
    compared, unread = 0, []
    for path in files:
        for how, data in _variants(path.read_bytes()):
            try:
                ref = _reference(data)
            except (yaml.YAMLError, RecursionError):
                continue  # a fixture that is broken on purpose: its finding is another test's
            doc = loader.parse_bytes(loader.Document(str(path)), data, loader.Limits())
            if not doc.readable:
                unread.append(f"{path.relative_to(FIXTURES)} ({how})")
                continue
            assert _mine(doc) == ref, (path.relative_to(FIXTURES), how,
                                       [(a, b) for a, b in zip(_mine(doc), ref) if a != b][:3])
            compared += len(ref)
    # a fixture the reference reads but trimtab refuses (over a limit, say) has its own finding
    assert len(unread) <= len(files) // 10, unread
    MEASURED.append(f"location oracle: {compared} nodes of {len(files)} fixtures x 6 encodings/line ends "
                    f"equal PyYAML's marks" + (f"; not compared: {', '.join(unread)}" if unread else ""))


def test_oracle_covers_tabs_flow_and_multiline():
    """The hostile scalar fixture holds what the issue names; PyYAML agrees with the spots."""
    text = (HOSTILE / "scalars-flow.yaml").read_text(encoding="utf-8")
    assert '"tab\tinside\tquotes"' in text and "{a: 1, b: [x, y, {c: d}], e: }" in text
    doc = loader.load(str(HOSTILE / "scalars-flow.yaml"))
    notes = doc.roots[0].get("notes")
    e = notes.get("flow").get("e")
    # the empty value after "e:" sits right after the colon (col 37, PyYAML's mark), not at the "}" (col 38)
    assert (e.line, e.col) == (5, 37)
    assert notes.get("quoted").text == "tab\tinside\tquotes"
    assert (notes.get("plain").line, notes.get("plain").col) == (13, 10)


# --- bombs and limits ---------------------------------------------------------------------------
def _alias_bomb(levels: int = 9, refs: int = 9) -> str:
    lines = ["l0: &l0 [wren, wren, wren, wren, wren, wren, wren, wren, wren]"]
    for i in range(1, levels + 1):
        lines.append(f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * refs) + "]")
    return "\n".join(lines) + "\n"


def _mapping_bomb(levels: int = 9, refs: int = 9) -> str:
    lines = ["m0: &m0 {lr: 3e-6, group_size: 8}"]
    for i in range(1, levels + 1):
        lines.append(f"m{i}: &m{i} {{" + ", ".join(f"k{j}: *m{i - 1}" for j in range(refs)) + "}")
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("shape", ["sequence", "mapping"])
def test_nested_alias_bomb_is_fast_andbounded(repo, checker_factory, shape):
    text = _alias_bomb() if shape == "sequence" else _mapping_bomb()
    path = repo / "bomb.yaml"
    path.write_text(text, encoding="utf-8")
    checker = checker_factory(repo)
    checker.check_file(str(path), "warm-up")  # imports, compiled patterns
    tracemalloc.start()
    start = time.perf_counter()
    with bounded(20, "the alias bomb"):
        res = checker.check_file(str(path), "bomb.yaml")
    seconds = time.perf_counter() - start
    _cur, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    no_internal_errors(res.findings)
    # expanded, the document holds 9**10 scalars (about 3.5 billion); checked, it costs its text
    assert seconds < 2.0, seconds
    assert peak < 32 * 2**20, peak
    MEASURED.append(f"alias bomb ({shape}, 9 levels x 9 references): {seconds * 1000:.0f} ms, "
                    f"peak {peak / 2**20:.1f} MiB traced")


def test_alias_limit_is_a_located_finding(repo):
    (repo / "trimtab.toml").write_text("[limits]\nmax_aliases = 40\n")
    path = repo / "bomb.yaml"
    path.write_text(_alias_bomb(), encoding="utf-8")
    r = check(path, cwd=repo)
    found = r.of("YML-5")
    assert r.code == 1 and found, r.out
    assert "40 alias references" in found[0]["message"] and found[0]["location"]["line"] >= 2


def test_recursive_alias_terminates(repo):
    path = repo / "loop.yaml"
    path.write_text("a: &a [wren, *a]\nb: &b {self: *b, lr: 1}\n", encoding="utf-8")
    with bounded(10):
        r = check(path, cwd=repo)
    no_internal_errors(r.findings)
    assert r.code == 0, r.out


def test_nesting_past_the_depth_limit(repo):
    path = repo / "deep.yaml"
    path.write_text("a:\n" + "".join("  " * i + f"k{i}:\n" for i in range(1, 260)) + "  " * 260 + "leaf: 1\n")
    r = check(path, cwd=repo)
    [f] = r.of("YML-5")
    # the first key past 200 levels: k200, at line 201, indented by 400 spaces
    assert (f["location"]["line"], f["location"]["col"]) == (201, 401) and "200 levels" in f["message"], f
    assert r.code == 1


@pytest.mark.parametrize("text", ["[" * 100_000 + "]" * 100_000, "{a: " * 20_000 + "1" + "}" * 20_000])
def test_nesting_far_past_the_limit_is_located_not_a_recursion(repo, text):
    path = repo / "deeper.yaml"
    path.write_text(text)
    with bounded(20):
        r = check(path, cwd=repo)
    [f] = r.of("YML-5")
    # the bracket that passes 200 levels: the 201st '[' (column 201), or the 201st '{' (column 4 * 200 + 1)
    assert (f["location"]["line"], f["location"]["col"]) in ((1, 201), (1, 801)), f


def test_deep_json_is_a_located_finding(repo):
    path = repo / "deep.json"
    path.write_text('{"a": "[[[[",\n "b": ' + "[" * 50_000 + "]" * 50_000 + "}")
    r = check(path, cwd=repo)
    [f] = r.of("YML-5")
    assert (f["location"]["line"], f["location"]["col"]) == (2, 6 + 200) and r.code == 1, f


def test_file_past_the_size_limit_is_not_read(repo):
    (repo / "trimtab.toml").write_text("[limits]\nmax_bytes = 1000\n")
    path = repo / "big.yaml"
    path.write_text("notes: " + "x" * 2000 + "\n")
    r = check(path, cwd=repo)
    [f] = r.of("YML-5")
    assert "1000 bytes" in f["message"] and r.code == 1


def test_hundred_thousand_lines_check_in_linear_time(repo, checker_factory):
    checker = checker_factory(repo)

    def cpu(n: int, tries: int) -> float:
        path = repo / f"rows{n}.yaml"
        path.write_text("# a long data manifest\nrows:\n" + "".join(f"  - id: {i}\n" for i in range(n - 2)))
        best = float("inf")
        for _ in range(tries):
            start = time.process_time()  # CPU time: other processes on the host do not count
            with bounded(60):
                res = checker.check_file(str(path), path.name)
            best = min(best, time.process_time() - start)
        no_internal_errors(res.findings)
        return best

    small, large = cpu(25_000, 2), cpu(100_000, 1)
    ratio = large / small
    MEASURED.append(f"100,000-line file: {large:.2f} s CPU; 25,000 lines {small:.2f} s (ratio {ratio:.1f}, linear = 4)")
    assert ratio < 8, f"4x the lines took {ratio:.1f}x the time: not linear (quadratic would be 16x)"


def test_long_single_line(repo):
    path = repo / "long.yaml"
    path.write_text("notes: " + "wren " * 200_000 + "\nflow: [" + ", ".join(["1"] * 50_000) + "]\nlr: 3e-6 x\n")
    with bounded(20):
        r = check(path, cwd=repo)
    no_internal_errors(r.findings)
    assert r.code == 0


@pytest.mark.parametrize("text", ["", "# only a comment\n# and another\n", "\n\n   \n", "---\n...\n"])
def test_empty_and_comment_only_files_are_clean(repo, text):
    path = repo / "empty.yaml"
    path.write_text(text)
    r = check(path, cwd=repo)
    assert r.code == 0 and r.findings == [], r.out


def test_multi_document_file_checks_each_document_at_its_lines():
    r = check(HOSTILE / "multi-doc.yaml", cwd=HOSTILE)
    found = r.of("YML-3")
    assert [(f["location"]["line"], f["location"]["col"]) for f in found] == [(10, 7), (20, 7)], found
    assert r.json["summary"]["runs"] == 2


def test_utf16_with_bom_is_read_with_a_note_and_right_lines(repo):
    path = repo / "wide.yaml"
    path.write_bytes((HOSTILE / "anchors-merge.yaml").read_text(encoding="utf-8").encode("utf-16"))
    r = check(path, cwd=repo)
    notes = r.of("YML-4")
    assert notes and notes[0]["level"] == "note" and "UTF-16" in notes[0]["message"]
    [v] = r.of("YML-3")
    assert (v["location"]["line"], v["location"]["col"]) == (3, 7)


def test_invalid_utf8_is_located(repo):
    path = repo / "latin.yaml"
    path.write_bytes(b"run:\n  name: caf\xe9-7b\n")
    r = check(path, cwd=repo)
    [f] = r.of("YML-4")
    assert (f["location"]["line"], f["location"]["col"]) == (2, 12) and "0xe9" in f["message"]
    assert r.code == 1


def test_binary_content_is_a_finding(repo):
    path = repo / "weights.yaml"
    path.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)))
    r = check(path, cwd=repo)
    [f] = r.of("YML-4")
    assert "binary" in f["message"] and r.code == 1


# --- files and the repository -------------------------------------------------------------------------
GOOD = "run:\n  estimator: grpo\nrollout:\n  group_size: 8\nkl:\n  coef: 0.05\noptim:\n  lr: 3e-6\n"


def _rest_checked(r):
    """The other file of the run was still checked (its YAML 1.1/1.2 finding is there)."""
    assert any(f["rule"] == "YML-3" and f["location"]["path"].endswith("good.yaml") for f in r.findings), r.out


def test_unreadable_file(repo, monkeypatch):
    (repo / "good.yaml").write_text(GOOD)
    locked = repo / "locked.yaml"
    locked.write_text(GOOD)
    if os.geteuid() == 0:
        # root reads any file whatever its mode: simulate the refusal the kernel gives others
        real = os.open

        def refuse(path, *a, **k):
            if str(path).endswith("locked.yaml"):
                raise PermissionError(13, "Permission denied", str(path))
            return real(path, *a, **k)

        monkeypatch.setattr(loader.os, "open", refuse)
    else:
        locked.chmod(0)
    r = check(repo, cwd=repo)
    [f] = [f for f in r.of("YML-6") if f["location"]["path"] == "locked.yaml"]
    assert "permission denied" in f["message"] and r.code == 1
    _rest_checked(r)


def test_directory_given_as_a_file(repo, checker_factory):
    folder = repo / "conf.yaml"
    folder.mkdir()
    doc = loader.load(str(folder), "conf.yaml")
    assert [(p.kind, p.message) for p in doc.problems] == [("io", "is a directory, not a file")]
    res = checker_factory(repo).check_file(str(folder), "conf.yaml")
    assert [f.rule_id for f in res.findings] == ["YML-6"]


def test_broken_symlink(repo):
    (repo / "good.yaml").write_text(GOOD)
    (repo / "gone.yaml").symlink_to(repo / "deleted.yaml")
    r = check(repo, cwd=repo)
    [f] = [f for f in r.of("YML-6") if f["location"]["path"] == "gone.yaml"]
    assert "broken symbolic link" in f["message"]
    _rest_checked(r)


def test_pipe_named_as_a_config_does_not_hang(repo):
    (repo / "good.yaml").write_text(GOOD)
    os.mkfifo(repo / "pipe.yaml")
    with bounded(10, "a named pipe"):
        r = check(repo, cwd=repo)
    [f] = [f for f in r.of("YML-6") if f["location"]["path"] == "pipe.yaml"]
    assert "not a regular file" in f["message"]
    _rest_checked(r)


def test_path_outside_the_repository_is_a_finding_and_not_read(repo, tmp_path_factory, monkeypatch):
    outside = tmp_path_factory.mktemp("elsewhere") / "secret.yaml"
    outside.write_text(GOOD)
    (repo / "good.yaml").write_text(GOOD)
    (repo / "link.yaml").symlink_to(outside)
    opened = []
    real = loader.read
    monkeypatch.setattr(loader, "read", lambda path, *a: (opened.append(path), real(path, *a))[1])
    r = run_cli("check", "--format", "json", str(outside), ".", cwd=repo)
    assert "Traceback" not in r.err
    refused = [f for f in r.of("YML-6") if "outside the repository" in f["message"]]
    assert len(refused) == 2, r.findings  # the absolute path, and the link that leads out
    assert not any(Path(p).resolve() == outside.resolve() for p in opened), opened
    assert r.code == 1
    _rest_checked(r)


def test_file_that_changes_while_being_read(repo, monkeypatch):
    (repo / "good.yaml").write_text(GOOD)
    moving = repo / "moving.yaml"
    moving.write_text(GOOD)
    real = loader._read_fd

    def read_then_someone_writes(fd, limit):
        data = real(fd, limit)
        if os.path.samefile(f"/proc/self/fd/{fd}", moving) if os.path.exists("/proc/self/fd") else True:
            with open(moving, "a") as fh:  # an editor saves while trimtab reads
                fh.write("# saved again\n")
        return data

    monkeypatch.setattr(loader, "_read_fd", read_then_someone_writes)
    r = check(repo, cwd=repo)
    [f] = [f for f in r.of("YML-6") if f["location"]["path"] == "moving.yaml"]
    assert "changed while it was being read" in f["message"]
    _rest_checked(r)


def test_a_full_run_never_writes_to_a_checked_file(tmp_path):
    def snapshot():
        return {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in FIXTURES.rglob("*") if p.is_file()}

    before = snapshot()
    out = tmp_path / "report.sarif"
    for args, cwd in ((("check",), FIXTURES / "demo"),
                      (("check", "--format", "sarif", "--output", str(out), "."), FIXTURES / "demo"),
                      (("check", "--format", "json", "--jobs", "2", "."), HOSTILE),
                      (("explain", "anchors-merge.yaml"), HOSTILE)):
        r = run_cli(*args, cwd=cwd)
        assert "Traceback" not in r.err and r.code in (0, 1), (args, r.err)
    after = snapshot()
    assert after.keys() == before.keys(), set(after) ^ set(before)
    changed = [str(p) for p in before if before[p] != after[p]]
    assert not changed, changed
    assert out.exists()


# --- merge keys and anchors -------------------------------------------------------------------------
def _as_merged(node):
    """trimtab's tree as a YAML 1.1 loader with merge keys builds it."""
    if isinstance(node, Scalar):
        return node.value11
    if isinstance(node, Sequence):
        return [_as_merged(i) for i in node.items]
    return {_as_merged(k): _as_merged(v) for _n, k, v, _via in node.entries()}


@pytest.mark.parametrize("text", [
    "base: &b {lr: 1, seed: 2}\nrun:\n  <<: *b\n  seed: 3\n",  # explicit keys win
    "a: &a {x: 1, y: 1}\nb: &b {y: 2, z: 2}\nc:\n  <<: [*a, *b]\n",  # earlier mappings win
    "a: &a {x: 1}\nb: &b\n  <<: *a\n  y: 2\nc: {<<: *b, z: 3}\n",  # merges of merges, flow style
    "a: &a {x: 1}\nc:\n  x: 0\n  <<: *a\n",  # an explicit key before the merge still wins
])
def test_merges_resolve_as_pyyaml_builds_them(text):
    """Reference: PyYAML's SafeLoader, which implements the YAML 1.1 merge key type."""
    doc = loader.parse_bytes(loader.Document("m.yaml"), text.encode(), loader.Limits())
    assert _as_merged(doc.roots[0]) == yaml.load(text, Loader=yaml.SafeLoader)


def test_value_through_a_merge_points_at_the_anchor_with_the_merge_related():
    r = check(HOSTILE / "anchors-merge.yaml", cwd=HOSTILE)
    [f] = r.of("YML-3")
    assert (f["location"]["line"], f["location"]["col"]) == (3, 7), f  # lr: 3e-6 under &defaults
    related = [(x["line"], x["col"]) for x in f["related"]]
    assert (12, 3) in related, f  # the '<<: *defaults' under optim


def test_value_through_an_alias_lists_where_the_alias_is_used(repo):
    path = repo / "alias.yaml"
    path.write_text("shared:\n  lr: &lr 3e-6\nrun:\n  estimator: grpo\nrollout:\n  group_size: 8\n"
                    "kl:\n  coef: 0.05\noptim:\n  lr: *lr\n")
    r = check(path, cwd=repo)
    found = [f for f in r.of("YML-3") if f["location"]["line"] == 2]
    assert found, r.findings
    assert any(x["line"] == 10 for f in found for x in f["related"]), found


def test_aliased_section_resolves_where_it_is_used(repo):
    path = repo / "section.yaml"
    path.write_text("recipes:\n  sampling: &s {temperature: 0.0, group_size: 8}\nrun:\n  estimator: grpo\n"
                    "rollout: *s\nkl:\n  coef: 0.05\n")
    r = run_cli("explain", str(path), cwd=repo)
    assert "rollout.temperature" in r.out and "Traceback" not in r.err


# --- fuzzing ------------------------------------------------------------------------------------------
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

_SEEDS = sorted(p for p in FIXTURES.glob("**/*.y*ml") if p.is_file())


@st.composite
def mutated(draw):
    data = bytearray(draw(st.sampled_from(_SEEDS)).read_bytes())
    for _ in range(draw(st.integers(1, 3))):
        how = draw(st.sampled_from(["flip", "truncate", "duplicate", "delete", "indent", "insert"]))
        lines = bytes(data).split(b"\n")
        if how == "flip" and data:
            i = draw(st.integers(0, len(data) - 1))
            data[i] = draw(st.integers(0, 255))
        elif how == "truncate":
            del data[draw(st.integers(0, len(data))):]
        elif how in ("duplicate", "delete", "indent") and lines:
            i = draw(st.integers(0, len(lines) - 1))
            if how == "duplicate":
                lines.insert(i, lines[i])
            elif how == "delete":
                del lines[i]
            else:
                pad = draw(st.sampled_from([b" ", b"  ", b"    ", b"\t", b"-", b"? ", b": "]))
                lines[i] = pad * draw(st.integers(1, 3)) + lines[i].lstrip(b" ") if draw(st.booleans()) \
                    else lines[i].lstrip(b" \t")
            data = bytearray(b"\n".join(lines))
        elif how == "insert":
            i = draw(st.integers(0, len(data)))
            data[i:i] = draw(st.sampled_from([b"&a ", b"*a", b"<<: *a\n", b"{", b"[", b"'", b'"', b"!!int ",
                                              b"\xef\xbb\xbf", b"\x00", b"\r", b"%YAML 1.2\n", b"---\n",
                                              b"\xff", b"#", b": ", b"- "]))
    return bytes(data)


_FUZZ_DIR = None


@hsettings(max_examples=300, suppress_health_check=list(HealthCheck), derandomize=True)
@given(data=mutated())
def test_fuzzed_fixture_configs_never_crash(data):
    global _FUZZ_DIR
    if _FUZZ_DIR is None:
        import tempfile

        _FUZZ_DIR = Path(tempfile.mkdtemp(prefix="trimtab-fuzz-"))
        _FUZZ_DIR.joinpath("run.yaml").write_bytes(b"")
    path = _FUZZ_DIR / "run.yaml"
    path.write_bytes(data)
    checker = _fuzz_checker()
    with bounded(10, "a fuzzed file"):
        res = checker.check_file(str(path), "run.yaml")
    assert not res.crashed, [f.message for f in res.findings if f.rule_id == "TOOL-1"]
    doc = loader.load(str(path), "run.yaml")
    assert not any("the YAML reader failed" in p.message for p in doc.problems), doc.problems
    for p in doc.problems:
        assert p.kind != "io"
        if p.kind in ("parse", "encoding", "binary", "duplicate-key"):
            assert p.line >= 1, p


_CHECKER = None


def _fuzz_checker():
    global _CHECKER
    if _CHECKER is None:
        _CHECKER = Checker(Settings(root=Path("/")), Registry())
    return _CHECKER


# --- settings abuse ---------------------------------------------------------------------------------
@pytest.mark.parametrize("body, named", [
    ('include = "configs/*.yaml"', "include"),
    ("include = [1]", "include.0"),
    ('gate = "loud"', "gate"),
    ("yaml_version = 1.2", "yaml_version"),
    ("jobs = true", "jobs"),
    ("colour = true", "colour"),
    ("[limits]\nmax_bytes = \"big\"", "limits.max_bytes"),
    ("[limits]\nmax_lines = 5", "limits.max_lines"),
    ('[rules."YML-3"]\nthreshold = 2', "rules.YML-3.threshold"),
    ('[rules."XYZ-9"]\noff = true', "rules.XYZ-9"),
    ('[rules."YML-1"]\nlevel = 3', "rules.YML-1.level"),
    ('include = ["nowhere/**/*.yaml", "also/none.yml"]', "include"),
    ('[keys]\n"optim.learning_rate" = "opt.lr"', "keys.optim.learning_rate"),
    ('[keys]\n"optim.lr" = {key = "opt.lr", per = "token"}', "keys.optim.lr"),
    ('keymap = "nobody-published-this"', "keymap"),
])
def test_bad_settings_exit_2_naming_the_setting(repo, body, named):
    (repo / "good.yaml").write_text(GOOD)
    (repo / "trimtab.toml").write_text(body + "\n")
    r = run_cli("check", cwd=repo)
    assert r.code == 2, (body, r.code, r.out)
    assert "Traceback" not in r.err and f"setting {named}" in r.err, r.err


def test_bad_settings_in_pyproject_are_named_with_the_table(repo):
    (repo / "good.yaml").write_text(GOOD)
    (repo / "pyproject.toml").write_text('[tool.trimtab]\ninclude = ["missing/*.yaml"]\n')
    r = run_cli("check", cwd=repo)
    assert r.code == 2 and "setting tool.trimtab.include" in r.err, r.err


def test_one_idle_include_glob_beside_a_matching_one_is_a_note(repo):
    (repo / "good.yaml").write_text(GOOD)
    (repo / "trimtab.toml").write_text('include = ["*.yaml", "configs/*.json"]\n')
    r = run_cli("check", "--format", "json", cwd=repo)
    assert r.code == 1 and "setting include[1] 'configs/*.json' matches no file" in r.err, r.err


def test_published_key_map_naming_an_unknown_concept_is_refused(repo):
    from trimtab import hookimpl

    class Plugin:
        @hookimpl
        def trimtab_key_maps(self):
            return {"lowfield-trainer": {"optim.speed": "opt.speed"}}

    registry = Registry(plugins=[Plugin()])
    with pytest.raises(SettingsError, match=r"lowfield-trainer.*keys\.optim\.speed.*unknown concept"):
        Checker(Settings(root=repo, keymap="lowfield-trainer"), registry)


# --- output paths ---------------------------------------------------------------------------------
@pytest.mark.parametrize("option", ["--output", "--write-accepted"])
def test_an_output_path_that_is_a_checked_file_is_refused(repo, option):
    path = repo / "good.yaml"
    path.write_text(GOOD)
    before = (path.read_bytes(), path.stat().st_mtime_ns)
    r = run_cli("check", option, "good.yaml", cwd=repo)
    assert r.code == 2 and f"{option} good.yaml" in r.err and "not overwritten" in r.err, r.err
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before


@pytest.mark.parametrize("option", ["--output", "--write-accepted"])
def test_an_output_path_that_cannot_be_written_exits_2(repo, option):
    (repo / "good.yaml").write_text(GOOD)
    (repo / "reports").mkdir()
    r = run_cli("check", option, "reports", cwd=repo)
    assert r.code == 2 and "Traceback" not in r.err and "reports: cannot be written" in r.err, r.err


def test_outside_paths_without_confinement_are_read_but_links_out_never(repo, tmp_path_factory):
    """An audit may name a config kept elsewhere; a link inside the repository that leads out of
    it is refused whatever the command."""
    from trimtab.load.discover import discover

    outside = tmp_path_factory.mktemp("kept-elsewhere") / "old-run.yaml"
    outside.write_text(GOOD)
    (repo / "link.yaml").symlink_to(outside)
    files, missing = discover([str(outside), str(repo / "link.yaml")], repo, ["**/*.yaml"], [])
    assert [p for p, _s in files] == [str(outside)]
    assert [getattr(m, "reason", "") for m in missing] == [f"is outside the repository {repo.resolve().as_posix()} "
                                                           f"(a link to {outside.resolve().as_posix()}); not read"]
    files, missing = discover([str(outside)], repo, ["**/*.yaml"], [], confine=True)
    assert files == [] and "outside the repository" in missing[0].reason


def test_tab_indented_json_reads_with_its_columns(repo):
    path = repo / "run.json"
    path.write_text('\t{\n\t"run": {"estimator":\t"grpo"}\n\t}\n')
    doc = loader.load(str(path), "run.json")
    assert doc.readable, doc.problems
    run = doc.roots[0].get("run")
    est = run.get("estimator")
    assert (est.line, est.col) == (2, 23) and est.text == "grpo"  # each tab counts as one column


def test_valid_json_the_yaml_reader_cannot_follow_says_so(repo):
    path = repo / "long.json"
    path.write_text('{"' + "k" * 1500 + '": 1}')
    r = check(path, cwd=repo)
    [f] = r.of("YML-1")
    assert f["message"].startswith("is valid JSON, but the YAML reader cannot follow it"), f


def test_utf16_without_a_bom_is_named(repo):
    path = repo / "wide.yaml"
    path.write_bytes(GOOD.encode("utf-16-le"))
    r = check(path, cwd=repo)
    [f] = r.of("YML-4")
    assert "UTF-16 without a byte-order mark" in f["message"] and r.code == 1


@pytest.mark.parametrize("args", [("--format", "json", "--output", "report.json"),
                                  ("--format", "sarif", "--output", "report.json"),
                                  ("--write-accepted", "accepted.json")])
def test_trimtab_may_overwrite_its_own_earlier_output(repo, args):
    """A report or accepted-findings file that an include glob matches is trimtab's own output,
    not a config: writing it again is allowed."""
    (repo / "good.yaml").write_text(GOOD)
    first = run_cli("check", *args, cwd=repo)
    again = run_cli("check", *args, cwd=repo)
    assert first.code in (0, 1) and again.code in (0, 1), again.err
