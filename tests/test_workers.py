"""Run processes forked from the warm server: same bytes as a fresh interpreter, the parent's
current folder and environment, one torch thread, and start-up measured from outside."""

import csv
import multiprocessing.forkserver as mp_forkserver
import os
import signal
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import torch
from seedsweep.agents.base import Step
from seedsweep.runner.execution import records
from seedsweep.runner.execution.threads import set_compute_threads
from seedsweep.runner.launch import workers
from seedsweep.runner.launch.plan import plan
from seedsweep.runner.launch.sweep import SweepOptions
from threadpoolctl import threadpool_info

from tests.contract_breakers import Tidy

RECORDS = ("eval.csv", "train.csv", "scalars.csv")
QUIET = SweepOptions(progress="quiet")


def sweep(folder: Path, method: str, *extra: str) -> dict[str, dict[str, bytes]]:
    planned = plan(["env=cartpole", "seed=0,1", "steps=400", "eval.every=200",
                    "eval.episodes=2", f"results_dir={folder}", "sweep=w", *extra],
                   multirun=True)
    outcome = workers.run_local(planned, 2, QUIET, start_method=method)
    assert outcome.complete == 2, outcome.failed
    return {p.run_id: {name: (p.run_dir / name).read_bytes() for name in RECORDS}
            for p in planned}


@pytest.mark.parametrize("agent", [
    ["agent=dqn", "agent.replay_warmup_steps=100", "agent.batch_size=16"],
    # explores with the global numpy RNG: its records show any global state a run did not seed
    ["agent=random", "agent.entry=tests.contract_breakers:GlobalNumpyRNG"],
], ids=["dqn", "global-numpy-rng"])
def test_records_from_the_warm_server_equal_a_fresh_interpreter_byte_for_byte(tmp_path, agent):
    np.random.random(17)  # the parent's global stream moved: must not reach any run
    fresh = sweep(tmp_path / "spawn", "spawn", *agent)
    warm = sweep(tmp_path / "forkserver", "forkserver", *agent)
    assert fresh == warm
    assert all(len(files["eval.csv"].splitlines()) == 1 + 2 * 2 for files in warm.values())


def test_a_run_takes_the_parents_current_folder_and_environment(tmp_path, monkeypatch):
    workers.context("forkserver")  # the server is up before the folder and cache change
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("SEEDSWEEP_CACHE", str(tmp_path / "cache"))
    planned = plan(["agent=random", "env=cartpole", "seed=0", "steps=300", "eval.every=300",
                    "eval.episodes=1", "results_dir=relative", "sweep=w"], multirun=True)
    outcome = workers.run_local(planned, 1, QUIET)
    assert outcome.complete == 1
    assert (tmp_path / "relative" / "w" / planned[0].run_id / "run.json").is_file()
    assert (tmp_path / "cache" / "run_costs.json").is_file()  # the run remembered its cost


def test_the_server_preloads_the_heavy_libraries_and_every_seedsweep_module():
    names = workers.preload_modules()
    assert names[0] == "seedsweep.runner.launch.preload"  # one torch thread before the rest
    for name in ("numpy", "torch", "gymnasium", "seedsweep.agents.base", "seedsweep.agents.dqn",
                 "seedsweep.agents.common.replay", "seedsweep.envs.batch",
                 "seedsweep.runner.execution.run", "seedsweep.runner.launch.workers"):
        assert name in names
    # every listed module exists (the server skips a missing one silently)
    root = Path(workers.__file__).resolve().parents[2]
    for name in names:
        if name.startswith("seedsweep.agents."):
            rel = name.split(".", 2)[2].replace(".", os.sep)
            assert (root / "agents" / f"{rel}.py").is_file() or (root / "agents" / rel).is_dir()


def test_start_up_per_run_is_measured_and_small_from_the_warm_server(tmp_path):
    planned = plan(["agent=random", "env=cartpole", "seed=0,1,2", "steps=300", "eval.every=300",
                    "eval.episodes=1", f"results_dir={tmp_path}", "sweep=w"], multirun=True)
    workers.context("forkserver")
    outcome = workers.run_local(planned, 1, QUIET)
    assert set(outcome.process_s) == {p.run_id for p in planned}
    overhead = sorted(took - loop for took, loop in outcome.process_s.values())
    assert all(x > 0 for x in overhead)
    # a fresh interpreter importing torch alone takes over a second here; 1 s is a loose
    # bound that holds on a loaded machine (common practice, no source)
    assert overhead[1] < 1.0


def test_calibration_runs_side_by_side_in_forked_processes(tmp_path):
    planned = plan(["agent=random", "env=cartpole,acrobot", "seed=0", "steps=600",
                    "eval.every=600", "eval.episodes=3", f"results_dir={tmp_path}", "sweep=c"],
                   multirun=True)
    costs = workers.calibrate_in_workers(planned, 2)
    assert len(costs) == 2
    for c in costs:
        assert c.train_s > 0 and c.eval_s > 0
        assert 1 <= c.eval_length <= 500  # both envs' gymnasium spec: max_episode_steps 500
    assert not any(tmp_path.iterdir())  # calibration writes nothing into the sweep's folder


class ReportsThreads(Tidy):
    """Reports, as training scalars, the thread pools it computes with (torch's and BLAS's)."""

    def observe(self, step: Step) -> dict[str, float]:
        out = super().observe(step)
        blas = [pool["num_threads"] for pool in threadpool_info() if pool["user_api"] == "blas"]
        out["torch_threads"] = float(torch.get_num_threads())
        out["blas_threads_max"] = float(max(blas))
        return out


def test_set_compute_threads_limits_torch_and_every_blas_pool():
    before = torch.get_num_threads()
    try:
        set_compute_threads(1)
        blas = [p for p in threadpool_info() if p["user_api"] == "blas"]
        assert blas, "numpy links a BLAS that threadpoolctl can see"
        assert torch.get_num_threads() == 1
        assert all(p["num_threads"] == 1 for p in blas)
    finally:
        torch.set_num_threads(before)


def test_a_run_process_computes_with_one_torch_and_one_blas_thread(tmp_path):
    """numpy's BLAS starts one thread per core for large enough products unless limited; two
    runs with two busy BLAS threads each on two cores took 258 s per 100k-step DQN run (batch
    128) instead of 48 s."""
    planned = plan(["agent=random", "agent.entry=tests.test_workers:ReportsThreads",
                    "env=cartpole", "seed=0", "steps=300", "eval.every=300", "eval.episodes=1",
                    "log.every=100", f"results_dir={tmp_path}", "sweep=t"], multirun=True)
    outcome = workers.run_local(planned, 1, QUIET)
    assert outcome.complete == 1
    with open(planned[0].run_dir / "scalars.csv") as f:
        seen = {(r["key"], float(r["value"])) for r in csv.DictReader(f)
                if r["key"] in ("torch_threads", "blas_threads_max")}
    assert seen == {("torch_threads", 1.0), ("blas_threads_max", 1.0)}


def _kill_server_once_running(planned, give_up: float, killed: list) -> None:
    while time.monotonic() < give_up:
        docs = [records.read_run_json(p.run_dir) or {} for p in planned]
        if all(d.get("status") == "running" for d in docs):
            os.kill(mp_forkserver._forkserver._forkserver_pid, signal.SIGKILL)
            killed.append(True)
            return
        time.sleep(0.02)


def test_runs_outlive_a_killed_run_server_and_later_runs_start_from_a_new_one(tmp_path):
    """The runs of a sweep are forked from one server process; if it dies (the OOM killer,
    a stray kill), its running children go on, and the sweep must wait for them rather than
    read the lost exit code as a failure (multiprocessing reports 255)."""
    workers.context()
    planned = plan(["agent=random", "env=cartpole", "seed=0,1,2", "steps=300000",
                    "eval.every=300000", "eval.episodes=1", f"results_dir={tmp_path}",
                    "sweep=k"], multirun=True)
    killed: list = []
    killer = threading.Thread(target=_kill_server_once_running,
                              args=(planned[:2], time.monotonic() + 60, killed))
    killer.start()
    outcome = workers.run_local(planned, 2, QUIET)
    killer.join()
    assert killed, "the server was killed while the first two runs were running"
    assert outcome.failed == [] and outcome.complete == 3
    for p in planned:
        assert records.read_run_json(p.run_dir)["status"] == "complete"
