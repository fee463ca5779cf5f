"""The package layout: imports run only downward through the stages, and no module circle.

The order of the stages is the data flow of docs/architecture.md. Every import of a stopwise
module is counted, including those inside functions (lazy imports are still dependencies).
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src" / "stopwise"

# Lowest first. A module may import its own stage and any stage before it.
STAGES = ["core", "problem", "data", "solvers", "stopping", "config", "results", "running",
          "sweep", "analysis", "report", "cli", "__init__"]


def _module_name(path: Path) -> str:
    rel = path.relative_to(SRC.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _stage(module: str) -> str:
    parts = module.split(".")
    return "__init__" if len(parts) == 1 else parts[1]


def _imports(path: Path) -> set[str]:
    """Every stopwise module imported by the file (a from-import of a submodule counts as it)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    me = _module_name(path)
    pkg = me if path.name == "__init__.py" else me.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.split(".")[0] == "stopwise"}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg.split(".")[: len(pkg.split(".")) - (node.level - 1)]
                mod = ".".join([*base, node.module] if node.module else base)
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "stopwise":
                continue
            for alias in node.names:
                sub = f"{mod}.{alias.name}"
                found.add(sub if sub in MODULES else mod)
    return found


FILES = sorted(SRC.rglob("*.py"))
MODULES = {_module_name(p) for p in FILES}


def test_every_module_belongs_to_a_stage():
    stray = sorted(m for m in MODULES if _stage(m) not in STAGES)
    assert not stray, f"modules outside the stage packages: {stray}"


@pytest.mark.parametrize("path", FILES, ids=lambda p: _module_name(p))
def test_imports_run_only_downward(path):
    me = _module_name(path)
    mine = STAGES.index(_stage(me))
    upward = sorted(m for m in _imports(path) if STAGES.index(_stage(m)) > mine)
    assert not upward, f"{me} ({_stage(me)}) imports later stages: {upward}"


def test_no_import_circle_between_modules():
    graph = {_module_name(p): {m for m in _imports(p) if m in MODULES} for p in FILES}
    # A package's __init__ importing its own submodules is how it registers them; a submodule
    # importing its package face back is the circle this test looks for.
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for n in sorted(graph.get(m, ())):
            if n == m:
                continue
            if state.get(n) == 1:
                cycle = stack[stack.index(n):] + [n]
                raise AssertionError("import circle: " + " -> ".join(cycle))
            if n not in state:
                visit(n)
        stack.pop()
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m)


def test_the_checker_sees_an_upward_import(tmp_path):
    """The check is not vacuous: a lazy upward import inside a function is found."""
    fake = SRC / "core" / "_layer_probe_.py"
    fake.write_text("def f():\n    from stopwise.analysis import rank\n    return rank\n")
    try:
        MODULES.add("stopwise.core._layer_probe_")
        found = _imports(fake)
    finally:
        fake.unlink()
        MODULES.discard("stopwise.core._layer_probe_")
    assert "stopwise.analysis.rank" in found
