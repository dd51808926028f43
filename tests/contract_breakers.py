"""Agents that each break one promise of the agent contract, for tests/test_check_agent.py.

:class:`Tidy` keeps the whole contract (the positive control); every other class changes
one thing about it, so the check that catches it is the one that should fail.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step

LEAK_FLOATS = 1250  # float64s kept per step: 10 kB, i.e. 1 MB per 100 steps


class Tidy(Agent):
    """Linear action scores with seeded noise and a toy reward-weighted update.

    The update rule is only there to give the agent learning state that changes every step.
    """

    action_spaces = (spaces.Discrete, spaces.Box)

    @dataclass
    class Config:
        gamma: float = 0.99
        num_envs: int = 1
        lr: float = 0.01
        explore_prob: float = 0.5
        noise: float = 0.5

    def __init__(self, observation_space, action_space, config, seed):
        super().__init__(observation_space, action_space, config, seed)
        self.refuse(action_space)
        self.rng = self.make_rng(seed)
        self.obs_dim = int(np.prod(observation_space.shape))
        self.discrete = not isinstance(action_space, spaces.Box)
        self.n = int(getattr(action_space, "n", 2)) if self.discrete else 0
        out = self.n if self.discrete else int(np.prod(action_space.shape))
        w = self.rng.normal(0.0, 0.1, (self.obs_dim, out)).astype(np.float32)
        self.weights = torch.from_numpy(w)
        self.steps = 0

    def refuse(self, action_space: spaces.Space) -> None:
        if not self.supports(action_space):
            raise ValueError(f"{type(self).__name__} acts in Discrete or Box spaces only, "
                             f"not {action_space}")

    def make_rng(self, seed: int) -> np.random.Generator:
        return np.random.default_rng(seed)

    def explore_draws(self, k: int) -> np.ndarray:
        return self.rng.random(k)

    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        x = np.asarray(obs, dtype=np.float32).reshape(len(obs), -1)
        scores = x @ self.weights.numpy()
        if self.discrete:
            greedy = scores.argmax(axis=1).astype(np.int64)
            if not explore:
                return greedy
            uniform = self.rng.integers(self.n, size=len(obs))
            return np.where(self.explore_draws(len(obs)) < self.config.explore_prob, uniform,
                            greedy).astype(np.int64)
        space = self.action_space
        if explore:
            scores = scores + self.rng.normal(0.0, self.config.noise, scores.shape)
        return np.clip(scores.reshape(len(obs), *space.shape), space.low, space.high).astype(
            space.dtype)

    def observe(self, step: Step) -> dict[str, float]:
        n = len(step.rewards)
        x = np.asarray(step.obs, dtype=np.float32).reshape(n, -1)
        r = np.tanh(np.asarray(step.rewards, dtype=np.float32))
        if self.discrete:
            grad = np.zeros(self.weights.shape, dtype=np.float32)
            np.add.at(grad.T, np.asarray(step.actions).reshape(n), r[:, None] * x)
        else:
            a = np.asarray(step.actions, dtype=np.float32).reshape(n, -1)
            grad = x.T @ (r[:, None] * a)
        self.weights += torch.from_numpy(self.config.lr * grad / n)
        self.steps += 1
        return {"weight_norm": float(self.weights.norm())}

    def state_dict(self) -> dict[str, Any]:
        return {"weights": self.weights.clone(), "rng": self.rng.bit_generator.state,
                "steps": self.steps}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.weights = state["weights"].clone()
        self.rng.bit_generator.state = state["rng"]
        self.steps = int(state["steps"])


# -- check "contract_version", "config", "declares", "spaces" ------------------------------
class WrongContractVersion(Tidy):
    contract_version = 99


class NoGamma(Tidy):
    @dataclass
    class Config:
        num_envs: int = 1
        lr: float = 0.01
        explore_prob: float = 0.5
        noise: float = 0.5


class DeclaresNothing(Tidy):
    action_spaces = ()


class SupportsUnlisted(Tidy):
    """Lists Discrete only, yet says it supports anything."""

    action_spaces = (spaces.Discrete,)

    @classmethod
    def supports(cls, action_space):
        return True


class BrokenInit(Tidy):
    def __init__(self, *args):
        raise RuntimeError("deliberately broken constructor")


# -- check "actions" ---------------------------------------------------------------------
class OutOfSpace(Tidy):
    """Discrete actions one past the last valid index."""

    def act(self, obs, explore):
        return super().act(obs, explore) + self.n


class WrongShape(Tidy):
    """A column ``(n, 1)`` where the runner expects ``(n,)``."""

    def act(self, obs, explore):
        return super().act(obs, explore)[:, None]


class WrongDtype(Tidy):
    """Discrete actions as floats."""

    def act(self, obs, explore):
        return super().act(obs, explore).astype(np.float64)


# -- check "determinism" (and "global_rng") -------------------------------------------------
class GlobalNumpyRNG(Tidy):
    """Explores with the legacy global numpy RNG instead of its own generator."""

    def explore_draws(self, k):
        return np.random.random(k)


class UnseededGenerator(Tidy):
    """Its own generator, but seeded from OS entropy: no global state touched."""

    def make_rng(self, seed):
        return np.random.default_rng()


class IgnoresSeed(Tidy):
    """Always seed 0: reproducible, but every seed gives the same run (a WARN)."""

    def make_rng(self, seed):
        return np.random.default_rng(0)


# -- check "global_rng" only ---------------------------------------------------------------
class TouchesTorchGlobal(Tidy):
    """Draws from torch's global RNG in observe() and discards the draw: still
    reproducible on its own, but it moves every other user's random stream."""

    def observe(self, step):
        torch.rand(1)
        return super().observe(step)


# -- check "round_trip" --------------------------------------------------------------------
class ForgetsRNG(Tidy):
    """Leaves its generator state out of state_dict, so a restored copy draws anew."""

    def state_dict(self):
        return {"weights": self.weights.clone(), "steps": self.steps}

    def load_state_dict(self, state):
        self.weights = state["weights"].clone()
        self.steps = int(state["steps"])


class NotWeightsOnly(Tidy):
    """Puts the numpy Generator object itself in state_dict (no weights_only load)."""

    def state_dict(self):
        return {"weights": self.weights.clone(), "rng": self.rng, "steps": self.steps}

    def load_state_dict(self, state):
        self.weights = state["weights"].clone()
        self.rng = state["rng"]
        self.steps = int(state["steps"])


class ForgetsExplorationRNG(Tidy):
    """epsilon-greedy from a generator of its own that state_dict leaves out, with epsilon
    decaying linearly to 0 over the first 150 env steps (a short decay, as DQN-style agents
    have): past that it draws nothing, so a round trip taken only late never sees the gap."""

    DECAY_STEPS = 150

    def __init__(self, *args):
        super().__init__(*args)
        self.explore_rng = np.random.default_rng(self.seed + 1)

    def act(self, obs, explore):
        greedy = super().act(obs, False)
        epsilon = max(0.0, 1.0 - self.steps / self.DECAY_STEPS)
        if not explore or not self.discrete or epsilon == 0.0:
            return greedy
        uniform = self.explore_rng.integers(self.n, size=len(obs))
        return np.where(self.explore_rng.random(len(obs)) < epsilon, uniform, greedy)


class ForgetsEpisodeStatistic(Tidy):
    """Sums the return of the episode in progress outside state_dict; at each episode end it
    folds that sum into a saved running mean of episode returns, which sets how often it
    explores. Restored in the middle of an episode, the copy's sum starts again from 0."""

    def __init__(self, *args):
        super().__init__(*args)
        self.episode_return = np.zeros(self.config.num_envs)  # not saved: the break
        self.mean_return = 0.0
        self.episodes = 0

    def explore_draws(self, k):
        # explores less once its episodes average more than 20 (CartPole-v1 pays 1 a step)
        return self.rng.random(k) + (0.3 if self.mean_return > 20.0 else 0.0)

    def observe(self, step):
        self.episode_return += step.rewards
        for i in np.flatnonzero(step.terminated | step.truncated):
            self.episodes += 1
            self.mean_return += (self.episode_return[i] - self.mean_return) / self.episodes
            self.episode_return[i] = 0.0
        return super().observe(step)

    def state_dict(self):
        return {**super().state_dict(), "mean_return": float(self.mean_return),
                "episodes": self.episodes}

    def load_state_dict(self, state):
        super().load_state_dict(state)
        self.mean_return = float(state["mean_return"])
        self.episodes = int(state["episodes"])


# -- in-place writes into the runner's arrays (every check that calls the agent) -------------
class CentersObsInPlace(Tidy):
    """Centres the observations act() is given in place (which, before act's arrays were
    read-only, also changed the Step.obs it later learned from)."""

    def act(self, obs, explore):
        obs -= obs.mean(axis=1, keepdims=True)
        return super().act(obs, explore)


class ZeroesFinalObs(Tidy):
    """Blanks the final observation of finished episodes in the Step itself."""

    def observe(self, step):
        step.next_obs[step.terminated | step.truncated] = 0
        return super().observe(step)


# -- check "learn_loop" --------------------------------------------------------------------
class NaNMetric(Tidy):
    def observe(self, step):
        metrics = super().observe(step)
        if self.steps >= 30:
            metrics["loss"] = float("nan")
        return metrics


class NaNState(Tidy):
    """Finite metrics, but a NaN creeps into a tensor it saves."""

    def state_dict(self):
        state = super().state_dict()
        state["baseline"] = torch.tensor(float("nan") if self.steps >= 30 else 0.0)
        return state


class LeaksNumpy(Tidy):
    """Keeps 10 kB of numpy data per step outside its state (1 MB per 100 steps)."""

    def __init__(self, *args):
        super().__init__(*args)
        self.history: list[np.ndarray] = []

    def observe(self, step):
        self.history.append(np.full(LEAK_FLOATS, float(self.steps)))
        return super().observe(step)


class LeaksTorch(Tidy):
    """The same leak in torch tensors, which tracemalloc does not see (only RSS does)."""

    def __init__(self, *args):
        super().__init__(*args)
        self.history: list[torch.Tensor] = []

    def observe(self, step):
        self.history.append(torch.full((LEAK_FLOATS,), float(self.steps), dtype=torch.float64))
        return super().observe(step)


# -- check "refuses" -----------------------------------------------------------------------
class NoRefusal(Tidy):
    """Lists Discrete only, but builds for any space and acts with integers in it (a WARN)."""

    action_spaces = (spaces.Discrete,)

    def refuse(self, action_space):
        pass

    def __init__(self, observation_space, action_space, config, seed):
        # dodges the base class's own refusal by building for a stand-in space
        stand_in = spaces.Discrete(2) if isinstance(action_space, spaces.Box) else action_space
        super().__init__(observation_space, stand_in, config, seed)
        self.action_space = action_space
        if isinstance(action_space, spaces.Box):  # treat it as two discrete choices anyway
            self.discrete, self.n = True, 2
            w = self.rng.normal(0.0, 0.1, (self.obs_dim, 2)).astype(np.float32)
            self.weights = torch.from_numpy(w)
