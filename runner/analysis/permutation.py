"""Stratified permutation test of a candidate agent against a baseline.

Why a permutation test: with 2-10 seeds per agent, bootstrap intervals are too narrow and a
verdict built on them fires far more often than its nominal level. A permutation test is
exact at any sample size: under "the two agents' scores come from the same distribution in
each env", every way of relabelling the pooled runs of an env is equally likely, so the
p-value is a count of arrangements, not an asymptotic approximation.

Statistic: the stratified probability of improvement
``T = mean over envs of U_j / (n_j m_j)``, where ``U_j`` is the Mann-Whitney count of
(candidate, baseline) run pairs in env j with the candidate ahead (ties count 1/2). Chosen
because it is rank-based (each env's score scale does not matter, so no normalisation is
needed and envs weigh the same), robust to outliers and to capped scores (runs tied at the
maximum count 1/2 through midranks), and it is the number the report already shows. It is
the stratified Wilcoxon-Mann-Whitney statistic with equal env weights (van Elteren 1960,
Bulletin of the ISI 37, uses weights 1/(N_j + 1) instead; equal weights keep T readable).

Two-sided p-value: ``P(|T - 1/2| >= |t_obs - 1/2|)`` over within-env relabellings, which is
valid with ties too (the null distribution is the one of the observed midranks).

Exact computation: labels are permuted within each env independently, so the null law of T is
the convolution over envs of each env's law of ``U_j``. Each env's law is counted exactly by
dynamic programming over the pooled runs ("how many size-n subsets of the midranks have this
sum", a 0/1 knapsack count), which equals enumerating all C(n+m, n) arrangements at a cost
polynomial in n+m, and the envs are combined on an integer lattice. This stays exact far
beyond the point where listing arrangements would be possible (10 envs x 10 vs 10 seeds:
about 1e53 arrangements, a lattice of ~2,000 points). Only when the lattice is too large
(envs with very different seed counts, or hundreds of runs per env) does the test fall back
to ``permutations`` random within-env relabellings from the given Generator, with the
(1 + hits) / (1 + permutations) correction so p is never 0 (Phipson and Smyth 2010,
Statistical Applications in Genetics and Molecular Biology 9(1)).

Shapes: every stratum may carry leading batch axes ``(..., n_j)`` shared by all strata, so a
simulation can test thousands of data sets in one call (:func:`permutation_p_values`).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

Strata = Sequence[np.ndarray]

MAX_LATTICE = 400_001  # points of the combined integer lattice for exact computation
MAX_ENV_RUNS = 400  # pooled runs of one env for the exact per-env count
DEFAULT_PERMUTATIONS = 10_000


@dataclass(frozen=True)
class PermutationResult:
    """Outcome of the stratified permutation test for one candidate-baseline pair.

    ``statistic``: stratified P(candidate > baseline); ``p_value``: two-sided;
    ``method``: "exact" or "monte carlo"; ``permutations``: random relabellings used
    (0 when exact); ``smallest_p``: the smallest two-sided p-value this design (seed counts
    per env) could ever give, reached when every run of one agent beats every run of the
    other in every env."""

    statistic: float
    p_value: float
    method: str
    permutations: int
    smallest_p: float

    def as_dict(self) -> dict[str, float | str | int]:
        return {"statistic": self.statistic, "p_value": self.p_value, "method": self.method,
                "permutations": self.permutations, "smallest_p": self.smallest_p}


# -- design: what p-values a seed count can reach ---------------------------------------------


def arrangements(n_candidate: Sequence[int], n_baseline: Sequence[int]) -> int:
    """Number of within-env relabellings: the product over envs of C(n_j + m_j, n_j)."""
    if len(n_candidate) != len(n_baseline) or not n_candidate:
        raise ValueError("need the same, non-zero number of envs for both agents")
    return math.prod(math.comb(n + m, n) for n, m in zip(n_candidate, n_baseline, strict=True))


def smallest_p_value(n_candidate: Sequence[int], n_baseline: Sequence[int]) -> float:
    """Smallest two-sided p-value the design can give: 2 / arrangements (the two complete
    separations, one per direction), capped at 1. Ties in the data only make it larger.
    Example: 1 env with 2 vs 2 seeds has 6 arrangements, so p >= 1/3 whatever the scores."""
    return min(1.0, 2.0 / arrangements(n_candidate, n_baseline))


def seeds_to_reach(alpha: float, envs: int = 1, max_seeds: int = 1000) -> int:
    """Smallest seed count per agent per env (the same for both agents, on ``envs`` envs)
    whose design can give p <= ``alpha`` (the rejection rule); a smaller design can never
    reject, whatever the scores. Example: alpha 0.05 on 1 env needs 4 seeds (2/70)."""
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must be in (0, 1) (got {alpha})")
    if envs < 1:
        raise ValueError(f"envs must be >= 1 (got {envs})")
    for n in range(1, max_seeds + 1):
        if smallest_p_value([n] * envs, [n] * envs) <= alpha:
            return n
    raise ValueError(f"no design with <= {max_seeds} seeds reaches p <= {alpha}")


# -- ranks and the statistic ------------------------------------------------------------------


def _as_strata(x_strata: Strata, y_strata: Strata) -> tuple[list[np.ndarray], list[np.ndarray]]:
    xs = [np.asarray(a, dtype=float) for a in x_strata]
    ys = [np.asarray(a, dtype=float) for a in y_strata]
    if not xs or len(xs) != len(ys):
        raise ValueError("candidate and baseline need the same, non-zero number of envs")
    batch = xs[0].shape[:-1]
    for a in xs + ys:
        if a.ndim == 0 or a.shape[-1] == 0:
            raise ValueError("every env needs at least one run score for each agent")
        if a.shape[:-1] != batch:
            raise ValueError("all strata must share their leading (batch) axes")
        if not np.all(np.isfinite(a)):
            raise ValueError("scores must be finite")
    return xs, ys


def _rank_codes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Twice the midranks of the pooled runs (x first, then y) along the last axis, as
    integers: midranks are multiples of 1/2, so the doubled ones are exact."""
    pooled = np.concatenate([x, y], axis=-1)
    return np.rint(2.0 * sps.rankdata(pooled, axis=-1)).astype(np.int64)


def _doubled_u(codes: np.ndarray, n: int) -> np.ndarray:
    """2U of the first ``n`` items (the candidate): 2 * rank sum - n(n+1)."""
    return codes[..., :n].sum(axis=-1) - n * (n + 1)


def stratified_statistic(x_strata: Strata, y_strata: Strata) -> np.ndarray:
    """T = mean over envs of U_j / (n_j m_j): stratified P(candidate > baseline), ties 1/2.
    Leading axes of the strata are batch axes."""
    xs, ys = _as_strata(x_strata, y_strata)
    parts = [_doubled_u(_rank_codes(x, y), x.shape[-1]) / (2.0 * x.shape[-1] * y.shape[-1])
             for x, y in zip(xs, ys, strict=True)]
    return np.mean(parts, axis=0)


# -- exact null distributions -----------------------------------------------------------------


def env_null_counts(codes: np.ndarray, n: int) -> np.ndarray:
    """Law of 2U for one env under random relabelling: ``out[k]`` is the fraction of the
    C(N, n) ways to pick the candidate's ``n`` runs among the ``N`` pooled runs (doubled
    midranks ``codes``) for which 2U = k, k = 0..2nm. Counted by a 0/1 knapsack over the runs:
    ``counts[j, s]`` = number of j-subsets of the runs seen so far with code sum s."""
    codes = np.asarray(codes, dtype=np.int64).ravel()
    m = codes.size - n
    base = n * (n + 1)
    top = base + 2 * n * m  # largest code sum without ties; ties only lower it
    counts = np.zeros((n + 1, top + 1))
    counts[0, 0] = 1.0
    for c in codes:
        # new[j, s] = old[j, s] + old[j-1, s-c]; the right side is copied first, so every
        # run joins a subset at most once
        counts[1:, c:] += counts[:-1, : top + 1 - c].copy()
    law = counts[n, base:]
    return law / law.sum()


def _lattice(sizes: Sequence[int]) -> tuple[int, list[int]]:
    """Common integer lattice of the envs: T * 2 * L * E = sum_j 2U_j * (L / (n_j m_j))."""
    lcm = math.lcm(*sizes)
    return lcm, [lcm // s for s in sizes]


def _combined_tail(laws: Sequence[np.ndarray], weights: Sequence[int]) -> np.ndarray:
    """``tail[d] = P(|K - centre| >= d)`` for the lattice index K = sum_j w_j 2U_j."""
    total = np.ones(1)
    for law, w in zip(laws, weights, strict=True):
        spread = np.zeros((law.size - 1) * w + 1)
        spread[::w] = law
        total = np.convolve(total, spread)
    centre = (total.size - 1) // 2  # the lattice runs from 0 to 2 L E, centre L E
    dist = np.abs(np.arange(total.size) - centre)
    tail = np.cumsum(np.bincount(dist, weights=total)[::-1])[::-1]
    return np.minimum(tail, 1.0)


def exact_possible(n_candidate: Sequence[int], n_baseline: Sequence[int]) -> bool:
    """Whether the exact null law fits the size limits (else random relabellings are used)."""
    sizes = [n * m for n, m in zip(n_candidate, n_baseline, strict=True)]
    lcm, _ = _lattice(sizes)
    envs_ok = all(n + m <= MAX_ENV_RUNS for n, m in zip(n_candidate, n_baseline, strict=True))
    return envs_ok and 2 * lcm * len(sizes) + 1 <= MAX_LATTICE


def _tie_patterns(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct sorted code rows (tie patterns) and each row's pattern id. Rows without ties
    all have the codes 2, 4, ..., 2N and share pattern 0 without a costly row sort."""
    size, runs = codes.shape
    plain = 2 * np.arange(1, runs + 1)
    ordered = np.sort(codes, axis=1)
    tied = np.any(ordered != plain, axis=1)
    ids = np.zeros(size, dtype=np.int64)
    keys = [plain]
    if np.any(tied):
        found, inverse = np.unique(ordered[tied], axis=0, return_inverse=True)
        ids[tied] = 1 + inverse.ravel()
        keys.extend(found)
    return np.array(keys), ids


def _unique_rows(ids: np.ndarray, radices: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """np.unique(ids, axis=0) through one integer key per row (mixed radix) when it fits."""
    if math.prod(radices) < 2**62:
        weights = np.cumprod([1, *radices[:-1]]).astype(np.int64)
        _, first, which = np.unique(ids @ weights, return_index=True, return_inverse=True)
        return ids[first], which.ravel()
    combos, which = np.unique(ids, axis=0, return_inverse=True)
    return combos, which.ravel()


@functools.lru_cache(maxsize=256)
def _tie_free_law(n: int, m: int) -> np.ndarray:
    """Law of 2U without ties: it depends on the seed counts only, so it is computed once."""
    law = env_null_counts(2 * np.arange(1, n + m + 1), n)
    law.flags.writeable = False
    return law


@functools.lru_cache(maxsize=64)
def _tie_free_tail(design: tuple[tuple[int, int], ...]) -> np.ndarray:
    """Tail table of T for data without ties, per design ((n_j, m_j) per env)."""
    _, weights = _lattice([n * m for n, m in design])
    tail = _combined_tail([_tie_free_law(n, m) for n, m in design], weights)
    tail.flags.writeable = False
    return tail


def _exact_p_values(xs: list[np.ndarray], ys: list[np.ndarray]) -> np.ndarray:
    """Exact two-sided p-values for every batch element; null laws are computed once per
    distinct tie pattern (pattern 0, no ties, is cached across calls)."""
    ns = [x.shape[-1] for x in xs]
    ms = [y.shape[-1] for y in ys]
    lcm, weights = _lattice([n * m for n, m in zip(ns, ms, strict=True)])
    batch = xs[0].shape[:-1]
    size = int(np.prod(batch, dtype=np.int64))
    index = np.zeros(size, dtype=np.int64)
    law_ids = np.empty((size, len(xs)), dtype=np.int64)
    env_keys: list[np.ndarray] = []
    for j, (x, y) in enumerate(zip(xs, ys, strict=True)):
        codes = _rank_codes(x, y).reshape(size, -1)
        index += _doubled_u(codes, ns[j]) * weights[j]
        keys, law_ids[:, j] = _tie_patterns(codes)
        env_keys.append(keys)
    laws: dict[tuple[int, int], np.ndarray] = {}

    def law(j: int, k: int) -> np.ndarray:
        if k == 0:
            return _tie_free_law(ns[j], ms[j])
        if (j, k) not in laws:
            laws[(j, k)] = env_null_counts(env_keys[j][k], ns[j])
        return laws[(j, k)]

    combos, which = _unique_rows(law_ids, [len(keys) for keys in env_keys])
    distance = np.abs(index - lcm * len(xs))
    p = np.empty(size)
    for c, combo in enumerate(combos):
        if not np.any(combo):
            tail = _tie_free_tail(tuple(zip(ns, ms, strict=True)))
        else:
            tail = _combined_tail([law(j, k) for j, k in enumerate(combo)], weights)
        rows = which == c
        p[rows] = tail[distance[rows]]
    return p.reshape(batch)


# -- random relabellings ----------------------------------------------------------------------


def _monte_carlo_p_value(xs: list[np.ndarray], ys: list[np.ndarray], permutations: int,
                         rng: np.random.Generator) -> float:
    """(1 + #{|T_b - 1/2| >= |t - 1/2|}) / (1 + B) over B random within-env relabellings."""
    observed = np.zeros(())
    draws = np.zeros(permutations)
    for x, y in zip(xs, ys, strict=True):
        n, m = x.size, y.size
        codes = _rank_codes(x, y)
        observed = observed + _doubled_u(codes, n) / (2.0 * n * m)
        order = rng.permuted(np.broadcast_to(codes, (permutations, codes.size)), axis=1)
        draws += _doubled_u(order, n) / (2.0 * n * m)
    gap = np.abs(observed / len(xs) - 0.5)
    tol = 1e-9 * max(gap, 1e-12)  # the same arrangement must compare equal
    hits = np.count_nonzero(np.abs(draws / len(xs) - 0.5) >= gap - tol)
    return float((1 + hits) / (1 + permutations))


# -- the test ---------------------------------------------------------------------------------


def permutation_p_values(
    x_strata: Strata, y_strata: Strata, *, rng: np.random.Generator | None = None,
    permutations: int = DEFAULT_PERMUTATIONS,
) -> np.ndarray:
    """Two-sided stratified permutation p-values for data sets batched along leading axes
    (exact when :func:`exact_possible`, else random relabellings drawn from ``rng``)."""
    xs, ys = _as_strata(x_strata, y_strata)
    ns = [x.shape[-1] for x in xs]
    ms = [y.shape[-1] for y in ys]
    if exact_possible(ns, ms):
        return _exact_p_values(xs, ys)
    if rng is None:
        raise ValueError("this design needs random relabellings: pass rng")
    if permutations < 1:
        raise ValueError(f"permutations must be >= 1 (got {permutations})")
    batch = xs[0].shape[:-1]
    flat_x = [x.reshape(-1, x.shape[-1]) for x in xs]
    flat_y = [y.reshape(-1, y.shape[-1]) for y in ys]
    p = [_monte_carlo_p_value([x[i] for x in flat_x], [y[i] for y in flat_y], permutations, rng)
         for i in range(flat_x[0].shape[0])]
    return np.asarray(p).reshape(batch)


def stratified_permutation_test(
    x_strata: Strata, y_strata: Strata, *, rng: np.random.Generator | None = None,
    permutations: int = DEFAULT_PERMUTATIONS,
) -> PermutationResult:
    """The test for one candidate (``x_strata``) against one baseline (``y_strata``): per env
    a 1-D array of run scores. ``rng`` is used only when the design is too large for the
    exact computation (see the module docstring)."""
    xs, ys = _as_strata(x_strata, y_strata)
    if xs[0].ndim != 1:
        raise ValueError("one data set: every stratum must be 1-D")
    ns = [x.size for x in xs]
    ms = [y.size for y in ys]
    exact = exact_possible(ns, ms)
    p = permutation_p_values(xs, ys, rng=rng, permutations=permutations)
    return PermutationResult(
        statistic=float(stratified_statistic(xs, ys)), p_value=float(p),
        method="exact" if exact else "monte carlo", permutations=0 if exact else permutations,
        smallest_p=smallest_p_value(ns, ms),
    )


# -- normal approximation (for power simulations of large designs) ----------------------------


def normal_p_values(x_strata: Strata, y_strata: Strata) -> np.ndarray:
    """Two-sided p-values of T from its normal approximation under relabelling, with the tie
    correction of the variance and a continuity correction of 1/2 in U (for one env this is
    scipy.stats.mannwhitneyu(method="asymptotic")). Cheap; used by power simulations of
    designs too large for the exact law, where it matches the permutation decisions."""
    xs, ys = _as_strata(x_strata, y_strata)
    centred = 0.0
    variance = 0.0
    largest = 0
    for x, y in zip(xs, ys, strict=True):
        n, m = x.shape[-1], y.shape[-1]
        big_n = n + m
        pooled = np.sort(np.concatenate([x, y], axis=-1), axis=-1)
        codes = _rank_codes(x, y)
        # tie correction: sum over tie groups of t^3 - t, from the run-length structure
        ties = _tie_term(pooled)
        var_u = n * m / 12.0 * ((big_n + 1) - ties / (big_n * (big_n - 1)))
        centred = centred + (_doubled_u(codes, n) / 2.0 - n * m / 2.0) / (n * m)
        variance = variance + var_u / (n * m) ** 2
        largest = max(largest, n * m)
    gap = np.maximum(np.abs(centred) - 0.5 / largest, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(variance > 0, gap / np.sqrt(variance), 0.0)
    return np.minimum(2.0 * sps.norm.sf(z), 1.0)


def _tie_term(sorted_pooled: np.ndarray) -> np.ndarray:
    """Sum over tie groups of t^3 - t along the last axis of sorted values."""
    size = sorted_pooled.shape[-1]
    flat = sorted_pooled.reshape(-1, size)
    new_group = np.ones_like(flat, dtype=bool)
    new_group[:, 1:] = flat[:, 1:] != flat[:, :-1]
    group = np.cumsum(new_group, axis=1) - 1  # group id within each row
    rows = np.repeat(np.arange(flat.shape[0]), size)
    counts = np.zeros((flat.shape[0], size))
    np.add.at(counts, (rows, group.ravel()), 1.0)
    return (counts**3 - counts).sum(axis=1).reshape(sorted_pooled.shape[:-1])
