"""Short real runs of the policy-gradient agents through the runner (runner.api.run)."""

from __future__ import annotations

import csv
import json

import gymnasium as gym
import pytest
import torch
from seedsweep.agents.actor_critic import ActorCritic
from seedsweep.agents.base import ConfigError, build_config
from seedsweep.agents.ppo import PPO
from seedsweep.agents.reinforce import Reinforce
from seedsweep.runner.launch.api import run

STEPS, EVERY, EPISODES = 2000, 1000, 2  # multiples of num_envs (1 and 8): evals at 1000, 2000
CLASSES = {"reinforce": Reinforce, "actor_critic": ActorCritic, "ppo": PPO}
ENV_IDS = {"cartpole": "CartPole-v1", "pendulum": "Pendulum-v1"}


@pytest.mark.parametrize("agent", ["reinforce", "actor_critic", "ppo"])
@pytest.mark.parametrize("env", ["cartpole", "pendulum"])
def test_short_run_completes_with_the_protocols_records(tmp_path, agent, env):
    run_dir = run([f"agent={agent}", f"env={env}", "seed=1", f"steps={STEPS}",
                   f"eval.every={EVERY}", f"eval.episodes={EPISODES}"],
                  results_dir=str(tmp_path))
    doc = json.loads((run_dir / "run.json").read_text())
    assert doc["status"] == "complete" and doc["error"] is None
    assert (doc["agent"], doc["env"], doc["env_steps"]) == (agent, ENV_IDS[env], STEPS)
    rows = list(csv.DictReader((run_dir / "eval.csv").open()))
    # RECORDS.md: an evaluation every eval.every env steps and one at the end
    assert [int(r["env_step"]) for r in rows] == [1000] * EPISODES + [2000] * EPISODES
    spec = gym.spec(ENV_IDS[env])
    for r in rows:
        assert int(r["length"]) <= spec.max_episode_steps  # gymnasium spec: 500 / 200
        if env == "pendulum":
            assert int(r["length"]) == 200  # Pendulum-v1 never terminates, always truncates
    last = [float(r["return"]) for r in rows[-EPISODES:]]
    assert doc["final_score"] == pytest.approx(sum(last) / EPISODES)
    # the checkpoint's agent state loads with weights_only into a fresh agent
    state = torch.load(run_dir / "checkpoint.pt", weights_only=True)["agent"]
    cls = CLASSES[agent]
    probe = gym.make(ENV_IDS[env])
    fresh = cls(probe.observation_space, probe.action_space, build_config(cls, {}), seed=0)
    fresh.load_state_dict(state)


def test_bad_lambda_is_refused_before_anything_is_written(tmp_path):
    with pytest.raises(ConfigError) as err:
        run(["agent=actor_critic", "env=cartpole", "agent.advantage_lambda=1.5"],
            results_dir=str(tmp_path))
    assert err.value.field == "agent.advantage_lambda" and "[0, 1]" in str(err.value)
    assert not any(tmp_path.iterdir())
