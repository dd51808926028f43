"""The ceiling of packing several seeds of DQN into one process: measured, not guessed.

Part 1, today: one seed of the runner's DQN on CartPole-v1 (hidden [64, 64], batch 64, one
update per env step, one torch thread), its per-step cost broken down -- env step, act,
replay add + sample, update (targets, forward, Huber loss, backward; numpy), optimiser
(gradient clipping + Adam), bookkeeping (the rest of the agent's observe: counters, target
copy, metrics) -- timed part by part on the agent's own objects, after the replay warm-up.

Part 2, packed: the same update for K = 1, 4, 8, 16 seeds at once, each seed with its own
weights, batch and Adam state, stacked on a leading axis: (a) numpy batched matmul with the
hand-written backward pass and a numpy Adam; (b) torch autograd over stacked weights
(``torch.baddbmm``) with torch's Adam on the stacked tensors. Per-seed gradient clipping in
both. Prints the per-seed cost of one update, and what a packed env step would cost per
seed (env step and replay per seed stay; act and update are packed).

Run: ``python benchmarks/packing_ceiling.py [--steps 3000] [--updates 300]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from seedsweep.envs.build import make_train_envs  # noqa: E402
from seedsweep.runner.execution.config import compose  # noqa: E402
from seedsweep.runner.execution.loop import env_step  # noqa: E402
from seedsweep.runner.execution.prepare import prepare  # noqa: E402

SIZES = (4, 64, 64, 2)  # CartPole-v1: 4 observations, 2 actions
BATCH = 64
GAMMA = 0.99
CLIP = 10.0
LR = 5e-4


def todays_breakdown(steps: int) -> dict[str, float]:
    """Microseconds per env step of each part of one seed's DQN step, as the runner runs it."""
    p = prepare(compose(["agent=dqn", "env=cartpole", "agent.update_period_steps=1",
                         "agent.batch_size=64", "agent.hidden=[64,64]", "agent.double_q=false",
                         "agent.replay_warmup_steps=1000"]))
    torch.set_num_threads(1)
    envs = make_train_envs(p.env, 1, p.vector_mode)
    agent = p.agent_cls(envs.single_observation_space, envs.single_action_space, p.agent_config,
                        p.seeds.agent)
    obs = envs.reset(seed=p.seeds.train_env)
    n = 0
    while n < 1200:  # past the warm-up: every step updates
        step, obs, _ = env_step(envs, obs, agent.act(obs, True), n)
        n = step.env_steps
        agent.observe(step)
    t = dict.fromkeys(("env step", "act", "replay add + sample", "update (numpy)",
                       "optimiser", "bookkeeping"), 0.0)
    clock = time.perf_counter
    total = clock()
    for _ in range(steps):
        a = clock()
        actions = agent.act(obs, True)
        b = clock()
        step, nxt, _ = env_step(envs, obs, actions, n)
        c = clock()
        t["act"] += b - a
        t["env step"] += c - b
        n = step.env_steps
        parts = _observe_timed(agent, step)
        for k, v in parts.items():
            t[k] += v
        obs = nxt
    total = clock() - total
    t["bookkeeping"] = total - sum(t.values())  # observe's counters, target copy, metrics
    envs.close()
    return {k: 1e6 * v / steps for k, v in t.items()}


def _observe_timed(agent, step) -> dict[str, float]:
    """The agent's observe and update (update_period_steps 1), step by step with clocks."""
    clock = time.perf_counter
    c = agent.config
    a = clock()
    nb = len(step.rewards)
    agent.buffer.add(step.obs.reshape(nb, -1), step.actions, step.rewards,
                     step.next_obs.reshape(nb, -1), step.terminated)
    b = agent.buffer.sample(c.batch_size, agent.rng)
    s = clock()
    next_value = agent.target_numpy(b["next_obs"]).max(axis=1)
    target = b["rewards"] + np.float32(c.gamma) * (1.0 - b["terminated"]) * next_value
    q, inputs = agent.q_numpy.forward_train(b["obs"])
    rows = np.arange(len(target))
    error = q[rows, b["actions"]] - target
    grad_q = np.zeros_like(q)
    grad_q[rows, b["actions"]] = np.clip(error, -1.0, 1.0) / len(error)
    agent.q_numpy.backward(inputs, grad_q, agent._grads)
    u = clock()
    agent.flat.clip_grad_norm_(c.grad_clip_norm)
    agent.opt.step()
    o = clock()
    agent.env_steps = step.env_steps
    agent.updates += 1
    if agent.env_steps - agent._last_target_copy >= c.target_period_steps:
        agent.target.load_state_dict(agent.q.state_dict())
        agent._last_target_copy = agent.env_steps
    return {"replay add + sample": s - a, "update (numpy)": u - s, "optimiser": o - u}


# -- packed: K seeds in one computation -------------------------------------------------------
def _init(k: int, rng: np.random.Generator) -> list[tuple[np.ndarray, np.ndarray]]:
    layers = []
    for fan_in, fan_out in zip(SIZES[:-1], SIZES[1:], strict=True):
        bound = 1.0 / np.sqrt(fan_in)
        layers.append((rng.uniform(-bound, bound, (k, fan_in, fan_out)).astype(np.float32),
                       rng.uniform(-bound, bound, (k, 1, fan_out)).astype(np.float32)))
    return layers


def _batch(k: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    return {"obs": rng.normal(size=(k, BATCH, SIZES[0])).astype(np.float32),
            "next_obs": rng.normal(size=(k, BATCH, SIZES[0])).astype(np.float32),
            "actions": rng.integers(0, SIZES[-1], size=(k, BATCH)),
            "rewards": np.ones((k, BATCH), np.float32),
            "terminated": (rng.random((k, BATCH)) < 0.05).astype(np.float32)}


class NumpyPacked:
    """K seeds' DQN update in numpy: batched matmul forward/backward, per-seed clip, Adam."""

    def __init__(self, k: int, rng: np.random.Generator):
        self.k = k
        self.w = _init(k, rng)
        self.target = [(w.copy(), b.copy()) for w, b in self.w]
        self.m = [(np.zeros_like(w), np.zeros_like(b)) for w, b in self.w]
        self.v = [(np.zeros_like(w), np.zeros_like(b)) for w, b in self.w]
        self.t = 0

    @staticmethod
    def forward(layers, x, keep=False):
        inputs = []
        h = x
        for i, (w, b) in enumerate(layers):
            inputs.append(h)
            h = np.matmul(h, w) + b
            if i < len(layers) - 1:
                np.maximum(h, 0.0, out=h)
        return (h, inputs) if keep else h

    def update(self, bt: dict[str, np.ndarray]) -> None:
        k = self.k
        next_value = self.forward(self.target, bt["next_obs"]).max(axis=2)
        target = bt["rewards"] + np.float32(GAMMA) * (1.0 - bt["terminated"]) * next_value
        q, inputs = self.forward(self.w, bt["obs"], keep=True)
        ki, ri = np.arange(k)[:, None], np.arange(BATCH)[None, :]
        error = q[ki, ri, bt["actions"]] - target
        g = np.zeros_like(q)
        g[ki, ri, bt["actions"]] = np.clip(error, -1.0, 1.0) / BATCH
        grads = []
        for i in range(len(self.w) - 1, -1, -1):
            w, _ = self.w[i]
            grads.append((np.matmul(inputs[i].transpose(0, 2, 1), g), g.sum(axis=1, keepdims=True)))
            if i:
                g = np.matmul(g, w.transpose(0, 2, 1)) * (inputs[i] > 0)
        grads.reverse()
        sq = sum((dw * dw).sum(axis=(1, 2)) + (db * db).sum(axis=(1, 2)) for dw, db in grads)
        scale = np.minimum(1.0, CLIP / (np.sqrt(sq) + 1e-6)).astype(np.float32)[:, None, None]
        self.t += 1
        c1, c2 = 1 - 0.9 ** self.t, 1 - 0.999 ** self.t
        for (w, b), (dw, db), (mw, mb), (vw, vb) in zip(self.w, grads, self.m, self.v,
                                                       strict=True):
            for p, d, m, v in ((w, dw * scale, mw, vw), (b, db * scale, mb, vb)):
                m *= 0.9
                m += 0.1 * d
                v *= 0.999
                v += 0.001 * d * d
                p -= LR * (m / c1) / (np.sqrt(v / c2) + 1e-8)


class TorchPacked:
    """K seeds' DQN update with torch autograd over stacked weights and torch's Adam."""

    def __init__(self, k: int, rng: np.random.Generator):
        self.k = k
        self.w = [(torch.from_numpy(w).requires_grad_(), torch.from_numpy(b).requires_grad_())
                  for w, b in _init(k, rng)]
        self.target = [(w.detach().clone(), b.detach().clone()) for w, b in self.w]
        self.params = [p for pair in self.w for p in pair]
        try:
            self.opt = torch.optim.Adam(self.params, lr=LR, fused=True)
        except (RuntimeError, TypeError):
            self.opt = torch.optim.Adam(self.params, lr=LR, foreach=True)

    @staticmethod
    def forward(layers, x):
        h = x
        for i, (w, b) in enumerate(layers):
            h = torch.baddbmm(b, h, w)
            if i < len(layers) - 1:
                h = torch.relu(h)
        return h

    def update(self, bt: dict[str, torch.Tensor]) -> None:
        with torch.no_grad():
            next_value = self.forward(self.target, bt["next_obs"]).amax(dim=2)
            target = bt["rewards"] + GAMMA * (1.0 - bt["terminated"]) * next_value
        q = self.forward(self.w, bt["obs"]).gather(2, bt["actions"][..., None])[..., 0]
        # mean over each seed's batch, summed over seeds: each seed's gradient is its own
        loss = torch.nn.functional.smooth_l1_loss(q, target, reduction="none").mean(1).sum()
        self.opt.zero_grad(set_to_none=False)
        loss.backward()
        with torch.no_grad():
            sq = sum(p.grad.pow(2).sum(dim=(1, 2)) for p in self.params)
            scale = (CLIP / (sq.sqrt() + 1e-6)).clamp_(max=1.0)[:, None, None]
            for p in self.params:
                p.grad.mul_(scale)
        self.opt.step()


def per_seed_update_us(kind: str, k: int, updates: int, seed: int = 0) -> float:
    rng = np.random.default_rng(seed)
    packed = NumpyPacked(k, rng) if kind == "numpy" else TorchPacked(k, rng)
    batches = [_batch(k, rng) for _ in range(8)]
    if kind == "torch":
        batches = [{n: torch.from_numpy(a) for n, a in b.items()} for b in batches]
    for i in range(20):  # warm-up
        packed.update(batches[i % 8])
    start = time.perf_counter()
    for i in range(updates):
        packed.update(batches[i % 8])
    return 1e6 * (time.perf_counter() - start) / updates / k


def per_seed_act_us(k: int, calls: int, seed: int = 0) -> float:
    """ε-greedy actions of K seeds' networks for one observation each, in one numpy call."""
    rng = np.random.default_rng(seed)
    layers = _init(k, rng)
    obs = rng.normal(size=(k, 1, SIZES[0])).astype(np.float32)
    start = time.perf_counter()
    for _ in range(calls):
        greedy = NumpyPacked.forward(layers, obs)[:, 0].argmax(axis=1)
        explore = rng.random(k) < 0.05
        np.where(explore, rng.integers(SIZES[-1], size=k), greedy)
    return 1e6 * (time.perf_counter() - start) / calls / k


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=3000)
    ap.add_argument("--updates", type=int, default=300)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    torch.set_num_threads(1)
    runs = [todays_breakdown(args.steps) for _ in range(args.repeats)]
    today = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    total = sum(today.values())
    print(f"today, one seed per process (DQN CartPole-v1, medians of {args.repeats} x "
          f"{args.steps} steps), us per env step:")
    for k, v in today.items():
        print(f"  {k:<22}{v:8.1f}  {100 * v / total:5.1f}%")
    print(f"  {'total':<22}{total:8.1f}  -> {1e6 / total:,.0f} env steps/s")
    per_seed_fixed = today["env step"] + today["replay add + sample"] + today["bookkeeping"]
    update_today = today["update (numpy)"] + today["optimiser"]
    print()
    print("packed update, us per seed (one update of each of K seeds; medians of "
          f"{args.repeats} x {args.updates} updates):")
    print(f"  {'K':>3} {'numpy':>9} {'torch':>9} {'today':>9} | packed act (numpy) and projected"
          " env step per seed (best of the two updates)")
    for k in (1, 4, 8, 16):
        npy = statistics.median(per_seed_update_us("numpy", k, args.updates, s)
                                for s in range(args.repeats))
        trc = statistics.median(per_seed_update_us("torch", k, args.updates, s)
                                for s in range(args.repeats))
        act = statistics.median(per_seed_act_us(k, 20 * args.updates, s)
                                for s in range(args.repeats))
        step = per_seed_fixed + act + min(npy, trc)
        print(f"  {k:>3} {npy:9.1f} {trc:9.1f} {update_today:9.1f} | act {act:5.1f}, step "
              f"{step:7.1f} ({total / step:.2f}x today's step)")
    print("(env steps, replay sampling and bookkeeping stay per seed; the projection adds them"
          " to the measured packed act and update)")


if __name__ == "__main__":
    main()
