"""What the rollout-based policy-gradient agents (actor-critic, PPO) share: their common
settings, the policy and value networks (two networks, or one with both outputs) and a
preallocated rollout store.

Written once so the two agents cannot drift apart in how they build, score, clip, store,
bootstrap and checkpoint.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step, require
from seedsweep.agents.common.distributions import (
    POLICY_OUT_GAIN,
    VALUE_OUT_GAIN,
    ActionSampler,
    PolicyHead,
    PolicyNetworkConfig,
    policy_supports,
)
from seedsweep.agents.common.networks import NumpyMLP, flat_dim, mlp
from seedsweep.agents.common.optim import adam, clip_grad_norm
from seedsweep.agents.common.rng import generator_states, load_generator_states, make_generators
from torch import nn


def as_actions(actions: np.ndarray, head: PolicyHead, n: int) -> np.ndarray:
    """Env actions in the dtype and shape the head scores: int64 ``(n,)``, float32 ``(n, d)``."""
    if head.discrete:
        return np.asarray(actions).astype(np.int64).reshape(n)
    return np.asarray(actions, dtype=np.float32).reshape(n, head.action_dim)


@dataclass
class RolloutConfig(PolicyNetworkConfig):
    """Settings of every agent that learns from fixed-length rollouts of vector envs with a
    value baseline; an agent's Config inherits them (redeclaring a field changes only its
    default) and calls :meth:`check_rollout` from its ``__post_init__``."""

    gamma: float = 0.99
    num_envs: int = 8
    vector_mode: Literal["sync", "async"] = "sync"
    rollout_steps: int = 16
    advantage_lambda: float = 0.95
    lr: float = 0.002
    adam_eps: float = 1e-5
    value_weight: float = 0.5
    entropy_weight: float = 0.0
    grad_clip_norm: float | None = 0.5
    standardize: Literal["none", "advantages"] = "none"
    shared_torso: bool = False

    def check_rollout(self) -> None:
        require("gamma", self.gamma, 0.0 < self.gamma <= 1.0, "in (0, 1]")
        require("num_envs", self.num_envs, self.num_envs >= 1, ">= 1")
        require("rollout_steps", self.rollout_steps, self.rollout_steps >= 1, ">= 1")
        require("advantage_lambda", self.advantage_lambda,
                0.0 <= self.advantage_lambda <= 1.0, "in [0, 1]")
        require("lr", self.lr, _finite_above(self.lr, 0.0), "a finite number > 0")
        require("adam_eps", self.adam_eps, _finite_above(self.adam_eps, 0.0),
                "a finite number > 0")
        require("value_weight", self.value_weight,
                math.isfinite(self.value_weight) and self.value_weight >= 0,
                "a finite number >= 0")
        require("entropy_weight", self.entropy_weight,
                math.isfinite(self.entropy_weight) and self.entropy_weight >= 0,
                "a finite number >= 0")
        require("gaussian_log_std_start", self.gaussian_log_std_start,
                math.isfinite(self.gaussian_log_std_start), "a finite number")
        self.check_network()


def _finite_above(x: float, low: float) -> bool:
    return math.isfinite(x) and x > low


class PolicyValueNets:
    """A policy network and a value network, or (``shared_torso``) one network whose last
    layer has the policy outputs then one value output. ``config`` is a
    :class:`~seedsweep.agents.common.distributions.PolicyNetworkConfig` with ``shared_torso``."""

    def __init__(self, obs_dim: int, head: PolicyHead, config: Any,
                 generator: torch.Generator):
        c = config
        k = head.out_dim
        self.head = head
        if c.shared_torso:
            self.net = mlp(obs_dim, c.hidden, k + 1, generator, c.activation, c.init,
                           VALUE_OUT_GAIN)
            if c.init == "orthogonal":  # policy rows of the joint output layer: small gain
                with torch.no_grad():
                    self.net[-1].weight[:k] *= POLICY_OUT_GAIN / VALUE_OUT_GAIN
            self.value_net: nn.Sequential | None = None
        else:
            self.net = mlp(obs_dim, c.hidden, k, generator, c.activation, c.init,
                           POLICY_OUT_GAIN)
            self.value_net = mlp(obs_dim, c.hidden, 1, generator, c.activation, c.init,
                                 VALUE_OUT_GAIN)
        self.policy_params = [*self.net.parameters(), *head.parameters()]
        self.params = list(self.policy_params)
        if self.value_net is not None:
            self.params += list(self.value_net.parameters())

    def forward(self, obs: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """(policy outputs, values) of a batch of flat observations."""
        k = self.head.out_dim
        if self.value_net is None:
            y = self.net(obs)
            return y[:, :k], y[:, k]
        return self.net(obs), self.value_net(obs).squeeze(-1)

    def values(self, obs: torch.Tensor) -> torch.Tensor:
        if self.value_net is None:
            return self.net(obs)[:, self.head.out_dim]
        return self.value_net(obs).squeeze(-1)

    def clip_gradients(self, max_norm: float | None) -> dict[str, float]:
        """Clip the gradient norm: of the whole net with a shared torso, else of the policy
        and of the value network separately (a large value gradient would otherwise shrink
        the policy step). Returns the norms before clipping."""
        if self.value_net is None:
            return {"grad_norm": clip_grad_norm(self.params, max_norm)}
        return {"grad_norm": clip_grad_norm(self.policy_params, max_norm),
                "value_grad_norm": clip_grad_norm(self.value_net.parameters(), max_norm)}

    def state_dict(self) -> dict[str, Any]:
        return {"net": self.net.state_dict(),
                "value_net": None if self.value_net is None else self.value_net.state_dict(),
                "head": self.head.state_dict()}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.net.load_state_dict(state["net"])
        if self.value_net is not None:
            self.value_net.load_state_dict(state["value_net"])
        self.head.load_state_dict(state["head"])


class Rollout:
    """``steps × num_envs`` transitions, preallocated; ``t`` steps are filled."""

    def __init__(self, steps: int, num_envs: int, obs_dim: int, head: PolicyHead,
                 sampler: ActionSampler):
        self.steps, self.num_envs, self.head, self.sampler = steps, num_envs, head, sampler
        shape = (steps, num_envs)
        action_shape = () if head.discrete else (head.action_dim,)
        self.arrays: dict[str, np.ndarray] = {
            "obs": np.zeros((*shape, obs_dim), dtype=np.float32),
            "actions": np.zeros((*shape, *action_shape),
                                dtype=np.int64 if head.discrete else np.float32),
            "rewards": np.zeros(shape, dtype=np.float64),
            "terminated": np.zeros(shape, dtype=bool),
            "truncated": np.zeros(shape, dtype=bool),
            "next_obs": np.zeros((*shape, obs_dim), dtype=np.float32),
        }
        if sampler.needs_pre_squash:
            self.arrays["pre"] = np.zeros((*shape, head.action_dim), dtype=np.float32)
        self.t = 0

    @property
    def full(self) -> bool:
        return self.t == self.steps

    def add(self, step: Step) -> None:
        """Copy one vectorised step in (the runner's arrays are never kept)."""
        n = self.num_envs
        if len(step.rewards) != n:
            raise ValueError(f"expected {n} envs per step (num_envs), got {len(step.rewards)}")
        r, t = self.arrays, self.t
        r["obs"][t] = np.asarray(step.obs, dtype=np.float32).reshape(n, -1)
        r["actions"][t] = as_actions(step.actions, self.head, n)
        if self.sampler.needs_pre_squash:
            r["pre"][t] = self.sampler.pre_squash_for(r["actions"][t])
        r["rewards"][t] = step.rewards
        r["terminated"][t] = step.terminated
        r["truncated"][t] = step.truncated
        r["next_obs"][t] = np.asarray(step.next_obs, dtype=np.float32).reshape(n, -1)
        self.t += 1

    def filled(self) -> dict[str, np.ndarray]:
        """The first ``t`` steps of every array; ValueError when empty."""
        if self.t == 0:
            raise ValueError("the rollout is empty; observe at least one step first")
        return {k: v[: self.t] for k, v in self.arrays.items()}

    def bootstrap_values(self, nets: PolicyValueNets) -> tuple[np.ndarray, np.ndarray]:
        """(V(s_t), V of each step's successor) as float64 ``(t, num_envs)``: the successor of
        a step is the next step's observation, except where a time limit cut the episode
        (its final observation) and at the rollout's end (the next observation)."""
        r, T, n = self.filled(), self.t, self.num_envs
        with torch.no_grad():
            values = nets.values(torch.from_numpy(r["obs"].reshape(T * n, -1)))
            values = values.double().numpy().reshape(T, n)
            next_values = np.zeros_like(values)
            next_values[:-1] = values[1:]
            need = r["truncated"].copy()
            need[-1] = True
            if need.any():
                next_values[need] = nets.values(
                    torch.from_numpy(r["next_obs"][need])).double().numpy()
        return values, next_values

    def flat_batch(self, **extra: np.ndarray) -> dict[str, Any]:
        """Observations, actions (and tanh pre-squash samples) of the filled steps flattened
        to ``t × num_envs`` tensors, with ``extra`` (t, num_envs) arrays as float32 tensors."""
        r = self.filled()
        flat = self.t * self.num_envs
        batch = {
            "obs": torch.from_numpy(r["obs"].reshape(flat, -1)),
            "actions": torch.from_numpy(r["actions"].reshape(flat, *r["actions"].shape[2:])),
            "pre": torch.from_numpy(r["pre"].reshape(flat, -1)) if "pre" in r else None,
        }
        for key, value in extra.items():
            batch[key] = torch.from_numpy(value.reshape(flat).astype(np.float32))
        return batch

    def state_dict(self) -> dict[str, Any]:
        t = self.t
        return {"rollout_t": t,
                "rollout": {k: torch.from_numpy(v[:t].copy()) for k, v in self.arrays.items()}}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        t = int(state["rollout_t"])
        for k, v in state["rollout"].items():
            self.arrays[k][:t] = v.numpy()
        self.t = t


class RolloutAgent(Agent):
    """The acting, storing and checkpointing half of a rollout agent: it builds the networks,
    one Adam optimiser, the sampler and the rollout store from a :class:`RolloutConfig`,
    acts, stores each step and calls :meth:`_update` when the rollout is full. A subclass
    writes only its update (and adds its own state to ``state_dict``)."""

    action_spaces = (spaces.Discrete, spaces.Box)

    @classmethod
    def supports(cls, action_space: spaces.Space) -> bool:
        return policy_supports(action_space)

    def __init__(self, observation_space, action_space, config, seed):
        super().__init__(observation_space, action_space, config, seed)
        c = config
        self.obs_dim = flat_dim(observation_space)
        self.rng, self.gen = make_generators(seed)
        self.head = PolicyHead(action_space, c.gaussian_std, c.gaussian_log_std_start,
                               c.gaussian_squash)
        self.nets = PolicyValueNets(self.obs_dim, self.head, c, self.gen)
        self.net, self.value_net = self.nets.net, self.nets.value_net
        self.policy_params, self.params = self.nets.policy_params, self.nets.params
        self._np_policy = NumpyMLP(self.net)
        self.opt = adam(self.params, c.lr, c.adam_eps)
        self.sampler = ActionSampler(self.head, self.gen)
        self.rollout = Rollout(c.rollout_steps, c.num_envs, self.obs_dim, self.head,
                               self.sampler)
        self.updates = 0

    @property
    def _t(self) -> int:
        return self.rollout.t

    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        out = self._np_policy(np.asarray(obs, dtype=np.float32).reshape(len(obs), -1))
        return self.sampler.act(out[:, : self.head.out_dim], explore)

    def observe(self, step: Step) -> dict[str, float]:
        self.rollout.add(step)
        if self.rollout.full:
            return self._update()
        return {}

    def _update(self) -> dict[str, float]:
        raise NotImplementedError

    def state_dict(self) -> dict[str, Any]:
        return {
            **self.nets.state_dict(),
            "opt": self.opt.state_dict(),
            "rng": generator_states(self.rng, self.gen),
            "sampler": self.sampler.state_dict(),
            **self.rollout.state_dict(),
            "updates": self.updates,
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.nets.load_state_dict(state)
        self.opt.load_state_dict(state["opt"])
        load_generator_states(state["rng"], self.rng, self.gen)
        self.sampler.load_state_dict(state["sampler"])
        self.rollout.load_state_dict(state)
        self.updates = int(state["updates"])
