"""``make demo``: a small real sweep on this machine, then where to find the results.

Three seeds of each baseline that exists on CartPole-v1 and Acrobot-v1, plus the random
reference, at budgets that finish in a few minutes on two cores; then the report, if the
report command is installed.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

from runner.cli import main as cli_main
from runner.config import group_options

SWEEP = "demo"
STEPS = {"dqn": 30_000, "reinforce": 60_000, "actor_critic": 60_000, "random": 2_000}


def main() -> int:
    agents = [a for a in ("dqn", "reinforce", "actor_critic") if a in group_options("agent")]
    status = 0
    for agent in [*agents, "random"]:
        code = cli_main(["run", "-m", f"agent={agent}", "env=cartpole,acrobot", "seed=0,1,2",
                         f"steps={STEPS[agent]}", "eval.every=5000", "eval.episodes=10",
                         f"sweep={SWEEP}", "--progress=lines"])
        status = status or code
    sweep_dir = Path("results") / SWEEP
    print(f"\nseedsweep demo: runs are in {sweep_dir.resolve()}")
    if importlib.util.find_spec("runner.report") is not None:
        code = cli_main(["report", str(sweep_dir)])
        report = sweep_dir / "report" / "report.html"
        if code == 0 and report.exists():
            print(f"seedsweep demo: report at {report.resolve()}")
        status = status or code
    return status


if __name__ == "__main__":
    sys.exit(main())
