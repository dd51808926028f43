"""Integration: submitit and hydra's submitit launcher against a real one-node SLURM.

The cluster is installed (apt-get, if missing) and started by the module fixture; tests
skip only where it cannot be had at all (not Linux, not root, no apt-get).
Check values come from Slurm itself: sbatch(1) "OUTPUT ENVIRONMENT VARIABLES" for
SLURM_JOB_ID / SLURM_ARRAY_JOB_ID / SLURM_ARRAY_TASK_ID / SLURMD_NODENAME in a job,
sacct(1) "JOB STATE CODES" for COMPLETED / FAILED, and submitit's job ids for arrays
("<array id>_<task id>").
"""

from __future__ import annotations

import json
import os
import pickle
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import cloudpickle
import pytest
import submitit

try:  # pytest puts the rootdir-less tests/ folder itself on sys.path
    from slurm.cluster import LocalSlurm, available
    from slurm.procs import marked_pids, port_free
except ModuleNotFoundError:  # tests/ turned into a package: the repo root is on sys.path
    from tests.slurm.cluster import LocalSlurm, available
    from tests.slurm.procs import marked_pids, port_free

pytestmark = [pytest.mark.slurm, pytest.mark.timeout(900)]

HYDRA_APP = Path(__file__).parent / "slurm" / "hydra_app.py"
JOB_TIMEOUT_S = 120.0


@pytest.fixture(scope="module")
def local_slurm() -> Iterator[LocalSlurm]:
    """One cluster for the module; after it, no process of it and none of its ports remain."""
    ok, reason = available()
    if not ok:
        pytest.skip(reason)
    cluster = LocalSlurm()
    with cluster:
        root = cluster.layout.root
        yield cluster
    print(f"LocalSlurm timings: {cluster.timings}")
    assert marked_pids(root) == []
    assert cluster.leftovers == [], "processes outlived the daemons and had to be ended"
    assert all(port_free(port) for port in cluster.ports.values())
    assert not root.exists()


@pytest.fixture()
def jobs_pickled_by_value() -> Iterator[None]:
    """Ship this module's job functions inside the pickle: the job cannot import tests/."""
    module = sys.modules[__name__]
    cloudpickle.register_pickle_by_value(module)
    try:
        yield
    finally:
        cloudpickle.unregister_pickle_by_value(module)


def record_slurm_view(out_dir: str, index: int) -> dict[str, str | int | None]:
    """Job body: write what SLURM told this job to ``out_dir`` and return it."""
    record = {
        "index": index,
        "cube": index**3,
        "slurm_job_id": os.environ.get("SLURM_JOB_ID"),
        "slurm_array_job_id": os.environ.get("SLURM_ARRAY_JOB_ID"),
        "slurm_array_task_id": os.environ.get("SLURM_ARRAY_TASK_ID"),
        "slurmd_nodename": os.environ.get("SLURMD_NODENAME"),
    }
    path = Path(out_dir) / f"job-{index}.json"
    tmp = path.with_name(f".{path.name}.tmp")
    with open(tmp, "w") as handle:
        handle.write(json.dumps(record, sort_keys=True))
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(tmp, path)
    return record


def die_without_result() -> None:
    """Job body that ends the process before submitit can write a result."""
    os._exit(7)


def wait_for_states(
    cluster: LocalSlurm, job_ids: list[str], wanted: str, timeout_s: float = 30.0
) -> dict[str, str]:
    """sacct states of ``job_ids`` once all equal ``wanted`` (the record lags the result)."""
    deadline = time.monotonic() + timeout_s
    while True:
        states = cluster.job_states()
        mine = {job_id: states.get(job_id) for job_id in job_ids}
        if all(state == wanted for state in mine.values()) or time.monotonic() > deadline:
            return mine
        time.sleep(0.5)


def test_submitit_batch_runs_on_local_slurm(
    local_slurm: LocalSlurm, tmp_path: Path, jobs_pickled_by_value: None
) -> None:
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    executor = local_slurm.executor(tmp_path / "submitit")  # fresh folder: ids restart at 1
    with executor.batch():
        jobs = [executor.submit(record_slurm_view, str(out_dir), index) for index in range(3)]
    local_slurm.wait_for_jobs(jobs, JOB_TIMEOUT_S)

    results = [job.result() for job in jobs]
    array_id = jobs[0].job_id.split("_")[0]
    for index, (job, result) in enumerate(zip(jobs, results, strict=True)):
        assert job.job_id == f"{array_id}_{index}"
        assert result["index"] == index
        assert result["cube"] == index**3
        assert result["slurm_array_job_id"] == array_id
        assert result["slurm_array_task_id"] == str(index)
        assert result["slurmd_nodename"] == local_slurm.node_name
        on_disk = json.loads((out_dir / f"job-{index}.json").read_text())
        assert on_disk == result
    assert len({result["slurm_job_id"] for result in results}) == 3  # one SLURM job per task
    states = wait_for_states(local_slurm, [job.job_id for job in jobs], "COMPLETED")
    assert states == {job.job_id: "COMPLETED" for job in jobs}


def test_job_dying_without_result_is_reported_not_awaited(
    local_slurm: LocalSlurm, tmp_path: Path, jobs_pickled_by_value: None
) -> None:
    """With accounting, submitit learns from sacct that the job failed instead of hanging."""
    executor = local_slurm.executor(tmp_path / "submitit")
    job = executor.submit(die_without_result)
    # submitit waits 15 s for a late result file (slow network file systems); ours is local.
    # The attribute is private; submitit's own tests set it the same way.
    job._results_timeout_s = 1
    local_slurm.wait_for_jobs([job], JOB_TIMEOUT_S)
    with pytest.raises(submitit.core.utils.UncompletedJobError, match="FAILED"):
        job.result()
    assert wait_for_states(local_slurm, [job.job_id], "FAILED") == {job.job_id: "FAILED"}


def test_hydra_submitit_launcher_sweep(local_slurm: LocalSlurm, tmp_path: Path) -> None:
    out_dir = tmp_path / "out"
    sweep_dir = tmp_path / "sweep"
    command = [
        sys.executable,
        str(HYDRA_APP),
        "--multirun",
        *local_slurm.hydra_launcher_overrides(),
        f"hydra.sweep.dir={sweep_dir}",
        f"out_dir={out_dir}",
        "x=1,2,3",
    ]
    began = time.monotonic()
    finished = subprocess.run(
        command,
        env=local_slurm.env(),
        capture_output=True,
        text=True,
        timeout=JOB_TIMEOUT_S + 60,
        stdin=subprocess.DEVNULL,
    )
    assert finished.returncode == 0, finished.stdout + finished.stderr
    print(f"hydra sweep of 3 jobs took {time.monotonic() - began:.1f} s")

    records = {x: json.loads((out_dir / f"x-{x}.json").read_text()) for x in (1, 2, 3)}
    array_ids = {record["slurm_array_job_id"] for record in records.values()}
    assert len(array_ids) == 1 and None not in array_ids  # one sbatch --array for the sweep
    for x, record in records.items():
        assert record["slurmd_nodename"] == local_slurm.node_name
        # hydra's job id is submitit's: "<array id>_<task id>"; task order follows x=1,2,3
        assert record["hydra_job_id"] == f"{record['slurm_array_job_id']}_{x - 1}"
        assert record["slurm_array_task_id"] == str(x - 1)

    # Return values travelled back through submitit's result pickles.
    returned = {}
    for result_file in sorted(sweep_dir.glob(".submitit/*/*_result.pkl")):
        outcome, job_return = pickle.loads(result_file.read_bytes())
        assert outcome == "success"
        returned[job_return.cfg["x"]] = job_return.return_value
    assert returned == {1: 1, 2: 4, 3: 9}


def test_seedsweep_sweep_runs_on_local_slurm(local_slurm: LocalSlurm, tmp_path: Path) -> None:
    """A real seedsweep sweep, one SLURM job per run; the same command again runs nothing."""
    params = local_slurm.submitit_params()
    root = Path(__file__).resolve().parent.parent
    command = [
        sys.executable, "-m", "seedsweep.runner.commands.main", "run", "-m", "agent=random",
        "env=cartpole",
        "seed=0,1,2", "steps=400", "eval.every=200", "eval.episodes=2",
        f"results_dir={tmp_path}", "sweep=cluster", "--launcher", "slurm",
        "--slurm", f"partition={params['slurm_partition']}",
        "--slurm", f"mem_gb={params['mem_gb']}", "--slurm", "timeout_min=5",
        "--timeout-min", "4", "--no-estimate", "--progress=lines",
    ]
    done = subprocess.run(command, env=local_slurm.env(), cwd=root, capture_output=True,
                          text=True, timeout=400, stdin=subprocess.DEVNULL)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "submitted 3 slurm job(s)" in done.stderr
    docs = [json.loads(p.read_text()) for p in (tmp_path / "cluster").glob("*/run.json")]
    assert len(docs) == 3 and {d["status"] for d in docs} == {"complete"}
    assert sorted(d["seed"] for d in docs) == [0, 1, 2]
    again = subprocess.run(command, env=local_slurm.env(), cwd=root, capture_output=True,
                           text=True, timeout=400, stdin=subprocess.DEVNULL)
    assert again.returncode == 0, again.stderr
    assert "3 complete, 0 failed" in again.stderr and "submitted" not in again.stderr
