"""The evaluation protocol: one Monte Carlo estimate of a policy's return, for every agent.

Every evaluation runs ``eval.episodes`` full episodes on the evaluation env, each from its
own recorded seed (the same seeds at every evaluation of a run, so points of a learning
curve differ by the policy only, and disjoint from the training seeds). Actions are the
agent's deterministic ones unless the config asks for the stochastic policy. Observation
normalisation uses the training statistics, frozen.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import gymnasium as gym
import numpy as np
from seedsweep.agents.base import Agent


@dataclass(frozen=True)
class EpisodeRecord:
    env_step: int
    episode: int
    ret: float  # undiscounted return
    discounted_return: float
    length: int
    episode_seed: int

    def row(self) -> tuple:
        return (self.env_step, self.episode, self.ret, self.discounted_return, self.length,
                self.episode_seed)


def run_episode(
    agent: Agent,
    env: gym.Env,
    seed: int,
    gamma: float,
    deterministic: bool = True,
    normalize: Callable[[np.ndarray], np.ndarray] | None = None,
) -> tuple[float, float, int]:
    """One full episode from ``seed``; returns (return, discounted return, length)."""
    obs, _ = env.reset(seed=seed)
    ret = disc = 0.0
    discount = 1.0
    length = 0
    explore = not deterministic
    while True:
        x = np.asarray(obs)[None]
        if normalize is not None:
            x = normalize(x)
        x.setflags(write=False)  # as in training: act() reads the runner's arrays only
        action = agent.act(x, explore)[0]
        obs, reward, terminated, truncated, _ = env.step(action)
        reward = float(reward)
        ret += reward
        disc += discount * reward
        discount *= gamma
        length += 1
        if terminated or truncated:
            return ret, disc, length


def evaluate(
    agent: Agent,
    env: gym.Env,
    episode_seeds: Sequence[int],
    env_step: int,
    deterministic: bool = True,
    normalize: Callable[[np.ndarray], np.ndarray] | None = None,
) -> list[EpisodeRecord]:
    """Evaluate ``agent`` on one episode per seed; the records go to ``eval.csv``."""
    records = []
    for i, seed in enumerate(episode_seeds):
        ret, disc, length = run_episode(agent, env, seed, agent.gamma, deterministic, normalize)
        records.append(EpisodeRecord(env_step, i, ret, disc, length, int(seed)))
    return records


def mean_and_stderr(returns: Sequence[float]) -> tuple[float, float]:
    """Monte Carlo estimate of the expected return and its standard error (ddof=1)."""
    x = np.asarray(returns, dtype=np.float64)
    if len(x) == 0:
        return math.nan, math.nan
    se = float(x.std(ddof=1) / math.sqrt(len(x))) if len(x) > 1 else math.nan
    return float(x.mean()), se


def discounted_return(rewards: Sequence[float], gamma: float) -> float:
    """Σ_t γ^t r_t, accumulated in the same order as :func:`run_episode`."""
    disc = 0.0
    discount = 1.0
    for r in rewards:
        disc += discount * float(r)
        discount *= gamma
    return disc
