"""A short real run through the CLI: every record exists, parses, and is reproducible."""

import csv
import json
from pathlib import Path

import pytest
import torch
import yaml
from seedsweep.runner.commands.main import main
from seedsweep.runner.launch.api import run
from seedsweep.runner.launch.plan import plan

SHORT = ["agent=dqn", "env=cartpole", "steps=1500", "eval.every=500", "eval.episodes=3",
         "agent.replay_warmup_steps=200", "log.every=250", "--progress=quiet"]
RUN_KEYS = {"run_id", "agent", "env", "seed", "status", "env_steps", "final_score", "wall_s",
            "started", "finished", "error", "provenance"}
PROVENANCE_KEYS = {"git_commit", "git_dirty", "python", "torch", "gymnasium", "numpy", "cpu",
                   "hostname"}


def only_run(root: Path) -> Path:
    (sweep,) = list(root.iterdir())
    (run_dir,) = list(sweep.iterdir())
    return run_dir


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("results")
    assert main(["run", *SHORT, f"results_dir={root}", "sweep=e2e", "seed=4"]) == 0
    return only_run(root)


def test_run_json_is_complete(run_dir):
    doc = json.loads((run_dir / "run.json").read_text())
    assert RUN_KEYS <= set(doc) and PROVENANCE_KEYS <= set(doc["provenance"])
    assert doc["status"] == "complete" and doc["error"] is None
    got = (doc["agent"], doc["env"], doc["seed"], doc["env_steps"])
    assert got == ("dqn", "CartPole-v1", 4, 1500)
    assert doc["run_id"] == run_dir.name


def test_eval_csv_rows_follow_the_protocol(run_dir):
    rows = list(csv.DictReader((run_dir / "eval.csv").open()))
    assert list(rows[0]) == ["env_step", "episode", "return", "discounted_return", "length",
                             "episode_seed"]
    assert [int(r["env_step"]) for r in rows] == [500] * 3 + [1000] * 3 + [1500] * 3
    doc = json.loads((run_dir / "run.json").read_text())
    assert [int(r["episode_seed"]) for r in rows[:3]] == doc["seeds"]["eval_episodes"]
    for r in rows:
        # CartPole-v1: +1 per step, at most 500 steps (gymnasium env spec), so return = length
        assert float(r["return"]) == int(r["length"]) <= 500
        assert float(r["discounted_return"]) <= float(r["return"])
    last = [float(r["return"]) for r in rows[-3:]]
    assert doc["final_score"] == pytest.approx(sum(last) / 3)


def test_train_and_scalar_logs(run_dir):
    train = list(csv.DictReader((run_dir / "train.csv").open()))
    assert train and set(train[0]) == {"env_step", "return", "length"}
    assert sum(int(r["length"]) for r in train) <= 1500
    scalars = list(csv.DictReader((run_dir / "scalars.csv").open()))
    keys = {r["key"] for r in scalars}
    assert {"loss", "epsilon", "steps_per_s"} <= keys


AGENT_CONFIGS = Path(__file__).resolve().parent.parent / "configs" / "agent"
PER_ENV = [(path.stem, env, values)
           for path in sorted(AGENT_CONFIGS.glob("*.yaml"))
           for env, values in (yaml.safe_load(path.read_text()).get("per_env") or {}).items()]


@pytest.mark.parametrize("agent,env,values", PER_ENV, ids=[f"{a}-{e}" for a, e, _ in PER_ENV])
def test_every_shipped_per_env_setting_reaches_the_run_config(agent, env, values, tmp_path):
    """A per-env entry under a misspelt env name would never apply: each one must name a
    shipped env config and show up in the resolved config of a run on that env."""
    assert (AGENT_CONFIGS.parent / "env" / f"{env}.yaml").is_file(), env
    (planned,) = plan([f"agent={agent}", f"env={env}", f"results_dir={tmp_path}"])
    resolved = planned.config["agent"]
    assert {k: resolved[k] for k in values} == values
    assert "per_env" not in resolved


def test_config_checkpoint_and_tensorboard(run_dir):
    cfg = yaml.safe_load((run_dir / "config.yaml").read_text())
    # 0.00025: per_env.cartpole in configs/agent/dqn.yaml
    assert cfg["agent"]["lr"] == 0.00025 and cfg["env"]["id"] == "CartPole-v1"
    state = torch.load(run_dir / "checkpoint.pt", weights_only=True)
    assert {"agent", "loop"} <= set(state) and "q" in state["agent"]
    from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

    acc = EventAccumulator(str(run_dir / "tb"))
    acc.Reload()
    assert "eval/mean_return" in acc.Tags()["scalars"]
    assert not list(run_dir.glob(".*.tmp"))  # no temp file left by the atomic writes


def test_same_config_and_seed_give_identical_eval_csv(run_dir, tmp_path):
    assert main(["run", *SHORT, f"results_dir={tmp_path}", "sweep=e2e", "seed=4"]) == 0
    again = only_run(tmp_path)
    assert again.name == run_dir.name  # the folder name derives from the config
    assert (again / "eval.csv").read_bytes() == (run_dir / "eval.csv").read_bytes()


def test_other_seed_gives_other_folder_and_episodes(run_dir, tmp_path):
    assert main(["run", *SHORT, f"results_dir={tmp_path}", "sweep=e2e", "seed=5"]) == 0
    other = only_run(tmp_path)
    assert other.name != run_dir.name
    assert (other / "eval.csv").read_bytes() != (run_dir / "eval.csv").read_bytes()


@pytest.mark.parametrize("env", ["acrobot", "mountaincar", "lunarlander", "frozenlake",
                                 "cliffwalking"])
def test_every_shipped_discrete_env_runs(env, tmp_path):
    d = run([f"env={env}", "agent=dqn", "steps=300", "eval.every=300", "eval.episodes=1",
             "agent.replay_warmup_steps=100"], results_dir=str(tmp_path))
    assert json.loads((d / "run.json").read_text())["status"] == "complete"


def test_multirun_runs_each_point(tmp_path, capsys):
    code = main(["run", "-m", "agent=random", "seed=0,1,2", "steps=200", "eval.every=100",
                 "eval.episodes=2", f"results_dir={tmp_path}", "sweep=m", "--progress=quiet"])
    assert code == 0
    runs = sorted(p.name for p in (tmp_path / "m").iterdir() if p.is_dir())
    assert [r.split("-")[2] for r in runs] == ["s0", "s1", "s2"]


def test_gradient_clipping_can_be_switched_off(tmp_path):
    d = run(["agent=actor_critic", "agent.grad_clip_norm=null", "steps=400", "eval.every=400",
             "eval.episodes=1"], results_dir=str(tmp_path))
    assert json.loads((d / "run.json").read_text())["status"] == "complete"
