"""Uniform random actions: the floor of every normalised score (score 0 by definition)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step


class UniformRandom(Agent):
    """Draws each action uniformly from the action space, from its own seeded generator."""

    action_spaces = (spaces.Discrete, spaces.Box, spaces.MultiDiscrete, spaces.MultiBinary)
    random_floor = True

    @dataclass
    class Config:
        gamma: float = 0.99  # only used to report discounted evaluation returns
        num_envs: int = 1

    def __init__(self, observation_space, action_space, config, seed: int):
        super().__init__(observation_space, action_space, config, seed)
        self.rng = np.random.default_rng(seed)
        space = action_space
        self._chunk = np.zeros(0, dtype=np.int64)
        self._pos = 0
        if isinstance(space, spaces.Discrete):
            self._draw = self._draw_discrete
        elif isinstance(space, spaces.Box):
            low, high = space.low, space.high
            if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high))):
                raise ValueError("uniform random actions need a bounded Box action space")
            self._draw = lambda k: self.rng.uniform(low, high, size=(k, *space.shape)).astype(
                space.dtype)
        elif isinstance(space, spaces.MultiDiscrete):
            self._draw = lambda k: (self.rng.integers(space.nvec, size=(k, *space.shape))
                                    + space.start)
        else:
            self._draw = lambda k: self.rng.integers(2, size=(k, *space.shape)).astype(space.dtype)

    def _draw_discrete(self, k: int) -> np.ndarray:
        """Discrete actions from pre-drawn chunks: one generator call per 4096 actions."""
        if self._pos + k > len(self._chunk):
            space = self.action_space
            self._chunk = self.rng.integers(space.n, size=max(4096, k)) + int(space.start)
            self._pos = 0
        out = self._chunk[self._pos:self._pos + k]
        self._pos += k
        return out

    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        return self._draw(len(obs))

    def observe(self, step: Step) -> dict[str, float]:
        return {}

    def state_dict(self) -> dict[str, Any]:
        return {"rng": self.rng.bit_generator.state, "chunk": torch.from_numpy(self._chunk.copy()),
                "pos": self._pos}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.rng.bit_generator.state = state["rng"]
        self._chunk = state["chunk"].numpy().copy()
        self._pos = int(state["pos"])
