"""Faults and hostile results folders: planted or foreign checkpoints, a folder that stops
taking writes, a status probe at the wrong moment, leftovers of killed writes, damaged
checkpoints, and report and compare reading the same folder the same way.

Check values: what the OS and libraries do -- pickle calls the callable a ``__reduce__``
names when it loads (the Python docs, pickle, "Pickling Class Instances"), an OS file lock
(flock) taken through one open file excludes another open of the same file even in one
process (flock(2)), ``torch.load`` warns "Detected pickle protocol ..." when the protocol
byte of ``data.pkl`` is not 2 (seen with torch 2.13; the byte after the PROTO opcode 0x80,
pickletools docs); the rest are the project's own rules (one line, nothing lost). The
folder that stops taking writes is simulated in-process with a write that raises
PermissionError (these tests may run as root, which ignores file modes), in the parent of a
real two-process sweep and inside one run.
"""

from __future__ import annotations

import hashlib
import io
import json
import pickle
import threading
import time
import warnings
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
from filelock import FileLock
from seedsweep.configs.checks import ConfigError
from seedsweep.envs import snapshot
from seedsweep.runner.commands.main import main
from seedsweep.runner.execution import checkpoints, records
from seedsweep.runner.execution.config import compose
from seedsweep.runner.execution.prepare import prepare
from seedsweep.runner.execution.run import binding, execute
from seedsweep.runner.launch import slurm, status, sweep

from tests.test_compare import make_sweep

RUN = ["agent=random", "steps=200", "eval.every=100", "eval.episodes=2", "checkpoint.every=50",
       "--progress=quiet"]


def prepared(tmp_path: Path, *extra: str):
    overrides = [o for o in RUN if not o.startswith("--")]
    return prepare(compose([*overrides, *extra, f"results_dir={tmp_path}"]))


def plant(run_dir: Path, data: bytes, step: int = 100, digest: bool = True) -> Path:
    """A checkpoint file with a digest that matches it, as anyone who can write the folder
    can make; the run's record says it was interrupted."""
    folder = run_dir / checkpoints.FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"ckpt-{step:012d}.pt"
    path.write_bytes(data)
    if digest:
        path.with_suffix(".sha256").write_text(hashlib.sha256(data).hexdigest() + "\n")
    if not (run_dir / "run.json").exists():
        (run_dir / "run.json").write_text(json.dumps({"run_id": run_dir.name,
                                                      "status": "running"}))
    return path


class Planted:
    """Unpickling this calls ``open(marker, "w")``: the file appears if the pickle ran."""

    def __init__(self, marker: Path):
        self.marker = marker

    def __reduce__(self):
        return (open, (str(self.marker), "w"))


def warning_lines(err: str) -> list[str]:
    return [ln for ln in err.splitlines() if "warning" in ln]


# -- security: nothing in a results folder runs code -----------------------------------------
def test_planted_pickles_with_valid_digests_are_refused_and_nothing_runs(tmp_path, capsys):
    p = prepared(tmp_path)
    marker = tmp_path / "planted-code-ran"
    # 1. the whole checkpoint file is a pickle that runs code when loaded
    evil = pickle.dumps({"agent": Planted(marker)})
    assert pickle.loads(evil) is not None and marker.exists()  # the pickle works as planted
    marker.unlink()
    plant(p.run_dir, evil, step=150)
    # 2. bound to this very run (run id and config digest are not secrets), with the env
    #    state as the pickled bytes checkpoints of format 1 held
    blob = torch.frombuffer(bytearray(pickle.dumps([Planted(marker)])), dtype=torch.uint8)
    probe = gym.make("CartPole-v1")
    agent = p.agent_cls(probe.observation_space, probe.action_space, p.agent_config, 0)
    envs = {"kind": "pickle", "envs": blob, "returns": torch.zeros(1),
            "lengths": torch.zeros(1, dtype=torch.int64), "raw_obs": torch.zeros(1, 4),
            "normalizer": None}
    state = {"agent": agent.state_dict(), "envs": envs, "loop": {}, "global_rngs": {}}
    second = plant(p.run_dir, checkpoints.to_bytes(binding(p), state), step=100)
    capsys.readouterr()
    code = main(["run", *RUN, f"results_dir={tmp_path}"])
    err = capsys.readouterr().err
    assert code == 0, err
    assert not marker.exists()
    warned = warning_lines(err)
    assert any("ckpt-000000000150.pt unusable (does not load (UnpicklingError" in w
               for w in warned), err
    assert any("cannot restore ckpt-000000000100.pt" in w and "kind 'pickle'" in w
               for w in warned), err
    assert not second.exists() and not second.with_suffix(".sha256").exists()
    doc = json.loads((p.run_dir / "run.json").read_text())
    assert doc["status"] == "complete" and doc["resumed_from"] is None


def test_env_snapshots_are_data_and_refuse_what_does_not_fit():
    """An env state is plain data put back into a freshly built env of the same class."""
    env = gym.make("CartPole-v1")
    env.reset(seed=3)
    env.step(0)
    saved = snapshot.capture(env)
    buf = io.BytesIO()
    torch.save(saved, buf)
    buf.seek(0)
    loaded = torch.load(buf, weights_only=True)  # tensors and plain values only
    fresh = gym.make("CartPole-v1")
    fresh.reset(seed=0)
    snapshot.restore(fresh, loaded)
    # the restored env continues exactly as the original (gymnasium's own dynamics)
    for a in (1, 1, 0, 1):
        assert all(np.array_equal(x, y) for x, y in zip(env.step(a)[:4], fresh.step(a)[:4],
                                                          strict=True))
    other = gym.make("Acrobot-v1")
    other.reset(seed=0)
    with pytest.raises(snapshot.SnapshotError, match="saved from a"):
        snapshot.restore(other, loaded)  # another env class
    forged = dict(loaded, attrs={**loaded["attrs"], "__class__": 1})
    with pytest.raises(snapshot.SnapshotError, match="no attribute '__class__'"):
        snapshot.restore(fresh, forged)
    inner = loaded
    while "env" in inner["attrs"]:  # down the wrapper chain to the CartPoleEnv itself
        inner = inner["attrs"]["env"]
    state = dict(inner["attrs"]["state"], dtype="|O8")  # object arrays are not data
    forged = {**inner, "attrs": {**inner["attrs"], "state": state}}
    with pytest.raises(snapshot.SnapshotError, match="dtype object"):
        snapshot.restore(fresh.unwrapped, forged)


def test_a_checkpoint_of_another_run_or_config_is_refused(tmp_path):
    a, b = prepared(tmp_path, "seed=0"), prepared(tmp_path, "seed=1")
    state = {"agent": {"x": torch.zeros(2)}, "loop": {"env_steps": 7}}
    data = checkpoints.to_bytes(binding(a), state)
    assert checkpoints.from_bytes(data, binding(a))["loop"] == {"env_steps": 7}
    with pytest.raises(checkpoints.UnusableCheckpoint, match=f"belongs to run '{a.run_id}'"):
        checkpoints.from_bytes(data, binding(b))
    other_config = checkpoints.Binding(a.run_id, "0" * 64)  # same id, other config digest
    with pytest.raises(checkpoints.UnusableCheckpoint, match="another config"):
        checkpoints.from_bytes(data, other_config)
    copied = plant(b.run_dir, data)  # a.'s checkpoint copied into b.'s folder
    with pytest.raises(checkpoints.UnusableCheckpoint, match="belongs to run"):
        checkpoints.load(copied, binding(b))
    assert checkpoints.load_latest(b.run_dir, binding(b)) is None


def test_torch_warning_on_a_damaged_header_is_one_line(tmp_path, capsys):
    p = prepared(tmp_path)
    data = bytearray(checkpoints.to_bytes(binding(p), {"agent": {}, "loop": {}}))
    proto = data.index(b"\x80\x02")  # PROTO 2, the first bytes of data.pkl
    data[proto + 1] = 0xFD  # protocol 253
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(checkpoints.UnusableCheckpoint, match="torch warned"):
            checkpoints.from_bytes(bytes(data), binding(p))
    assert caught == []  # nothing escapes to be printed over several lines
    plant(p.run_dir, bytes(data))
    capsys.readouterr()
    assert main(["run", *RUN, f"results_dir={tmp_path}"]) == 0
    err = capsys.readouterr().err
    about = [ln for ln in err.splitlines() if "ckpt-000000000100.pt" in ln]
    assert len(about) == 1 and "Detected pickle protocol 253" in about[0], err
    assert "please file an issue" not in err and "Traceback" not in err


def test_a_checkpoint_that_fails_to_restore_loses_its_digest_too(tmp_path, capsys):
    p = prepared(tmp_path)
    state = {"agent": {"not": "the random agent's state"}, "loop": {}, "global_rngs": {},
             "envs": {}}
    path = plant(p.run_dir, checkpoints.to_bytes(binding(p), state))
    assert main(["run", *RUN, f"results_dir={tmp_path}"]) == 0
    assert "cannot restore ckpt-000000000100.pt" in capsys.readouterr().err
    assert not path.exists() and not path.with_suffix(".sha256").exists()


# -- a folder that stops taking writes ---------------------------------------------------------
def refuse_records(monkeypatch, names: tuple[str, ...]) -> None:
    """From now on, writes of these record files fail as on a read-only folder."""
    real = records.atomic_write_bytes

    def write(path, data):
        if Path(path).name in names:
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, data)

    monkeypatch.setattr(records, "atomic_write_bytes", write)


def test_parent_of_a_sweep_survives_a_folder_that_turned_read_only(tmp_path, capsys,
                                                                   monkeypatch):
    """A worker dies (SIGKILL) and the parent can no longer write its failure: one line for
    that run, the usual summary, exit 1, and the records on disk as the worker left them."""
    entries = "tests.broken_agents:KillsItself,tests.broken_agents:Healthy"
    refuse_records(monkeypatch, ("run.json", "error.log"))  # the workers are other processes
    code = main(["run", "-m", "agent=random", f"agent.entry={entries}", "+agent.fail_at=150",
                 "steps=300", "eval.every=100", "eval.episodes=2", "workers=2",
                 f"results_dir={tmp_path}", "sweep=ro", "--no-estimate", "--progress=lines"])
    err = capsys.readouterr().err
    assert code == 1, err
    assert "Traceback" not in err
    cannot = [ln for ln in err.splitlines() if "cannot record its failure" in ln]
    assert len(cannot) == 1 and "Permission denied" in cannot[0], err
    assert "sweep ro: 1/2 complete, 1 failed" in err
    docs = {p.parent.name: json.loads(p.read_text()) for p in (tmp_path / "ro").glob("*/run.json")}
    assert sorted(d["status"] for d in docs.values()) == ["complete", "running"]


def test_a_run_whose_folder_turns_read_only_fails_in_one_line_keeping_its_records(
        tmp_path, capsys, monkeypatch):
    p = prepared(tmp_path)
    real = records.atomic_write_bytes
    seen = {"evals": 0}

    def write(path, data):  # the first evaluation's records go through, then nothing
        if Path(path).name == "run.json" and b'"env_steps": 100' in data:
            seen["evals"] += 1
        elif seen["evals"]:
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, data)

    monkeypatch.setattr(records, "atomic_write_bytes", write)
    code = main(["run", *RUN, f"results_dir={tmp_path}"])
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err, err
    assert any("cannot record how the run ended" in ln for ln in err.splitlines()), err
    assert any(f"run {p.run_id} failed: PermissionError" in ln for ln in err.splitlines()), err
    doc = json.loads((p.run_dir / "run.json").read_text())  # the last good record, whole
    assert doc["status"] == "running" and doc["env_steps"] == 100


# -- status never displaces a run -------------------------------------------------------------
def test_a_status_probe_neither_blocks_nor_displaces_a_starting_run(tmp_path):
    p = prepared(tmp_path, "checkpoint.every=0")
    p.run_dir.mkdir(parents=True)
    held = threading.Event()

    def probe_holding_the_lock():  # what status's probe does, stretched to 0.5 s
        lock = FileLock(str(p.run_dir / ".lock"), timeout=0)
        lock.acquire()
        held.set()
        time.sleep(0.5)
        lock.release()

    thread = threading.Thread(target=probe_holding_the_lock)
    thread.start()
    held.wait(5)
    t0 = time.perf_counter()
    assert status._locked(p.run_dir) is True  # another holder: seen at once, not waited for
    assert time.perf_counter() - t0 < 0.3
    doc = execute(p)  # starts while the "probe" still holds the lock: it waits, then runs
    thread.join()
    assert doc["status"] == "complete"
    assert status._locked(p.run_dir) is False


# -- leftovers of killed writes ---------------------------------------------------------------
def test_leftover_temp_files_are_removed_on_the_next_launch(tmp_path):
    p = prepared(tmp_path)
    leftovers = [p.run_dir / ".run.json.k2j3h4.tmp", p.run_dir / ".eval.csv.a8s7d6.tmp",
                 p.run_dir / checkpoints.FOLDER / ".ckpt-000000000050.pt.x9y8z7.tmp"]
    for f in leftovers:
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_bytes(b"half a write")
    keep = p.run_dir / "notes.tmp"  # not one of ours (no leading dot): left alone
    keep.write_text("mine")
    (p.run_dir / "run.json").write_text(json.dumps({"run_id": p.run_id, "status": "running"}))
    assert execute(p)["status"] == "complete"
    assert not any(f.exists() for f in leftovers) and keep.read_text() == "mine"
    folder = p.run_dir.parent
    stale = folder / ".sweep.json.q1w2e3.tmp"
    stale.write_bytes(b"{")
    sweep.write_manifest(folder, [p], ["agent=random"])
    assert not stale.exists() and json.loads((folder / "sweep.json").read_text())["runs"]


# -- report and compare agree ---------------------------------------------------------------------
def test_report_and_compare_treat_a_mismatched_random_run_alike(tmp_path, capsys):
    folder = make_sweep(tmp_path, seeds=4)
    odd = sorted(folder.glob("random-cartpole-s0-*"))[0]
    doc = json.loads((odd / "run.json").read_text())
    doc["eval"]["deterministic"] = False  # measured under another evaluation protocol
    (odd / "run.json").write_text(json.dumps(doc))
    assert main(["report", str(folder), "--resamples", "200", "--no-figures", "--quiet"]) == 0
    assert main(["compare", str(folder), "--candidate", "strong", "--resamples", "200",
                 "--quiet"]) == 0
    capsys.readouterr()
    reported = json.loads((folder / "report" / "summary.json").read_text())["excluded_runs"]
    compared = json.loads((folder / "report" / "compare.json").read_text())["excluded_runs"]
    mine = [[(e["run_id"], e["reason"]) for e in runs if e["run_id"] == odd.name]
            for runs in (reported, compared)]
    assert mine[0] == mine[1] and len(mine[0]) == 1
    assert "evaluation settings differ" in mine[0][0][1]


# -- submitit's pickled jobs stay out of the results folder -------------------------------------
def test_job_files_go_to_a_private_folder_outside_the_results(tmp_path, monkeypatch):
    monkeypatch.setenv("SEEDSWEEP_JOBS", str(tmp_path / "jobs"))
    results = tmp_path / "results" / "night1"
    results.mkdir(parents=True)
    folder = slurm.jobs_folder(results)
    assert results not in folder.parents and (tmp_path / "jobs") in folder.parents
    assert folder.parent.name.startswith("night1-")
    assert (tmp_path / "jobs").stat().st_mode & 0o077 == 0  # mkdir(mode=0o700)
    (tmp_path / "jobs").chmod(0o777)  # writable by anyone: refused
    with pytest.raises(ConfigError, match="writable by you only") as err:
        slurm.jobs_folder(results)
    assert err.value.field == "SEEDSWEEP_JOBS"


def test_a_public_job_folder_is_refused_before_the_sweep_writes_anything(tmp_path, monkeypatch,
                                                                         capsys):
    jobs = tmp_path / "jobs"
    jobs.mkdir(mode=0o700)
    jobs.chmod(0o777)  # writable by anyone: the pickled jobs could be replaced
    monkeypatch.setenv("SEEDSWEEP_JOBS", str(jobs))
    code = main(["run", "-m", "agent=random", "env=cartpole", "seed=0,1", "steps=200",
                 "sweep=sub", "--launcher", "submitit", f"results_dir={tmp_path / 'results'}"])
    err = capsys.readouterr().err
    assert code == 2 and "seedsweep: error: SEEDSWEEP_JOBS:" in err
    assert not (tmp_path / "results").exists()  # no sweep.json, no run folder
