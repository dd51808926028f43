"""Sweep files (``configs/sweep/<name>.yaml``): a named, versioned plan of runs.

Keys: ``name``, ``version`` (int; results go to ``<name>-v<version>`` unless ``sweep=`` is
given), ``agents``, ``envs``, ``seeds`` (a list or ``range(n)``), optional ``steps`` (one
budget, or one per agent), ``overrides`` (applied to every run) and ``grid`` (extra swept
keys, ``key: [values]``). Command-line overrides are applied after the file's.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from seedsweep.agents.base import ConfigError
from seedsweep.runner.execution.config import config_dir

KEYS = {"name", "version", "agents", "envs", "seeds", "steps", "overrides", "grid", "description"}


def find(name: str, extra_dirs=()) -> Path:
    candidates = [Path(name)] if name.endswith((".yaml", ".yml")) else []
    for root in [config_dir(), *map(Path, extra_dirs)]:
        candidates.append(root / "sweep" / f"{name}.yaml")
    for c in candidates:
        if c.is_file():
            return c
    known = sorted(p.stem for p in (config_dir() / "sweep").glob("*.yaml"))
    raise ConfigError("--sweep-file", f"no sweep file {name!r} (available: {', '.join(known)})")


def _values(field: str, value: Any) -> str:
    if isinstance(value, str) and value.startswith("range("):
        return value
    if isinstance(value, (int, str)):
        return str(value)
    if not isinstance(value, list) or not value:
        raise ConfigError(field, f"expected a non-empty list, got {value!r}")
    return ",".join(str(v) for v in value)


def expand_file(path: Path, cli_overrides: list[str]) -> list[list[str]]:
    """Override lists (each for ``-m``) that together make the sweep of a file."""
    try:
        doc = yaml.safe_load(path.read_text()) or {}
    except yaml.YAMLError as err:
        raise ConfigError("--sweep-file", f"{path} is not valid YAML: {err}") from None
    unknown = sorted(set(doc) - KEYS)
    if unknown:
        allowed = ", ".join(sorted(KEYS))
        raise ConfigError(f"sweep file.{unknown[0]}", f"unknown key (allowed: {allowed})")
    for key in ("name", "version", "agents", "envs", "seeds"):
        if key not in doc:
            raise ConfigError(f"sweep file.{key}", "required")
    if not isinstance(doc["version"], int) or doc["version"] < 1:
        raise ConfigError("sweep file.version",
                          f"must be a positive integer (got {doc['version']!r})")
    base = [f"env={_values('sweep file.envs', doc['envs'])}",
            f"seed={_values('sweep file.seeds', doc['seeds'])}",
            f"sweep={doc['name']}-v{doc['version']}"]
    base += [str(o) for o in doc.get("overrides") or []]
    for key, values in (doc.get("grid") or {}).items():
        base.append(f"{key}={_values(f'sweep file.grid.{key}', values)}")
    agents = doc["agents"] if isinstance(doc["agents"], list) else [doc["agents"]]
    steps = doc.get("steps")
    if isinstance(steps, dict):
        missing = [a for a in agents if a not in steps]
        if missing:
            raise ConfigError("sweep file.steps", f"no budget for agent {missing[0]!r}")
        return [[f"agent={a}", f"steps={steps[a]}", *base, *cli_overrides] for a in agents]
    extra = [f"steps={steps}"] if steps is not None else []
    return [[f"agent={_values('sweep file.agents', agents)}", *extra, *base, *cli_overrides]]
