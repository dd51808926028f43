"""The env layer: building from config, wrappers, train/eval separation, custom envs."""

import gymnasium as gym
import numpy as np
import pytest
from seedsweep.agents.base import ConfigError
from seedsweep.envs.build import make_eval_env, make_train_envs, parse_env_config
from seedsweep.envs.replay import ReplayError


def spec(**kw):
    base = {"name": "t", "id": "CartPole-v1", "kwargs": {}, "max_episode_steps": None,
            "reference": None, "wrappers": []}
    base.update(kw)
    return parse_env_config(base)


def test_spec_time_limit_is_kept():
    env = make_eval_env(spec())
    env.reset(seed=0)
    assert env.spec.max_episode_steps == 500  # CartPole-v1 spec limit (gymnasium env spec)


def test_time_limit_wrapper_truncates():
    env = make_eval_env(spec(wrappers=[{"name": "time_limit", "max_episode_steps": 7}]))
    env.reset(seed=0)
    for t in range(7):
        _, _, term, trunc, _ = env.step(0 if t % 2 else 1)
        if term:
            pytest.skip("terminated before the limit")  # cannot happen in 7 alternating steps
    assert trunc


def test_one_hot_makes_frozenlake_an_mlp_input():
    # FrozenLake-v1 4x4 has Discrete(16) observations, start state 0 (gymnasium docs).
    env = make_eval_env(spec(id="FrozenLake-v1", wrappers=[{"name": "one_hot"}]))
    obs, _ = env.reset(seed=0)
    assert obs.shape == (16,) and obs.sum() == 1 and obs[0] == 1


def test_frame_stack_and_action_repeat_shapes():
    env = make_eval_env(spec(wrappers=[{"name": "frame_stack", "size": 3},
                                       {"name": "action_repeat", "repeat": 2}]))
    obs, _ = env.reset(seed=0)
    assert obs.shape == (12,)  # 3 stacked CartPole observations of 4 numbers (env spec)


def test_reward_transforms_are_training_only_and_raw_return_is_recorded():
    s = spec(wrappers=[{"name": "scale_reward", "scale": 0.5}])
    train = make_train_envs(s, 1)
    train.reset(seed=0)
    rewards, finished = [], []
    while not finished:
        _, r, _, _, _, finished = train.step(np.array([0]))
        rewards.append(float(r[0]))
    assert set(rewards) == {0.5}  # CartPole pays +1 per step (gymnasium docs), scaled by 0.5
    assert finished[0][0] == finished[0][1] == len(rewards)  # raw return = length x 1
    ev = make_eval_env(s)
    ev.reset(seed=0)
    assert ev.step(0)[1] == 1.0


def test_normaliser_updates_in_training_and_is_shared_frozen_in_eval():
    s = spec(wrappers=[{"name": "normalize_obs"}])
    train = make_train_envs(s, 2)
    train.reset(seed=0)
    for _ in range(20):
        train.step(np.array([0, 1]))
    norm = train.normalizer
    count = norm.rms.count
    x = np.ones((1, 4), np.float32)
    y = norm(x)
    assert norm.rms.count == count  # normalising alone never updates the statistics
    expected = np.clip((x - norm.rms.mean) / np.sqrt(norm.rms.var + 1e-8), -10, 10)
    np.testing.assert_allclose(y, expected, rtol=1e-6)


@pytest.mark.parametrize("num_envs", [1, 2])
def test_normaliser_counts_exactly_the_observations_acted_on(num_envs):
    # Reference: plain gymnasium CartPole-v1 envs stepped by hand with the same seeds and
    # actions (vector rule: env i reset with seed + i, later resets unseeded, same-step
    # autoreset). The statistics must equal numpy's mean and population variance of the
    # observations an agent acts on: every reset observation, and each step's observation,
    # where an episode's final observation is replaced by the next reset's.
    limit = 5  # short episodes: many resets, so counting final observations would show
    s = spec(wrappers=[{"name": "time_limit", "max_episode_steps": limit},
                       {"name": "normalize_obs"}])
    train = make_train_envs(s, num_envs)
    train.reset(seed=3)
    refs = [gym.make("CartPole-v1", max_episode_steps=limit) for _ in range(num_envs)]
    acted = [[np.asarray(e.reset(seed=3 + i)[0], np.float64)] for i, e in enumerate(refs)]
    for t in range(199):
        actions = np.array([(t + i) % 2 for i in range(num_envs)])
        train.step(actions)
        for i, e in enumerate(refs):
            obs, _, term, trunc, _ = e.step(int(actions[i]))
            if term or trunc:
                obs, _ = e.reset()
            acted[i].append(np.asarray(obs, np.float64))
    x = np.concatenate([np.stack(a) for a in acted])
    rms = train.normalizer.rms
    # gymnasium's RunningMeanStd starts from count 1e-4, mean 0, var 1 (its source): that prior
    # moves the variance by about 1e-4 / len(x) <= 5e-7, inside atol
    assert rms.count == pytest.approx(len(x) + 1e-4)
    np.testing.assert_allclose(rms.mean, x.mean(axis=0), rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(rms.var, x.var(axis=0), rtol=1e-5, atol=1e-6)


def test_vector_training_envs_return_final_observation_on_reset():
    s = spec(wrappers=[{"name": "time_limit", "max_episode_steps": 3}])
    train = make_train_envs(s, 2)
    obs = train.reset(seed=0)
    for _ in range(3):
        obs, _, next_obs, term, trunc, finished = train.step(np.array([0, 1]))
    assert trunc.all() and len(finished) == 2
    assert not np.allclose(obs, next_obs)  # obs = reset obs, next_obs = final obs


def _stepped_lander_batch(actions: np.ndarray):
    """Two LunarLander-v3 envs (box2d: state in C objects, not plain data), checkpointable."""
    train = make_train_envs(spec(id="LunarLander-v3"), 2)
    assert train.enable_snapshots() == "replay"
    train.reset(seed=7)
    for a in actions:
        train.step(a)
    return train


def test_box2d_batch_is_rebuilt_by_replaying_each_envs_episode():
    # 260 random steps: LunarLander-v3 episodes under random actions end within that (env
    # spec: a crash or leaving the screen terminates), so both kinds of episode start are
    # replayed -- the first reset's seed and the generator's state at an autoreset.
    rng = np.random.default_rng(0)
    actions = rng.integers(4, size=(320, 2))  # Discrete(4) (gymnasium env spec)
    original = _stepped_lander_batch(actions[:260])
    logs = [env.state_dict()["began"] for env in original.envs]
    assert any("rng" in b for b in logs), logs
    state = original.state_dict("replay")
    copy_ = make_train_envs(spec(id="LunarLander-v3"), 2)
    assert copy_.enable_snapshots() == "replay"
    obs = copy_.load_state_dict(state)
    np.testing.assert_array_equal(obs, original.raw_obs)
    for a in actions[260:]:  # both carry on identically, across further episode ends
        ours, theirs = original.step(a), copy_.step(a)
        for x, y in zip(ours[:5], theirs[:5], strict=True):
            np.testing.assert_array_equal(x, y)
        assert ours[5] == theirs[5]


def test_a_replay_that_does_not_end_at_the_saved_observation_is_refused():
    rng = np.random.default_rng(1)
    state = _stepped_lander_batch(rng.integers(4, size=(40, 2))).state_dict("replay")
    state["episodes"][1]["actions"][-1] = (state["episodes"][1]["actions"][-1] + 1) % 4
    copy_ = make_train_envs(spec(id="LunarLander-v3"), 2)
    copy_.enable_snapshots()
    with pytest.raises(ReplayError, match="env 1's replayed episode"):
        copy_.load_state_dict(state)


def test_snapshot_kinds_follow_what_the_envs_allow():
    cartpole, lander = spec(), spec(id="LunarLander-v3")
    assert make_train_envs(cartpole, 2).enable_snapshots() == "state"  # plain data
    assert make_train_envs(lander, 1).enable_snapshots() == "reset"  # one env: episode ends
    assert make_train_envs(lander, 2, "async").enable_snapshots() == "none"  # other processes


@pytest.mark.parametrize("entry,field,allowed", [
    ({"id": "NoSuchEnv-v0"}, "env.id", "unknown gymnasium id"),
    ({"wrappers": [{"name": "blur"}]}, "env.wrappers[0].name", "allowed: time_limit"),
    ({"wrappers": [{"name": "frame_stack"}]}, "env.wrappers[0].size", "required"),
    ({"wrappers": [{"name": "frame_stack", "size": 0}]}, "env.wrappers[0].size", ">= 1"),
    ({"wrappers": [{"name": "one_hot", "n": 3}]}, "env.wrappers[0].n", "unknown parameter"),
    # CliffWalking-v1's spec has no max_episode_steps (gymnasium registry)
    ({"id": "CliffWalking-v1", "max_episode_steps": None}, "env.max_episode_steps",
     "no time limit"),
    ({"colour": 1}, "env.colour", "unknown key"),
])
def test_bad_env_config_names_the_field(entry, field, allowed):
    with pytest.raises(ConfigError) as info:
        spec(**entry)
    assert info.value.field == field and allowed in str(info.value)


def test_custom_env_by_module_and_class():
    s = spec(id="tests.toy_envs:ConstantReward", kwargs={"horizon": 4}, max_episode_steps=50)
    env = make_eval_env(s)
    env.reset(seed=0)
    assert isinstance(env.unwrapped, gym.Env) and env.unwrapped.horizon == 4


def test_custom_env_failing_the_checker_is_reported():
    with pytest.raises(ConfigError, match="env checker"):
        spec(id="tests.toy_envs:OutOfSpace", max_episode_steps=50)
