"""The structure DEVELOPERS.md draws, checked against the code.

* The layer contract in pyproject.toml ([tool.importlinter]) holds (import-linter), and the
  same tool does break on a contract the code does not keep (so the check can fail).
* No import cycle between modules anywhere (Tarjan's strongly connected components over
  the import graph that import-linter's own graph library, grimp, builds).
* No import inside a function or class body, and no import of the bare top-level folder
  names (``runner``, ``agents``, ``envs``, ``configs``): installed, only ``seedsweep.*`` exists.
* The packages pyproject.toml installs are exactly the folders that hold code or configs.
* The third-party modules the package imports are declared dependencies.
"""

from __future__ import annotations

import ast
import subprocess
import sys
import tomllib
from importlib.metadata import packages_distributions
from pathlib import Path

import grimp
import pytest

ROOT = Path(__file__).resolve().parent.parent
FOLDERS = {"runner": "seedsweep.runner", "agents": "seedsweep.agents", "envs": "seedsweep.envs",
           "configs": "seedsweep.configs"}
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text())
LINT = Path(sys.executable).parent / "lint-imports"


def package_files() -> list[Path]:
    return sorted(f for folder in FOLDERS for f in (ROOT / folder).rglob("*.py"))


def test_the_layer_contract_is_kept():
    done = subprocess.run([str(LINT), "--no-cache"], cwd=ROOT, capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-2000:]
    assert "1 kept, 0 broken" in done.stdout


def test_the_layer_check_breaks_on_an_inverted_contract(tmp_path):
    """Agents above the commands is false: import-linter must say so."""
    config = tmp_path / "inverted.toml"
    config.write_text('[tool.importlinter]\nroot_packages = ["seedsweep.runner", '
                      '"seedsweep.agents"]\n[[tool.importlinter.contracts]]\nname = "inverted"\n'
                      'type = "layers"\nlayers = ["seedsweep.agents", "seedsweep.runner"]\n')
    done = subprocess.run([str(LINT), "--no-cache", "--config", str(config)], cwd=ROOT,
                          capture_output=True, text=True)
    assert done.returncode != 0 and "BROKEN" in done.stdout


def strongly_connected(graph: dict[str, set[str]]) -> list[list[str]]:
    """Tarjan 1972, iterative: every strongly connected component of a directed graph."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    on_stack: set[str] = set()
    stack: list[str] = []
    found: list[list[str]] = []
    for root in graph:
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = len(index)
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = len(index)
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph.get(child, ())))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    top = stack.pop()
                    on_stack.discard(top)
                    component.append(top)
                    if top == node:
                        break
                found.append(component)
    return found


def test_tarjan_finds_a_planted_cycle():
    """The cycle finder itself: a -> b -> c -> a is one component, d alone (textbook case)."""
    parts = strongly_connected({"a": {"b"}, "b": {"c"}, "c": {"a", "d"}, "d": set()})
    assert sorted(sorted(p) for p in parts) == [["a", "b", "c"], ["d"]]


def test_no_import_cycle_between_modules():
    graph = grimp.build_graph(*FOLDERS.values())
    edges = {m: set(graph.find_modules_directly_imported_by(m)) for m in graph.modules}
    cycles = [sorted(c) for c in strongly_connected(edges) if len(c) > 1]
    assert cycles == []


def _imports(tree: ast.AST) -> list[tuple[ast.AST, str]]:
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node, a.name) for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            out.append((node, node.module))
    return out


@pytest.mark.parametrize("path", package_files(), ids=lambda p: str(p.relative_to(ROOT)))
def test_imports_are_at_module_level_and_namespaced(path):
    tree = ast.parse(path.read_text())
    top = {id(n) for n in tree.body}
    for node in tree.body:  # imports guarded by ``if TYPE_CHECKING:`` count as top level
        if isinstance(node, ast.If):
            top |= {id(n) for n in node.body}
    for node, name in _imports(tree):
        assert id(node) in top, f"{path.name}:{node.lineno}: import {name} inside a body"
        assert name.split(".")[0] not in FOLDERS, f"{path.name}:{node.lineno}: bare {name}"


def test_installed_packages_are_the_code_and_config_folders():
    setup = PYPROJECT["tool"]["setuptools"]
    listed = set(setup["packages"])
    on_disk = set()
    for folder, name in FOLDERS.items():
        for sub in [ROOT / folder, *(p for p in (ROOT / folder).rglob("*") if p.is_dir())]:
            if "__pycache__" in sub.parts:
                continue
            if (sub / "__init__.py").exists() or any(sub.glob("*.yaml")):
                rel = sub.relative_to(ROOT / folder).parts
                on_disk.add(".".join((name, *rel)))
    assert listed == on_disk
    assert setup["package-dir"] == {v: k for k, v in FOLDERS.items()}


def test_imported_third_party_modules_are_declared():
    declared = {d.split("[")[0].split(">")[0].split("=")[0].strip().lower()
                for d in PYPROJECT["project"]["dependencies"]}
    dists = packages_distributions()
    stdlib = sys.stdlib_module_names
    missing = set()
    for path in package_files():
        for _, name in _imports(ast.parse(path.read_text())):
            top = name.split(".")[0]
            if top in stdlib or top in ("seedsweep", "__future__"):
                continue
            names = {d.lower() for d in dists.get(top, [top])}
            if not names & declared:
                missing.add(f"{top} ({path.relative_to(ROOT)})")
    assert not missing
