"""Shared building blocks: replay buffer, schedules, flat parameters, seeded networks."""

import copy
import dataclasses
from pathlib import Path

import numpy as np
import pytest
import torch
import yaml
from gymnasium import spaces
from seedsweep.agents.base import Step, build_config
from seedsweep.agents.common.networks import NumpyMLP, mlp
from seedsweep.agents.common.optim import FlatParameters
from seedsweep.agents.common.replay import MultiStepFolder, ReplayBuffer
from seedsweep.agents.common.schedules import LinearSchedule
from seedsweep.agents.dqn import DQN
from seedsweep.runner.agent_check.inspect import roundtrip_bytes


def test_replay_ring_overwrites_oldest_first():
    buf = ReplayBuffer(capacity=5, obs_shape=(1,))
    for i in range(7):  # 7 transitions into 5 slots: 0 and 1 are gone
        buf.add(np.array([[i]], np.float32), np.array([i]), np.array([float(i)]),
                np.array([[i + 1]], np.float32), np.array([False]))
    assert len(buf) == 5
    assert sorted(buf.rewards.tolist()) == [2.0, 3.0, 4.0, 5.0, 6.0]
    assert buf.pos == 2


def test_replay_batch_add_wraps_and_keeps_pairs():
    buf = ReplayBuffer(capacity=4, obs_shape=(1,))
    obs = np.arange(6, dtype=np.float32).reshape(6, 1)
    buf.add(obs[:3], np.arange(3), np.arange(3.0), obs[:3] + 10, np.zeros(3))
    buf.add(obs[3:], np.arange(3, 6), np.arange(3.0, 6.0), obs[3:] + 10, np.zeros(3))
    assert len(buf) == 4
    # every stored transition keeps its own successor (next = obs + 10)
    np.testing.assert_array_equal(buf.next_obs, buf.obs + 10)
    assert buf.obs.dtype == np.float32 and buf.actions.dtype == np.int64  # arrays, no objects


def test_replay_sample_depends_only_on_rng_and_state_round_trips():
    buf = ReplayBuffer(capacity=100, obs_shape=(3,))
    rng = np.random.default_rng(0)
    for _ in range(50):
        buf.add(rng.normal(size=(1, 3)).astype(np.float32), rng.integers(2, size=1),
                rng.normal(size=1), rng.normal(size=(1, 3)).astype(np.float32), np.array([False]))
    a = buf.sample(8, np.random.default_rng(7))
    b = buf.sample(8, np.random.default_rng(7))
    for k in a:
        np.testing.assert_array_equal(a[k], b[k])
    other = ReplayBuffer(capacity=100, obs_shape=(3,))
    other.load_state_dict(buf.state_dict())
    c = other.sample(8, np.random.default_rng(7))
    for k in a:
        np.testing.assert_array_equal(a[k], c[k])


@pytest.mark.parametrize("discounts", [False, True])
def test_replay_nbytes_is_what_the_arrays_hold(discounts):
    """The memory estimate equals numpy's own ``nbytes`` of the allocated arrays."""
    buf = ReplayBuffer(capacity=1000, obs_shape=(8,), discounts=discounts)
    held = sum(getattr(buf, name).nbytes for name in buf.fields)
    assert ReplayBuffer.nbytes(1000, (8,), discounts=discounts) == held
    with pytest.raises(ValueError, match="discounts"):  # each buffer takes only its own kind
        buf.add(np.zeros((1, 8), np.float32), np.zeros(1, np.int64), np.zeros(1),
                np.zeros((1, 8), np.float32), np.zeros(1), None if discounts else np.ones(1))


def test_replay_rejects_capacity_mismatch():
    buf = ReplayBuffer(capacity=10, obs_shape=(1,))
    with pytest.raises(ValueError, match="capacity"):
        ReplayBuffer(capacity=11, obs_shape=(1,)).load_state_dict(buf.state_dict())


def test_linear_schedule_endpoints_and_midpoint():
    s = LinearSchedule(1.0, 0.1, 100)
    assert s(0) == 1.0
    # linear interpolation, 1.0 + (0.1 - 1.0) * 50/100 (common practice, no source)
    assert s(50) == pytest.approx(0.55)
    assert s(100) == 0.1 and s(10_000) == 0.1
    assert LinearSchedule(1.0, 0.1, 0)(0) == 0.1


def test_mlp_init_is_seeded_and_matches_numpy_forward():
    a = mlp(4, [8, 8], 2, torch.Generator().manual_seed(3))
    b = mlp(4, [8, 8], 2, torch.Generator().manual_seed(3))
    for pa, pb in zip(a.parameters(), b.parameters(), strict=True):
        assert torch.equal(pa, pb)
    x = np.random.default_rng(0).normal(size=(5, 4)).astype(np.float32)
    with torch.no_grad():
        expected = a(torch.from_numpy(x)).numpy()
    np.testing.assert_allclose(NumpyMLP(a)(x), expected, rtol=1e-5, atol=1e-6)


def test_torch_default_init_bounds():
    # nn.Linear's default init: weights and biases within 1/sqrt(fan_in) (torch docs).
    net = mlp(16, [32], 4, torch.Generator().manual_seed(0))
    for layer in (net[0], net[2]):
        bound = 1 / np.sqrt(layer.in_features)
        assert layer.weight.abs().max() <= bound and layer.bias.abs().max() <= bound


def test_flat_parameters_match_per_parameter_clipping_and_adam():
    gen = torch.Generator().manual_seed(0)
    net = mlp(3, [16], 2, gen)
    ref = mlp(3, [16], 2, gen)
    ref.load_state_dict(net.state_dict())
    flat = FlatParameters(net)
    opt = flat.adam(lr=1e-2)
    ref_opt = torch.optim.Adam(ref.parameters(), lr=1e-2)
    x = torch.randn(32, 3, generator=gen)
    for _ in range(3):
        flat.grad.zero_()
        (net(x) ** 2).sum().backward()
        norm = flat.clip_grad_norm_(0.5)
        ref_opt.zero_grad()
        (ref(x) ** 2).sum().backward()
        ref_norm = torch.nn.utils.clip_grad_norm_(ref.parameters(), 0.5)  # the reference rule
        assert torch.allclose(norm, ref_norm, rtol=1e-5)
        opt.step()
        ref_opt.step()
    for p, q in zip(net.parameters(), ref.parameters(), strict=True):
        assert torch.allclose(p, q, atol=1e-6)


@pytest.mark.parametrize("activation", ["relu", "tanh"])
def test_numpy_backward_matches_torch_autograd(activation):
    gen = torch.Generator().manual_seed(1)
    net = mlp(5, [16, 8], 3, gen, activation=activation)
    x = np.random.default_rng(0).normal(size=(32, 5)).astype(np.float32)
    g_out = np.random.default_rng(1).normal(size=(32, 3)).astype(np.float32)
    out = net(torch.from_numpy(x))
    out.backward(torch.from_numpy(g_out))  # reference gradients: torch.autograd
    expected = [p.grad.clone() for p in net.parameters()]
    np_net = NumpyMLP(net)
    views = np_net.grad_views(net)
    for p in net.parameters():
        p.grad.zero_()
    y, inputs = np_net.forward_train(x)
    np.testing.assert_allclose(y, out.detach().numpy(), rtol=1e-5, atol=1e-6)
    np_net.backward(inputs, g_out, views)
    for p, ref in zip(net.parameters(), expected, strict=True):
        torch.testing.assert_close(p.grad, ref, rtol=1e-5, atol=1e-6)


@pytest.mark.parametrize("bootstrap_steps", [1, 3])
def test_dqn_update_gradient_is_the_huber_loss_gradient(bootstrap_steps):
    """The hand-written update equals autograd on torch's smooth_l1_loss (beta 1, mean);
    with n-step targets the bootstrap value is scaled by each transition's own gamma^k."""

    agent = DQN(spaces.Box(-1, 1, (4,), np.float32), spaces.Discrete(2),
                DQN.Config(double_q=False, grad_clip_norm=None, batch_size=16,
                           bootstrap_steps=bootstrap_steps), seed=0)
    rng = np.random.default_rng(3)
    for _ in range(40):
        k = rng.integers(1, bootstrap_steps + 1, size=1)
        agent.buffer.add(rng.normal(size=(1, 4)).astype(np.float32), rng.integers(2, size=1),
                         rng.normal(size=1) * 3, rng.normal(size=(1, 4)).astype(np.float32),
                         rng.random(1) < 0.2, None if bootstrap_steps == 1 else 0.99 ** k)
    state = copy.deepcopy(agent.rng.bit_generator.state)
    batch = agent.buffer.sample(16, agent.rng)
    agent.rng.bit_generator.state = state  # _update draws the same batch again
    discount = (torch.full((16,), 0.99) if bootstrap_steps == 1
                else torch.from_numpy(batch["discounts"]))
    if bootstrap_steps > 1:
        assert len(set(batch["discounts"].tolist())) > 1  # the batch mixes k = 1, 2, 3
    with torch.no_grad():
        nxt = agent.target(torch.from_numpy(batch["next_obs"])).max(1).values
        y = torch.from_numpy(batch["rewards"]) + discount * (1 - torch.from_numpy(
            batch["terminated"])) * nxt
    ref = mlp(4, [64, 64], 2, torch.Generator())
    ref.load_state_dict(agent.q.state_dict())
    q_taken = ref(torch.from_numpy(batch["obs"])).gather(
        1, torch.from_numpy(batch["actions"]).unsqueeze(1)).squeeze(1)
    ref_loss = torch.nn.functional.smooth_l1_loss(q_taken, y)
    ref_loss.backward()
    agent.opt.step = lambda: None  # look at the gradient before Adam moves the weights
    loss = agent._update()
    assert loss == pytest.approx(float(ref_loss.detach()), rel=1e-5)
    for p, r in zip(agent.q.parameters(), ref.parameters(), strict=True):
        torch.testing.assert_close(p.grad, r.grad, rtol=1e-4, atol=1e-6)


def test_dqn_lr_decay_follows_torch_linear_lr():
    """``lr_decay_steps``: the Adam learning rate at each update equals torch's
    ``optim.lr_scheduler.LinearLR`` (start factor 1, end factor lr_end / lr, total_iters =
    lr_decay_steps) stepped once per env step; unset, the rate stays at ``lr``."""

    lr, lr_end, decay = 1e-3, 2e-4, 30
    obs_space, act_space = spaces.Box(-1, 1, (4,), np.float32), spaces.Discrete(2)
    decayed = DQN(obs_space, act_space, DQN.Config(lr=lr, lr_end=lr_end, lr_decay_steps=decay,
                                                   replay_warmup_steps=5, batch_size=8), seed=0)
    constant = DQN(obs_space, act_space, DQN.Config(lr=lr, replay_warmup_steps=5, batch_size=8),
                   seed=0)
    ref_opt = torch.optim.SGD([torch.zeros(1, requires_grad=True)], lr=lr)
    ref = torch.optim.lr_scheduler.LinearLR(ref_opt, start_factor=1.0, end_factor=lr_end / lr,
                                            total_iters=decay)
    rng = np.random.default_rng(1)
    seen = []
    for t in range(1, 46):
        ref_opt.step()
        ref.step()  # now at iteration t: the rate for env step t
        o = rng.normal(size=(1, 4)).astype(np.float32)
        step = Step(o, np.array([t % 2]), np.array([1.0]), o, np.array([False]),
                    np.array([False]), t)
        decayed.observe(step)
        constant.observe(step)
        if t >= 5:  # updates start at the warm-up
            seen.append(decayed.opt.param_groups[0]["lr"])
            assert seen[-1] == pytest.approx(ref_opt.param_groups[0]["lr"], rel=1e-9)
            assert constant.opt.param_groups[0]["lr"] == lr
    assert seen[0] > seen[10] > seen[-1] == pytest.approx(lr_end, rel=1e-9)


# -- n-step returns ------------------------------------------------------------------------
# Sutton & Barto (2018), eq. (7.1): G_{t:t+n} = R_{t+1} + gamma R_{t+2} + ... +
# gamma^(n-1) R_{t+n} + gamma^n V(S_{t+n}); where the episode ends at T < t + n the return
# stops there (G_{t:t+n} = G_t). The folder gives (G without the bootstrap term, gamma^k).
def _fold(folder, steps):
    """Push ``(obs, action, reward, next_obs, terminated, truncated)`` rows of one env."""
    rows = []
    for o, a, r, o2, term, trunc in steps:
        out = folder.push(np.array([[o]], np.float32), np.array([a]), np.array([r]),
                          np.array([[o2]], np.float32), np.array([term]), np.array([trunc]))
        rows.extend((o[0], a, g, o2[0], term, d)
                    for o, a, g, o2, term, d in zip(*(x.tolist() for x in out), strict=True))
    return rows


def test_multi_step_returns_are_eq_7_1_and_stop_at_termination():
    folder = MultiStepFolder(horizon=3, gamma=0.9, num_envs=1, obs_dim=1)
    # states 0..5, rewards 1..5, terminated on reaching state 5
    rows = _fold(folder, [(t, t % 2, t + 1.0, t + 1, t == 4, False) for t in range(5)])
    # (obs, action, return, next_obs, terminated, discount), hand-computed from eq. (7.1)
    expected = [
        (0, 0, 1 + 0.9 * 2 + 0.81 * 3, 3, 0, 0.729),  # 5.23, bootstraps from S_3
        (1, 1, 2 + 0.9 * 3 + 0.81 * 4, 4, 0, 0.729),  # 7.94
        (2, 0, 3 + 0.9 * 4 + 0.81 * 5, 5, 1, 0.729),  # 10.65, S_5 is terminal
        (3, 1, 4 + 0.9 * 5, 5, 1, 0.81),              # 8.5: only two steps were left
        (4, 0, 5.0, 5, 1, 0.9),                       # 5.0
    ]
    assert len(rows) == len(expected)
    for got, want in zip(rows, expected, strict=True):
        assert got == pytest.approx(want, rel=1e-6), (got, want)
    assert folder.count.tolist() == [0]  # nothing pending after the episode's end


def test_multi_step_truncation_bootstraps_and_the_next_episode_starts_afresh():
    folder = MultiStepFolder(horizon=3, gamma=0.5, num_envs=1, obs_dim=1)
    # a two-step episode cut by a time limit, then a new episode from state 10
    rows = _fold(folder, [(0, 0, 1.0, 1, False, False), (1, 0, 2.0, 2, False, True),
                          (10, 1, 4.0, 11, False, False), (11, 1, 8.0, 12, False, False),
                          (12, 1, 16.0, 13, False, False)])
    expected = [
        (0, 0, 1 + 0.5 * 2, 2, 0, 0.25),  # cut after 2 steps: bootstraps with gamma^2 from S_2
        (1, 0, 2.0, 2, 0, 0.5),
        (10, 1, 4 + 0.5 * 8 + 0.25 * 16, 13, 0, 0.125),  # no reward of the first episode
    ]
    assert rows == [pytest.approx(e) for e in expected]
    assert folder.count.tolist() == [2]  # states 11 and 12 wait for more steps


def _naive_n_step(rewards, ends, n, gamma):
    """Eq. (7.1) straight from one env's reward list (reference for the batched folder)."""
    out, start = [], 0
    for end in ends:  # index one past each episode's last step
        for t in range(start, end):
            k = min(n, end - t)
            out.append((t, sum(gamma ** i * rewards[t + i] for i in range(k)), t + k,
                        gamma ** k))
        start = end
    return out


def test_multi_step_folder_keeps_parallel_envs_apart():
    n, gamma, steps = 4, 0.95, 30
    rng = np.random.default_rng(5)
    rewards = rng.normal(size=(steps, 2))
    ends = {0: [7, 19, 30], 1: [12, 30]}  # env 0 ends twice before env 1 ends once
    folder = MultiStepFolder(horizon=n, gamma=gamma, num_envs=2, obs_dim=1)
    got = {0: [], 1: []}
    for t in range(steps):
        done = np.array([t + 1 in ends[0], t + 1 in ends[1]])
        term = np.array([done[0] and t + 1 < 30, False])  # env 0 terminates; env 1 is cut
        trunc = done & ~term
        out = folder.push(np.array([[t], [100 + t]], np.float32), np.array([0, 1]),
                          rewards[t], np.array([[t + 1], [101 + t]], np.float32), term, trunc)
        for o, a, g, o2, _, d in zip(*out, strict=True):
            env = int(a)
            got[env].append((int(o[0]) - 100 * env, g, int(o2[0]) - 100 * env, d))
    for env in (0, 1):
        want = _naive_n_step(rewards[:, env].tolist(), ends[env], n, gamma)
        assert sorted(got[env]) == [pytest.approx(w) for w in want]


def test_dqn_multi_step_state_round_trips_mid_episode():
    """Saved with transitions still pending and restored into a fresh agent, DQN carries on
    exactly as the original (same buffer, same weights)."""

    config = DQN.Config(bootstrap_steps=3, replay_warmup_steps=5, batch_size=4, num_envs=2)
    obs_space, act_space = spaces.Box(-1, 1, (4,), np.float32), spaces.Discrete(2)
    a = DQN(obs_space, act_space, config, seed=0)
    rng = np.random.default_rng(2)

    def step(t):
        o = rng.normal(size=(2, 4)).astype(np.float32)
        done = np.array([t % 5 == 0, t % 7 == 0])  # pending at the save after step 11
        return Step(o, rng.integers(2, size=2), rng.normal(size=2), o + 1, done,
                    np.zeros(2, bool), 2 * t)

    for t in range(1, 12):
        a.observe(step(t))
    assert a.folder.count.sum() > 0  # something pending at the save
    b = DQN(obs_space, act_space, config, seed=1)
    b.load_state_dict(roundtrip_bytes(a.state_dict())[0])  # saved and read as a checkpoint
    for t in range(12, 30):
        s = step(t)
        a.observe(s)
        b.observe(s)
    for name in a.buffer.fields:
        np.testing.assert_array_equal(getattr(a.buffer, name), getattr(b.buffer, name))
    for pa, pb in zip(a.q.parameters(), b.q.parameters(), strict=True):
        assert torch.equal(pa, pb)


def test_dqn_shipped_yaml_sets_every_hyperparameter():
    """Every field of DQN.Config is in configs/agent/dqn.yaml with the dataclass default, so
    a run's resolved config names all of them (and so does its id)."""

    raw = yaml.safe_load((Path(__file__).parents[1] / "configs/agent/dqn.yaml").read_text())
    assert raw.pop("name") == "dqn" and raw.pop("entry") == "seedsweep.agents.dqn:DQN"
    raw.pop("search")
    raw.pop("per_env")
    assert set(raw) == {f.name for f in dataclasses.fields(DQN.Config)}
    assert build_config(DQN, raw) == DQN.Config()
