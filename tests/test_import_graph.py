"""The engine's import graph points one way: no module of trimtab (linter/) or trimtab_rules
(rules/) imports, directly or through others, a module that imports it back. Read from the
source with ``ast`` (nothing is imported); an import inside a function counts as well."""
from __future__ import annotations

import ast
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
PACKAGES = {"trimtab": REPO / "linter", "trimtab_rules": REPO / "rules"}


def _modules() -> dict[str, Path]:
    out = {}
    for package, folder in PACKAGES.items():
        for path in sorted(folder.rglob("*.py")):
            parts = list(path.relative_to(folder).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts.pop()
            out[".".join([package, *parts])] = path
    return out


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """The trimtab modules one module imports (``from . import x`` names the module x)."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                up = package.split(".")
                up = up[: len(up) - (node.level - 1)]
                base = ".".join(up + ([base] if base else []))
            targets = [f"{base}.{a.name}" for a in node.names] + [base]
        else:
            continue
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name and not name.startswith(t + "."):  # a package's own __init__ is not a cycle
                found.add(t)
    return found


def graph() -> dict[str, set[str]]:
    mods = _modules()
    return {name: _imports(name, path, set(mods)) for name, path in mods.items()}


def _cycle(g: dict[str, set[str]]) -> list[str]:
    """One cycle of the graph, or [] (depth-first search, colours white/grey/black)."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str]:
        state[n] = 1
        stack.append(n)
        for m in sorted(g.get(n, ())):
            if state.get(m) == 1:
                return stack[stack.index(m):] + [m]
            if not state.get(m):
                found = visit(m)
                if found:
                    return found
        stack.pop()
        state[n] = 2
        return []

    for n in sorted(g):
        if not state.get(n):
            found = visit(n)
            if found:
                return found
    return []


def test_the_import_graph_has_no_cycle():
    g = graph()
    assert len(g) > 20 and "trimtab.pipeline" in g  # the graph was read
    assert _cycle(g) == [], " -> ".join(_cycle(g))


def test_the_cycle_finder_finds_a_cycle():
    # the circle the issue found before the layers were set apart: document -> compose -> settings
    # -> resolve -> document
    g = {"document": {"compose"}, "compose": {"settings", "loader"}, "settings": {"resolve"},
         "resolve": {"document"}, "loader": set()}
    assert _cycle(g) == ["compose", "settings", "resolve", "document", "compose"]
    assert _cycle({"a": {"b"}, "b": set()}) == []


def test_the_rules_use_only_the_public_api_and_the_engine_never_imports_the_rules():
    g = graph()
    assert not any(m.startswith("trimtab_rules") for n, deps in g.items() if n.startswith("trimtab.")
                   for m in deps)


# The stages in the order the pipeline runs them (README, "Where each stage lives"): a module may
# import its own stage and the stages before it, never one after it.
STAGES = ("common", "load", "compose", "resolve", "engine", "gate", "pipeline", "report", "adopt", "cli")


def _stage(module: str) -> str | None:
    parts = module.split(".")
    if parts[0] != "trimtab" or len(parts) < 2:
        return None
    return parts[1] if parts[1] in STAGES else None


def _backward(g: dict[str, set[str]]) -> list[str]:
    out = []
    for name, deps in sorted(g.items()):
        here = _stage(name)
        for dep in sorted(deps):
            there = _stage(dep)
            if here and there and STAGES.index(there) > STAGES.index(here):
                out.append(f"{name} -> {dep}")
    return out


def test_every_stage_is_a_folder_of_its_own():
    folders = {p.name for p in (REPO / "linter").iterdir() if (p / "__init__.py").is_file()}
    assert folders == {s for s in STAGES if s not in ("pipeline", "cli")}
    assert sorted(p.name for p in (REPO / "linter").glob("*.py")) == ["__init__.py", "__main__.py", "cli.py",
                                                                      "pipeline.py"]


def test_imports_point_from_later_stages_to_earlier_ones():
    assert _backward(graph()) == []


def test_the_stage_check_finds_an_import_that_points_back():
    g = {"trimtab.load.loader": {"trimtab.resolve.model"}, "trimtab.resolve.model": {"trimtab.common.findings"}}
    assert _backward(g) == ["trimtab.load.loader -> trimtab.resolve.model"]
