"""Sweeps through submitit: one job per run, on SLURM or as local submitit jobs.

Each job runs :func:`runner.workers.run_job`, so skipping, resuming and per-run locks work
exactly as with local workers (the results folder must be on a filesystem every node
sees, as SLURM clusters have). submitit's own job files (pickles) go to a private folder of
the user's (:func:`jobs_folder`), never into the results folder. Jobs go out as one array;
the launcher then watches the run folders for progress and waits for the jobs, with
``--timeout-min`` as a guard.
"""

from __future__ import annotations

import hashlib
import logging
import os
import time
from pathlib import Path

import submitit
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.execution import records
from seedsweep.runner.launch.display import SweepProgress
from seedsweep.runner.launch.workers import Outcome, mark_failed, run_job

logger = logging.getLogger(__name__)

# One run per job needs one core; memory is whatever a run needs (about 0.5 GB for the
# shipped agents), settable with --slurm mem_gb=... to fit the cluster's nodes.
DEFAULTS = {"timeout_min": 24 * 60, "cpus_per_task": 1, "mem_gb": 0.5, "nodes": 1,
            "tasks_per_node": 1}


def jobs_root() -> Path:
    """Where submitit's job files go: ``$SEEDSWEEP_JOBS``, else ``jobs/`` in the cache
    folder (``$SEEDSWEEP_CACHE`` or ``~/.cache/seedsweep``). On a cluster it must be on a
    filesystem every node sees, as a home folder usually is."""
    if os.environ.get("SEEDSWEEP_JOBS"):
        return Path(os.environ["SEEDSWEEP_JOBS"])
    cache = Path(os.environ.get("SEEDSWEEP_CACHE", Path.home() / ".cache" / "seedsweep"))
    return cache / "jobs"


def jobs_folder(sweep_folder: Path) -> Path:
    """A new folder for one launch's job files, in a folder only this user can write.

    submitit's job files are pickles that the jobs and this process load, so they are kept
    out of the results folder, which others may be able to write: a planted pickle there
    would run code as the user. The folder is named after the sweep folder (name and a hash
    of its absolute path) and the launch time.
    """
    root = check_jobs_root()
    where = hashlib.sha256(str(sweep_folder.resolve()).encode()).hexdigest()[:8]
    stamp = records.now_iso().replace(":", "").replace("+", "_")
    return root / f"{sweep_folder.name}-{where}" / f"{stamp}-{time.monotonic_ns() % 10**6}"


def check_jobs_root() -> Path:
    """The job-file folder, made if missing; ConfigError unless it is private to this user
    (checked before a sweep writes anything)."""
    root = jobs_root()
    try:
        root.mkdir(parents=True, exist_ok=True, mode=0o700)
        info = root.stat()
    except OSError as err:
        raise ConfigError("SEEDSWEEP_JOBS", f"cannot make the job folder {root} "
                          f"({err.strerror or err})") from None
    if info.st_uid != os.getuid() or info.st_mode & 0o022:
        raise ConfigError("SEEDSWEEP_JOBS", f"{root} must belong to you and be writable by you "
                          "only (it holds the pickled jobs): chmod go-w it, or set "
                          "SEEDSWEEP_JOBS to a private folder every node can see")
    return root


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
    job_dir = jobs_folder(planned[0].run_dir.parent)
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
