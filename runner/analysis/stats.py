"""Aggregate statistics over runs and environments, with stratified bootstrap intervals.

Definitions follow Agarwal et al. 2021, "Deep Reinforcement Learning at the Edge of the
Statistical Precipice" (NeurIPS), implemented here from the paper's text:

* A *stratum* is one environment; its entries are the (normalised) scores of independent runs.
* Interquartile mean (IQM): the mean of the middle 50% of all runs pooled over envs (the
  bottom and top 25% discarded; ``floor(0.25 n)`` from each end, like a 25% trimmed mean).
* Mean and median: of the per-env mean scores (each env weighs the same).
* Optimality gap: how far runs fall short of normalised score 1, ``mean(max(1 - x, 0))``
  (per env, then averaged over envs, so each env weighs the same).
* Probability of improvement P(X > Y): per env the Mann-Whitney U statistic divided by n*m
  (ties count one half), averaged over envs.
* Performance profile: at each threshold tau, the fraction of runs scoring above tau
  (per env, averaged over envs).
* Intervals: percentile intervals of the stratified bootstrap, which resamples the runs of
  each env independently, with replacement, keeping each env's run count.

Everything is vectorised over bootstrap resamples; randomness comes only from the
``numpy.random.Generator`` passed in.
"""

from __future__ import annotations

import zlib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

Strata = Sequence[np.ndarray]  # one 1-D array of run scores per env

STATISTICS = ("iqm", "mean", "median", "optimality_gap")


@dataclass(frozen=True)
class Interval:
    """A point estimate with its bootstrap percentile interval."""

    point: float
    low: float
    high: float

    def as_dict(self) -> dict[str, float]:
        return {"point": self.point, "low": self.low, "high": self.high}


def keyed_rng(seed: int, purpose: str, *names: str) -> np.random.Generator:
    """A generator per (seed, purpose, names): adding an agent to a report does not change
    the other agents' intervals, and a quantity computed twice gets the same resamples."""
    key = zlib.crc32("\x1f".join((purpose, *names)).encode())
    return np.random.default_rng([seed, key])


# -- point statistics (any leading axes are batch axes) -------------------------------------


def interquartile_mean(x: np.ndarray, axis: int = -1) -> np.ndarray:
    """Mean of the middle 50% along ``axis``: ``floor(n/4)`` values cut from each end."""
    x = np.moveaxis(np.asarray(x, dtype=float), axis, -1)
    n = x.shape[-1]
    if n == 0:
        raise ValueError("interquartile mean of no values")
    cut = int(0.25 * n)
    if cut == 0:
        return x.mean(axis=-1)
    # a full sort is faster than np.partition with two kth values in numpy 2.x (SIMD sort)
    middle = np.sort(x, axis=-1)[..., cut : n - cut]
    return middle.mean(axis=-1)


def percentile_interval(samples: np.ndarray, confidence: float, axis: int = 0) -> tuple:
    """The ``confidence`` percentile interval of bootstrap ``samples`` along ``axis``."""
    tail = (1.0 - confidence) / 2.0
    low, high = np.quantile(samples, [tail, 1.0 - tail], axis=axis)
    return low, high


def _check_strata(strata: Strata) -> list[np.ndarray]:
    arrays = [np.asarray(s, dtype=float).ravel() for s in strata]
    if not arrays or any(a.size == 0 for a in arrays):
        raise ValueError("every stratum (env) needs at least one run score")
    return arrays


def aggregate_points(strata: Strata) -> dict[str, float]:
    """IQM, mean, median and optimality gap of one agent's scores (no resampling)."""
    arrays = _check_strata(strata)
    resampled = [a[None, :] for a in arrays]
    return {k: float(v[0]) for k, v in _aggregates(resampled).items()}


def _aggregates(resampled: list[np.ndarray]) -> dict[str, np.ndarray]:
    """The four aggregates for each row of per-env arrays shaped (resamples, n_env_runs)."""
    env_means = np.stack([r.mean(axis=1) for r in resampled], axis=1)  # (R, envs)
    env_gaps = np.stack([np.maximum(1.0 - r, 0.0).mean(axis=1) for r in resampled], axis=1)
    pooled = np.concatenate(resampled, axis=1)  # (R, all runs)
    return {
        "iqm": interquartile_mean(pooled, axis=1),
        "mean": env_means.mean(axis=1),
        "median": np.median(env_means, axis=1),
        "optimality_gap": env_gaps.mean(axis=1),
    }


def stratified_resample(strata: Strata, resamples: int, rng: np.random.Generator) -> list:
    """Per env an array (resamples, n_env) of run scores drawn with replacement in that env."""
    arrays = _check_strata(strata)
    return [a[rng.integers(0, a.size, size=(resamples, a.size))] for a in arrays]


def aggregate_intervals(
    strata: Strata, resamples: int, confidence: float, rng: np.random.Generator
) -> dict[str, Interval]:
    """The four aggregates with stratified bootstrap percentile intervals."""
    points = aggregate_points(strata)
    boot = _aggregates(stratified_resample(strata, resamples, rng))
    out = {}
    for name in STATISTICS:
        low, high = percentile_interval(boot[name], confidence)
        out[name] = Interval(points[name], float(low), float(high))
    return out


def bootstrap_interval(
    values: np.ndarray, statistic: str, resamples: int, confidence: float,
    rng: np.random.Generator,
) -> Interval:
    """One statistic of a single sample (one env) with a plain percentile bootstrap."""
    return aggregate_intervals([values], resamples, confidence, rng)[statistic]


# -- probability of improvement -------------------------------------------------------------


def resample_counts(n: int, resamples: int, rng: np.random.Generator) -> np.ndarray:
    """How often each of ``n`` items is drawn in each of ``resamples`` draws of ``n`` with
    replacement, shaped (resamples, n), as floats ready for matrix products."""
    picks = rng.integers(0, n, size=(resamples, n)) + n * np.arange(resamples)[:, None]
    return np.bincount(picks.ravel(), minlength=resamples * n).reshape(resamples, n).astype(float)


def _win_matrix(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """C[i, k] = 1 if x_i > y_k, 1/2 if equal, 0 otherwise."""
    return (x[:, None] > y[None, :]) + 0.5 * (x[:, None] == y[None, :])


def probability_of_improvement_point(x_strata: Strata, y_strata: Strata) -> float:
    """P(X > Y): per env U/(n m) with ties counted 1/2, averaged over envs."""
    xs, ys = _check_strata(x_strata), _check_strata(y_strata)
    if len(xs) != len(ys):
        raise ValueError("X and Y need the same envs")
    return float(np.mean([_win_matrix(x, y).mean() for x, y in zip(xs, ys, strict=True)]))


def probability_of_improvement(
    x_strata: Strata, y_strata: Strata, resamples: int, confidence: float,
    rng: np.random.Generator,
) -> Interval:
    """P(X > Y) with a stratified bootstrap interval (X's and Y's runs resampled independently
    within each env). A resample is represented by how often each run is drawn, so the win
    count of a resample is ``wx @ C @ wy`` — one matrix product per env instead of sorting."""
    xs, ys = _check_strata(x_strata), _check_strata(y_strata)
    point = probability_of_improvement_point(xs, ys)
    per_env = np.empty((resamples, len(xs)))
    for j, (x, y) in enumerate(zip(xs, ys, strict=True)):
        wx = resample_counts(x.size, resamples, rng)
        wy = resample_counts(y.size, resamples, rng)
        wins = np.einsum("rk,rk->r", wx @ _win_matrix(x, y), wy)
        per_env[:, j] = wins / (x.size * y.size)
    low, high = percentile_interval(per_env.mean(axis=1), confidence)
    return Interval(point, float(low), float(high))


# -- performance profiles and curves --------------------------------------------------------


def performance_profile(
    strata: Strata, taus: np.ndarray, resamples: int, confidence: float,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fraction of runs with score > tau for each tau (per env, averaged over envs), with a
    stratified bootstrap band. Returns (point, low, high), each shaped like ``taus``."""
    arrays = _check_strata(strata)
    taus = np.asarray(taus, dtype=float)
    point = np.zeros(taus.size)
    boot = np.zeros((resamples, taus.size))
    for a in arrays:
        above = (a[:, None] > taus[None, :]).astype(float)  # (n, T)
        point += above.mean(axis=0)
        weights = resample_counts(a.size, resamples, rng)
        boot += weights @ above / a.size
    point /= len(arrays)
    boot /= len(arrays)
    low, high = percentile_interval(boot, confidence)
    return point, low, high


def iqm_curve(
    strata: Sequence[np.ndarray], resamples: int, confidence: float, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """IQM over runs at each evaluation point, with a stratified bootstrap band.

    ``strata``: per env an array (n_env_runs, n_points) of aligned curves. Whole curves are
    resampled (a run keeps its curve), one evaluation point at a time to bound memory."""
    curves = [np.asarray(c, dtype=float) for c in strata]
    if not curves or any(c.ndim != 2 or c.shape[0] == 0 for c in curves):
        raise ValueError("every env needs at least one aligned curve")
    n_points = curves[0].shape[1]
    if any(c.shape[1] != n_points for c in curves):
        raise ValueError("all curves must share the evaluation points")
    offsets = np.cumsum([0] + [c.shape[0] for c in curves[:-1]])
    picks = np.concatenate(
        [o + rng.integers(0, c.shape[0], size=(resamples, c.shape[0]))
         for c, o in zip(curves, offsets, strict=True)],
        axis=1,
    )  # (R, all runs): row indices into the pooled curves, drawn within each env
    pooled = np.concatenate(curves, axis=0)
    point = interquartile_mean(pooled, axis=0)
    low = np.empty(n_points)
    high = np.empty(n_points)
    for t in range(n_points):
        boot = interquartile_mean(np.ascontiguousarray(pooled[:, t])[picks], axis=1)
        low[t], high[t] = percentile_interval(boot, confidence)
    return point, low, high


def mean_confidence_interval(values: np.ndarray, confidence: float) -> Interval:
    """Mean with its Student-t interval (for Monte Carlo estimates such as random scores)."""
    values = np.asarray(values, dtype=float)
    mean = float(values.mean())
    if values.size < 2:
        return Interval(mean, float("nan"), float("nan"))
    half = float(sps.t.ppf(0.5 + confidence / 2, values.size - 1)) * float(
        values.std(ddof=1) / np.sqrt(values.size)
    )
    return Interval(mean, mean - half, mean + half)
