"""An env's state rebuilt by replaying its current episode, for envs that are not plain data.

Some envs keep their state where :mod:`seedsweep.envs.snapshot` cannot read it (box2d
envs hold their bodies in C objects). A single env can still be checkpointed right after an
episode ends, by its RNG state before the reset; a batch of envs almost never has all of
them there at once. :class:`EpisodeLog` instead records, for each env, how its current
episode began (the reset seed, or the RNG state just before the reset) and every action
since. :func:`replay` rebuilds the env from that: a fresh env reset the same way and fed
the same actions ends in the same state, since an env is deterministic given its seed and
actions (a run's bit-identical repeats depend on that too). Whether it holds for a given
env config is checked, not assumed: :func:`replays_faithfully`.

A log is data only (an int or a numpy generator state, and one array of actions), so a
checkpoint holding it runs no code when read. Replaying costs at most one episode of env
steps per env, once per resume.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
import torch
from seedsweep.envs.fidelity import carries_on_alike


class ReplayError(RuntimeError):
    """A log that cannot be replayed, or whose replay did not end where the log says."""


def generator_state(env: gym.Env) -> dict[str, Any]:
    """The env's generator state as data (taken just before an unseeded reset)."""
    return copy.deepcopy(env.unwrapped.np_random.bit_generator.state)


def reset_from(env: gym.Env, state: dict[str, Any]) -> Any:
    """Reset a fresh env as its original was reset from generator ``state``; the observation."""
    env.reset(seed=0)  # creates the generator, whose state is then overwritten
    env.unwrapped.np_random.bit_generator.state = state
    return env.reset()[0]


class EpisodeLog(gym.Wrapper):
    """Records how the current episode began and the actions taken since (outermost wrapper,
    so the actions are the agent's own, before any action wrapper)."""

    def __init__(self, env: gym.Env):
        super().__init__(env)
        self.began: dict[str, Any] | None = None  # {"seed": int} or {"rng": state}; None: unknown
        self.actions: list[Any] = []

    def reset(self, *, seed: int | None = None, options: dict[str, Any] | None = None):
        if options is not None:
            self.began = None  # reset options are not recorded: this episode cannot be replayed
        elif seed is not None:
            self.began = {"seed": int(seed)}
        else:
            self.began = {"rng": generator_state(self.env)}
        self.actions = []
        return self.env.reset(seed=seed, options=options)

    def step(self, action: Any):
        # array actions may be views into the batch's action array: copied; scalars are not
        self.actions.append(action.copy() if isinstance(action, np.ndarray) else action)
        return self.env.step(action)

    def state_dict(self) -> dict[str, Any]:
        """The log as data: how the episode began and its actions (one array, step-major)."""
        if self.began is None:
            raise ReplayError("the current episode began with reset options, or never")
        actions = np.stack(self.actions) if self.actions else np.zeros(0)
        return {"began": dict(self.began), "actions": torch.from_numpy(actions)}


def replay(env: EpisodeLog, log: dict[str, Any]) -> np.ndarray:
    """Put a freshly built env where ``log`` left its original; returns its last observation."""
    began, actions = log["began"], log["actions"].numpy()
    if "seed" in began:
        obs, _ = env.reset(seed=int(began["seed"]))
    elif "rng" in began:
        obs = reset_from(env, began["rng"])
    else:
        raise ReplayError(f"an episode log begins with {sorted(began)}, not 'seed' or 'rng'")
    for i, action in enumerate(actions):
        obs, _, terminated, truncated, _ = env.step(action)
        if terminated or truncated:  # a logged episode is always still running
            raise ReplayError(f"the replayed episode ended after {i + 1} of {len(actions)} "
                              "actions")
    return np.asarray(obs)


def replays_faithfully(make_env: Callable[[], gym.Env], steps: int = 30) -> bool:
    """Whether an env rebuilt by :func:`replay` carries on exactly like the original."""
    return carries_on_alike(lambda: EpisodeLog(make_env()), EpisodeLog.state_dict, replay, steps)
