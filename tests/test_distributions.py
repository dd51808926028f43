"""Policy distributions against reference implementations (torch.distributions, scipy.stats)."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from gymnasium import spaces
from scipy import integrate, stats
from seedsweep.agents.common.distributions import (
    LOG_STD_MAX,
    ActionSampler,
    Categorical,
    DiagGaussian,
    PolicyHead,
    select_actions,
)
from torch.distributions import (
    AffineTransform,
    Independent,
    Normal,
    TanhTransform,
    TransformedDistribution,
)

torch.set_num_threads(1)


def _gen(seed: int = 0) -> torch.Generator:
    return torch.Generator().manual_seed(seed)


def _gaussian(mean, log_std, low, high, squash) -> DiagGaussian:
    t = lambda x: torch.as_tensor(np.asarray(x, dtype=np.float32))  # noqa: E731
    return DiagGaussian(t(mean), t(log_std), t(low), t(high), squash)


# -- categorical ----------------------------------------------------------------------------
def test_categorical_log_prob_and_entropy_match_torch_and_scipy():
    rng = np.random.default_rng(0)
    logits = torch.from_numpy(rng.normal(size=(50, 5)) * 2).float()
    actions = torch.from_numpy(rng.integers(0, 5, size=50))
    ours = Categorical(logits)
    ref = torch.distributions.Categorical(logits=logits)
    torch.testing.assert_close(ours.log_prob(actions), ref.log_prob(actions))  # torch reference
    torch.testing.assert_close(ours.entropy(), ref.entropy())
    probs = torch.softmax(logits.double(), -1).numpy()
    np.testing.assert_allclose(ours.entropy().numpy(), stats.entropy(probs, axis=1), rtol=1e-5)
    assert torch.equal(ours.mode(), logits.argmax(-1))


def test_categorical_entropy_of_a_certain_action_is_zero_not_nan():
    logits = torch.tensor([[0.0, -float("inf"), -float("inf")]])
    h = Categorical(logits).entropy()
    assert torch.isfinite(h).all() and float(h) == 0.0  # H of a point mass is 0 (definition)


def test_categorical_samples_follow_the_softmax():
    logits = torch.tensor([1.0, 0.0, -1.0, 0.5])
    n = 40_000
    draws = Categorical(logits.expand(n, 4)).sample(_gen(1)).numpy()
    counts = np.bincount(draws, minlength=4)
    expected = torch.softmax(logits.double(), -1).numpy() * n
    # chi-square goodness of fit (scipy.stats.chisquare); p < 1e-4 would flag a wrong sampler
    assert stats.chisquare(counts, expected).pvalue > 1e-4


# -- diagonal Gaussian, clipped ---------------------------------------------------------------
def test_clip_log_prob_inside_bounds_is_the_gaussian_density():
    rng = np.random.default_rng(2)
    mean = rng.normal(size=(20, 3))
    log_std = rng.normal(scale=0.3, size=(20, 3))
    action = np.clip(mean + rng.normal(scale=0.2, size=(20, 3)), -1.9, 1.9)
    d = _gaussian(mean, log_std, [-2.0] * 3, [2.0] * 3, "clip")
    ours = d.log_prob(torch.from_numpy(action.astype(np.float32))).numpy()
    ref = stats.norm.logpdf(action, mean, np.exp(log_std)).sum(-1)  # scipy.stats reference
    np.testing.assert_allclose(ours, ref, rtol=1e-4, atol=1e-4)
    torch_ref = Independent(Normal(torch.tensor(mean), torch.tensor(np.exp(log_std))), 1)
    np.testing.assert_allclose(ours, torch_ref.log_prob(torch.tensor(action)).numpy(),
                               rtol=1e-4, atol=1e-4)


def test_clip_log_prob_at_a_bound_is_the_tail_mass():
    mean, log_std = np.array([[1.5, -0.5]]), np.array([[0.2, -0.3]])
    d = _gaussian(mean, log_std, [-1.0, -1.0], [2.0, 1.0], "clip")
    action = torch.tensor([[2.0, -1.0]])  # first dim at its upper bound, second at its lower
    std = np.exp(log_std[0])
    ref = stats.norm.logsf(2.0, mean[0, 0], std[0]) + stats.norm.logcdf(-1.0, mean[0, 1], std[1])
    np.testing.assert_allclose(d.log_prob(action).numpy(), [ref], rtol=1e-5)


def test_clipped_likelihood_integrates_to_one():
    """Density inside plus the two point masses is a probability distribution (1-D)."""
    d = _gaussian([[0.7]], [[0.1]], [-1.0], [1.0], "clip")
    dens = lambda a: float(d.log_prob(torch.tensor([[a]], dtype=torch.float32)).exp())  # noqa: E731
    inside, _ = integrate.quad(dens, -1.0 + 1e-9, 1.0 - 1e-9)  # scipy.integrate.quad
    total = inside + dens(-1.0) + dens(1.0)
    assert total == pytest.approx(1.0, abs=1e-5)


def test_clipped_samples_hit_the_bound_as_often_as_the_tail_mass():
    n = 20_000
    d = _gaussian(np.full((n, 1), 1.8), np.zeros((n, 1)), [-2.0], [2.0], "clip")
    action, pre = d.sample(_gen(3))
    a = action.numpy()[:, 0]
    assert a.min() >= -2.0 and a.max() <= 2.0
    frac = (a == 2.0).mean()
    p = stats.norm.sf(2.0, 1.8, 1.0)  # P(u > high) for u ~ N(1.8, 1) (scipy.stats)
    assert abs(frac - p) < 4 * np.sqrt(p * (1 - p) / n)
    torch.testing.assert_close(action, pre.clamp(-2.0, 2.0))


def test_gaussian_entropy_matches_scipy():
    log_std = np.array([[-0.5, 0.0, 0.7]])
    d = _gaussian(np.zeros((1, 3)), log_std, [-1.0] * 3, [1.0] * 3, "clip")
    ref = stats.norm(0.0, np.exp(log_std[0])).entropy().sum()  # scipy.stats reference
    np.testing.assert_allclose(d.entropy().numpy(), [ref], rtol=1e-6)


# -- diagonal Gaussian, tanh-squashed ----------------------------------------------------------
def _tanh_reference(mean, std, low, high):
    """torch.distributions: Normal -> tanh -> affine onto [low, high], summed over dims."""
    low, high = torch.tensor(low, dtype=torch.float64), torch.tensor(high, dtype=torch.float64)
    base = Normal(torch.tensor(mean, dtype=torch.float64), torch.tensor(std, dtype=torch.float64))
    squash = [TanhTransform(), AffineTransform((high + low) / 2, (high - low) / 2)]
    return Independent(TransformedDistribution(base, squash), 1)


def test_tanh_log_prob_matches_transformed_distribution():
    rng = np.random.default_rng(4)
    mean = rng.normal(size=(30, 2))
    log_std = rng.normal(scale=0.3, size=(30, 2)) - 0.3
    low, high = [-2.0, 0.0], [2.0, 3.0]
    d = _gaussian(mean, log_std, low, high, "tanh")
    action, pre = d.sample(_gen(5))
    ref = _tanh_reference(mean, np.exp(log_std), low, high)
    expected = ref.log_prob(action.double()).numpy()
    np.testing.assert_allclose(d.log_prob(action, pre).numpy(), expected, rtol=1e-4, atol=1e-3)
    # without the remembered pre-squash sample, atanh of the action gives the same away
    # from saturation
    np.testing.assert_allclose(d.log_prob(action).numpy(), expected, rtol=1e-3, atol=1e-2)
    assert (action >= torch.tensor(low)).all() and (action <= torch.tensor(high)).all()


def test_tanh_log_prob_stays_finite_when_the_action_saturates():
    d = _gaussian([[0.0]], [[0.0]], [-1.0], [1.0], "tanh")
    u = torch.tensor([[12.0]])  # tanh(12) == 1.0 in float32
    assert float(d.squash_action(u)) == 1.0
    lp = d.log_prob(d.squash_action(u), u)
    # log N(12; 0, 1) - log(1 - tanh^2 12): closed form with 1 - tanh^2 u = sech^2 u
    ref = stats.norm.logpdf(12.0) - 2.0 * np.log(1.0 / np.cosh(12.0))
    np.testing.assert_allclose(lp.numpy(), [ref], rtol=1e-5)


def test_modes_are_the_clipped_or_squashed_mean():
    mean = np.array([[3.0, -0.5]])
    clip = _gaussian(mean, np.zeros((1, 2)), [-2.0, -2.0], [2.0, 2.0], "clip")
    np.testing.assert_allclose(clip.mode().numpy(), [[2.0, -0.5]])
    tanh = _gaussian(mean, np.zeros((1, 2)), [-2.0, -2.0], [2.0, 2.0], "tanh")
    np.testing.assert_allclose(tanh.mode().numpy(), 2.0 * np.tanh(mean), rtol=1e-6)


# -- the head ---------------------------------------------------------------------------------
def test_head_output_sizes_and_log_std_modes():
    box = spaces.Box(-1.0, 1.0, (3,), np.float32)
    assert PolicyHead(spaces.Discrete(4)).out_dim == 4
    indep = PolicyHead(box, "state_independent", gaussian_log_std_start=-0.5)
    assert indep.out_dim == 3 and [n for n, _ in indep.named_parameters()] == ["log_std"]
    dist = indep(torch.zeros(2, 3))
    torch.testing.assert_close(dist.log_std, torch.full((2, 3), -0.5))
    dep = PolicyHead(box, "state_dependent", gaussian_log_std_start=-0.5)
    assert dep.out_dim == 6 and not list(dep.parameters())
    out = torch.tensor([[0.0, 0.0, 0.0, 0.3, 0.0, 100.0]])
    torch.testing.assert_close(dep(out).log_std, torch.tensor([[-0.2, -0.5, LOG_STD_MAX]]))
    with pytest.raises(ValueError, match="finite"):
        PolicyHead(spaces.Box(-np.inf, np.inf, (1,)), squash="tanh")


def test_select_actions_is_reproducible_and_the_mode_is_deterministic():
    head = PolicyHead(spaces.Box(-2.0, 2.0, (2,), np.float32), squash="tanh")
    out = np.random.default_rng(6).normal(size=(5, 2)).astype(np.float32)
    a1, p1 = select_actions(head, out, True, _gen(7))
    a2, p2 = select_actions(head, out, True, _gen(7))
    assert np.array_equal(a1, a2) and np.array_equal(p1, p2) and a1.dtype == np.float32
    m, none = select_actions(head, out, False, _gen(8))
    np.testing.assert_allclose(m, 2.0 * np.tanh(out), rtol=1e-6)
    assert none is None


def test_sampler_returns_the_remembered_pre_squash_sample():
    head = PolicyHead(spaces.Box(-1.0, 1.0, (1,), np.float32), squash="tanh")
    sampler = ActionSampler(head, _gen(9))
    out = np.full((4, 1), 9.0, dtype=np.float32)  # far into saturation: atanh cannot recover u
    actions = sampler.act(out, explore=True)
    pre = sampler.pre_squash_for(actions)
    np.testing.assert_allclose(np.tanh(pre), actions, rtol=1e-6)
    assert np.abs(pre).max() > 5.0
    fallback = sampler.pre_squash_for(actions - 1e-3)  # not what was sampled: atanh path
    assert np.abs(fallback).max() < 5.0
