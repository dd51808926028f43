"""Plan files (``configs/plan/<name>.yaml``): a named, versioned plan of runs.

Keys: ``name``, ``version`` (int; results go to ``<name>-v<version>`` unless ``sweep=`` is
given), ``agents``, ``envs``, ``seeds`` (a list or ``range(n)``), optional ``steps`` (one
budget, or one per agent), ``overrides`` (a list applied to every run) and ``grid`` (extra
swept keys, ``key: [values]``). Instead of ``envs`` a plan may name a ``suite``: its envs, budgets
(per env and agent) and evaluation settings. Command-line overrides are applied after the
file's.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from seedsweep.configs.checks import ConfigError, suggest, unknown_key
from seedsweep.runner.execution.config import (
    SAFE_NAME,
    config_roots,
    group_file,
    group_options,
    read_yaml,
)

KEYS = {"name", "version", "agents", "envs", "suite", "seeds", "steps", "overrides", "grid",
        "description"}
RANGE = re.compile(r"^range\(\s*(\d+)\s*(?:,\s*(\d+)\s*)?\)$")


def find(name: str, extra_dirs: Sequence[Path | str] = ()) -> Path:
    """A plan by name (``configs/plan/NAME.yaml`` or a ``--config-dir``) or by path."""
    if name.endswith((".yaml", ".yml")):
        if Path(name).is_file():
            return Path(name)
        raise ConfigError("--plan", f"no such file {name}")
    if not SAFE_NAME.match(name):
        raise ConfigError("--plan", f"a plan name is letters, digits, '_', '-', '.' "
                          f"(got {name!r}); or give a path to a .yaml file")
    try:
        return group_file("plan", name, extra_dirs)
    except ConfigError:
        known = group_options("plan", extra_dirs)
        raise ConfigError("--plan", f"no plan {name!r} (available: {', '.join(known)})"
                          + suggest(name, known)) from None


def _values(field: str, value: Any) -> str:
    if isinstance(value, (int, str)) and not isinstance(value, bool):
        return str(value)
    if not isinstance(value, list) or not value:
        raise ConfigError(field, f"expected a non-empty list, got {value!r}")
    for v in value:
        if isinstance(v, (dict, list)):
            raise ConfigError(field, f"expected plain values, got {v!r}")
    return ",".join(str(v) for v in value)


def _seeds(value: Any) -> str:
    field = "plan.seeds"
    if isinstance(value, str):
        m = RANGE.match(value.strip())
        if not m:
            raise ConfigError(field, f"expected a list of integers or range(n) / range(a, b), "
                              f"got {value!r}")
        return value.strip()
    if not isinstance(value, list) or not value:
        raise ConfigError(field, f"expected a non-empty list of integers or range(n), "
                          f"got {value!r}")
    for v in value:
        if isinstance(v, bool) or not isinstance(v, int) or v < 0:
            raise ConfigError(field, f"seeds are non-negative integers (got {v!r})")
    return ",".join(map(str, value))


def read_plan(path: Path) -> dict[str, Any]:
    """The checked content of a plan file."""
    doc = read_yaml(path, "--plan")
    if not isinstance(doc, dict):
        raise ConfigError("--plan", f"{path} must hold a mapping of plan keys "
                          f"({', '.join(sorted(KEYS))}), not a {type(doc).__name__}")
    unknown = sorted(set(doc) - KEYS)
    if unknown:
        raise unknown_key(f"plan.{unknown[0]}", unknown[0], KEYS, "key")
    for key in ("name", "version", "agents", "seeds"):
        if key not in doc:
            raise ConfigError(f"plan.{key}", f"required (in {path})")
    if ("envs" in doc) == ("suite" in doc):
        raise ConfigError("plan.envs", f"give envs or a suite, one of the two (in {path})")
    if "suite" in doc and "steps" in doc:
        raise ConfigError("plan.steps", "a plan with a suite takes the suite's budgets")
    if not isinstance(doc["name"], str) or not SAFE_NAME.match(doc["name"]):
        raise ConfigError("plan.name", f"must be letters, digits, '_', '-', '.' "
                          f"(got {doc['name']!r})")
    version = doc["version"]
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise ConfigError("plan.version", f"must be a positive integer (got {version!r})")
    overrides = doc.get("overrides") or []
    if not isinstance(overrides, list) or not all(isinstance(o, str) for o in overrides):
        raise ConfigError("plan.overrides", f"expected a list of key=value strings, got "
                          f"{overrides!r}")
    for o in overrides:
        if "=" not in o:
            raise ConfigError("plan.overrides", f"expected key=value, got {o!r}")
    grid = doc.get("grid") or {}
    if not isinstance(grid, dict):
        raise ConfigError("plan.grid", f"expected a mapping key -> [values], got {grid!r}")
    return doc


def expand_plan(path: Path, cli_overrides: list[str]) -> list[list[str]]:
    """Override lists (each for ``-m``) that together make the sweep of a plan file."""
    doc = read_plan(path)
    where = (f"suite={doc['suite']}" if "suite" in doc
             else f"env={_values('plan.envs', doc['envs'])}")
    base = [where, f"seed={_seeds(doc['seeds'])}", f"sweep={doc['name']}-v{doc['version']}"]
    base += list(doc.get("overrides") or [])
    for key, values in (doc.get("grid") or {}).items():
        base.append(f"{key}={_values(f'plan.grid.{key}', values)}")
    agents = doc["agents"] if isinstance(doc["agents"], list) else [doc["agents"]]
    steps = doc.get("steps")
    if isinstance(steps, dict):
        missing = [a for a in agents if a not in steps]
        if missing:
            raise ConfigError("plan.steps", f"no budget for agent {missing[0]!r}")
        return [[f"agent={a}", f"steps={steps[a]}", *base, *cli_overrides] for a in agents]
    extra = [f"steps={steps}"] if steps is not None else []
    return [[f"agent={_values('plan.agents', agents)}", *extra, *base, *cli_overrides]]


def plan_names(extra_dirs: Sequence[Path | str] = ()) -> list[str]:
    """Every plan file name (for listings and help)."""
    return sorted({p.stem for r in config_roots(extra_dirs) for p in (r / "plan").glob("*.yaml")})
