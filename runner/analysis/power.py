"""How many seeds a comparison needs, for the test the verdict uses.

Planning (:func:`plan_seeds`): power is estimated by simulating the stratified permutation
test of :mod:`runner.analysis.permutation` itself, so the plan answers "with n seeds per agent
per env, how often would the verdict's test reject?" for a difference the user states:

* The difference ``D`` (per env, in score units) is a required input: the smallest difference
  that matters. Plugging in the observed pilot difference is the post-hoc power fallacy
  (Hoenig and Heisey 2001, "The abuse of power", The American Statistician 55(1)): a pilot
  difference that happened to be large plans too few seeds.
* Pilots are centred per agent and env; the spread is the pooled standard deviation of both
  agents' pilots with the unbiased variance (ddof=1, ``k_x + k_y - 2`` degrees of freedom).
  Dividing by k instead understates the variance by a factor (k - 1) / k: a third at 3 pilots.
* Model ``"normal"``: runs are normal with that SD, the candidate shifted by D. ``"residuals"``:
  the pooled centred pilots, rescaled so their variance is the unbiased one, are resampled
  (keeping skew and atoms such as capped scores). ``"auto"`` (default) uses residuals only
  when every agent has at least :data:`AUTO_RESIDUAL_PILOTS` pilots in every env: with 3
  pilots a residual law has 3 points, so simulated runs tie far more than real ones and its
  shape is noise; the normal model with the unbiased variance is then the honest choice.
* Few pilots give a rough SD, and a plan made at the pilot SD is too small more often than
  not (power is steep in n where it is low, flat where it is high, so the misses cost more
  than the overshoots gain). The plan (``expected``) therefore averages the power over the SD
  values the pilots allow: each simulated comparison draws its own SD from
  ``s * sqrt(df / chi2(df))``, the distribution of the true SD given the pilot SD ``s``
  (posterior under the usual 1/sigma prior; Gelman et al., Bayesian Data Analysis, sec. 3.2,
  from memory). This is the "assurance" of O'Hagan, Stevens and Campbell 2005 (Pharmaceutical
  Statistics 4(3)). With many pilots it equals the plan at the pilot SD (``at_pilot_sd``, also
  returned). The uncertainty of the plan is shown by ``if_sd_high``: the plan with each env's
  SD at its one-sided upper confidence bound (level ``sd_level``, 0.8 by default) from the
  chi-square law of the sample variance, ``s * sqrt(df / chi2.ppf(1 - level, df))``.
* p-values in the simulation: the exact permutation law up to :data:`EXACT_SEEDS` seeds per
  agent per env, and up to :data:`EXACT_TIE_FREE_SEEDS` for comparisons without ties; beyond,
  the normal approximation of the same statistic (each tie pattern would need its own exact
  law, and large exact counts cost seconds). There its decisions agree with the permutation
  test's in >= 97% of capped-score comparisons (it rejects slightly more often: up to ~1.5
  points of power with one env) and >= 99% without ties; tests/test_inference.py checks it.
* Common random numbers: one noise matrix (reps, max_seeds) per env and agent, of which the
  first n columns are used, so the power curve is smooth in n and the search (doubling, then
  bisection) is stable. Seed counts below :func:`permutation.seeds_to_reach` have power 0.

Normal-theory cross-check (:func:`t_test_seeds`): the seed count for Student's two-sample
t-test from the noncentral t distribution (one env, equal SDs). The rank test needs about
pi/3 times as many runs for normal scores (its asymptotic relative efficiency 3/pi, Hodges and
Lehmann 1956, Annals of Mathematical Statistics 27(2)), about one seed more at 10-20 seeds.

"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import stats as sps
from seedsweep.runner.analysis import permutation

MAX_SEEDS_LIMIT = 1000  # the noise matrices are (reps, max_seeds): bound their memory
MODELS = ("auto", "normal", "residuals")
AUTO_RESIDUAL_PILOTS = 10
EXACT_SEEDS = 20
EXACT_TIE_FREE_SEEDS = 60

Strata = Sequence[np.ndarray]


# -- planning for the stratified permutation test ---------------------------------------------


@dataclass(frozen=True)
class SeedCount:
    """Smallest seed count per agent per env reaching the target power (None: not within
    ``max_seeds``), its estimated power (at ``max_seeds`` when not reached), and every count
    the search evaluated with its power."""

    seeds: int | None
    power: float
    max_seeds: int
    curve: dict[int, float] = field(default_factory=dict)

    @property
    def label(self) -> str:
        return str(self.seeds) if self.seeds is not None else f"> {self.max_seeds}"


@dataclass(frozen=True)
class PowerPlan:
    """Seeds per agent per env for the verdict's test to reach ``target`` power.

    ``expected``: the plan (power averaged over the SD the pilots allow); ``at_pilot_sd``: at
    the pilot SD itself; ``if_sd_high``: with every env's SD at its upper ``sd_level``
    confidence bound ``sd_high``. ``sd``/``df``: pooled unbiased pilot SD per env and its
    degrees of freedom; ``model``: the noise model used ("normal" or "residuals")."""

    expected: SeedCount
    at_pilot_sd: SeedCount
    if_sd_high: SeedCount
    target: float
    alpha: float
    sd: tuple[float, ...]
    sd_high: tuple[float, ...]
    df: tuple[int, ...]
    sd_level: float
    model: str
    reps: int

    @property
    def seeds(self) -> int | None:
        return self.expected.seeds


def pooled_sd(x: np.ndarray, y: np.ndarray) -> tuple[float, int]:
    """Pooled SD of two pilot samples about their own means, unbiased variance (ddof=1 each),
    and its degrees of freedom ``k_x + k_y - 2``."""
    x, y = _sample(x, "candidate pilots"), _sample(y, "baseline pilots")
    df = x.size + y.size - 2
    ss = ((x - x.mean()) ** 2).sum() + ((y - y.mean()) ** 2).sum()
    return float(np.sqrt(ss / df)), int(df)


def sd_upper_bound(sd: float, df: int, level: float = 0.8) -> float:
    """One-sided upper ``level`` confidence bound of a normal SD estimated with ``df``
    degrees of freedom: ``df s^2 / sigma^2`` is chi-square(df)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must be in (0, 1) (got {level})")
    return float(sd * np.sqrt(df / sps.chi2.ppf(1.0 - level, df)))


def _differences(difference: float | Sequence[float], envs: int) -> np.ndarray:
    d = np.broadcast_to(np.asarray(difference, dtype=float), (envs,)).copy()
    if not np.all(np.isfinite(d)) or np.any(d == 0):
        raise ValueError("the difference that matters must be finite and non-zero in every env "
                         "(state it; the observed pilot difference is no substitute)")
    return d


def _unit_noise(x: np.ndarray, y: np.ndarray, model: str, shape: tuple[int, int],
                rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Two noise matrices (candidate, baseline) with unit SD under the chosen model."""
    if model == "normal":
        return rng.standard_normal(shape), rng.standard_normal(shape)
    sd, df = pooled_sd(x, y)
    residuals = np.concatenate([x - x.mean(), y - y.mean()])
    unit = residuals * np.sqrt(residuals.size / df) / sd  # variance = the unbiased one / sd^2
    return (unit[rng.integers(0, unit.size, size=shape)],
            unit[rng.integers(0, unit.size, size=shape)])


def _p_values(xs: list[np.ndarray], ys: list[np.ndarray], n: int) -> np.ndarray:
    """The test's p-values for simulated comparisons (rows): exact up to EXACT_SEEDS seeds, and
    up to EXACT_TIE_FREE_SEEDS for rows without ties (one cached null law serves them all);
    the normal approximation otherwise (tied rows would each need their own exact law, and
    beyond EXACT_TIE_FREE_SEEDS the exact count costs seconds while the two agree closely)."""
    if n <= EXACT_SEEDS:
        return permutation.permutation_p_values(xs, ys)
    if n > EXACT_TIE_FREE_SEEDS:
        return permutation.normal_p_values(xs, ys)
    tied = np.zeros(xs[0].shape[0], dtype=bool)
    for x, y in zip(xs, ys, strict=True):
        pooled = np.sort(np.concatenate([x, y], axis=1), axis=1)
        tied |= np.any(pooled[:, 1:] == pooled[:, :-1], axis=1)
    p = np.empty(tied.size)
    if np.any(~tied):
        p[~tied] = permutation.permutation_p_values([x[~tied] for x in xs],
                                                    [y[~tied] for y in ys])
    if np.any(tied):
        p[tied] = permutation.normal_p_values([x[tied] for x in xs], [y[tied] for y in ys])
    return p


class _PowerCurve:
    """Power of the verdict's test as a function of n, from fixed noise (common numbers)."""

    def __init__(self, noise: list[tuple[np.ndarray, np.ndarray]],
                 effect: Sequence[float | np.ndarray], alpha: float):
        """``effect[j]``: the candidate's shift in env j in SD units, a number or a column
        (reps, 1) with one value per simulated comparison."""
        self.noise, self.effect, self.alpha = noise, effect, alpha
        self.curve: dict[int, float] = {}

    def __call__(self, n: int) -> float:
        if n not in self.curve:
            xs = [nx[:, :n] + e for (nx, _), e in zip(self.noise, self.effect, strict=True)]
            ys = [ny[:, :n] for _, ny in self.noise]
            self.curve[n] = float(np.mean(_p_values(xs, ys, n) <= self.alpha))
        return self.curve[n]


def _search(power_at: _PowerCurve, target: float, start: int, max_seeds: int) -> SeedCount:
    """Smallest n in [start, max_seeds] with power >= target: doubling, then bisection."""
    below, n = None, min(start, max_seeds)
    while power_at(n) < target:
        if n == max_seeds:
            return SeedCount(None, power_at(n), max_seeds, dict(sorted(power_at.curve.items())))
        below, n = n, min(2 * n, max_seeds)
    if below is not None:
        while n - below > 1:
            mid = (below + n) // 2
            if power_at(mid) >= target:
                n = mid
            else:
                below = mid
    return SeedCount(n, power_at(n), max_seeds, dict(sorted(power_at.curve.items())))


def _pilot_strata(x_pilot: Strata, y_pilot: Strata) -> tuple[list, list]:
    xs = [_sample(a, "candidate pilots") for a in x_pilot]
    ys = [_sample(a, "baseline pilots") for a in y_pilot]
    if not xs or len(xs) != len(ys):
        raise ValueError("candidate and baseline pilots need the same, non-zero number of envs")
    return xs, ys


def _choose_model(model: str, xs: list[np.ndarray], ys: list[np.ndarray]) -> str:
    if model not in MODELS:
        raise ValueError(f"model must be one of {MODELS} (got {model!r})")
    if model != "auto":
        return model
    enough = all(min(x.size, y.size) >= AUTO_RESIDUAL_PILOTS for x, y in zip(xs, ys, strict=True))
    return "residuals" if enough else "normal"


def plan_seeds(
    x_pilot: Strata, y_pilot: Strata, difference: float | Sequence[float],
    power: float = 0.8, alpha: float = 0.05, rng: np.random.Generator | None = None, *,
    reps: int = 2000, max_seeds: int = 100, model: str = "auto", sd_level: float = 0.8,
) -> PowerPlan:
    """Seeds per agent per env for the stratified permutation test to detect ``difference``
    (candidate minus baseline, per env or one for all; required, non-zero) with probability
    ``power`` at two-sided level ``alpha``. ``x_pilot``/``y_pilot``: per env the pilot scores
    of the candidate and the baseline (at least 2 each, not all equal)."""
    xs, ys = _pilot_strata(x_pilot, y_pilot)
    d = _differences(difference, len(xs))
    _check(1.0, power, alpha, max_seeds, reps)
    chosen = _choose_model(model, xs, ys)
    pooled = [pooled_sd(x, y) for x, y in zip(xs, ys, strict=True)]
    if any(sd == 0 for sd, _ in pooled):
        raise ValueError("an env's pilots have no spread: power needs spread in the scores")
    sd = np.array([s for s, _ in pooled])
    df = [k for _, k in pooled]
    sd_high = np.array([sd_upper_bound(s, k, sd_level) for s, k in pooled])
    rng = rng if rng is not None else np.random.default_rng(0)
    noise = [_unit_noise(x, y, chosen, (reps, max_seeds), rng)
             for x, y in zip(xs, ys, strict=True)]
    # per simulated comparison and env, a true SD the pilots allow: s * sqrt(df / chi2(df))
    drawn = sd * np.sqrt(np.array(df) / rng.chisquare(df, size=(reps, len(xs))))
    start = permutation.seeds_to_reach(alpha, len(xs))
    searches = [_search(_PowerCurve(noise, effect, alpha), power, start, max_seeds)
                for effect in ([(d[j] / drawn[:, j])[:, None] for j in range(len(xs))],
                               d / sd, d / sd_high)]
    return PowerPlan(*searches, power, alpha, tuple(sd.tolist()), tuple(sd_high.tolist()),
                     tuple(df), sd_level, chosen, reps)


def permutation_power(
    effect: float | Sequence[float], n: int, alpha: float, rng: np.random.Generator, *,
    envs: int = 1, reps: int = 2000,
) -> float:
    """Power of the stratified permutation test with ``n`` normal runs per agent per env when
    the candidate is shifted by ``effect`` SDs (per env or one for all)."""
    if n < 1:
        raise ValueError(f"n must be >= 1 (got {n})")
    e = _differences(effect, envs)
    noise = [(rng.standard_normal((reps, n)), rng.standard_normal((reps, n)))
             for _ in range(envs)]
    return _PowerCurve(noise, e, alpha)(n)


# -- normal theory: Student's t-test ----------------------------------------------------------


def t_test_power(effect: float, n: int, alpha: float = 0.05) -> float:
    """Two-sided power of Student's two-sample t-test with n runs per group for a shift of
    ``effect`` SDs: noncentral t with 2n - 2 degrees of freedom, noncentrality
    effect * sqrt(n / 2)."""
    df = 2 * n - 2
    ncp = abs(effect) * np.sqrt(n / 2.0)
    crit = sps.t.ppf(1.0 - alpha / 2.0, df)
    return float(sps.nct.sf(crit, df, ncp) + sps.nct.cdf(-crit, df, ncp))


def t_test_seeds(effect: float, power: float = 0.8, alpha: float = 0.05,
                 max_seeds: int = MAX_SEEDS_LIMIT) -> int | None:
    """Smallest n per group for which :func:`t_test_power` reaches ``power``."""
    for n in range(2, max_seeds + 1):
        if t_test_power(effect, n, alpha) >= power:
            return n
    return None


# -- checks of the inputs ------------------------------------------------------------------


def _sample(values: np.ndarray, name: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float).ravel()
    if arr.size < 2:
        raise ValueError(f"{name} needs at least 2 pilot scores (got {arr.size})")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} has non-finite pilot scores")
    return arr


def _check(difference: float, power: float, alpha: float, max_seeds: int,
           resamples: int) -> None:
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
