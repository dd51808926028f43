"""A sweep: the cross product of override values, every run checked before any starts.

The runs are ordered seed-major (every agent × env × setting at seed 0, then at seed 1,
...), so a sweep stopped halfway has balanced seeds. ``sweep.json`` in the sweep folder
lists the planned runs (what ``seedsweep status`` calls pending) and the code version
they were made with; a sweep refuses to add runs of another code version unless asked.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from filelock import FileLock

from seedsweep.agents.base import ConfigError
from seedsweep.runner.execution import records
from seedsweep.runner.execution.config import compose, expand
from seedsweep.runner.execution.run import PreparedRun, read_run_json

MANIFEST = "sweep.json"


@dataclass
class SweepOptions:
    workers: int = 0  # 0: number of physical cores
    retry_failed: bool = False
    allow_mixed_code: bool = False
    progress: str = "auto"
    estimate: bool = True
    launcher: str = "local"  # local | submitit | slurm
    slurm: dict[str, Any] = field(default_factory=dict)
    timeout_min: float = 0.0  # submitit launchers: give up waiting after this (0: never)


def plan(overrides: Sequence[str], multirun: bool = False,
         extra_dirs: Sequence[Path] = ()) -> list[PreparedRun]:
    """Expand and check every run of a sweep; raises ConfigError before anything is written."""
    from seedsweep.runner.execution.config import apply_suite
    from seedsweep.runner.execution.run import prepare

    combos = [c for group in apply_suite(overrides, extra_dirs) for c in expand(group, multirun)]
    if not combos:
        raise ConfigError("overrides", "the sweep is empty")
    if len(combos) > 1 and not multirun:
        raise ConfigError("suite", f"this gives {len(combos)} runs; add -m to run a sweep")
    planned = [prepare(compose(c, extra_dirs)) for c in combos]
    seen: set[str] = set()
    for p in planned:
        if p.run_id in seen:
            raise ConfigError("seed", f"two sweep points give the same run ({p.run_id}); "
                              "remove duplicate values")
        seen.add(p.run_id)
    sweep_dirs = {p.run_dir.parent for p in planned}
    if len(sweep_dirs) > 1:
        raise ConfigError("sweep", "one sweep writes to one folder; do not sweep over sweep= "
                          "or results_dir=")
    return interleave(planned)


def interleave(planned: list[PreparedRun]) -> list[PreparedRun]:
    """Seed-major order: all settings at the first seed, then the next seed, ..."""
    seeds = sorted({p.config["seed"] for p in planned})
    rank = {s: i for i, s in enumerate(seeds)}
    return sorted(planned, key=lambda p: rank[p.config["seed"]])  # stable: keeps combo order


def sweep_dir(planned: list[PreparedRun]) -> Path:
    return planned[0].run_dir.parent


def check_code_version(folder: Path, allow_mixed: bool) -> None:
    """Refuse to mix runs of different code versions in one sweep folder."""
    if allow_mixed or not folder.is_dir():
        return
    current = records.code_version()
    found = set()
    manifest = read_manifest(folder)
    if manifest and manifest.get("code_version"):
        found.add(manifest["code_version"])
    for run_json in folder.glob("*/run.json"):
        doc = read_run_json(run_json.parent) or {}
        version = (doc.get("provenance") or {}).get("code_version")
        if version:
            found.add(version)
    others = sorted(found - {current})
    if others:
        raise ConfigError(
            "sweep", f"{folder} holds runs made by code version {others[0]} and this is "
            f"{current}; use another sweep=NAME, or pass --allow-mixed-code to add to it")


def read_manifest(folder: Path) -> dict[str, Any] | None:
    import json

    try:
        return json.loads((folder / MANIFEST).read_text())
    except (OSError, ValueError):
        return None


def write_manifest(folder: Path, planned: list[PreparedRun], overrides: Sequence[str]) -> None:
    """Add this launch's runs to ``sweep.json`` (under a lock: sweeps may share a folder)."""
    folder.mkdir(parents=True, exist_ok=True)
    with FileLock(str(folder / ".sweep.lock"), timeout=60):
        doc = read_manifest(folder) or {"runs": {}, "launches": []}
        doc["code_version"] = records.code_version()
        for p in planned:
            doc["runs"][p.run_id] = {"agent": p.config["agent"]["name"], "env": p.env.id,
                                     "env_config": p.env.name, "seed": p.config["seed"],
                                     "steps": p.config["steps"]}
        doc["launches"].append({"at": records.now_iso(), "overrides": list(overrides),
                                "runs": len(planned)})
        records.atomic_write_json(folder / MANIFEST, doc)


def classify(planned: list[PreparedRun], retry_failed: bool) -> tuple[list, list, list]:
    """(to_run, complete, failed_skipped) from what is on disk now."""
    to_run, complete, failed = [], [], []
    for p in planned:
        status = (read_run_json(p.run_dir) or {}).get("status")
        if status == "complete":
            complete.append(p)
        elif status == "failed" and not retry_failed:
            failed.append(p)
        else:
            to_run.append(p)
    return to_run, complete, failed


def run_sweep(planned: list[PreparedRun], overrides: Sequence[str], opts: SweepOptions) -> int:
    """Run what is left of a sweep; exit status 0 if every run is complete, else 1."""
    from seedsweep.runner.launch.workers import default_workers, run_local

    folder = sweep_dir(planned)
    check_code_version(folder, opts.allow_mixed_code)
    to_run, complete, failed = classify(planned, opts.retry_failed)
    workers = opts.workers or default_workers()
    say = lambda msg: print(msg, file=sys.stderr, flush=True)  # noqa: E731
    say(f"seedsweep: sweep {folder.name}: {len(planned)} runs — {len(complete)} complete, "
        f"{len(failed)} failed (kept; --retry-failed reruns them), {len(to_run)} to run")
    if to_run and opts.estimate:
        from seedsweep.runner.launch.estimate import estimate_wall_time

        say(estimate_wall_time(to_run, workers if opts.launcher == "local" else len(to_run)))
    write_manifest(folder, planned, overrides)
    if opts.launcher == "local":
        outcome = run_local(to_run, workers, opts)
    else:
        from seedsweep.runner.launch.slurm import run_submitit

        outcome = run_submitit(to_run, opts)
    done = len(complete) + outcome.complete
    bad = len(failed) + len(outcome.failed)
    say(f"seedsweep: sweep {folder.name}: {done}/{len(planned)} complete, {bad} failed, "
        f"{len(outcome.busy)} running elsewhere; results in {folder}")
    for run_id, reason in outcome.failed:
        say(f"  failed: {run_id}: {reason}")
    return 0 if done == len(planned) else 1
