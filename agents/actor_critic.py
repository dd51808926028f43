"""Synchronous advantage actor-critic, A2C (the synchronous variant of A3C, Mnih et al. 2016).

``num_envs`` envs are stepped together; every ``rollout_steps`` vector steps the agent takes one
gradient step on the whole ``rollout_steps × num_envs`` rollout with
``loss = −mean(A_t log π(a_t|s_t)) + value_weight·mean((V(s_t) − R_t)²) − entropy_weight·mean(H)``
and clips the gradient norm: of the whole network with a shared torso, else of the policy and
the value network separately (a large value gradient would otherwise shrink the policy step).

How the advantage is chosen — by ``advantage_lambda`` alone:

* ``advantage_lambda = 1``: n-step returns as in A3C. ``R_t`` sums the rewards to the end
  of the rollout (or of the episode) and bootstraps with ``V`` there; ``A_t = R_t − V(s_t)``.
* ``advantage_lambda < 1`` (default 0.95): GAE(γ, λ) (Schulman et al. 2016);
  ``R_t = A_t + V(s_t)`` (the λ-return). λ=0 is the one-step TD error; λ=1 through GAE
  gives the same numbers as the n-step path.

Truncation bootstraps from ``V`` of the episode's final observation; termination does not
(see :mod:`seedsweep.agents.common.returns`). ``shared_torso`` puts the policy and value
outputs on one network (one extra output unit), otherwise they are two networks of the same
shape (:mod:`seedsweep.agents.common.rollouts`, shared with PPO).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step, require
from seedsweep.agents.common.distributions import (
    ActionSampler,
    PolicyHead,
    PolicyNetworkConfig,
    policy_supports,
)
from seedsweep.agents.common.networks import NumpyMLP, flat_dim, mlp_bytes
from seedsweep.agents.common.optim import adam
from seedsweep.agents.common.returns import gae, nstep_returns
from seedsweep.agents.common.rng import generator_states, load_generator_states, make_generators
from seedsweep.agents.common.rollouts import PolicyValueNets, Rollout


class ActorCritic(Agent):
    action_spaces = (spaces.Discrete, spaces.Box)

    @classmethod
    def supports(cls, action_space: spaces.Space) -> bool:
        return policy_supports(action_space)

    @dataclass
    class Config(PolicyNetworkConfig):
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

        def __post_init__(self) -> None:
            require("gamma", self.gamma, 0.0 < self.gamma <= 1.0, "in (0, 1]")
            require("num_envs", self.num_envs, self.num_envs >= 1, ">= 1")
            require("rollout_steps", self.rollout_steps, self.rollout_steps >= 1, ">= 1")
            require("advantage_lambda", self.advantage_lambda,
                    0.0 <= self.advantage_lambda <= 1.0, "in [0, 1]")
            require("lr", self.lr, self.lr > 0, "> 0")
            require("adam_eps", self.adam_eps, self.adam_eps > 0, "> 0")
            require("value_weight", self.value_weight, self.value_weight >= 0, ">= 0")
            require("entropy_weight", self.entropy_weight, self.entropy_weight >= 0, ">= 0")
            self.check_network()

    @classmethod
    def memory_bytes(cls, config, observation_space, action_space) -> dict[str, int]:
        obs_dim = flat_dim(observation_space)
        out = int(getattr(action_space, "n", 0)) or 2 * int(np.prod(action_space.shape))
        per_step = config.num_envs * (2 * obs_dim * 4 + 8 + 8 + 2 + 2 * out * 4)
        # policy and value networks, each with gradients and Adam's two moments
        return {"rollout_steps": config.rollout_steps * per_step,
                "hidden": 2 * mlp_bytes(obs_dim, config.hidden, out + 1, copies=4)}

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

    # -- acting -----------------------------------------------------------------------------
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        out = self._np_policy(np.asarray(obs, dtype=np.float32).reshape(len(obs), -1))
        return self.sampler.act(out[:, : self.head.out_dim], explore)

    # -- learning ---------------------------------------------------------------------------
    def observe(self, step: Step) -> dict[str, float]:
        self.rollout.add(step)
        if self.rollout.full:
            return self._update()
        return {}

    def rollout_batch(self) -> dict[str, Any]:
        """The stored rollout (first ``t`` steps) flattened, with advantages and returns."""
        c = self.config
        r = self.rollout.filled()
        values, next_values = self.rollout.bootstrap_values(self.nets)
        if c.advantage_lambda == 1.0:
            returns = nstep_returns(r["rewards"], next_values, r["terminated"], r["truncated"],
                                    c.gamma)
            advantages = returns - values
        else:
            advantages = gae(r["rewards"], values, next_values, r["terminated"],
                             r["truncated"], c.gamma, c.advantage_lambda)
            returns = advantages + values
        return self.rollout.flat_batch(advantages=advantages, returns=returns)

    def losses(self, batch: dict[str, Any]) -> dict[str, torch.Tensor]:
        """The three loss terms on a rollout batch (before weighting by the coefficients)."""
        out, values = self.nets.forward(batch["obs"])
        dist = self.head(out)
        log_prob = dist.log_prob(batch["actions"], batch["pre"])
        adv = batch["advantages"]
        if self.config.standardize == "advantages" and len(adv) > 1:
            adv = (adv - adv.mean()) / (adv.std(unbiased=False) + 1e-8)
        return {
            "policy_loss": -(adv * log_prob).mean(),
            "value_loss": (values - batch["returns"]).pow(2).mean(),
            "entropy": dist.entropy().mean(),
        }

    def _update(self) -> dict[str, float]:
        c = self.config
        loss = self.losses(self.rollout_batch())
        self.rollout.t = 0
        total = (loss["policy_loss"] + c.value_weight * loss["value_loss"]
                 - c.entropy_weight * loss["entropy"])
        self.opt.zero_grad(set_to_none=True)
        total.backward()
        scalars = {k: float(v.detach()) for k, v in loss.items()}
        scalars.update(self.nets.clip_gradients(c.grad_clip_norm))
        self.opt.step()
        self.updates += 1
        return scalars

    # -- state ------------------------------------------------------------------------------
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
