"""The agent contract: the only thing the runner knows about an agent.

An agent is a class with a nested ``Config`` dataclass (its hyperparameters) and four
methods. The runner owns the environments, the budget, the evaluation protocol and the
records; the agent only maps observations to actions and learns from the transitions it
is shown. Everything is batched over ``num_envs`` parallel environments (``num_envs`` is
1 unless the agent's config says otherwise).

Contract version: :data:`CONTRACT_VERSION`. A change that breaks existing agents bumps it.

Minimal example (a complete, working agent)::

    from dataclasses import dataclass
    import numpy as np
    from gymnasium import spaces
    from seedsweep.agents.base import Agent, Step

    class Uniform(Agent):
        action_spaces = (spaces.Discrete,)

        @dataclass
        class Config:
            gamma: float = 0.99
            num_envs: int = 1

        def __init__(self, observation_space, action_space, config, seed):
            super().__init__(observation_space, action_space, config, seed)
            self.rng = np.random.default_rng(seed)

        def act(self, obs, explore):
            return self.rng.integers(self.action_space.n, size=len(obs))

        def observe(self, step):
            return {}

        def state_dict(self):
            return {"rng": self.rng.bit_generator.state}

        def load_state_dict(self, state):
            self.rng.bit_generator.state = state["rng"]
"""

from __future__ import annotations

import abc
import dataclasses
import typing
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from gymnasium import spaces
from seedsweep.configs.checks import ConfigError, check_type, nonfinite, require, unknown_key

__all__ = ["CONTRACT_VERSION", "Agent", "ConfigError", "Step", "build_config", "check_type",
           "require"]

CONTRACT_VERSION = 1


@dataclass(slots=True)
class Step:
    """One vectorised environment step, as the agent sees it.

    ``next_obs`` is the true successor observation: where an episode ended this step it is
    the final observation of that episode (not the reset observation), so an agent can
    bootstrap from it on truncation. The arrays belong to the runner and are read-only
    (``obs`` is the very array ``act`` was given): read them, copy what you keep or change
    (``x = step.next_obs.copy()``); writing into one raises ``ValueError: assignment
    destination is read-only``, which ``seedsweep check-agent`` reports as an in-place
    write at your line.
    """

    obs: np.ndarray  # (num_envs, *obs_shape)
    actions: np.ndarray  # (num_envs, *action_shape)
    rewards: np.ndarray  # (num_envs,) float, after training-only reward wrappers
    next_obs: np.ndarray  # (num_envs, *obs_shape), final obs where done
    terminated: np.ndarray  # (num_envs,) bool: a true terminal state, no bootstrap
    truncated: np.ndarray  # (num_envs,) bool: cut by a time limit, bootstrap from next_obs
    env_steps: int  # total training env steps after this step (all envs)


class Agent(abc.ABC):
    """Base class of every agent.

    Subclasses set :attr:`action_spaces` and define a nested ``Config`` dataclass whose
    fields are the hyperparameters read from ``configs/agent/<name>.yaml``. Two fields have
    meaning to the runner when present: ``gamma`` (the discount used to report discounted
    evaluation returns; required) and ``num_envs`` (how many training envs to step in
    parallel; default 1). ``vector_mode`` ("sync" or "async") picks gymnasium's vector env.

    Randomness: use only generators seeded from ``seed`` (``numpy.random.default_rng``,
    ``torch.Generator``); never the global python/numpy/torch RNGs. Their states belong in
    :meth:`state_dict`, which holds only tensors and plain python values (so it loads with
    ``torch.load(weights_only=True)``).
    """

    action_spaces: ClassVar[tuple[type[spaces.Space], ...]] = ()
    # True only for the uniform random agent: its runs are the floor (score 0) of every
    # normalised score. Marked on the class, so an agent that borrows its YAML is not it.
    random_floor: ClassVar[bool] = False
    contract_version: ClassVar[int] = CONTRACT_VERSION  # the contract this agent was written to
    Config: ClassVar[type]

    def __init__(
        self,
        observation_space: spaces.Space,
        action_space: spaces.Space,
        config: Any,
        seed: int,
    ):
        if not type(self).supports(action_space):
            allowed = ", ".join(s.__name__ for s in type(self).action_spaces)
            raise ValueError(f"{type(self).__name__} does not support {action_space} "
                             f"(supports: {allowed})")
        self.observation_space = observation_space
        self.action_space = action_space
        self.config = config
        self.seed = seed

    # -- what the runner calls -------------------------------------------------------
    @classmethod
    def supports(cls, action_space: spaces.Space) -> bool:
        """Whether this agent can act in ``action_space``."""
        return isinstance(action_space, cls.action_spaces)

    @classmethod
    def memory_bytes(cls, config: Any, observation_space: spaces.Space,
                     action_space: spaces.Space) -> dict[str, int]:
        """The most memory an instance will hold, in bytes, keyed by the Config field that
        sets each amount (``{"replay_capacity": ...}``). Called before the run starts, so a
        setting that cannot fit is refused naming that field instead of failing later.
        Optional; the default counts nothing."""
        return {}

    @property
    def gamma(self) -> float:
        return float(self.config.gamma)

    @abc.abstractmethod
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        """Actions for a batch of observations. ``explore=False`` asks for the
        deterministic policy (argmax / mean) used by evaluation by default.

        ``obs`` is read-only (in training it is later passed back as ``Step.obs``): copy it
        before changing it (``x = obs - mean`` makes a new array; ``obs -= mean`` raises)."""

    @abc.abstractmethod
    def observe(self, step: Step) -> dict[str, float]:
        """Learn from one vectorised step. Returns scalars to log (may be empty)."""

    @abc.abstractmethod
    def state_dict(self) -> dict[str, Any]:
        """Full training state: networks, optimisers, buffers, schedules, RNG states."""

    @abc.abstractmethod
    def load_state_dict(self, state: dict[str, Any]) -> None:
        """Restore what :meth:`state_dict` returned, into a freshly built instance."""


def build_config(agent_cls: type[Agent], values: dict[str, Any], prefix: str = "agent") -> Any:
    """Turn a plain dict into ``agent_cls.Config``, checking names and types.

    Unknown keys and wrong types raise :class:`ConfigError` naming the field and what is
    allowed; range checks live in each Config's ``__post_init__``.
    """
    fields = {f.name: f for f in dataclasses.fields(agent_cls.Config)}
    unknown = sorted(set(values) - set(fields))
    if unknown:
        raise unknown_key(f"{prefix}.{unknown[0]}", unknown[0], fields)
    hints = _resolved_hints(agent_cls.Config)
    checked = {}
    for name, value in values.items():
        checked[name] = check_type(f"{prefix}.{name}", value, hints[name], finite=False)
    try:
        config = agent_cls.Config(**checked)
    except ConfigError as err:
        if not err.field.startswith(prefix + "."):
            raise ConfigError(f"{prefix}.{err.field}", str(err).split(": ", 1)[1]) from None
        raise
    for name, value in checked.items():  # what the Config's own range checks let through
        if nonfinite(value):
            raise ConfigError(f"{prefix}.{name}", f"must be a finite number (got {value!r})")
    return config


def _resolved_hints(cls: type) -> dict[str, Any]:
    return typing.get_type_hints(cls)
