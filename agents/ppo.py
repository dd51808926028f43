"""Proximal policy optimisation with the clipped surrogate objective, PPO (Schulman, Wolski,
Dhariwal, Radford & Klimov 2017, "Proximal Policy Optimization Algorithms").

``num_envs`` envs are stepped together for ``rollout_steps`` vector steps with the current
policy; the agent then makes ``passes_per_rollout`` passes over the ``rollout_steps ×
num_envs`` samples, each pass in ``minibatches_per_pass`` shuffled minibatches (the order
drawn from the agent's seeded generator), one Adam step per minibatch on

``loss = −mean(min(ρ·A, clip(ρ, 1 − ε, 1 + ε)·A)) + value_weight·L_V − entropy_weight·mean(H)``

with ``ρ = π(a|s) / π_old(a|s)`` and ``ε = ratio_clip`` (the paper's eq. 7 and eq. 9, with
its ``c1, c2`` as ``value_weight, entropy_weight``). ``L_V`` is the squared error of the
value against the λ-return ``R = A + V_old``; with ``value_clip`` set it is the larger of
that error and the error of the prediction held within ``±value_clip`` of ``V_old``, the
same pessimistic bound for the value (common practice, no source).

* Advantages: GAE(γ, λ) (Schulman et al. 2016) from :func:`returns.gae`; truncation
  bootstraps from ``V`` of the episode's final observation, termination does not.
* ``standardize = "advantages"`` standardises the advantages once per rollout, over all its
  samples, before the passes: every minibatch then weighs its samples on the same scale,
  and a small minibatch is not re-centred on its own noisy mean.
* ``π_old`` is the network that acted; nothing changes it during the rollout. Its
  log-probabilities are computed before the first Adam step, minibatch by minibatch in the
  first pass's order, so the first minibatch sees exactly the arithmetic of its own
  forward pass: its ratio is exactly 1.
* Gradient-norm clip: of the whole network with a shared torso, else of the policy and of
  the value network separately (as in actor_critic: a large value gradient would otherwise
  shrink the policy step).
* ``lr_decay_steps``: the learning rate of an update is ``lr·max(0, 1 − s/lr_decay_steps)``
  with ``s`` the env steps (all envs) observed before its rollout began; null keeps ``lr``.
  The agent does not know the run's budget, so this is a number of env steps.

Scalars of an update, means over its minibatch steps: policy_loss, value_loss, entropy,
approx_kl (``mean((ρ − 1) − log ρ)``, a non-negative estimate of KL(π_old‖π)), clip_fraction
(share of samples with ``ρ`` outside ``[1 − ε, 1 + ε]``), grad_norm (before clipping; of the
policy when the networks are separate, then also value_grad_norm), and the lr used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import torch
from seedsweep.agents.base import Step, require
from seedsweep.agents.common.returns import gae
from seedsweep.agents.common.rollouts import RolloutAgent, RolloutConfig


class PPO(RolloutAgent):
    @dataclass
    class Config(RolloutConfig):
        rollout_steps: int = 128
        passes_per_rollout: int = 8
        minibatches_per_pass: int = 8
        ratio_clip: float = 0.2
        value_clip: float | None = None
        lr: float = 0.003
        lr_decay_steps: int | None = None
        standardize: Literal["none", "advantages"] = "advantages"

        def __post_init__(self) -> None:
            self.check_rollout()
            require("passes_per_rollout", self.passes_per_rollout,
                    self.passes_per_rollout >= 1, ">= 1")
            samples = self.rollout_steps * max(self.num_envs, 1)
            require("minibatches_per_pass", self.minibatches_per_pass,
                    1 <= self.minibatches_per_pass <= samples,
                    f"in [1, rollout_steps × num_envs = {samples}]")
            require("ratio_clip", self.ratio_clip, 0.0 < self.ratio_clip < 1.0, "in (0, 1)")
            require("value_clip", self.value_clip,
                    self.value_clip is None or _finite_above(self.value_clip, 0.0),
                    "a finite number > 0, or null (no value clipping)")
            require("lr_decay_steps", self.lr_decay_steps,
                    self.lr_decay_steps is None or self.lr_decay_steps >= 1,
                    ">= 1 env steps, or null (constant lr)")

    def __init__(self, observation_space, action_space, config, seed):
        super().__init__(observation_space, action_space, config, seed)
        self.env_steps = 0  # observed by this agent, all envs: the lr schedule's clock

    def observe(self, step: Step) -> dict[str, float]:
        self.env_steps += self.config.num_envs
        return super().observe(step)

    def current_lr(self) -> float:
        """The learning rate of the next update (linear decay over env steps, if set)."""
        c = self.config
        if c.lr_decay_steps is None:
            return c.lr
        started = self.env_steps - self._t * c.num_envs  # when the current rollout began
        return c.lr * max(0.0, 1.0 - started / c.lr_decay_steps)

    def rollout_batch(self) -> dict[str, Any]:
        """The stored rollout (first ``t`` steps) flattened, with old values, GAE advantages
        and λ-returns (advantages not yet standardised)."""
        c = self.config
        r = self.rollout.filled()
        values, next_values = self.rollout.bootstrap_values(self.nets)
        advantages = gae(r["rewards"], values, next_values, r["terminated"], r["truncated"],
                         c.gamma, c.advantage_lambda)
        return self.rollout.flat_batch(values=values, advantages=advantages,
                                       returns=advantages + values)

    def minibatch_losses(self, batch: dict[str, Any], idx: torch.Tensor) -> dict[str, Any]:
        """Loss terms on the samples ``idx`` of a prepared batch (with ``old_log_prob``),
        plus the ratio and its diagnostics (detached)."""
        c = self.config
        log_prob, entropy, values = self._score(batch, idx)
        loss, ratio = clipped_surrogate(log_prob, batch["old_log_prob"][idx],
                                        batch["advantages"][idx], c.ratio_clip)
        v_loss = value_loss(values, batch["values"][idx], batch["returns"][idx], c.value_clip)
        with torch.no_grad():
            log_ratio = log_prob - batch["old_log_prob"][idx]
            approx_kl = (torch.expm1(log_ratio) - log_ratio).mean()
            clip_fraction = ((ratio - 1.0).abs() > c.ratio_clip).float().mean()
        return {"policy_loss": loss, "value_loss": v_loss, "entropy": entropy.mean(),
                "approx_kl": approx_kl, "clip_fraction": clip_fraction,
                "ratio": ratio.detach()}

    def _update(self) -> dict[str, float]:
        c = self.config
        lr = self.current_lr()
        batch = self.rollout_batch()
        self.rollout.t = 0
        for group in self.opt.param_groups:
            group["lr"] = lr
        adv = batch["advantages"]
        if c.standardize == "advantages" and len(adv) > 1:
            batch["advantages"] = (adv - adv.mean()) / (adv.std(unbiased=False) + 1e-8)
        size = len(adv)
        passes = [[torch.from_numpy(ix) for ix in
                   np.array_split(self.rng.permutation(size), c.minibatches_per_pass)]
                  for _ in range(c.passes_per_rollout)]
        old = torch.empty(size)
        with torch.no_grad():  # π_old, in the first pass's minibatches (see module doc)
            for idx in passes[0]:
                old[idx] = self._score(batch, idx)[0]
        batch["old_log_prob"] = old
        names = ("policy_loss", "value_loss", "entropy", "approx_kl", "clip_fraction")
        sums = dict.fromkeys((*names, "grad_norm", "value_grad_norm"), 0.0)
        steps = 0
        for minibatches in passes:
            for idx in minibatches:
                loss = self.minibatch_losses(batch, idx)
                total = (loss["policy_loss"] + c.value_weight * loss["value_loss"]
                         - c.entropy_weight * loss["entropy"])
                self.opt.zero_grad(set_to_none=True)
                total.backward()
                for key, norm in self.nets.clip_gradients(c.grad_clip_norm).items():
                    sums[key] += norm
                self.opt.step()
                for name in names:
                    sums[name] += float(loss[name].detach())
                steps += 1
        self.updates += 1
        scalars = {k: v / steps for k, v in sums.items()}
        if self.value_net is None:
            del scalars["value_grad_norm"]
        scalars["lr"] = lr
        return scalars

    def _score(self, batch: dict[str, Any], idx: torch.Tensor
               ) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
        """(log π(a|s), entropy, V(s)) of the samples ``idx`` under the current networks."""
        out, values = self.nets.forward(batch["obs"][idx])
        dist = self.head(out)
        pre = None if batch["pre"] is None else batch["pre"][idx]
        return dist.log_prob(batch["actions"][idx], pre), dist.entropy(), values

    def state_dict(self) -> dict[str, Any]:
        return {**super().state_dict(), "env_steps": self.env_steps}

    def load_state_dict(self, state: dict[str, Any]) -> None:
        super().load_state_dict(state)
        self.env_steps = int(state["env_steps"])


def clipped_surrogate(log_prob: torch.Tensor, old_log_prob: torch.Tensor,
                      advantages: torch.Tensor, ratio_clip: float
                      ) -> tuple[torch.Tensor, torch.Tensor]:
    """``(−L^CLIP, ρ)``: the negated clipped surrogate (Schulman et al. 2017, eq. 7) as a loss
    to minimise, and the probability ratios ``ρ = exp(log π − log π_old)``.

    The minimum of the clipped and unclipped terms is a pessimistic bound: the objective is
    flat, so its gradient zero, once ``ρ`` has left ``[1 − ε, 1 + ε]`` in the direction the
    advantage favours.
    """
    ratio = torch.exp(log_prob - old_log_prob)
    unclipped = ratio * advantages
    clipped = ratio.clamp(1.0 - ratio_clip, 1.0 + ratio_clip) * advantages
    return -torch.minimum(unclipped, clipped).mean(), ratio


def value_loss(values: torch.Tensor, old_values: torch.Tensor, returns: torch.Tensor,
               value_clip: float | None) -> torch.Tensor:
    """Mean squared error to ``returns``; with ``value_clip``, the larger of that error and
    the error of the prediction held within ``±value_clip`` of ``old_values``."""
    error = (values - returns).pow(2)
    if value_clip is None:
        return error.mean()
    held = old_values + (values - old_values).clamp(-value_clip, value_clip)
    return torch.maximum(error, (held - returns).pow(2)).mean()


def _finite_above(x: float, low: float) -> bool:
    return math.isfinite(x) and x > low
