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
(see :mod:`seedsweep.agents.common.returns`). ``shared_torso`` puts the policy and value outputs on one
network (one extra output unit), otherwise they are two networks of the same shape.
"""

from __future__ import annotations

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
from seedsweep.agents.common.networks import NumpyMLP, flat_dim, mlp, mlp_bytes
from seedsweep.agents.common.optim import adam, clip_grad_norm
from seedsweep.agents.common.returns import gae, nstep_returns
from seedsweep.agents.common.rng import generator_states, load_generator_states, make_generators


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
            require("advantage_lambda", self.advantage_lambda, 0.0 <= self.advantage_lambda <= 1.0, "in [0, 1]")
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
        self.head = PolicyHead(action_space, c.gaussian_std, c.gaussian_log_std_start, c.gaussian_squash)
        k = self.head.out_dim
        if c.shared_torso:
            self.net = mlp(self.obs_dim, c.hidden, k + 1, self.gen, c.activation, c.init,
                           VALUE_OUT_GAIN)
            if c.init == "orthogonal":  # policy rows of the joint output layer: small gain
                with torch.no_grad():
                    self.net[-1].weight[:k] *= POLICY_OUT_GAIN / VALUE_OUT_GAIN
            self.value_net = None
            self._np_policy = NumpyMLP(self.net)
        else:
            self.net = mlp(self.obs_dim, c.hidden, k, self.gen, c.activation, c.init,
                           POLICY_OUT_GAIN)
            self.value_net = mlp(self.obs_dim, c.hidden, 1, self.gen, c.activation, c.init,
                                 VALUE_OUT_GAIN)
            self._np_policy = NumpyMLP(self.net)
        self.policy_params = [*self.net.parameters(), *self.head.parameters()]
        self.params = list(self.policy_params)
        if self.value_net is not None:
            self.params += list(self.value_net.parameters())
        self.opt = adam(self.params, c.lr, c.adam_eps)
        self.sampler = ActionSampler(self.head, self.gen)
        self._alloc_rollout()
        self.updates = 0

    # -- acting -----------------------------------------------------------------------------
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        out = self._np_policy(np.asarray(obs, dtype=np.float32).reshape(len(obs), -1))
        return self.sampler.act(out[:, : self.head.out_dim], explore)

    # -- learning ---------------------------------------------------------------------------
    def observe(self, step: Step) -> dict[str, float]:
        t, n = self._t, self.config.num_envs
        if len(step.rewards) != n:
            raise ValueError(f"expected {n} envs per step (num_envs), got {len(step.rewards)}")
        r = self._rollout
        r["obs"][t] = np.asarray(step.obs, dtype=np.float32).reshape(n, -1)
        r["actions"][t] = _as_actions(step.actions, self.head, n)
        if self.sampler.needs_pre_squash:
            r["pre"][t] = self.sampler.pre_squash_for(r["actions"][t])
        r["rewards"][t] = step.rewards
        r["terminated"][t] = step.terminated
        r["truncated"][t] = step.truncated
        r["next_obs"][t] = np.asarray(step.next_obs, dtype=np.float32).reshape(n, -1)
        self._t += 1
        if self._t == self.config.rollout_steps:
            return self._update()
        return {}

    def rollout_batch(self) -> dict[str, Any]:
        """The stored rollout (first ``t`` steps) flattened, with advantages and returns."""
        c, T = self.config, self._t
        if T == 0:
            raise ValueError("the rollout is empty; observe at least one step first")
        r = {k: v[:T] for k, v in self._rollout.items()}
        n = c.num_envs
        with torch.no_grad():
            values = self._values(torch.from_numpy(r["obs"].reshape(T * n, -1)))
            values = values.double().numpy().reshape(T, n)
            next_values = np.zeros_like(values)
            next_values[:-1] = values[1:]
            need = r["truncated"].copy()
            need[-1] = True
            if need.any():
                x = torch.from_numpy(r["next_obs"][need])
                next_values[need] = self._values(x).double().numpy()
        if c.advantage_lambda == 1.0:
            returns = nstep_returns(r["rewards"], next_values, r["terminated"], r["truncated"],
                                    c.gamma)
            advantages = returns - values
        else:
            advantages = gae(r["rewards"], values, next_values, r["terminated"],
                             r["truncated"], c.gamma, c.advantage_lambda)
            returns = advantages + values
        flat = T * n
        batch = {
            "obs": torch.from_numpy(r["obs"].reshape(flat, -1)),
            "actions": torch.from_numpy(r["actions"].reshape(flat, *r["actions"].shape[2:])),
            "pre": torch.from_numpy(r["pre"].reshape(flat, -1)) if "pre" in r else None,
            "advantages": torch.from_numpy(advantages.reshape(flat).astype(np.float32)),
            "returns": torch.from_numpy(returns.reshape(flat).astype(np.float32)),
        }
        return batch

    def losses(self, batch: dict[str, Any]) -> dict[str, torch.Tensor]:
        """The three loss terms on a rollout batch (before weighting by the coefficients)."""
        out, values = self._forward(batch["obs"])
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
        self._t = 0
        total = (loss["policy_loss"] + c.value_weight * loss["value_loss"]
                 - c.entropy_weight * loss["entropy"])
        self.opt.zero_grad(set_to_none=True)
        total.backward()
        scalars = {k: float(v.detach()) for k, v in loss.items()}
        if self.value_net is None:  # one network: one gradient, clipped as a whole
            scalars["grad_norm"] = clip_grad_norm(self.params, c.grad_clip_norm)
        else:  # two networks: the value gradient must not shrink the policy's
            scalars["grad_norm"] = clip_grad_norm(self.policy_params, c.grad_clip_norm)
            scalars["value_grad_norm"] = clip_grad_norm(self.value_net.parameters(),
                                                        c.grad_clip_norm)
        self.opt.step()
        self.updates += 1
        return scalars

    def _forward(self, obs: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """(policy outputs, values) of a batch of flat observations."""
        k = self.head.out_dim
        if self.value_net is None:
            y = self.net(obs)
            return y[:, :k], y[:, k]
        return self.net(obs), self.value_net(obs).squeeze(-1)

    def _values(self, obs: torch.Tensor) -> torch.Tensor:
        if self.value_net is None:
            return self.net(obs)[:, self.head.out_dim]
        return self.value_net(obs).squeeze(-1)

    def _alloc_rollout(self) -> None:
        c = self.config
        shape = (c.rollout_steps, c.num_envs)
        action_shape = () if self.head.discrete else (self.head.action_dim,)
        action_dtype = np.int64 if self.head.discrete else np.float32
        self._rollout: dict[str, np.ndarray] = {
            "obs": np.zeros((*shape, self.obs_dim), dtype=np.float32),
            "actions": np.zeros((*shape, *action_shape), dtype=action_dtype),
            "rewards": np.zeros(shape, dtype=np.float64),
            "terminated": np.zeros(shape, dtype=bool),
            "truncated": np.zeros(shape, dtype=bool),
            "next_obs": np.zeros((*shape, self.obs_dim), dtype=np.float32),
        }
        if self.sampler.needs_pre_squash:
            self._rollout["pre"] = np.zeros((*shape, self.head.action_dim), dtype=np.float32)
        self._t = 0

    # -- state ------------------------------------------------------------------------------
    def state_dict(self) -> dict[str, Any]:
        t = self._t
        return {
            "net": self.net.state_dict(),
            "value_net": None if self.value_net is None else self.value_net.state_dict(),
            "head": self.head.state_dict(),
            "opt": self.opt.state_dict(),
            "rng": generator_states(self.rng, self.gen),
            "sampler": self.sampler.state_dict(),
            "rollout_t": t,
            "rollout": {k: torch.from_numpy(v[:t].copy()) for k, v in self._rollout.items()},
            "updates": self.updates,
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.net.load_state_dict(state["net"])
        if self.value_net is not None:
            self.value_net.load_state_dict(state["value_net"])
        self.head.load_state_dict(state["head"])
        self.opt.load_state_dict(state["opt"])
        load_generator_states(state["rng"], self.rng, self.gen)
        self.sampler.load_state_dict(state["sampler"])
        t = int(state["rollout_t"])
        for k, v in state["rollout"].items():
            self._rollout[k][:t] = v.numpy()
        self._t = t
        self.updates = int(state["updates"])


def _as_actions(actions: np.ndarray, head: PolicyHead, n: int) -> np.ndarray:
    """Env actions in the dtype and shape the head scores: int64 ``(n,)``, float32 ``(n, d)``."""
    if head.discrete:
        return np.asarray(actions).astype(np.int64).reshape(n)
    return np.asarray(actions, dtype=np.float32).reshape(n, head.action_dim)
