"""The training side of the env layer: N envs stepped as one batch, same-step autoreset.

Where an episode ends, the batch layer returns the episode's final observation as
``next_obs`` (for bootstrapping on truncation) and the reset observation as ``obs`` to act
on next. It also keeps the raw return and length of every training episode, applies the
training-only reward transforms and the shared observation normaliser, whose
statistics count every observation acted on (the first reset's, then each step's ``obs``,
reset observations included) once and final observations not at all.

One env takes a lean path of its own: gymnasium's vector env costs more per step than a
cheap env (CartPole) itself, which would dominate the runner's overhead.

Every observation array handed out is read-only: the agent gets the same array in ``act``
and later as ``Step.obs``, so a write into it would silently change what it learns from.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
import torch
from gymnasium.vector import AsyncVectorEnv, AutoresetMode, SyncVectorEnv
from seedsweep.envs import snapshot
from seedsweep.envs.normalize import ObsNormalizer
from seedsweep.envs.replay import (
    EpisodeLog,
    ReplayError,
    generator_state,
    replay,
    replays_faithfully,
    reset_from,
)

RewardTransform = tuple[str, dict[str, Any]]

# Read-only one-env flag arrays and "no episode ended", shared by every step of the lean
# one-env path instead of allocating new ones each step.
_FLAGS = {False: np.zeros(1, dtype=bool), True: np.ones(1, dtype=bool)}
for _a in _FLAGS.values():
    _a.flags.writeable = False
_NONE: tuple = ()


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
        self._make_env = make_env
        self.normalizer = normalizer
        self.reward_transforms = list(reward_transforms or [])
        if num_envs == 1:
            self._single: gym.Env | None = make_env()
            self._vector = None
            probe = self._single
            self.single_observation_space = probe.observation_space
            self.single_action_space = probe.action_space
        else:
            self._single = None
            self._vector = _vector_env(make_env, num_envs, vector_mode)
            self.single_observation_space = self._vector.single_observation_space
            self.single_action_space = self._vector.single_action_space
        if normalizer is not None:
            self.single_observation_space = gym.spaces.Box(
                -np.inf, np.inf, self.single_observation_space.shape, np.float32
            )
        self._returns = np.zeros(num_envs, dtype=np.float64)
        self._lengths = np.zeros(num_envs, dtype=np.int64)
        self._return1, self._length1 = 0.0, 0  # the same, on the one-env path
        self._reward_arrays: dict[float, np.ndarray] = {}
        self.vector_mode = vector_mode
        self.track_resets = False  # set by enable_snapshots when it checkpoints at episode ends
        self.reset_rng_state: dict | None = None  # env RNG just before the last reset
        self.raw_obs: np.ndarray | None = None  # last observation before normalisation

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
        self._return1, self._length1 = 0.0, 0
        return _frozen(self._observe(obs))

    def step(self, actions: np.ndarray):
        """Returns ``(obs, rewards, next_obs, terminated, truncated, finished)``.

        ``finished`` lists ``(raw_return, length)`` of the episodes that ended this step.
        """
        if self._single is not None:
            obs, reward, term, trunc, _ = self._single.step(actions[0])
            self._return1 += reward  # python numbers: cheaper than numpy scalars per step
            self._length1 += 1
            next_obs = np.asarray(obs)[None]
            next_obs.setflags(write=False)  # (setflags: half the cost of flags.writeable)
            rewards = self._reward_arrays.get(reward)
            if rewards is None:  # most envs pay few distinct rewards: keep read-only arrays
                rewards = np.array([reward], dtype=np.float64)
                rewards.flags.writeable = False
                if len(self._reward_arrays) < 256:
                    self._reward_arrays[reward] = rewards
            terminated = _FLAGS[bool(term)]
            truncated = _FLAGS[bool(trunc)]
            finished = _NONE
            if term or trunc:
                finished = [(float(self._return1), self._length1)]
                self._return1 = 0.0
                self._length1 = 0
                if self.track_resets:
                    self.reset_rng_state = generator_state(self._single)
                reset_obs, _ = self._single.reset()
                obs = np.asarray(reset_obs)[None]
                obs.setflags(write=False)
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
            for a in (obs, next_obs, rewards, terminated, truncated):
                a.setflags(write=False)
        self.raw_obs = obs
        if self.reward_transforms:
            for name, p in self.reward_transforms:
                if name == "clip_reward":
                    rewards = np.clip(rewards, p["min"], p["max"])
                elif name == "scale_reward":
                    rewards = rewards * p["scale"]
            rewards.setflags(write=False)
        if self.normalizer is not None:
            # Count each observation acted on exactly once: this step's ``obs`` (the reset
            # observation where an episode ended). A final observation is only bootstrapped
            # from, never acted on, so it is not counted.
            self.normalizer.update(obs)
            if obs is not next_obs:
                obs = _frozen(self.normalizer(obs))
                next_obs = _frozen(self.normalizer(next_obs))
            else:
                obs = next_obs = _frozen(self.normalizer(obs))
        return obs, rewards, next_obs, terminated, truncated, finished

    def _observe(self, obs: np.ndarray) -> np.ndarray:
        self.raw_obs = obs
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

    def enable_snapshots(self) -> str:
        """Choose how this batch's env state will be saved, and prepare for it (before the
        first reset): ``state`` (every env's attributes as plain data, any step), ``replay``
        (a sync batch of envs that are not plain data: each env's episode so far, replayed on
        resume; any step), ``reset`` (one such env, at an episode end: its RNG before the
        reset) or ``none`` (an async batch of such envs)."""
        if self.raw_obs is not None:
            raise RuntimeError("snapshots are chosen before the envs are first reset")
        if (self.vector_mode != "async" or self.num_envs == 1) and snapshot.restores_faithfully(
                self._make_env):
            return "state"
        if self.num_envs == 1:
            self.track_resets = True
            return "reset"
        if self.vector_mode == "async" or not replays_faithfully(self._make_env):
            return "none"
        self._vector.close()  # rebuilt with every env's episode logged
        make_env = self._make_env
        self._vector = _vector_env(lambda: EpisodeLog(make_env()), self.num_envs, "sync")
        return "replay"

    def state_dict(self, kind: str) -> dict[str, Any]:
        if self._single is not None:
            self._returns[0], self._lengths[0] = self._return1, self._length1
        state: dict[str, Any] = {
            "kind": kind,
            "returns": torch.from_numpy(self._returns.copy()),
            "lengths": torch.from_numpy(self._lengths.copy()),
            "raw_obs": torch.from_numpy(np.array(self.raw_obs, copy=True)),
            "normalizer": self.normalizer.state_dict() if self.normalizer is not None else None,
        }
        if kind == "state":
            state["envs"] = [snapshot.capture(env) for env in self.envs]
        elif kind == "replay":
            state["episodes"] = [env.state_dict() for env in self.envs]
        elif kind == "reset":
            if self.reset_rng_state is None:
                raise RuntimeError("no episode has ended since the last snapshot")
            state["reset_rng"] = self.reset_rng_state
        return state

    def load_state_dict(self, state: dict[str, Any]) -> np.ndarray:
        """Restore the envs; returns the observation to act on next."""
        if state.get("kind") not in ("state", "replay", "reset"):
            raise RuntimeError(f"env state of kind {state.get('kind')!r} cannot be restored "
                               "(only 'state', 'replay' and 'reset'; pickled envs are never "
                               "loaded)")
        self._returns[:] = state["returns"].numpy()
        self._lengths[:] = state["lengths"].numpy()
        self._return1, self._length1 = float(self._returns[0]), int(self._lengths[0])
        if self.normalizer is not None:
            self.normalizer.load_state_dict(state["normalizer"])
        raw = state["raw_obs"].numpy()
        if state["kind"] == "state":
            envs = self.envs
            if len(state["envs"]) != len(envs):
                raise snapshot.SnapshotError(f"{len(state['envs'])} env states for "
                                             f"{len(envs)} envs")
            for env, saved in zip(envs, state["envs"], strict=True):
                env.reset(seed=0)  # makes the lazily created attributes, then overwritten
                snapshot.restore(env, saved)
        elif state["kind"] == "replay":
            envs = self.envs
            if len(state["episodes"]) != len(envs) or not all(
                    isinstance(env, EpisodeLog) for env in envs):
                raise ReplayError(f"{len(state['episodes'])} episode logs for {len(envs)} envs "
                                  "that do not keep one")
            for i, (env, log) in enumerate(zip(envs, state["episodes"], strict=True)):
                if not np.array_equal(replay(env, log), raw[i]):
                    raise ReplayError(f"env {i}'s replayed episode did not end at the saved "
                                      "observation")
        elif state["kind"] == "reset":
            obs = reset_from(self._single, state["reset_rng"])
            if not np.array_equal(np.asarray(obs)[None], raw):
                raise RuntimeError("the env's reset did not reproduce the saved observation")
        else:
            raise RuntimeError(f"env state of kind {state['kind']!r} cannot be restored")
        self.raw_obs = raw
        return _frozen(raw if self.normalizer is None else self.normalizer(raw))

    def close(self) -> None:
        if self._single is not None:
            self._single.close()
        else:
            self._vector.close()


def _frozen(a: np.ndarray) -> np.ndarray:
    """``a`` made read-only (a fresh array or view the batch layer owns): the runner's
    arrays are read by agents, never written."""
    a.setflags(write=False)
    return a


def _vector_env(make_env: Callable[[], gym.Env], num_envs: int, vector_mode: str):
    cls = AsyncVectorEnv if vector_mode == "async" else SyncVectorEnv
    return cls([make_env] * num_envs, autoreset_mode=AutoresetMode.SAME_STEP)
