"""Expected SARSA with a linear action-value function over tile-coded features.

An in-house agent kept outside the seedsweep package, loaded by path
(``agent.entry: examples/tile_sarsa/agent.py:TileSarsa``). One file on purpose: a path
entry is loaded as a lone module, so it cannot import its own siblings.

Method: expected SARSA (van Seijen et al. 2009, "A theoretical and empirical analysis of
Expected Sarsa"; Sutton & Barto 2nd ed. §6.6, eq. 6.9) with semi-gradient linear function
approximation (Sutton & Barto §10.1) on tile-coded features (Sutton & Barto §9.5.4). The
behaviour and target policies are the same ε-greedy policy, so the method is on-policy:
``δ = r + γ Σ_a π(a|s') q(s', a) − q(s, a)`` and every active weight of ``(s, a)`` moves by
``(α / num_tilings) δ``. Episodes that terminate do not bootstrap (the terminal value is 0);
episodes cut by a time limit bootstrap from the final observation, which the runner passes
as ``next_obs``.

Not included: eligibility traces, hashing, tilings over subsets of dimensions.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step, require
from seedsweep.agents.common.schedules import LinearSchedule


class TileCoder:
    """Grid tilings over a box, each offset from the last by a fraction of a tile.

    ``tiles`` tiles of width ``w = (high − low) / tiles`` span each dimension; every tiling
    has ``tiles + 1`` cells per dimension so its offset grid still covers the box. Tiling
    ``t`` is displaced by ``t·(1, 3, 5, …)·w / num_tilings`` (mod ``w``): the asymmetric
    displacement vector Sutton & Barto §9.5.4 recommend (after Miller & Glanz 1996), which
    avoids the diagonal artefacts of equal offsets in every dimension. An observation
    activates exactly one cell per tiling: ``num_tilings`` active features out of
    ``num_tilings · (tiles + 1)^d``. Points outside the box are clipped onto its edge.
    """

    def __init__(self, low: np.ndarray, high: np.ndarray, tiles: int, num_tilings: int):
        self.low = np.asarray(low, dtype=np.float64).reshape(-1)
        self.high = np.asarray(high, dtype=np.float64).reshape(-1)
        if self.low.shape != self.high.shape or not np.all(self.high > self.low):
            raise ValueError(f"tile coder needs low < high in every dimension, got "
                             f"low={self.low} high={self.high}")
        if tiles < 1 or num_tilings < 1:
            raise ValueError(f"tiles and num_tilings must be >= 1, got {tiles}, {num_tilings}")
        dims = len(self.low)
        self.tiles = int(tiles)
        self.num_tilings = int(num_tilings)
        self.width = (self.high - self.low) / self.tiles
        cells = self.tiles + 1
        self.features_per_tiling = cells**dims
        self.num_features = self.num_tilings * self.features_per_tiling
        odd = 2 * np.arange(dims) + 1  # displacement vector (1, 3, 5, ...)
        tiling = np.arange(self.num_tilings)
        # offsets in units of one tile width, in [0, 1)
        self.offsets = (np.outer(tiling, odd) % self.num_tilings) / self.num_tilings
        self.strides = cells ** np.arange(dims - 1, -1, -1)  # row-major cell index
        self.tiling_base = tiling * self.features_per_tiling

    def active(self, x: np.ndarray) -> np.ndarray:
        """Indices of the active features, shape ``(batch, num_tilings)``, one per tiling."""
        x = np.asarray(x, dtype=np.float64).reshape(len(x), -1)
        scaled = (np.clip(x, self.low, self.high) - self.low) / self.width  # in [0, tiles]
        cells = np.floor(scaled[:, None, :] + self.offsets[None, :, :]).astype(np.int64)
        np.clip(cells, 0, self.tiles, out=cells)  # guards rounding at the upper edge
        return cells @ self.strides + self.tiling_base


def epsilon_greedy_probs(q: np.ndarray, epsilon: float) -> np.ndarray:
    """ε-greedy action probabilities for each row of ``q`` (Sutton & Barto §5.4).

    ``π(a|s) = ε/|A| + (1 − ε)·[a ∈ argmax]/|argmax|``: ties among the greedy actions
    share the greedy mass, matching :meth:`TileSarsa.act`, which breaks ties at random.
    """
    q = np.atleast_2d(q)
    greedy = q == q.max(axis=1, keepdims=True)
    probs = greedy * ((1.0 - epsilon) / greedy.sum(axis=1, keepdims=True))
    return probs + epsilon / q.shape[1]


def expected_sarsa_targets(rewards: np.ndarray, next_q: np.ndarray, terminated: np.ndarray,
                           gamma: float, epsilon: float) -> np.ndarray:
    """``r + γ (1 − terminated) Σ_a π(a|s') q(s', a)`` under the ε-greedy policy (eq. 6.9)."""
    expected = (epsilon_greedy_probs(next_q, epsilon) * next_q).sum(axis=1)
    live = 1.0 - np.asarray(terminated, dtype=np.float64)
    return np.asarray(rewards, dtype=np.float64) + gamma * live * expected


def tile_bounds(space: spaces.Box, unbounded_range: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """The box to tile: the observation bounds, with infinite ones replaced.

    A bound counts as infinite when it is not finite or has float32-max magnitude (some
    envs write ``np.finfo(np.float32).max`` for "no bound"); it becomes the matching end of
    ``unbounded_range``.
    """
    big = np.finfo(np.float32).max
    low = np.asarray(space.low, dtype=np.float64).reshape(-1)
    high = np.asarray(space.high, dtype=np.float64).reshape(-1)
    low = np.where(np.isfinite(low) & (np.abs(low) < big), low, unbounded_range[0])
    high = np.where(np.isfinite(high) & (np.abs(high) < big), high, unbounded_range[1])
    return low, high


class TileSarsa(Agent):
    """Expected SARSA, linear in tile-coded features, ε-greedy; discrete actions only."""

    action_spaces = (spaces.Discrete,)

    @dataclass
    class Config:
        gamma: float = 0.99
        num_envs: int = 1
        alpha: float = 0.5  # step size per update, split over the tilings (α / num_tilings)
        num_tilings: int = 8  # S&B §9.5.4 suggest a power of two >= 4·obs_dim (from memory)
        tiles: int = 8  # tiles per dimension across the tiled range
        max_features: int = 262_144  # per action; see fit_tilings for high-dim observations
        unbounded_range: list[float] = field(default_factory=lambda: [-3.0, 3.0])
        epsilon_start: float = 0.1
        epsilon_end: float = 0.1
        epsilon_decay_steps: int = 0
        init_value: float = 0.0  # initial q for every (s, a); > max return is optimistic

        def __post_init__(self) -> None:
            require("gamma", self.gamma, 0.0 < self.gamma <= 1.0, "in (0, 1]")
            require("num_envs", self.num_envs, self.num_envs >= 1, ">= 1")
            require("alpha", self.alpha, 0.0 < self.alpha <= 1.0, "in (0, 1]")
            require("num_tilings", self.num_tilings, self.num_tilings >= 1, ">= 1")
            require("tiles", self.tiles, self.tiles >= 1, ">= 1")
            require("max_features", self.max_features, self.max_features >= 2, ">= 2")
            r = self.unbounded_range
            require("unbounded_range", r, len(r) == 2 and r[0] < r[1],
                    "a list [low, high] with low < high")
            for name in ("epsilon_start", "epsilon_end"):
                value = getattr(self, name)
                require(name, value, 0.0 <= value <= 1.0, "in [0, 1]")
            require("epsilon_decay_steps", self.epsilon_decay_steps,
                    self.epsilon_decay_steps >= 0, ">= 0")

    def __init__(self, observation_space, action_space, config: Config, seed: int):
        super().__init__(observation_space, action_space, config, seed)
        if not isinstance(action_space, spaces.Discrete):
            raise ValueError(f"tile_sarsa needs a Discrete action space, got {action_space}")
        if not isinstance(observation_space, spaces.Box):
            raise ValueError(f"tile_sarsa tiles Box observations; got {observation_space} "
                             "(add the one_hot wrapper for Discrete observations)")
        c = config
        low, high = tile_bounds(observation_space, c.unbounded_range)
        self.coder = TileCoder(low, high, *fit_tilings(c, len(low)))
        self.n_actions = int(action_space.n)
        self.action_start = int(action_space.start)
        self.weights = np.full((self.n_actions, self.coder.num_features),
                               c.init_value / self.coder.num_tilings)
        self.step_size = c.alpha / self.coder.num_tilings
        self.epsilon = LinearSchedule(c.epsilon_start, c.epsilon_end, c.epsilon_decay_steps)
        self.rng = np.random.default_rng(seed)
        self.env_steps = 0

    def q_values(self, active: np.ndarray) -> np.ndarray:
        """``q(s, ·)`` for a batch of active-feature rows: the sum of the active weights."""
        return self.weights[:, active].sum(axis=2).T  # (batch, n_actions)

    # -- acting --------------------------------------------------------------------------
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        q = self.q_values(self.coder.active(obs))
        if not explore:
            return q.argmax(axis=1) + self.action_start
        probs = epsilon_greedy_probs(q, self.epsilon(self.env_steps))
        draws = self.rng.random(len(q))
        actions = (probs.cumsum(axis=1) < draws[:, None]).sum(axis=1)
        return np.minimum(actions, self.n_actions - 1) + self.action_start

    # -- learning ------------------------------------------------------------------------
    def observe(self, step: Step) -> dict[str, float]:
        eps = self.epsilon(self.env_steps)  # the policy that chose these actions
        active = self.coder.active(step.obs)
        next_active = self.coder.active(step.next_obs)
        actions = np.asarray(step.actions, dtype=np.int64).reshape(-1) - self.action_start
        td = np.empty(len(actions))
        for i, a in enumerate(actions):  # one env at a time: later rows see earlier updates
            row = slice(i, i + 1)
            target = expected_sarsa_targets(step.rewards[row], self.q_values(next_active[row]),
                                            step.terminated[row], self.gamma, eps)[0]
            td[i] = target - self.weights[a, active[i]].sum()
            self.weights[a, active[i]] += self.step_size * td[i]
        self.env_steps = step.env_steps
        return {"td_error": float(np.abs(td).mean()), "epsilon": eps}

    # -- state ---------------------------------------------------------------------------
    def state_dict(self) -> dict[str, Any]:
        return {"weights": torch.from_numpy(self.weights.copy()),
                "rng": self.rng.bit_generator.state, "env_steps": self.env_steps,
                "tiles": self.coder.tiles, "num_tilings": self.coder.num_tilings}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        saved = (int(state["tiles"]), int(state["num_tilings"]), tuple(state["weights"].shape))
        mine = (self.coder.tiles, self.coder.num_tilings, self.weights.shape)
        if saved != mine:
            raise ValueError(f"checkpoint (tiles, num_tilings, weight shape) {saved} does not "
                             f"match this config's {mine}")
        self.weights[...] = state["weights"].numpy()
        self.rng.bit_generator.state = state["rng"]
        self.env_steps = int(state["env_steps"])


def fit_tilings(config: TileSarsa.Config, dims: int) -> tuple[int, int]:
    """``(tiles, num_tilings)`` from the config, shrunk until the feature count fits.

    ``tiles`` is lowered first (down to 1), then ``num_tilings`` halved (down to 1), until
    ``num_tilings·(tiles + 1)^dims <= max_features``. One config then serves a 2-D
    MountainCar (8 tiles, 8 tilings), a 6-D Acrobot (4 tiles) and a 16-D one-hot FrozenLake
    (1 tile, 4 tilings: each tiling is then the one-hot code itself, a tabular learner).
    """
    tiles, tilings = config.tiles, config.num_tilings

    def count() -> int:
        return tilings * (tiles + 1) ** dims

    while tiles > 1 and count() > config.max_features:
        tiles -= 1
    while tilings > 1 and count() > config.max_features:
        tilings //= 2
    if count() > config.max_features:
        raise ValueError(f"agent.max_features: {config.max_features} is too few for a "
                         f"{dims}-D observation (one tiling of one tile per dimension needs "
                         f"2^{dims} = {count()}); raise it or use another agent")
    return tiles, tilings
