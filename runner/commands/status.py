"""``seedsweep status results/<sweep>``: what a sweep folder holds, read from disk only."""

from __future__ import annotations

import argparse
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.commands import options
from seedsweep.runner.launch.status import run_states

HELP = "what a sweep folder holds: done, running, failed, pending"
ORDER = ("done", "running", "interrupted", "failed", "corrupt", "pending")


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("status", "Done / running / interrupted / failed / pending runs of a "
                       "sweep folder (reads the disk only; never disturbs a running sweep).")
    p.add_argument("folder", help="a sweep folder, e.g. results/demo-v1")
    return p


def main(argv: Sequence[str]) -> int:
    return options.guarded(lambda: _status(argv))


def _status(argv: Sequence[str]) -> int:
    args = build_parser().parse_args(list(argv))
    folder = Path(args.folder)
    if not folder.is_dir():
        raise ConfigError("folder", f"{folder} is not a folder")
    rows = run_states(folder)
    if not rows:
        raise ConfigError("folder", f"{folder} holds no runs (no sweep.json, no */run.json)")
    counts = Counter(r["state"] for r in rows)
    shown = [s for s in ORDER if s != "corrupt" or counts.get(s)]
    print(f"{folder}: " + ", ".join(f"{counts.get(s, 0)} {s}" for s in shown))
    for r in rows:
        if r["state"] != "done":
            total = r["steps"] or "?"
            line = f"  {r['state']:<12} {r['run_id']}  {r['env_steps']}/{total} steps"
            if r["reason"]:
                line += f"  — {r['reason']}"
            print(line)
    return 0
