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
from typing import Any

import numpy as np
import torch
from seedsweep.agents.common.networks import flat_dim, mlp_bytes
from seedsweep.agents.common.returns import gae, nstep_returns
from seedsweep.agents.common.rollouts import RolloutAgent, RolloutConfig


class ActorCritic(RolloutAgent):
    @dataclass
    class Config(RolloutConfig):
        """The shared rollout settings (:class:`RolloutConfig`), with actor-critic's defaults."""

        def __post_init__(self) -> None:
            self.check_rollout()

    @classmethod
    def memory_bytes(cls, config, observation_space, action_space) -> dict[str, int]:
        obs_dim = flat_dim(observation_space)
        out = int(getattr(action_space, "n", 0)) or 2 * int(np.prod(action_space.shape))
        per_step = config.num_envs * (2 * obs_dim * 4 + 8 + 8 + 2 + 2 * out * 4)
        # policy and value networks, each with gradients and Adam's two moments
        return {"rollout_steps": config.rollout_steps * per_step,
                "hidden": 2 * mlp_bytes(obs_dim, config.hidden, out + 1, copies=4)}

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
