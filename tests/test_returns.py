"""Return and advantage targets against their definitions, computed the slow, obvious way.

Equation numbers cited below (Schulman et al. 2016; Sutton & Barto 2nd ed.) are from memory.
"""

from __future__ import annotations

import numpy as np
import pytest
from seedsweep.agents.common.returns import discounted_returns, gae, nstep_returns, td_errors


def random_rollout(seed: int, T: int = 40, N: int = 3):
    """Random rewards/values with episode ends of both kinds scattered through it."""
    rng = np.random.default_rng(seed)
    rewards = rng.normal(size=(T, N))
    values = rng.normal(size=(T, N))
    final_values = rng.normal(size=(T, N))  # V(final obs), read only where truncated
    terminated = rng.random((T, N)) < 0.1
    truncated = rng.random((T, N)) < 0.1
    last_next_value = rng.normal(size=N)  # V(next_obs) after the last step
    next_values = np.empty((T, N))
    next_values[:-1] = values[1:]
    next_values[-1] = last_next_value
    done = terminated | truncated
    next_values[done] = final_values[done]
    return rewards, values, next_values, terminated, truncated


def reference_mc_returns(rewards, next_values, terminated, truncated, gamma):
    """For each t: sum γ^(k-t) r_k up to the first episode end k >= t (or the rollout end),
    plus γ^(k-t+1)·V(next_obs_k) unless the episode terminated at k. Straight from the
    definition of the discounted return (Sutton & Barto 2nd ed. eq. 3.8), O(T²)."""
    T, N = rewards.shape
    out = np.zeros((T, N))
    for i in range(N):
        for t in range(T):
            g, k = 0.0, t
            while True:
                g += gamma ** (k - t) * rewards[k, i]
                if terminated[k, i]:
                    break
                if truncated[k, i] or k == T - 1:
                    g += gamma ** (k - t + 1) * next_values[k, i]
                    break
                k += 1
            out[t, i] = g
    return out


def reference_gae(rewards, values, next_values, terminated, truncated, gamma, lam):
    """Schulman et al. 2016 eq. 16: A_t = Σ_l (γλ)^l δ_{t+l}, the sum stopping at an episode
    end (an episode's advantages see only its own TD errors) or at the rollout end."""
    T, N = rewards.shape
    delta = rewards + gamma * (~terminated) * next_values - values
    out = np.zeros((T, N))
    for i in range(N):
        for t in range(T):
            a, k = 0.0, t
            while k < T:
                a += (gamma * lam) ** (k - t) * delta[k, i]
                if terminated[k, i] or truncated[k, i]:
                    break
                k += 1
            out[t, i] = a
    return out


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_gae_with_lambda_one_is_the_discounted_return_minus_the_value(seed):
    # identity from Schulman et al. 2016 (GAE(γ, 1) = Σ γ^l r_{t+l} − V(s_t), eq. 18)
    r, v, nv, term, trunc = random_rollout(seed)
    expected = reference_mc_returns(r, nv, term, trunc, 0.97) - v
    np.testing.assert_allclose(gae(r, v, nv, term, trunc, 0.97, 1.0), expected, atol=1e-10)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_gae_with_lambda_zero_is_the_one_step_td_error(seed):
    # identity from Schulman et al. 2016 (GAE(γ, 0) = δ_t = r_t + γV(s_{t+1}) − V(s_t), eq. 17)
    r, v, nv, term, trunc = random_rollout(seed)
    expected = r + 0.9 * np.where(term, 0.0, nv) - v
    np.testing.assert_allclose(gae(r, v, nv, term, trunc, 0.9, 0.0), expected, atol=1e-12)
    np.testing.assert_allclose(td_errors(r, v, nv, term, 0.9), expected, atol=1e-12)


@pytest.mark.parametrize("lam", [0.3, 0.95])
def test_gae_matches_the_explicit_weighted_sum(lam):
    r, v, nv, term, trunc = random_rollout(3)
    expected = reference_gae(r, v, nv, term, trunc, 0.99, lam)
    np.testing.assert_allclose(gae(r, v, nv, term, trunc, 0.99, lam), expected, atol=1e-10)


@pytest.mark.parametrize("seed", [0, 4])
def test_nstep_returns_match_the_definition_and_gae_lambda_one(seed):
    r, v, nv, term, trunc = random_rollout(seed)
    expected = reference_mc_returns(r, nv, term, trunc, 0.95)
    np.testing.assert_allclose(nstep_returns(r, nv, term, trunc, 0.95), expected, atol=1e-10)
    np.testing.assert_allclose(nstep_returns(r, nv, term, trunc, 0.95),
                               gae(r, v, nv, term, trunc, 0.95, 1.0) + v, atol=1e-10)


def test_discounted_returns_worked_example():
    # by hand from G_t = r_t + γ G_{t+1} (Sutton & Barto 2nd ed. eq. 3.9), γ = 0.5:
    # G_2 = 3, G_1 = 2 + 0.5·3 = 3.5, G_0 = 1 + 0.5·3.5 = 2.75
    np.testing.assert_allclose(discounted_returns([1.0, 2.0, 3.0], 0.5), [2.75, 3.5, 3.0])
    # truncated after the third step with V(s_3) = 4: every G_t gains 0.5^(3-t)·4
    np.testing.assert_allclose(discounted_returns([1.0, 2.0, 3.0], 0.5, bootstrap=4.0),
                               [2.75 + 0.5, 3.5 + 1.0, 3.0 + 2.0])


def test_truncation_bootstraps_and_termination_does_not():
    """One env, 3 steps of reward 1, the episode ends at the last step; γ = 0.9.
    V(final obs) = 10, V(obs) = 0 everywhere. Truncated: R_2 = 1 + 0.9·10 = 10;
    terminated: R_2 = 1 (the value of a terminal state is 0 by definition)."""
    r = np.ones((3, 1))
    v = np.zeros((3, 1))
    nv = np.array([[0.0], [0.0], [10.0]])
    ended = np.array([[False], [False], [True]])
    never = np.zeros((3, 1), dtype=bool)
    trunc = nstep_returns(r, nv, never, ended, 0.9)
    term = nstep_returns(r, nv, ended, never, 0.9)
    np.testing.assert_allclose(trunc[:, 0], [1 + 0.9 + 0.81 * 10, 1 + 0.9 * 10, 1 + 0.9 * 10])
    np.testing.assert_allclose(term[:, 0], [1 + 0.9 + 0.81, 1 + 0.9, 1.0])
    both = nstep_returns(r, nv, ended, ended, 0.9)  # gymnasium may set both: terminal wins
    np.testing.assert_allclose(both, term)
    np.testing.assert_allclose(gae(r, v, nv, never, ended, 0.9, 0.5)[2, 0], 1 + 0.9 * 10)
    np.testing.assert_allclose(gae(r, v, nv, ended, never, 0.9, 0.5)[2, 0], 1.0)


def test_an_episode_end_cuts_the_recursion():
    """After an end at t=0 the next step's reward must not leak into A_0 / R_0."""
    r = np.array([[1.0], [100.0]])
    v = np.zeros((2, 1))
    nv = np.array([[5.0], [0.0]])
    term = np.array([[False], [False]])
    trunc = np.array([[True], [False]])
    assert nstep_returns(r, nv, term, trunc, 0.5)[0, 0] == pytest.approx(1 + 0.5 * 5)
    assert gae(r, v, nv, term, trunc, 0.5, 1.0)[0, 0] == pytest.approx(1 + 0.5 * 5)
