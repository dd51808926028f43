"""DQN: Mnih et al. 2015, "Human-level control through deep reinforcement learning".

Replay buffer, target network (hard copies every ``target_period_steps`` env steps, or
Polyak averaging), linear ε-greedy, Huber loss, Adam, gradient-norm clipping; Double DQN
targets (van Hasselt et al. 2016) with ``double_q: true``. With ``bootstrap_steps`` n > 1 the
targets are n-step returns (Sutton 1988; in DQN as in Hessel et al. 2018): n rewards summed
with discounting, then the target network's value of the state n steps on, times gamma^n;
fewer steps where the episode ended sooner. With ``lr_decay_steps`` set, the
learning rate falls linearly from ``lr`` to ``lr_end`` over that many env steps. Only the
terminated flag stops bootstrapping: a time-limit truncation still bootstraps from the final
observation.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step, require
from seedsweep.agents.common.networks import NumpyMLP, flat_dim, mlp, mlp_bytes
from seedsweep.agents.common.optim import FlatParameters
from seedsweep.agents.common.replay import MultiStepFolder, ReplayBuffer
from seedsweep.agents.common.rng import generator_states, load_generator_states, make_generators
from seedsweep.agents.common.schedules import LinearSchedule


class DQN(Agent):
    action_spaces = (spaces.Discrete,)

    @dataclass
    class Config:
        gamma: float = 0.99
        lr: float = 5e-4
        lr_end: float = 0.0
        lr_decay_steps: int | None = None
        batch_size: int = 64
        replay_capacity: int = 50_000
        replay_warmup_steps: int = 1_000
        update_period_steps: int = 1
        target_period_steps: int = 500
        target_blend: float | None = None
        hidden: list[int] = field(default_factory=lambda: [64, 64])
        epsilon_start: float = 1.0
        epsilon_end: float = 0.05
        epsilon_decay_steps: int = 10_000
        double_q: bool = True
        grad_clip_norm: float | None = 10.0
        bootstrap_steps: int = 1
        num_envs: int = 1

        def __post_init__(self):
            require("lr", self.lr, self.lr > 0, "> 0")
            require("lr_end", self.lr_end, 0 <= self.lr_end <= self.lr, "in [0, lr]")
            require("lr_decay_steps", self.lr_decay_steps,
                    self.lr_decay_steps is None or self.lr_decay_steps >= 1, "null or >= 1")
            require("batch_size", self.batch_size, self.batch_size >= 1, ">= 1")
            require("replay_capacity", self.replay_capacity, self.replay_capacity >= 1, ">= 1")
            require("replay_warmup_steps", self.replay_warmup_steps,
                    self.replay_warmup_steps >= 0, ">= 0")
            require("update_period_steps", self.update_period_steps,
                    self.update_period_steps >= 1, ">= 1")
            require("target_period_steps", self.target_period_steps,
                    self.target_period_steps >= 1, ">= 1")
            require("target_blend", self.target_blend,
                    self.target_blend is None or 0 < self.target_blend <= 1, "null or in (0, 1]")
            require("hidden", self.hidden, len(self.hidden) > 0 and min(self.hidden) >= 1,
                    "a non-empty list of positive layer widths")
            for name in ("epsilon_start", "epsilon_end"):
                v = getattr(self, name)
                require(name, v, 0 <= v <= 1, "in [0, 1]")
            require("epsilon_decay_steps", self.epsilon_decay_steps,
                    self.epsilon_decay_steps >= 0, ">= 0")
            require("grad_clip_norm", self.grad_clip_norm,
                    self.grad_clip_norm is None or self.grad_clip_norm > 0, "null or > 0")
            require("bootstrap_steps", self.bootstrap_steps, self.bootstrap_steps >= 1, ">= 1")
            require("num_envs", self.num_envs, self.num_envs >= 1, ">= 1")

    def __init__(self, observation_space, action_space, config: Config, seed: int):
        super().__init__(observation_space, action_space, config, seed)
        c = config
        self.rng, self.gen = make_generators(seed)
        self.n_actions = int(action_space.n)
        self.obs_dim = flat_dim(observation_space)
        self.q = mlp(self.obs_dim, c.hidden, self.n_actions, self.gen)
        self.target = mlp(self.obs_dim, c.hidden, self.n_actions, self.gen)
        self.target.load_state_dict(self.q.state_dict())
        self.target.requires_grad_(False)
        self.flat = FlatParameters(self.q)
        self.q_numpy = NumpyMLP(self.q)
        self.target_numpy = NumpyMLP(self.target)
        self.opt = self.flat.adam(c.lr)
        self._grads = self.q_numpy.grad_views(self.q)  # views into self.flat.grad
        multi_step = c.bootstrap_steps > 1
        self.buffer = ReplayBuffer(c.replay_capacity, (self.obs_dim,), discounts=multi_step)
        self.folder = (MultiStepFolder(c.bootstrap_steps, c.gamma, c.num_envs, self.obs_dim)
                       if multi_step else None)
        self.epsilon = LinearSchedule(c.epsilon_start, c.epsilon_end, c.epsilon_decay_steps)
        self.lr_schedule = (None if c.lr_decay_steps is None
                            else LinearSchedule(c.lr, c.lr_end, c.lr_decay_steps))
        self.env_steps = 0
        self.updates = 0
        self._train_credit = 0
        self._last_target_copy = 0

    @classmethod
    def memory_bytes(cls, config: Config, observation_space, action_space) -> dict[str, int]:
        obs_dim = flat_dim(observation_space)
        n = int(action_space.n)
        # q and target networks, flat parameters, gradients and Adam's two moments
        return {"replay_capacity": ReplayBuffer.nbytes(config.replay_capacity, (obs_dim,),
                                                       discounts=config.bootstrap_steps > 1),
                "hidden": mlp_bytes(obs_dim, config.hidden, n, copies=6)}

    # -- acting --------------------------------------------------------------------------
    def act(self, obs: np.ndarray, explore: bool) -> np.ndarray:
        x = obs.reshape(len(obs), -1)
        greedy = self.q_numpy(x).argmax(axis=1)
        if not explore:
            return greedy
        eps = self.epsilon(self.env_steps)
        if len(x) == 1:
            if self.rng.random() < eps:
                greedy[0] = self.rng.integers(self.n_actions)
            return greedy
        explore_mask = self.rng.random(len(x)) < eps
        return np.where(explore_mask, self.rng.integers(self.n_actions, size=len(x)), greedy)

    # -- learning ------------------------------------------------------------------------
    def observe(self, step: Step) -> dict[str, float]:
        n = len(step.rewards)
        if self.folder is None:
            self.buffer.add(step.obs.reshape(n, -1), step.actions, step.rewards,
                            step.next_obs.reshape(n, -1), step.terminated)
        else:
            self.buffer.add(*self.folder.push(step.obs.reshape(n, -1), step.actions,
                                              step.rewards, step.next_obs.reshape(n, -1),
                                              step.terminated, step.truncated))
        self.env_steps = step.env_steps
        c = self.config
        if self.env_steps < c.replay_warmup_steps or len(self.buffer) == 0:
            return {}
        self._train_credit += n
        metrics: dict[str, float] = {}
        while self._train_credit >= c.update_period_steps:
            self._train_credit -= c.update_period_steps
            metrics["loss"] = self._update()
        due = self.env_steps - self._last_target_copy >= c.target_period_steps
        if c.target_blend is None and due:
            self.target.load_state_dict(self.q.state_dict())
            self._last_target_copy = self.env_steps
        if metrics:
            metrics["epsilon"] = self.epsilon(self.env_steps)
            if self.lr_schedule is not None:
                metrics["lr"] = self.opt.param_groups[0]["lr"]
        return metrics

    def _update(self) -> float:
        c = self.config
        b = self.buffer.sample(c.batch_size, self.rng)
        # Bootstrap targets need no gradient: computed in numpy on views of the weights.
        next_target = self.target_numpy(b["next_obs"])
        if c.double_q:
            best = self.q_numpy(b["next_obs"]).argmax(axis=1)
        else:
            best = next_target.argmax(axis=1)
        next_value = next_target[np.arange(len(best)), best]
        discount = b["discounts"] if self.folder is not None else np.float32(c.gamma)
        target = b["rewards"] + discount * (1.0 - b["terminated"]) * next_value
        # Huber loss (smooth L1, beta 1, mean over the batch) and its gradient, back-propagated
        # by hand through the MLP into the flat gradient; then torch's fused Adam.
        q, inputs = self.q_numpy.forward_train(b["obs"])
        rows = np.arange(len(best))
        error = q[rows, b["actions"]] - target
        abs_error = np.abs(error)
        loss = float(np.mean(np.where(abs_error < 1.0, 0.5 * error * error, abs_error - 0.5)))
        grad_q = np.zeros_like(q)
        grad_q[rows, b["actions"]] = np.clip(error, -1.0, 1.0) / len(error)
        self.q_numpy.backward(inputs, grad_q, self._grads)
        self.flat.clip_grad_norm_(c.grad_clip_norm)
        if self.lr_schedule is not None:
            self.opt.param_groups[0]["lr"] = self.lr_schedule(self.env_steps)
        self.opt.step()
        self.updates += 1
        if c.target_blend is not None:
            with torch.no_grad():
                torch._foreach_lerp_(list(self.target.parameters()), list(self.q.parameters()),
                                     c.target_blend)
        return loss

    # -- state ---------------------------------------------------------------------------
    def state_dict(self) -> dict[str, Any]:
        state = {
            "q": self.q.state_dict(),
            "target": self.target.state_dict(),
            "optimizer": self.opt.state_dict(),
            "buffer": self.buffer.state_dict(),
            "rng": generator_states(self.rng, self.gen),
            "counters": {
                "env_steps": self.env_steps,
                "updates": self.updates,
                "train_credit": self._train_credit,
                "last_target_copy": self._last_target_copy,
            },
        }
        if self.folder is not None:
            state["pending"] = self.folder.state_dict()
        return state

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.q.load_state_dict(state["q"])
        self.target.load_state_dict(state["target"])
        self.opt.load_state_dict(state["optimizer"])
        self.buffer.load_state_dict(state["buffer"])
        if self.folder is not None:
            self.folder.load_state_dict(state["pending"])
        load_generator_states(state["rng"], self.rng, self.gen)
        k = state["counters"]
        self.env_steps = int(k["env_steps"])
        self.updates = int(k["updates"])
        self._train_credit = int(k["train_credit"])
        self._last_target_copy = int(k["last_target_copy"])
