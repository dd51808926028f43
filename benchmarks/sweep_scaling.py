"""Sweep throughput with 1 worker and with 2 workers on this machine (target >= 1.8x).

The same sweep (DQN on CartPole-v1, several seeds) runs twice into fresh folders through
the real CLI; throughput = env steps of all runs / wall time of the whole sweep, process
start-up included. Run on a quiet machine: ``python benchmarks/sweep_scaling.py``.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def sweep_wall_s(workers: int, seeds: int, steps: int) -> float:
    with tempfile.TemporaryDirectory() as tmp:
        cmd = [sys.executable, "-m", "seedsweep.runner.commands.main", "run", "-m", "agent=dqn",
               "env=cartpole",
               f"seed=range({seeds})", f"steps={steps}", "eval.every=5000", "eval.episodes=5",
               f"workers={workers}", f"results_dir={tmp}", "sweep=scaling", "--no-estimate",
               "--progress=quiet"]
        start = time.perf_counter()
        subprocess.run(cmd, cwd=ROOT, check=True, capture_output=True)
        return time.perf_counter() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=6)
    ap.add_argument("--steps", type=int, default=15_000)
    args = ap.parse_args()
    total = args.seeds * args.steps
    one = sweep_wall_s(1, args.seeds, args.steps)
    print(f"1 worker : {total / one:,.0f} env steps/s ({one:.1f} s)", flush=True)
    two = sweep_wall_s(2, args.seeds, args.steps)
    print(f"2 workers: {total / two:,.0f} env steps/s ({two:.1f} s)")
    print(f"speed-up: {one / two:.2f}x (target >= 1.8x)")


if __name__ == "__main__":
    main()
