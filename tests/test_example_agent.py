"""The example agent kept outside the package (examples/tile_sarsa/agent.py).

Checked against Sutton & Barto, Reinforcement Learning: An Introduction, 2nd ed. (2018):
§9.5.4 (tile coding), §6.6 eq. 6.9 (expected SARSA), §5.4 (ε-greedy policies); the
gymnasium CartPole-v1 / Pendulum-v1 specs; and torch's weights-only loader.
"""

from __future__ import annotations

import csv
import io
import json
import re
import sys
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
from gymnasium import spaces
from seedsweep.agents.base import ConfigError, Step, build_config
from seedsweep.runner.execution.config import compose
from seedsweep.runner.execution.prepare import load_agent_class, prepare
from seedsweep.runner.launch import api

ROOT = Path(__file__).resolve().parent.parent
AGENT_FILE = ROOT / "examples" / "tile_sarsa" / "agent.py"
ENTRY = f"{AGENT_FILE}:TileSarsa"
TileSarsa = load_agent_class(ENTRY)  # the runner's own path loader
example = sys.modules[TileSarsa.__module__]


def make_agent(obs_space, n_actions=2, seed=0, **values):
    config = build_config(TileSarsa, values)
    return TileSarsa(obs_space, spaces.Discrete(n_actions), config, seed)


# -- tile coder (Sutton & Barto §9.5.4) ---------------------------------------------------
def test_every_observation_activates_exactly_one_tile_per_tiling():
    # §9.5.4: "the number of features active at one time is the same for any state": one
    # tile in each tiling, so exactly num_tilings active features.
    coder = example.TileCoder(np.array([-1.0, 0.0, 5.0]), np.array([1.0, 2.0, 9.0]), 5, 8)
    x = np.random.default_rng(0).uniform([-2, -1, 4], [2, 3, 10], size=(500, 3))  # some outside
    active = coder.active(x)
    assert active.shape == (500, 8)
    per = coder.features_per_tiling
    assert per == 6**3 and coder.num_features == 8 * 6**3
    for t in range(8):  # feature t lies in tiling t's block of indices
        assert np.all((active[:, t] >= t * per) & (active[:, t] < (t + 1) * per))
    assert all(len(set(row)) == 8 for row in active)


def test_tiling_offsets_follow_the_asymmetric_displacement_vector():
    # §9.5.4 (after Miller & Glanz 1996): tilings displaced by (1, 3, 5, ...) units of
    # w / n in the d dimensions. Tiling t's offset in dimension d is t(2d+1)/n mod 1 tiles.
    coder = example.TileCoder(np.zeros(3), np.ones(3), 4, 8)
    expected = np.array([[(t * k) % 8 / 8 for k in (1, 3, 5)] for t in range(8)])
    np.testing.assert_array_equal(coder.offsets, expected)


@pytest.mark.parametrize("dim", [0, 1, 2])
def test_neighbours_share_tiles_in_proportion_to_closeness_distant_points_share_none(dim):
    # §9.5.4: generalisation between two states is the number of tilings they share. With
    # tile width w and offsets in steps of w/n, the n tilings' edges along one axis form one
    # lattice of spacing w/n, each tiling owning one residue (1, 3, 5 are odd, n = 8 a power
    # of two, so t -> t(2d+1) mod n is a permutation). A shift of k·w/n (k <= n) along that
    # axis therefore crosses exactly k edges, each of a different tiling: the two points
    # share exactly n - k tiles. A shift of one tile width or more shares none.
    n, tiles = 8, 4
    low, high = np.array([-1.0, 0.0, 10.0]), np.array([1.0, 4.0, 30.0])
    coder = example.TileCoder(low, high, tiles, n)
    w = (high - low) / tiles
    rng = np.random.default_rng(dim)
    x = rng.uniform(low + w, high - 2 * w, size=(200, 3))  # room for a shift of w inside
    for k in range(n + 1):
        y = x.copy()
        y[:, dim] += k * w[dim] / n + 1e-9 * w[dim]  # just past the k-th edge, never on one
        shared = (coder.active(x) == coder.active(y)).sum(axis=1)
        assert np.all(shared == n - k), (k, np.unique(shared))
    far = x.copy()
    far[:, dim] += 1.5 * w[dim]
    assert np.all((coder.active(x) == coder.active(far)).sum(axis=1) == 0)


def test_infinite_bounds_are_tiled_over_the_configured_range():
    # gymnasium CartPole-v1 spec: velocities are unbounded (±inf), position ±4.8, angle ±0.418
    space = gym.make("CartPole-v1").observation_space
    low, high = example.tile_bounds(space, [-2.5, 2.0])
    np.testing.assert_allclose(low, [-4.8, -2.5, -0.41887903, -2.5], rtol=1e-6)
    np.testing.assert_allclose(high, [4.8, 2.0, 0.41887903, 2.0], rtol=1e-6)
    coder = example.TileCoder(low, high, 4, 8)
    inside = np.array([[0.0, 2.0, 0.0, 0.0]])
    beyond = np.array([[0.0, 1e6, 0.0, 0.0]])  # clipped onto the edge of the tiled range
    np.testing.assert_array_equal(coder.active(inside), coder.active(beyond))


def test_too_many_features_lowers_the_tile_count_then_the_tilings():
    # 6-D Acrobot: 8 tilings · (8+1)^6 > 2^18, and 8 · (4+1)^6 = 125000 <= 2^18 < 8 · 6^6
    agent = make_agent(gym.make("Acrobot-v1").observation_space, 3, max_features=2**18)
    assert (agent.coder.tiles, agent.coder.num_tilings) == (4, 8)
    assert agent.weights.shape == (3, 125_000)
    # 16-D one-hot FrozenLake: even 1 tile needs 8 · 2^16 > 2^18, so 4 tilings (4 · 2^16 = 2^18)
    one_hot = spaces.Box(0.0, 1.0, (16,))
    agent = make_agent(one_hot, 4, max_features=2**18)
    assert (agent.coder.tiles, agent.coder.num_tilings) == (1, 4)
    # each tiling then holds the one-hot code itself: 16 states, 16 distinct tiles per tiling
    active = agent.coder.active(np.eye(16))
    assert all(len(set(active[:, t])) == 16 for t in range(4))
    with pytest.raises(ValueError, match="agent.max_features"):
        make_agent(spaces.Box(0.0, 1.0, (48,)), 4)  # one-hot CliffWalking: 2^48 features


# -- expected SARSA target (Sutton & Barto eq. 6.9 with the ε-greedy policy of §5.4) ------
# Worked by hand. q(s', ·) = (1, 3, 2), ε = 0.3, 3 actions: π = ε/3 = 0.1 for the two
# non-greedy actions and 0.1 + 0.7 = 0.8 for action 1. Σ π q = 0.1·1 + 0.8·3 + 0.1·2 = 2.7,
# so with r = 1, γ = 0.9 the target is 1 + 0.9·2.7 = 3.43.
# Ties: q(s', ·) = (2, 2, 0), ε = 0.3: the greedy mass 0.7 is split, π = (0.45, 0.45, 0.1),
# Σ π q = 0.9 + 0.9 + 0 = 1.8, target 1 + 0.9·1.8 = 2.62. Terminated: target = r = 1.
def test_expected_sarsa_target_matches_the_hand_computed_expectation():
    q = np.array([[1.0, 3.0, 2.0], [2.0, 2.0, 0.0], [1.0, 3.0, 2.0]])
    np.testing.assert_allclose(example.epsilon_greedy_probs(q[:2], 0.3),
                               [[0.1, 0.8, 0.1], [0.45, 0.45, 0.1]])
    targets = example.expected_sarsa_targets(np.ones(3), q, np.array([False, False, True]),
                                             0.9, 0.3)
    np.testing.assert_allclose(targets, [3.43, 2.62, 1.0])


def test_greedy_target_is_the_q_learning_target():
    # §6.6: with a greedy target policy (ε = 0) expected SARSA is Q-learning: r + γ max q.
    q = np.random.default_rng(1).normal(size=(50, 4))
    targets = example.expected_sarsa_targets(np.zeros(50), q, np.zeros(50), 0.9, 0.0)
    np.testing.assert_allclose(targets, 0.9 * q.max(axis=1))


@pytest.mark.parametrize("terminated,truncated,target", [
    (False, True, 3.43),   # time limit: bootstrap from next_obs, as if the episode went on
    (True, False, 1.0),    # terminal state: its value is 0, no bootstrap
    (True, True, 1.0),     # both flags: termination wins
])
def test_one_update_moves_q_by_alpha_times_the_td_error(terminated, truncated, target):
    # Semi-gradient update (§10.1) with n binary features: each active weight of (s, a)
    # gets (α/n)·δ, so q(s, a) moves by α·δ = α·(target − q(s, a)).
    # Targets from the hand-worked example above (q(s', ·) = (1, 3, 2), ε = 0.3, γ = 0.9).
    agent = make_agent(spaces.Box(0.0, 1.0, (1,)), 3, gamma=0.9, alpha=0.5, tiles=4,
                       num_tilings=4, epsilon_start=0.3, epsilon_end=0.3)
    s, s_next = np.array([[0.05]]), np.array([[0.95]])  # 0.9 apart > one tile: no shared tile
    for a, value in enumerate([1.0, 3.0, 2.0]):
        agent.weights[a, agent.coder.active(s_next)[0]] = value / 4
    agent.weights[2, agent.coder.active(s)[0]] = 0.5 / 4  # q(s, 2) = 0.5
    agent.observe(Step(s.astype(np.float32), np.array([2]), np.array([1.0]),
                       s_next.astype(np.float32), np.array([terminated]), np.array([truncated]),
                       1))
    q_s = agent.q_values(agent.coder.active(s))[0]
    np.testing.assert_allclose(q_s, [0.0, 0.0, 0.5 + 0.5 * (target - 0.5)])
    np.testing.assert_allclose(agent.q_values(agent.coder.active(s_next))[0], [1.0, 3.0, 2.0])


def test_behaviour_policy_draws_actions_with_the_epsilon_greedy_probabilities():
    # §5.4: ε-greedy takes each action with probability ε/|A| plus 1 − ε on the greedy one.
    agent = make_agent(spaces.Box(0.0, 1.0, (1,)), 4, epsilon_start=0.4, epsilon_end=0.4)
    obs = np.full((20_000, 1), 0.5, dtype=np.float32)
    agent.weights[3, agent.coder.active(obs[:1])[0]] = 1.0
    freq = np.bincount(agent.act(obs, explore=True), minlength=4) / len(obs)
    # binomial s.e. <= sqrt(0.25 / 20000) = 0.0035; 0.015 is over 4 s.e.
    np.testing.assert_allclose(freq, [0.1, 0.1, 0.1, 0.7], atol=0.015)
    assert np.all(agent.act(obs[:5], explore=False) == 3)


# -- config and action spaces ----------------------------------------------------------------
def test_box_action_spaces_are_refused(tmp_path):
    assert not TileSarsa.supports(spaces.Box(-2.0, 2.0, (1,)))
    assert TileSarsa.supports(spaces.Discrete(3))
    with pytest.raises(ConfigError, match="does not support Pendulum-v1") as err:
        api.run(["agent=random", "agent.name=tile_sarsa", f"agent.entry='{ENTRY}'",
                 "env=pendulum"], results_dir=str(tmp_path))
    assert err.value.field == "agent"
    assert not any(tmp_path.iterdir())  # nothing half-written


@pytest.mark.parametrize("field,value,allowed", [
    ("alpha", 0.0, "in (0, 1]"), ("num_tilings", 0, ">= 1"), ("epsilon_end", 1.5, "in [0, 1]"),
    ("unbounded_range", [1.0, -1.0], "low < high"), ("gamma", 0.0, "in (0, 1]"),
])
def test_bad_hyperparameters_name_the_field(field, value, allowed):
    with pytest.raises(ConfigError, match=rf"^agent\.{field}: must be .*{re.escape(allowed)}"):
        build_config(TileSarsa, {field: value})


def test_example_yaml_loads_from_the_config_dir_and_matches_the_code_defaults(monkeypatch):
    monkeypatch.chdir(ROOT)  # the YAML's entry is relative to the repo root
    cfg = compose(["agent=tile_sarsa", "env=cartpole"], [ROOT / "examples" / "configs"])
    prepared = prepare(cfg)
    assert prepared.agent_cls.__name__ == "TileSarsa"
    assert prepared.agent_config == prepared.agent_cls.Config()


# -- through the real runner --------------------------------------------------------------
def short_run(results_dir: Path) -> Path:
    return api.run(["agent=random", "agent.name=tile_sarsa", f"agent.entry='{ENTRY}'",
                    "env=cartpole", "seed=3", "steps=3000", "eval.every=1500",
                    "eval.episodes=3", "sweep=example"], results_dir=str(results_dir))


def test_a_short_run_is_complete_and_bit_identical_on_repeat(tmp_path):
    run_dir = short_run(tmp_path / "a")
    doc = json.loads((run_dir / "run.json").read_text())
    assert doc["status"] == "complete" and doc["env_steps"] == 3000
    assert doc["agent"] == "tile_sarsa" and doc["env"] == "CartPole-v1"
    rows = list(csv.DictReader(io.StringIO((run_dir / "eval.csv").read_text())))
    assert [int(r["env_step"]) for r in rows] == [1500] * 3 + [3000] * 3
    assert doc["final_score"] == pytest.approx(np.mean([float(r["return"]) for r in rows[3:]]))
    train = list(csv.DictReader(io.StringIO((run_dir / "train.csv").read_text())))
    assert train and all(1 <= int(r["length"]) <= 500 for r in train)  # CartPole-v1 limit 500
    state = torch.load(run_dir / "checkpoint.pt", weights_only=True)
    assert state  # the final checkpoint loads without unpickling arbitrary objects
    again = short_run(tmp_path / "b")
    for name in ("eval.csv", "train.csv"):
        assert (run_dir / name).read_bytes() == (again / name).read_bytes()


def test_state_dict_round_trip_continues_identically():
    env = gym.make("CartPole-v1")
    agent = make_agent(env.observation_space, seed=5)
    rng = np.random.default_rng(0)
    obs = rng.uniform(-0.5, 0.5, size=(300, 1, 4)).astype(np.float32)

    def feed(a, start, stop):
        for t in range(start, stop):
            act = a.act(obs[t], explore=True)
            a.observe(Step(obs[t], act, np.ones(1), obs[t + 1], np.array([t % 50 == 49]),
                           np.zeros(1, bool), t + 1))

    feed(agent, 0, 150)
    buffer = io.BytesIO()
    torch.save(agent.state_dict(), buffer)
    buffer.seek(0)
    restored = make_agent(env.observation_space, seed=99)  # a different seed: state must win
    restored.load_state_dict(torch.load(buffer, weights_only=True))
    np.testing.assert_array_equal(restored.weights, agent.weights)
    assert restored.env_steps == agent.env_steps == 150
    feed(agent, 150, 299)
    feed(restored, 150, 299)
    np.testing.assert_array_equal(restored.weights, agent.weights)
    assert np.array_equal(restored.act(obs[:50, 0], True), agent.act(obs[:50, 0], True))
