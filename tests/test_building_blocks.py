"""Shared building blocks: replay buffer, schedules, flat parameters, seeded networks."""

import numpy as np
import pytest
import torch

from agents.common.networks import NumpyMLP, mlp
from agents.common.optim import FlatParameters
from agents.common.replay import ReplayBuffer
from agents.common.schedules import LinearSchedule


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
    assert s(50) == pytest.approx(0.55)  # halfway between 1.0 and 0.1
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
        flat.zero_grad()
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
