"""Sweeps through submitit: one job per run, on SLURM or as local submitit jobs.

Each job runs :func:`runner.workers.run_job`, so skipping, resuming and per-run locks work
exactly as with local workers (the results folder must be on a filesystem every node
sees, as SLURM clusters have). Jobs go out as one array; the launcher then watches the
run folders for progress and waits for the jobs, with ``--timeout-min`` as a guard.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

import submitit
from seedsweep.runner.execution import records
from seedsweep.runner.launch.display import SweepProgress
from seedsweep.runner.launch.workers import Outcome, mark_failed, run_job

logger = logging.getLogger(__name__)

# One run per job needs one core; memory is whatever a run needs (about 0.5 GB for the
# shipped agents), settable with --slurm mem_gb=... to fit the cluster's nodes.
DEFAULTS = {"timeout_min": 24 * 60, "cpus_per_task": 1, "mem_gb": 0.5, "nodes": 1,
            "tasks_per_node": 1}


def make_executor(folder: Path, cluster: str, params: dict) -> submitit.AutoExecutor:
    executor = submitit.AutoExecutor(folder=str(folder), cluster=cluster)
    settings = dict(DEFAULTS)
    generic = {k: v for k, v in params.items() if k in DEFAULTS or k == "slurm_partition"}
    settings.update(generic)
    if cluster == "slurm":
        settings.update({f"slurm_{k}": v for k, v in params.items()
                         if k not in DEFAULTS and not k.startswith("slurm_")})
        settings.update({k: v for k, v in params.items() if k.startswith("slurm_")})
    executor.update_parameters(**settings)
    return executor


def run_submitit(planned, opts) -> Outcome:
    outcome = Outcome()
    if not planned:
        return outcome
    cluster = "slurm" if opts.launcher == "slurm" else "local"
    stamp = records.now_iso().replace(":", "").replace("+", "_")
    job_dir = planned[0].run_dir.parent / "_jobs" / f"{stamp}-{time.monotonic_ns() % 10**6}"
    executor = make_executor(job_dir, cluster, opts.slurm)
    with executor.batch():
        jobs = [executor.submit(run_job, p.config, opts.retry_failed) for p in planned]
    logger.info("submitted %d %s job(s); logs in %s", len(jobs), cluster, job_dir)
    display = SweepProgress(planned, len(planned), mode=opts.progress)
    for p in planned:
        display.started(p.run_id)
    deadline = time.monotonic() + opts.timeout_min * 60 if opts.timeout_min else None
    left = dict(zip((p.run_id for p in planned), zip(jobs, planned, strict=True), strict=True))
    try:
        while left:
            for rid, (job, p) in list(left.items()):
                if not job.done():
                    doc = _read(p.run_dir)
                    if doc:
                        display.message({"run_id": rid, "steps": doc.get("env_steps", 0),
                                         "rate": 0.0})
                    continue
                del left[rid]
                try:
                    doc = job.result()
                except Exception as err:  # the job died or raised: this run only
                    reason = f"job {job.job_id} failed: {str(err).strip().splitlines()[-1][:300]}"
                    if (_read(p.run_dir) or {}).get("status") != "failed":
                        mark_failed(p, reason)
                    outcome.failed.append((rid, reason))
                    display.finished(rid, "failed", reason)
                    continue
                status = doc.get("status")
                if status == "complete":
                    outcome.complete += 1
                    display.finished(rid, "complete")
                elif status == "busy":
                    outcome.busy.append(rid)
                    display.finished(rid, "busy")
                else:
                    outcome.failed.append((rid, doc.get("error") or status))
                    display.finished(rid, "failed", doc.get("error") or "")
            if deadline is not None and time.monotonic() > deadline and left:
                for rid, (job, _) in left.items():
                    reason = f"not finished within --timeout-min (job {job.job_id})"
                    outcome.failed.append((rid, reason))
                break
            display.refresh()
            time.sleep(0.5)
    finally:
        display.close()
    return outcome


def _read(run_dir: Path) -> dict | None:
    try:
        return records.read_run_json(run_dir)
    except records.RecordError:
        return None
