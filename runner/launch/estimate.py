"""Wall-time estimate of a sweep before it starts, and the costs its live ETA builds on.

A run costs its start-up, its training (env steps × seconds per step) and its evaluations
(evaluations × episodes × expected episode length × seconds per evaluation step). The three
rates of each agent × env pair come from earlier complete runs on this machine (a small
cache under ``$SEEDSWEEP_CACHE`` or ``~/.cache/seedsweep``), or else from a short
calibration run of that pair (its training rate measured over the last 60%, after any
warm-up, and one evaluation of the planned episodes, whose mean length it takes: an
untrained policy's, so an estimate from calibration undercounts the evaluations of agents
whose episodes grow as they learn; the cache, filled by every complete run, does not).
Runs are then placed on the workers in the planned order, as the launcher places them.
"""

from __future__ import annotations

import copy
import json
import os
import socket
import statistics
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from seedsweep.runner.execution.prepare import PreparedRun, prepare
from seedsweep.runner.execution.records import atomic_write_json
from seedsweep.runner.execution.run import execute
from seedsweep.runner.launch.display import fmt_eta
from seedsweep.runner.launch.schedule import makespan

CALIBRATION_STEPS = 4000  # past a replay warm-up of 1000 and through whole rollouts of 1024
CALIBRATION_EPISODES = 10  # at most: enough for a mean episode length
# per run: a process forked from the warm server, building envs and agent, writing records;
# median of (process wall time - loop time): 0.147 s over 16 short random-agent runs, 0.155 s
# over 12 DQN runs (benchmarks/startup.py, 2 cores, load 5; spawn: 1.75 s and 2.87 s). A
# sweep measures it on its machine and the cache keeps it for later estimates.
STARTUP_S = 0.15
SERVER_START_S = 3.0  # once a sweep: the server imports torch, gymnasium, seedsweep (3.3 s, load 5)
STARTUP_KEY = "startup"


@dataclass
class PairCost:
    """Seconds per training env step, per evaluation env step, and the mean episode length
    of an evaluation, for one agent × env pair on this machine."""

    train_s: float
    eval_s: float = 0.0
    eval_length: float = 0.0

    def as_dict(self) -> dict[str, float]:
        return {"train_s": self.train_s, "eval_s": self.eval_s, "eval_length": self.eval_length}


@dataclass
class Estimate:
    """Per-run costs (seconds, start-up included), the sweep's wall time and its basis."""

    costs: dict[str, float]
    wall_s: float
    basis: dict[str, int] = field(default_factory=dict)
    startup_s: float = STARTUP_S
    startup_measured: bool = False
    workers: int = 1
    totals: tuple[float, float, float] = (0.0, 0.0, 0.0)  # training, evaluation, start-up

    def line(self) -> str:
        where = ", ".join(f"{n} agent × env pair(s) from {s}" for s, n in self.basis.items() if n)
        start = ("measured by earlier sweeps here" if self.startup_measured
                 else "this version's default")
        train, evals, startup = (fmt_eta(x) for x in self.totals)
        return (f"{len(self.costs)} runs on {self.workers} worker(s): estimated wall time "
                f"{fmt_eta(self.wall_s)} (run time: training {train}, evaluation {evals}, "
                f"start-up {startup} at {self.startup_s:.2f} s a run, {start}; rates of "
                f"{where}; runs placed on the workers in the planned order)")


def cache_file() -> Path:
    root = Path(os.environ.get("SEEDSWEEP_CACHE", Path.home() / ".cache" / "seedsweep"))
    # not step_costs.json: that file of earlier versions holds one number per pair, and
    # they fail on an entry of this richer format
    return root / "run_costs.json"


def _key(p) -> str:
    return f"{socket.gethostname()}|{p.config['agent']['name']}|{p.env.id}"


def load_costs() -> dict[str, Any]:
    try:
        doc = json.loads(cache_file().read_text())
    except (OSError, ValueError):
        return {}
    return doc if isinstance(doc, dict) else {}


def _pair(value: Any) -> PairCost | None:
    """A cached entry: a dict of the three rates (an older cache held the bare training
    cost per step, evaluations included)."""
    try:
        if isinstance(value, (int, float)):
            return PairCost(float(value))
        if isinstance(value, dict):
            return PairCost(float(value["train_s"]), float(value.get("eval_s", 0.0)),
                            float(value.get("eval_length", 0.0)))
    except (KeyError, TypeError, ValueError):
        return None
    return None


def _save(costs: dict[str, Any]) -> None:
    try:
        atomic_write_json(cache_file(), costs)
    except OSError:
        pass  # an estimate cache is a convenience, never a reason to fail a run


def remember(p, cost: PairCost) -> None:
    """Record the measured rates of one complete run (a running mean per pair)."""
    costs = load_costs()
    key = _key(p)
    old = _pair(costs.get(key))
    if old is not None and isinstance(costs.get(key), dict):
        cost = PairCost(*(0.5 * (a + b) for a, b in zip(
            (old.train_s, old.eval_s, old.eval_length),
            (cost.train_s, cost.eval_s, cost.eval_length), strict=True)))
    costs[key] = cost.as_dict()
    _save(costs)


def measured(doc: dict) -> PairCost | None:
    """The rates of a run from its run.json (loop_s, eval_s, eval_steps, env_steps)."""
    loop_s, steps = doc.get("loop_s"), doc.get("env_steps")
    if not loop_s or not steps:
        return None
    eval_s = float(doc.get("eval_s") or 0.0)
    eval_steps = int(doc.get("eval_steps") or 0)
    episodes = int((doc.get("eval") or {}).get("episodes") or 0)
    n_evals = _evaluations(int(steps), int((doc.get("eval") or {}).get("every") or steps))
    length = eval_steps / (n_evals * episodes) if eval_steps and episodes else 0.0
    return PairCost((float(loop_s) - eval_s) / int(steps),
                    eval_s / eval_steps if eval_steps else 0.0, length)


def remember_run(p: PreparedRun, doc: dict) -> None:
    """After a run completed in one go: remember its rates."""
    if doc.get("skipped") or doc.get("status") != "complete" or doc.get("resumed_from"):
        return
    cost = measured(doc)
    if cost is not None:
        remember(p, cost)


def remember_startup(seconds: list[float]) -> None:
    """The median start-up of a sweep's runs (process wall time - loop time), kept per host."""
    if not seconds:
        return
    costs = load_costs()
    key = f"{socket.gethostname()}|{STARTUP_KEY}"
    new = statistics.median(seconds)
    old = costs.get(key)
    costs[key] = new if not isinstance(old, (int, float)) else 0.5 * (old + new)
    _save(costs)


def _evaluations(steps: int, every: int) -> int:
    """Evaluations of a run: every ``every`` steps, and one at the end if that is not one."""
    every = max(1, every)
    return steps // every + (1 if steps % every else 0)


class _Clock:
    """A listener that notes (time, env steps) at each progress report of a run."""

    def __init__(self) -> None:
        self.marks: list[tuple[float, int]] = []

    def update(self, steps: int, steps_per_s: float | None = None) -> None:
        self.marks.append((time.perf_counter(), steps))

    def evaluation(self, steps: int, mean: float, stderr: float) -> None:
        pass

    def close(self) -> None:
        pass


def calibrate(p: PreparedRun) -> PairCost:
    """The rates of one agent × env pair, from a short throwaway run."""
    cfg = copy.deepcopy(p.config)
    steps = min(int(cfg["steps"]), CALIBRATION_STEPS)
    episodes = min(int(cfg["eval"]["episodes"]), CALIBRATION_EPISODES)
    clock = _Clock()
    with tempfile.TemporaryDirectory() as tmp:
        cfg.update(steps=steps, results_dir=tmp, sweep="calibration")
        cfg["eval"] = dict(cfg["eval"], every=steps, episodes=episodes)
        cfg["checkpoint"] = {"every": 0}
        cfg["log"] = dict(cfg["log"], every=steps)
        doc = execute(prepare(cfg), clock)
    cost = measured(doc) or PairCost(0.0)
    late = [(t, s) for t, s in clock.marks if s >= 0.4 * steps]
    if len(late) >= 2 and late[-1][1] > late[0][1]:  # after any warm-up (e.g. a replay's)
        cost.train_s = (late[-1][0] - late[0][0]) / (late[-1][1] - late[0][1])
    return cost


def run_cost(p: PreparedRun, pair: PairCost, startup_s: float) -> float:
    """Seconds one run is expected to take, start to end of its process."""
    return sum(run_parts(p, pair, startup_s))


def run_parts(p: PreparedRun, pair: PairCost, startup_s: float) -> tuple[float, float, float]:
    """(training, evaluation, start-up) seconds of one run."""
    steps = int(p.config["steps"])
    ev = p.config["eval"]
    length = pair.eval_length
    limit = getattr(p.env, "max_episode_steps", None)
    if isinstance(limit, int) and limit > 0:
        length = min(length, limit)
    eval_steps = _evaluations(steps, int(ev["every"])) * int(ev["episodes"]) * length
    return steps * pair.train_s, eval_steps * pair.eval_s, startup_s


def calibrate_here(planned: list[PreparedRun]) -> list[PairCost]:
    """Calibrate each pair in this process, one after another."""
    return [calibrate(p) for p in planned]


def estimate(to_run: list[PreparedRun], workers: int,
             calibrate_all: Callable[[list[PreparedRun]], list[PairCost]] = calibrate_here
             ) -> Estimate:
    """Every run's expected cost and the sweep's wall time on ``workers`` workers.

    ``calibrate_all`` measures the pairs the cache does not know; the sweep passes one that
    runs them on its workers side by side, so they share the machine as the runs will."""
    costs = load_costs()
    pairs: dict[str, PairCost] = {}
    basis = {"earlier runs": 0, "calibration": 0}
    unknown: dict[str, PreparedRun] = {}
    for p in to_run:
        key = _key(p)
        if key in pairs or key in unknown:
            continue
        cached = _pair(costs.get(key))
        if cached is not None:
            pairs[key] = cached
            basis["earlier runs"] += 1
        else:
            unknown[key] = p
            basis["calibration"] += 1
    if unknown:
        pairs.update(zip(unknown, calibrate_all(list(unknown.values())), strict=True))
    startup = costs.get(f"{socket.gethostname()}|{STARTUP_KEY}")
    measured_startup = isinstance(startup, (int, float))
    startup_s = float(startup) if measured_startup else STARTUP_S
    parts = {p.run_id: run_parts(p, pairs[_key(p)], startup_s) for p in to_run}
    per_run = {rid: sum(x) for rid, x in parts.items()}
    wall = SERVER_START_S + makespan([per_run[p.run_id] for p in to_run], workers)
    totals = tuple(sum(x[i] for x in parts.values()) for i in range(3))
    return Estimate(per_run, wall, basis, startup_s, measured_startup, max(1, workers), totals)
