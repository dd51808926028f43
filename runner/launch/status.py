"""``seedsweep status results/<sweep>``: what the folder holds, read from disk only.

done = ``run.json`` says complete; failed = says failed (with the reason); running = says
running and its lock is held; interrupted = says running but nobody holds its lock (it
will resume from its checkpoint when the sweep is started again); pending = planned in
``sweep.json`` but not started.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from pathlib import Path

from filelock import Timeout

from seedsweep.agents.base import ConfigError
from seedsweep.runner.commands.options import OneLineParser
from seedsweep.runner.execution.run import lock_for, read_run_json
from seedsweep.runner.launch.sweep import read_manifest


def run_states(folder: Path) -> list[dict]:
    manifest = read_manifest(folder) or {"runs": {}}
    ids = set(manifest.get("runs", {}))
    ids |= {p.parent.name for p in folder.glob("*/run.json")}
    rows = []
    for rid in sorted(ids):
        run_dir = folder / rid
        doc = read_run_json(run_dir) if run_dir.is_dir() else None
        planned = manifest.get("runs", {}).get(rid, {})
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
    lock = lock_for(run_dir)
    try:
        lock.acquire()
    except Timeout:
        return True
    lock.release()
    return False


def status_main(argv: Sequence[str]) -> int:
    ap = OneLineParser("status", prog="seedsweep status",
                                 description="done / running / failed / pending runs of a sweep")
    ap.add_argument("folder", help="a sweep folder, e.g. results/demo")
    args = ap.parse_args(list(argv))
    folder = Path(args.folder)
    if not folder.is_dir():
        raise ConfigError("folder", f"{folder} is not a folder")
    rows = run_states(folder)
    if not rows:
        raise ConfigError("folder", f"{folder} holds no runs (no sweep.json, no */run.json)")
    counts = Counter(r["state"] for r in rows)
    order = ["done", "running", "interrupted", "failed", "pending"]
    print(f"{folder}: " + ", ".join(f"{counts.get(s, 0)} {s}" for s in order))
    for r in rows:
        if r["state"] != "done":
            total = r["steps"] or "?"
            line = f"  {r['state']:<12} {r['run_id']}  {r['env_steps']}/{total} steps"
            if r["reason"]:
                line += f"  — {r['reason']}"
            print(line)
    return 0
