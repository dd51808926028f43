"""Shared building blocks: replay buffer, schedules, flat parameters, seeded networks."""

import copy

import numpy as np
import pytest
import torch
from seedsweep.agents.common.networks import NumpyMLP, mlp
from seedsweep.agents.common.optim import FlatParameters
from seedsweep.agents.common.replay import ReplayBuffer
from seedsweep.agents.common.schedules import LinearSchedule


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


def test_dqn_update_gradient_is_the_huber_loss_gradient():
    """The hand-written update equals autograd on torch's smooth_l1_loss (beta 1, mean)."""
    from gymnasium import spaces
    from seedsweep.agents.dqn import DQN

    agent = DQN(spaces.Box(-1, 1, (4,), np.float32), spaces.Discrete(2),
                DQN.Config(double_q=False, grad_clip_norm=None, batch_size=16), seed=0)
    rng = np.random.default_rng(3)
    for _ in range(40):
        agent.buffer.add(rng.normal(size=(1, 4)).astype(np.float32), rng.integers(2, size=1),
                         rng.normal(size=1) * 3, rng.normal(size=(1, 4)).astype(np.float32),
                         rng.random(1) < 0.2)
    state = copy.deepcopy(agent.rng.bit_generator.state)
    batch = agent.buffer.sample(16, agent.rng)
    agent.rng.bit_generator.state = state  # _update draws the same batch again
    with torch.no_grad():
        nxt = agent.target(torch.from_numpy(batch["next_obs"])).max(1).values
        y = torch.from_numpy(batch["rewards"]) + 0.99 * (1 - torch.from_numpy(
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
    from gymnasium import spaces
    from seedsweep.agents.base import Step
    from seedsweep.agents.dqn import DQN

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
