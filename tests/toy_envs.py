"""Small gymnasium envs for tests, with returns known in closed form."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
from gymnasium import spaces


class ConstantReward(gym.Env):
    """Reward ``reward`` on every step; terminates after ``horizon`` steps.

    Its return is r·T undiscounted and r(1 − γ^T)/(1 − γ) discounted (geometric series).
    """

    metadata = {"render_modes": []}

    def __init__(self, reward: float = 1.0, horizon: int = 10):
        self.observation_space = spaces.Box(-1.0, 1.0, (2,), np.float32)
        self.action_space = spaces.Discrete(2)
        self.reward = reward
        self.horizon = horizon
        self.t = 0

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.t = 0
        return self._obs(), {}

    def _obs(self):
        return np.array([self.t / self.horizon, self.np_random.uniform(-1, 1)], np.float32)

    def step(self, action):
        self.t += 1
        return self._obs(), float(self.reward), self.t >= self.horizon, False, {}


class OutOfSpace(ConstantReward):
    """Returns observations outside its observation space: gymnasium's checker must object."""

    def _obs(self):
        return np.array([5.0, 5.0], np.float32)


class MultiDiscreteActions(ConstantReward):
    """Actions from MultiDiscrete([2, 3]): neither a categorical nor a Gaussian policy fits."""

    def __init__(self, reward: float = 1.0, horizon: int = 10):
        super().__init__(reward, horizon)
        self.action_space = spaces.MultiDiscrete([2, 3])


class SeedLength(ConstantReward):
    """Episode length set by the reset seed, ``seed % 7 + 1``; reward 1 + action per step.

    Its return under a policy that always plays action a is (1 + a)·(seed % 7 + 1).
    """

    def reset(self, *, seed=None, options=None):
        obs, info = super().reset(seed=seed, options=options)
        self.horizon = int(seed) % 7 + 1
        return obs, info

    def step(self, action):
        self.t += 1
        return self._obs(), 1.0 + float(action), self.t >= self.horizon, False, {}
