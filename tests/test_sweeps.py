"""Sweeps that survive the night: parallel workers, skip, resume, locks, failure isolation."""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from seedsweep.runner.commands.main import main
from seedsweep.runner.launch.plan import plan

ROOT = Path(__file__).resolve().parent.parent
FAST = ["steps=600", "eval.every=300", "eval.episodes=2", "--no-estimate", "--progress=lines"]


def run_cli(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "seedsweep.runner.commands.main", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=600)


def statuses(folder: Path) -> dict[str, str]:
    return {p.parent.name: json.loads(p.read_text())["status"] for p in folder.glob("*/run.json")}


def test_plan_is_seed_major_and_checks_everything_first():
    planned = plan(["agent=dqn,random", "env=cartpole,acrobot", "seed=0,1,2"], multirun=True)
    assert [p.config["seed"] for p in planned] == [0] * 4 + [1] * 4 + [2] * 4
    assert {(p.config["agent"]["name"], p.env.name) for p in planned[:4]} == {
        ("dqn", "cartpole"), ("dqn", "acrobot"), ("random", "cartpole"), ("random", "acrobot")}


def test_parallel_sweep_then_same_command_skips_everything(tmp_path, capsys):
    args = ["run", "-m", "agent=random", "env=cartpole,acrobot", "seed=0,1", "workers=2",
            f"results_dir={tmp_path}", "sweep=s", *FAST]
    assert main(args) == 0
    folder = tmp_path / "s"
    assert set(statuses(folder).values()) == {"complete"} and len(statuses(folder)) == 4
    stamps = {p: p.stat().st_mtime_ns for p in folder.glob("*/*.csv")}
    capsys.readouterr()
    assert main(args) == 0
    assert "4 complete, 0 failed" in capsys.readouterr().err
    assert stamps == {p: p.stat().st_mtime_ns for p in folder.glob("*/*.csv")}  # untouched


def test_failures_are_isolated_and_retry_failed_reruns_only_them(tmp_path, capsys):
    entries = ",".join(f"tests.broken_agents:{c}" for c in ("Raises", "NaNLoss", "KillsItself",
                                                             "Healthy"))
    args = ["run", "-m", "agent=random", f"agent.entry={entries}", "+agent.fail_at=300",
            "workers=2", f"results_dir={tmp_path}", "sweep=f", *FAST]
    assert main(args) == 1  # the sweep's exit status says something failed
    err = capsys.readouterr().err
    assert "deliberate failure" in err and "loss is nan" in err and "died (SIGKILL)" in err
    folder = tmp_path / "f"
    runs = {json.loads((p / "config.yaml").parent.joinpath("run.json").read_text())["status"]
            for p in folder.iterdir() if p.is_dir() and not p.name.startswith("_")}
    assert runs == {"complete", "failed"}
    healthy = [p for p in folder.glob("*/run.json")
               if json.loads(p.read_text())["status"] == "complete"]
    assert len(healthy) == 1
    before = healthy[0].stat().st_mtime_ns
    for log in folder.glob("*/error.log"):
        assert log.read_text().strip()
    capsys.readouterr()
    assert main([*args, "--retry-failed"]) == 1  # they fail again, deterministically
    err = capsys.readouterr().err
    assert "3 to run" in err
    assert healthy[0].stat().st_mtime_ns == before


def _kill_after(args, folder: Path, checkpoints: int, sig=signal.SIGKILL,
                ignore_sigint: bool = False) -> int:
    """Start a real run process and kill it once it has written `checkpoints` checkpoints.
    ``ignore_sigint``: start it as `cmd &` in a script would (SIGINT ignored, inherited)."""
    def background():
        signal.signal(signal.SIGINT, signal.SIG_IGN)

    proc = subprocess.Popen([sys.executable, "-m", "seedsweep.runner.commands.main", *args],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            preexec_fn=background if ignore_sigint else None)
    deadline = time.monotonic() + 240
    seen = set()
    while time.monotonic() < deadline and proc.poll() is None:
        seen |= {p.name for p in folder.glob("*/checkpoints/ckpt-*.pt")}
        if len(seen) >= checkpoints:
            break
        time.sleep(0.02)
    if proc.poll() is None:
        os.kill(proc.pid, sig)
    return proc.wait()


@pytest.mark.parametrize("extra", [
    # the env's whole state saved as plain data (envs/snapshot.py)
    ["agent=dqn", "env=cartpole", "agent.replay_warmup_steps=200"],
    # box2d envs keep state in C objects: snapshots at episode ends (short episodes: frequent)
    ["agent=dqn", "env=lunarlander", "env.max_episode_steps=150", "agent.replay_warmup_steps=200"],
    ["agent=actor_critic", "env=cartpole"],  # 8 envs in gymnasium's sync vector env
    # 8 box2d envs: each env's episode so far, replayed on resume (envs/replay.py)
    ["agent=actor_critic", "env=lunarlander"],
    # the observation normaliser's statistics are saved and restored with the envs
    ["agent=reinforce", "env=mountaincar_continuous"],
    ["agent=actor_critic", "env=mountaincar_continuous"],
], ids=["plain-data-envs", "reset-snapshots", "vector-envs", "replayed-vector-envs",
        "normalized-obs-one-env",
        "normalized-obs-vector-envs"])
def test_sigkilled_run_resumes_to_byte_identical_eval_csv(tmp_path, extra):
    base = ["run", *extra, "steps=3000", "eval.every=500", "eval.episodes=2",
            "checkpoint.every=400", "--progress=quiet"]
    assert run_cli(*base, f"results_dir={tmp_path}", "sweep=ref").returncode == 0
    folder = tmp_path / "killed"
    for k in (1, 2, 3):  # kill after 1, 2 and 3 checkpoints: resumes from different points
        _kill_after([*base, f"results_dir={tmp_path}", "sweep=killed"], folder, k)
    (run_dir,) = [p for p in folder.iterdir() if p.is_dir()]
    assert json.loads((run_dir / "run.json").read_text())["status"] == "running"
    done = run_cli(*base, f"results_dir={tmp_path}", "sweep=killed")
    assert done.returncode == 0, done.stderr
    assert "resuming from env step" in done.stderr
    (ref,) = [p for p in (tmp_path / "ref").iterdir() if p.is_dir()]
    assert (run_dir / "eval.csv").read_bytes() == (ref / "eval.csv").read_bytes()
    assert (run_dir / "train.csv").read_bytes() == (ref / "train.csv").read_bytes()


def test_sigterm_leaves_the_run_resumable_without_retry(tmp_path):
    """SIGTERM (what SLURM sends before it kills a job) records an interruption, not a failure."""
    base = ["run", "agent=dqn", "env=cartpole", "agent.replay_warmup_steps=200", "steps=2400",
            "eval.every=400", "eval.episodes=2", "checkpoint.every=300", "--progress=quiet",
            f"results_dir={tmp_path}"]
    code = _kill_after(base, tmp_path / "default", 2, sig=signal.SIGTERM)
    assert code == 130  # the CLI's exit status for an interruption
    (run_dir,) = [p for p in (tmp_path / "default").iterdir() if p.is_dir()]
    doc = json.loads((run_dir / "run.json").read_text())
    assert doc["status"] == "running" and doc["interrupted"] and doc["error"] is None
    done = run_cli(*base)
    assert done.returncode == 0 and "resuming from env step" in done.stderr


def test_corrupt_checkpoint_falls_back_to_the_previous_one(tmp_path):
    base = ["run", "agent=dqn", "env=cartpole", "agent.replay_warmup_steps=200", "steps=2400",
            "eval.every=400", "eval.episodes=2", "checkpoint.every=300", "--progress=quiet"]
    assert run_cli(*base, f"results_dir={tmp_path}", "sweep=ref").returncode == 0
    folder = tmp_path / "c"
    _kill_after([*base, f"results_dir={tmp_path}", "sweep=c"], folder, 3)
    newest = sorted(folder.glob("*/checkpoints/ckpt-*.pt"))[-1]
    newest.write_bytes(newest.read_bytes()[: newest.stat().st_size // 2])  # truncate it
    done = run_cli(*base, f"results_dir={tmp_path}", "sweep=c")
    assert done.returncode == 0, done.stderr
    assert f"checkpoint {newest.name} unusable" in done.stderr
    (ref,) = [p for p in (tmp_path / "ref").iterdir() if p.is_dir()]
    (run_dir,) = [p for p in folder.iterdir() if p.is_dir()]
    assert (run_dir / "eval.csv").read_bytes() == (ref / "eval.csv").read_bytes()


def test_lock_keeps_a_run_single_and_a_dead_holder_releases_it(tmp_path):
    from seedsweep.runner.execution.config import compose
    from seedsweep.runner.execution.prepare import prepare
    from seedsweep.runner.execution.run import RunBusy, execute

    p = prepare(compose(["agent=random", "steps=200", "eval.every=100", "eval.episodes=1",
                         f"results_dir={tmp_path}"]))
    p.run_dir.mkdir(parents=True)
    holder = subprocess.Popen([sys.executable, "-c", (
        "import sys, time; from filelock import FileLock; "
        f"l = FileLock({str(p.run_dir / '.lock')!r}); l.acquire(); print('held', flush=True); "
        "time.sleep(600)")], stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    with pytest.raises(RunBusy):
        execute(p)
    holder.send_signal(signal.SIGKILL)  # a crash: nobody releases the lock by hand
    holder.wait()
    assert execute(p)["status"] == "complete"


def test_status_reads_the_folder(tmp_path, capsys):
    entries = "tests.broken_agents:Raises,tests.broken_agents:Healthy"
    main(["run", "-m", "agent=random", f"agent.entry={entries}", "+agent.fail_at=300",
          "workers=2", f"results_dir={tmp_path}", "sweep=st", *FAST])
    doc = json.loads((tmp_path / "st" / "sweep.json").read_text())
    doc["runs"]["random-cartpole-s9-0000000000"] = {"steps": 600}  # planned, never started
    (tmp_path / "st" / "sweep.json").write_text(json.dumps(doc))
    capsys.readouterr()
    assert main(["status", str(tmp_path / "st")]) == 0
    out = capsys.readouterr().out
    assert "1 done, 0 running, 0 interrupted, 1 failed, 1 pending" in out
    assert "deliberate failure" in out


@pytest.mark.parametrize("args,message", [
    (["seed=range(0)"], "seed: the sweep over this key is empty"),
    (["seed=0,0"], "seed: two sweep points give the same run"),
    (["seed=0,1", "workers=0"], "workers: must be >= 1"),
    (["--plan", "nosuch"], "--plan: no plan 'nosuch'"),
])
def test_bad_sweep_input(args, message, tmp_path, capsys):
    assert main(["run", "-m", f"results_dir={tmp_path}", *FAST, *args]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and message in err, err
    assert not any(tmp_path.iterdir())


def test_folder_of_another_code_version_is_refused(tmp_path, capsys):
    run_dir = tmp_path / "old" / "random-cartpole-s0-abc"
    run_dir.mkdir(parents=True)
    doc = {"status": "complete", "provenance": {"code_version": "000000000000"}}
    (run_dir / "run.json").write_text(json.dumps(doc))
    args = ["run", "-m", "agent=random", "seed=0,1", f"results_dir={tmp_path}", "sweep=old", *FAST]
    assert main(args) == 2
    assert "code version 000000000000" in capsys.readouterr().err
    assert sorted(p.name for p in (tmp_path / "old").iterdir()) == [run_dir.name]
    assert json.loads((run_dir / "run.json").read_text()) == doc  # nothing overwritten
    assert main([*args, "--allow-mixed-code"]) == 0


def test_plan_file_runs_its_plan(tmp_path, capsys):
    plan_file = tmp_path / "tiny.yaml"
    plan_file.write_text("name: tiny\nversion: 2\nagents: [random]\nenvs: [cartpole, acrobot]\n"
                         "seeds: range(2)\nsteps: 400\n"
                         "overrides: [eval.every=200, eval.episodes=1]\n")
    assert main(["run", "--plan", str(plan_file), f"results_dir={tmp_path}", "workers=2",
                 "--no-estimate", "--progress=quiet"]) == 0
    assert len(statuses(tmp_path / "tiny-v2")) == 4


def test_submitit_local_launcher_runs_the_same_sweep(tmp_path):
    done = run_cli("run", "-m", "agent=random", "seed=0,1", f"results_dir={tmp_path}",
                   "sweep=sub", "--launcher", "submitit", "--timeout-min", "5", *FAST)
    assert done.returncode == 0, done.stderr
    assert set(statuses(tmp_path / "sub").values()) == {"complete"}
    assert len(statuses(tmp_path / "sub")) == 2


@pytest.mark.parametrize("ignore_sigint", [False, True], ids=["foreground", "background"])
def test_sigterm_to_a_sweep_interrupts_its_runs_and_leaves_none_behind(tmp_path,
                                                                      ignore_sigint):
    """A scheduler or `kill` sends SIGTERM to the sweep's process only: its runs are stopped
    resumably with it, not left running as orphans -- also when the sweep was started in the
    background by a script, where SIGINT is ignored."""
    base = ["run", "-m", "agent=dqn", "env=cartpole", "seed=0,1", "agent.replay_warmup_steps=200",
            "steps=20000", "eval.every=400", "eval.episodes=2", "checkpoint.every=300",
            "--workers", "2", "--progress=quiet", f"results_dir={tmp_path}", "sweep=t"]
    code = _kill_after(base, tmp_path / "t", 2, sig=signal.SIGTERM, ignore_sigint=ignore_sigint)
    assert code == 130
    time.sleep(1)
    docs = [json.loads(p.read_text()) for p in (tmp_path / "t").glob("*/run.json")]
    assert docs and all(d["status"] == "running" and d["interrupted"] for d in docs)
    stamps = {p: p.stat().st_mtime_ns for p in (tmp_path / "t").glob("*/eval.csv")}
    time.sleep(2)  # an orphaned run would still be writing its records
    assert {p: p.stat().st_mtime_ns for p in stamps} == stamps
