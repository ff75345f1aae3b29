"""The layer contract (pyproject.toml, [tool.importlinter]) holds; no import cycles; no hidden imports.

The checks are import-linter's (a general-purpose architecture linter) and
its graph builder grimp, which read every import statement, the ones inside
functions included, so an import moved into a function cannot dodge them.
"""
from __future__ import annotations

import ast
import os
from pathlib import Path

import grimp
import pytest
from importlinter.cli import lint_imports

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "optimizer"
# Only the command line defers imports into functions, so `brace --help` does not load
# CasADi and Pinocchio; the package root loads its API names on first use.
DEFERRED_IMPORTS_ALLOWED = {PACKAGE / "__init__.py", *PACKAGE.joinpath("cli").glob("*.py")}


@pytest.fixture
def at_root(monkeypatch):
    monkeypatch.chdir(ROOT)
    monkeypatch.syspath_prepend(str(ROOT))


def test_layer_contract_is_kept(at_root):
    assert lint_imports(config_filename=str(ROOT / "pyproject.toml"), no_cache=True) == 0


def test_the_checker_sees_a_lower_layer_importing_a_higher_one(at_root, tmp_path):
    # The planner imports the analysis layer; a contract that puts the planner below
    # analysis must therefore be reported broken (the linter is not vacuous).
    config = tmp_path / "reversed.toml"
    config.write_text('[tool.importlinter]\nroot_package = "optimizer"\n\n'
                      '[[tool.importlinter.contracts]]\nname = "reversed"\ntype = "layers"\n'
                      'layers = ["optimizer.analysis", "optimizer.planner"]\n', encoding="utf-8")
    assert lint_imports(config_filename=str(config), no_cache=True) == 1


def test_no_import_cycles_between_modules(at_root):
    graph = grimp.build_graph("optimizer", cache_dir=None)
    modules = sorted(graph.modules)
    state: dict[str, int] = {}
    cycle: list[str] = []

    def visit(module: str, path: list[str]) -> bool:
        state[module] = 1
        for target in sorted(graph.find_modules_directly_imported_by(module)):
            if state.get(target) == 1:
                cycle.extend(path[path.index(target):] + [module, target] if target in path else [module, target])
                return True
            if state.get(target) is None and visit(target, path + [module]):
                return True
        state[module] = 2
        return False

    for module in modules:
        if state.get(module) is None and visit(module, []):
            break
    assert not cycle, " -> ".join(cycle)


def test_no_project_imports_hidden_inside_functions():
    hidden = []
    for path in sorted(PACKAGE.rglob("*.py")):
        if path in DEFERRED_IMPORTS_ALLOWED:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for function in (n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))):
            for node in ast.walk(function):
                if isinstance(node, ast.ImportFrom) and (node.level > 0 or (node.module or "").startswith("optimizer")):
                    hidden.append(f"{path.relative_to(ROOT)}:{node.lineno}")
                if isinstance(node, ast.Import) and any(a.name.startswith("optimizer") for a in node.names):
                    hidden.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert not hidden, hidden


def test_no_module_outside_the_solver_layer_builds_an_nlp_solver():
    users = [str(p.relative_to(ROOT)) for p in PACKAGE.rglob("*.py")
             if "solver" not in p.relative_to(PACKAGE).parts[:1] and "nlpsol" in p.read_text(encoding="utf-8")]
    assert users == []
