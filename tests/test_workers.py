"""Run processes forked from the warm server: same bytes as a fresh interpreter, the parent's
current folder and environment, one torch thread, and start-up measured from outside."""

import os
from pathlib import Path

import numpy as np
import pytest
from seedsweep.runner.launch import workers
from seedsweep.runner.launch.plan import plan
from seedsweep.runner.launch.sweep import SweepOptions

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
