"""Calibration of the verdict: false verdicts, power, interval coverage and seed plans.

For n in {2, 3, 5, 10} seeds per agent per env, 1 or 4 envs, and normal, lognormal or capped
scores, simulates ``--reps`` comparisons and prints a markdown table of

(a) the false-verdict rate when both agents have the same score distribution, for the
    recommended rule (:mod:`runner.analysis.decision`: stratified permutation test at alpha
    AND the BCa IQM-difference interval on the same side of 0), for the test alone, and for
    today's rule (percentile intervals of P(X > Y) above 0.5 and of the IQM difference above
    0); every cell of the recommended rule should be <= alpha + 2 Monte Carlo SEs;
(b) power when the candidate is shifted by one standard deviation in every env;
(c) coverage of the 95% IQM interval (one agent, runs pooled over envs; percentile and BCa)
    for the true IQM of the score distribution (the mean of its quantile function between
    0.25 and 0.75, computed numerically from the exact distribution);
(d) seed planning: with 3 normal pilots per agent, plan for a difference of one SD at power
    0.8 (:func:`runner.analysis.power.plan_seeds`), then the real power of the planned seed
    count (simulated from the true law with 20,000 comparisons per seed count).

Envs differ in location and scale (so stratification matters):
normal N(0.5 j, (1 + 0.25 j)^2); lognormal (1 + 0.25 j) exp(N(0, 1)); capped
min(N(0.9 - 0.1 j, 0.2^2), 1) (many runs exactly at 1), for env j = 0, 1, ... The one-SD
shift adds the env's SD (for the capped law: the latent normal's 0.2, added before capping).

    .venv/bin/python benchmarks/verdict_calibration.py --reps 2000 --seed 0
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats as sps

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from seedsweep.runner.analysis import intervals, permutation, power  # noqa: E402
from seedsweep.runner.analysis.decision import verdict_codes  # noqa: E402

SEEDS = (2, 3, 5, 10)
ENVS = (1, 4)
LOGNORMAL_SD = float(np.sqrt((np.e - 1.0) * np.e))  # SD of exp(N(0, 1))
MAX_PLAN = 200  # max_seeds of the plans in (d)
CHUNK = 50  # comparisons per batched call (bounds memory: chunk x resamples x runs)


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--reps", type=int, default=2000, help="comparisons per cell (2000)")
    p.add_argument("--seed", type=int, default=0, help="master seed (0)")
    p.add_argument("--resamples", type=int, default=2000, help="bootstrap resamples (2000)")
    p.add_argument("--alpha", type=float, default=0.05, help="test level (0.05)")
    p.add_argument("--plan-trials", type=int, default=300,
                   help="pilot sets for the plan-seeds check (300)")
    return p.parse_args(argv)


# -- the score laws ---------------------------------------------------------------------------


def draw(dist: str, env: int, shape: tuple[int, ...], shift: float,
         rng: np.random.Generator) -> np.ndarray:
    """Run scores of env ``env``; ``shift`` in units of that env's SD."""
    if dist == "normal":
        return 0.5 * env + (1.0 + 0.25 * env) * (rng.standard_normal(shape) + shift)
    if dist == "lognormal":
        return (1.0 + 0.25 * env) * (np.exp(rng.standard_normal(shape)) + shift * LOGNORMAL_SD)
    if dist == "capped":
        return np.minimum(0.9 - 0.1 * env + 0.2 * (rng.standard_normal(shape) + shift), 1.0)
    raise ValueError(dist)


def cdf(dist: str, env: int, x: np.ndarray) -> np.ndarray:
    if dist == "normal":
        return sps.norm.cdf(x, 0.5 * env, 1.0 + 0.25 * env)
    if dist == "lognormal":
        return sps.lognorm.cdf(x / (1.0 + 0.25 * env), 1.0)
    return np.where(x >= 1.0, 1.0, sps.norm.cdf(x, 0.9 - 0.1 * env, 0.2))


def true_iqm(dist: str, envs: int) -> float:
    """IQM of the equal-weight mixture of the envs' laws: 2 * integral of its quantile
    function over [0.25, 0.75] (midpoint rule on 20,000 points, quantiles by bisection)."""
    u = 0.25 + 0.5 * (np.arange(20_000) + 0.5) / 20_000
    lo, hi = np.full(u.size, -50.0), np.full(u.size, 50.0)
    for _ in range(200):
        mid = (lo + hi) / 2
        below = np.mean([cdf(dist, j, mid) for j in range(envs)], axis=0) < u
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return float(hi.mean())


def sample_iqm(dist: str, envs: int, rng: np.random.Generator, size: int = 2_000_000) -> float:
    """The same from one huge sample (a cross-check of :func:`true_iqm`)."""
    pooled = np.concatenate([draw(dist, j, (size,), 0.0, rng) for j in range(envs)])
    return float(sps.trim_mean(pooled, 0.25))


# -- one cell ---------------------------------------------------------------------------------


def today_codes(x: list, y: list, resamples: int, rng: np.random.Generator) -> np.ndarray:
    """Today's rule: 95% percentile intervals of P(X > Y) (low > 0.5) and of the IQM
    difference (low > 0) for better; mirrored for worse."""
    envs = len(x)
    _, p_low, p_high = intervals.bootstrap_bounds(
        [*x, *y], intervals.improvement_statistic(envs), resamples, 0.95, rng, "percentile")
    _, d_low, d_high = intervals.difference_bounds(x, y, resamples, 0.95, rng, "percentile")
    better = (p_low > 0.5) & (d_low > 0)
    worse = (p_high < 0.5) & (d_high < 0)
    return better.astype(int) - worse.astype(int)


def rule_codes(x: list, y: list, alpha: float, resamples: int,
               rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """(recommended rule's codes, the test alone's rejections) for a batch of comparisons."""
    p = permutation.permutation_p_values(x, y, rng=rng)
    stat = permutation.stratified_statistic(x, y)
    _, d_low, d_high = intervals.difference_bounds(x, y, resamples, 1.0 - alpha, rng, "bca")
    return verdict_codes(p, stat, d_low, d_high, alpha), p <= alpha


def run_cell(dist: str, envs: int, n: int, args: argparse.Namespace,
             truth: float) -> dict[str, float]:
    rng = np.random.default_rng([args.seed, SEEDS.index(n), envs, hash_dist(dist)])
    sums: dict[str, float] = {}

    def add(key: str, value: np.ndarray) -> None:
        sums[key] = sums.get(key, 0.0) + float(np.sum(value))

    done = 0
    while done < args.reps:
        size = min(CHUNK, args.reps - done)
        y = [draw(dist, j, (size, n), 0.0, rng) for j in range(envs)]
        x_null = [draw(dist, j, (size, n), 0.0, rng) for j in range(envs)]
        x_alt = [draw(dist, j, (size, n), 1.0, rng) for j in range(envs)]
        codes, rejected = rule_codes(x_null, y, args.alpha, args.resamples, rng)
        add("false_rule", codes != 0)
        add("false_test", rejected)
        add("false_today", today_codes(x_null, y, args.resamples, rng) != 0)
        codes, rejected = rule_codes(x_alt, y, args.alpha, args.resamples, rng)
        add("power_rule", codes == 1)
        add("power_test", rejected)
        add("power_today", today_codes(x_alt, y, args.resamples, rng) == 1)
        for method in ("percentile", "bca"):
            _, low, high = intervals.bootstrap_bounds(y, intervals.pooled_iqm, args.resamples,
                                                      0.95, rng, method)
            add(f"cover_{method}", (low <= truth) & (truth <= high))
        done += size
    return {k: v / args.reps for k, v in sums.items()}


def hash_dist(dist: str) -> int:
    return ("normal", "lognormal", "capped").index(dist)


# -- plan-seeds check -------------------------------------------------------------------------


def plan_check(args: argparse.Namespace) -> dict:
    """3 normal pilots per agent, plan for D = 1 SD at power 0.8, real power of the plan."""
    rng = np.random.default_rng([args.seed, 99])
    real: dict[int, float] = {}

    def real_power(n: int | None) -> float:
        if n is None:
            n = MAX_PLAN  # beyond max_seeds: counted as running MAX_PLAN seeds
        if n not in real:
            real[n] = power.permutation_power(1.0, n, args.alpha,
                                              np.random.default_rng([args.seed, 7, n]),
                                              reps=20_000)
        return real[n]

    kinds = ("expected", "at_pilot_sd", "if_sd_high")
    plans: dict[str, list[int | None]] = {k: [] for k in kinds}
    for _ in range(args.plan_trials):
        x, y = rng.normal(0.0, 1.0, 3), rng.normal(0.0, 1.0, 3)
        plan = power.plan_seeds([x], [y], 1.0, 0.8, args.alpha, rng, reps=1000,
                                max_seeds=MAX_PLAN)
        for k in kinds:
            plans[k].append(getattr(plan, k).seeds)
    needed = power.plan_seeds([rng.normal(0, 1, 20_000)], [rng.normal(0, 1, 20_000)], 1.0,
                              0.8, args.alpha, rng, reps=20_000, model="normal").seeds
    out: dict[str, float] = {"needed": needed,
                             "t_test_needed": power.t_test_seeds(1.0, 0.8, args.alpha)}
    for k in kinds:
        counts = np.array([p if p is not None else MAX_PLAN + 1 for p in plans[k]])
        real_p = np.array([real_power(p) for p in plans[k]])
        out[k] = {"median": float(np.median(counts)), "q10": float(np.quantile(counts, 0.1)),
                  "q90": float(np.quantile(counts, 0.9)), "beyond": int(np.sum(counts > MAX_PLAN)),
                  "mean_power": float(real_p.mean()), "reaching": float(np.mean(real_p >= 0.8)),
                  "power_se": float(real_p.std(ddof=1) / np.sqrt(real_p.size))}
    return out


# -- output -----------------------------------------------------------------------------------


def fmt(v: float) -> str:
    return f"{v:.3f}"


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    t0 = time.perf_counter()
    alpha = args.alpha
    se = float(np.sqrt(alpha * (1 - alpha) / args.reps))
    bound = alpha + 2 * se
    truths = {(d, e): true_iqm(d, e) for d in ("normal", "lognormal", "capped") for e in ENVS}
    check_rng = np.random.default_rng([args.seed, 5])
    print(f"# Verdict calibration: {args.reps} comparisons per cell, {args.resamples} bootstrap "
          f"resamples, alpha {alpha}, seed {args.seed}\n")
    print("True IQM (quantile integral; huge-sample cross-check, 2e6 runs per env):")
    for (d, e), v in truths.items():
        print(f"- {d}, {e} env(s): {v:.4f} (sample {sample_iqm(d, e, check_rng):.4f})")
    print(f"\nBound for false verdicts: alpha + 2 MC SE = {alpha} + 2 x {se:.4f} = {bound:.4f}."
          " Rule = permutation test p <= alpha AND BCa IQM-difference interval (level "
          "1 - alpha) on the same side of 0. Today = P(X>Y) and IQM-difference 95% "
          "percentile intervals both excluding the null value.\n")
    header = ("| scores | envs | seeds | smallest p | false: rule | false: test | "
              "false: today | power 1 SD: rule | power: test | power: today | "
              "IQM cover: pct | IQM cover: BCa |")
    print(header)
    print("|" + "---|" * 12)
    worst = 0.0
    for dist in ("normal", "lognormal", "capped"):
        for envs in ENVS:
            for n in SEEDS:
                r = run_cell(dist, envs, n, args, truths[(dist, envs)])
                worst = max(worst, r["false_rule"])
                flag = "" if r["false_rule"] <= bound else " (!)"
                smallest = permutation.smallest_p_value([n] * envs, [n] * envs)
                print(f"| {dist} | {envs} | {n} | {smallest:.3g} | {fmt(r['false_rule'])}{flag}"
                      f" | {fmt(r['false_test'])} | {fmt(r['false_today'])} | "
                      f"{fmt(r['power_rule'])} | {fmt(r['power_test'])} | "
                      f"{fmt(r['power_today'])} | {fmt(r['cover_percentile'])} | "
                      f"{fmt(r['cover_bca'])} |", flush=True)
    verdict = "all cells within" if worst <= bound else "SOME CELLS ABOVE"
    print(f"\nLargest false-verdict rate of the rule: {worst:.4f} ({verdict} {bound:.4f}).")
    print("Smallest p: the smallest two-sided p-value the design can give; where it exceeds "
          "alpha the test (and so the rule) can never reject, and power is 0.\n")
    plan = plan_check(args)
    print(f"## Seed planning from 3 normal pilots per agent ({args.plan_trials} pilot sets, "
          "1 env), D = 1 SD, target power 0.8\n")
    print(f"Seeds actually needed (true SD, permutation test): {plan['needed']}; Student "
          f"t-test by the noncentral t: {plan['t_test_needed']}.\n")
    print("| plan | median seeds | 10%-90% | plans > max | mean real power (MC SE) | "
          "share reaching 0.8 |")
    print("|---|---|---|---|---|---|")
    names = {"expected": "expected power over the SD (the plan)",
             "at_pilot_sd": "at the pilot SD (ddof=1)",
             "if_sd_high": "SD at its upper 80% bound"}
    for k, label in names.items():
        r = plan[k]
        print(f"| {label} | {r['median']:.0f} | {r['q10']:.0f}-{r['q90']:.0f} | {r['beyond']} | "
              f"{r['mean_power']:.3f} ({r['power_se']:.3f}) | {r['reaching']:.2f} |")
    print(f"\nRun time: {time.perf_counter() - t0:.1f} s (one process)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
