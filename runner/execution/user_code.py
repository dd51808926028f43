"""The version of a user's own agent and env code, recorded with every run.

``code_version`` covers seedsweep's own result-computing modules; an in-house agent kept in
the user's project is outside it, so editing that agent would leave one sweep folder
silently mixing results of two versions of it. This module finds the source files a run's
agent entry and env id load from the user's project and hashes each one.

Which files: the module of the agent class (and of the entry, if it re-exports the class),
the module of the env's entry point, and, recursively, every module they use by name (a
module, class or function bound in their namespace, looked up in ``sys.modules`` after the
import) whose file lies in the user's project: the current folder, or the folder of a
``path/file.py`` entry. Files of the installed seedsweep packages, the standard library and
site-packages are left out (``code_version`` and the package versions cover them). Walking
what a module binds, rather than everything imported so far, makes the answer depend on the
code only, not on what else the process happened to import.
"""

from __future__ import annotations

import hashlib
import sys
import sysconfig
from collections.abc import Iterable, Sequence
from pathlib import Path
from types import ModuleType

import gymnasium as gym
import seedsweep.configs
from seedsweep.runner.execution import records

SHORT = 12  # hex digits kept per file hash and for the combined version


def excluded_roots() -> list[Path]:
    """Folders whose modules are not the user's: seedsweep itself, python, site-packages."""
    roots = [Path(folder) for folder in records.result_packages().values()]
    roots.append(Path(records.__file__).resolve().parent.parent)  # seedsweep.runner
    roots.append(seedsweep.configs.folder())
    paths = sysconfig.get_paths()
    for key in ("stdlib", "platstdlib", "purelib", "platlib"):
        if paths.get(key):
            roots.append(Path(paths[key]).resolve())
    for prefix in {sys.prefix, sys.base_prefix, sys.exec_prefix}:
        roots.append(Path(prefix).resolve())
    return roots


def _inside(path: Path, roots: Iterable[Path]) -> bool:
    return any(path == r or r in path.parents for r in roots)


def module_file(module: ModuleType) -> Path | None:
    found = getattr(module, "__file__", None)
    if not found or not str(found).endswith(".py"):
        return None
    return Path(found).resolve()


def user_files(start: Sequence[ModuleType], project_roots: Sequence[Path]) -> list[Path]:
    """The user's source files reachable from ``start`` (see the module docstring)."""
    project = [Path(r).resolve() for r in project_roots]
    excluded = excluded_roots()
    seen: set[str] = set()
    files: set[Path] = set()
    todo = list(start)
    while todo:
        module = todo.pop()
        if module.__name__ in seen:
            continue
        seen.add(module.__name__)
        path = module_file(module)
        if path is None or _inside(path, excluded) or not _inside(path, project):
            continue
        files.add(path)
        for value in list(vars(module).values()):
            if isinstance(value, ModuleType):
                todo.append(value)
                continue
            owner = getattr(value, "__module__", None)
            if isinstance(owner, str) and owner in sys.modules:
                todo.append(sys.modules[owner])
    return sorted(files)


def file_hashes(files: Iterable[Path], base: Path | None = None) -> dict[str, str]:
    """``{name: sha256 prefix}``; names relative to ``base`` (the current folder) when
    inside it, else absolute."""
    base = (base or Path.cwd()).resolve()
    out = {}
    for f in files:
        try:
            name = f.relative_to(base).as_posix()
        except ValueError:
            name = f.as_posix()
        out[name] = hashlib.sha256(f.read_bytes()).hexdigest()[:SHORT]
    return dict(sorted(out.items()))


def combined(hashes: dict[str, str]) -> str | None:
    """One version for all of a run's user files (None when it loads none)."""
    if not hashes:
        return None
    blob = "\n".join(f"{k} {v}" for k, v in sorted(hashes.items()))
    return hashlib.sha256(blob.encode()).hexdigest()[:SHORT]


def env_modules(make_id: str) -> list[ModuleType]:
    """The module of a registered env's entry point (already imported by the checks)."""
    try:
        entry = gym.spec(make_id).entry_point
    except gym.error.Error:
        return []
    name = entry.partition(":")[0] if isinstance(entry, str) else getattr(entry, "__module__",
                                                                          None)
    module = sys.modules.get(name) if isinstance(name, str) else None
    return [module] if module is not None else []


def run_code(agent_cls: type, entry_module: ModuleType | None, env_make_id: str,
             entry_file: Path | None = None) -> dict[str, str]:
    """File hashes of the user code one run loads (agent entry and env entry point)."""
    start = [m for m in (entry_module, sys.modules.get(agent_cls.__module__)) if m is not None]
    start += env_modules(env_make_id)
    roots = [Path.cwd()] + ([entry_file.resolve().parent] if entry_file is not None else [])
    return file_hashes(user_files(start, roots))
