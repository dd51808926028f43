"""The evaluation protocol and seed derivation."""

import math

import numpy as np
import pytest
from seedsweep.agents.uniform_random import UniformRandom
from seedsweep.runner.execution.protocol import (
    discounted_return,
    evaluate,
    mean_and_stderr,
    run_episode,
)
from seedsweep.runner.execution.seeding import derive_seeds

from tests.toy_envs import ConstantReward


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
