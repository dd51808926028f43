"""Wall-time estimate of a sweep before it starts.

Cost per env step of each agent × env comes from earlier complete runs on this machine
(a small cache under ``$SEEDSWEEP_CACHE`` or ``~/.cache/seedsweep``), or else from a short
calibration run of that pair (a couple of thousand steps, its whole training loop timed).
"""

from __future__ import annotations

import copy
import json
import os
import socket
import tempfile
import time
from pathlib import Path

from seedsweep.runner.execution.prepare import PreparedRun, prepare
from seedsweep.runner.execution.records import atomic_write_json
from seedsweep.runner.execution.run import execute
from seedsweep.runner.launch.display import fmt_eta

CALIBRATION_STEPS = 2000
STARTUP_S = 3.5  # per run: a fresh process importing torch and gymnasium (measured here, 2-4 s)


def cache_file() -> Path:
    root = Path(os.environ.get("SEEDSWEEP_CACHE", Path.home() / ".cache" / "seedsweep"))
    return root / "step_costs.json"


def _key(p) -> str:
    return f"{socket.gethostname()}|{p.config['agent']['name']}|{p.env.id}"


def load_costs() -> dict[str, float]:
    try:
        return json.loads(cache_file().read_text())
    except (OSError, ValueError):
        return {}


def remember(p, seconds_per_step: float) -> None:
    """Record the measured cost of one complete run (a running mean per pair)."""
    costs = load_costs()
    key = _key(p)
    old = costs.get(key)
    costs[key] = seconds_per_step if old is None else 0.5 * (old + seconds_per_step)
    try:
        atomic_write_json(cache_file(), costs)
    except OSError:
        pass  # an estimate cache is a convenience, never a reason to fail a run


def remember_run(p: PreparedRun, doc: dict) -> None:
    """After a run completed in one go: remember its cost per env step."""
    loop_s = doc.get("loop_s")
    if doc.get("skipped") or doc.get("status") != "complete" or doc.get("resumed_from"):
        return
    if loop_s and doc.get("env_steps"):
        remember(p, float(loop_s) / max(1, int(doc["env_steps"])))


def calibrate(p: PreparedRun) -> float:
    """Seconds per env step of one agent × env pair, from a short throwaway run."""
    cfg = copy.deepcopy(p.config)
    steps = min(int(cfg["steps"]), CALIBRATION_STEPS)
    with tempfile.TemporaryDirectory() as tmp:
        cfg.update(steps=steps, results_dir=tmp, sweep="calibration")
        cfg["eval"] = dict(cfg["eval"], every=steps, episodes=1)
        cfg["checkpoint"] = {"every": 0}
        t0 = time.perf_counter()
        doc = execute(prepare(cfg))
        elapsed = doc.get("loop_s") or (time.perf_counter() - t0)
    return float(elapsed) / steps


def estimate_wall_time(to_run, workers: int) -> str:
    """One line: the sweep's size and its estimated wall time, with where that came from."""
    costs = load_costs()
    per_pair: dict[str, float] = {}
    sources = {"earlier runs": 0, "calibration": 0}
    for p in to_run:
        key = _key(p)
        if key in per_pair:
            continue
        if key in costs:
            per_pair[key] = costs[key]
            sources["earlier runs"] += 1
        else:
            per_pair[key] = calibrate(p)
            sources["calibration"] += 1
    work = sorted((per_pair[_key(p)] * int(p.config["steps"]) + STARTUP_S for p in to_run),
                  reverse=True)
    lanes = [0.0] * max(1, workers)
    for w in work:  # longest first onto the least loaded worker
        lanes[lanes.index(min(lanes))] += w
    where = ", ".join(f"{n} pair(s) from {s}" for s, n in sources.items() if n)
    return (f"seedsweep: {len(to_run)} runs on {workers} worker(s): estimated wall time "
            f"{fmt_eta(max(lanes))} ({where}; {STARTUP_S:.1f} s start-up per run)")
