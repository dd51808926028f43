"""Preallocated ring replay buffer: numpy arrays, no per-transition Python objects."""

from __future__ import annotations

from typing import Any

import numpy as np
import torch


class ReplayBuffer:
    """Fixed-capacity FIFO of transitions ``(obs, action, reward, next_obs, terminated)``.

    Only ``terminated`` is stored as the "done" flag: a time-limit truncation still
    bootstraps from ``next_obs`` (which the runner sets to the episode's final observation).
    """

    FIELDS = ("obs", "actions", "rewards", "next_obs", "terminated")

    def __init__(
        self,
        capacity: int,
        obs_shape: tuple[int, ...],
        action_shape: tuple[int, ...] = (),
        obs_dtype: Any = np.float32,
        action_dtype: Any = np.int64,
    ):
        if capacity < 1:
            raise ValueError(f"capacity must be >= 1, got {capacity}")
        self.capacity = int(capacity)
        self.obs = np.zeros((capacity, *obs_shape), dtype=obs_dtype)
        self.next_obs = np.zeros((capacity, *obs_shape), dtype=obs_dtype)
        self.actions = np.zeros((capacity, *action_shape), dtype=action_dtype)
        self.rewards = np.zeros(capacity, dtype=np.float32)
        self.terminated = np.zeros(capacity, dtype=np.float32)
        self.pos = 0
        self.size = 0

    @staticmethod
    def nbytes(capacity: int, obs_shape: tuple[int, ...], action_shape: tuple[int, ...] = (),
               obs_dtype: Any = np.float32, action_dtype: Any = np.int64) -> int:
        """Bytes a buffer of this capacity holds when full (for memory estimates)."""
        obs = int(np.prod(obs_shape)) * np.dtype(obs_dtype).itemsize
        action = int(np.prod(action_shape)) * np.dtype(action_dtype).itemsize
        return int(capacity) * (2 * obs + action + 4 + 4)

    def __len__(self) -> int:
        return self.size

    def add(self, obs, actions, rewards, next_obs, terminated) -> None:
        """Append a batch of transitions (leading axis = number of envs)."""
        n = len(rewards)
        idx = (self.pos + np.arange(n)) % self.capacity if n > 1 else slice(self.pos, self.pos + 1)
        self.obs[idx] = obs
        self.actions[idx] = actions
        self.rewards[idx] = rewards
        self.next_obs[idx] = next_obs
        self.terminated[idx] = terminated
        self.pos = (self.pos + n) % self.capacity
        self.size = min(self.size + n, self.capacity)

    def sample(self, batch_size: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
        """Uniform sample with replacement, drawn from ``rng`` only."""
        if self.size == 0:
            raise ValueError("cannot sample from an empty replay buffer")
        idx = rng.integers(0, self.size, size=batch_size)
        return {name: getattr(self, name)[idx] for name in self.FIELDS}

    def state_dict(self) -> dict[str, Any]:
        n = self.size
        state: dict[str, Any] = {"pos": self.pos, "size": n, "capacity": self.capacity}
        for name in self.FIELDS:
            state[name] = torch.from_numpy(np.ascontiguousarray(getattr(self, name)[:n]))
        return state

    def load_state_dict(self, state: dict[str, Any]) -> None:
        if int(state["capacity"]) != self.capacity:
            raise ValueError(
                f"replay capacity mismatch: checkpoint {state['capacity']}, config {self.capacity}"
            )
        n = int(state["size"])
        for name in self.FIELDS:
            getattr(self, name)[:n] = state[name].numpy()
        self.pos = int(state["pos"])
        self.size = n
