"""``make demo``: a small real sweep on this machine, then the report.

Runs the plan ``configs/plan/demo.yaml`` with the local workers, then ``seedsweep report``
on it, and prints where everything is. Typing it again reuses the finished runs.
"""

from __future__ import annotations

import sys
from pathlib import Path

from seedsweep.runner.commands import report, run

PLAN = "demo"
FOLDER = Path("results") / "demo-v1"


def main() -> int:
    status = run.main(["--plan", PLAN, "--progress=lines"])
    print(f"\nseedsweep demo: runs are in {FOLDER.resolve()}")
    code = report.main([str(FOLDER)])
    page = FOLDER / "report" / "report.html"
    if code == 0 and page.exists():
        print(f"seedsweep demo: report at {page.resolve()}")
    return status or code


if __name__ == "__main__":
    sys.exit(main())
