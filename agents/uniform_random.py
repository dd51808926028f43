"""Uniform random actions: the floor of every normalised score (score 0 by definition)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from gymnasium import spaces

from agents.base import Agent, Step


class UniformRandom(Agent):
    """Draws each action uniformly from the action space, from its own seeded generator."""

    action_spaces = (spaces.Discrete, spaces.Box, spaces.MultiDiscrete, spaces.MultiBinary)

    @dataclass
    class Config:
        gamma: float = 0.99  # only used to report discounted evaluation returns
        num_envs: int = 1

    def __init__(self, observation_space, action_space, config, seed: int):
        super().__init__(observation_space, action_space, config, seed)
        self.rng = np.random.default_rng(seed)
        space = action_space
        if isinstance(space, spaces.Discrete):
            n, start = int(space.n), int(space.start)
            self._draw = lambda k: self.rng.integers(n, size=k) + start
        elif isinstance(space, spaces.Box):
            low, high = space.low, space.high
            if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high))):
                raise ValueError("uniform random actions need a bounded Box action space")
            self._draw = lambda k: self.rng.uniform(low, high, size=(k, *space.shape)).astype(
                space.dtype)
        elif isinstance(space, spaces.MultiDiscrete):
            self._draw = lambda k: self.rng.integers(space.nvec, size=(k, *space.shape)) + space.start
        else:
            self._draw = lambda k: self.rng.integers(2, size=(k, *space.shape)).astype(space.dtype)

    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        return self._draw(len(obs))

    def observe(self, step: Step) -> dict[str, float]:
        return {}

    def state_dict(self) -> dict[str, Any]:
        return {"rng": self.rng.bit_generator.state}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.rng.bit_generator.state = state["rng"]
