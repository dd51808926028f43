"""The verdict's inference: stratified permutation test, Holm's adjustment, BCa intervals and
seed planning, each checked against something outside the project (scipy, brute-force
enumeration of the definition, a published worked example, the noncentral t distribution)."""

import itertools
import math

import numpy as np
import pytest
from scipy import stats as sps
from seedsweep.runner.analysis import decision, intervals, multiple, permutation, power


def _scipy_exact_p(x, y):
    """scipy.stats.permutation_test, independent samples, all C(n+m, n) arrangements, with
    the statistic |U/(nm) - 1/2| and alternative 'greater': P(|T - 1/2| >= |t - 1/2|)."""
    def statistic(a, b, axis):
        u = sps.mannwhitneyu(a, b, axis=axis).statistic / (a.shape[axis] * b.shape[axis])
        return np.abs(u - 0.5)

    return sps.permutation_test((x, y), statistic, permutation_type="independent",
                                alternative="greater", n_resamples=np.inf,
                                vectorized=True).pvalue


def _brute_force_p(xs, ys):
    """Every within-env relabelling listed explicitly; T = mean over envs of U/(nm)."""
    per_env = []
    observed = 0.0
    for x, y in zip(xs, ys, strict=True):
        pooled = np.concatenate([x, y])
        n = x.size
        values = []
        for pick in itertools.combinations(range(pooled.size), n):
            rest = np.delete(pooled, pick)
            a = pooled[list(pick)]
            values.append(((a[:, None] > rest) + 0.5 * (a[:, None] == rest)).mean())
        per_env.append(values)
        observed += ((x[:, None] > y) + 0.5 * (x[:, None] == y)).mean()
    observed /= len(xs)
    totals = np.array([np.mean(c) for c in itertools.product(*per_env)])
    return float(np.mean(np.abs(totals - 0.5) >= abs(observed - 0.5) - 1e-12))


# -- permutation test -------------------------------------------------------------------------


@pytest.mark.parametrize("n, m, rounding", [(5, 6, None), (4, 7, 0), (8, 8, 1), (3, 2, None)])
def test_one_env_p_value_equals_scipy_permutation_test(n, m, rounding):
    rng = np.random.default_rng(n * 10 + m)
    x, y = rng.normal(0.6, 1, n), rng.normal(0, 1, m)
    if rounding is not None:  # ties, as capped or integer scores give
        x, y = np.round(x, rounding), np.round(y, rounding)
    res = permutation.stratified_permutation_test([x], [y])
    # reference: scipy.stats.permutation_test (exact, independent samples, same statistic)
    assert res.p_value == pytest.approx(_scipy_exact_p(x, y), rel=1e-9)
    assert res.method == "exact"
    # reference: scipy.stats.mannwhitneyu U / (n m)
    assert res.statistic == pytest.approx(sps.mannwhitneyu(x, y).statistic / (n * m))


def test_capped_scores_equal_scipy_permutation_test():
    x = np.array([500.0, 500, 500, 431, 500])
    y = np.array([500.0, 212, 388, 500, 455, 301])
    # reference: scipy.stats.permutation_test as above (ties at the cap)
    got = permutation.stratified_permutation_test([x], [y]).p_value
    assert got == pytest.approx(_scipy_exact_p(x, y), rel=1e-9)


def test_several_envs_equal_brute_force_enumeration():
    rng = np.random.default_rng(3)
    # unequal designs (lattice of lcm 6) and ties in the second env
    xs = [rng.normal(0.5, 1, 3), np.array([1.0, 2.0, 2.0]), rng.normal(0, 1, 2)]
    ys = [rng.normal(0, 1, 2), np.array([2.0, 0.0, 1.0]), rng.normal(0, 1, 3)]
    # reference: explicit enumeration of all 10 * 20 * 10 relabellings (the definition)
    expected = _brute_force_p(xs, ys)
    assert permutation.stratified_permutation_test(xs, ys).p_value == pytest.approx(
        expected, rel=1e-9)
    batched = permutation.permutation_p_values([np.stack([a, a[::-1]]) for a in xs],
                                               [np.stack([b, b]) for b in ys])
    assert batched[0] == pytest.approx(expected, rel=1e-9)
    assert batched[1] == pytest.approx(
        _brute_force_p([a[::-1] for a in xs], ys), rel=1e-9)


def test_random_relabellings_match_exact_and_never_give_zero(monkeypatch):
    rng = np.random.default_rng(4)
    xs = [rng.normal(0.4, 1, 6) for _ in range(3)]
    ys = [rng.normal(0, 1, 6) for _ in range(3)]
    exact = permutation.stratified_permutation_test(xs, ys).p_value
    monkeypatch.setattr(permutation, "MAX_LATTICE", 1)  # force the random path
    res = permutation.stratified_permutation_test(xs, ys, rng=np.random.default_rng(5),
                                                  permutations=20_000)
    assert res.method == "monte carlo" and res.permutations == 20_000
    # binomial Monte Carlo error, 4 standard errors (common practice, no source)
    assert abs(res.p_value - exact) < 4 * math.sqrt(exact * (1 - exact) / 20_000)
    apart = [np.arange(6.0) + 100, np.arange(6.0) + 100, np.arange(6.0) + 100]
    low = permutation.stratified_permutation_test(apart, ys, rng=np.random.default_rng(6),
                                                  permutations=999)
    # Phipson and Smyth 2010: (1 + hits) / (1 + B), never 0; here no relabelling is as extreme
    assert low.p_value == pytest.approx(1 / 1000)


def test_two_vs_two_can_never_be_decisive():
    x, y = np.array([201.0, 205.0]), np.array([198.0, 200.0])
    res = permutation.stratified_permutation_test([x], [y])
    # complete separation with C(4, 2) = 6 arrangements: p = 2/6 (math.comb, the definition)
    assert res.statistic == 1.0
    assert res.p_value == pytest.approx(2 / math.comb(4, 2)) == res.smallest_p
    assert res.p_value > 0.05
    # smallest decisive design on one env: 2 / C(8, 4) = 0.0286 <= 0.05 < 2 / C(6, 3) = 0.1
    assert permutation.seeds_to_reach(0.05, envs=1) == 4
    # two envs: 2 / C(6, 3)^2 = 0.005 <= 0.05 < 2 / C(4, 2)^2 = 0.056
    assert permutation.seeds_to_reach(0.05, envs=2) == 3
    v = decision.decide([x], [y], np.random.default_rng(0), resamples=500)
    assert v.verdict == "insufficient evidence" and v.decisive_seeds == 4
    assert "can never give p <= 0.05" in v.reason


def test_clear_ten_vs_ten_separation_rejects():
    rng = np.random.default_rng(7)
    x, y = 300 + rng.random(10), 200 + rng.random(10)
    res = permutation.stratified_permutation_test([x], [y])
    # complete separation: p = 2 / C(20, 10) (definition; scipy.stats.mannwhitneyu exact
    # two-sided p for U = 100 is the same number)
    assert res.p_value == pytest.approx(2 / math.comb(20, 10))
    assert res.p_value == pytest.approx(sps.mannwhitneyu(x, y, method="exact").pvalue)
    better = decision.decide([x], [y], np.random.default_rng(1), resamples=1000)
    worse = decision.decide([y], [x], np.random.default_rng(1), resamples=1000)
    assert better.verdict == "better" and worse.verdict == "worse"
    assert better.iqm_difference.low > 0 > worse.iqm_difference.high


def test_normal_approximation_equals_scipy_and_matches_exact_decisions():
    rng = np.random.default_rng(8)
    x, y = np.round(rng.normal(0.3, 1, 14), 1), np.round(rng.normal(0, 1, 11), 1)
    # reference: scipy.stats.mannwhitneyu asymptotic p (tie-corrected, continuity 1/2)
    ref = sps.mannwhitneyu(x, y, method="asymptotic", use_continuity=True).pvalue
    assert permutation.normal_p_values([x], [y]) == pytest.approx(ref, rel=1e-9)
    # where power.py uses it (tied scores beyond 20 seeds), its decisions match the exact
    # test's; agreement bound 97% measured on capped scores (common practice, no source)
    for envs in (1, 4):
        xs = [np.minimum(0.9 + 0.2 * rng.normal(0.5, 1, (400, 21)), 1.0) for _ in range(envs)]
        ys = [np.minimum(0.9 + 0.2 * rng.normal(0.0, 1, (400, 21)), 1.0) for _ in range(envs)]
        exact = permutation.permutation_p_values(xs, ys) <= 0.05
        approx = permutation.normal_p_values(xs, ys) <= 0.05
        assert np.mean(exact == approx) >= 0.97, envs
    # and without ties beyond 60 seeds (bound 99%, common practice, no source)
    xs, ys = [rng.normal(0.3, 1, (400, 61))], [rng.normal(0.0, 1, (400, 61))]
    exact = permutation.permutation_p_values(xs, ys) <= 0.05
    assert np.mean(exact == (permutation.normal_p_values(xs, ys) <= 0.05)) >= 0.99


# -- Holm -------------------------------------------------------------------------------------


def _holm_by_definition(p, alpha):
    """Holm 1979's sequential rule written out: test the smallest remaining p-value against
    alpha / (number remaining); stop at the first that fails."""
    order = sorted(range(len(p)), key=lambda i: p[i])
    rejected = [False] * len(p)
    for step, i in enumerate(order):
        if p[i] <= alpha / (len(p) - step):
            rejected[i] = True
        else:
            break
    return rejected


def test_holm_worked_example():
    # worked example of four hypotheses, p = 0.01, 0.04, 0.03, 0.005 at alpha 0.05 (the
    # Holm-Bonferroni article of the English Wikipedia; from memory): H1 and H4 rejected,
    # H2 and H3 not (0.03 > 0.05 / 2 stops the procedure)
    p = [0.01, 0.04, 0.03, 0.005]
    res = multiple.holm(p, 0.05)
    assert res.rejected.tolist() == [True, False, False, True]
    # adjusted p-values by Wright 1992's formula, worked by hand:
    # sorted 0.005*4 = 0.02, 0.01*3 = 0.03, max(0.03*2, 0.03) = 0.06, max(0.04*1, 0.06) = 0.06
    np.testing.assert_allclose(res.adjusted, [0.03, 0.06, 0.06, 0.02])
    assert res.rejected.tolist() == _holm_by_definition(p, 0.05)


def test_holm_matches_its_definition_on_random_families():
    rng = np.random.default_rng(9)
    for _ in range(200):
        p = rng.beta(0.5, 3.0, size=rng.integers(1, 8)).tolist()
        adjusted = multiple.holm_adjust(p)
        for alpha in (0.01, 0.05, 0.1, 0.2):
            assert multiple.holm(p, alpha).rejected.tolist() == _holm_by_definition(p, alpha)
        # the adjusted p-value is the smallest alpha at which the hypothesis is rejected
        for i, a in enumerate(adjusted):
            if a < 1:
                assert _holm_by_definition(p, a * (1 + 1e-12))[i]
                assert not _holm_by_definition(p, a * (1 - 1e-9))[i]


def test_decide_against_baselines_uses_holm():
    rng = np.random.default_rng(10)
    x = [300 + rng.random(6), 50 + rng.random(6)]
    far = [200 + rng.random(6), rng.random(6)]
    near = [np.concatenate([299 + rng.random(5), [400.0]]), 49.5 + rng.random(6)]
    out = decision.decide_against_baselines(x, {"far": far, "near": near},
                                            np.random.default_rng(11), resamples=500)
    raw = [out[b].test.p_value for b in ("far", "near")]
    np.testing.assert_allclose([out["far"].p_adjusted, out["near"].p_adjusted],
                               multiple.holm_adjust(raw))
    assert out["far"].verdict == "better"


# -- BCa --------------------------------------------------------------------------------------


def _trim(a, axis):
    return sps.trim_mean(a, 0.25, axis=axis)


@pytest.mark.parametrize("method, scipy_method", [("bca", "BCa"), ("percentile", "percentile")])
def test_one_stratum_interval_agrees_with_scipy_bootstrap(method, scipy_method):
    x = np.random.default_rng(12).lognormal(0, 1, 15)
    ours = intervals.iqm_interval([x], 10_000, 0.95, np.random.default_rng(13), method)
    ref = sps.bootstrap((x,), _trim, n_resamples=10_000, method=scipy_method,
                        confidence_level=0.95, rng=np.random.default_rng(14))
    width = ref.confidence_interval.high - ref.confidence_interval.low
    # reference: scipy.stats.bootstrap; tolerance: two independent 10,000-resample runs agree
    # within 5% of the width (common practice, no source)
    assert ours.low == pytest.approx(ref.confidence_interval.low, abs=0.05 * width)
    assert ours.high == pytest.approx(ref.confidence_interval.high, abs=0.05 * width)
    assert ours.point == pytest.approx(_trim(x, 0)) and not ours.zero_width


def test_two_sample_bca_difference_agrees_with_scipy():
    rng = np.random.default_rng(15)
    x, y = rng.gamma(2.0, size=12), rng.gamma(1.5, size=9)
    ours = intervals.iqm_difference_interval([x], [y], 10_000, 0.95, np.random.default_rng(16))

    def diff(a, b, axis):
        return _trim(a, axis) - _trim(b, axis)

    # reference: scipy.stats.bootstrap BCa with two samples (each resampled on its own, the
    # jackknife acceleration pooled over samples: the stratified BCa with two strata)
    ref = sps.bootstrap((x, y), diff, n_resamples=10_000, method="BCa",
                        rng=np.random.default_rng(17)).confidence_interval
    width = ref.high - ref.low
    assert ours.low == pytest.approx(ref.low, abs=0.05 * width)  # tolerance as above
    assert ours.high == pytest.approx(ref.high, abs=0.05 * width)


def test_no_spread_is_flagged_not_certain():
    strata = [np.full(5, 500.0), np.full(4, 500.0)]
    iv = intervals.iqm_interval(strata, 500, 0.95, np.random.default_rng(0))
    assert (iv.point, iv.low, iv.high, iv.zero_width) == (500.0, 500.0, 500.0, True)
    same = decision.decide(strata, [np.full(5, 500.0), np.full(4, 500.0)],
                           np.random.default_rng(0), resamples=200)
    # every relabelling of identical scores gives T = 1/2, so p = 1 (the definition)
    assert same.test.p_value == 1.0 and same.verdict == "insufficient evidence"
    assert same.iqm_difference.zero_width and "no spread" in same.reason
    spread = intervals.iqm_interval([np.array([499.0, 500, 500, 500])], 500, 0.95,
                                    np.random.default_rng(0))
    assert not spread.zero_width and spread.low < spread.high


# -- seed planning ----------------------------------------------------------------------------


@pytest.mark.parametrize("effect", [1.0, 1.5])
def test_plan_from_large_pilots_agrees_with_noncentral_t(effect):
    rng = np.random.default_rng(18)
    x, y = rng.normal(0.0, 2.0, 20_000), rng.normal(5.0, 2.0, 20_000)
    plan = power.plan_seeds([x], [y], 2.0 * effect, 0.8, 0.05, np.random.default_rng(19),
                            reps=20_000, max_seeds=40, model="normal")
    # reference: Student's two-sample t-test power by the noncentral t (scipy.stats.nct);
    # the rank test needs slightly more runs (ARE 3/pi for normal scores, Hodges and
    # Lehmann 1956), within one seed here
    t_seeds = power.t_test_seeds(effect, 0.8, 0.05)
    if effect == 1.0:  # Cohen 1988, Statistical Power Analysis, table 2.4.1: n = 17 for
        assert t_seeds == 17  # d = 1, power 0.8, two-sided 0.05 (from memory)
    assert abs(plan.seeds - t_seeds) <= 1, (plan.seeds, t_seeds)
    assert plan.at_pilot_sd.seeds == plan.seeds  # 40,000 pilots: no SD uncertainty to speak of


def test_t_test_power_equals_noncentral_t_definition():
    # reference: scipy.stats.nct two-sided power with df 2n - 2, noncentrality d sqrt(n/2)
    n, d = 12, 0.9
    df, ncp, crit = 22, d * math.sqrt(6), sps.t.ppf(0.975, 22)
    expected = sps.nct.sf(crit, df, ncp) + sps.nct.cdf(-crit, df, ncp)
    assert power.t_test_power(d, n, 0.05) == pytest.approx(expected)


def test_pooled_sd_and_its_upper_bound():
    rng = np.random.default_rng(20)
    x, y = rng.normal(0, 1, 3), rng.normal(4, 1, 4)
    sd, df = power.pooled_sd(x, y)
    # reference: numpy variances with ddof=1, pooled by degrees of freedom
    assert df == 5
    assert sd == pytest.approx(math.sqrt((2 * x.var(ddof=1) + 3 * y.var(ddof=1)) / 5))
    # the 80% upper bound covers the true SD 80% of the time for normal samples (chi-square
    # law of the sample variance); Monte Carlo check, 4 standard errors (common practice)
    draws = rng.normal(0, 1, (20_000, 3, 2))
    s = np.sqrt(draws.var(axis=1, ddof=1).sum(axis=1) / 2)  # pooled, df = 4
    covered = np.mean(s * power.sd_upper_bound(1.0, 4, 0.8) >= 1.0)
    assert covered == pytest.approx(0.8, abs=4 * math.sqrt(0.16 / 20_000))


def test_plan_needs_a_stated_difference_and_is_deterministic():
    x, y = np.array([1.0, 2.0, 4.0]), np.array([0.5, 1.5, 2.0])
    for bad in (0.0, float("nan")):
        with pytest.raises(ValueError, match="difference"):
            power.plan_seeds([x], [y], bad)
    a = power.plan_seeds([x], [y], 2.0, rng=np.random.default_rng(3), reps=500, max_seeds=60)
    b = power.plan_seeds([x], [y], 2.0, rng=np.random.default_rng(3), reps=500, max_seeds=60)
    assert a == b and a.model == "normal"
    # ordering of the three plans (a larger SD needs more seeds)
    assert a.at_pilot_sd.seeds <= a.if_sd_high.seeds
    # below the smallest decisive design (4 seeds on one env) the test never rejects
    assert min(a.at_pilot_sd.curve) >= 4
