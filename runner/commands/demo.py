"""``make demo``: the tool's job in a few minutes — an agent of one's own against the
baselines, on this machine, ending with the verdicts and the next step.

Runs the plan ``configs/plan/demo.yaml`` (the example in-house agent of ``examples/``,
PPO and the random floor on two envs, five seeds) with the local workers, then ``seedsweep
report`` with the example agent as the candidate, and says what to do next. Typing it again
reuses the finished runs. Run it from the repository root (the example agent's entry is a
path relative to it).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from seedsweep.runner.commands import report, run
from seedsweep.runner.execution.config import group_file, read_yaml
from seedsweep.runner.launch.display import fmt_eta

PLAN = "demo"
CANDIDATE = "tile_sarsa"
EXAMPLES = Path("examples") / "configs"


def folder() -> Path:
    doc = read_yaml(group_file("plan", PLAN), "--plan")
    return Path("results") / f"{doc['name']}-v{doc['version']}"


def main() -> int:
    if not (EXAMPLES / "agent" / f"{CANDIDATE}.yaml").is_file():
        print(f"seedsweep demo: run it from the repository root (needs {EXAMPLES})",
              file=sys.stderr)
        return 2
    sweep = folder()
    start = time.monotonic()
    status = run.main(["--plan", PLAN, "--config-dir", str(EXAMPLES), "--progress=lines"])
    print(f"\nseedsweep demo: runs are in {sweep.resolve()}")
    code = report.main([str(sweep), "--candidate", CANDIDATE])
    if code == 0:
        print(f"\nseedsweep demo: done in {fmt_eta(time.monotonic() - start)}. How many seeds "
              "per env a decisive answer needs when a difference of 0.1 (a tenth of the way "
              "from random to the reference) matters to you:\n"
              f"  seedsweep plan-seeds {sweep} --candidate {CANDIDATE} --difference 0.1 "
              "--units normalised")
    return status or code


if __name__ == "__main__":
    sys.exit(main())
