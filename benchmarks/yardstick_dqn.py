"""A straightforward hand-written DQN loop: the yardstick for the runner's DQN speed.

Deliberately plain, as one would first write it: batch-1 eager torch acting, default Adam,
a deque of tuples as the replay buffer, ``random.sample`` minibatches. Same settings as the
runner's DQN in the benchmark (update_period_steps=1, batch 64, hidden [64, 64], one thread).
"""

from __future__ import annotations

import random
import time
from collections import deque

import gymnasium as gym
import numpy as np
import torch
import torch.nn.functional as F
from torch import nn


def run(steps: int, seed: int = 0, batch: int = 64, replay_warmup_steps: int = 1000) -> float:
    """Train for ``steps`` env steps; returns env steps per second."""
    torch.set_num_threads(1)
    random.seed(seed)
    torch.manual_seed(seed)
    env = gym.make("CartPole-v1")
    q = nn.Sequential(nn.Linear(4, 64), nn.ReLU(), nn.Linear(64, 64), nn.ReLU(), nn.Linear(64, 2))
    target = nn.Sequential(nn.Linear(4, 64), nn.ReLU(), nn.Linear(64, 64), nn.ReLU(),
                           nn.Linear(64, 2))
    target.load_state_dict(q.state_dict())
    opt = torch.optim.Adam(q.parameters(), lr=5e-4)
    buffer: deque = deque(maxlen=50_000)
    obs, _ = env.reset(seed=seed)
    start = time.perf_counter()
    for t in range(steps):
        eps = max(0.05, 1.0 - t / 10_000)
        if random.random() < eps:
            action = env.action_space.sample()
        else:
            with torch.no_grad():
                action = int(q(torch.as_tensor(obs, dtype=torch.float32)).argmax())
        next_obs, reward, terminated, truncated, _ = env.step(action)
        buffer.append((obs, action, reward, next_obs, terminated))
        obs = next_obs
        if terminated or truncated:
            obs, _ = env.reset()
        if t >= replay_warmup_steps:
            o, a, r, o2, d = zip(*random.sample(buffer, batch), strict=True)
            o = torch.as_tensor(np.array(o), dtype=torch.float32)
            o2 = torch.as_tensor(np.array(o2), dtype=torch.float32)
            a = torch.as_tensor(a).unsqueeze(1)
            r = torch.as_tensor(r, dtype=torch.float32)
            d = torch.as_tensor(d, dtype=torch.float32)
            with torch.no_grad():
                y = r + 0.99 * (1 - d) * target(o2).max(1).values
            loss = F.smooth_l1_loss(q(o).gather(1, a).squeeze(1), y)
            opt.zero_grad()
            loss.backward()
            nn.utils.clip_grad_norm_(q.parameters(), 10.0)
            opt.step()
        if t % 500 == 0:
            target.load_state_dict(q.state_dict())
    return steps / (time.perf_counter() - start)


if __name__ == "__main__":
    print(f"yardstick DQN: {run(10_000):,.0f} env steps/s")
