"""Running a planned sweep: what is left to do, on local workers or through submitit.

``sweep.json`` in the sweep folder lists the planned runs (what ``seedsweep status`` calls
pending) and the code version they were made with; a sweep refuses to add runs of another
code version unless asked.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from filelock import FileLock
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.execution import records
from seedsweep.runner.execution.prepare import PreparedRun
from seedsweep.runner.launch import estimate
from seedsweep.runner.launch.slurm import check_jobs_root, run_submitit
from seedsweep.runner.launch.workers import (
    Outcome,
    calibrate_in_workers,
    context,
    default_workers,
    run_local,
)

logger = logging.getLogger(__name__)

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


def sweep_dir(planned: list[PreparedRun]) -> Path:
    return planned[0].run_dir.parent


def planned_code(planned: Sequence[PreparedRun]) -> dict[str, str]:
    """The user's own source files the planned runs load, with their hashes."""
    out: dict[str, str] = {}
    for p in planned:
        out.update(p.agent_code)
    return out


def check_code_version(folder: Path, allow_mixed: bool,
                       agent_code: dict[str, str] | None = None) -> None:
    """Refuse to mix runs of different code versions in one sweep folder: seedsweep's own
    (``code_version``) and each source file of the user's agents and envs the runs load
    (``agent_code``: the same file with different content in two runs is two versions)."""
    if allow_mixed or not folder.is_dir():
        return
    current = records.code_version()
    found = set()
    files: dict[str, set[str]] = {}
    manifest = read_manifest(folder)
    docs = [{"provenance": manifest}] if manifest else []
    for run_json in folder.glob("*/run.json"):
        try:
            docs.append(records.read_run_json(run_json.parent) or {})
        except records.RecordError:
            continue  # status reports it; its version cannot be read
    for doc in docs:
        prov = doc.get("provenance") or {}
        if prov.get("code_version"):
            found.add(prov["code_version"])
        code = prov.get("agent_code")
        if isinstance(code, dict):
            for name, digest in code.items():
                files.setdefault(str(name), set()).add(str(digest))
    others = sorted(found - {current})
    if others:
        raise ConfigError(
            "sweep", f"{folder} holds runs made by code version {others[0]} and this is "
            f"{current}; use another sweep=NAME, or pass --allow-mixed-code to add to it")
    for name, digest in sorted((agent_code or {}).items()):
        older = sorted(files.get(name, set()) - {digest})
        if older:
            raise ConfigError(
                "sweep", f"{folder} holds runs made with another version of {name} ({older[0]}; "
                f"now {digest}); use another sweep=NAME, or pass --allow-mixed-code to add to it")


def read_manifest(folder: Path) -> dict[str, Any] | None:
    try:
        doc = json.loads((folder / MANIFEST).read_text())
    except (OSError, ValueError):
        return None
    return doc if isinstance(doc, dict) else None


def write_manifest(folder: Path, planned: list[PreparedRun], overrides: Sequence[str]) -> None:
    """Add this launch's runs to ``sweep.json`` (under a lock: sweeps may share a folder)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        _write_manifest(folder, planned, overrides)
    except OSError as err:
        raise ConfigError("results_dir", f"cannot write the sweep folder {folder} "
                          f"({type(err).__name__}: {err.strerror or err})") from None


def _write_manifest(folder: Path, planned: list[PreparedRun], overrides: Sequence[str]) -> None:
    with FileLock(str(folder / ".sweep.lock"), timeout=60):
        records.remove_stale_temp_files(folder)  # e.g. a sweep.json write cut short
        doc = read_manifest(folder) or {"runs": {}, "launches": []}
        doc["code_version"] = records.code_version()
        doc["agent_code"] = {**(doc.get("agent_code") or {}), **planned_code(planned)}
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
        try:
            status = (records.read_run_json(p.run_dir) or {}).get("status")
        except records.RecordError:
            status = None  # an unreadable record: the run resumes from its checkpoints
        if status == "complete":
            complete.append(p)
        elif status == "failed" and not retry_failed:
            failed.append(p)
        else:
            to_run.append(p)
    return to_run, complete, failed


def run_sweep(planned: list[PreparedRun], overrides: Sequence[str], opts: SweepOptions) -> int:
    """Run what is left of a sweep; exit status 0 if every run is complete, else 1."""
    folder = sweep_dir(planned)
    check_code_version(folder, opts.allow_mixed_code, planned_code(planned))
    to_run, complete, failed = classify(planned, opts.retry_failed)
    workers = opts.workers or default_workers()
    logger.info("sweep %s: %d runs — %d complete, %d failed (kept; --retry-failed reruns them), "
                "%d to run", folder.name, len(planned), len(complete), len(failed), len(to_run))
    if to_run and opts.launcher == "local":
        context()  # the run processes' server imports while the estimate calibrates
    costs = None
    if to_run and opts.estimate:
        if opts.launcher == "local":
            guess = estimate.estimate(to_run, workers, lambda ps: calibrate_in_workers(ps, workers))
        else:
            guess = estimate.estimate(to_run, len(to_run))
        logger.info("%s", guess.line())
        costs = guess.costs
    if to_run and opts.launcher != "local":
        check_jobs_root()  # refused before anything is written
    write_manifest(folder, planned, overrides)
    if opts.launcher == "local":
        outcome = run_local(to_run, workers, opts, costs=costs)
        estimate.remember_startup([took - loop for took, loop in outcome.process_s.values()
                                   if loop is not None])
    else:
        outcome = run_submitit(to_run, opts)
    return summarise(folder, planned, complete, failed, outcome)


def summarise(folder: Path, planned: list[PreparedRun], complete: list, failed: list,
              outcome: Outcome) -> int:
    done = len(complete) + outcome.complete
    bad = len(failed) + len(outcome.failed)
    logger.info("sweep %s: %d/%d complete, %d failed, %d running elsewhere; results in %s",
                folder.name, done, len(planned), bad, len(outcome.busy), folder)
    for run_id, reason in outcome.failed:
        logger.info("  failed: %s: %s", run_id, reason)
    if done == len(planned):
        logger.info("next: seedsweep report %s (--candidate NAME adds the verdicts of an agent "
                    "against the others)", folder)
    elif bad:
        logger.info("next: seedsweep status %s shows why; the same command with "
                    "--retry-failed reruns the failed runs", folder)
    return 0 if done == len(planned) else 1
