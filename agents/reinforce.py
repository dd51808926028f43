"""REINFORCE with a learned state-value baseline (Williams 1992; Sutton & Barto 2nd ed. §13.4).

Each env fills its own episode; once ``episodes_per_update`` episodes have finished (over
all envs), one policy-gradient step is taken on all of them:
``∇J ≈ mean_t (G_t − V(s_t)) ∇ log π(a_t | s_t)`` plus an optional entropy bonus, and the
baseline ``V`` is regressed on the returns ``G_t`` with its own optimiser and learning rate.

Deviations from the textbook pseudo-code, both common practice (no source): the ``γ^t``
factor of Sutton & Barto's update is dropped, and the update uses a batch of episodes and
Adam instead of one SGD step per time step.

Truncation: an episode cut by a time limit did not end, so its Monte Carlo return is
completed with ``γ^{T−t}·V(s_T)`` from the value of its final observation (``next_obs`` of
the last step); a terminated episode's return has no such tail.

With ``num_envs > 1`` an episode still running in one env when another env's episode
triggers an update keeps its earlier steps, which were sampled from the previous policy
(slightly off-policy; discarding them would bias the batch toward short episodes).
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
from seedsweep.agents.common.returns import discounted_returns
from seedsweep.agents.common.rng import generator_states, load_generator_states, make_generators
from seedsweep.agents.common.rollouts import as_actions


class Reinforce(Agent):
    action_spaces = (spaces.Discrete, spaces.Box)

    @classmethod
    def supports(cls, action_space: spaces.Space) -> bool:
        return policy_supports(action_space)

    @dataclass
    class Config(PolicyNetworkConfig):
        gamma: float = 0.99
        num_envs: int = 1
        vector_mode: Literal["sync", "async"] = "sync"
        episodes_per_update: int = 4
        policy_lr: float = 0.001
        value_lr: float = 0.001
        adam_eps: float = 1e-8
        standardize: Literal["none", "returns", "advantages"] = "advantages"
        entropy_weight: float = 0.0
        grad_clip_norm: float | None = None

        def __post_init__(self) -> None:
            require("gamma", self.gamma, 0.0 < self.gamma <= 1.0, "in (0, 1]")
            require("num_envs", self.num_envs, self.num_envs >= 1, ">= 1")
            require("episodes_per_update", self.episodes_per_update,
                    self.episodes_per_update >= 1, ">= 1")
            require("policy_lr", self.policy_lr, self.policy_lr > 0, "> 0")
            require("value_lr", self.value_lr, self.value_lr > 0, "> 0")
            require("adam_eps", self.adam_eps, self.adam_eps > 0, "> 0")
            require("entropy_weight", self.entropy_weight, self.entropy_weight >= 0, ">= 0")
            self.check_network()

    @classmethod
    def memory_bytes(cls, config, observation_space, action_space) -> dict[str, int]:
        obs_dim = flat_dim(observation_space)
        out = int(getattr(action_space, "n", 0)) or 2 * int(np.prod(action_space.shape))
        # policy and value networks, each with gradients and Adam's two moments
        return {"hidden": 2 * mlp_bytes(obs_dim, config.hidden, out + 1, copies=4)}

    def __init__(self, observation_space, action_space, config, seed):
        super().__init__(observation_space, action_space, config, seed)
        c = config
        self.obs_dim = flat_dim(observation_space)
        self.rng, self.gen = make_generators(seed)
        self.head = PolicyHead(action_space, c.gaussian_std, c.gaussian_log_std_start,
                               c.gaussian_squash)
        self.policy_net = mlp(self.obs_dim, c.hidden, self.head.out_dim, self.gen,
                              c.activation, c.init, POLICY_OUT_GAIN)
        self.value_net = mlp(self.obs_dim, c.hidden, 1, self.gen, c.activation, c.init,
                             VALUE_OUT_GAIN)
        self.policy_params = [*self.policy_net.parameters(), *self.head.parameters()]
        self.policy_opt = adam(self.policy_params, c.policy_lr, c.adam_eps)
        self.value_opt = adam(self.value_net.parameters(), c.value_lr, c.adam_eps)
        self._np_policy = NumpyMLP(self.policy_net)
        self.sampler = ActionSampler(self.head, self.gen)
        self._partial = [_empty_episode() for _ in range(c.num_envs)]
        self._completed: list[dict[str, Any]] = []
        self.updates = 0

    # -- acting -----------------------------------------------------------------------------
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        out = self._np_policy(np.asarray(obs, dtype=np.float32).reshape(len(obs), -1))
        return self.sampler.act(out, explore)

    # -- learning ---------------------------------------------------------------------------
    def observe(self, step: Step) -> dict[str, float]:
        n = len(step.rewards)
        obs = np.asarray(step.obs, dtype=np.float32).reshape(n, -1)
        actions = as_actions(step.actions, self.head, n)
        pre = self.sampler.pre_squash_for(actions)
        term = np.asarray(step.terminated, dtype=bool)
        trunc = np.asarray(step.truncated, dtype=bool)
        for i in range(n):
            ep = self._partial[i]
            ep["obs"].append(obs[i].copy())
            ep["actions"].append(np.array(actions[i]))
            if pre is not None:
                ep["pre"].append(pre[i].copy())
            ep["rewards"].append(float(step.rewards[i]))
            if term[i] or trunc[i]:
                final = np.asarray(step.next_obs[i], dtype=np.float32).reshape(-1)
                self._completed.append(_finish(ep, truncated=bool(trunc[i] and not term[i]),
                                               final_obs=final))
                self._partial[i] = _empty_episode()
        if len(self._completed) >= self.config.episodes_per_update:
            return self._update()
        return {}

    def episode_batch(self) -> dict[str, torch.Tensor]:
        """The finished episodes as flat tensors, with their (bootstrapped) returns."""
        eps = self._completed
        if not eps:
            raise ValueError("no finished episode to build a batch from yet")
        bootstrap = np.zeros(len(eps))
        cut = [i for i, e in enumerate(eps) if e["truncated"]]
        if cut:
            final = torch.from_numpy(np.stack([eps[i]["final_obs"] for i in cut]))
            with torch.no_grad():
                bootstrap[cut] = self.value_net(final).squeeze(-1).double().numpy()
        returns = [discounted_returns(e["rewards"], self.gamma, b)
                   for e, b in zip(eps, bootstrap, strict=True)]
        batch = {
            "obs": torch.from_numpy(np.concatenate([e["obs"] for e in eps])),
            "actions": torch.from_numpy(np.concatenate([e["actions"] for e in eps])),
            "returns": torch.from_numpy(np.concatenate(returns).astype(np.float32)),
            "pre": None,
        }
        if self.sampler.needs_pre_squash:
            batch["pre"] = torch.from_numpy(np.concatenate([e["pre"] for e in eps]))
        return batch

    def losses(self, batch: dict[str, torch.Tensor]) -> dict[str, torch.Tensor]:
        """Policy loss (score-function surrogate, minus entropy bonus) and baseline loss."""
        dist = self.head(self.policy_net(batch["obs"]))
        log_prob = dist.log_prob(batch["actions"], batch["pre"])
        entropy = dist.entropy().mean()
        values = self.value_net(batch["obs"]).squeeze(-1)
        returns = batch["returns"]
        if self.config.standardize == "returns":
            weights = _standardise(returns)
        else:
            weights = returns - values.detach()
            if self.config.standardize == "advantages":
                weights = _standardise(weights)
        policy_loss = -(weights * log_prob).mean() - self.config.entropy_weight * entropy
        value_loss = 0.5 * (values - returns).pow(2).mean()
        return {"policy_loss": policy_loss, "value_loss": value_loss, "entropy": entropy}

    def _update(self) -> dict[str, float]:
        batch = self.episode_batch()
        n_episodes = len(self._completed)
        self._completed = []
        loss = self.losses(batch)
        self.policy_opt.zero_grad(set_to_none=True)
        self.value_opt.zero_grad(set_to_none=True)
        (loss["policy_loss"] + loss["value_loss"]).backward()
        clip_grad_norm(self.policy_params, self.config.grad_clip_norm)
        clip_grad_norm(self.value_net.parameters(), self.config.grad_clip_norm)
        self.policy_opt.step()
        self.value_opt.step()
        self.updates += 1
        scalars = {k: float(v.detach()) for k, v in loss.items()}
        scalars["episodes_per_update"] = float(n_episodes)
        return scalars

    # -- state ------------------------------------------------------------------------------
    def state_dict(self) -> dict[str, Any]:
        return {
            "policy_net": self.policy_net.state_dict(),
            "head": self.head.state_dict(),
            "value_net": self.value_net.state_dict(),
            "policy_opt": self.policy_opt.state_dict(),
            "value_opt": self.value_opt.state_dict(),
            "rng": generator_states(self.rng, self.gen),
            "sampler": self.sampler.state_dict(),
            "partial": [_episode_to_state(e) for e in self._partial],
            "completed": [_episode_to_state(e) for e in self._completed],
            "updates": self.updates,
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.policy_net.load_state_dict(state["policy_net"])
        self.head.load_state_dict(state["head"])
        self.value_net.load_state_dict(state["value_net"])
        self.policy_opt.load_state_dict(state["policy_opt"])
        self.value_opt.load_state_dict(state["value_opt"])
        load_generator_states(state["rng"], self.rng, self.gen)
        self.sampler.load_state_dict(state["sampler"])
        self._partial = [_episode_from_state(e) for e in state["partial"]]
        self._completed = [_episode_from_state(e) for e in state["completed"]]
        self.updates = int(state["updates"])


def _standardise(x: torch.Tensor) -> torch.Tensor:
    return (x - x.mean()) / (x.std(unbiased=False) + 1e-8)


def _empty_episode() -> dict[str, Any]:
    return {"obs": [], "actions": [], "pre": [], "rewards": []}


def _finish(ep: dict[str, Any], truncated: bool, final_obs: np.ndarray) -> dict[str, Any]:
    return {
        "obs": np.stack(ep["obs"]),
        "actions": np.stack(ep["actions"]),
        "pre": np.stack(ep["pre"]) if ep["pre"] else None,
        "rewards": np.asarray(ep["rewards"], dtype=np.float64),
        "truncated": truncated,
        "final_obs": final_obs,
    }


def _episode_to_state(ep: dict[str, Any]) -> dict[str, Any]:
    """Tensors and plain python only, so a checkpoint loads with ``weights_only=True``.

    A running episode (lists of per-step rows) is stored as one stacked tensor per field
    plus its length, so an empty one round-trips too.
    """
    if isinstance(ep["obs"], list):
        n = len(ep["obs"])
        return {
            "running": True,
            "length": n,
            "obs": [torch.from_numpy(np.stack(ep["obs"]))] if n else [],
            "actions": [torch.from_numpy(np.stack(ep["actions"]))] if n else [],
            "pre": [torch.from_numpy(np.stack(ep["pre"]))] if ep["pre"] else [],
            "rewards": list(ep["rewards"]),
        }
    out = {"running": False, "truncated": ep["truncated"]}
    for key in ("obs", "actions", "pre", "rewards", "final_obs"):
        out[key] = None if ep[key] is None else torch.from_numpy(ep[key].copy())
    return out


def _episode_from_state(state: dict[str, Any]) -> dict[str, Any]:
    if state["running"]:
        ep = _empty_episode()
        for key in ("obs", "actions", "pre"):
            ep[key] = list(state[key][0].numpy().copy()) if state[key] else []
        ep["rewards"] = [float(r) for r in state["rewards"]]
        return ep
    out = {"truncated": bool(state["truncated"])}
    for key in ("obs", "actions", "pre", "rewards", "final_obs"):
        out[key] = None if state[key] is None else state[key].numpy().copy()
    return out
