"""The evaluation protocol and seed derivation."""

import csv
import math

import numpy as np
import pytest
from seedsweep.agents.uniform_random import UniformRandom
from seedsweep.runner.execution.protocol import (
    MAX_BATCH,
    batch_width,
    discounted_return,
    evaluate,
    evaluate_batched,
    mean_and_stderr,
    run_episode,
)
from seedsweep.runner.execution.seeding import derive_seeds
from seedsweep.runner.launch.api import run

from tests.toy_envs import ConstantReward, SeedLength


@pytest.mark.parametrize("r,gamma,T", [(1.0, 0.99, 10), (2.5, 0.9, 37), (-1.0, 1.0, 5)])
def test_discounted_return_matches_geometric_series(r, gamma, T):
    # Closed form Σ_{t<T} γ^t r = r(1 − γ^T)/(1 − γ) (geometric series); γ = 1 gives r·T.
    expected = r * T if gamma == 1.0 else r * (1 - gamma**T) / (1 - gamma)
    assert discounted_return([r] * T, gamma) == pytest.approx(expected, rel=1e-12)


def test_episode_through_protocol_matches_closed_form():
    env = ConstantReward(reward=2.0, horizon=25)
    agent = UniformRandom(env.observation_space, env.action_space,
                          UniformRandom.Config(gamma=0.95), 0)
    ret, disc, length = run_episode(agent, env, seed=1, gamma=0.95)
    assert (ret, length) == (50.0, 25)
    assert disc == pytest.approx(2.0 * (1 - 0.95**25) / (1 - 0.95), rel=1e-12)  # geometric series


def test_evaluate_records_each_episode_with_its_seed():
    env = ConstantReward(horizon=3)
    agent = UniformRandom(env.observation_space, env.action_space, UniformRandom.Config(), 0)
    recs = evaluate(agent, env, [11, 12, 13], env_step=500)
    assert [(r.env_step, r.episode, r.episode_seed) for r in recs] == [
        (500, 0, 11), (500, 1, 12), (500, 2, 13)]


def test_mean_and_standard_error_match_numpy():
    x = [1.0, 2.0, 4.0, 8.0]
    mean, se = mean_and_stderr(x)
    assert mean == pytest.approx(np.mean(x))
    assert se == pytest.approx(np.std(x, ddof=1) / math.sqrt(4))  # s.e. = s/√n (numpy ddof=1)


def test_seeds_are_deterministic_distinct_and_disjoint():
    a = derive_seeds(0, 50, num_envs=8)
    assert a == derive_seeds(0, 50, num_envs=8)
    assert a != derive_seeds(1, 50, num_envs=8)
    train = set(range(a.train_env, a.train_env + 8))
    assert len(set(a.eval_episodes)) == 50
    assert not train & set(a.eval_episodes)
    assert len({a.train_env, a.agent, a.global_rngs}) == 3


class _Always(UniformRandom):
    """Plays one fixed action; counts the batches it was asked to act on."""

    random_floor = False

    def __init__(self, *args, action: int = 1):
        super().__init__(*args)
        self.action = action
        self.batch_sizes: list[int] = []

    def act(self, obs, explore):
        self.batch_sizes.append(len(obs))
        return np.full(len(obs), self.action)


@pytest.mark.parametrize("width", [1, 3, 20])
def test_batched_protocol_gives_the_sequential_records_in_episode_order(width):
    seeds = [3, 10, 5, 6, 0, 13, 8, 4, 11, 2]
    env = SeedLength()
    agent = _Always(env.observation_space, env.action_space, UniformRandom.Config(gamma=0.9), 0)
    sequential = evaluate(agent, env, seeds, env_step=7)
    # closed form of SeedLength: length seed % 7 + 1, reward 2 per step with action 1
    assert [r.length for r in sequential] == [s % 7 + 1 for s in seeds]
    assert [r.ret for r in sequential] == [2.0 * (s % 7 + 1) for s in seeds]
    agent.batch_sizes.clear()
    batched = evaluate_batched(agent, [SeedLength() for _ in range(width)], seeds, env_step=7)
    assert batched == sequential  # same seeds, lengths, returns (summed in the same order)
    assert max(agent.batch_sizes) == min(width, len(seeds))
    assert sum(agent.batch_sizes) == sum(r.length for r in sequential)  # one action per step


def test_batch_width_keeps_random_and_stochastic_policies_sequential():
    class Learner(UniformRandom):
        random_floor = False

    assert batch_width(Learner, 10, deterministic=True, batched=True) == 10
    assert batch_width(Learner, 1000, deterministic=True, batched=True) == MAX_BATCH
    assert batch_width(Learner, 10, deterministic=True, batched=False) == 1
    assert batch_width(Learner, 10, deterministic=False, batched=True) == 1
    assert batch_width(UniformRandom, 10, deterministic=True, batched=True) == 1


# The batched protocol against the sequential one for every shipped agent, through whole runs:
# the same episode seeds and lengths, returns equal up to float rounding. Tolerance: actions
# of a float32 network may differ in the last bit between a batch and a single row (2^-24
# relative), summed over up to 1000 steps: rel 1e-4 bounds that (common practice, no source).
SHIPPED = {
    "dqn": ["agent=dqn", "env=cartpole", "agent.replay_warmup_steps=200"],
    "ppo": ["agent=ppo", "env=pendulum"],
    "ppo-normalised-obs": ["agent=ppo", "env=mountaincar_continuous"],
    "reinforce": ["agent=reinforce", "env=acrobot"],
    "actor_critic": ["agent=actor_critic", "env=pendulum"],
    "random": ["agent=random", "env=cartpole"],
}


@pytest.mark.parametrize("name", sorted(SHIPPED))
def test_batched_evaluation_matches_sequential_for_every_shipped_agent(name, tmp_path):
    found = {}
    for batched in ("true", "false"):
        run_dir = run([*SHIPPED[name], "steps=1000", "eval.every=500", "eval.episodes=6",
                       f"eval.batched={batched}", f"sweep=b-{batched}"], results_dir=str(tmp_path))
        with open(run_dir / "eval.csv") as f:
            found[batched] = list(csv.DictReader(f))
    a, b = found["true"], found["false"]
    assert len(a) == len(b) >= 2 * 6  # at least two evaluations of six episodes
    for x, y in zip(a, b, strict=True):
        for key in ("env_step", "episode", "length", "episode_seed"):
            assert x[key] == y[key]
        for key in ("return", "discounted_return"):
            assert float(x[key]) == pytest.approx(float(y[key]), rel=1e-4, abs=1e-9)
