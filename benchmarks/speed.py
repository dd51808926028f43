"""Speed of the runner's training loop, side by side with yardsticks, in one process.

(a) DQN env steps/s on CartPole-v1 (update_period_steps=1, batch 64, hidden [64, 64], one thread):
    the runner's agent vs the hand-written loop in ``yardstick_dqn.py``. Target >= 2x.
(b) the runner's loop with ``agent=random`` (evaluation and logging on) vs raw gymnasium
    stepping with random actions. Target >= 0.8x.

Run on a quiet machine: ``python benchmarks/speed.py [--repeats 3]``. Prints medians.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

import gymnasium as gym

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import yardstick_dqn  # noqa: E402
from seedsweep.runner.launch.api import run  # noqa: E402


def runner_steps_per_s(overrides: list[str], steps: int) -> float:
    with tempfile.TemporaryDirectory() as tmp:
        run_dir = run([*overrides, f"steps={steps}", "sweep=bench"], results_dir=tmp)
        doc = json.loads((run_dir / "run.json").read_text())
    return steps / doc["loop_s"]  # the training loop, evaluations included; not start-up


def raw_random_steps_per_s(steps: int, seed: int = 0) -> float:
    env = gym.make("CartPole-v1")
    env.reset(seed=seed)
    env.action_space.seed(seed)
    start = time.perf_counter()
    for _ in range(steps):
        _, _, terminated, truncated, _ = env.step(env.action_space.sample())
        if terminated or truncated:
            env.reset()
    return steps / (time.perf_counter() - start)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--dqn-steps", type=int, default=20_000)
    ap.add_argument("--random-steps", type=int, default=200_000)
    args = ap.parse_args()
    dqn = ["agent=dqn", "env=cartpole", "agent.update_period_steps=1", "agent.batch_size=64",
           "agent.hidden=[64,64]", "agent.double_q=false", "agent.replay_warmup_steps=1000",
           "eval.every=10000", "eval.episodes=5", "torch_threads=1"]
    rnd = ["agent=random", "env=cartpole", "eval.every=50000", "eval.episodes=10"]
    a_run, a_yard, b_run, b_raw = [], [], [], []
    for i in range(args.repeats):
        a_yard.append(yardstick_dqn.run(args.dqn_steps, seed=i))
        a_run.append(runner_steps_per_s([*dqn, f"seed={i}"], args.dqn_steps))
        b_raw.append(raw_random_steps_per_s(args.random_steps, seed=i))
        b_run.append(runner_steps_per_s([*rnd, f"seed={i}"], args.random_steps))
        print(f"repeat {i}: dqn runner {a_run[-1]:,.0f} vs yardstick {a_yard[-1]:,.0f} | "
              f"random runner {b_run[-1]:,.0f} vs raw {b_raw[-1]:,.0f} steps/s", flush=True)
    med = statistics.median
    print(f"(a) DQN CartPole-v1: runner {med(a_run):,.0f} steps/s, yardstick {med(a_yard):,.0f}"
          f" -> {med(a_run) / med(a_yard):.2f}x (target >= 2x)")
    print(f"(b) random agent: runner {med(b_run):,.0f} steps/s, raw gymnasium {med(b_raw):,.0f}"
          f" -> {med(b_run) / med(b_raw):.2f}x (target >= 0.8x)")


if __name__ == "__main__":
    main()
