"""The evaluation's share of a run's loop time, batched vs one episode after another.

Two runs of the same config and seed (DQN on CartPole-v1 by default), A B per repeat:
``eval.batched=true`` and ``eval.batched=false``; each run records the seconds its
evaluations took (``eval_s``) beside its loop time (``loop_s``, evaluations included). The
training is the same in both (a deterministic evaluation draws no random number). Prints
medians. Run: ``python benchmarks/eval_share.py [--steps 30000] [--repeats 3]``.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from seedsweep.runner.launch.api import run  # noqa: E402


def timed(overrides: list[str]) -> tuple[float, float, int]:
    """(loop_s, eval_s, eval_steps) of one run."""
    with tempfile.TemporaryDirectory() as tmp:
        run_dir = run([*overrides, "sweep=bench"], results_dir=tmp)
        doc = json.loads((run_dir / "run.json").read_text())
    return float(doc["loop_s"]), float(doc["eval_s"]), int(doc["eval_steps"])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--agent", default="dqn")
    ap.add_argument("--env", default="cartpole")
    ap.add_argument("--steps", type=int, default=30_000)
    ap.add_argument("--every", type=int, default=3000)
    ap.add_argument("--episodes", type=int, default=10)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    base = [f"agent={args.agent}", f"env={args.env}", f"steps={args.steps}", "torch_threads=1"]
    found: dict[str, list[tuple[float, float, int]]] = {"sequential": [], "batched": []}
    for i in range(args.repeats):
        ev = [f"eval.every={args.every}", f"eval.episodes={args.episodes}", f"seed={i}"]
        found["batched"].append(timed([*base, *ev, "eval.batched=true"]))
        found["sequential"].append(timed([*base, *ev, "eval.batched=false"]))
        print(f"repeat {i}: " + ", ".join(f"{k} loop {v[-1][0]:.2f} s, evaluation {v[-1][1]:.2f} s"
                                         for k, v in found.items()), flush=True)
    med = statistics.median
    print(f"{args.agent} on {args.env}, {args.steps} steps, {args.episodes} episodes every "
          f"{args.every} steps; medians of {args.repeats}:")
    evals = {}
    for k, v in found.items():
        loop, ev = med(x[0] for x in v), med(x[1] for x in v)
        share = med(x[1] / x[0] for x in v)
        per_step = med(x[1] / max(1, x[2]) for x in v)
        evals[k] = ev
        print(f"  {k:<10}: loop {loop:.2f} s, evaluation {ev:.2f} s ({100 * share:.1f}% of the "
              f"loop; {1e6 * per_step:.1f} us per evaluation step)")
    print(f"  evaluation time sequential/batched: {evals['sequential'] / evals['batched']:.2f}x")


if __name__ == "__main__":
    main()
