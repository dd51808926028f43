"""Checking one resolved config end to end, writing nothing: the first half of a run.

``prepare`` does every check (config, env, agent, action space) without touching the disk,
so bad input never leaves a run folder behind; :mod:`seedsweep.runner.execution.run`
executes what it returns.
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from seedsweep.agents.base import Agent, build_config
from seedsweep.configs.checks import ConfigError
from seedsweep.envs.build import EnvSpec, make_eval_env, parse_env_config
from seedsweep.runner.execution import records
from seedsweep.runner.execution.config import check_run_config
from seedsweep.runner.execution.seeding import RunSeeds, derive_seeds

AGENT_METHODS = ("act", "observe", "state_dict", "load_state_dict", "Config", "supports")


@dataclass
class PreparedRun:
    """A fully checked run: everything needed to start it, nothing written yet."""

    config: dict[str, Any]
    env: EnvSpec
    agent_cls: type[Agent]
    agent_config: Any
    seeds: RunSeeds
    run_id: str
    run_dir: Path

    @property
    def label(self) -> str:
        return self.run_id

    @property
    def num_envs(self) -> int:
        return int(getattr(self.agent_config, "num_envs", 1))

    @property
    def vector_mode(self) -> str:
        return str(getattr(self.agent_config, "vector_mode", "sync"))


def load_agent_class(entry: Any) -> type[Agent]:
    """``module:Class`` (or ``path/to/file.py:Class``) to the agent class."""
    if not isinstance(entry, str) or ":" not in entry:
        raise ConfigError("agent.entry", f"expected 'module:Class', got {entry!r}")
    module_name, _, cls_name = entry.rpartition(":")
    try:
        module = _load_file(module_name) if module_name.endswith(".py") else (
            importlib.import_module(module_name))
    except (ImportError, FileNotFoundError) as err:
        raise ConfigError("agent.entry", f"cannot import {module_name!r}: {err}") from None
    except SyntaxError as err:
        raise ConfigError("agent.entry", f"{module_name!r} has a syntax error: {err.msg} "
                          f"({err.filename}, line {err.lineno})") from None
    cls = getattr(module, cls_name, None)
    if cls is None:
        raise ConfigError("agent.entry", f"{module_name!r} has no attribute {cls_name!r}")
    for attr in AGENT_METHODS:
        if not hasattr(cls, attr):
            raise ConfigError("agent.entry", f"{entry} is not an agent (missing {attr}); "
                              "see seedsweep/agents/base.py")
    return cls


def _load_file(module_name: str) -> Any:
    """A ``path/file.py`` loaded as a lone module (once per process)."""
    path = Path(module_name).resolve()
    if not path.is_file():
        raise ImportError(f"no such file {module_name}")
    unique = f"seedsweep_agent_{path.stem}_{abs(hash(str(path))):x}"
    module = sys.modules.get(unique)
    if module is None:
        spec = importlib.util.spec_from_file_location(unique, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[unique] = module  # dataclasses look their module up here
        try:
            spec.loader.exec_module(module)
        except BaseException:
            del sys.modules[unique]
            raise
    return module


def prepare(cfg: dict[str, Any]) -> PreparedRun:
    """Check one resolved config end to end; raises ConfigError, writes nothing."""
    check_run_config(cfg)
    agent_section = dict(cfg["agent"])
    name = agent_section.pop("name", None)
    if not isinstance(name, str) or not name:
        raise ConfigError("agent.name", "missing (every agent YAML sets name)")
    agent_cls = load_agent_class(agent_section.pop("entry", None))
    tuned = agent_section.pop("tuned", None)  # a record of how the values were chosen
    if tuned is not None and not isinstance(tuned, dict):
        raise ConfigError("agent.tuned", f"expected the mapping seedsweep tune writes, got "
                          f"{tuned!r}")
    agent_config = build_config(agent_cls, agent_section)
    gamma = getattr(agent_config, "gamma", None)
    if not isinstance(gamma, float) or not 0.0 < gamma <= 1.0:
        raise ConfigError("agent.gamma", f"must be in (0, 1] (got {gamma!r})")
    num_envs = getattr(agent_config, "num_envs", 1)
    if not isinstance(num_envs, int) or num_envs < 1:
        raise ConfigError("agent.num_envs", f"must be a positive integer (got {num_envs!r})")
    mode = getattr(agent_config, "vector_mode", "sync")
    if mode not in ("sync", "async"):
        raise ConfigError("agent.vector_mode", f"must be 'sync' or 'async' (got {mode!r})")
    env = parse_env_config(cfg["env"])
    probe = make_eval_env(env)
    try:
        if not agent_cls.supports(probe.action_space):
            allowed = ", ".join(s.__name__ for s in agent_cls.action_spaces)
            raise ConfigError(
                "agent", f"{name} does not support {env.id}'s action space {probe.action_space} "
                f"(supports: {allowed})")
    finally:
        probe.close()
    seeds = derive_seeds(cfg["seed"], cfg["eval"]["episodes"], num_envs)
    rid = records.run_id(cfg)
    run_dir = Path(cfg["results_dir"]) / cfg["sweep"] / rid
    return PreparedRun(cfg, env, agent_cls, agent_config, seeds, rid, run_dir)
