"""The training side of the env layer: N envs stepped as one batch, same-step autoreset.

Where an episode ends, the batch layer returns the episode's final observation as
``next_obs`` (for bootstrapping on truncation) and the reset observation as ``obs`` to act
on next. It also keeps the raw return and length of every training episode, applies the
training-only reward transforms and the shared observation normaliser.

One env takes a lean path of its own: gymnasium's vector env costs more per step than a
cheap env (CartPole) itself, which would dominate the runner's overhead.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
from gymnasium.vector import AsyncVectorEnv, AutoresetMode, SyncVectorEnv

from envs.normalize import ObsNormalizer

RewardTransform = tuple[str, dict[str, Any]]


class TrainEnvs:
    """``num_envs`` training envs behind one batched ``reset``/``step``."""

    def __init__(
        self,
        make_env: Callable[[], gym.Env],
        num_envs: int,
        vector_mode: str = "sync",
        normalizer: ObsNormalizer | None = None,
        reward_transforms: list[RewardTransform] | None = None,
    ):
        self.num_envs = num_envs
        self.normalizer = normalizer
        self.reward_transforms = list(reward_transforms or [])
        if num_envs == 1:
            self._single: gym.Env | None = make_env()
            self._vector = None
            probe = self._single
            self.single_observation_space = probe.observation_space
            self.single_action_space = probe.action_space
            # Discrete.contains() is several times faster on a python int than on np.int64.
            self._to_env = int if isinstance(probe.action_space, gym.spaces.Discrete) else None
        else:
            cls = AsyncVectorEnv if vector_mode == "async" else SyncVectorEnv
            self._single = None
            self._vector = cls([make_env] * num_envs, autoreset_mode=AutoresetMode.SAME_STEP)
            self.single_observation_space = self._vector.single_observation_space
            self.single_action_space = self._vector.single_action_space
        if normalizer is not None:
            self.single_observation_space = gym.spaces.Box(
                -np.inf, np.inf, self.single_observation_space.shape, np.float32
            )
        self._returns = np.zeros(num_envs, dtype=np.float64)
        self._lengths = np.zeros(num_envs, dtype=np.int64)

    # -- stepping ---------------------------------------------------------------------
    def reset(self, seed: int) -> np.ndarray:
        """Reset every env; env ``i`` gets seed ``seed + i`` (gymnasium's vector rule)."""
        if self._single is not None:
            obs, _ = self._single.reset(seed=seed)
            obs = np.asarray(obs)[None]
        else:
            obs, _ = self._vector.reset(seed=seed)
        self._returns[:] = 0.0
        self._lengths[:] = 0
        return self._observe(obs)

    def step(self, actions: np.ndarray):
        """Returns ``(obs, rewards, next_obs, terminated, truncated, finished)``.

        ``finished`` lists ``(raw_return, length)`` of the episodes that ended this step.
        """
        if self._single is not None:
            action = actions[0] if self._to_env is None else self._to_env(actions[0])
            obs, reward, term, trunc, _ = self._single.step(action)
            self._returns[0] += reward
            self._lengths[0] += 1
            next_obs = np.asarray(obs)[None]
            rewards = np.array([reward], dtype=np.float64)
            terminated = np.array([term])
            truncated = np.array([trunc])
            finished = []
            if term or trunc:
                finished.append((float(self._returns[0]), int(self._lengths[0])))
                self._returns[0] = 0.0
                self._lengths[0] = 0
                reset_obs, _ = self._single.reset()
                obs = np.asarray(reset_obs)[None]
            else:
                obs = next_obs
        else:
            obs, rewards, terminated, truncated, info = self._vector.step(actions)
            rewards = np.asarray(rewards, dtype=np.float64)
            self._returns += rewards
            self._lengths += 1
            done = np.logical_or(terminated, truncated)
            next_obs = obs
            finished = []
            if done.any():
                next_obs = obs.copy()
                for i in np.flatnonzero(done):
                    next_obs[i] = info["final_obs"][i]
                    finished.append((float(self._returns[i]), int(self._lengths[i])))
                self._returns[done] = 0.0
                self._lengths[done] = 0
        for name, p in self.reward_transforms:
            if name == "clip_reward":
                rewards = np.clip(rewards, p["min"], p["max"])
            elif name == "scale_reward":
                rewards = rewards * p["scale"]
        if self.normalizer is not None:
            self.normalizer.update(next_obs)
            if obs is not next_obs:
                obs = self.normalizer(obs)
                next_obs = self.normalizer(next_obs)
            else:
                obs = next_obs = self.normalizer(obs)
        return obs, rewards, next_obs, terminated, truncated, finished

    def _observe(self, obs: np.ndarray) -> np.ndarray:
        if self.normalizer is None:
            return obs
        self.normalizer.update(obs)
        return self.normalizer(obs)

    # -- state --------------------------------------------------------------------------
    @property
    def envs(self) -> list[gym.Env]:
        if self._single is not None:
            return [self._single]
        return list(getattr(self._vector, "envs", []))

    def close(self) -> None:
        if self._single is not None:
            self._single.close()
        else:
            self._vector.close()
