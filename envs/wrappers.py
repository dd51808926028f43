"""The wrappers an env config may list, by name, with their allowed parameters.

Observation, action and time wrappers are gymnasium's own and are applied to each env in
list order. Two kinds are handled by the batch layer instead, because they need state or
information a per-env wrapper does not have:

* ``normalize_obs`` keeps one set of running statistics over all training envs (saved with
  the run, frozen in evaluation). It applies after every other observation wrapper.
* ``clip_reward`` / ``scale_reward`` change the rewards the agent learns from, in training
  only; the runner still records the raw return of every training episode.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import gymnasium as gym
from gymnasium import wrappers as gw
from seedsweep.configs.checks import ConfigError, check_type


@dataclass(frozen=True)
class WrapperKind:
    """A wrapper name: its parameters (name -> (type, default)) and where it applies."""

    params: dict[str, tuple[type, Any]]
    apply: Callable[[gym.Env, dict[str, Any]], gym.Env] | None = None  # per-env wrappers
    stage: str = "env"  # "env" | "normalize" | "reward"
    doc: str = ""


REQUIRED = object()

WRAPPERS: dict[str, WrapperKind] = {
    "time_limit": WrapperKind(
        {"max_episode_steps": (int, REQUIRED)},
        lambda env, p: gw.TimeLimit(env, max_episode_steps=p["max_episode_steps"]),
        doc="end episodes (truncation) after max_episode_steps steps",
    ),
    "one_hot": WrapperKind(
        {},
        lambda env, p: gw.FlattenObservation(env),
        doc="Discrete observations as one-hot float vectors (tabular envs with MLP agents)",
    ),
    "frame_stack": WrapperKind(
        {"size": (int, REQUIRED)},
        lambda env, p: gw.FlattenObservation(gw.FrameStackObservation(env, stack_size=p["size"])),
        doc="observation = the last `size` observations, flattened",
    ),
    "action_repeat": WrapperKind(
        {"repeat": (int, REQUIRED)},
        lambda env, p: gw.RepeatAction(env, num_repeats=p["repeat"]),
        doc="repeat each action `repeat` times, summing rewards (one agent step = repeat frames)",
    ),
    "normalize_obs": WrapperKind(
        {"epsilon": (float, 1e-8), "clip": (float, 10.0)},
        stage="normalize",
        doc="running mean/std observation normalisation; statistics saved, frozen in evaluation",
    ),
    "clip_reward": WrapperKind(
        {"min": (float, -1.0), "max": (float, 1.0)},
        stage="reward",
        doc="training only: clip rewards to [min, max]",
    ),
    "scale_reward": WrapperKind(
        {"scale": (float, REQUIRED)},
        stage="reward",
        doc="training only: multiply rewards by scale",
    ),
}

POSITIVE_INT_PARAMS = {"max_episode_steps", "size", "repeat"}


def parse_wrappers(entries: list[Any]) -> list[tuple[str, dict[str, Any]]]:
    """Check a config's wrapper list; returns ``[(name, params)]`` with defaults filled."""
    if entries is None:
        return []
    if not isinstance(entries, list):
        raise ConfigError("env.wrappers",
                          f"expected a list of {{name: ...}} entries, got {entries!r}")
    out = []
    for i, entry in enumerate(entries):
        where = f"env.wrappers[{i}]"
        if isinstance(entry, str):
            entry = {"name": entry}
        if not isinstance(entry, dict) or "name" not in entry:
            raise ConfigError(where, f"expected {{name: <wrapper>, ...}}, got {entry!r}")
        name = entry["name"]
        if name not in WRAPPERS:
            raise ConfigError(
                f"{where}.name", f"unknown wrapper {name!r} (allowed: {', '.join(WRAPPERS)})"
            )
        kind = WRAPPERS[name]
        params = {k: v for k, v in entry.items() if k != "name"}
        unknown = sorted(set(params) - set(kind.params))
        if unknown:
            allowed = ", ".join(kind.params) or "none"
            raise ConfigError(f"{where}.{unknown[0]}", f"unknown parameter (allowed: {allowed})")
        filled = {}
        for pname, (ptype, default) in kind.params.items():
            if pname in params:
                value = check_type(f"{where}.{pname}", params[pname], ptype)
            elif default is REQUIRED:
                raise ConfigError(f"{where}.{pname}", f"required by wrapper {name!r}")
            else:
                value = default
            if pname in POSITIVE_INT_PARAMS and value < 1:
                raise ConfigError(f"{where}.{pname}", f"must be >= 1 (got {value!r})")
            filled[pname] = value
        if name == "normalize_obs" and filled["epsilon"] <= 0:
            raise ConfigError(f"{where}.epsilon", f"must be > 0 (got {filled['epsilon']!r})")
        if name == "normalize_obs" and filled["clip"] <= 0:  # would clamp every value to 0
            raise ConfigError(f"{where}.clip", f"must be > 0 (got {filled['clip']!r})")
        if name == "clip_reward" and not filled["min"] < filled["max"]:  # else a constant
            raise ConfigError(f"{where}.max", f"must be > min (got min {filled['min']!r}, "
                              f"max {filled['max']!r})")
        if name == "scale_reward" and filled["scale"] == 0:
            raise ConfigError(f"{where}.scale", "must be non-zero (0 makes every reward 0)")
        out.append((name, filled))
    return out
