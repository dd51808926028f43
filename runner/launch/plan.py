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
from seedsweep.runner.execution.config import compose, group_file, parse_overrides, read_yaml
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

    Returns override groups (one per distinct budget); keys the user gives explicitly
    (``steps=``, ``eval.every=``, ``eval.episodes=``, ``sweep=``) win over the suite's.
    """
    suites = [o for o in overrides if o.split("=", 1)[0] == "suite"]
    if not suites:
        return [list(overrides)]
    if len(suites) > 1 or "," in suites[0]:
        raise ConfigError("suite", "give one suite per sweep")
    name = suites[0].split("=", 1)[1]
    path = group_file("suite", name, extra_dirs, what="suite")
    doc = read_yaml(path, "suite") or {}
    if not isinstance(doc, dict):
        raise ConfigError("suite", f"{path} must hold a mapping of suite keys")
    unknown = sorted(set(doc) - SUITE_KEYS)
    if unknown:
        raise unknown_key(f"suite.{unknown[0]}", unknown[0], SUITE_KEYS, "key")
    rest = [o for o in overrides if o.split("=", 1)[0] != "suite"]
    given = {o.split("=", 1)[0].lstrip("+") for o in rest}
    if "env" in given:
        raise ConfigError("env", f"suite={name} chooses the envs; drop env=")
    common = [] if "sweep" in given else [f"sweep={name}"]
    for key, value in (doc.get("eval") or {}).items():
        if f"eval.{key}" not in given:
            common.append(f"eval.{key}={value}")
    envs = doc.get("envs") or []
    steps = doc.get("steps")
    if isinstance(steps, dict) and "steps" not in given:
        missing = [e for e in envs if e not in steps]
        if missing:
            raise ConfigError("suite.steps", f"no budget for env {missing[0]!r} in {path}")
        return [[f"env={e}", f"steps={steps[e]}", *common, *rest] for e in envs]
    budget = [f"steps={steps}"] if steps is not None and "steps" not in given else []
    return [[f"env={','.join(envs)}", *budget, *common, *rest]]


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
