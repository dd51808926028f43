"""``make demo``: a small real sweep on this machine, then the report.

Runs ``configs/sweep/demo.yaml`` (the three baselines and the random floor on CartPole-v1
and Acrobot-v1, three seeds each) with the local workers, then ``seedsweep report`` on
it, and prints where everything is. Typing it again reuses the finished runs.
"""

from __future__ import annotations

import sys
from pathlib import Path

from seedsweep.runner.commands.cli import main as cli_main

SWEEP_FILE = "demo"
FOLDER = Path("results") / "demo-v1"


def main() -> int:
    status = cli_main(["run", "--sweep-file", SWEEP_FILE, "--progress=lines"])
    print(f"\nseedsweep demo: runs are in {FOLDER.resolve()}")
    code = cli_main(["report", str(FOLDER)])
    report = FOLDER / "report" / "report.html"
    if code == 0 and report.exists():
        print(f"seedsweep demo: report at {report.resolve()}")
    return status or code


if __name__ == "__main__":
    sys.exit(main())
