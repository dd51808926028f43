"""``make demo``: the tool's job in a few minutes — an agent of one's own against the
baselines, on this machine, ending with the verdicts and the next step.

Runs the plan ``configs/plan/demo.yaml`` (the example in-house agent of ``examples/``, DQN,
PPO and the random floor on two envs, three seeds) with the local workers, then ``seedsweep
report`` with the example agent as the candidate, and says what to do next. Typing it again
reuses the finished runs. Run it from the repository root (the example agent's entry is a
path relative to it).
"""

from __future__ import annotations

import sys
from pathlib import Path

from seedsweep.runner.commands import report, run
from seedsweep.runner.execution.config import group_file, read_yaml

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
    status = run.main(["--plan", PLAN, "--config-dir", str(EXAMPLES), "--progress=lines"])
    print(f"\nseedsweep demo: runs are in {sweep.resolve()}")
    code = report.main([str(sweep), "--candidate", CANDIDATE])
    page = sweep / "report" / "report.html"
    if code == 0 and page.exists():
        print(f"\nseedsweep demo: report at {page.resolve()}")
        print("next: open the page; a verdict of 'cannot decide' or 'insufficient evidence' "
              "means more seeds, and\n  seedsweep plan-seeds "
              f"{sweep} --candidate {CANDIDATE} --difference 0.1 --units normalised\n"
              "says how many the smallest difference that matters to you needs.")
    return status or code


if __name__ == "__main__":
    sys.exit(main())
