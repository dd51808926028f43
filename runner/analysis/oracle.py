"""Exact values of tabular environments from their transition tables (dynamic programming).

Gymnasium's toy-text envs (FrozenLake, CliffWalking, Taxi) expose ``env.unwrapped.P``:
``P[s][a] = [(probability, next_state, reward, terminated), ...]``. From it we build dense
arrays and compute, with Bellman backups (Sutton & Barto 2nd ed., ch. 4):

* the optimal value by value iteration, or — when episodes are cut by a time limit — by
  finite-horizon backward induction (with H steps left, ``V_H = max_a R + P_cont V_{H-1}``),
  which is the exact optimum an agent can reach under that limit;
* the value of any stationary tabular policy, infinite-horizon by solving the linear system
  ``(I - gamma P_pi) V = R_pi`` with ``numpy.linalg.solve``, or over a finite horizon;
* the value of the start-state distribution (``initial_state_distrib`` / ``isd``).

A terminated transition ends the episode: its probability mass is dropped from the
continuation matrix ``P_cont`` (the episode continues in no state), so nothing is
bootstrapped after it. A truncation by the time limit is the horizon, not a transition.

The report uses the horizon-aware, undiscounted value (gamma = 1, horizon = the env's time
limit) because scores are undiscounted returns of episodes cut by that limit.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from gymnasium import spaces


@dataclass(frozen=True)
class TabularMDP:
    """Dense arrays of a finite MDP with episode termination."""

    P: np.ndarray  # (S, A, S') transition probabilities, terminated transitions included
    R: np.ndarray  # (S, A) expected immediate reward
    done: np.ndarray  # (S, A, S') probability of moving to s' AND terminating
    start: np.ndarray  # (S,) start-state distribution

    @property
    def continuation(self) -> np.ndarray:
        """(S, A, S'): probability of moving to s' with the episode going on."""
        return self.P - self.done

    @property
    def n_states(self) -> int:
        return self.P.shape[0]

    @property
    def n_actions(self) -> int:
        return self.P.shape[1]


def from_transition_table(
    table: dict[int, dict[int, list[tuple[float, int, float, bool]]]],
    start: np.ndarray | None = None,
) -> TabularMDP:
    """Dense arrays from a toy-text style ``P[s][a]`` table."""
    n_states = len(table)
    n_actions = len(table[0])
    P = np.zeros((n_states, n_actions, n_states))
    R = np.zeros((n_states, n_actions))
    done = np.zeros((n_states, n_actions, n_states))
    for s, actions in table.items():
        if len(actions) != n_actions:
            raise ValueError(f"state {s} has {len(actions)} actions, expected {n_actions}")
        for a, outcomes in actions.items():
            for prob, s_next, reward, terminated in outcomes:
                P[s, a, int(s_next)] += prob
                R[s, a] += prob * reward
                if terminated:
                    done[s, a, int(s_next)] += prob
    if not np.allclose(P.sum(axis=2), 1.0):
        raise ValueError("transition probabilities of some (state, action) do not sum to 1")
    if start is None:
        start = np.full(n_states, 1.0 / n_states)
    start = np.asarray(start, dtype=float)
    return TabularMDP(P=P, R=R, done=done, start=start / start.sum())


def from_env(env: Any) -> TabularMDP:
    """Dense arrays of a gymnasium toy-text env (any wrappers are looked through)."""
    base = env.unwrapped
    table = getattr(base, "P", None)
    if not isinstance(table, dict):
        raise ValueError(f"{type(base).__name__} exposes no transition table env.unwrapped.P")
    start = getattr(base, "initial_state_distrib", None)
    if start is None:
        start = getattr(base, "isd", None)
    if start is None:
        start = start_distribution_by_reset(env, len(table))
    return from_transition_table(table, np.asarray(start, dtype=float))


def start_distribution_by_reset(env: Any, n_states: int, resets: int = 2000) -> np.ndarray:
    """Empirical start distribution for envs that do not expose one (seeded resets)."""
    counts = np.zeros(n_states)
    for i in range(resets):
        obs, _ = env.reset(seed=i)
        counts[int(obs)] += 1
    return counts / resets


def time_limit_of(env: Any) -> int | None:
    """The smallest TimeLimit in ``env``'s wrapper chain, or None when episodes are unbounded."""
    limits = []
    current = env
    while current is not None:
        steps = getattr(current, "_max_episode_steps", None)
        if isinstance(steps, int):
            limits.append(steps)
        current = getattr(current, "env", None)
    return min(limits) if limits else None


# -- optimal values ------------------------------------------------------------------------


def value_iteration(
    mdp: TabularMDP, gamma: float = 1.0, tol: float = 1e-10, max_iterations: int = 1_000_000
) -> tuple[np.ndarray, np.ndarray]:
    """Infinite-horizon optimal values and a greedy policy (Bellman optimality backups until
    the largest change is below ``tol``). With gamma = 1 this needs every optimal policy to
    end episodes (stochastic shortest path); divergence raises instead of looping forever."""
    cont = mdp.continuation
    values = np.zeros(mdp.n_states)
    for _ in range(max_iterations):
        q = mdp.R + gamma * cont @ values
        new = q.max(axis=1)
        if np.max(np.abs(new - values)) < tol:
            return new, greedy_policy(mdp, new, gamma)
        values = new
    raise RuntimeError(f"value iteration did not converge to {tol} in {max_iterations} sweeps")


def finite_horizon_values(
    mdp: TabularMDP, horizon: int, gamma: float = 1.0
) -> tuple[np.ndarray, np.ndarray]:
    """Backward induction over ``horizon`` steps. Returns values (horizon+1, S) where row k
    is the optimal value with k steps left, and the non-stationary greedy policy
    (horizon, S) where row k-1 is the action to take with k steps left."""
    cont = mdp.continuation
    values = np.zeros((horizon + 1, mdp.n_states))
    policy = np.zeros((horizon, mdp.n_states), dtype=int)
    for k in range(1, horizon + 1):
        q = mdp.R + gamma * cont @ values[k - 1]
        policy[k - 1] = q.argmax(axis=1)
        values[k] = q.max(axis=1)
    return values, policy


def greedy_policy(mdp: TabularMDP, values: np.ndarray, gamma: float = 1.0) -> np.ndarray:
    """Deterministic policy (S,) taking the first best action under one-step lookahead."""
    q = mdp.R + gamma * mdp.continuation @ values
    return q.argmax(axis=1)


# -- policy evaluation ---------------------------------------------------------------------


def policy_matrix(mdp: TabularMDP, policy: np.ndarray) -> np.ndarray:
    """(S, A) action probabilities from a deterministic (S,) or stochastic (S, A) policy."""
    policy = np.asarray(policy)
    if policy.ndim == 1:
        probs = np.zeros((mdp.n_states, mdp.n_actions))
        probs[np.arange(mdp.n_states), policy.astype(int)] = 1.0
        return probs
    if policy.shape != (mdp.n_states, mdp.n_actions) or not np.allclose(policy.sum(axis=1), 1):
        raise ValueError("a stochastic policy is (states, actions) with rows summing to 1")
    return policy.astype(float)


def evaluate_policy(mdp: TabularMDP, policy: np.ndarray, gamma: float = 1.0) -> np.ndarray:
    """Infinite-horizon value of a stationary policy: solve ``(I - gamma P_pi) V = R_pi``.
    Raises ValueError when the system is singular (with gamma = 1: a policy that can keep
    an episode going forever has no finite value)."""
    probs = policy_matrix(mdp, policy)
    p_pi = np.einsum("sa,sat->st", probs, mdp.continuation)
    r_pi = (probs * mdp.R).sum(axis=1)
    system = np.eye(mdp.n_states) - gamma * p_pi
    try:
        values = np.linalg.solve(system, r_pi)
    except np.linalg.LinAlgError:
        raise ValueError("policy evaluation is singular: the policy can avoid ending "
                         "episodes forever; use gamma < 1 or a finite horizon") from None
    if not np.all(np.isfinite(values)) or np.linalg.cond(system) > 1e12:
        raise ValueError("policy evaluation is ill-conditioned: the policy (nearly) never "
                         "ends episodes; use gamma < 1 or a finite horizon")
    return values


def evaluate_policy_finite(
    mdp: TabularMDP, policy: np.ndarray, horizon: int, gamma: float = 1.0
) -> np.ndarray:
    """Value (S,) of a stationary policy when episodes are cut after ``horizon`` steps."""
    probs = policy_matrix(mdp, policy)
    p_pi = np.einsum("sa,sat->st", probs, mdp.continuation)
    r_pi = (probs * mdp.R).sum(axis=1)
    values = np.zeros(mdp.n_states)
    for _ in range(horizon):
        values = r_pi + gamma * p_pi @ values
    return values


def start_value(mdp: TabularMDP, values: np.ndarray) -> float:
    """Expected value of the start-state distribution."""
    return float(mdp.start @ values)


# -- what the report uses ------------------------------------------------------------------


@dataclass(frozen=True)
class OracleResult:
    """The optimal expected undiscounted return from the start distribution."""

    value: float
    horizon: int | None  # None: infinite horizon (no time limit)
    method: str  # "finite-horizon backward induction" or "value iteration"


def optimal_start_value(
    mdp: TabularMDP, horizon: int | None, *, infinite_horizon: bool = False
) -> OracleResult:
    """Undiscounted optimal start value: backward induction over ``horizon`` steps, or value
    iteration when there is no time limit or ``infinite_horizon`` is asked for."""
    if horizon is None or infinite_horizon:
        values, _ = value_iteration(mdp, gamma=1.0)
        return OracleResult(start_value(mdp, values), None, "value iteration")
    values, _ = finite_horizon_values(mdp, horizon, gamma=1.0)
    return OracleResult(
        start_value(mdp, values[horizon]), horizon, "finite-horizon backward induction"
    )


def has_transition_table(env: Any) -> bool:
    """Whether ``env`` is tabular with a toy-text ``P`` table the oracle can read."""
    base = env.unwrapped
    return (
        isinstance(getattr(base, "P", None), dict)
        and isinstance(base.observation_space, spaces.Discrete)
        and isinstance(base.action_space, spaces.Discrete)
    )
