"""Aggregate statistics checked against scipy (reference implementations of the same
definitions). Method: Agarwal et al. 2021, "Deep Reinforcement Learning at the Edge of the
Statistical Precipice" (NeurIPS)."""

import time

import numpy as np
import pytest
from scipy import stats as sps
from seedsweep.runner.analysis import stats


def _bootstrap_scipy(samples, statistic, resamples, seed):
    """scipy.stats.bootstrap percentile interval; several samples are resampled
    independently of each other, which is the stratified bootstrap with one stratum each."""
    res = sps.bootstrap(samples, statistic, n_resamples=resamples, method="percentile",
                        confidence_level=0.95, vectorized=True, rng=np.random.default_rng(seed))
    return res.confidence_interval.low, res.confidence_interval.high


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 7, 8, 10, 13, 250])
def test_iqm_equals_scipy_trim_mean(n):
    x = np.random.default_rng(n).normal(size=n) ** 3  # skewed, so trimming matters
    # reference: scipy.stats.trim_mean(x, 0.25) cuts int(0.25 n) values from each end
    assert stats.interquartile_mean(x) == pytest.approx(sps.trim_mean(x, 0.25), rel=1e-12)


def test_iqm_batched_along_axis_equals_scipy():
    x = np.random.default_rng(0).exponential(size=(6, 11))
    # reference: scipy.stats.trim_mean with axis
    np.testing.assert_allclose(stats.interquartile_mean(x, axis=1), sps.trim_mean(x, 0.25, axis=1))
    np.testing.assert_allclose(stats.interquartile_mean(x, axis=0), sps.trim_mean(x, 0.25, axis=0))


def test_point_aggregates_follow_their_definitions():
    rng = np.random.default_rng(1)
    strata = [rng.normal(0.5, 0.3, 8), rng.normal(1.2, 0.2, 8), rng.normal(0.1, 0.5, 8)]
    got = stats.aggregate_points(strata)
    pooled = np.concatenate(strata)
    means = [s.mean() for s in strata]
    # references: scipy.stats.trim_mean on pooled runs (IQM), numpy mean/median of per-env
    # means, optimality gap = mean of max(1 - x, 0) (Agarwal et al. 2021, sec. 4.3)
    assert got["iqm"] == pytest.approx(sps.trim_mean(pooled, 0.25))
    assert got["mean"] == pytest.approx(np.mean(means))
    assert got["median"] == pytest.approx(np.median(means))
    assert got["optimality_gap"] == pytest.approx(np.mean(np.maximum(1.0 - pooled, 0.0)))


def test_optimality_gap_is_zero_when_every_run_reaches_one():
    # Agarwal et al. 2021, sec. 4.3: scores above the target (1) do not reduce the gap below 0
    assert stats.aggregate_points([np.array([1.0, 1.5, 3.0])])["optimality_gap"] == 0.0


@pytest.mark.parametrize("statistic", ["iqm", "mean"])
def test_one_task_percentile_interval_agrees_with_scipy_bootstrap(statistic):
    x = np.random.default_rng(2).gamma(2.0, size=60)
    resamples = 10_000
    ours = stats.bootstrap_interval(x, statistic, resamples, 0.95, np.random.default_rng(3))
    fn = {"iqm": lambda s, axis: sps.trim_mean(s, 0.25, axis=axis),
          "mean": lambda s, axis: np.mean(s, axis=axis)}[statistic]
    low, high = _bootstrap_scipy((x,), fn, resamples, 4)
    width = high - low
    # reference: scipy.stats.bootstrap(method="percentile"); tolerance: the Monte Carlo
    # error of a 2.5% quantile from 10,000 resamples is ~1% of the interval width, so two
    # independent estimates agree within 5% of the width (common practice, no source)
    assert abs(ours.low - low) < 0.05 * width
    assert abs(ours.high - high) < 0.05 * width
    assert ours.point == pytest.approx(fn(x, axis=0))


def test_stratified_interval_agrees_with_scipy_multi_sample_bootstrap():
    rng = np.random.default_rng(5)
    x, y = rng.normal(0.2, 0.3, 40), rng.normal(0.9, 0.1, 25)
    resamples = 10_000
    ours = stats.aggregate_intervals([x, y], resamples, 0.95, np.random.default_rng(6))

    def pooled_iqm(a, b, axis):
        return sps.trim_mean(np.concatenate([a, b], axis=axis), 0.25, axis=axis)

    def mean_of_means(a, b, axis):
        return (np.mean(a, axis=axis) + np.mean(b, axis=axis)) / 2

    # reference: scipy.stats.bootstrap with two samples resamples each independently (the
    # stratified bootstrap with envs as strata), percentile method
    for name, fn in (("iqm", pooled_iqm), ("mean", mean_of_means)):
        low, high = _bootstrap_scipy((x, y), fn, resamples, 7)
        width = high - low
        assert abs(ours[name].low - low) < 0.05 * width, name
        assert abs(ours[name].high - high) < 0.05 * width, name


def test_stratified_resample_draws_each_env_from_its_own_runs():
    strata = [np.arange(5.0), 100 + np.arange(3.0)]
    draws = stats.stratified_resample(strata, 500, np.random.default_rng(0))
    # the stratified bootstrap (Agarwal et al. 2021, sec. 4.1) keeps each env's run count
    # and only draws that env's runs
    assert draws[0].shape == (500, 5) and draws[1].shape == (500, 3)
    assert np.isin(draws[0], strata[0]).all() and np.isin(draws[1], strata[1]).all()


def test_resample_counts_are_multinomial_draws():
    counts = stats.resample_counts(7, 20_000, np.random.default_rng(0))
    assert (counts.sum(axis=1) == 7).all()
    # each count is Binomial(7, 1/7): mean 1, variance 6/7 (resampling with replacement)
    assert counts.mean() == pytest.approx(1.0, abs=0.01)
    assert counts.var() == pytest.approx(6 / 7, abs=0.02)


def test_probability_of_improvement_one_task_equals_mann_whitney():
    rng = np.random.default_rng(8)
    x = rng.integers(0, 6, 23).astype(float)  # integers, so there are ties
    y = rng.integers(0, 6, 17).astype(float)
    # reference: scipy.stats.mannwhitneyu(x, y).statistic is U of x (ties count 1/2)
    expected = sps.mannwhitneyu(x, y).statistic / (x.size * y.size)
    assert stats.probability_of_improvement_point([x], [y]) == pytest.approx(expected)


def test_probability_of_improvement_averages_over_envs():
    rng = np.random.default_rng(9)
    xs = [rng.normal(size=10), rng.normal(1, size=12)]
    ys = [rng.normal(0.5, size=9), rng.normal(size=12)]
    # Agarwal et al. 2021, sec. 4.3: average over tasks of the per-task U / (n m)
    expected = np.mean([sps.mannwhitneyu(x, y).statistic / (x.size * y.size)
                        for x, y in zip(xs, ys, strict=True)])
    assert stats.probability_of_improvement_point(xs, ys) == pytest.approx(expected)


def test_probability_of_improvement_interval_agrees_with_scipy_bootstrap():
    rng = np.random.default_rng(10)
    x, y = rng.normal(0.3, 1, 30), rng.normal(0, 1, 25)
    resamples = 10_000
    ours = stats.probability_of_improvement([x], [y], resamples, 0.95, np.random.default_rng(11))

    def u_over_nm(a, b, axis):
        return sps.mannwhitneyu(a, b, axis=axis).statistic / (a.shape[axis] * b.shape[axis])

    # reference: scipy.stats.bootstrap of the two-sample statistic (X and Y resampled
    # independently), percentile method; Monte Carlo tolerance as above
    low, high = _bootstrap_scipy((x, y), u_over_nm, resamples, 12)
    width = high - low
    assert abs(ours.low - low) < 0.05 * width
    assert abs(ours.high - high) < 0.05 * width


def test_performance_profile_point_is_fraction_above_tau():
    rng = np.random.default_rng(13)
    strata = [rng.normal(size=20), rng.normal(1, size=20)]
    taus = np.linspace(-2, 3, 11)
    point, low, high = stats.performance_profile(strata, taus, 1000, 0.95,
                                                 np.random.default_rng(0))
    # reference: scipy.stats.percentileofscore(kind="weak") is the % of values <= tau
    expected = np.mean([[1 - sps.percentileofscore(s, t, kind="weak") / 100 for t in taus]
                        for s in strata], axis=0)
    np.testing.assert_allclose(point, expected)
    assert np.all(low <= point + 1e-12) and np.all(point <= high + 1e-12)


def test_iqm_curve_point_equals_trim_mean_per_step():
    rng = np.random.default_rng(14)
    a, b = rng.normal(size=(9, 4)), rng.normal(2, size=(6, 4))
    point, low, high = stats.iqm_curve([a, b], 500, 0.95, np.random.default_rng(0))
    # reference: scipy.stats.trim_mean over all runs pooled, at each evaluation point
    np.testing.assert_allclose(point, sps.trim_mean(np.vstack([a, b]), 0.25, axis=0))
    assert np.all(low <= high)


def test_mean_confidence_interval_equals_scipy_t_interval():
    x = np.random.default_rng(15).normal(3, 2, 50)
    iv = stats.mean_confidence_interval(x, 0.95)
    # reference: scipy.stats.t.interval with the standard error of the mean
    low, high = sps.t.interval(0.95, x.size - 1, loc=x.mean(), scale=sps.sem(x))
    assert (iv.low, iv.high) == pytest.approx((low, high))


def test_same_seed_gives_identical_intervals():
    strata = [np.random.default_rng(16).normal(size=30)]
    one = stats.aggregate_intervals(strata, 500, 0.95, np.random.default_rng(42))
    two = stats.aggregate_intervals(strata, 500, 0.95, np.random.default_rng(42))
    assert one == two


def test_ten_thousand_run_scores_aggregate_in_seconds(capsys):
    """4 agents x 10 envs x 250 seeds = 10,000 run scores, 2000 resamples."""
    rng = np.random.default_rng(17)
    agents = {f"agent{i}": [rng.normal(0.2 * i, 0.3, 250) for _ in range(10)] for i in range(4)}
    taus = np.linspace(-1, 2, 101)
    t0 = time.perf_counter()
    for k, strata in enumerate(agents.values()):
        stats.aggregate_intervals(strata, 2000, 0.95, np.random.default_rng(k))
        stats.performance_profile(strata, taus, 2000, 0.95, np.random.default_rng(k))
    names = list(agents)
    for i, x in enumerate(names):
        for y in names[i + 1:]:
            stats.probability_of_improvement(agents[x], agents[y], 2000, 0.95,
                                             np.random.default_rng(i))
    elapsed = time.perf_counter() - t0
    with capsys.disabled():
        print(f"\n10,000 run scores: aggregates, profiles and 6 pairs in {elapsed:.2f} s")
    # bound: the task's requirement ("in seconds"), with room for a loaded 2-core machine
    assert elapsed < 30
