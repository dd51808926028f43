"""Planning a sweep: suites and override values expanded into checked runs.

The runs are ordered seed-major (every agent × env × setting at seed 0, then at seed 1,
...), so a sweep stopped halfway has balanced seeds. Every run is composed and prepared
(all checks, nothing written) before anything starts.
"""

from __future__ import annotations

import itertools
from collections import OrderedDict
from collections.abc import Sequence
from pathlib import Path

from seedsweep.configs.checks import ConfigError, unknown_key
from seedsweep.runner.execution.config import (
    DEFAULTS,
    compose,
    config_dir,
    group_file,
    parse_overrides,
    read_yaml,
)
from seedsweep.runner.execution.prepare import PreparedRun, prepare

SUITE_KEYS = {"name", "description", "envs", "steps", "eval"}


def expand(overrides: Sequence[str], multirun: bool) -> list[list[str]]:
    """One override list per run: the cross product of every swept key (hydra grammar)."""
    axes: OrderedDict[str, list[str]] = OrderedDict()
    for o in parse_overrides(overrides):
        key = o.get_key_element()
        if o.is_sweep_override():
            if not multirun:
                raise ConfigError(key, "several values given; add -m to run a sweep")
            if not o.is_discrete_sweep():
                raise ConfigError(key, "only lists, range() and choice() sweeps are supported")
            values = [f"{key}={v}" for v in o.sweep_string_iterator()]
            if not values:
                raise ConfigError(key, "the sweep over this key is empty")
            axes[key] = values
        else:
            axes[key] = [f"{key}={o.get_value_element_as_str()}"]
    return [list(combo) for combo in itertools.product(*axes.values())]


def apply_suite(overrides: Sequence[str], extra_dirs: Sequence[Path] = ()) -> list[list[str]]:
    """Replace ``suite=NAME`` by the suite's envs, budgets and evaluation settings.

    A suite's ``steps`` is one budget, one per env (``{env: N}``), or one per env and agent
    (``{env: {agent: N, default: N}}``), so ``-m suite=NAME agent=...`` runs every agent at its
    own budget. Returns override groups (one per distinct budget); keys the user gives
    explicitly (``steps=``, ``eval.every=``, ``eval.episodes=``, ``sweep=``) win.
    """
    suites = [o for o in overrides if o.split("=", 1)[0] == "suite"]
    if not suites:
        return [list(overrides)]
    if len(suites) > 1 or "," in suites[0]:
        raise ConfigError("suite", "give one suite per sweep")
    name = suites[0].split("=", 1)[1]
    path = group_file("suite", name, extra_dirs, what="suite")
    doc = read_suite(path)
    rest = [o for o in overrides if o.split("=", 1)[0] != "suite"]
    given = {o.split("=", 1)[0].lstrip("+") for o in rest}
    if "env" in given:
        raise ConfigError("env", f"suite={name} chooses the envs; drop env=")
    common = [] if "sweep" in given else [f"sweep={name}"]
    for key, value in (doc.get("eval") or {}).items():
        if f"eval.{key}" not in given:
            common.append(f"eval.{key}={value}")
    envs = doc["envs"]
    steps = doc.get("steps")
    if steps is None or "steps" in given:
        return [[f"env={','.join(envs)}", *common, *rest]]
    if not isinstance(steps, dict):
        return [[f"env={','.join(envs)}", f"steps={steps}", *common, *rest]]
    agents = _agents_of(rest)
    rest = [o for o in rest if o.split("=", 1)[0] != "agent"]
    groups = []
    for env in envs:
        for agent in agents:
            budget = suite_budget(steps, env, agent, path)
            groups.append([f"env={env}", f"agent={agent}", f"steps={budget}", *common, *rest])
    return groups


SUITE_DEFAULT = "default"


def read_suite(path: Path) -> dict:
    """A suite file's content, checked: known keys, a non-empty list of envs, and a budget
    for every env (and agent, where budgets are per agent)."""
    doc = read_yaml(path, "suite") or {}
    if not isinstance(doc, dict):
        raise ConfigError("suite", f"{path} must hold a mapping of suite keys")
    unknown = sorted(set(doc) - SUITE_KEYS)
    if unknown:
        raise unknown_key(f"suite.{unknown[0]}", unknown[0], SUITE_KEYS, "key")
    envs = doc.get("envs")
    if not isinstance(envs, list) or not envs or not all(isinstance(e, str) for e in envs):
        raise ConfigError("suite.envs", f"expected a non-empty list of env names in {path}")
    steps = doc.get("steps")
    if isinstance(steps, dict):
        missing = [e for e in envs if e not in steps]
        if missing:
            raise ConfigError("suite.steps", f"no budget for env {missing[0]!r} in {path}")
    return doc


def suite_budget(steps: dict, env: str, agent: str, path: Path) -> int:
    """The budget of ``agent`` on ``env`` in a suite's ``steps`` table."""
    budget = steps[env]
    if isinstance(budget, dict):
        if agent in budget:
            budget = budget[agent]
        elif SUITE_DEFAULT in budget:
            budget = budget[SUITE_DEFAULT]
        else:
            raise ConfigError("suite.steps", f"no budget for agent {agent!r} on {env!r} in "
                              f"{path} (and no {SUITE_DEFAULT!r})")
    if isinstance(budget, bool) or not isinstance(budget, int) or budget < 1:
        raise ConfigError("suite.steps", f"{env}: expected a positive integer, got {budget!r}")
    return budget


def _agents_of(overrides: Sequence[str]) -> list[str]:
    """The agent config names an override list selects (``agent=a,b``; default: the one in
    configs/defaults/config.yaml)."""
    for o in parse_overrides(overrides):
        if o.get_key_element() == "agent":
            if o.is_sweep_override():
                return [str(v) for v in o.sweep_string_iterator()]
            return [o.get_value_element_as_str()]
    defaults = read_yaml(config_dir() / DEFAULTS / "config.yaml", "config").get("defaults", [])
    return [next(d["agent"] for d in defaults if isinstance(d, dict) and "agent" in d)]


def plan(overrides: Sequence[str], multirun: bool = False,
         extra_dirs: Sequence[Path] = ()) -> list[PreparedRun]:
    """Expand and check every run of a sweep; raises ConfigError before anything is written."""
    if not multirun and any(o.split("=", 1)[0] == "suite" for o in overrides):
        raise ConfigError("suite", "a suite is a sweep over its envs: add -m")
    combos = [c for group in apply_suite(overrides, extra_dirs) for c in expand(group, multirun)]
    if not combos:
        raise ConfigError("overrides", "the sweep is empty")
    if len(combos) > 1 and not multirun:
        raise ConfigError("suite", f"this gives {len(combos)} runs; add -m to run a sweep")
    return check_plan([prepare(compose(c, extra_dirs)) for c in combos])


def check_plan(planned: list[PreparedRun]) -> list[PreparedRun]:
    """One folder, no run twice; returns the runs in seed-major order."""
    for key in ("results_dir", "sweep"):  # first: runs in two folders share run ids
        values = sorted({str(p.config[key]) for p in planned})
        if len(values) > 1:
            raise ConfigError(key, f"one sweep writes to one folder; give one value, not "
                              f"{', '.join(values)}")
    seen: set[str] = set()
    for p in planned:
        if p.run_id in seen:
            raise ConfigError("seed", f"two sweep points give the same run ({p.run_id}); "
                              "remove duplicate values")
        seen.add(p.run_id)
    return interleave(planned)


def interleave(planned: list[PreparedRun]) -> list[PreparedRun]:
    """Seed-major order: all settings at the first seed, then the next seed, ..."""
    seeds = sorted({p.config["seed"] for p in planned})
    rank = {s: i for i, s in enumerate(seeds)}
    return sorted(planned, key=lambda p: rank[p.config["seed"]])  # stable: keeps combo order
