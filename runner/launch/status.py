"""``seedsweep status results/<sweep>``: what the folder holds, read from disk only.

done = ``run.json`` says complete; failed = says failed (with the reason); running = says
running and its lock is held; interrupted = says running but nobody holds its lock (it
will resume from its checkpoint when the sweep is started again); pending = planned in
``sweep.json`` but not started.
"""

from __future__ import annotations

from pathlib import Path

from filelock import Timeout
from seedsweep.runner.execution import records
from seedsweep.runner.execution.run import lock_for
from seedsweep.runner.launch.sweep import read_manifest


def run_states(folder: Path) -> list[dict]:
    manifest = read_manifest(folder) or {"runs": {}}
    ids = set(manifest.get("runs", {}))
    ids |= {p.parent.name for p in folder.glob("*/run.json")}
    rows = []
    for rid in sorted(ids):
        run_dir = folder / rid
        planned = manifest.get("runs", {}).get(rid, {})
        try:
            doc = records.read_run_json(run_dir) if run_dir.is_dir() else None
        except records.RecordError as err:
            doc = None
            rows.append({"run_id": rid, "state": "corrupt", "env_steps": 0,
                         "reason": f"{str(err).split(': ', 1)[-1]}; it resumes from its "
                                   "checkpoints if it has any",
                         "steps": planned.get("steps")})
            continue
        if doc is None:
            state, reason, steps = "pending", "", 0
        else:
            state = doc.get("status", "?")
            reason, steps = doc.get("error") or "", doc.get("env_steps", 0)
            if state == "complete":
                state = "done"
            elif state == "running" and not _locked(run_dir):
                state, reason = "interrupted", "no process holds its lock; it resumes on restart"
        rows.append({"run_id": rid, "state": state, "reason": reason, "env_steps": steps,
                     "steps": (doc or planned).get("steps", planned.get("steps"))})
    return rows


def _locked(run_dir: Path) -> bool:
    """Whether a process holds the run's lock. The probe takes the lock without waiting and
    gives it back at once; a run starting at that instant waits for it
    (:data:`~seedsweep.runner.execution.run.LOCK_WAIT_S`), so a probe never displaces it. A
    lock that cannot be opened (a read-only folder) counts as held: nothing is claimed."""
    lock = lock_for(run_dir, timeout=0)
    try:
        lock.acquire()
    except (Timeout, OSError):
        return True
    lock.release()
    return False
