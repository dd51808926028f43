"""Seed planning: the bootstrap power of Welch's t-test against its analytic approximation,
the seed search, and `seedsweep plan-seeds` end to end and on bad input.

Reference: the power of Welch's two-sample t-test approximated by the noncentral t
distribution (scipy.stats.nct) with the Welch-Satterthwaite degrees of freedom and
noncentrality D / sqrt(sx^2/n + sy^2/n) (standard textbook approximation, from memory)."""

import json

import numpy as np
import pytest
from scipy import stats as sps
from seedsweep.runner.analysis.power import (
    bootstrap_power,
    seeds_needed,
    shift_to_difference,
    unbiased_spread,
)
from seedsweep.runner.commands.plan_seeds import main as plan_seeds_main

from tests.test_compare import make_sweep, snapshot, write_run


def analytic_power(sx: float, sy: float, n: int, d: float, alpha: float,
                   two_sided: bool = True) -> float:
    vx, vy = sx**2 / n, sy**2 / n
    df = (vx + vy) ** 2 / (vx**2 / (n - 1) + vy**2 / (n - 1))  # Welch-Satterthwaite
    ncp = abs(d) / np.sqrt(vx + vy)
    if two_sided:
        crit = sps.t.ppf(1 - alpha / 2, df)
        return float(sps.nct.sf(crit, df, ncp) + sps.nct.cdf(-crit, df, ncp))
    return float(sps.nct.sf(sps.t.ppf(1 - alpha, df), df, ncp))


@pytest.fixture(scope="module")
def normal_pilots():
    """Large normal pilot samples, so their empirical distributions are nearly normal."""
    rng = np.random.default_rng(1)
    x, y = rng.normal(0.0, 1.0, 4000), rng.normal(0.0, 2.0, 4000)
    # ddof=1: the resampled pilots are rescaled to the unbiased variance (power.unbiased_spread)
    return x, y, float(x.std(ddof=1)), float(y.std(ddof=1))


@pytest.mark.parametrize("n", [4, 8, 16, 32])
def test_bootstrap_power_matches_the_noncentral_t_power(normal_pilots, n):
    x, y, sx, sy = normal_pilots
    resamples = 20000  # Monte Carlo standard error <= 0.0036
    two = bootstrap_power(x, y, 1.0, n, 0.05, np.random.default_rng(n), resamples=resamples)
    one = bootstrap_power(x, y, 1.0, n, 0.05, np.random.default_rng(n), resamples=resamples,
                          alternative="one-sided")
    # tolerance: Monte Carlo error plus the nct approximation's error at small n,
    # common practice, no source
    assert two == pytest.approx(analytic_power(sx, sy, n, 1.0, 0.05), abs=0.02)
    assert one == pytest.approx(analytic_power(sx, sy, n, 1.0, 0.05, False), abs=0.02)


@pytest.mark.parametrize("difference", [1.5, -1.5])
def test_seeds_needed_is_where_the_analytic_power_crosses_the_target(normal_pilots,
                                                                      difference):
    x, y, sx, sy = normal_pilots
    plan = seeds_needed(x, y, difference, 0.8, 0.05, np.random.default_rng(3),
                        resamples=4000)
    assert plan.seeds is not None and plan.power >= 0.8
    n = plan.seeds
    # the analytic power crosses 0.8 between n - 1 and n, up to Monte Carlo error
    # (tolerance common practice, no source)
    assert analytic_power(sx, sy, n, difference, 0.05) >= 0.8 - 0.03
    assert analytic_power(sx, sy, n - 1, difference, 0.05) <= 0.8 + 0.03
    first = next(k for k in range(2, 200) if analytic_power(sx, sy, k, difference, 0.05) >= 0.8)
    assert abs(n - first) <= 3, (n, first)
    assert plan.curve[n] == plan.power and all(plan.curve[k] < 0.8 for k in plan.curve if k < n)


def test_seed_plan_beyond_max_and_determinism(normal_pilots):
    x, y, sx, sy = normal_pilots
    plan = seeds_needed(x, y, 0.2, 0.8, 0.05, np.random.default_rng(5), max_seeds=20,
                        resamples=1000)
    assert plan.seeds is None and plan.label == "> 20" and max(plan.curve) == 20
    assert analytic_power(sx, sy, 20, 0.2, 0.05) < 0.2  # so "> 20" is right (about 0.07)
    again = seeds_needed(x, y, 0.2, 0.8, 0.05, np.random.default_rng(5), max_seeds=20,
                         resamples=1000)
    assert again == plan


def test_resampled_pilots_have_the_unbiased_variance():
    x = np.array([1.0, 2.0, 6.0])
    spread = unbiased_spread(x)
    # reference: numpy's ddof=1 variance; the resampled law (ddof=0 of the spread values)
    # must have it, and the mean is kept
    assert spread.var() == pytest.approx(x.var(ddof=1)) and spread.mean() == pytest.approx(3.0)


def test_shift_and_refusals():
    x, y = np.array([1.0, 2.0, 6.0]), np.array([10.0, 11.0])
    shifted = shift_to_difference(x, y, 2.5)
    assert shifted.mean() - y.mean() == pytest.approx(2.5)  # numpy means
    assert np.ptp(shifted) == np.ptp(x)  # spread kept
    rng = np.random.default_rng(0)
    for bad in (dict(difference=0.0), dict(power=1.0), dict(alpha=0.0)):
        args = dict(difference=1.0, power=0.8, alpha=0.05) | bad
        with pytest.raises(ValueError):
            seeds_needed(x, y, rng=rng, **args)
    with pytest.raises(ValueError, match="no spread"):
        seeds_needed(np.ones(5), np.zeros(5), 1.0, rng=rng)
    with pytest.raises(ValueError, match="at least 2"):
        seeds_needed(np.ones(1), y, 1.0, rng=rng)
    with pytest.raises(ValueError, match="max_seeds"):
        seeds_needed(x, y, 1.0, rng=rng, max_seeds=1)


# -- the command ---------------------------------------------------------------------------


def pilot_sweep(root, seeds=30):
    """Pilot runs on CartPole: alpha ~ N(300, 20), beta ~ N(280, 40) (invented levels)."""
    sweep = root / "results" / "pilot"
    rng = np.random.default_rng(11)
    for agent, mean, sd in (("alpha", 300.0, 20.0), ("beta", 280.0, 40.0)):
        for seed in range(seeds):
            v = float(np.round(rng.normal(mean, sd), 3))
            write_run(sweep, agent, "cartpole", seed, [v, v])
    return sweep


def test_plan_seeds_end_to_end(tmp_path, capsys):
    sweep = pilot_sweep(tmp_path)
    before = snapshot(sweep)
    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta", "--json"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    doc = json.loads(out)
    assert snapshot(sweep) == before  # plan-seeds writes nothing
    (plan,) = doc["plans"]
    finals = {a: np.array([json.loads(p.read_text())["final_score"]
                           for p in sorted(sweep.glob(f"{a}-*/run.json"))])
              for a in ("alpha", "beta")}
    assert plan["pilot_seeds"] == [30, 30]
    assert plan["candidate_mean"] == pytest.approx(finals["alpha"].mean())  # numpy mean
    d = finals["alpha"].mean() - finals["beta"].mean()
    assert plan["difference"] == pytest.approx(d) and plan["difference_source"] == "observed"
    sx, sy = finals["alpha"].std(ddof=1), finals["beta"].std(ddof=1)  # the resampled spread
    n = plan["seeds_per_agent"]
    assert analytic_power(sx, sy, n, d, 0.05) >= 0.8 - 0.04  # tolerance as above
    assert analytic_power(sx, sy, n - 1, d, 0.05) <= 0.8 + 0.04

    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta", "--json",
                          "--difference", "cartpole=40", "--alternative", "one-sided"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    (plan,) = json.loads(out)["plans"]
    assert plan["difference"] == 40.0 and plan["difference_source"] == "--difference"
    n = plan["seeds_per_agent"]
    assert analytic_power(sx, sy, n, 40.0, 0.05, False) >= 0.8 - 0.04
    assert analytic_power(sx, sy, n - 1, 40.0, 0.05, False) <= 0.8 + 0.04

    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta"])
    out, _ = capsys.readouterr()
    assert rc == 0 and "seeds per agent" in out and "CartPole-v1" in out


def _one_pilot(sweep):
    write_run(sweep, "lonely", "cartpole", 0, [100.0, 100.0])
    for seed in range(3):
        write_run(sweep, "lonely", "acrobot", seed, [-200.0 - seed, -200.0 - seed])


def _constant(sweep):
    for agent in ("flat", "flatter"):
        for env in ("cartpole", "acrobot"):
            for seed in range(3):
                write_run(sweep, agent, env, seed, [50.0 if agent == "flat" else 40.0] * 2)


BAD_PLAN = {
    "unknown candidate": (None, ["--candidate", "nosuch"], "--candidate: unknown agent"),
    "bad power": (None, ["--candidate", "strong", "--power", "1.5"], "--power"),
    "bad alpha": (None, ["--candidate", "strong", "--alpha", "0"], "--alpha"),
    "bad max seeds": (None, ["--candidate", "strong", "--max-seeds", "1"], "--max-seeds"),
    "bad difference": (None, ["--candidate", "strong", "--difference", "abc"], "--difference"),
    "zero difference": (None, ["--candidate", "strong", "--difference", "0"], "--difference"),
    "unknown env in difference": (None, ["--candidate", "strong", "--difference", "nosuch=3"],
                                  "--difference: unknown env 'nosuch'"),
    "equal pilot means": (None, ["--candidate", "strong", "--baseline", "twin"],
                          "no observed difference"),
    "one pilot run": (_one_pilot, ["--candidate", "lonely", "--baseline", "weak"],
                      "at least 2 pilot runs"),
    "no spread": (_constant, ["--candidate", "flat", "--baseline", "flatter"], "spread"),
}


@pytest.mark.parametrize("case", sorted(BAD_PLAN))
def test_plan_seeds_bad_input_exits_2(tmp_path, capsys, case):
    sweep = make_sweep(tmp_path, seeds=3)
    damage, args, needle = BAD_PLAN[case]
    if damage:
        damage(sweep)
    before = snapshot(sweep)
    rc = plan_seeds_main([str(sweep), "--resamples", "200", *args])
    out, err = capsys.readouterr()
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seedsweep: error: "), err
    assert needle in lines[0]
    assert snapshot(sweep) == before and not (sweep / "report").exists()
