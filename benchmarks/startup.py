"""Per-run start-up of a local sweep: process wall time minus the run's own loop time.

A sweep of short runs (CartPole-v1; the random agent unless ``--agent``) goes through the
real local launcher, once with each start method, A B A B: ``spawn`` (a fresh interpreter
per run, what seedsweep did before) and ``forkserver`` (runs forked from a server that
imported everything once). For each run the launcher measures the time from starting its
process to seeing it end; minus the run's ``loop_s`` (its training loop, evaluations
included) that is what the run paid to start and to finish (imports, building envs and
agent, writing records). Prints medians.

Run: ``python benchmarks/startup.py [--runs 8] [--repeats 2] [--workers 1]``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from seedsweep.runner.execution import logs  # noqa: E402
from seedsweep.runner.launch.plan import plan  # noqa: E402
from seedsweep.runner.launch.sweep import SweepOptions  # noqa: E402
from seedsweep.runner.launch.workers import run_local  # noqa: E402


def overheads(method: str, runs: int, steps: int, workers: int, agent: str) -> list[float]:
    """(process wall time − loop time) of each run of one sweep, in seconds."""
    with tempfile.TemporaryDirectory() as tmp:
        planned = plan([f"agent={agent}", "env=cartpole", f"seed=range({runs})", f"steps={steps}",
                        f"eval.every={steps}", "eval.episodes=2", f"results_dir={tmp}",
                        "sweep=startup"], multirun=True)
        outcome = run_local(planned, workers, SweepOptions(progress="quiet"), start_method=method)
        if outcome.complete != runs:
            raise SystemExit(f"{method}: only {outcome.complete} of {runs} runs complete")
        return [took - float(loop) for took, loop in outcome.process_s.values()]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=8)
    ap.add_argument("--steps", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--methods", default="spawn,forkserver")
    ap.add_argument("--agent", default="random")
    args = ap.parse_args()
    logs.setup()
    methods = args.methods.split(",")
    found: dict[str, list[float]] = {m: [] for m in methods}
    for i in range(args.repeats):
        for m in methods:
            x = overheads(m, args.runs, args.steps, args.workers, args.agent)
            found[m].extend(x)
            print(f"repeat {i} {m:<10}: median {statistics.median(x):.3f} s per run "
                  f"(min {min(x):.3f}, max {max(x):.3f})", flush=True)
    for m, x in found.items():
        print(f"{m:<10}: median start-up per run {statistics.median(x):.3f} s over {len(x)} runs"
              f" (process wall time - loop time; {args.workers} worker(s))")
    if len(methods) == 2:
        a, b = (statistics.median(found[m]) for m in methods)
        print(f"ratio {methods[0]}/{methods[1]}: {a / b:.1f}x")


if __name__ == "__main__":
    main()
