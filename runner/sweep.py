"""A sweep: the cross product of override values, every run checked before any starts."""

from __future__ import annotations

import sys
from collections.abc import Sequence

from agents.base import ConfigError
from runner.config import compose, expand
from runner.run import PreparedRun, execute, prepare


def plan(overrides: Sequence[str], multirun: bool = False) -> list[PreparedRun]:
    """Expand and check every run of a sweep; raises ConfigError before anything is written."""
    combos = expand(overrides, multirun)
    planned = [prepare(compose(c)) for c in combos]
    if not planned:
        raise ConfigError("overrides", "the sweep is empty")
    seen: dict[str, list[str]] = {}
    for p, c in zip(planned, combos, strict=True):
        if p.run_id in seen:
            raise ConfigError("seed", f"two sweep points give the same run ({p.run_id}); "
                              "remove duplicate values")
        seen[p.run_id] = c
    return planned


def run_planned(planned: list[PreparedRun], progress: str = "auto") -> int:
    """Run one after another; a failed run does not stop the others. Exit 1 if any failed."""
    failed = []
    for i, p in enumerate(planned, 1):
        if len(planned) > 1:
            print(f"seedsweep: run {i}/{len(planned)}: {p.run_id}", file=sys.stderr)
        try:
            execute(p, progress=progress)
        except Exception as err:  # recorded in the run folder; the sweep goes on
            failed.append(p.run_id)
            print(f"seedsweep: run {p.run_id} failed: {type(err).__name__}: {err} "
                  f"(see {p.run_dir / 'error.log'})", file=sys.stderr)
    sweep_dir = planned[0].run_dir.parent
    print(f"seedsweep: {len(planned) - len(failed)}/{len(planned)} runs complete; "
          f"results in {sweep_dir}")
    return 1 if failed else 0
