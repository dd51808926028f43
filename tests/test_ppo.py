"""PPO (Schulman et al. 2017): the clipped objective, the first ratio, a bandit update,
truncation, the lr schedule, determinism and resumption, configs."""

from __future__ import annotations

import dataclasses
import io
import math
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
import yaml
from gymnasium import spaces
from seedsweep.agents.base import ConfigError, Step, build_config
from seedsweep.agents.ppo import PPO, clipped_surrogate, value_loss

from tests.test_policy_gradient import Corridor, VecDriver, corridor_envs

torch.set_num_threads(1)
CONFIGS = Path(__file__).resolve().parent.parent / "configs" / "agent"
SMALL = {"hidden": [16, 16], "num_envs": 2, "rollout_steps": 8, "passes_per_rollout": 2,
         "minibatches_per_pass": 2}


def make_agent(obs_space, action_space, seed=0, **overrides):
    return PPO(obs_space, action_space, build_config(PPO, {**SMALL, **overrides}), seed)


# -- (a) the clipped objective and its gradient, by hand ---------------------------------------
EPS = 0.2  # the paper's ε; each case below is on one side of a clip edge
OLD_P = [0.2, 0.4, 0.6, 0.3, 0.5]  # π_old(a|s) of five samples (our own numbers)
NEW_P = [0.3, 0.2, 0.3, 0.45, 0.55]  # π(a|s) now: ratios ρ = 1.5, 0.5, 0.5, 1.5, 1.1
ADV = [2.0, 1.0, -1.0, -2.0, 3.0]
# Hand arithmetic, L_i = min(ρA, clip(ρ, 0.8, 1.2)·A) (Schulman et al. 2017, eq. 7):
#   ρ=1.5, A=+2: min(3.0, 1.2·2 = 2.4)    = 2.4   clipped term active, dL/dlogπ = 0
#   ρ=0.5, A=+1: min(0.5, 0.8·1 = 0.8)    = 0.5   unclipped,  dL/dlogπ = ρA = 0.5
#   ρ=0.5, A=-1: min(-0.5, 0.8·-1 = -0.8) = -0.8  clipped,    0
#   ρ=1.5, A=-2: min(-3.0, 1.2·-2 = -2.4) = -3.0  unclipped,  ρA = -3.0
#   ρ=1.1, A=+3: min(3.3, 1.1·3 = 3.3)    = 3.3   inside the clip range, ρA = 3.3
# mean L = (2.4 + 0.5 - 0.8 - 3.0 + 3.3) / 5 = 2.4 / 5 = 0.48, the loss is -0.48, and
# d loss / d logπ_i = -(1/5)·(0, 0.5, 0, -3.0, 3.3) = (0, -0.1, 0, 0.6, -0.66)
# (d ρ / d logπ = ρ since ρ = exp(logπ - logπ_old)).
HAND_LOSS = -0.48
HAND_GRAD = [0.0, -0.1, 0.0, 0.6, -0.66]


def test_clipped_objective_and_gradient_match_the_hand_computed_case():
    old = torch.log(torch.tensor(OLD_P, dtype=torch.float64))
    log_prob = torch.log(torch.tensor(NEW_P, dtype=torch.float64)).requires_grad_()
    adv = torch.tensor(ADV, dtype=torch.float64)
    loss, ratio = clipped_surrogate(log_prob, old, adv, EPS)
    np.testing.assert_allclose(ratio.detach().numpy(), [1.5, 0.5, 0.5, 1.5, 1.1], rtol=1e-12)
    assert loss.item() == pytest.approx(HAND_LOSS, abs=1e-12)
    (grad,) = torch.autograd.grad(loss, log_prob)
    np.testing.assert_allclose(grad.numpy(), HAND_GRAD, atol=1e-12)

    # the same objective written the paper's other way (Schulman et al. 2017, Figure 1:
    # for A > 0 it is min(ρ, 1+ε)·A, for A < 0 max(ρ, 1-ε)·A), through torch autograd
    direct_lp = log_prob.detach().clone().requires_grad_()
    r = torch.exp(direct_lp - old)
    direct = torch.where(adv > 0, torch.clamp(r, max=1 + EPS) * adv,
                         torch.clamp(r, min=1 - EPS) * adv)
    (direct_grad,) = torch.autograd.grad(-direct.mean(), direct_lp)
    assert (-direct.mean()).item() == pytest.approx(HAND_LOSS, abs=1e-12)
    np.testing.assert_allclose(grad.numpy(), direct_grad.numpy(), atol=1e-12)


def test_clipped_value_loss_matches_the_hand_computed_case():
    v = torch.tensor([1.0, 3.0, 2.2, 1.0], dtype=torch.float64, requires_grad=True)
    old = torch.full((4,), 2.0, dtype=torch.float64)
    ret = torch.tensor([0.0, 2.9, 3.0, 3.0], dtype=torch.float64)
    # max((v-R)², (old + clip(v-old, ±0.5) - R)²), our own numbers worked by hand:
    #   v=1.0, R=0.0: max(1.0, (1.5-0)² = 2.25)     = 2.25  held term, d/dv = 0
    #   v=3.0, R=2.9: max(0.01, (2.5-2.9)² = 0.16)  = 0.16  held term, 0
    #   v=2.2, R=3.0: max(0.64, 0.64)               = 0.64  inside, 2(v-R) = -1.6
    #   v=1.0, R=3.0: max(4.0, (1.5-3)² = 2.25)     = 4.0   plain term, 2(v-R) = -4
    # mean = 7.05 / 4 = 1.7625; gradient (0, 0, -1.6, -4) / 4
    loss = value_loss(v, old, ret, 0.5)
    assert loss.item() == pytest.approx(1.7625, abs=1e-12)
    (grad,) = torch.autograd.grad(loss, v)
    np.testing.assert_allclose(grad.numpy(), [0.0, 0.0, -0.4, -1.0], atol=1e-12)
    plain = value_loss(v, old, ret, None)  # (1 + 0.01 + 0.64 + 4) / 4 = 1.4125
    assert plain.item() == pytest.approx(1.4125, abs=1e-12)


# -- (b) the first minibatch of an update scores the very policy that acted --------------------
def _record_minibatches(agent):
    seen = []
    original = agent.minibatch_losses

    def recorder(batch, idx):
        out = original(batch, idx)
        seen.append({**out, "idx": idx.clone()})
        return out

    agent.minibatch_losses = recorder
    return seen


@pytest.mark.parametrize("env_id,options", [
    ("CartPole-v1", {}),
    ("CartPole-v1", {"shared_torso": True, "value_clip": 0.2}),
    ("Pendulum-v1", {"gaussian_squash": "clip"}),
    ("Pendulum-v1", {"gaussian_squash": "tanh", "gaussian_std": "state_dependent"}),
])
def test_ratio_is_exactly_one_on_the_first_minibatch(env_id, options):
    env = gym.make(env_id)
    agent = make_agent(env.observation_space, env.action_space, seed=1, lr=0.01,
                       minibatches_per_pass=4, **options)
    seen = _record_minibatches(agent)
    driver = VecDriver([lambda: gym.make(env_id)] * 2, seed=4)
    scalars = {}
    for _ in range(2 * agent.config.rollout_steps):  # two rollouts, two updates
        out = agent.observe(driver.step(agent.act(driver.obs, True)))
        if out:
            scalars = out
            per_update = 2 * 4  # passes × minibatches
            first = seen[-per_update]
            # ρ = π/π_old = 1 by definition before any step (Schulman et al. 2017, sec. 3)
            assert torch.equal(first["ratio"], torch.ones_like(first["ratio"]))
            assert first["approx_kl"].item() == 0.0 and first["clip_fraction"].item() == 0.0
            # the check can fail: after one Adam step the ratios of later minibatches move
            assert all(not torch.equal(s["ratio"], torch.ones_like(s["ratio"]))
                       for s in seen[-per_update + 1:])
            # each pass visits every sample once, in a freshly shuffled order
            orders = [torch.cat([s["idx"] for s in seen[-per_update:][k:k + 4]])
                      for k in (0, 4)]
            for order in orders:
                assert torch.equal(order.sort().values, torch.arange(16))
            assert not torch.equal(orders[0], orders[1])
            assert not torch.equal(orders[0], torch.arange(16))
    assert len(seen) == 2 * 2 * 4 and agent.updates == 2
    expected = {"policy_loss", "value_loss", "entropy", "approx_kl", "clip_fraction",
                "grad_norm", "lr"}
    if not options.get("shared_torso"):
        expected.add("value_grad_norm")
    assert set(scalars) == expected and all(math.isfinite(v) for v in scalars.values())
    assert scalars["approx_kl"] > 0.0 and scalars["lr"] == 0.01


# -- (c) a two-armed bandit: one update, the analytic step -------------------------------------
BANDIT_OBS = spaces.Box(-1.0, 1.0, (1,), np.float32)
ARM_REWARDS = np.array([2.0, 0.5])  # our own bandit: arm 0 is the better arm


def _bandit(**overrides):
    """A PPO agent whose logits are exactly the policy output bias and whose value is exactly
    the value output bias: at observation 0 with every bias zeroed, each hidden activation is
    tanh(0) = 0, and the zero output weights block every gradient to the hidden layers."""
    agent = PPO(BANDIT_OBS, spaces.Discrete(2), build_config(PPO, {
        "hidden": [8], "num_envs": 2, "rollout_steps": 1, "passes_per_rollout": 1,
        "minibatches_per_pass": 1, "standardize": "none", "grad_clip_norm": None,
        "entropy_weight": 0.0, **overrides}), seed=0)
    with torch.no_grad():
        for net, bias in ((agent.net, [0.0, 0.0]), (agent.value_net, [1.0])):
            for layer in net:
                if isinstance(layer, torch.nn.Linear):
                    layer.bias.zero_()
            net[-1].weight.zero_()
            net[-1].bias.copy_(torch.tensor(bias))
    return agent


def _pull_both_arms(agent):
    """One rollout step: env 0 pulls arm 0, env 1 arm 1; one-step episodes (terminated)."""
    obs = np.zeros((2, 1), np.float32)
    actions = np.array([0, 1])
    return agent.observe(Step(obs, actions, ARM_REWARDS[actions], obs, np.ones(2, bool),
                              np.zeros(2, bool), 2))


def _logits(agent):
    return agent._np_policy(np.zeros((1, 1), np.float32))[0].astype(np.float64)


def test_one_update_on_a_bandit_moves_the_logits_by_adams_first_step():
    lr, eps, value_weight = 0.1, 0.125, 0.5
    agent = _bandit(lr=lr, adam_eps=eps, value_weight=value_weight)
    scalars = _pull_both_arms(agent)
    # Derivation. π = softmax(b) = (0.5, 0.5) at b = 0; V(s) = 1 (the value bias); γ·V(s') is
    # dropped (terminated), so A = r − V = (2 − 1, 0.5 − 1) = (1, −0.5). On the first step ρ = 1
    # (unclipped regime) and d(−ρA)/db = −A·∇_b log π(a) = −A·(e_a − π) (softmax derivative):
    #   g = −½[1·(e_0 − π) − 0.5·(e_1 − π)] = −½[(0.5, −0.5) + (0.25, −0.25)] = (−0.375, 0.375),
    # the exact policy gradient −∂J/∂b_j = −π_j(r_j − J) with J = 1.25 (−0.5·0.75 = −0.375), as a
    # batch with each arm in proportion π has no sampling error, whatever the baseline.
    # Adam's first step (Kingma & Ba 2015, Algorithm 1: m̂₁ = g, v̂₁ = g²) moves each parameter
    # by −lr·g/(|g| + ε) = ∓0.1·0.375/0.5 = ±0.075, so b = (0.075, −0.075) and
    # π(arm 0) = σ(0.15) = 0.5374298453437496.
    np.testing.assert_allclose(_logits(agent), [0.075, -0.075], rtol=1e-6)
    p = np.exp(_logits(agent)) / np.exp(_logits(agent)).sum()
    assert p[0] == pytest.approx(0.5374298453437496, rel=1e-6)
    # the critic: λ-return R = A + V = (2, 0.5); d(value_weight·mean((V − R)²))/dV
    #   = 0.5·(2/2)·((1 − 2) + (1 − 0.5)) = −0.25, Adam: V ← 1 + 0.1·0.25/0.375 = 1 + 1/15
    with torch.no_grad():
        v = agent.value_net(torch.zeros(1, 1)).item()
    assert v == pytest.approx(1.0 + 1.0 / 15.0, rel=1e-6)
    assert scalars["policy_loss"] == pytest.approx(-0.25, abs=1e-7)  # −mean(ρA) = −(1−0.5)/2
    # nothing but the two output biases could move (their gradients are exactly zero)
    for net in (agent.net, agent.value_net):
        for layer in list(net)[:-1]:
            if isinstance(layer, torch.nn.Linear):
                assert torch.count_nonzero(layer.bias) == 0
        assert torch.count_nonzero(net[-1].weight) == 0


@pytest.mark.parametrize("ratio_clip,low,high", [
    (0.2, 0.6, 0.61),  # stopped at the clip edge (1 + ε)·0.5 = 0.6
    (0.9, 0.68, 0.70),  # no clip reached: 400 steps of ≈ lr push each logit by ≈ 0.4
])
def test_ratio_clip_stops_the_policy_at_the_edge_on_a_bandit(ratio_clip, low, high):
    """400 passes over one rollout, standardised advantages A = (+1, −1). With two arms
    π(arm 1) = 1 − π(arm 0), so ρ_0 = π_0/0.5 > 1 + ε exactly when ρ_1 < 1 − ε: both samples
    are clipped from π_0 = (1 + ε)·0.5 = 0.6 on and the gradient is zero (Schulman et al.
    2017, eq. 7). Adam's momentum (β₁ = 0.9) carries each logit about lr/(1 − β₁) = 0.01 past
    the edge: π_0 ≤ σ(2·(½ ln 1.5 + 0.01)) ≈ 0.605. Without reaching the clip, each Adam
    step moves b_0 by ≈ lr (constant-sign gradient): b_0 ≈ 0.4, π_0 ≈ σ(0.8) ≈ 0.69."""
    agent = _bandit(lr=0.001, adam_eps=1e-8, standardize="advantages",
                    passes_per_rollout=400, ratio_clip=ratio_clip)
    _pull_both_arms(agent)
    b = _logits(agent)
    p0 = 1.0 / (1.0 + math.exp(b[1] - b[0]))
    assert low < p0 < high


# -- truncation bootstraps, termination does not -----------------------------------------------
def _v(agent, x: float) -> float:
    with torch.no_grad():
        return float(agent.value_net(torch.tensor([[x]])).squeeze())


def test_gae_bootstraps_truncation_and_not_termination():
    g, lam = 0.9, 0.5
    agent = make_agent(Corridor.observation_space, Corridor.action_space, gamma=g,
                       advantage_lambda=lam, rollout_steps=6)
    driver = VecDriver(corridor_envs())  # env 0 truncated after 3 steps, env 1 terminated
    for _ in range(5):  # 5 of 6 rollout steps: the episodes end at t=2, the rollout goes on
        agent.observe(driver.step(agent.act(driver.obs, True)))
    batch = agent.rollout_batch()
    adv = batch["advantages"].double().numpy().reshape(5, 2)
    v = {x: _v(agent, x) for x in (0.0, 1.0, 2.0, 3.0)}
    assert abs(v[3.0] - v[0.0]) > 1e-3  # bootstrapping from the reset obs would show
    obs, true_next = [0.0, 1.0, 2.0, 0.0, 1.0], [1.0, 2.0, 3.0, 1.0, 2.0]
    delta = np.array([[1 + g * v[true_next[t]] - v[obs[t]]] * 2 for t in range(5)])
    delta[2, 1] = 1 - v[2.0]  # env 1 terminated at t=2: no γ·V(s') term
    # A_t = Σ_l (γλ)^l δ_{t+l} within the episode (Schulman et al. 2016, eq. 16)
    expected = np.zeros((5, 2))
    for t in range(5):
        stop = 3 if t < 3 else 5
        expected[t] = sum((g * lam) ** (k - t) * delta[k] for k in range(t, stop))
    np.testing.assert_allclose(adv, expected, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(batch["returns"].double().numpy().reshape(5, 2),
                               expected + np.array([[v[o]] * 2 for o in obs]), rtol=1e-5,
                               atol=1e-6)


# -- the learning-rate schedule ----------------------------------------------------------------
def test_lr_falls_linearly_to_zero_over_lr_decay_steps():
    env = gym.make("CartPole-v1")
    agent = make_agent(env.observation_space, env.action_space, lr=0.01, rollout_steps=4,
                       lr_decay_steps=40)
    driver = VecDriver([lambda: gym.make("CartPole-v1")] * 2, seed=0)
    lrs, frozen = [], None
    for _ in range(7 * 4):  # 7 updates, one per 8 env steps
        out = agent.observe(driver.step(agent.act(driver.obs, True)))
        if out:
            lrs.append(out["lr"])
            assert agent.opt.param_groups[0]["lr"] == out["lr"]
            if out["lr"] == 0.0 and frozen is None:
                frozen = [p.detach().clone() for p in agent.params]
    # lr·max(0, 1 − s/40) with s = 0, 8, 16, ... env steps before each rollout (linear decay)
    np.testing.assert_allclose(lrs, [0.01 * max(0.0, 1 - s / 40) for s in range(0, 56, 8)],
                               rtol=1e-12)
    assert all(torch.equal(a, b) for a, b in zip(frozen, agent.params, strict=True))


# -- (d) determinism and resumption ------------------------------------------------------------
CASES = [  # (env id, config) small enough for several updates in a test
    ("CartPole-v1", {}),
    ("CartPole-v1", {"shared_torso": True, "value_clip": 0.5, "lr_decay_steps": 300,
                     "minibatches_per_pass": 3}),
    ("Pendulum-v1", {"gaussian_squash": "clip"}),
    ("Pendulum-v1", {"gaussian_squash": "tanh", "gaussian_std": "state_dependent",
                     "standardize": "none"}),
]


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


def _assert_same_state(a, b, path="state"):
    """Recursive equality of two state dicts: tensors bit for bit, the rest with ==."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), path
        for k in a:
            _assert_same_state(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _assert_same_state(x, y, f"{path}[{i}]")
    elif isinstance(a, torch.Tensor):
        assert isinstance(b, torch.Tensor) and a.dtype == b.dtype and torch.equal(a, b), path
    else:
        assert a == b, path


@pytest.mark.parametrize("env_id,options", CASES)
def test_same_seed_same_actions_and_state(env_id, options):
    env = gym.make(env_id)
    agents = [make_agent(env.observation_space, env.action_space, seed=s, **options)
              for s in (7, 7, 8)]
    taken = [[] for _ in agents]
    for i, agent in enumerate(agents):
        driver = VecDriver([lambda: gym.make(env_id)] * 2, seed=1)
        for _ in range(40):  # five updates
            a = agent.act(driver.obs, True)
            taken[i].append(a)
            agent.observe(driver.step(a))
    assert agents[0].updates == 5
    assert np.array_equal(np.array(taken[0]), np.array(taken[1]))
    _assert_same_state(agents[0].state_dict(), agents[1].state_dict())
    assert not np.array_equal(np.array(taken[0]), np.array(taken[2]))  # another seed differs


@pytest.mark.parametrize("env_id,options", CASES)
def test_state_dict_round_trip_continues_identically(env_id, options):
    env = gym.make(env_id)
    build = lambda seed: make_agent(env.observation_space, env.action_space,  # noqa: E731
                                    seed=seed, **options)
    agent = build(3)
    driver = VecDriver([lambda: gym.make(env_id)] * 2, seed=2)
    _train(agent, driver, 21)  # two updates and 5 steps into the third rollout
    assert agent.updates == 2 and agent._t == 5
    actions = agent.act(driver.obs, True)  # checkpoint between act and observe: the hardest
    buf = io.BytesIO()
    torch.save(agent.state_dict(), buf)
    buf.seek(0)
    restored = build(99)  # a different seed: everything must come from the checkpoint
    restored.load_state_dict(torch.load(buf, weights_only=True))
    step = driver.step(actions)
    agent.observe(step)
    restored.observe(step)
    _train(agent, driver, 60, other=restored)
    assert agent.updates == restored.updates == 10
    _assert_same_state(agent.state_dict(), restored.state_dict())


# -- (e) bad config values name the field ------------------------------------------------------
@pytest.mark.parametrize("field,value,allowed", [
    ("passes_per_rollout", 0, ">= 1"),
    ("minibatches_per_pass", 0, "in [1, rollout_steps × num_envs = 1024]"),
    ("ratio_clip", 0.0, "in (0, 1)"),
    ("ratio_clip", 1.0, "in (0, 1)"),
    ("ratio_clip", float("nan"), "in (0, 1)"),
    ("value_clip", 0.0, "a finite number > 0, or null"),
    ("value_clip", float("inf"), "a finite number > 0, or null"),
    ("lr", float("nan"), "a finite number > 0"),
    ("lr", float("inf"), "a finite number > 0"),
    ("lr", 0.0, "a finite number > 0"),
    ("lr_decay_steps", 0, ">= 1 env steps, or null"),
    ("lr_decay_steps", 1.5, "expected an integer"),
    ("adam_eps", 0.0, "a finite number > 0"),
    ("value_weight", float("inf"), "a finite number >= 0"),
    ("entropy_weight", -0.01, "a finite number >= 0"),
    ("grad_clip_norm", float("inf"), "a finite number > 0, or null"),
    ("grad_clip_norm", 0.0, "a finite number > 0, or null"),
    ("gaussian_log_std_start", float("nan"), "a finite number"),
    ("advantage_lambda", 1.5, "in [0, 1]"),
    ("gamma", 0.0, "in (0, 1]"),
    ("gamma", float("nan"), "in (0, 1]"),
    ("num_envs", 0, ">= 1"),
    ("rollout_steps", 0, ">= 1"),
    ("standardize", "minibatch", "'advantages'"),
    ("vector_mode", "threads", "'async'"),
])
def test_bad_config_names_the_field_and_the_allowed_values(field, value, allowed):
    with pytest.raises(ConfigError) as err:
        build_config(PPO, {field: value})
    assert err.value.field == f"agent.{field}"
    assert allowed in str(err.value) and "\n" not in str(err.value)


def test_more_minibatches_than_samples_is_refused():
    with pytest.raises(ConfigError) as err:
        build_config(PPO, {"num_envs": 2, "rollout_steps": 3, "minibatches_per_pass": 7})
    assert err.value.field == "agent.minibatches_per_pass"
    assert "in [1, rollout_steps × num_envs = 6]" in str(err.value)


# -- (f) the shipped YAML ----------------------------------------------------------------------
def test_shipped_yaml_sets_every_hyperparameter_and_builds():
    raw = yaml.safe_load((CONFIGS / "ppo.yaml").read_text())
    assert raw.pop("name") == "ppo"
    assert raw.pop("entry") == "seedsweep.agents.ppo:PPO"
    raw.pop("search")  # the search space of seedsweep tune, not a hyperparameter
    per_env = raw.pop("per_env")  # settings for one env each, merged over the rest
    assert set(raw) == {f.name for f in dataclasses.fields(PPO.Config)}
    assert build_config(PPO, raw) == PPO.Config()  # the dataclass defaults are the shipped ones
    for env, values in per_env.items():
        assert (CONFIGS.parent / "env" / f"{env}.yaml").is_file(), env
        assert build_config(PPO, {**raw, **values}) != PPO.Config()


def test_supported_action_spaces():
    assert PPO.supports(spaces.Discrete(3))
    assert PPO.supports(spaces.Box(-1.0, 1.0, (2,), np.float32))
    assert not PPO.supports(spaces.Box(-1.0, 1.0, (2, 2), np.float32))  # no matrix actions
    assert not PPO.supports(spaces.MultiDiscrete([2, 3]))
