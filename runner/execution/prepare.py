"""Checking one resolved config end to end, writing nothing: the first half of a run.

``prepare`` does every check (config, env, agent, action space) without touching the disk,
so bad input never leaves a run folder behind; :mod:`seedsweep.runner.execution.run`
executes what it returns.
"""

from __future__ import annotations

import importlib
import importlib.util
import logging
import sys
from dataclasses import dataclass, field
from pathlib import Path
from types import ModuleType
from typing import Any

from seedsweep.agents.base import Agent, build_config
from seedsweep.configs.checks import ConfigError
from seedsweep.configs.memory import available_bytes, check_fits, human
from seedsweep.envs.build import EnvSpec, make_eval_env, parse_env_config
from seedsweep.runner.execution import records, user_code
from seedsweep.runner.execution.config import check_run_config
from seedsweep.runner.execution.seeding import RunSeeds, derive_seeds

logger = logging.getLogger(__name__)

AGENT_METHODS = ("act", "observe", "state_dict", "load_state_dict", "Config", "supports")
RECORD_BYTES = 400  # one evaluation episode's record in memory (a dataclass of six numbers)


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
    agent_code: dict[str, str] = field(default_factory=dict)  # user source file -> hash

    @property
    def agent_code_version(self) -> str | None:
        """One hash of the user's own agent and env source this run loads (or None)."""
        return user_code.combined(self.agent_code)

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
    return load_agent(entry)[0]


def load_agent(entry: Any) -> tuple[type[Agent], ModuleType, Path | None]:
    """The agent class of an entry, the module it was taken from and, for a
    ``path/file.py:Class`` entry, that file."""
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
    return cls, module, Path(module_name) if module_name.endswith(".py") else None


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
    agent_cls, agent_module, agent_file = load_agent(agent_section.pop("entry", None))
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
        check_memory(cfg, env, agent_cls, agent_config, probe.observation_space,
                     probe.action_space, num_envs)
    finally:
        probe.close()
    seeds = derive_seeds(cfg["seed"], cfg["eval"]["episodes"], num_envs)
    rid = records.run_id(cfg)
    run_dir = Path(cfg["results_dir"]) / cfg["sweep"] / rid
    code = user_code.run_code(agent_cls, agent_module, env.make_id, agent_file)
    return PreparedRun(cfg, env, agent_cls, agent_config, seeds, rid, run_dir, code)


def check_memory(cfg: dict[str, Any], env: EnvSpec, agent_cls: type[Agent], agent_config: Any,
                 obs_space: Any, action_space: Any, num_envs: int) -> None:
    """Refuse a run whose estimated memory exceeds what is available, naming the field
    that asks for the most: the agent's own estimate (held, plus one serialised copy in a
    checkpoint), the envs' observation buffers, and the evaluation records kept in memory."""
    try:
        agent = dict(agent_cls.memory_bytes(agent_config, obs_space, action_space) or {})
    except Exception as err:  # an estimate is advice: a broken hook must not stop the run
        logger.debug("memory_bytes of %s failed: %s", agent_cls.__name__, err)
        agent = {}
    parts = {f"agent.{k}": 2 * int(v) for k, v in agent.items()}
    parts["env"] = (num_envs + 1) * env.instance_bytes
    evaluations = cfg["steps"] // cfg["eval"]["every"] + 1
    episodes = cfg["eval"]["episodes"]
    parts["eval.every" if evaluations >= episodes else "eval.episodes"] = (
        evaluations * episodes * RECORD_BYTES)
    total = sum(parts.values())
    have = available_bytes()
    if have is None or total <= have:
        return
    field = max(parts, key=lambda k: parts[k])
    detail = ", ".join(f"{k} {human(v)}" for k, v in sorted(parts.items(), key=lambda kv: -kv[1])
                       if v)
    check_fits(field, total, f"the run ({detail})", have)
