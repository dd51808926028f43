"""Return and advantage targets for policy-gradient learners, time-major numpy arrays.

Termination versus truncation (the whole reason this module exists): a *terminated* step
reached a true terminal state, whose value is zero, so nothing is bootstrapped. A
*truncated* step was cut by a time limit; the episode would have gone on, so the target
bootstraps with ``γ·V(s_T)`` from the episode's final observation ``s_T`` (which the runner
passes as ``next_obs``). When both flags are set, termination wins.

Arrays are ``(T,)`` or ``(T, N)`` (``N`` parallel envs); ``next_values[t]`` is
``V(next_obs[t])`` — inside a rollout that is ``V(obs[t+1])`` unless the episode ended at
``t``, in which case it must be the value of the final observation (only read on
truncation).
"""

from __future__ import annotations

import numpy as np


def discounted_returns(rewards: np.ndarray, gamma: float, bootstrap: float = 0.0) -> np.ndarray:
    """Monte Carlo returns of one episode, ``G_t = r_t + γ G_{t+1}`` with ``G_T = bootstrap``.

    ``bootstrap`` is 0 for an episode that terminated and ``V(s_T)`` for one that was
    truncated.
    """
    r = np.asarray(rewards, dtype=np.float64)
    out = np.empty_like(r)
    g = float(bootstrap)
    for t in range(len(r) - 1, -1, -1):
        g = r[t] + gamma * g
        out[t] = g
    return out


def td_errors(
    rewards: np.ndarray,
    values: np.ndarray,
    next_values: np.ndarray,
    terminated: np.ndarray,
    gamma: float,
) -> np.ndarray:
    """One-step TD errors ``δ_t = r_t + γ (1 − term_t) V(s'_t) − V(s_t)``."""
    live = 1.0 - np.asarray(terminated, dtype=np.float64)
    return (np.asarray(rewards, dtype=np.float64) + gamma * live * next_values) - values


def gae(
    rewards: np.ndarray,
    values: np.ndarray,
    next_values: np.ndarray,
    terminated: np.ndarray,
    truncated: np.ndarray,
    gamma: float,
    lam: float,
) -> np.ndarray:
    """Generalised advantage estimates, GAE(γ, λ) (Schulman et al. 2016, eq. 16).

    ``A_t = δ_t + γλ (1 − done_t) A_{t+1}``, with ``A`` past the rollout's end 0 (the last
    δ already bootstraps from ``V(next_obs)``). The recursion stops at every episode end;
    a truncated step's δ bootstraps from the final observation, a terminated one's does not.
    λ=0 gives the TD errors, λ=1 the n-step returns minus the values.
    """
    delta = td_errors(rewards, values, next_values, terminated, gamma)
    done = np.logical_or(terminated, truncated)
    adv = np.zeros_like(delta)
    running = np.zeros_like(delta[0])
    for t in range(len(delta) - 1, -1, -1):
        running = delta[t] + gamma * lam * np.where(done[t], 0.0, running)
        adv[t] = running
    return adv


def nstep_returns(
    rewards: np.ndarray,
    next_values: np.ndarray,
    terminated: np.ndarray,
    truncated: np.ndarray,
    gamma: float,
) -> np.ndarray:
    """Rollout returns, each bootstrapped where its episode or the rollout stops.

    ``R_t = r_t + γ·{0 if terminated; V(s_T) if truncated; R_{t+1} otherwise}`` and, at the
    last step of the rollout, ``V(next_obs)`` in place of ``R_{t+1}``: step ``t`` of an
    ``n``-step rollout gets an ``(n − t)``-step return (as in A3C, Mnih et al. 2016).
    """
    r = np.asarray(rewards, dtype=np.float64)
    term = np.asarray(terminated, dtype=bool)
    trunc = np.asarray(truncated, dtype=bool)
    out = np.empty_like(r)
    running = np.asarray(next_values[-1], dtype=np.float64)
    for t in range(len(r) - 1, -1, -1):
        tail = np.where(term[t], 0.0, np.where(trunc[t], next_values[t], running))
        running = r[t] + gamma * tail
        out[t] = running
    return out
