"""Preallocated ring replay buffer and the n-step folding that feeds it.

Numpy arrays throughout, no per-transition Python objects.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import torch


class ReplayBuffer:
    """Fixed-capacity FIFO of transitions ``(obs, action, reward, next_obs, terminated)``.

    Only ``terminated`` is stored as the "done" flag: a time-limit truncation still
    bootstraps from ``next_obs`` (which the runner sets to the episode's final observation).
    With ``discounts=True`` each transition also keeps the factor its bootstrap value is
    multiplied by (``gamma ** k`` for a k-step return); one-step buffers leave the field out,
    so their arrays and checkpoints stay as they were.
    """

    FIELDS = ("obs", "actions", "rewards", "next_obs", "terminated")

    def __init__(
        self,
        capacity: int,
        obs_shape: tuple[int, ...],
        action_shape: tuple[int, ...] = (),
        obs_dtype: Any = np.float32,
        action_dtype: Any = np.int64,
        discounts: bool = False,
    ):
        if capacity < 1:
            raise ValueError(f"capacity must be >= 1, got {capacity}")
        self.capacity = int(capacity)
        self.obs = np.zeros((capacity, *obs_shape), dtype=obs_dtype)
        self.next_obs = np.zeros((capacity, *obs_shape), dtype=obs_dtype)
        self.actions = np.zeros((capacity, *action_shape), dtype=action_dtype)
        self.rewards = np.zeros(capacity, dtype=np.float32)
        self.terminated = np.zeros(capacity, dtype=np.float32)
        self.fields = self.FIELDS
        if discounts:
            self.discounts = np.zeros(capacity, dtype=np.float32)
            self.fields = (*self.FIELDS, "discounts")
        self.pos = 0
        self.size = 0

    @staticmethod
    def nbytes(capacity: int, obs_shape: tuple[int, ...], action_shape: tuple[int, ...] = (),
               obs_dtype: Any = np.float32, action_dtype: Any = np.int64,
               discounts: bool = False) -> int:
        """Bytes a buffer of this capacity holds when full (for memory estimates)."""
        obs = int(np.prod(obs_shape)) * np.dtype(obs_dtype).itemsize
        action = int(np.prod(action_shape)) * np.dtype(action_dtype).itemsize
        return int(capacity) * (2 * obs + action + 4 + 4 + (4 if discounts else 0))

    def __len__(self) -> int:
        return self.size

    def add(self, obs, actions, rewards, next_obs, terminated, discounts=None) -> None:
        """Append a batch of transitions (leading axis = number of envs).

        ``discounts`` is required by a buffer made with ``discounts=True`` and refused by
        one without.
        """
        n = len(rewards)
        if (discounts is None) != ("discounts" not in self.fields):
            raise ValueError("discounts must be given exactly when the buffer keeps them")
        if n == 0:
            return
        idx = (self.pos + np.arange(n)) % self.capacity if n > 1 else slice(self.pos, self.pos + 1)
        self.obs[idx] = obs
        self.actions[idx] = actions
        self.rewards[idx] = rewards
        self.next_obs[idx] = next_obs
        self.terminated[idx] = terminated
        if discounts is not None:
            self.discounts[idx] = discounts
        self.pos = (self.pos + n) % self.capacity
        self.size = min(self.size + n, self.capacity)

    def sample(self, batch_size: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
        """Uniform sample with replacement, drawn from ``rng`` only."""
        if self.size == 0:
            raise ValueError("cannot sample from an empty replay buffer")
        idx = rng.integers(0, self.size, size=batch_size)
        return {name: getattr(self, name)[idx] for name in self.fields}

    def state_dict(self) -> dict[str, Any]:
        n = self.size
        state: dict[str, Any] = {"pos": self.pos, "size": n, "capacity": self.capacity}
        for name in self.fields:
            state[name] = torch.from_numpy(np.ascontiguousarray(getattr(self, name)[:n]))
        return state

    def load_state_dict(self, state: dict[str, Any]) -> None:
        if int(state["capacity"]) != self.capacity:
            raise ValueError(
                f"replay capacity mismatch: checkpoint {state['capacity']}, config {self.capacity}"
            )
        if ("discounts" in state) != ("discounts" in self.fields):
            raise ValueError("checkpoint and config disagree on whether discounts are kept")
        n = int(state["size"])
        for name in self.fields:
            getattr(self, name)[:n] = state[name].numpy()
        self.pos = int(state["pos"])
        self.size = n


class MultiStepFolder:
    """Folds each env's last ``horizon`` transitions into one n-step transition.

    The n-step return of Sutton (1988), as used in DQN by Hessel et al. (2018):
    ``G = r_0 + gamma r_1 + ... + gamma^(k-1) r_(k-1)``, bootstrapped with ``gamma^k`` from
    the observation k steps on. A full queue of ``horizon`` steps gives out its oldest
    transition each step; at an episode's end (terminated or truncated) every pending
    transition is given out with the k steps left to that end, so no return crosses an
    episode boundary. The queues are plain arrays, saved and restored with the agent.
    Unlike ``returns.nstep_returns`` (rollouts, values known when the rollout ends), the
    bootstrap value is left out here: the learner takes it from its target network when the
    transition is sampled, scaled by the stored ``gamma^k``.
    """

    def __init__(self, horizon: int, gamma: float, num_envs: int, obs_dim: int):
        if horizon < 1:
            raise ValueError(f"horizon must be >= 1, got {horizon}")
        self.horizon = int(horizon)
        self.obs = np.zeros((num_envs, horizon, obs_dim), dtype=np.float32)
        self.actions = np.zeros((num_envs, horizon), dtype=np.int64)
        self.rewards = np.zeros((num_envs, horizon), dtype=np.float64)
        self.count = np.zeros(num_envs, dtype=np.int64)
        self.powers = float(gamma) ** np.arange(horizon + 1)
        # what one push can give out (every env ending with a full queue), filled in place
        most = num_envs * horizon
        self._out = (np.empty((most, obs_dim), np.float32), np.empty(most, np.int64),
                     np.empty(most, np.float64), np.empty((most, obs_dim), np.float32),
                     np.empty(most, np.float32), np.empty(most, np.float64))

    def push(self, obs, actions, rewards, next_obs, terminated, truncated
             ) -> tuple[np.ndarray, ...]:
        """Add one step of every env; returns the finished transitions as
        ``(obs, actions, returns, next_obs, terminated, discounts)``, possibly empty. The
        arrays are views, overwritten by the next push: use or copy them before it."""
        o, a, g, o2, term, disc = self._out
        m = 0
        for e in range(len(rewards)):
            k = int(self.count[e])
            self.obs[e, k] = obs[e]
            self.actions[e, k] = actions[e]
            self.rewards[e, k] = rewards[e]
            k += 1
            ended = bool(terminated[e] or truncated[e])
            for j in range(k if ended else int(k == self.horizon)):
                steps = k - j  # rewards from pending step j to this one
                o[m], a[m] = self.obs[e, j], self.actions[e, j]
                o2[m], term[m] = next_obs[e], terminated[e]
                g[m] = float(np.dot(self.powers[:steps], self.rewards[e, j:k]))
                disc[m] = self.powers[steps]
                m += 1
            if ended:
                k = 0
            elif k == self.horizon:  # its oldest step was given out: drop it
                self.obs[e, :-1] = self.obs[e, 1:]
                self.actions[e, :-1] = self.actions[e, 1:]
                self.rewards[e, :-1] = self.rewards[e, 1:]
                k -= 1
            self.count[e] = k
        return o[:m], a[:m], g[:m], o2[:m], term[:m], disc[:m]

    def state_dict(self) -> dict[str, Any]:
        return {name: torch.from_numpy(getattr(self, name).copy())
                for name in ("obs", "actions", "rewards", "count")}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        for name in ("obs", "actions", "rewards", "count"):
            value = state[name].numpy()
            if value.shape != getattr(self, name).shape:
                raise ValueError(f"pending n-step queue shape mismatch in {name}: "
                                 f"checkpoint {value.shape}, config {getattr(self, name).shape}")
            getattr(self, name)[...] = value
