"""Test-only agent: follows a fixed deterministic tabular policy given in its config.

Used to evaluate an exactly known policy (from :mod:`runner.oracle`) through the real
evaluation protocol. Select it with overrides such as
``agent=random agent.name=tabular_policy agent.entry=<this file>:TabularPolicy
+agent.actions=[...]``.
"""

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step


class TabularPolicy(Agent):
    """Action = actions[state]; the state is the Discrete observation or its one-hot index."""

    action_spaces = (spaces.Discrete,)

    @dataclass
    class Config:
        gamma: float = 0.99
        num_envs: int = 1
        actions: list[int] = field(default_factory=list)

    def __init__(self, observation_space, action_space, config, seed: int):
        super().__init__(observation_space, action_space, config, seed)
        self.actions = np.asarray(config.actions, dtype=np.int64)
        if self.actions.size == 0:
            raise ValueError("agent.actions: give one action per state")

    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        obs = np.asarray(obs)
        states = obs.argmax(axis=1) if obs.ndim == 2 else obs.astype(np.int64).ravel()
        return self.actions[states]

    def observe(self, step: Step) -> dict[str, float]:
        return {}

    def state_dict(self) -> dict[str, Any]:
        return {"actions": self.actions.tolist()}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.actions = np.asarray(state["actions"], dtype=np.int64)
