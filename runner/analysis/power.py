"""How many seeds a comparison needs: bootstrap power analysis of Welch's t-test.

Method of Colas, Sigaud and Oudeyer 2018, "How Many Random Seeds? Statistical Power Analysis
in Deep Reinforcement Learning Experiments" (arXiv:1806.08295; cited from memory): pilot runs
of two agents give two empirical score distributions; the candidate's is shifted so that the
difference of the two means is exactly the difference ``D`` one wants to detect; for a number
of seeds ``n`` per agent, many pairs of samples of size ``n`` are drawn with replacement from
the two pilot samples and each pair is tested with Welch's t-test at level ``alpha``. The
fraction of pairs that reject "no difference" estimates the power at ``n``.

The draws use common random numbers: the resample of size ``n`` is the first ``n`` columns of
one index matrix, so the estimated power curve is smooth in ``n`` and the search (doubling,
then bisection between the last ``n`` below the target and the first above it) is stable.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import stats as sps

ALTERNATIVES = ("two-sided", "one-sided")
MAX_SEEDS_LIMIT = 1000  # the index matrices are (resamples, max_seeds): bound their memory


@dataclass(frozen=True)
class SeedPlan:
    """The smallest seed count per agent reaching the target power, or None when even
    ``max_seeds`` does not; ``curve`` holds every seed count evaluated and its power."""

    seeds: int | None
    power: float  # estimated power at ``seeds`` (at ``max_seeds`` when not reached)
    target: float
    max_seeds: int
    curve: dict[int, float] = field(default_factory=dict)

    @property
    def label(self) -> str:
        return str(self.seeds) if self.seeds is not None else f"> {self.max_seeds}"


def _sample(values: np.ndarray, name: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float).ravel()
    if arr.size < 2:
        raise ValueError(f"{name} needs at least 2 pilot scores (got {arr.size})")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} has non-finite pilot scores")
    return arr


def shift_to_difference(x: np.ndarray, y: np.ndarray, difference: float) -> np.ndarray:
    """``x`` moved so that mean(x) - mean(y) equals ``difference`` (its spread and shape kept),
    so resamples from it and ``y`` come from distributions whose true difference is D."""
    x = np.asarray(x, dtype=float)
    return x - x.mean() + np.mean(y) + difference


def scipy_alternative(alternative: str, difference: float) -> str:
    """scipy's ``alternative``: one-sided tests look in the direction of the difference."""
    if alternative == "two-sided":
        return "two-sided"
    if alternative == "one-sided":
        return "greater" if difference > 0 else "less"
    raise ValueError(f"alternative must be one of {ALTERNATIVES} (got {alternative!r})")


def rejection_rate(a: np.ndarray, b: np.ndarray, alpha: float, alternative: str) -> float:
    """Fraction of rows where Welch's t-test of a[i] against b[i] rejects at ``alpha``.
    Rows whose test is undefined (no spread in both) count as not rejecting."""
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        pvalues = sps.ttest_ind(a, b, axis=1, equal_var=False, alternative=alternative).pvalue
    return float(np.mean(np.nan_to_num(pvalues, nan=1.0) < alpha))


def _check(difference: float, power: float, alpha: float, max_seeds: int, resamples: int,
           alternative: str) -> None:
    if not np.isfinite(difference) or difference == 0:
        raise ValueError(f"difference must be finite and non-zero (got {difference})")
    if not 0.0 < power < 1.0:
        raise ValueError(f"power must be in (0, 1) (got {power})")
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must be in (0, 1) (got {alpha})")
    if not 2 <= max_seeds <= MAX_SEEDS_LIMIT:
        raise ValueError(f"max_seeds must be in [2, {MAX_SEEDS_LIMIT}] (got {max_seeds})")
    if resamples < 1:
        raise ValueError(f"resamples must be >= 1 (got {resamples})")
    scipy_alternative(alternative, difference)


def bootstrap_power(
    x: np.ndarray, y: np.ndarray, difference: float, n: int, alpha: float,
    rng: np.random.Generator, *, resamples: int = 2000, alternative: str = "two-sided",
) -> float:
    """Estimated power of Welch's t-test with ``n`` seeds per agent to detect ``difference``
    (mean of x minus mean of y), from the pilot samples ``x`` and ``y``."""
    x, y = _sample(x, "x"), _sample(y, "y")
    if n < 2:
        raise ValueError(f"n must be >= 2 (got {n})")
    _check(difference, 0.5, alpha, 2, resamples, alternative)
    shifted = shift_to_difference(x, y, difference)
    a = shifted[rng.integers(0, x.size, size=(resamples, n))]
    b = y[rng.integers(0, y.size, size=(resamples, n))]
    return rejection_rate(a, b, alpha, scipy_alternative(alternative, difference))


def seeds_needed(
    x: np.ndarray, y: np.ndarray, difference: float, power: float = 0.8, alpha: float = 0.05,
    rng: np.random.Generator | None = None, *, max_seeds: int = 100, resamples: int = 2000,
    alternative: str = "two-sided",
) -> SeedPlan:
    """Smallest number of seeds per agent for which Welch's t-test detects ``difference``
    (mean of x minus mean of y) with probability >= ``power`` at level ``alpha``, estimated
    by bootstrap from the pilot samples ``x`` (candidate) and ``y`` (baseline)."""
    x, y = _sample(x, "x"), _sample(y, "y")
    _check(difference, power, alpha, max_seeds, resamples, alternative)
    if np.ptp(x) == 0 and np.ptp(y) == 0:
        raise ValueError("both pilot samples have no spread: any difference would be "
                         "detected with 2 seeds, which says nothing about real runs")
    rng = rng if rng is not None else np.random.default_rng(0)
    test = scipy_alternative(alternative, difference)
    shifted = shift_to_difference(x, y, difference)
    draws_x = shifted[rng.integers(0, x.size, size=(resamples, max_seeds), dtype=np.int32)]
    draws_y = y[rng.integers(0, y.size, size=(resamples, max_seeds), dtype=np.int32)]
    curve: dict[int, float] = {}

    def power_at(n: int) -> float:
        if n not in curve:
            curve[n] = rejection_rate(draws_x[:, :n], draws_y[:, :n], alpha, test)
        return curve[n]

    below, n = None, 2
    while power_at(n) < power:  # doubling until the target is reached or max_seeds fails
        if n == max_seeds:
            return SeedPlan(None, curve[n], power, max_seeds, dict(sorted(curve.items())))
        below, n = n, min(2 * n, max_seeds)
    if below is not None:  # bisection: power(below) < target <= power(n)
        while n - below > 1:
            mid = (below + n) // 2
            if power_at(mid) >= power:
                n = mid
            else:
                below = mid
    return SeedPlan(n, curve[n], power, max_seeds, dict(sorted(curve.items())))
