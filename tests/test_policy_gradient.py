"""REINFORCE and actor-critic agents: gradient estimates, bootstrapping, configs, determinism."""

from __future__ import annotations

import io
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
import yaml
from gymnasium import spaces
from gymnasium.vector import AutoresetMode, SyncVectorEnv
from seedsweep.agents.actor_critic import ActorCritic
from seedsweep.agents.base import ConfigError, Step, build_config
from seedsweep.agents.reinforce import Reinforce

torch.set_num_threads(1)
CONFIGS = Path(__file__).resolve().parent.parent / "configs" / "agent"
AGENTS = [Reinforce, ActorCritic]


def make_agent(cls, obs_space, action_space, seed=0, **overrides):
    values = {"hidden": [16, 16], **overrides}
    return cls(obs_space, action_space, build_config(cls, values), seed)


class VecDriver:
    """Steps a gymnasium vector env with same-step autoreset into agent ``Step``s, putting
    the true final observation into ``next_obs`` where an episode ended (the runner's rule)."""

    def __init__(self, env_fns, seed: int = 0):
        self.vec = SyncVectorEnv(env_fns, autoreset_mode=AutoresetMode.SAME_STEP)
        self.obs, _ = self.vec.reset(seed=seed)
        self.steps = 0

    def step(self, actions: np.ndarray) -> Step:
        nxt, rewards, term, trunc, info = self.vec.step(actions)
        next_obs = np.array(nxt, copy=True)
        for i in np.flatnonzero(term | trunc):
            next_obs[i] = info["final_obs"][i]
        self.steps += len(rewards)
        step = Step(self.obs, actions, rewards, next_obs, term, trunc, self.steps)
        self.obs = nxt
        return step


# -- the policy-gradient estimate on a bandit ---------------------------------------------------
REWARDS = np.array([1.0, 0.0, 2.5])  # our own 3-armed bandit, deterministic rewards
LOGITS = np.array([0.4, -0.2, 0.1])


def _set_logits(agent, logits):
    """Zero the last policy layer's weights and put ``logits`` in its bias: with a constant
    observation the logits are then exactly the bias, so d loss / d bias = d loss / d logits."""
    last = agent.policy_net[-1] if isinstance(agent, Reinforce) else agent.net[-1]
    k = len(logits)
    with torch.no_grad():
        last.weight[:k] = 0.0
        last.bias[:k] = torch.as_tensor(logits, dtype=torch.float32)
    return last


@pytest.mark.parametrize("cls,extra", [
    (Reinforce, {"standardize": "none", "episodes_per_update": 10**6}),
    (ActorCritic, {"rollout_steps": 2, "standardize": "none"}),
    (ActorCritic, {"rollout_steps": 2, "standardize": "none", "shared_torso": True}),
])
def test_policy_gradient_matches_the_analytic_bandit_gradient(cls, extra):
    """One-step episodes of a softmax bandit. J(θ) = Σ_a π_a r_a has the analytic gradient
    ∂J/∂θ_j = π_j (r_j − J) (softmax derivative; the policy-gradient theorem, Williams 1992).
    The agent's surrogate-loss gradient is an unbiased Monte Carlo estimate of it (for any
    constant baseline), so it must agree within a few standard errors."""
    n = 20_000
    agent = make_agent(cls, spaces.Box(-1.0, 1.0, (1,), np.float32), spaces.Discrete(3), seed=5,
                       num_envs=n, **extra)
    last = _set_logits(agent, LOGITS)
    obs = np.full((n, 1), 0.5, dtype=np.float32)
    actions = agent.act(obs, explore=True)
    step = Step(obs, actions, REWARDS[actions], obs, np.ones(n, bool), np.zeros(n, bool), n)
    assert agent.observe(step) == {}  # not yet an update: the batch is still there to score
    batch = agent.episode_batch() if cls is Reinforce else agent.rollout_batch()
    agent.losses(batch)["policy_loss"].backward()
    estimate = -last.bias.grad[:3].double().numpy()

    pi = np.exp(LOGITS) / np.exp(LOGITS).sum()
    analytic = pi * (REWARDS - pi @ REWARDS)
    if "advantages" in batch:  # actor-critic: A = R − V(s) for a one-step episode
        baseline = float(batch["returns"][0] - batch["advantages"][0])
    else:
        baseline = _value(agent, obs[:1])
    per_sample = (REWARDS[actions] - baseline)[:, None] * (np.eye(3)[actions] - pi)
    stderr = per_sample.std(axis=0, ddof=1) / np.sqrt(n)
    np.testing.assert_allclose(estimate, per_sample.mean(axis=0), rtol=1e-4, atol=1e-6)
    assert np.all(np.abs(estimate - analytic) < 4.0 * stderr + 1e-9)
    assert np.abs(analytic).max() > 10 * stderr.max()  # the check has power: sign errors fail


def _value(agent, obs):
    with torch.no_grad():
        return float(agent.value_net(torch.from_numpy(obs)).squeeze())


# -- truncation bootstrapping through gymnasium's vector-env autoreset ---------------------------
class Corridor(gym.Env):
    """Our own test env: the observation counts steps (0, 1, 2, ...), reward 1 per step.
    Ends by termination at ``terminate_at`` or, wrapped in a TimeLimit, by truncation."""

    observation_space = spaces.Box(-np.inf, np.inf, (1,), np.float32)
    action_space = spaces.Discrete(2)

    def __init__(self, terminate_at: int | None = None):
        self.terminate_at = terminate_at
        self.t = 0

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.t = 0
        return np.array([0.0], np.float32), {}

    def step(self, action):
        self.t += 1
        terminated = self.terminate_at is not None and self.t >= self.terminate_at
        return np.array([float(self.t)], np.float32), 1.0, terminated, False, {}


def corridor_envs():
    """env 0 is truncated by a time limit after 3 steps, env 1 terminates after 3 steps."""
    return [lambda: gym.wrappers.TimeLimit(Corridor(), max_episode_steps=3),
            lambda: Corridor(terminate_at=3)]


def _v(agent, x: float) -> float:
    return _value(agent, np.array([[x]], dtype=np.float32))


def test_reinforce_bootstraps_truncated_episodes_only():
    g = 0.9
    agent = make_agent(Reinforce, Corridor.observation_space, Corridor.action_space,
                       gamma=g, num_envs=2, episodes_per_update=3)
    driver = VecDriver(corridor_envs())
    for _ in range(3):
        step = driver.step(agent.act(driver.obs, True))
        agent.observe(step)
    # the harness did what gymnasium's same-step autoreset promises
    assert step.truncated.tolist() == [True, False] and step.terminated.tolist() == [False, True]
    assert step.next_obs[:, 0].tolist() == [3.0, 3.0] and driver.obs[:, 0].tolist() == [0.0, 0.0]
    returns = agent.episode_batch()["returns"].double().numpy()
    v_final, v_reset = _v(agent, 3.0), _v(agent, 0.0)
    assert abs(v_final - v_reset) > 1e-3  # bootstrapping from the wrong obs would show
    mc = np.array([1 + g + g**2, 1 + g, 1.0])  # Σ γ^k r_{t+k} over the 3 steps left
    truncated = mc + g ** np.array([3, 2, 1]) * v_final  # + γ^(T−t) V(s_T), s_T = [3]
    np.testing.assert_allclose(returns[:3], truncated, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(returns[3:], mc, rtol=1e-6)  # terminated: no bootstrap


@pytest.mark.parametrize("lam", [1.0, 0.5])
def test_actor_critic_bootstraps_truncation_mid_rollout(lam):
    g = 0.9
    agent = make_agent(ActorCritic, Corridor.observation_space, Corridor.action_space,
                       gamma=g, num_envs=2, rollout_steps=6, advantage_lambda=lam)
    driver = VecDriver(corridor_envs())
    for _ in range(5):  # 5 of 6 rollout steps: episodes end at t=2, the rollout goes on
        agent.observe(driver.step(agent.act(driver.obs, True)))
    batch = agent.rollout_batch()
    adv = batch["advantages"].double().numpy().reshape(5, 2)
    ret = batch["returns"].double().numpy().reshape(5, 2)
    v = {x: _v(agent, x) for x in (0.0, 1.0, 2.0, 3.0)}
    obs = [0.0, 1.0, 2.0, 0.0, 1.0]  # both envs: the step counter, reset after t=2
    true_next = [1.0, 2.0, 3.0, 1.0, 2.0]  # next_obs, with the final obs [3] at t=2
    # TD errors with V of the true next obs; at t=2 env 0 (truncated) bootstraps, env 1 not
    delta = np.array([[1 + g * v[true_next[t]] - v[obs[t]]] * 2 for t in range(5)])
    delta[2, 1] = 1 - v[2.0]
    # A_t = Σ_l (γλ)^l δ_{t+l} within the episode (Schulman et al. 2016 eq. 16, from memory)
    expected = np.zeros((5, 2))
    for t in range(5):
        stop = 3 if t < 3 else 5
        expected[t] = sum((g * lam) ** (k - t) * delta[k] for k in range(t, stop))
    np.testing.assert_allclose(adv, expected, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(ret, expected + np.array([[v[o]] * 2 for o in obs]),
                               rtol=1e-5, atol=1e-6)
    if lam == 1.0:  # plain n-step returns: truncated env 0 gets γ^(3−t)·V([3]), env 1 none
        mc = np.array([1 + g + g**2, 1 + g, 1.0])
        np.testing.assert_allclose(ret[:3, 0], mc + g ** np.array([3, 2, 1]) * v[3.0],
                                   rtol=1e-5, atol=1e-6)
        np.testing.assert_allclose(ret[:3, 1], mc, rtol=1e-5, atol=1e-6)
        np.testing.assert_allclose(ret[3:, 0], [1 + g * (1 + g * v[2.0]), 1 + g * v[2.0]],
                                   rtol=1e-5, atol=1e-6)


# -- configs ------------------------------------------------------------------------------------
@pytest.mark.parametrize("cls,field,value,allowed", [
    (Reinforce, "gamma", 0.0, "(0, 1]"),
    (Reinforce, "gamma", 1.5, "(0, 1]"),
    (Reinforce, "num_envs", 0, ">= 1"),
    (Reinforce, "episodes_per_update", 0, ">= 1"),
    (Reinforce, "policy_lr", 0.0, "> 0"),
    (Reinforce, "value_lr", -0.001, "> 0"),
    (Reinforce, "standardize", "batch", "'advantages'"),
    (ActorCritic, "advantage_lambda", 1.5, "[0, 1]"),
    (ActorCritic, "advantage_lambda", -0.1, "[0, 1]"),
    (ActorCritic, "gamma", 0.0, "(0, 1]"),
    (ActorCritic, "num_envs", -1, ">= 1"),
    (ActorCritic, "rollout_steps", 0, ">= 1"),
    (ActorCritic, "lr", 0.0, "> 0"),
    (ActorCritic, "vector_mode", "threads", "'async'"),
    (ActorCritic, "gaussian_squash", "sigmoid", "'tanh'"),
])
def test_bad_config_names_the_field_and_the_allowed_values(cls, field, value, allowed):
    with pytest.raises(ConfigError) as err:
        build_config(cls, {field: value})
    assert err.value.field == f"agent.{field}"
    assert allowed in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("name,cls", [("reinforce", Reinforce), ("actor_critic", ActorCritic)])
def test_shipped_yaml_sets_every_hyperparameter_and_builds(name, cls):
    raw = yaml.safe_load((CONFIGS / f"{name}.yaml").read_text())
    assert raw.pop("name") == name
    assert raw.pop("entry") == f"seedsweep.agents.{name}:{cls.__name__}"
    assert isinstance(raw.pop("search"), dict)  # seedsweep tune's search space, not a setting
    import dataclasses

    assert set(raw) == {f.name for f in dataclasses.fields(cls.Config)}
    config = build_config(cls, raw)
    assert config == cls.Config()  # the dataclass defaults are the shipped ones


# -- acting ---------------------------------------------------------------------------------------
CARTPOLE = gym.make("CartPole-v1")
PENDULUM = gym.make("Pendulum-v1")
LANDER_BOX = spaces.Box(-1.0, 1.0, (2,), np.float32)  # LunarLanderContinuous-v3's action space


@pytest.mark.parametrize("cls", AGENTS)
@pytest.mark.parametrize("action_space,options", [
    (CARTPOLE.action_space, {}),
    (PENDULUM.action_space, {"gaussian_squash": "clip"}),
    (PENDULUM.action_space, {"gaussian_squash": "tanh", "gaussian_std": "state_dependent"}),
    (LANDER_BOX, {"gaussian_squash": "tanh", "gaussian_log_std_start": 1.5}),
    (LANDER_BOX, {"gaussian_squash": "clip", "gaussian_std": "state_dependent",
                  "gaussian_log_std_start": 1.5}),
])
def test_actions_have_the_right_shape_dtype_and_bounds(cls, action_space, options):
    obs_space = spaces.Box(-5.0, 5.0, (3,), np.float32)
    agent = make_agent(cls, obs_space, action_space, num_envs=4, **options)
    obs = np.random.default_rng(0).uniform(-5, 5, size=(64, 3)).astype(np.float32)
    for explore in (True, False):
        a = agent.act(obs, explore)
        if isinstance(action_space, spaces.Discrete):
            assert a.shape == (64,) and a.dtype == np.int64
        else:
            assert a.shape == (64, *action_space.shape) and a.dtype == np.float32
        assert all(action_space.contains(x) for x in a)
    single = agent.act(obs[:1], explore=False)  # the evaluation protocol's call
    assert single.shape[0] == 1 and np.array_equal(single, agent.act(obs[:1], explore=False))
    assert np.array_equal(agent.act(obs, False), agent.act(obs, False))
    if not isinstance(action_space, spaces.Discrete):  # exploration draws fresh noise
        assert not np.array_equal(agent.act(obs, True), agent.act(obs, True))


def _train(agent, driver, steps, other=None):
    """Drive ``agent`` (and ``other`` on the very same steps, asserting equal actions)."""
    for _ in range(steps):
        a = agent.act(driver.obs, True)
        if other is not None:
            assert np.array_equal(a, other.act(driver.obs, True))
        step = driver.step(a)
        agent.observe(step)
        if other is not None:
            other.observe(step)


def _params(agent):
    nets = [agent.head] + ([agent.policy_net, agent.value_net] if isinstance(agent, Reinforce)
                           else [agent.net] + ([agent.value_net] if agent.value_net else []))
    return [p.detach().clone() for net in nets for p in net.state_dict().values()]


CASES = [  # (agent, env id, num_envs, config) small enough for several updates in a test
    (Reinforce, "CartPole-v1", 2, {"episodes_per_update": 2}),
    (Reinforce, "Pendulum-v1", 2, {"episodes_per_update": 1, "gaussian_squash": "tanh"}),
    (ActorCritic, "CartPole-v1", 3, {"rollout_steps": 4, "advantage_lambda": 1.0}),
    (ActorCritic, "Pendulum-v1", 2, {"rollout_steps": 4, "gaussian_squash": "tanh",
                                     "shared_torso": True, "gaussian_std": "state_dependent"}),
]


@pytest.mark.parametrize("cls,env_id,n,options", CASES)
def test_same_seed_same_actions(cls, env_id, n, options):
    runs = []
    for seed in (7, 7, 8):
        agent = make_agent(cls, PENDULUM.observation_space if "Pend" in env_id
                           else CARTPOLE.observation_space,
                           gym.make(env_id).action_space, seed=seed, num_envs=n, **options)
        driver = VecDriver([lambda: gym.make(env_id)] * n, seed=1)
        taken = []
        for _ in range(120):
            a = agent.act(driver.obs, True)
            taken.append(a)
            agent.observe(driver.step(a))
        runs.append((np.array(taken), _params(agent)))
    (a0, p0), (a1, p1), (a2, _) = runs
    assert np.array_equal(a0, a1) and all(torch.equal(x, y) for x, y in zip(p0, p1, strict=True))
    assert not np.array_equal(a0, a2)  # another seed acts differently


@pytest.mark.parametrize("cls,env_id,n,options", CASES)
def test_state_dict_round_trip_continues_identically(cls, env_id, n, options):
    env = gym.make(env_id)
    build = lambda seed: make_agent(cls, env.observation_space, env.action_space,  # noqa: E731
                                    seed=seed, num_envs=n, **options)
    agent = build(3)
    driver = VecDriver([lambda: gym.make(env_id)] * n, seed=2)
    first = 250 if (cls is Reinforce and "Pend" in env_id) else 30  # mid-episode / mid-rollout
    _train(agent, driver, first)
    assert agent.updates >= 1
    actions = agent.act(driver.obs, True)  # checkpoint between act and observe: the hardest
    buf = io.BytesIO()
    torch.save(agent.state_dict(), buf)
    buf.seek(0)
    restored = build(99)  # a different seed: everything must come from the checkpoint
    restored.load_state_dict(torch.load(buf, weights_only=True))
    step = driver.step(actions)
    agent.observe(step)
    restored.observe(step)
    before = agent.updates
    _train(agent, driver, 200, other=restored)
    assert agent.updates > before and restored.updates == agent.updates
    assert all(torch.equal(x, y)
               for x, y in zip(_params(agent), _params(restored), strict=True))


@pytest.mark.parametrize("cls", AGENTS)
def test_supported_action_spaces(cls):
    assert cls.supports(spaces.Discrete(3)) and cls.supports(LANDER_BOX)
    assert not cls.supports(spaces.Box(-1.0, 1.0, (2, 2), np.float32))  # no matrix actions
    assert not cls.supports(spaces.MultiDiscrete([2, 3]))
