"""The evaluation protocol: one Monte Carlo estimate of a policy's return, for every agent.

Every evaluation runs ``eval.episodes`` full episodes on the evaluation env, each from its
own recorded seed (the same seeds at every evaluation of a run, so points of a learning
curve differ by the policy only, and disjoint from the training seeds). Actions are the
agent's deterministic ones unless the config asks for the stochastic policy. Observation
normalisation uses the training statistics, frozen.

Two ways to play them, with the same seeds, lengths and records: one episode after another
(:func:`evaluate`), or all episodes side by side on one env each, their observations stacked
into one batch per ``act`` call (:func:`evaluate_batched`, ``eval.batched: true``): fewer and
larger calls of the agent's network, so evaluation costs a fraction of the time. Batched
arithmetic may round differently in the last bits (a matrix product over a batch need not sum
in the order of one row), so returns agree with the sequential protocol to floating-point
tolerance; every per-episode sum is accumulated in the same order as :func:`run_episode`. A
stochastic evaluation, and an agent whose policy is random by definition (``random_floor``),
are always played one after another: batching would hand their random draws to other
episodes.
"""

from __future__ import annotations

import math
from collections import deque
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


MAX_BATCH = 64  # episodes played side by side at most (one env each); more wait for a slot


def batch_width(agent_cls: type, episodes: int, deterministic: bool, batched: bool) -> int:
    """How many evaluation envs a run needs: 1 for the sequential protocol."""
    if not batched or not deterministic or getattr(agent_cls, "random_floor", False):
        return 1
    return max(1, min(episodes, MAX_BATCH))


def evaluate_batched(
    agent: Agent,
    envs: Sequence[gym.Env],
    episode_seeds: Sequence[int],
    env_step: int,
    normalize: Callable[[np.ndarray], np.ndarray] | None = None,
) -> list[EpisodeRecord]:
    """The deterministic policy on one episode per seed, up to ``len(envs)`` at a time, one
    ``act`` call per step for all running episodes; records in episode order."""
    gamma = agent.gamma
    queue = deque(enumerate(episode_seeds))
    # per slot: [episode index, seed, obs, return, discounted return, discount, length]
    slots: list[list] = []
    free = list(envs)
    done: dict[int, EpisodeRecord] = {}
    env_of: list[gym.Env] = []

    def start(env: gym.Env) -> None:
        i, seed = queue.popleft()
        obs, _ = env.reset(seed=int(seed))
        slots.append([i, int(seed), obs, 0.0, 0.0, 1.0, 0])
        env_of.append(env)

    while queue and free:
        start(free.pop(0))
    while slots:
        x = np.stack([np.asarray(s[2]) for s in slots])
        if normalize is not None:
            x = normalize(x)
        x.setflags(write=False)
        actions = agent.act(x, False)
        finished = []
        for k, s in enumerate(slots):
            obs, reward, terminated, truncated, _ = env_of[k].step(actions[k])
            reward = float(reward)
            s[2] = obs
            s[3] += reward
            s[4] += s[5] * reward
            s[5] *= gamma
            s[6] += 1
            if terminated or truncated:
                finished.append(k)
        for k in reversed(finished):
            i, seed, _, ret, disc, _, length = slots.pop(k)
            done[i] = EpisodeRecord(env_step, i, ret, disc, length, seed)
            free.append(env_of.pop(k))
        while queue and free:
            start(free.pop(0))
    return [done[i] for i in sorted(done)]


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
